/* Private pieces of the simulator (simulate.c), shared with its tests. */
#ifndef BL_ANALYSIS_SIMULATE_H
#define BL_ANALYSIS_SIMULATE_H

#include "bandlink/simulate.h"

#include <gsl/gsl_rng.h>

/* Fill x[0..n) with Gaussian noise shaped to a power spectrum proportional to 1/f^exponent above
 * `corner` Hz (flat below), scaled to the given RMS. fs in Hz. Uses one FFT of a fast size >= n. */
bl_status bl_simulate_colored_noise(double *x, size_t n, double fs, double exponent, double corner, double rms,
                                    gsl_rng *rng, bl_error *err);

#endif
