/* Regression checks for densities and probabilities the engine once got wrong, and analytic gradients
 * against central differences for every combination of the three variability parameters (with and
 * without contaminants).
 * Reference values: mpmath 1.3 quadrature (30 digits) of the Navarro & Fuss (2009) series, over the
 * uniform nondecision time, the uniform start, or the normal drift (the drift_sd closed form of
 * Blurton, Kesselmeier & Gondan 2017, itself checked against mpmath.quad over the drift); the same
 * integrals are recomputed live by tests/reference/wiener_mpmath.py (regression_cases). */
#include "bandlink/wiener.h"
#include "engine/wiener_internal.h" /* the Gauss-Laguerre onset rule */
#include "harness.h"
#include "wiener_testutil.h"

#include <math.h>

static double dens(const bl_wiener_params *p, double rt, int up)
{
    double l = NAN;
    if (bl_wiener_log_density(p, rt, up, &l, NULL) != BL_OK) return NAN;
    return exp(l);
}

static void committed_values(void)
{
    /* a|v| = 24, RT 2.9 s: the window's CDF difference cancelled to 0 (mpmath.quad over t0') */
    bl_wiener_params p = mk(4, 6, 0.4, 0.5, 0, 0, 0.1);
    check_rel(dens(&p, 2.9, 1), 4.8155640322600486e-16, 1e-8, "a=4 v=6 nondecision_range 0.1, rt 2.9 upper (mpmath)");
    check_rel(dens(&p, 2.9, 0), 1.8179402128372853e-26, 1e-8, "a=4 v=6 nondecision_range 0.1, rt 2.9 lower (mpmath)");
    /* drift_sd with nondecision_range, window at u = t/a^2 in [0.24, 0.26] and [0.23, 0.26] (mpmath) */
    p = mk(4, 0, 0.4, 0.5, 2.5, 0, 0.3);
    check_rel(dens(&p, 4.39, 1), 0.018258525405948838, 1e-8, "a=4 sv=2.5 nondecision_range 0.3, rt 4.39 (mpmath)");
    p = mk(3, 0.8, 0.4, 0.5, 2, 0, 0.2);
    check_rel(dens(&p, 2.6, 1), 0.055672690610193381, 1e-8,
              "a=3 v=0.8 sv=2 nondecision_range 0.2, rt 2.6 upper (mpmath)");
    check_rel(dens(&p, 2.6, 0), 0.043560081052062971, 1e-8,
              "a=3 v=0.8 sv=2 nondecision_range 0.2, rt 2.6 lower (mpmath)");
    /* start_range with a|v|sz = 27 (mpmath.quad over the start) */
    p = mk(5, 6, 0.3, 0.5, 0, 0.9, 0);
    check_rel(dens(&p, 1.3, 1), 0.098709155945378883, 1e-8, "a=5 v=6 start_range 0.9, rt 1.3 (mpmath)");
    /* rare boundary with drift_sd: the integrand over the drift peaks ~9 SD out (mpmath.quad over drift) */
    p = mk(5, -10, 0.3, 0.1, 1, 0, 0);
    double P = NAN, m = NAN;
    bl_wiener_p_boundary(&p, 1, &P, NULL);
    bl_wiener_mean_rt(&p, 1, &m, NULL);
    check_rel(P, 1.7360670687263646e-22, 1e-9, "a=5 v=-10 w=0.1 sv=1: P(upper) (mpmath)");
    check_rel(m, 3.5744673336730483, 1e-9, "a=5 v=-10 w=0.1 sv=1: mean RT upper (mpmath)");
}

/* d log f / d theta against central differences, all 8 combinations of drift_sd, start_range and
 * nondecision_range, each with and without contaminants, at RTs from the onset to the slow tail. */
static void gradients_every_combination(void)
{
    double rts[] = {0.31, 0.36, 0.5, 0.8, 1.4, 2.6};
    for (int combo = 0; combo < 16; combo++) {
        double worst = 0;
        int n = 0;
        bl_wiener_params p = mk(1.3, 0.9, 0.3, 0.45, combo & 1 ? 0.9 : 0, combo & 2 ? 0.3 : 0, combo & 4 ? 0.2 : 0);
        if (combo & 8) {
            p.value[BL_CONTAMINATION] = 0.03;
            p.contamination_lo = 0.1;
            p.contamination_hi = 4;
        }
        for (int k = 0; k < 6; k++)
            for (int up = 0; up < 2; up++) {
                double g[BL_NPARAM], l;
                if (bl_wiener_log_density_grad(&p, rts[k], up, &l, g, NULL) != BL_OK || !isfinite(l)) continue;
                for (int j = 0; j < BL_NPARAM; j++) {
                    double th = p.value[j];
                    if (j >= BL_DRIFT_SD && th == 0) continue; /* one-sided at the edge of the range */
                    double h = 1e-6 * fmax(1, fabs(th));       /* truncation error ~h^2 f''' stays small at the onset */
                    bl_wiener_params pp = p, pm = p;
                    pp.value[j] = th + h;
                    pm.value[j] = th - h;
                    double lp, lm;
                    bl_wiener_log_density(&pp, rts[k], up, &lp, NULL);
                    bl_wiener_log_density(&pm, rts[k], up, &lm, NULL);
                    double e = fabs((lp - lm) / (2 * h) - g[j]) / fmax(1, fabs(g[j]));
                    if (e > 1e-5)
                        printf("  combo %d rt %g %s %s: analytic %.10g, differences %.10g\n", combo, rts[k],
                               up ? "upper" : "lower", bl_param_name(j), g[j], (lp - lm) / (2 * h));
                    if (e > worst) worst = e;
                    n++;
                }
            }
        check_true(worst < 1e-5,
                   "gradient (drift_sd %g, start_range %g, nondecision_range %g, contamination %g): "
                   "%d partials vs central differences, worst %.2g",
                   p.value[BL_DRIFT_SD], p.value[BL_START_RANGE], p.value[BL_NONDECISION_RANGE],
                   p.value[BL_CONTAMINATION], n, worst);
    }
}

/* The onset part [0, m], m = z^2/20, by Gauss-Laguerre in x = 1/t: 8 nodes against 16 (GSL's fixed
 * Laguerre rule, gsl_integration_fixed_laguerre) over a grid of thresholds, drifts, starts, drift_sd and
 * both boundaries. The two rules agree only if both have converged. */
static void onset_laguerre(void)
{
    double worst = 0;
    double as[] = {0.5, 1, 1.5, 3}, vs[] = {-6, -2, 0, 2, 6}, ws[] = {0.05, 0.2, 0.5, 0.8}, svs[] = {0, 1, 3};
    for (int ia = 0; ia < 4; ia++)
        for (int iv = 0; iv < 5; iv++)
            for (int iw = 0; iw < 4; iw++)
                for (int is = 0; is < 3; is++)
                    for (int up = 0; up < 2; up++) {
                        double a = as[ia], v = vs[iv], w = ws[iw], sv = svs[is];
                        double z = up ? a * (1 - w) : a * w, m = 0.05 * z * z, beta = 0.5 * z * z, r[2];
                        for (int k = 0; k < 2; k++) {
                            const double *y, *lw;
                            int n = blw_gauss_laguerre(k, &y, &lw);
                            double S = 0;
                            for (int l = 0; l < n; l++) {
                                double x = 1 / m + y[l] / beta;
                                S += exp(lw[l] + y[l] + blw_log_dens(1 / x, v, a, w, sv, up, NULL) - 2 * log(x) -
                                         log(beta));
                            }
                            r[k] = S;
                        }
                        double e = fabs(r[1] / r[0] - 1);
                        if (e > worst) worst = e;
                    }
    check_true(worst < 1e-8, "onset by Gauss-Laguerre: 8 nodes vs 16, 480 cases, worst relative difference %.2g",
               worst);
}

int main(void)
{
    onset_laguerre();
    committed_values();
    gradients_every_combination();
    return harness_summary();
}
