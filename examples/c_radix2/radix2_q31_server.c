/*
 * radix2_q31_server.c - serves the Q31 radix-2 of radix2_q31.c (1/2 per stage, round half
 * up, saturation) over fftgauge's pipe protocol, version 1 (docs/external-backends.md):
 *
 *     fftgauge check --backend 'exec:examples/c_radix2/build/radix2_q31_server[output_shift=log2n]' \
 *         --dtypes q31 --kinds fft --sizes 2^4..2^12
 *
 * Its hello claims fft in q31 only (precision bit 3); a q31 request carries precision code
 * 0x84 (fixed point, 4 bytes per part) and n interleaved (re, im) int32 pairs per transform.
 * The output shift (log2 n) is declared on the SPEC: the protocol carries data, not scaling.
 * Built with -DMISSING_SATURATION it serves the broken twin (sums wrap around).
 * The protocol's I/O (headers, responses, the hello record) is pipe_io.h's, shared by the servers.
 */
#include "pipe_io.h"

int radix2_q31(size_t n, const int32_t *in, int32_t *out);

#define PROTOCOL_VERSION 1
#define MAX_N 65536u

#ifdef MISSING_SATURATION
#define IDENTITY "radix2_q31_server 1.0 (broken: no saturation)"
#else
#define IDENTITY "radix2_q31_server 1.0"
#endif

static void hello(void)
{
    /* kinds: fft; precisions: q31; flags: powers of two only, reports its own elapsed time */
    send_hello(0x01, 0x08, 0x03, 1, 0, 0, MAX_N, IDENTITY);
}

/* Runs r->count transforms; returns 0 when the stream is out of step. */
static int transform(const request_t *r)
{
    uint64_t bytes = 2 * r->n * sizeof(int32_t) * r->count;
    if (r->payload_bytes != bytes) {
        respond_error(PROTOCOL_VERSION, STATUS_BAD_REQUEST, "payload length does not match n and count");
        return 0;
    }
    int32_t *in = malloc((size_t)bytes + 4), *out = malloc((size_t)bytes + 4);
    if (in == NULL || out == NULL || !read_exact(in, (size_t)bytes)) {
        free(in);
        free(out);
        return 0;
    }
    int rc = 0;
    uint64_t start = now_ns();
    for (uint32_t i = 0; i < r->count && rc == 0; i++)
        rc = radix2_q31((size_t)r->n, in + 2 * r->n * i, out + 2 * r->n * i);
    uint64_t elapsed = now_ns() - start;
    /* int32 sent as the host holds it: this program assumes a little-endian host */
    if (rc == 0)
        respond(PROTOCOL_VERSION, STATUS_OK, 1, elapsed, out, bytes);
    else
        respond_error(PROTOCOL_VERSION, STATUS_FAILED, "radix2_q31 returned an error code");
    free(in);
    free(out);
    return 1;
}

int main(void)
{
    request_t r;
    while (read_request(&r)) {
        if (r.version != PROTOCOL_VERSION) {
            respond_error(PROTOCOL_VERSION, STATUS_VERSION, "this program speaks protocol version 1");
            continue;
        }
        if (r.op == OP_HELLO) {
            hello();
            continue;
        }
        if (r.op != OP_TRANSFORM) {
            respond_error(PROTOCOL_VERSION, STATUS_BAD_REQUEST, "unknown op");
            return 1;
        }
        if (r.kind != 0 || r.precision != PRECISION_Q31 || r.norm != 0 || r.count == 0 || r.n == 0 ||
            (r.n & (r.n - 1)) != 0 || r.n > MAX_N) {
            if (!skip_payload(r.payload_bytes))
                return 1;
            respond_error(PROTOCOL_VERSION, STATUS_UNSUPPORTED, "only fft in q31 at powers of two up to 65536");
            continue;
        }
        if (!transform(&r))
            return 1;
    }
    return 0;
}
