/* Slow statistical check of the sampler: over 200 fixed seeds, the signed-time Kolmogorov-Smirnov
 * p-values (numerics notes 5) must look uniform (a second KS test against U(0,1)), and the pooled
 * upper-boundary share must match the closed form (binomial z-test). A sampler with a small bias
 * passes single tests but shifts this p-value distribution toward 0.
 * KS p-value: Kolmogorov limiting distribution with Stephens' (1970) correction. */
#include "engine/wiener_sample.h"
#include "bandlink/wiener.h"
#include "harness.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_rng.h>
#include <gsl/gsl_sort.h>
#include <math.h>
#include <stdlib.h>

static double ks_p(double D, size_t n)
{
    double sn = sqrt((double)n), lam = (sn + 0.12 + 0.11 / sn) * D, s = 0;
    for (int k = 1; k < 200; k++) s += 2 * ((k % 2) ? 1 : -1) * exp(-2.0 * k * k * lam * lam);
    return s < 0 ? 0 : s > 1 ? 1 : s;
}

static double ks_D(double *x, size_t n, double (*G)(double, void *), void *ctx)
{
    gsl_sort(x, 1, n);
    double D = 0;
    for (size_t i = 0; i < n; i++) {
        double g = G(x[i], ctx);
        D = fmax(D, fmax(fabs((double)(i + 1) / n - g), fabs(g - (double)i / n)));
    }
    return D;
}

typedef struct {
    bl_wiener_params p;
    double plo;
} gctx;

static double G_signed(double x, void *vp)
{
    gctx *c = vp;
    double F = 0;
    if (x < 0) {
        bl_wiener_cdf(&c->p, -x, 0, &F, NULL);
        return c->plo - F;
    }
    bl_wiener_cdf(&c->p, x, 1, &F, NULL);
    return c->plo + F;
}

static double G_unif(double x, void *vp)
{
    (void)vp;
    return x < 0 ? 0 : x > 1 ? 1 : x;
}

static void run(const char *label, bl_wiener_params p)
{
    enum { SEEDS = 200, N = 2000 };
    gctx c = {p, 0};
    double pu;
    bl_wiener_p_upper(&p, &pu, NULL);
    c.plo = 1 - pu;
    double pv[SEEDS], x[N];
    size_t nup = 0;
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    for (int s = 0; s < SEEDS; s++) {
        gsl_rng_set(r, 1000 + s);
        for (int i = 0; i < N; i++) {
            int up;
            double rt;
            bl_wiener_sample(&p, r, &up, &rt, NULL);
            x[i] = up ? rt : -rt;
            nup += up != 0;
        }
        pv[s] = ks_p(ks_D(x, N, G_signed, &c), N);
    }
    gsl_rng_free(r);
    double D = ks_D(pv, SEEDS, G_unif, NULL), p2 = ks_p(D, SEEDS);
    check_true(p2 > 1e-3, "%s: %d per-seed KS p-values are uniform (KS D = %.3f, p = %.3f)", label, SEEDS, D, p2);
    double n = (double)SEEDS * N, z = (nup - n * pu) / sqrt(n * pu * (1 - pu));
    check_true(fabs(z) < 4, "%s: pooled upper share %.5f vs %.5f (z = %.2f)", label, nup / n, pu, z);
}

HARNESS_CASE(positive_drift)
{
    bl_wiener_params p;
    bl_wiener_params_default(&p);
    p.value[BL_THRESHOLD] = 1.2;
    p.value[BL_DRIFT] = 1;
    p.value[BL_START] = 0.4;
    p.value[BL_NONDECISION] = 0.3;
    run("v=1 a=1.2 w=0.4", p);
}

HARNESS_CASE(negative_drift_wide_threshold)
{
    bl_wiener_params p;
    bl_wiener_params_default(&p);
    p.value[BL_NONDECISION] = 0.3;
    p.value[BL_THRESHOLD] = 2.5;
    p.value[BL_DRIFT] = -3;
    p.value[BL_START] = 0.7;
    run("v=-3 a=2.5 w=0.7", p);
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(positive_drift),
        HARNESS_ENTRY(negative_drift_wide_threshold),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
