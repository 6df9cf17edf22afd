/*
 * radix2.c - builds the double (radix2_*) and float (radix2f_*) functions of radix2.h
 * from one body, radix2_core.h.
 */
#define _USE_MATH_DEFINES
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "radix2.h"

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

static int is_power_of_two(size_t n)
{
    return n >= 1 && (n & (n - 1)) == 0;
}

/* i with its log2(n) low bits written in reverse order, e.g. n = 8: 1 (001) -> 4 (100). */
static size_t bit_reverse(size_t i, size_t n)
{
    size_t r = 0;
    for (size_t bit = 1; bit < n; bit <<= 1) {
        r = (r << 1) | (i & 1);
        i >>= 1;
    }
    return r;
}

#define REAL double
#define FN(name) radix2_##name
#include "radix2_core.h"
#undef REAL
#undef FN

#define REAL float
#define FN(name) radix2f_##name
#include "radix2_core.h"
#undef REAL
#undef FN
