/*
 * radix2_q15_server.c - serves the Q15 radix-2 of radix2_q15.c (1/2 per stage, round half
 * up, saturation) over fftgauge's pipe protocol, version 1 (docs/external-backends.md):
 *
 *     fftgauge check --backend 'exec:examples/c_radix2/build/radix2_q15_server[output_shift=log2n]' \
 *         --dtypes q15 --kinds fft --sizes 2^4..2^12
 *
 * Its hello claims fft in q15 only (precision bit 2); a q15 request carries precision code
 * 0x82 (fixed point, 2 bytes per part) and n interleaved (re, im) int16 pairs per transform.
 * The output shift (log2 n) is declared on the SPEC: the protocol carries data, not scaling.
 * Built with -DMISSING_SATURATION it serves the broken twin (sums wrap around).
 */
#define _POSIX_C_SOURCE 199309L
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

int radix2_q15(size_t n, const int16_t *in, int16_t *out);

#define PROTOCOL_VERSION 1
#define OP_HELLO 1
#define OP_TRANSFORM 2
#define STATUS_OK 0
#define STATUS_UNSUPPORTED 1
#define STATUS_BAD_REQUEST 2
#define STATUS_FAILED 3
#define STATUS_VERSION 4
#define HEADER_BYTES 32
#define PRECISION_Q15 0x82
#define MAX_N 65536u

#ifdef MISSING_SATURATION
#define IDENTITY "radix2_q15_server 1.0 (broken: no saturation)"
#else
#define IDENTITY "radix2_q15_server 1.0"
#endif

typedef struct {
    uint16_t version, op;
    uint8_t kind, precision, norm;
    uint32_t count;
    uint64_t n, payload_bytes;
} request_t;

static uint64_t get_le(const unsigned char *p, int bytes)
{
    uint64_t v = 0;
    for (int i = bytes - 1; i >= 0; i--)
        v = (v << 8) | p[i];
    return v;
}

static void put_le(unsigned char *p, uint64_t v, int bytes)
{
    for (int i = 0; i < bytes; i++, v >>= 8)
        p[i] = (unsigned char)(v & 0xff);
}

static int read_exact(void *buf, size_t bytes)
{
    return fread(buf, 1, bytes, stdin) == bytes;
}

static int read_request(request_t *r)
{
    unsigned char h[HEADER_BYTES];
    if (!read_exact(h, sizeof h) || memcmp(h, "FGRQ", 4) != 0)
        return 0;
    r->version = (uint16_t)get_le(h + 4, 2);
    r->op = (uint16_t)get_le(h + 6, 2);
    r->kind = h[8];
    r->precision = h[9];
    r->norm = h[10];
    r->count = (uint32_t)get_le(h + 12, 4);
    r->n = get_le(h + 16, 8);
    r->payload_bytes = get_le(h + 24, 8);
    return 1;
}

static void respond(int status, int timed, uint64_t elapsed_ns, const void *payload, uint64_t bytes)
{
    unsigned char h[HEADER_BYTES] = {0};
    memcpy(h, "FGRS", 4);
    put_le(h + 4, PROTOCOL_VERSION, 2);
    put_le(h + 6, (uint64_t)status, 2);
    put_le(h + 8, timed ? 1 : 0, 4);
    put_le(h + 16, elapsed_ns, 8);
    put_le(h + 24, bytes, 8);
    fwrite(h, 1, sizeof h, stdout);
    if (bytes)
        fwrite(payload, 1, (size_t)bytes, stdout);
    fflush(stdout);
}

static void respond_error(int status, const char *message)
{
    respond(status, 0, 0, message, strlen(message));
}

static int skip_payload(uint64_t bytes)
{
    for (uint64_t i = 0; i < bytes; i++)
        if (getchar() == EOF)
            return 0;
    return 1;
}

static void hello(void)
{
    unsigned char caps[16 + sizeof IDENTITY - 1] = {0};
    caps[0] = 0x01;  /* kinds: fft */
    caps[1] = 0x04;  /* precisions: q15 */
    caps[2] = 0x01;  /* norms: backward */
    caps[3] = 0x03;  /* flags: powers of two only, reports its own elapsed time */
    put_le(caps + 8, MAX_N, 8);
    memcpy(caps + 16, IDENTITY, sizeof IDENTITY - 1);
    respond(STATUS_OK, 0, 0, caps, sizeof caps);
}

static uint64_t now_ns(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (uint64_t)t.tv_sec * 1000000000u + (uint64_t)t.tv_nsec;
}

/* Runs r->count transforms; returns 0 when the stream is out of step. */
static int transform(const request_t *r)
{
    uint64_t bytes = 2 * r->n * sizeof(int16_t) * r->count;
    if (r->payload_bytes != bytes) {
        respond_error(STATUS_BAD_REQUEST, "payload length does not match n and count");
        return 0;
    }
    int16_t *in = malloc((size_t)bytes + 2), *out = malloc((size_t)bytes + 2);
    if (in == NULL || out == NULL || !read_exact(in, (size_t)bytes)) {
        free(in);
        free(out);
        return 0;
    }
    int rc = 0;
    uint64_t start = now_ns();
    for (uint32_t i = 0; i < r->count && rc == 0; i++)
        rc = radix2_q15((size_t)r->n, in + 2 * r->n * i, out + 2 * r->n * i);
    uint64_t elapsed = now_ns() - start;
    /* int16 sent as the host holds it: this program assumes a little-endian host */
    if (rc == 0)
        respond(STATUS_OK, 1, elapsed, out, bytes);
    else
        respond_error(STATUS_FAILED, "radix2_q15 returned an error code");
    free(in);
    free(out);
    return 1;
}

int main(void)
{
    request_t r;
    while (read_request(&r)) {
        if (r.version != PROTOCOL_VERSION) {
            respond_error(STATUS_VERSION, "this program speaks protocol version 1");
            continue;
        }
        if (r.op == OP_HELLO) {
            hello();
            continue;
        }
        if (r.op != OP_TRANSFORM) {
            respond_error(STATUS_BAD_REQUEST, "unknown op");
            return 1;
        }
        if (r.kind != 0 || r.precision != PRECISION_Q15 || r.norm != 0 || r.count == 0 || r.n == 0 ||
            (r.n & (r.n - 1)) != 0 || r.n > MAX_N) {
            if (!skip_payload(r.payload_bytes))
                return 1;
            respond_error(STATUS_UNSUPPORTED, "only fft in q15 at powers of two up to 65536");
            continue;
        }
        if (!transform(&r))
            return 1;
    }
    return 0;
}
