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
 * The protocol's I/O (headers, responses, the hello record) is pipe_io.h's, shared by the servers.
 */
#include "pipe_io.h"
#include "radix2.h"

#define PROTOCOL_VERSION 1
#define MAX_N ((uint64_t)1 << 24)

#ifdef MISSING_BITREVERSAL
#define IDENTITY "radix2_server 1.0 (broken: no bit reversal)"
#else
#define IDENTITY "radix2_server 1.0"
#endif

static void hello(void)
{
    /* kinds: fft, ifft, rfft, irfft; precisions: float32, float64;
       flags: powers of two only, reports its own elapsed time */
    send_hello(0x0f, 0x03, 0x03, 1, 0, 0, MAX_N, IDENTITY);
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
        respond_error(PROTOCOL_VERSION, STATUS_BAD_REQUEST,
                      "payload length does not match kind, precision, n and count");
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
        respond_error(PROTOCOL_VERSION, STATUS_FAILED, "planning failed (out of memory?)");
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
        respond(PROTOCOL_VERSION, STATUS_OK, 1, elapsed, out, out_reals * size * r->count);
    else
        respond_error(PROTOCOL_VERSION, STATUS_FAILED, "the transform returned an error code");
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
        if (r.kind > 3 || (r.precision != 4 && r.precision != 8) || r.norm != 0 || r.count == 0) {
            /* the payload is still in the pipe: skip it to stay in step */
            if (!skip_payload(r.payload_bytes))
                return 1;
            respond_error(PROTOCOL_VERSION, STATUS_UNSUPPORTED, "kind, precision or norm not supported");
            continue;
        }
        if (r.n == 0 || (r.n & (r.n - 1)) != 0 || r.n > MAX_N) {
            if (!skip_payload(r.payload_bytes))
                return 1;
            respond_error(PROTOCOL_VERSION, STATUS_UNSUPPORTED, "n must be a power of two up to 2^24");
            continue;
        }
        if (!transform(&r))
            return 1;
    }
    return 0;
}
