/* Exact sampler for the Wiener diffusion model: inverse CDF with safeguarded Newton.
 *
 * The boundary is drawn with its closed-form probability, then the decision time solves
 * F_b(T) = U P_b (or the survival equation S_b(T) = (1 - U) P_b in the upper half, which keeps the
 * far tail accurate), by Newton's method on log T with a bisection safeguard (numerics notes 5.1).
 * Across-trial variability is drawn per trial (drift ~ normal, start and nondecision ~ uniform), and
 * contaminants are uniform on [contamination_lo, contamination_hi] with either response equally
 * likely (Ratcliff & Tuerlinckx 2002). Deterministic for a given GSL rng state.
 */
#include "engine/wiener_sample.h"
#include "engine/wiener_internal.h"

#include <gsl/gsl_randist.h>
#include <math.h>

/* Decision time at the given boundary for a uniform draw U in (0, 1). */
static bl_status solve_time(double v, double a, double w, int up, double U, double *T)
{
    int use_surv = U > 0.5;
    double lP = blw_log_p(v, a, w, up);
    double target = use_surv ? log1p(-U) + lP : log(U) + lP;
    double y = log(blw_mean_t(v, a, w, up));
    double ylo = -INFINITY, yhi = INFINITY, step = 1;
    for (int it = 0; it < 300; it++) {
        double t = exp(y), lF, lS, G, dG;
        bl_status s = blw_log_cdf(t, v, a, w, up, &lF, &lS);
        if (s) return s;
        double lf = blw_log_dens(t, v, a, w, 0, up, NULL);
        if (use_surv) {
            G = target - lS; /* increasing in y */
            dG = exp(y + lf - lS);
        } else {
            G = lF - target;
            dG = exp(y + lf - lF);
        }
        if (G == 0) break;
        if (G < 0) ylo = y;
        else yhi = y;
        double yn;
        if (isinf(ylo) || isinf(yhi)) {
            /* still bracketing: Newton if it heads the right way, else widen */
            yn = y - G / dG;
            if (!isfinite(yn) || (G < 0 && yn <= y) || (G > 0 && yn >= y)) yn = G < 0 ? y + step : y - step;
            else if (fabs(yn - y) > 4 * step) yn = G < 0 ? y + 4 * step : y - 4 * step;
            step *= 2;
        } else {
            if (yhi - ylo <= 1e-13 * fmax(1, fabs(y))) break;
            yn = y - G / dG;
            if (!(yn > ylo && yn < yhi)) yn = 0.5 * (ylo + yhi);
        }
        if (fabs(yn - y) <= 1e-13 * fmax(1, fabs(y))) {
            y = yn;
            break;
        }
        y = yn;
        if (it == 299) return BL_ERR_NUMERIC;
    }
    *T = exp(y);
    return BL_OK;
}

bl_status bl_wiener_sample(const bl_wiener_params *p, gsl_rng *rng, int *upper, double *rt, bl_error *err)
{
    bl_status s = bl_wiener_check(p, err);
    if (s) return s;
    const double *x = p->value;
    double p0 = x[BL_CONTAMINATION];
    if (p0 > 0 && gsl_rng_uniform(rng) < p0) {
        *upper = gsl_rng_uniform(rng) < 0.5;
        *rt = p->contamination_lo + (p->contamination_hi - p->contamination_lo) * gsl_rng_uniform(rng);
        return BL_OK;
    }
    double a = x[BL_THRESHOLD], v = x[BL_DRIFT], w = x[BL_START], t0 = x[BL_NONDECISION];
    if (x[BL_DRIFT_SD] > 0) v += gsl_ran_gaussian(rng, x[BL_DRIFT_SD]);
    if (x[BL_START_RANGE] > 0) w += x[BL_START_RANGE] * (gsl_rng_uniform(rng) - 0.5);
    if (x[BL_NONDECISION_RANGE] > 0) t0 += x[BL_NONDECISION_RANGE] * (gsl_rng_uniform(rng) - 0.5);
    int up = gsl_rng_uniform(rng) < exp(blw_log_p(v, a, w, 1));
    double U = gsl_rng_uniform_pos(rng), T;
    s = solve_time(v, a, w, up, U, &T);
    if (s)
        return bl_error_set(
            err, s, "sampler: decision-time inversion did not converge (drift %g, threshold %g, start %g)", v, a, w);
    *upper = up;
    *rt = t0 + T;
    return BL_OK;
}
