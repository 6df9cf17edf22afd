/*
 * radix2_q31.c - a Q31 complex FFT: radix-2 decimation in time with 1/2 per stage.
 *
 *   int radix2_q31(size_t n, const int32_t *in, int32_t *out)
 *
 * in and out hold n complex values as interleaved (re, im) int32 pairs; n a power of two up
 * to 65536. Output = DFT / n (output shift log2 n: a 1.31 input gives a
 * (log2 n + 1).(31 - log2 n) output). Every complex product keeps its two real products and
 * their sum in 64 bits (|b| <= 2^31 and |w| <= 2^31 - 1, so the sum stays below 2^63) and is
 * rounded half up from 62 to 31 fraction bits; every sum and difference is halved with
 * rounding half up, then saturated to [-2^31, 2^31 - 1]. Twiddles are round(cos, sin x 2^31),
 * saturated to +-(2^31 - 1). Returns 0, or -1 for a size it does not take.
 *
 * Built with -DMISSING_SATURATION, the halved sums are cut to 32 bits instead (two's-complement
 * wrap-around, what a plain (int32_t) cast does on common compilers): the broken twin.
 */
#define _USE_MATH_DEFINES
#include <math.h>
#include <stddef.h>
#include <stdint.h>
#include <stdlib.h>

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

#define Q31_MAX 2147483647LL
#define Q31_MIN (-2147483647LL - 1)

static int32_t fit32(int64_t v)
{
#ifdef MISSING_SATURATION
    uint32_t low = (uint32_t)((uint64_t)v & 0xFFFFFFFFu);
    return low > (uint32_t)Q31_MAX ? (int32_t)((int64_t)low - ((int64_t)1 << 32)) : (int32_t)low;
#else
    return (int32_t)(v > Q31_MAX ? Q31_MAX : (v < Q31_MIN ? Q31_MIN : v));
#endif
}

/* v / 2^s rounded half up (floor of (v + 2^(s-1)) / 2^s). */
static int64_t round_shift(int64_t v, int s)
{
    int64_t q = v + ((int64_t)1 << (s - 1));
    return q >= 0 ? q >> s : -((-q + ((int64_t)1 << s) - 1) >> s);  /* floor division */
}

static int64_t twiddle_part(double value)
{
    long long r = llround(value * 2147483648.0);
    return r > Q31_MAX ? Q31_MAX : (r < -Q31_MAX ? -Q31_MAX : r);
}

int radix2_q31(size_t n, const int32_t *in, int32_t *out)
{
    size_t bits = 0;
    if (n < 1 || n > 65536 || (n & (n - 1)) != 0)
        return -1;
    while (((size_t)1 << bits) < n)
        bits++;
    for (size_t i = 0; i < n; i++) {          /* bit-reversed copy */
        size_t r = 0, k = i;
        for (size_t b = 0; b < bits; b++) {
            r = (r << 1) | (k & 1);
            k >>= 1;
        }
        out[2 * r] = in[2 * i];
        out[2 * r + 1] = in[2 * i + 1];
    }
    for (size_t m = 2; m <= n; m <<= 1) {
        size_t half = m / 2;
        for (size_t j = 0; j < half; j++) {
            double angle = -2.0 * M_PI * (double)j / (double)m;
            int64_t wr = twiddle_part(cos(angle)), wi = twiddle_part(sin(angle));
            for (size_t k = 0; k < n; k += m) {
                int32_t *a = out + 2 * (k + j), *b = out + 2 * (k + j + half);
                int64_t tr = round_shift((int64_t)b[0] * wr - (int64_t)b[1] * wi, 31);
                int64_t ti = round_shift((int64_t)b[0] * wi + (int64_t)b[1] * wr, 31);
                int64_t ar = a[0], ai = a[1];
                a[0] = fit32(round_shift(ar + tr, 1));
                a[1] = fit32(round_shift(ai + ti, 1));
                b[0] = fit32(round_shift(ar - tr, 1));
                b[1] = fit32(round_shift(ai - ti, 1));
            }
        }
    }
    return 0;
}
