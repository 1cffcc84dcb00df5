/* The exact sampler of the Wiener first-passage time (inverse CDF). Private: it takes GSL's generator,
 * which the public headers do not expose. */
#ifndef BL_ENGINE_WIENER_SAMPLE_H
#define BL_ENGINE_WIENER_SAMPLE_H

#include "bandlink/wiener.h"

#include <gsl/gsl_rng.h>

/* Draw one (response, rt) pair by inverting the CDF (exact up to the solver's ~1e-13 in log time);
 * variability parameters are drawn per call, contaminants uniform on [contamination_lo, hi] with a fair
 * response. Deterministic for a given rng state. */
bl_status bl_wiener_sample(const bl_wiener_params *p, gsl_rng *rng, int *upper, double *rt, bl_error *err);

#endif
