/* Wiener first-passage time density, its gradient, boundary probabilities and mean decision times.
 *
 * Sources: Navarro & Fuss (2009, J. Math. Psych. 53:222-230) large- and small-time series, summed
 * in log space and truncated relative to the partial sum (the project's numerics notes, section 1.3;
 * the small-time tail bound follows the w-dependent image argument of Gondan, Blurton & Kesselmeier
 * 2014, J. Math. Psych. 60:20-22, applied relative to the sum rather than as an absolute count).
 * Closed form in drift_sd: Blurton, Kesselmeier & Gondan (2017, J. Math. Psych. 76:7-12).
 * Mean decision times from the Laplace transform of the first-passage time (Cox & Miller 1965);
 * they reduce to the EZ-diffusion equations (Wagenmakers, van der Maas & Grasman 2007) at w = 1/2.
 * Noise scale s = 1. See docs/methods.md.
 */
#include "engine/wiener_internal.h"

#include <float.h>
#include <math.h>
#include <string.h>

static const char *const param_names[BL_NPARAM] = {"threshold", "drift",       "nondecision",       "start",
                                                   "drift_sd",  "start_range", "nondecision_range", "contamination"};

const char *bl_param_name(int index) { return index >= 0 && index < BL_NPARAM ? param_names[index] : NULL; }

int bl_param_index(const char *name)
{
    if (!name) return -1;
    for (int i = 0; i < BL_NPARAM; i++)
        if (strcmp(name, param_names[i]) == 0) return i;
    return -1;
}

void bl_wiener_params_default(bl_wiener_params *p)
{
    memset(p, 0, sizeof *p);
    p->value[BL_START] = 0.5;
}

bl_status bl_wiener_check(const bl_wiener_params *p, bl_error *err)
{
    const double *x = p->value;
    for (int i = 0; i < BL_NPARAM; i++)
        if (!isfinite(x[i]))
            return bl_error_set(err, BL_ERR_RANGE, "%s must be a finite number (got %g)", param_names[i], x[i]);
    if (!(x[BL_THRESHOLD] > 0))
        return bl_error_set(err, BL_ERR_RANGE, "threshold must be > 0 (got %g)", x[BL_THRESHOLD]);
    if (!(x[BL_NONDECISION] >= 0))
        return bl_error_set(err, BL_ERR_RANGE, "nondecision must be >= 0 s (got %g)", x[BL_NONDECISION]);
    if (!(x[BL_START] > 0 && x[BL_START] < 1))
        return bl_error_set(err, BL_ERR_RANGE, "start must lie in (0, 1) (got %g)", x[BL_START]);
    if (!(x[BL_DRIFT_SD] >= 0))
        return bl_error_set(err, BL_ERR_RANGE, "drift_sd must be >= 0 (got %g)", x[BL_DRIFT_SD]);
    double w = x[BL_START], sz = x[BL_START_RANGE];
    if (!(sz >= 0 && sz < 1)) return bl_error_set(err, BL_ERR_RANGE, "start_range must lie in [0, 1) (got %g)", sz);
    if (sz > 0 && !(w - sz / 2 > 0 && w + sz / 2 < 1))
        return bl_error_set(err, BL_ERR_RANGE,
                            "start_range %g with start %g leaves (0, 1): start +- start_range/2 must stay inside", sz,
                            w);
    double t0 = x[BL_NONDECISION], st = x[BL_NONDECISION_RANGE];
    if (!(st >= 0)) return bl_error_set(err, BL_ERR_RANGE, "nondecision_range must be >= 0 s (got %g)", st);
    if (st > 0 && !(t0 - st / 2 >= 0))
        return bl_error_set(err, BL_ERR_RANGE,
                            "nondecision_range %g exceeds twice nondecision %g (nondecision - range/2 must be >= 0)",
                            st, t0);
    double p0 = x[BL_CONTAMINATION];
    if (!(p0 >= 0 && p0 < 1)) return bl_error_set(err, BL_ERR_RANGE, "contamination must lie in [0, 1) (got %g)", p0);
    if (p0 > 0 && !(isfinite(p->contamination_lo) && isfinite(p->contamination_hi) && p->contamination_lo >= 0 &&
                    p->contamination_lo < p->contamination_hi))
        return bl_error_set(err, BL_ERR_RANGE, "contamination range [%g, %g] s must satisfy 0 <= low < high",
                            p->contamination_lo, p->contamination_hi);
    return BL_OK;
}

/* ---- public entry points ------------------------------------------------------------------------ */

static inline int plain_ok(const bl_wiener_params *p)
{
    const double *x = p->value;
    return x[BL_THRESHOLD] > 0 && x[BL_THRESHOLD] < INFINITY && fabs(x[BL_DRIFT]) < INFINITY &&
           x[BL_NONDECISION] >= 0 && x[BL_NONDECISION] < INFINITY && x[BL_START] > 0 && x[BL_START] < 1 &&
           x[BL_DRIFT_SD] >= 0 && x[BL_DRIFT_SD] < INFINITY && x[BL_START_RANGE] == 0 && x[BL_NONDECISION_RANGE] == 0 &&
           x[BL_CONTAMINATION] == 0;
}

bl_status bl_wiener_log_density(const bl_wiener_params *p, double rt, int upper, double *log_density, bl_error *err)
{
    if (!isfinite(rt)) return bl_error_set(err, BL_ERR_RANGE, "response time must be finite (got %g)", rt);
    if (plain_ok(p)) {
        const double *x = p->value;
        double t = rt - x[BL_NONDECISION];
        *log_density = t > 0 ? blw_log_dens(t, x[BL_DRIFT], x[BL_THRESHOLD], x[BL_START], x[BL_DRIFT_SD], upper, NULL)
                             : -INFINITY;
        return BL_OK;
    }
    bl_status s = bl_wiener_check(p, err);
    if (s) return s;
    return blw_log_density_full(p, rt, upper, log_density, NULL, err);
}

bl_status bl_wiener_log_density_grad(const bl_wiener_params *p, double rt, int upper, double *log_density,
                                     double grad[BL_NPARAM], bl_error *err)
{
    if (!isfinite(rt)) return bl_error_set(err, BL_ERR_RANGE, "response time must be finite (got %g)", rt);
    if (plain_ok(p)) {
        const double *x = p->value;
        double t = rt - x[BL_NONDECISION];
        if (!(t > 0)) {
            *log_density = -INFINITY;
            for (int i = 0; i < BL_NPARAM; i++) grad[i] = 0;
            return BL_OK;
        }
        double g[BLW_NG];
        *log_density = blw_log_dens(t, x[BL_DRIFT], x[BL_THRESHOLD], x[BL_START], x[BL_DRIFT_SD], upper, g);
        grad[BL_THRESHOLD] = g[BLW_GA];
        grad[BL_DRIFT] = g[BLW_GV];
        grad[BL_NONDECISION] = -g[BLW_GT];
        grad[BL_START] = g[BLW_GW];
        grad[BL_DRIFT_SD] = g[BLW_GSV];
        /* At start_range = 0 and nondecision_range = 0 the density is even in the range to first
         * order (f + range^2 f''/24), so the one-sided derivative is 0. */
        grad[BL_START_RANGE] = 0;
        grad[BL_NONDECISION_RANGE] = 0;
        /* d/dp0 of (1-p0) f + p0 c at p0 = 0, divided by f. */
        double lo = p->contamination_lo, hi = p->contamination_hi;
        double c = (lo < hi && rt >= lo && rt <= hi) ? 0.5 / (hi - lo) : 0;
        grad[BL_CONTAMINATION] = (c > 0 ? exp(log(c) - *log_density) : 0) - 1;
        return BL_OK;
    }
    bl_status s = bl_wiener_check(p, err);
    if (s) return s;
    return blw_log_density_full(p, rt, upper, log_density, grad, err);
}

/* log of the drift integrand of P(boundary): normal log-weight plus log P at drift v + sv x. */
bl_status bl_wiener_p_boundary(const bl_wiener_params *p, int upper, double *prob, bl_error *err)
{
    bl_status s = bl_wiener_check(p, err);
    if (s) return s;
    const double *x = p->value;
    double pb;
    if (x[BL_DRIFT_SD] == 0 && x[BL_START_RANGE] == 0)
        pb = exp(blw_log_p(x[BL_DRIFT], x[BL_THRESHOLD], x[BL_START], upper));
    else blw_variability_moments(p, upper, &pb, NULL);
    double p0 = x[BL_CONTAMINATION];
    *prob = (1 - p0) * pb + 0.5 * p0;
    return BL_OK;
}

bl_status bl_wiener_p_upper(const bl_wiener_params *p, double *p_upper, bl_error *err)
{
    return bl_wiener_p_boundary(p, 1, p_upper, err);
}

bl_status bl_wiener_mean_rt(const bl_wiener_params *p, int upper, double *mean_rt, bl_error *err)
{
    bl_status s = bl_wiener_check(p, err);
    if (s) return s;
    const double *x = p->value;
    double m, pb = 0;
    double p0 = x[BL_CONTAMINATION];
    if (x[BL_DRIFT_SD] == 0 && x[BL_START_RANGE] == 0) {
        m = blw_mean_t(x[BL_DRIFT], x[BL_THRESHOLD], x[BL_START], upper);
        if (p0 > 0) pb = exp(blw_log_p(x[BL_DRIFT], x[BL_THRESHOLD], x[BL_START], upper));
    } else {
        blw_variability_moments(p, upper, &pb, &m);
    }
    /* Uniform nondecision variability is symmetric about nondecision: the mean is unchanged. */
    m += x[BL_NONDECISION];
    if (p0 > 0) {
        double wd = (1 - p0) * pb, wc = 0.5 * p0;
        m = (wd * m + wc * 0.5 * (p->contamination_lo + p->contamination_hi)) / (wd + wc);
    }
    if (!isfinite(m)) return bl_error_set(err, BL_ERR_NUMERIC, "mean response time is not finite");
    *mean_rt = m;
    return BL_OK;
}

/* F at decision time y (no nondecision variability), averaged over drift_sd and start_range. */
static bl_status cdf_decision(const bl_wiener_params *p, double y, int upper, double *F)
{
    const double *x = p->value;
    double a = x[BL_THRESHOLD], v = x[BL_DRIFT], w = x[BL_START], sv = x[BL_DRIFT_SD], sz = x[BL_START_RANGE];
    if (!(y > 0)) {
        *F = 0;
        return BL_OK;
    }
    const double *lx, *lw, *hx, *hw;
    static const double one = 1, zero = 0;
    int nl = 1, nh = 1;
    lx = hx = &zero;
    lw = hw = &one;
    if (sz > 0) {
        /* twice the density's rule: the CDF feeds quantiles, where accuracy matters more than speed */
        nl = 2 * blw_gl_nodes_start_range(sz, y / (a * a), 0.5 * sz * (fabs(v * a) + sv * sv * a * a));
        if (nl > BLW_GL_MAX) nl = BLW_GL_MAX;
        blw_gauss_legendre(nl, &lx, &lw);
    }
    if (sv > 0) nh = blw_gauss_hermite(2 * blw_gh_nodes_drift_sd(sv, a, y), &hx, &hw);
    double S = 0;
    int large = y / (a * a) >= BLW_U_SWITCH;
    for (int i = 0; i < nl; i++) {
        double wi = w + 0.5 * sz * lx[i];
        if (sv > 0 && large) {
            /* F = P - S with S by the drift-shifted survival series and P by the same quadrature as
             * bl_wiener_p_boundary, so CDF(inf) = P(boundary) exactly */
            double lS;
            bl_status s = blw_surv_direct(y, v, a, wi, sv, upper, &lS, NULL);
            if (s) return s;
            S += lw[i] * (blw_p_var(v, a, wi, sv, 0, upper) - exp(lS));
            continue;
        }
        for (int j = 0; j < nh; j++) {
            double lF;
            bl_status s = blw_log_cdf(y, v + sv * hx[j], a, wi, upper, &lF, NULL);
            if (s) return s;
            S += lw[i] * hw[j] * exp(lF);
        }
    }
    *F = S;
    return BL_OK;
}

static bl_status cdf_ddm(const bl_wiener_params *p, double rt, int upper, double *F)
{
    const double *x = p->value;
    double t0 = x[BL_NONDECISION], st = x[BL_NONDECISION_RANGE];
    if (st == 0) return cdf_decision(p, rt - t0, upper, F);
    /* (1/st) * integral of F(y) over y in [rt - t0 - st/2, rt - t0 + st/2]; F = 0 for y <= 0, so the
     * integral starts at max(lo, 0) where F is smooth (Gauss-Legendre, 48 nodes). */
    double lo = rt - t0 - 0.5 * st, hi = rt - t0 + 0.5 * st;
    if (!(hi > 0)) {
        *F = 0;
        return BL_OK;
    }
    if (lo < 0) lo = 0;
    const double *gx, *gw;
    blw_gauss_legendre(48, &gx, &gw);
    double S = 0;
    for (int i = 0; i < 48; i++) {
        double Fi;
        bl_status s = cdf_decision(p, 0.5 * (lo + hi) + 0.5 * (hi - lo) * gx[i], upper, &Fi);
        if (s) return s;
        S += gw[i] * Fi;
    }
    *F = S * (hi - lo) / st;
    return BL_OK;
}

bl_status bl_wiener_cdf(const bl_wiener_params *p, double rt, int upper, double *cdf, bl_error *err)
{
    bl_status s = bl_wiener_check(p, err);
    if (s) return s;
    if (!isfinite(rt)) return bl_error_set(err, BL_ERR_RANGE, "response time must be finite (got %g)", rt);
    if (!blw_tables_ok()) return bl_error_set(err, BL_ERR_NOMEM, "cannot build the quadrature tables");
    double F;
    if ((s = cdf_ddm(p, rt, upper, &F))) return bl_error_set(err, s, "Wiener CDF series did not converge at rt %g", rt);
    double p0 = p->value[BL_CONTAMINATION];
    if (p0 > 0) {
        double lo = p->contamination_lo, hi = p->contamination_hi;
        double c = rt <= lo ? 0 : rt >= hi ? 1 : (rt - lo) / (hi - lo);
        F = (1 - p0) * F + 0.5 * p0 * c;
    }
    *cdf = F;
    return BL_OK;
}

bl_status bl_wiener_quantile(const bl_wiener_params *p, double prob, int upper, double *rt, bl_error *err)
{
    bl_status s = bl_wiener_check(p, err);
    if (s) return s;
    if (!(prob > 0 && prob < 1))
        return bl_error_set(err, BL_ERR_RANGE, "quantile probability must lie in (0, 1) (got %g)", prob);
    double P, m;
    const char *side = upper ? "upper" : "lower";
    if ((s = bl_wiener_p_boundary(p, upper, &P, err))) return s;
    if (!(P > 1e-300))
        return bl_error_set(err, BL_ERR_NUMERIC, "the %s boundary has probability %g: no quantile", side, P);
    if ((s = bl_wiener_mean_rt(p, upper, &m, err))) return s;
    double target = prob * P;
    const double *x = p->value;
    double lo = x[BL_NONDECISION] - 0.5 * x[BL_NONDECISION_RANGE];
    if (x[BL_CONTAMINATION] > 0 && p->contamination_lo < lo) lo = p->contamination_lo;
    /* Bracket: grow hi from the mean until the CDF passes the target. */
    double hi = m > lo ? m : lo + 1, F;
    for (int i = 0;; i++) {
        if ((s = bl_wiener_cdf(p, hi, upper, &F, err))) return s;
        if (F >= target) break;
        if (i > 200) return bl_error_set(err, BL_ERR_NUMERIC, "cannot bracket the %s quantile %g", side, prob);
        lo = hi;
        hi = lo + 2 * (hi - x[BL_NONDECISION] + 0.1);
    }
    /* Safeguarded Newton: the density is the derivative of the CDF. */
    double r = 0.5 * (lo + hi);
    for (int it = 0; it < 200; it++) {
        if ((s = bl_wiener_cdf(p, r, upper, &F, err))) return s;
        double G = F - target;
        if (G < 0) lo = r;
        else hi = r;
        if (fabs(G) <= 1e-14 * P || hi - lo <= 2 * DBL_EPSILON * fabs(r)) {
            *rt = r;
            return BL_OK;
        }
        double ld;
        if ((s = bl_wiener_log_density(p, r, upper, &ld, err))) return s;
        double step = ld > -700 ? G / exp(ld) : INFINITY;
        double rn = r - step;
        r = (rn > lo && rn < hi && isfinite(rn)) ? rn : 0.5 * (lo + hi);
    }
    return bl_error_set(err, BL_ERR_NUMERIC, "the %s quantile %g did not converge", side, prob);
}
