/*
 * radix2_many.c - builds the double (radix2_*) and float (radix2f_*) functions of
 * radix2_many.h from one body, radix2_many_core.h, on top of the 1-D plans of radix2.c.
 */
#include <stdlib.h>
#include <string.h>

#include "radix2.h"
#include "radix2_many.h"

#define REAL double
#define FN(name) radix2_##name
#include "radix2_many_core.h"
#undef REAL
#undef FN

#define REAL float
#define FN(name) radix2f_##name
#include "radix2_many_core.h"
#undef REAL
#undef FN
