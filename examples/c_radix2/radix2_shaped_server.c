/*
 * radix2_shaped_server.c - serves the radix-2 FFT over fftgauge's pipe protocol, versions 1
 * and 2 (docs/external-backends.md): 1-D requests (op 2, version 1) as radix2_server does,
 * and shaped requests (op 3, version 2): a whole C-order array, its shape and the axes to
 * transform, computed axis by axis by radix2_over_axes (radix2_many.c).
 *
 *     fftgauge time --backend 'exec:examples/c_radix2/build/radix2_shaped_server' --shapes 64x64,1000x64\ along\ -1
 *
 * Its hello says version 2, every kind on arrays, up to 8 axes at once. It times its own
 * transforms (CLOCK_MONOTONIC around the compute only). Anything for a human goes to stderr.
 * The protocol's I/O (headers, responses, the hello record) is pipe_io.h's, shared by the servers.
 */
#include "pipe_io.h"
#include "radix2.h"
#include "radix2_many.h"

#define MAX_N ((uint64_t)1 << 24)
#define MAX_RANK 8
#define IDENTITY "radix2_shaped_server 1.0"

static void hello(void)
{
    /* kinds: fft, ifft, rfft, irfft; precisions: float32, float64; flags: powers of two only,
       reports its own elapsed time; speaks protocol version 2, shaped: every family, up to 8 axes */
    send_hello(0x0f, 0x03, 0x03, 2, 0x0f, MAX_RANK, MAX_N, IDENTITY);
}

static int is_pow2(uint64_t n)
{
    return is_pow2_upto(n, MAX_N);
}

/* Version 1: r->count 1-D transforms of length r->n, one after the other in the payload. */
static int transform_lines(const request_t *r)
{
    uint64_t half = r->n / 2 + 1, in_reals, out_reals;
    switch (r->kind) {
    case 2: in_reals = r->n; out_reals = 2 * half; break;
    case 3: in_reals = 2 * half; out_reals = r->n; break;
    default: in_reals = 2 * r->n; out_reals = 2 * r->n; break;
    }
    size_t size = r->precision;
    if (r->payload_bytes != in_reals * size * r->count) {
        respond_error(1, STATUS_BAD_REQUEST, "payload length does not match kind, precision, n and count");
        return 0;
    }
    unsigned char *in = malloc((size_t)r->payload_bytes + 1), *out = malloc((size_t)(out_reals * size * r->count) + 1);
    if (in == NULL || out == NULL || !read_exact(in, (size_t)r->payload_bytes)) {
        free(in);
        free(out);
        return 0;
    }
    size_t n[1] = {(size_t)r->n};
    int axes[1] = {0}, rc = 0;
    uint64_t start = now_ns();
    for (uint32_t i = 0; i < r->count && rc == 0; i++) {
        const unsigned char *src = in + i * in_reals * size;
        unsigned char *dst = out + i * out_reals * size;
        rc = size == 8 ? radix2_over_axes(r->kind, 1, n, 1, axes, (const double *)src, (double *)dst)
                       : radix2f_over_axes(r->kind, 1, n, 1, axes, (const float *)src, (float *)dst);
    }
    uint64_t elapsed = now_ns() - start;
    if (rc == 0)
        respond(1, STATUS_OK, 1, elapsed, out, out_reals * size * r->count);
    else
        respond_error(1, STATUS_FAILED, "the transform returned an error code");
    free(in);
    free(out);
    return 1;
}

/* Version 2: the shape block (rank lengths, count axes), then the whole C-order array. */
static int transform_shaped(const request_t *r)
{
    uint64_t block[2 * MAX_RANK];
    unsigned char raw[8 * 2 * MAX_RANK];
    int rank = r->rank, naxes = (int)r->count;
    if (rank < 1 || rank > MAX_RANK || naxes < 1 || naxes > rank || r->payload_bytes < 8u * (rank + naxes)) {
        if (!skip_payload(r->payload_bytes))
            return 0;
        respond_error(2, STATUS_UNSUPPORTED, "rank must be 1..8 and the axes 1..rank");
        return 1;
    }
    if (!read_exact(raw, 8u * (rank + naxes)))
        return 0;
    for (int i = 0; i < rank + naxes; i++)
        block[i] = get_le(raw + 8 * i, 8);
    size_t n[MAX_RANK], in_len[MAX_RANK], out_len[MAX_RANK];
    int axes[MAX_RANK], ok = 1;
    for (int m = 0; m < rank; m++)
        n[m] = in_len[m] = out_len[m] = (size_t)block[m];
    for (int i = 0; i < naxes; i++) {
        axes[i] = (int)block[rank + i];
        if (block[rank + i] >= (uint64_t)rank || !is_pow2(n[axes[i]]))
            ok = 0;
        for (int j = 0; j < i; j++)
            ok = ok && axes[j] != axes[i];
    }
    uint64_t data = r->payload_bytes - 8u * (rank + naxes);
    if (!ok) {
        if (!skip_payload(data))
            return 0;
        respond_error(2, STATUS_UNSUPPORTED, "every transformed length must be a power of two up to 2^24, "
                                             "every axis below the rank and listed once");
        return 1;
    }
    int last = axes[naxes - 1];
    if (r->kind == 2)
        out_len[last] = n[last] / 2 + 1;
    if (r->kind == 3)
        in_len[last] = n[last] / 2 + 1;
    uint64_t in_count = 1, out_count = 1, size = r->precision;
    for (int m = 0; m < rank; m++) {
        in_count *= in_len[m];
        out_count *= out_len[m];
    }
    uint64_t in_bytes = in_count * size * (r->kind == 2 ? 1 : 2), out_bytes = out_count * size * (r->kind == 3 ? 1 : 2);
    if (data != in_bytes) {
        respond_error(2, STATUS_BAD_REQUEST, "payload length does not match the shape, kind and precision");
        return 0;
    }
    unsigned char *in = malloc((size_t)in_bytes + 1), *out = malloc((size_t)out_bytes + 1);
    if (in == NULL || out == NULL || !read_exact(in, (size_t)in_bytes)) {
        free(in);
        free(out);
        return 0;
    }
    uint64_t start = now_ns();
    int rc = size == 8 ? radix2_over_axes(r->kind, rank, n, naxes, axes, (const double *)in, (double *)out)
                       : radix2f_over_axes(r->kind, rank, n, naxes, axes, (const float *)in, (float *)out);
    uint64_t elapsed = now_ns() - start;
    if (rc == 0)
        respond(2, STATUS_OK, 1, elapsed, out, out_bytes);
    else
        respond_error(2, STATUS_FAILED, "the transform returned an error code");
    free(in);
    free(out);
    return 1;
}

int main(void)
{
    request_t r;
    while (read_request(&r)) {
        int shaped = r.op == OP_TRANSFORM_SHAPED;
        if (r.version != (shaped ? 2 : 1)) {  /* hello and 1-D requests: version 1 */
            if (!skip_payload(r.payload_bytes))
                return 1;
            respond_error(r.version == 2 ? 2 : 1, STATUS_VERSION,
                          "this program speaks protocol version 1 (1-D requests) and 2 (shaped requests)");
            continue;
        }
        if (r.op == OP_HELLO) {
            hello();
            continue;
        }
        if (r.op != OP_TRANSFORM && !shaped) {
            respond_error(r.version, STATUS_BAD_REQUEST, "unknown op");
            return 1;
        }
        if (r.kind > 3 || (r.precision != 4 && r.precision != 8) || r.norm != 0 ||
            (!shaped && (r.count == 0 || !is_pow2(r.n)))) {
            if (!skip_payload(r.payload_bytes))
                return 1;
            respond_error(r.version, STATUS_UNSUPPORTED, "kind, precision, norm or n not supported");
            continue;
        }
        if (!(shaped ? transform_shaped(&r) : transform_lines(&r)))
            return 1;
    }
    return 0;
}
