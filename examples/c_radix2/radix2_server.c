/*
 * radix2_server.c - serves the radix-2 FFT of radix2.c over fftgauge's pipe protocol,
 * version 1 (docs/external-backends.md): requests on stdin, responses on stdout, both
 * little-endian binary. fftgauge starts it once and sends one request per transform:
 *
 *     fftgauge check --backend 'exec:examples/c_radix2/build/radix2_server' --sizes 2^4..2^12
 *
 * It times its own transforms (CLOCK_MONOTONIC around the execute calls only) and says so
 * in its hello, so fftgauge can report the program's own elapsed time. Anything for a
 * human goes to stderr: stdout carries the protocol and nothing else.
 */
#define _POSIX_C_SOURCE 199309L
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "radix2.h"

#define PROTOCOL_VERSION 1
#define OP_HELLO 1
#define OP_TRANSFORM 2
#define STATUS_OK 0
#define STATUS_UNSUPPORTED 1
#define STATUS_BAD_REQUEST 2
#define STATUS_FAILED 3
#define STATUS_VERSION 4
#define HEADER_BYTES 32
#define MAX_N ((uint64_t)1 << 24)

#ifdef MISSING_BITREVERSAL
#define IDENTITY "radix2_server 1.0 (broken: no bit reversal)"
#else
#define IDENTITY "radix2_server 1.0"
#endif

typedef struct {
    uint16_t version, op;
    uint8_t kind, precision, norm;
    uint32_t count;
    uint64_t n, payload_bytes;
} request_t;

/* Little-endian integers, byte by byte, so the program is right on any host. */
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

/* Reads one request header; returns 0 at end of input or on a malformed header. */
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

static void hello(void)
{
    unsigned char caps[16 + sizeof IDENTITY - 1] = {0};
    caps[0] = 0x0f;  /* kinds: fft, ifft, rfft, irfft */
    caps[1] = 0x03;  /* precisions: float32, float64 */
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

/* Element counts (reals) of one input and one output, per numpy's layouts. */
static void lengths(const request_t *r, uint64_t *in_reals, uint64_t *out_reals)
{
    uint64_t half = r->n / 2 + 1;
    switch (r->kind) {
    case 2: *in_reals = r->n; *out_reals = 2 * half; break;      /* rfft */
    case 3: *in_reals = 2 * half; *out_reals = r->n; break;      /* irfft */
    default: *in_reals = 2 * r->n; *out_reals = 2 * r->n; break; /* fft, ifft */
    }
}

/* Runs r->count transforms of the payload; returns 0 when the stream is out of step. */
static int transform(const request_t *r)
{
    uint64_t in_reals, out_reals;
    lengths(r, &in_reals, &out_reals);
    size_t size = r->precision;
    if (r->payload_bytes != in_reals * size * r->count) {
        respond_error(STATUS_BAD_REQUEST, "payload length does not match kind, precision, n and count");
        return 0;
    }
    unsigned char *in = malloc((size_t)r->payload_bytes + 1);
    unsigned char *out = malloc((size_t)(out_reals * size * r->count) + 1);
    if (in == NULL || out == NULL || !read_exact(in, (size_t)r->payload_bytes)) {
        free(in);
        free(out);
        return 0;
    }
    int complex_kind = r->kind < 2, sign = (r->kind == 1 || r->kind == 3) ? 1 : -1;
    void *plan;
    if (size == 8)
        plan = complex_kind ? radix2_plan(r->n, sign) : radix2_real_plan(r->n, sign);
    else
        plan = complex_kind ? radix2f_plan(r->n, sign) : radix2f_real_plan(r->n, sign);
    if (plan == NULL) {
        respond_error(STATUS_FAILED, "planning failed (out of memory?)");
        free(in);
        free(out);
        return 1;
    }
    int rc = 0;
    uint64_t start = now_ns();  /* only the transforms are timed: not planning, not I/O */
    for (uint32_t i = 0; i < r->count && rc == 0; i++) {
        const unsigned char *src = in + i * in_reals * size;
        unsigned char *dst = out + i * out_reals * size;
        if (size == 8)
            rc = complex_kind ? radix2_execute(plan, (const double *)src, (double *)dst)
                              : radix2_real_execute(plan, (const double *)src, (double *)dst);
        else
            rc = complex_kind ? radix2f_execute(plan, (const float *)src, (float *)dst)
                              : radix2f_real_execute(plan, (const float *)src, (float *)dst);
    }
    uint64_t elapsed = now_ns() - start;
    if (size == 8) {
        if (complex_kind) radix2_destroy(plan); else radix2_real_destroy(plan);
    } else {
        if (complex_kind) radix2f_destroy(plan); else radix2f_real_destroy(plan);
    }
    /* The host's floats are sent as they are: this program assumes a little-endian host. */
    if (rc == 0)
        respond(STATUS_OK, 1, elapsed, out, out_reals * size * r->count);
    else
        respond_error(STATUS_FAILED, "the transform returned an error code");
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
        if (r.kind > 3 || (r.precision != 4 && r.precision != 8) || r.norm != 0 || r.count == 0) {
            /* the payload is still in the pipe: skip it to stay in step */
            for (uint64_t i = 0; i < r.payload_bytes; i++)
                if (getchar() == EOF)
                    return 1;
            respond_error(STATUS_UNSUPPORTED, "kind, precision or norm not supported");
            continue;
        }
        if (r.n == 0 || (r.n & (r.n - 1)) != 0 || r.n > MAX_N) {
            for (uint64_t i = 0; i < r.payload_bytes; i++)
                if (getchar() == EOF)
                    return 1;
            respond_error(STATUS_UNSUPPORTED, "n must be a power of two up to 2^24");
            continue;
        }
        if (!transform(&r))
            return 1;
    }
    return 0;
}
