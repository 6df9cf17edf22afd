/*
 * radix2_q15.c - a Q15 complex FFT: radix-2 decimation in time with 1/2 per stage.
 *
 *   int radix2_q15(size_t n, const int16_t *in, int16_t *out)
 *
 * in and out hold n complex values as interleaved (re, im) int16 pairs; n a power of two up
 * to 65536. Output = DFT / n (output shift log2 n: a 1.15 input gives a
 * (log2 n + 1).(15 - log2 n) output). Every product is rounded half up from 30 to 15
 * fraction bits, every sum and difference halved with rounding half up, then saturated to
 * [-32768, 32767]. Twiddles are round(cos, sin x 32768), saturated to +-32767. Returns 0, or
 * -1 for a size it does not take.
 *
 * Built with -DMISSING_SATURATION, the halved sums are cut to 16 bits instead (two's-complement
 * wrap-around, what a plain (int16_t) cast does): the broken twin.
 */
#define _USE_MATH_DEFINES
#include <math.h>
#include <stddef.h>
#include <stdint.h>
#include <stdlib.h>

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

static int16_t fit16(int64_t v)
{
#ifdef MISSING_SATURATION
    return (int16_t)(uint16_t)(v & 0xFFFF);
#else
    return (int16_t)(v > 32767 ? 32767 : (v < -32768 ? -32768 : v));
#endif
}

/* v / 2^s rounded half up (an arithmetic right shift of v + 2^(s-1)). */
static int64_t round_shift(int64_t v, int s)
{
    int64_t q = v + ((int64_t)1 << (s - 1));
    return q >= 0 ? q >> s : -((-q + ((int64_t)1 << s) - 1) >> s);  /* floor division */
}

static int16_t twiddle_part(double value)
{
    long r = lround(value * 32768.0);
    return (int16_t)(r > 32767 ? 32767 : (r < -32767 ? -32767 : r));
}

int radix2_q15(size_t n, const int16_t *in, int16_t *out)
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
                int16_t *a = out + 2 * (k + j), *b = out + 2 * (k + j + half);
                int64_t tr = round_shift(b[0] * wr - b[1] * wi, 15);
                int64_t ti = round_shift(b[0] * wi + b[1] * wr, 15);
                int64_t ar = a[0], ai = a[1];
                a[0] = fit16(round_shift(ar + tr, 1));
                a[1] = fit16(round_shift(ai + ti, 1));
                b[0] = fit16(round_shift(ar - tr, 1));
                b[1] = fit16(round_shift(ai - ti, 1));
            }
        }
    }
    return 0;
}
