/*
 * radix2_core.h - the body of the radix-2 FFT, written once for one precision.
 *
 * radix2.c includes this file twice: with REAL = double and FN(x) = radix2_x, then with
 * REAL = float and FN(x) = radix2f_x. Read it as if REAL were "double".
 *
 * The algorithm is decimation in frequency (Gentleman & Sande, "Fast Fourier transforms
 * for fun and profit", AFIPS Fall Joint Computer Conference 1966): log2 N stages of
 * butterflies on spans N, N/2, ..., 2 leave the outputs in bit-reversed order, and a final
 * bit-reversal permutation puts them back in natural order. Building with
 * -DMISSING_BITREVERSAL leaves that last step out: the deliberately broken variant.
 *
 * Data are interleaved complex numbers: element k is (re, im) = (a[2k], a[2k+1]).
 */

typedef struct {
    size_t n;          /* transform length, a power of two */
    int sign;          /* -1: forward (fft), +1: inverse (ifft, scaled by 1/n) */
    REAL *twiddle;     /* n/2 complex twiddles exp(sign * 2 pi i k / n), k = 0 .. n/2-1 */
    size_t *reversed;  /* reversed[i] = i with its log2 n bits in reverse order */
} FN(plan_t);

void *FN(plan)(size_t n, int sign)
{
    if (!is_power_of_two(n) || (sign != -1 && sign != 1))
        return NULL;
    FN(plan_t) *p = calloc(1, sizeof *p);
    if (p == NULL)
        return NULL;
    p->n = n;
    p->sign = sign;
    p->twiddle = malloc(sizeof(REAL) * (n > 1 ? n : 2));
    p->reversed = malloc(sizeof(size_t) * n);
    if (p->twiddle == NULL || p->reversed == NULL) {
        free(p->twiddle);
        free(p->reversed);
        free(p);
        return NULL;
    }
    /* Each twiddle is computed directly in double, then rounded once to REAL: no
       recurrence, so its error does not grow with k. */
    for (size_t k = 0; k < n / 2; k++) {
        double angle = sign * 2.0 * M_PI * (double)k / (double)n;
        p->twiddle[2 * k] = (REAL)cos(angle);
        p->twiddle[2 * k + 1] = (REAL)sin(angle);
    }
    for (size_t i = 0; i < n; i++)
        p->reversed[i] = bit_reverse(i, n);
    return p;
}

void FN(destroy)(void *plan)
{
    FN(plan_t) *p = plan;
    if (p == NULL)
        return;
    free(p->twiddle);
    free(p->reversed);
    free(p);
}

int FN(execute)(void *plan, const REAL *in, REAL *out)
{
    const FN(plan_t) *p = plan;
    if (p == NULL)
        return RADIX2_ERR_PLAN;
    size_t n = p->n;
    if (out != in)
        memcpy(out, in, sizeof(REAL) * 2 * n);

    /* Butterflies of span m on pairs (top, bottom = top + m/2), twiddle W_m^j = W_n^(j n/m):
         out[top]    = out[top] + out[bottom]
         out[bottom] = W * (old out[top] - out[bottom])                              */
    for (size_t m = n; m >= 2; m /= 2) {
        size_t half = m / 2, stride = n / m;
        for (size_t start = 0; start < n; start += m) {
            for (size_t j = 0; j < half; j++) {
                REAL *a = out + 2 * (start + j), *b = out + 2 * (start + j + half);
                REAL wr = p->twiddle[2 * j * stride], wi = p->twiddle[2 * j * stride + 1];
                REAL dr = a[0] - b[0], di = a[1] - b[1];
                a[0] += b[0];
                a[1] += b[1];
                b[0] = wr * dr - wi * di;
                b[1] = wr * di + wi * dr;
            }
        }
    }

#ifndef MISSING_BITREVERSAL
    for (size_t i = 0; i < n; i++) {
        size_t r = p->reversed[i];
        if (i < r) {
            REAL tr = out[2 * i], ti = out[2 * i + 1];
            out[2 * i] = out[2 * r];
            out[2 * i + 1] = out[2 * r + 1];
            out[2 * r] = tr;
            out[2 * r + 1] = ti;
        }
    }
#endif

    if (p->sign == 1) {  /* numpy's "backward" normalisation: 1/n on the inverse */
        REAL scale = (REAL)(1.0 / (double)n);
        for (size_t i = 0; i < 2 * n; i++)
            out[i] *= scale;
    }
    return RADIX2_OK;
}

/* -- real signals, by promotion to complex (no packing trick) -------------------------- */

void *FN(real_plan)(size_t n, int sign)
{
    return FN(plan)(n, sign);
}

void FN(real_destroy)(void *plan)
{
    FN(destroy)(plan);
}

/* sign -1 (rfft): n reals in, n/2+1 complex out.
   sign +1 (irfft): n/2+1 complex in, n reals out; the imaginary parts of X[0] and X[n/2]
   are ignored, as numpy does. */
int FN(real_execute)(void *plan, const REAL *in, REAL *out)
{
    const FN(plan_t) *p = plan;
    if (p == NULL)
        return RADIX2_ERR_PLAN;
    size_t n = p->n, half = n / 2;
    REAL *full = calloc(4 * n, sizeof(REAL));  /* scratch per call keeps plans thread-safe */
    if (full == NULL)
        return RADIX2_ERR_MEMORY;
    REAL *spectrum = full + 2 * n;
    if (p->sign == -1) {
        for (size_t i = 0; i < n; i++) {
            full[2 * i] = in[i];
            full[2 * i + 1] = 0;
        }
        int rc = FN(execute)(plan, full, spectrum);
        if (rc == RADIX2_OK)
            memcpy(out, spectrum, sizeof(REAL) * 2 * (half + 1));
        free(full);
        return rc;
    }
    /* Hermitian completion: X[k] for k <= n/2 as given, X[k] = conj(X[n-k]) above. */
    for (size_t k = 0; k < n; k++) {
        if (k <= half) {
            full[2 * k] = in[2 * k];
            full[2 * k + 1] = (k == 0 || 2 * k == n) ? 0 : in[2 * k + 1];
        } else {
            full[2 * k] = in[2 * (n - k)];
            full[2 * k + 1] = -in[2 * (n - k) + 1];
        }
    }
    int rc = FN(execute)(plan, full, spectrum);
    if (rc == RADIX2_OK)
        for (size_t i = 0; i < n; i++)
            out[i] = spectrum[2 * i];
    free(full);
    return rc;
}

/* -- one-shot entry points: plan, execute, destroy in one call -------------------------- */

static int FN(one_shot)(void *(*make)(size_t, int), int (*run)(void *, const REAL *, REAL *),
                        size_t n, int sign, const REAL *in, REAL *out)
{
    if (!is_power_of_two(n))
        return RADIX2_ERR_SIZE;
    void *plan = make(n, sign);
    if (plan == NULL)
        return RADIX2_ERR_MEMORY;
    int rc = run(plan, in, out);
    FN(destroy)(plan);
    return rc;
}

int FN(fft)(size_t n, const REAL *in, REAL *out)
{
    return FN(one_shot)(FN(plan), FN(execute), n, -1, in, out);
}

int FN(ifft)(size_t n, const REAL *in, REAL *out)
{
    return FN(one_shot)(FN(plan), FN(execute), n, 1, in, out);
}

int FN(rfft)(size_t n, const REAL *in, REAL *out)
{
    return FN(one_shot)(FN(real_plan), FN(real_execute), n, -1, in, out);
}

int FN(irfft)(size_t n, const REAL *in, REAL *out)
{
    return FN(one_shot)(FN(real_plan), FN(real_execute), n, 1, in, out);
}

/* Same prototype as the one-shot functions, does nothing: fftgauge calls it to measure
   the cost of the foreign call itself (SPEC option noop=radix2_noop). */
int FN(noop)(size_t n, const REAL *in, REAL *out)
{
    (void)n;
    (void)in;
    (void)out;
    return RADIX2_OK;
}
