/*
 * radix2_many_core.h - the body of radix2_many.h, written once for one precision.
 *
 * radix2_many.c includes it twice: REAL = double with FN(x) = radix2_x, then REAL = float
 * with FN(x) = radix2f_x. Every N-D transform is done axis by axis (the multidimensional DFT
 * is separable): each line along an axis is gathered into a scratch buffer, transformed by
 * the 1-D plan of radix2.h and scattered back. A real forward transform does its real lines
 * first (along the last axis listed, which it halves), a real inverse its real lines last.
 * Building with -DLEAKING_BATCH makes transform t > 0 of a batch add one hundredth of the
 * previous transform's first input value to its own: the deliberately broken variant.
 */

/* Product of len[from..rank-1]. */
static size_t FN(volume_from)(int rank, const size_t *len, int from)
{
    size_t v = 1;
    for (int m = from; m < rank; m++)
        v *= len[m];
    return v;
}

/* Complex lines along axis k of the packed complex array a (logical lengths len), in place. */
static int FN(complex_lines)(REAL *a, int rank, const size_t *len, int k, void *plan, REAL *tin, REAL *tout)
{
    size_t inner = FN(volume_from)(rank, len, k + 1), L = len[k];
    size_t lines = FN(volume_from)(rank, len, 0) / L;
    for (size_t o = 0; o < lines; o++) {
        size_t start = (o / inner) * L * inner + o % inner;
        for (size_t j = 0; j < L; j++) {
            tin[2 * j] = a[2 * (start + j * inner)];
            tin[2 * j + 1] = a[2 * (start + j * inner) + 1];
        }
        int rc = FN(execute)(plan, tin, tout);
        if (rc != RADIX2_OK)
            return rc;
        for (size_t j = 0; j < L; j++) {
            a[2 * (start + j * inner)] = tout[2 * j];
            a[2 * (start + j * inner) + 1] = tout[2 * j + 1];
        }
    }
    return RADIX2_OK;
}

/* Complex transforms along every axis of `axes` except the one at position `skip` (-1: none). */
static int FN(complex_axes)(REAL *a, int rank, const size_t *len, int naxes, const int *axes, int skip,
                            int sign, REAL *tin, REAL *tout)
{
    for (int i = 0; i < naxes; i++) {
        if (i == skip)
            continue;
        void *plan = FN(plan)(len[axes[i]], sign);
        if (plan == NULL)
            return RADIX2_ERR_SIZE;
        int rc = FN(complex_lines)(a, rank, len, axes[i], plan, tin, tout);
        FN(destroy)(plan);
        if (rc != RADIX2_OK)
            return rc;
    }
    return RADIX2_OK;
}

/* Real lines along axis k: sign -1 reals (lengths n) -> complex (lengths h); +1 the reverse. */
static int FN(real_lines)(const REAL *in, REAL *out, int rank, const size_t *n, const size_t *h, int k, int sign,
                          REAL *tin, REAL *tout)
{
    void *plan = FN(real_plan)(n[k], sign);
    if (plan == NULL)
        return RADIX2_ERR_SIZE;
    size_t inner = FN(volume_from)(rank, n, k + 1);
    size_t lines = FN(volume_from)(rank, n, 0) / n[k];
    int rc = RADIX2_OK;
    for (size_t o = 0; o < lines && rc == RADIX2_OK; o++) {
        size_t real_start = (o / inner) * n[k] * inner + o % inner;
        size_t cplx_start = (o / inner) * h[k] * inner + o % inner;
        if (sign == -1) {
            for (size_t j = 0; j < n[k]; j++)
                tin[j] = in[real_start + j * inner];
            rc = FN(real_execute)(plan, tin, tout);
            for (size_t j = 0; j < h[k] && rc == RADIX2_OK; j++) {
                out[2 * (cplx_start + j * inner)] = tout[2 * j];
                out[2 * (cplx_start + j * inner) + 1] = tout[2 * j + 1];
            }
        } else {
            for (size_t j = 0; j < h[k]; j++) {
                tin[2 * j] = in[2 * (cplx_start + j * inner)];
                tin[2 * j + 1] = in[2 * (cplx_start + j * inner) + 1];
            }
            rc = FN(real_execute)(plan, tin, tout);
            for (size_t j = 0; j < n[k] && rc == RADIX2_OK; j++)
                out[real_start + j * inner] = tout[j];
        }
    }
    FN(real_destroy)(plan);
    return rc;
}

int FN(over_axes)(int family, int rank, const size_t *n, int naxes, const int *axes, const REAL *in, REAL *out)
{
    if (rank < 1 || naxes < 1 || naxes > rank || family < 0 || family > 3)
        return RADIX2_ERR_ARGS;
    size_t h[64], longest = 1;
    if (rank > 64)
        return RADIX2_ERR_ARGS;
    for (int m = 0; m < rank; m++) {
        if (n[m] == 0)
            return RADIX2_ERR_ARGS;
        h[m] = n[m];
        longest = n[m] > longest ? n[m] : longest;
    }
    for (int i = 0; i < naxes; i++)
        if (axes[i] < 0 || axes[i] >= rank)
            return RADIX2_ERR_ARGS;
    int last = axes[naxes - 1], sign = (family == 1 || family == 3) ? 1 : -1;
    if (family >= 2)
        h[last] = n[last] / 2 + 1;
    REAL *tin = malloc(sizeof(REAL) * 2 * (longest + 1)), *tout = malloc(sizeof(REAL) * 2 * (longest + 1));
    REAL *work = NULL;
    int rc = RADIX2_OK;
    size_t total = FN(volume_from)(rank, n, 0), half_total = FN(volume_from)(rank, h, 0);
    if (tin == NULL || tout == NULL) {
        rc = RADIX2_ERR_MEMORY;
    } else if (family < 2) {
        memcpy(out, in, sizeof(REAL) * 2 * total);
        rc = FN(complex_axes)(out, rank, n, naxes, axes, -1, sign, tin, tout);
    } else if (family == 2) {
        rc = FN(real_lines)(in, out, rank, n, h, last, -1, tin, tout);
        if (rc == RADIX2_OK)
            rc = FN(complex_axes)(out, rank, h, naxes, axes, naxes - 1, -1, tin, tout);
    } else {
        work = malloc(sizeof(REAL) * 2 * half_total);  /* the input stays as it was */
        if (work == NULL) {
            rc = RADIX2_ERR_MEMORY;
        } else {
            memcpy(work, in, sizeof(REAL) * 2 * half_total);
            rc = FN(complex_axes)(work, rank, h, naxes, axes, naxes - 1, 1, tin, tout);
            if (rc == RADIX2_OK)
                rc = FN(real_lines)(work, out, rank, n, h, last, 1, tin, tout);
        }
    }
    free(work);
    free(tin);
    free(tout);
    return rc;
}

/* The many shape: gather every transform's block into one packed array of shape
   (howmany, n...) (strides honoured, any sign), transform it over all axes but the first in
   one call (so each 1-D plan serves the whole batch), scatter it out. `in_width`/`out_width`
   are the reals per element (2 complex, 1 real); `in_len`/`out_len` the lengths of each side. */
static int FN(many_blocks)(int family, int rank, const size_t *n, const size_t *in_len, const size_t *out_len,
                           size_t howmany, const REAL *in, ptrdiff_t istride, ptrdiff_t idist, int in_width,
                           REAL *out, ptrdiff_t ostride, ptrdiff_t odist, int out_width)
{
    int axes[63];
    size_t batched[64];
    if (rank < 1 || rank > 63 || howmany == 0)
        return RADIX2_ERR_ARGS;
    batched[0] = howmany;
    for (int m = 0; m < rank; m++) {
        axes[m] = m + 1;
        batched[m + 1] = n[m];
    }
    size_t in_count = FN(volume_from)(rank, in_len, 0), out_count = FN(volume_from)(rank, out_len, 0);
    REAL *a = calloc(in_width * in_count * howmany, sizeof(REAL));
    REAL *b = malloc(sizeof(REAL) * out_width * out_count * howmany);
    int rc = (a == NULL || b == NULL) ? RADIX2_ERR_MEMORY : RADIX2_OK;
    for (size_t t = 0; t < howmany && rc == RADIX2_OK; t++) {
        const REAL *src = in + (ptrdiff_t)t * idist * in_width;
        REAL *block = a + t * in_width * in_count;
        for (size_t j = 0; j < in_count; j++)
            for (int w = 0; w < in_width; w++)
                block[in_width * j + w] = src[(ptrdiff_t)j * istride * in_width + w];
#ifdef LEAKING_BATCH
        if (t > 0)
            block[0] += (REAL)0.01 * (in + (ptrdiff_t)(t - 1) * idist * in_width)[0];
#endif
    }
    if (rc == RADIX2_OK)
        rc = FN(over_axes)(family, rank + 1, batched, rank, axes, a, b);
    for (size_t t = 0; t < howmany && rc == RADIX2_OK; t++) {
        REAL *dst = out + (ptrdiff_t)t * odist * out_width;
        const REAL *block = b + t * out_width * out_count;
        for (size_t j = 0; j < out_count; j++)
            for (int w = 0; w < out_width; w++)
                dst[(ptrdiff_t)j * ostride * out_width + w] = block[out_width * j + w];
    }
    free(a);
    free(b);
    return rc;
}

int FN(many)(int rank, const size_t *n, size_t howmany, const REAL *in, ptrdiff_t istride, ptrdiff_t idist,
             REAL *out, ptrdiff_t ostride, ptrdiff_t odist, int sign)
{
    if (sign != -1 && sign != 1)
        return RADIX2_ERR_ARGS;
    return FN(many_blocks)(sign == -1 ? 0 : 1, rank, n, n, n, howmany, in, istride, idist, 2,
                           out, ostride, odist, 2);
}

int FN(real_many)(int rank, const size_t *n, size_t howmany, const REAL *in, ptrdiff_t istride, ptrdiff_t idist,
                  REAL *out, ptrdiff_t ostride, ptrdiff_t odist, int sign)
{
    size_t h[64];
    if (sign != -1 && sign != 1)
        return RADIX2_ERR_ARGS;
    if (rank < 1 || rank > 64)
        return RADIX2_ERR_ARGS;
    for (int m = 0; m < rank; m++)
        h[m] = n[m];
    h[rank - 1] = n[rank - 1] / 2 + 1;
    if (sign == -1)
        return FN(many_blocks)(2, rank, n, n, h, howmany, in, istride, idist, 1, out, ostride, odist, 2);
    return FN(many_blocks)(3, rank, n, h, n, howmany, in, istride, idist, 2, out, ostride, odist, 1);
}
