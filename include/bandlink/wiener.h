/* Wiener diffusion model: first-passage time density, CDF, boundary probabilities, moments,
 * gradients and an exact sampler. Pure functions, thread-safe; no allocation per call (the quadrature
 * tables for the variability parameters are built once, on first use, under pthread_once).
 * Accuracy (docs/methods.md): plain and drift_sd log-densities ~1e-10 relative (series truncated
 * relative to the partial sum); start_range / nondecision_range Gauss sums ~1e-9; CDF ~1e-12; quantiles invert the
 * CDF to 1e-14 of the boundary probability or to 2 ulp of the RT.
 *
 * Conventions (docs/methods.md): noise scale s = 1; evidence starts at start*threshold and is
 * absorbed at 0 (lower boundary) or at threshold (upper boundary); RT = decision time + nondecision.
 * Sources: Navarro & Fuss (2009) series; Gondan, Blurton & Kesselmeier (2014) small-time bound;
 * Blurton, Kesselmeier & Gondan (2012) CDF series; Ratcliff & Tuerlinckx (2002) contaminants.
 */
#ifndef BL_WIENER_H
#define BL_WIENER_H

#include "bandlink/status.h"

#ifdef __cplusplus
extern "C" {
#endif

/* Parameter indices, in the order used by every array of parameters or gradients. */
typedef enum {
    BL_THRESHOLD = 0,     /* a  : boundary separation, > 0 */
    BL_DRIFT,             /* v  : drift rate toward the upper boundary, any real */
    BL_NONDECISION,       /* t0 : seconds, >= 0 */
    BL_START,             /* w  : relative start, in (0, 1) */
    BL_DRIFT_SD,          /* sv : across-trial SD of drift, >= 0 */
    BL_START_RANGE,       /* sz : width of uniform start variability, [0, 1), w +- sz/2 inside (0,1) */
    BL_NONDECISION_RANGE, /* st : width of uniform nondecision variability, seconds, >= 0, t0 - st/2 >= 0 */
    BL_CONTAMINATION,     /* p0 : share of responses from a uniform RT distribution, [0, 1) */
    BL_NPARAM
} bl_param;

typedef struct {
    double value[BL_NPARAM]; /* indexed by bl_param */
    /* Uniform contaminant RT range [seconds]; used only when value[BL_CONTAMINATION] > 0,
     * then 0 <= contamination_lo < contamination_hi is required. */
    double contamination_lo, contamination_hi;
} bl_wiener_params;

/* User-facing parameter name ("threshold", "drift", ...) for an index; NULL when out of range. */
BL_API const char *bl_param_name(int index);
/* Index for a user-facing name, or -1. */
BL_API int bl_param_index(const char *name);

/* Defaults: all zero, start = 0.5. threshold/drift/nondecision must still be set. */
BL_API void bl_wiener_params_default(bl_wiener_params *p);

/* BL_OK when p is a valid parameter set, else BL_ERR_RANGE with a message naming the parameter and value. */
BL_API bl_status bl_wiener_check(const bl_wiener_params *p, bl_error *err);

/* Relative accuracy of every series (relative to the partial sum); default 1e-10. */
#define BL_WIENER_EPS 1e-10

/* Log-density of responding at the given boundary (upper != 0: upper) at response time rt [s].
 * Returns -INFINITY where the density is zero (rt at or below the earliest possible RT);
 * BL_ERR_RANGE for invalid parameters or non-finite rt. Never writes NaN. */
BL_API bl_status bl_wiener_log_density(const bl_wiener_params *p, double rt, int upper, double *log_density,
                                       bl_error *err);

/* As above, plus the gradient of the log-density with respect to every parameter (grad[BL_NPARAM],
 * indexed by bl_param; entries for parameters at a boundary of their range are one-sided limits).
 * When the log-density is -INFINITY the gradient is set to 0. */
BL_API bl_status bl_wiener_log_density_grad(const bl_wiener_params *p, double rt, int upper, double *log_density,
                                            double grad[BL_NPARAM], bl_error *err);

/* Probability of absorbing at the upper boundary (contamination included: half the contaminants). */
BL_API bl_status bl_wiener_p_upper(const bl_wiener_params *p, double *p_upper, bl_error *err);

/* Probability of the given boundary (upper != 0: upper), computed directly so that a tiny
 * probability keeps its digits (1 - p_upper would round it to 0). Contamination included. */
BL_API bl_status bl_wiener_p_boundary(const bl_wiener_params *p, int upper, double *prob, bl_error *err);

/* Defective CDF: P(RT <= rt and response at the given boundary). */
BL_API bl_status bl_wiener_cdf(const bl_wiener_params *p, double rt, int upper, double *cdf, bl_error *err);

/* Mean RT [s, nondecision included] conditional on responding at the given boundary. */
BL_API bl_status bl_wiener_mean_rt(const bl_wiener_params *p, int upper, double *mean_rt, bl_error *err);

/* Quantile [s] of the RT distribution conditional on the boundary: the rt with
 * cdf(rt)/P(boundary) = prob, prob in (0, 1). BL_ERR_NUMERIC when the boundary has probability ~0. */
BL_API bl_status bl_wiener_quantile(const bl_wiener_params *p, double prob, int upper, double *rt, bl_error *err);

#ifdef __cplusplus
}
#endif
#endif
