/* The start average of the small-time density in closed form (blw_start_window_small; docs/methods.md,
 * "start_range in small time") against GSL's adaptive Gauss-Kronrod integration (gsl_integration_qag,
 * 61-point rule, relative tolerance 1e-12) of the engine's plain density over the start, on random
 * points with thresholds 0.3-5, drifts -10..10, drift_sd 0-3, start ranges 0.02-0.9, both boundaries
 * and u = t/a^2 from 0.002 to 0.25; its derivatives against central differences of that GSL integral. */
#include "engine/wiener_internal.h"
#include "harness.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_integration.h>
#include <gsl/gsl_rng.h>
#include <math.h>

typedef struct {
    double t, v, a, sv, lref;
    int upper;
} dens_args;

/* the plain density over the start, scaled by e^-lref so that qag's absolute tolerance never decides */
static double integrand(double w, void *p)
{
    const dens_args *d = p;
    return exp(blw_log_dens(d->t, d->v, d->a, w, d->sv, d->upper, NULL) - d->lref);
}

/* log of (1/sz) int_{w - sz/2}^{w + sz/2} f(t | v, a, w', sv) dw' by GSL qag */
static double gsl_log_avg(gsl_integration_workspace *ws, double t, double v, double a, double w, double sv, double sz,
                          int upper)
{
    dens_args d = {t, v, a, sv, -INFINITY, upper};
    for (int i = 0; i <= 8; i++) /* the scale: the largest density on a coarse grid over the range */
        d.lref = fmax(d.lref, blw_log_dens(t, v, a, w - 0.5 * sz + sz * i / 8.0, sv, upper, NULL));
    gsl_function F = {integrand, &d};
    double r, e;
    if (gsl_integration_qag(&F, w - 0.5 * sz, w + 0.5 * sz, 0, 1e-12, 2000, GSL_INTEG_GAUSS61, ws, &r, &e) || !(r > 0))
        return NAN;
    return log(r / sz) + d.lref;
}

/* the closed form, value and (g != NULL) d log / d(a, v, w, sv, sz, t) */
static double closed_log_avg(double t, double v, double a, double w, double sv, double sz, int upper, double *g)
{
    blw_acc acc = {-INFINITY, 0, {0}, g != NULL};
    if (!blw_start_window_small(t, v, a, w, sv, sz, upper, 1.0, 0.0, &acc)) return NAN;
    if (g)
        for (int k = 0; k < 6; k++) g[k] = acc.G[k] / acc.S;
    return acc.mx + log(acc.S);
}

HARNESS_CASE(value_and_gradient)
{
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_integration_workspace *ws = gsl_integration_workspace_alloc(2000);
    gsl_rng_set(rng, 11);
    double worst = 0, worst_g = 0;
    int n = 0, skipped = 0;
    for (int it = 0; it < 300; it++) {
        double a = 0.3 + 4.7 * gsl_rng_uniform(rng), v = -10 + 20 * gsl_rng_uniform(rng);
        double sv = gsl_rng_uniform(rng) < 0.3 ? 0 : 3 * gsl_rng_uniform(rng);
        double sz = 0.02 + 0.88 * gsl_rng_uniform(rng);
        double w = 0.5 * sz + 0.003 + (1 - sz - 0.006) * gsl_rng_uniform(rng);
        double u = 0.002 + 0.248 * gsl_rng_uniform(rng), t = u * a * a;
        int upper = gsl_rng_uniform(rng) < 0.5;
        double g[6];
        double lc = closed_log_avg(t, v, a, w, sv, sz, upper, g), lq = gsl_log_avg(ws, t, v, a, w, sv, sz, upper);
        if (!isfinite(lq) || lq < -700) {
            skipped++; /* the density underflows: nothing to compare */
            continue;
        }
        n++;
        worst = fmax(worst, fabs(expm1(lc - lq)));
        /* central differences of the GSL integral in a, v, w, sv, sz, t */
        double x[6] = {a, v, w, sv, sz, t};
        for (int k = 0; k < 6; k++) {
            if (k == 3 && sv == 0) continue; /* drift_sd enters through sv^2: derivative 0 at 0 */
            double h = 1e-5 * fmax(fabs(x[k]), 0.1), xp[6], xm[6];
            for (int j = 0; j < 6; j++) xp[j] = xm[j] = x[j];
            xp[k] += h;
            xm[k] -= h;
            double lp = gsl_log_avg(ws, xp[5], xp[1], xp[0], xp[2], xp[3], xp[4], upper);
            double lm = gsl_log_avg(ws, xm[5], xm[1], xm[0], xm[2], xm[3], xm[4], upper);
            double fd = (lp - lm) / (2 * h);
            worst_g = fmax(worst_g, fabs(g[k] - fd) / fmax(1, fabs(fd)));
        }
    }
    check_true(n >= 250, "%d points compared (%d skipped where the density underflows)", n, skipped);
    check_true(worst <= 1e-9, "closed form = GSL qag over the start: max rel diff %.2g <= 1e-9", worst);
    check_true(worst_g <= 1e-5, "derivatives = central differences of the GSL integral: max diff %.2g <= 1e-5",
               worst_g);
    gsl_integration_workspace_free(ws);
    gsl_rng_free(rng);
}

/* A range end within 1e-3 of a boundary is declined (the images cancel there; the caller sums start nodes). */
HARNESS_CASE(declines_near_boundary)
{
    blw_acc acc = {-INFINITY, 0, {0}, 0};
    check_int(blw_start_window_small(0.1, 1, 1, 0.8, 0, 0.3995, 0, 1, 0, &acc), 0, "range reaching 0.99975: declined");
    check_int(blw_start_window_small(0.1, 1, 1, 0.5, 0, 0.3, 0, 1, 0, &acc), 1, "range 0.35-0.65: closed form");
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {HARNESS_ENTRY(value_and_gradient), HARNESS_ENTRY(declines_near_boundary)};
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
