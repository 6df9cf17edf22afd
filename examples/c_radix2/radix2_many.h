/*
 * radix2_many.h - batched and N-D transforms built on the radix-2 FFT of radix2.h: the
 * "many transforms" calling shape fftgauge loads with clib:...:radix2_many[shape=many], and
 * the whole-array transform the protocol server uses.
 *
 * Data layout of the many shape (docs/external-backends.md, "The many shape"): `howmany`
 * transforms, each of a rank-D array of logical lengths n[0..rank-1] in row-major order.
 * Element (j_0, ..., j_{rank-1}) of transform t lies at
 *
 *     base + t * dist + stride * (j_{rank-1} + L_{rank-1} * (j_{rank-2} + L_{rank-2} * (...)))
 *
 * counted in elements of the array's own type (complex values for complex arrays, so a
 * stride of 1 is one (re, im) pair; reals for real arrays), with L the array's own lengths
 * (the complex side of a real transform has L_{rank-1} = n[rank-1]/2 + 1). Strides and
 * distances may be negative. Lengths are powers of two. Conventions are numpy's: forward
 * unscaled, inverse scaled by 1/N with N the product of the lengths.
 */
#ifndef RADIX2_MANY_H
#define RADIX2_MANY_H

#include <stddef.h>

#define RADIX2_ERR_ARGS 4  /* rank < 1, a zero length, or a sign other than -1 / +1 */

/* Complex: sign -1 forward (fft / fftn), +1 inverse (ifft / ifftn). */
int radix2_many(int rank, const size_t *n, size_t howmany,
                const double *in, ptrdiff_t istride, ptrdiff_t idist,
                double *out, ptrdiff_t ostride, ptrdiff_t odist, int sign);
/* Real: sign -1 rfft (reals in, half-length complex out), +1 irfft (the reverse). */
int radix2_real_many(int rank, const size_t *n, size_t howmany,
                     const double *in, ptrdiff_t istride, ptrdiff_t idist,
                     double *out, ptrdiff_t ostride, ptrdiff_t odist, int sign);

/* The transform of a whole C-order array of logical shape n[0..rank-1] over the listed
   axes (family 0 fft, 1 ifft, 2 rfft, 3 irfft; a real family halves the last axis listed),
   in and out both packed C-order arrays. */
int radix2_over_axes(int family, int rank, const size_t *n, int naxes, const int *axes,
                     const double *in, double *out);

/* The same in single precision. */
int radix2f_many(int rank, const size_t *n, size_t howmany,
                 const float *in, ptrdiff_t istride, ptrdiff_t idist,
                 float *out, ptrdiff_t ostride, ptrdiff_t odist, int sign);
int radix2f_real_many(int rank, const size_t *n, size_t howmany,
                      const float *in, ptrdiff_t istride, ptrdiff_t idist,
                      float *out, ptrdiff_t ostride, ptrdiff_t odist, int sign);
int radix2f_over_axes(int family, int rank, const size_t *n, int naxes, const int *axes,
                      const float *in, float *out);

#endif
