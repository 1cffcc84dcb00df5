/* Wiener parameters for the engine tests, every parameter given (the others at their defaults). */
#ifndef BL_TEST_WIENER_TESTUTIL_H
#define BL_TEST_WIENER_TESTUTIL_H

#include "bandlink/wiener.h"

static inline bl_wiener_params mk(double a, double v, double t0, double w, double sv, double sz, double st)
{
    bl_wiener_params p;
    bl_wiener_params_default(&p);
    p.value[BL_THRESHOLD] = a;
    p.value[BL_DRIFT] = v;
    p.value[BL_NONDECISION] = t0;
    p.value[BL_START] = w;
    p.value[BL_DRIFT_SD] = sv;
    p.value[BL_START_RANGE] = sz;
    p.value[BL_NONDECISION_RANGE] = st;
    return p;
}

#endif
