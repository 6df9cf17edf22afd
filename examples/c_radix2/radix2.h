/*
 * radix2.h - a small radix-2 FFT in C, with the two calling shapes fftgauge loads.
 *
 * Complex data are interleaved (re, im) pairs; real data are plain arrays. Lengths are
 * powers of two. Every function comes in double (radix2_*) and float (radix2f_*).
 *
 * Conventions (numpy's): forward X[k] = sum_j x[j] exp(-2 pi i jk/n), unscaled; the
 * inverse (sign +1) uses exp(+2 pi i jk/n) and divides by n. Real transforms use numpy's
 * rfft/irfft layouts: n reals <-> n/2+1 complex values.
 */
#ifndef RADIX2_H
#define RADIX2_H

#include <stddef.h>

#define RADIX2_OK 0
#define RADIX2_ERR_SIZE 1    /* n is not a power of two */
#define RADIX2_ERR_MEMORY 2  /* out of memory */
#define RADIX2_ERR_PLAN 3    /* a NULL plan was passed */

/* Plan-based shape: plan once, execute many times, destroy. sign = -1 forward, +1 inverse. */
void *radix2_plan(size_t n, int sign);
int radix2_execute(void *plan, const double *in, double *out);   /* n complex -> n complex */
void radix2_destroy(void *plan);
void *radix2_real_plan(size_t n, int sign);                        /* -1: rfft, +1: irfft */
int radix2_real_execute(void *plan, const double *in, double *out);
void radix2_real_destroy(void *plan);

/* One-shot shape: returns 0 on success, a RADIX2_ERR_* code otherwise. */
int radix2_fft(size_t n, const double *in, double *out);
int radix2_ifft(size_t n, const double *in, double *out);
int radix2_rfft(size_t n, const double *in, double *out);   /* n reals -> n/2+1 complex */
int radix2_irfft(size_t n, const double *in, double *out);  /* n/2+1 complex -> n reals */
int radix2_noop(size_t n, const double *in, double *out);   /* does nothing, returns 0 */

/* The same in single precision. */
void *radix2f_plan(size_t n, int sign);
int radix2f_execute(void *plan, const float *in, float *out);
void radix2f_destroy(void *plan);
void *radix2f_real_plan(size_t n, int sign);
int radix2f_real_execute(void *plan, const float *in, float *out);
void radix2f_real_destroy(void *plan);
int radix2f_fft(size_t n, const float *in, float *out);
int radix2f_ifft(size_t n, const float *in, float *out);
int radix2f_rfft(size_t n, const float *in, float *out);
int radix2f_irfft(size_t n, const float *in, float *out);
int radix2f_noop(size_t n, const float *in, float *out);

#endif
