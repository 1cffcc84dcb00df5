/* Sampler checks: Kolmogorov-Smirnov test of the signed response time against the engine's CDF,
 * binomial check of the choice share against the closed-form probability, sample mean against the
 * closed-form mean, determinism for a fixed seed.
 * Signed-time KS idea: map lower responses to -RT and upper to +RT; its CDF is
 * G(x) = P_lo - F_lo(-x) (x < 0), P_lo + F_up(x) (x >= 0) (numerics notes, section 5).
 * KS p-value: Kolmogorov limiting distribution with Stephens' (1970, J. R. Stat. Soc. B 32:115-122)
 * small-sample correction lambda = (sqrt(n) + 0.12 + 0.11/sqrt(n)) D. */
#include "engine/wiener_sample.h"
#include "bandlink/wiener.h"
#include "harness.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_rng.h>
#include <gsl/gsl_sort.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

static double ks_p(double D, size_t n)
{
    double sn = sqrt((double)n), lam = (sn + 0.12 + 0.11 / sn) * D, s = 0;
    for (int k = 1; k < 200; k++) s += 2 * ((k % 2) ? 1 : -1) * exp(-2.0 * k * k * lam * lam);
    return s < 0 ? 0 : s > 1 ? 1 : s;
}

static double G(const bl_wiener_params *p, double x, double plo)
{
    double F = 0;
    if (x < 0) {
        bl_wiener_cdf(p, -x, 0, &F, NULL);
        return plo - F;
    }
    bl_wiener_cdf(p, x, 1, &F, NULL);
    return plo + F;
}

static void run(const char *label, bl_wiener_params p, size_t n, unsigned long seed)
{
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, seed);
    double *x = malloc(n * sizeof *x);
    size_t nup = 0;
    double sum_up = 0, sum_lo = 0, ss_up = 0, ss_lo = 0;
    int ok = 1;
    for (size_t i = 0; i < n; i++) {
        int up;
        double rt;
        if (bl_wiener_sample(&p, r, &up, &rt, NULL) != BL_OK || !isfinite(rt)) ok = 0;
        x[i] = up ? rt : -rt;
        nup += up != 0;
        if (up) {
            sum_up += rt;
            ss_up += rt * rt;
        } else {
            sum_lo += rt;
            ss_lo += rt * rt;
        }
    }
    check_true(ok, "%s: %zu samples drawn, all finite", label, n);
    gsl_sort(x, 1, n);
    double pu;
    bl_wiener_p_upper(&p, &pu, NULL);
    double plo = 1 - pu, D = 0;
    for (size_t i = 0; i < n; i++) {
        double g = G(&p, x[i], plo);
        double d1 = fabs((double)(i + 1) / n - g), d2 = fabs(g - (double)i / n);
        if (d1 > D) D = d1;
        if (d2 > D) D = d2;
    }
    double pv = ks_p(D, n);
    /* Fixed seeds: deterministic; a correct sampler gives a p-value above 0.001 (a wrong choice share,
     * shifted or mis-shaped RTs give p ~ 0 at these sizes, see numerics notes 5 for Euler's D). */
    check_true(pv > 1e-3, "%s: signed-time KS D = %.4f, p = %.3f (n = %zu)", label, D, pv, n);
    /* choice share: binomial z-score against the closed form */
    double z = ((double)nup - n * pu) / sqrt(n * pu * (1 - pu));
    check_true(fabs(z) < 4, "%s: upper share %.4f vs closed form %.4f (z = %.2f)", label, (double)nup / n, pu, z);
    /* sample means vs the closed-form conditional means, within 4 standard errors */
    double mu;
    size_t nlo = n - nup;
    if (nup > 100 && bl_wiener_mean_rt(&p, 1, &mu, NULL) == BL_OK) {
        double m = sum_up / nup, se = sqrt((ss_up / nup - m * m) / nup);
        check_abs(m, mu, 4 * se, "%s: mean upper RT vs closed form (4 SE)", label);
    }
    if (nlo > 100 && bl_wiener_mean_rt(&p, 0, &mu, NULL) == BL_OK) {
        double m = sum_lo / nlo, se = sqrt((ss_lo / nlo - m * m) / nlo);
        check_abs(m, mu, 4 * se, "%s: mean lower RT vs closed form (4 SE)", label);
    }
    free(x);
    gsl_rng_free(r);
}

static bl_wiener_params mk(double a, double v, double t0, double w)
{
    bl_wiener_params p;
    bl_wiener_params_default(&p);
    p.value[BL_THRESHOLD] = a;
    p.value[BL_DRIFT] = v;
    p.value[BL_NONDECISION] = t0;
    p.value[BL_START] = w;
    return p;
}

HARNESS_CASE(fixed_parameters)
{
    run("v=1 a=1.2 w=0.4 (numerics 5 example)", mk(1.2, 1, 0, 0.4), 20000, 1);
    run("v=-2 a=2 w=0.6 t0=0.3", mk(2, -2, 0.3, 0.6), 20000, 2);
    run("v=0 a=0.5 w=0.5", mk(0.5, 0, 0.2, 0.5), 20000, 3);
    run("v=4 a=2.5 w=0.15 (rare fast errors)", mk(2.5, 4, 0.25, 0.15), 20000, 4);
    run("v=0.5 a=4 w=0.95 (slow, biased)", mk(4, 0.5, 0.1, 0.95), 10000, 5);
    run("v=-0.4 a=1.3 w=1e-4 (start next to the lower boundary)", mk(1.3, -0.4, 0.2, 1e-4), 10000, 9);
    run("v=0.4 a=1.3 w=0.9999 (start next to the upper boundary)", mk(1.3, 0.4, 0.2, 0.9999), 10000, 10);
}

HARNESS_CASE(variability_parameters)
{
    bl_wiener_params p = mk(1.5, 1.2, 0.3, 0.45);
    p.value[BL_DRIFT_SD] = 0.8;
    run("drift_sd 0.8", p, 4000, 6);
    p = mk(1.5, 1.2, 0.3, 0.45);
    p.value[BL_START_RANGE] = 0.4;
    p.value[BL_NONDECISION_RANGE] = 0.2;
    run("start_range 0.4 + nondecision_range 0.2", p, 3000, 7);
    p = mk(1.5, 1.2, 0.3, 0.45);
    p.value[BL_CONTAMINATION] = 0.05;
    p.contamination_lo = 0.2;
    p.contamination_hi = 2.5;
    run("contamination 0.05 on [0.2, 2.5]", p, 4000, 8);
}

HARNESS_CASE(same_seed_same_draws)
{
    bl_wiener_params p = mk(1.5, 1.2, 0.3, 0.45);
    p.value[BL_CONTAMINATION] = 0.05;
    p.contamination_lo = 0.2;
    p.contamination_hi = 2.5;
    /* same seed -> same draws */
    gsl_rng *r1 = gsl_rng_alloc(gsl_rng_mt19937), *r2 = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r1, 42);
    gsl_rng_set(r2, 42);
    p.value[BL_DRIFT_SD] = 0.5;
    int same = 1;
    for (int i = 0; i < 500; i++) {
        int u1, u2;
        double t1, t2;
        bl_wiener_sample(&p, r1, &u1, &t1, NULL);
        bl_wiener_sample(&p, r2, &u2, &t2, NULL);
        same &= u1 == u2 && memcmp(&t1, &t2, sizeof t1) == 0;
    }
    check_true(same, "same seed gives bit-identical draws");
    gsl_rng_free(r1);
    gsl_rng_free(r2);
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(fixed_parameters),
        HARNESS_ENTRY(variability_parameters),
        HARNESS_ENTRY(same_seed_same_draws),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
