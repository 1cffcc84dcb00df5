/* The nondecision_range window integral on its fast paths (docs/methods.md, "Nondecision windows"):
 * - windows reaching the onset or below a quarter of their top end: start averages of CDF differences,
 *   the small-time CDF series averaged over drift_sd in closed form;
 * - windows in small time ending above u = BLW_TENSOR_U_MIN: tensor sums of the large-time series with
 *   more than five terms, the rest one panel with the start average in closed form.
 * Reference: the density with drift_sd alone (closed form of Blurton, Kesselmeier & Gondan 2017,
 * J. Math. Psych. 76:7-12; checked against mpmath by tests/reference/wiener_mpmath.py) integrated over
 * the uniform start and the uniform nondecision time by GSL adaptive quadrature (gsl_integration_qags
 * nested, relative tolerance 1e-12), i.e. the definition of start_range and nondecision_range
 * (Ratcliff & Tuerlinckx 2002, Psychon. Bull. Rev. 9:438-481). Tolerance 1e-9 relative.
 * Gradients: every parameter against central finite differences of the log-density (step 1e-5 of the
 * parameter's scale; agreement 1e-5 relative to max(1, |derivative|)). */
#include "bandlink/wiener.h"
#include "harness.h"
#include "wiener_testutil.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_integration.h>
#include <math.h>

typedef struct {
    bl_wiener_params p; /* the full parameters */
    double rt, t0p;     /* response time; nondecision value of the outer integral */
    int up;
} wctx;

/* density with drift_sd only at start w' (sz = st = 0) */
static double f_start(double wp, void *vp)
{
    wctx *c = vp;
    bl_wiener_params q = c->p;
    q.value[BL_START] = wp;
    q.value[BL_START_RANGE] = 0;
    q.value[BL_NONDECISION_RANGE] = 0;
    q.value[BL_NONDECISION] = c->t0p;
    double l;
    if (bl_wiener_log_density(&q, c->rt, c->up, &l, NULL) != BL_OK) return NAN;
    return exp(l);
}

/* start average at nondecision t0' */
static double f_t0(double t0p, void *vp)
{
    wctx *c = vp;
    c->t0p = t0p;
    double sz = c->p.value[BL_START_RANGE], w = c->p.value[BL_START];
    if (sz == 0) return f_start(w, c);
    gsl_integration_workspace *ws = gsl_integration_workspace_alloc(500);
    gsl_function F = {f_start, c};
    double r = NAN, e;
    if (ws && gsl_integration_qags(&F, w - sz / 2, w + sz / 2, 0, 1e-12, 500, ws, &r, &e)) r = NAN;
    gsl_integration_workspace_free(ws);
    return r / sz;
}

static double reference(const bl_wiener_params *p, double rt, int up)
{
    wctx c = {*p, rt, 0, up};
    double t0 = p->value[BL_NONDECISION], st = p->value[BL_NONDECISION_RANGE];
    double lo = t0 - st / 2, hi = fmin(t0 + st / 2, rt);
    if (!(hi > lo)) return 0;
    gsl_integration_workspace *ws = gsl_integration_workspace_alloc(1000);
    gsl_function F = {f_t0, &c};
    double r = NAN, e;
    /* the density's onset (t0' -> rt) is a breakpoint of the smoothness: split the range there */
    double cut = rt - 0.05 * p->value[BL_THRESHOLD] * p->value[BL_THRESHOLD];
    double total = 0;
    if (cut > lo && cut < hi) {
        if (gsl_integration_qags(&F, lo, cut, 0, 1e-12, 1000, ws, &r, &e)) r = NAN;
        total += r;
        lo = cut;
    }
    if (gsl_integration_qags(&F, lo, hi, 0, 1e-12, 1000, ws, &r, &e)) r = NAN;
    total += r;
    gsl_integration_workspace_free(ws);
    return total / st;
}

/* value against the GSL reference, the gradient against finite differences, value = gradient's value */
static void check_case(const char *name, bl_wiener_params p, double rt)
{
    for (int up = 0; up < 2; up++) {
        double l, lg, g[BL_NPARAM];
        if (!check_true(bl_wiener_log_density(&p, rt, up, &l, NULL) == BL_OK, "%s: density", name)) return;
        if (!check_true(bl_wiener_log_density_grad(&p, rt, up, &lg, g, NULL) == BL_OK, "%s: gradient", name)) return;
        double ref = reference(&p, rt, up);
        /* GSL qags over the definition of the variability (see the header) */
        check_rel(exp(l), ref, 1e-9, "%s (%s): density vs GSL quadrature over start and nondecision", name,
                  up ? "upper" : "lower");
        check_rel(lg, l, 1e-10, "%s (%s): gradient call returns the same log-density (to the series tolerance)", name, up ? "upper" : "lower");
        static const int idx[] = {BL_THRESHOLD, BL_DRIFT, BL_NONDECISION, BL_START,
                                  BL_DRIFT_SD,  BL_START_RANGE, BL_NONDECISION_RANGE};
        for (int k = 0; k < 7; k++) {
            int i = idx[k];
            if ((i == BL_DRIFT_SD && p.value[i] == 0) || (i == BL_START_RANGE && p.value[i] == 0)) continue;
            double x = p.value[i], h = 1e-5 * (i == BL_DRIFT ? 1 : fmax(fabs(x), 0.1));
            bl_wiener_params pp = p, pm = p;
            pp.value[i] = x + h;
            pm.value[i] = x - h;
            double lp, lm;
            if (bl_wiener_log_density(&pp, rt, up, &lp, NULL) || bl_wiener_log_density(&pm, rt, up, &lm, NULL)) continue;
            double fd = (lp - lm) / (2 * h);
            /* central difference, truncation O(h^2) */
            check_abs(g[i], fd, 1e-5 * fmax(1, fabs(fd)), "%s (%s): d/d%s analytic vs finite difference", name,
                      up ? "upper" : "lower", bl_param_name(i));
        }
    }
}

HARNESS_CASE(onset_cdf_path)
{
    /* windows reaching the onset (rt - nondecision < range/2): CDF averages at the top end only */
    check_case("all three, onset", mk(1.2, 1, 0.25, 0.45, 0.8, 0.3, 0.15), 0.30);
    check_case("drift_sd + nondecision_range, onset", mk(1.2, 1, 0.25, 0.45, 0.8, 0, 0.15), 0.29);
    check_case("start_range + nondecision_range, onset", mk(0.8, -2, 0.3, 0.5, 0, 0.6, 0.2), 0.27);
    check_case("start end 0.01 from a boundary, onset", mk(1.5, 0.5, 0.3, 0.3, 1.5, 0.58, 0.2), 0.35);
}

HARNESS_CASE(near_onset_cdf_path)
{
    /* lower end of the window below a quarter of its top: CDF differences */
    check_case("all three, lo = 0.045", mk(1.2, 1, 0.25, 0.45, 0.8, 0.3, 0.15), 0.37);
    check_case("all three, threshold 2.1, wide window", mk(2.1, 0.12, 0.29, 0.29, 0.5, 0.46, 0.37), 0.48);
    check_case("large drift x threshold", mk(2.73, 8.68, 0.49, 0.253, 0, 0.27, 0.70), 0.959);
    check_case("drift_sd 3", mk(1.0, -1, 0.3, 0.6, 3, 0.2, 0.25), 0.33);
}

HARNESS_CASE(extended_tensor_and_panel)
{
    /* windows in small time above u = BLW_TENSOR_U_MIN: tensor sums with more terms, one closed-form panel */
    check_case("all three, lo = 0.125", mk(1.2, 1, 0.25, 0.45, 0.8, 0.3, 0.15), 0.45);
    check_case("all three, window across u = 1/4", mk(1.2, 1, 0.25, 0.45, 0.8, 0.3, 0.15), 0.58);
    check_case("drift_sd 2.5 near u = 1/4, threshold 4", mk(4, 0, 0.4, 0.5, 2.5, 0.2, 0.3), 4.39);
    check_case("drift_sd + nondecision_range near u = 1/4", mk(4, 0, 0.4, 0.5, 2.5, 0, 0.3), 4.39);
    check_case("start_range + nondecision_range, threshold 0.5", mk(0.5, 3, 0.2, 0.4, 0, 0.4, 0.08), 0.26);
}

/* Narrow windows: the derivatives in nondecision_range and nondecision as the window shrinks to 0. The
 * window average of f over [c - st/2, c + st/2] is f(c) + st^2 f''(c)/24 + O(st^4) (the midpoint rule's
 * error term, e.g. Davis & Rabinowitz, Methods of Numerical Integration, 1984 -- from memory), so
 * ln avg(st) = ln f(c) + st^2 k/24 + O(st^4), k = f''/f, and d ln avg / d st = st k / 12. k is measured
 * here from the log-density VALUES alone at st = 0.02 c and 0.04 c (the value path is the one checked
 * against quadrature above); the analytic derivative must follow st k / 12 for tiny st -- before the
 * fix it carried a 1e-10 / st rounding error (1.4e-3 at st = 6.3e-8, enough to stall a fit at st = 0) --
 * and the nondecision derivative must equal the st = 0 one. */
HARNESS_CASE(narrow_window_derivatives)
{
    const double rts[] = {0.35, 0.45, 0.7, 1.2, 2.5};
    for (int up = 0; up < 2; up++)
        for (size_t r = 0; r < sizeof rts / sizeof *rts; r++) {
            bl_wiener_params p = mk(1.7726, 1.186, 0.28321, 0.5, 0.637, 0.527, 0);
            double c = rts[r] - 0.28321, l1, l2, l0, g0[BL_NPARAM];
            p.value[BL_NONDECISION_RANGE] = 0;
            bl_wiener_log_density_grad(&p, rts[r], up, &l0, g0, NULL);
            p.value[BL_NONDECISION_RANGE] = 0.02 * c;
            bl_wiener_log_density(&p, rts[r], up, &l1, NULL);
            p.value[BL_NONDECISION_RANGE] = 0.04 * c;
            bl_wiener_log_density(&p, rts[r], up, &l2, NULL);
            /* ln avg = ln f + st^2 k/24 + e st^4: two widths give k (the st^4 term is 1/16 of it at 0.02 c) */
            double k = 24 * (16 * (l1 - l0) - (l2 - l0)) / (12 * (0.02 * c) * (0.02 * c));
            const double sts[] = {6.3e-8, 1e-6, 1e-5 * c, 0.999e-3 * c, 1.001e-3 * c};
            for (size_t s = 0; s < sizeof sts / sizeof *sts; s++) {
                double ld, g[BL_NPARAM];
                p.value[BL_NONDECISION_RANGE] = sts[s];
                bl_wiener_log_density_grad(&p, rts[r], up, &ld, g, NULL);
                double want = sts[s] * k / 12;
                check_abs(g[BL_NONDECISION_RANGE], want, 2e-3 * fabs(want) + 1e-9,
                          "up %d rt %.2f st %.3g: d/d nondecision_range = st k / 12", up, rts[r], sts[s]);
                check_rel(g[BL_NONDECISION], g0[BL_NONDECISION], 1e-4,
                          "up %d rt %.2f st %.3g: d/d nondecision = its st = 0 value", up, rts[r], sts[s]);
            }
        }
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(onset_cdf_path),
        HARNESS_ENTRY(near_onset_cdf_path),
        HARNESS_ENTRY(extended_tensor_and_panel),
        HARNESS_ENTRY(narrow_window_derivatives),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
