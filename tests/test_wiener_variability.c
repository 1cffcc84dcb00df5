/* Across-trial variability, contaminants, CDF/quantiles with variability, and the full-path gradient.
 * Outside references: GSL's Gauss-Legendre tables (gsl_integration_glfixed) and adaptive quadrature
 * (gsl_integration_qags/qagi) applied to the plain density; the uniform-mixture contaminant model of
 * Ratcliff & Tuerlinckx (2002, Psychon. Bull. Rev. 9:438-481); central finite differences. */
#include "bandlink/wiener.h"
#include "engine/wiener_internal.h" /* the node-count rule, to check it against 2n */
#include "harness.h"
#include "wiener_testutil.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_integration.h>
#include <math.h>
#include <pthread.h>
#include <string.h>

static double ld(const bl_wiener_params *p, double rt, int up)
{
    double x = NAN;
    if (bl_wiener_log_density(p, rt, up, &x, NULL) != BL_OK) return NAN;
    return x;
}

/* start_range: the engine's node rule vs a 96-node Gauss-Legendre reference from GSL (1e-6 relative,
 * the target), and against 2n nodes through the public density with half the range twice. */
HARNESS_CASE(start_range)
{
    gsl_integration_glfixed_table *tab = gsl_integration_glfixed_table_alloc(96);
    double worst = 0;
    int n = 0;
    double as[] = {0.6, 1.2, 2.5}, vs[] = {-2, 0, 1.5}, ws[] = {0.35, 0.5, 0.6}, szs[] = {0.1, 0.3, 0.6},
           us[] = {0.005, 0.02, 0.1, 0.3, 1, 3};
    double sts[] = {0, 0.15, 0.4};
    for (int ist = 0; ist < 3; ist++)
        for (int ia = 0; ia < 3; ia++)
            for (int iv = 0; iv < 3; iv++)
                for (int iw = 0; iw < 3; iw++)
                    for (int is = 0; is < 3; is++)
                        for (int iu = 0; iu < 6; iu++)
                            for (int up = 0; up < 2; up++) {
                                double a = as[ia], w = ws[iw], sz = szs[is], t = us[iu] * a * a;
                                if (w - sz / 2 <= 0 || w + sz / 2 >= 1) continue;
                                /* with nondecision_range the same rule is applied to the window's ends */
                                bl_wiener_params p = mk(a, vs[iv], 0.3, w, 0, sz, sts[ist]), q = p;
                                q.value[BL_START_RANGE] = 0;
                                double ref = 0;
                                for (size_t i = 0; i < 96; i++) {
                                    double xi, wi;
                                    gsl_integration_glfixed_point(w - sz / 2, w + sz / 2, i, &xi, &wi, tab);
                                    q.value[BL_START] = xi;
                                    ref += wi * exp(ld(&q, 0.3 + t, up));
                                }
                                ref /= sz;
                                if (!(ref > 1e-280)) continue;
                                double e = fabs(exp(ld(&p, 0.3 + t, up)) - ref) / ref;
                                if (e > worst) worst = e;
                                n++;
                            }
    gsl_integration_glfixed_table_free(tab);
    check_true(worst <= 1e-6,
               "start_range (nondecision_range 0, 0.15, 0.4): node rule vs 96-node GSL Gauss-Legendre, %d points, max "
               "rel err %.2g <= 1e-6",
               n, worst);
}

/* The node-count rule n(start_range, u) against 2n nodes (numerics notes 6.7), both with GSL's tables,
 * and the engine's density against the 2n-node sum: in large time the engine sums the n-node rule, in
 * small time it integrates over the start in closed form (docs/methods.md), so both must agree with the
 * more accurate 2n-node sum to the rule's accuracy. */
static double gl_sum(size_t n, const bl_wiener_params *q0, double w, double sz, double rt, int up)
{
    gsl_integration_glfixed_table *tab = gsl_integration_glfixed_table_alloc(n);
    bl_wiener_params q = *q0;
    double s = 0;
    for (size_t i = 0; i < n; i++) {
        double xi, wi;
        gsl_integration_glfixed_point(w - sz / 2, w + sz / 2, i, &xi, &wi, tab);
        q.value[BL_START] = xi;
        s += wi * exp(ld(&q, rt, up));
    }
    gsl_integration_glfixed_table_free(tab);
    return s / sz;
}

HARNESS_CASE(start_range_2n)
{
    double worst_2n = 0, worst_engine = 0;
    int n = 0;
    double as[] = {0.8, 1.5, 2.5}, vs[] = {-2, 0, 2}, szs[] = {0.1, 0.3, 0.6}, ts[] = {0.02, 0.05, 0.15, 0.3, 0.6, 1.2};
    for (int ia = 0; ia < 3; ia++)
        for (int iv = 0; iv < 3; iv++)
            for (int is = 0; is < 3; is++)
                for (int it = 0; it < 6; it++) {
                    double a = as[ia], sz = szs[is], t = ts[it];
                    bl_wiener_params q = mk(a, vs[iv], 0.3, 0.5, 0, 0, 0), p = q;
                    p.value[BL_START_RANGE] = sz;
                    size_t nr = (size_t)blw_gl_nodes_start_range(sz, t / (a * a), 0.5 * sz * fabs(vs[iv] * a));
                    double f1 = gl_sum(nr, &q, 0.5, sz, 0.3 + t, 0), f2 = gl_sum(2 * nr, &q, 0.5, sz, 0.3 + t, 0);
                    if (!(f2 > 1e-280)) continue;
                    worst_2n = fmax(worst_2n, fabs(f1 - f2) / f2);
                    worst_engine = fmax(worst_engine, fabs(exp(ld(&p, 0.3 + t, 0)) - f2) / f2);
                    n++;
                }
    /* grid of the numerics notes' node table (a in {0.8, 1.5, 2.5}, v in {-2, 0, 2}, w = 0.5) */
    check_true(worst_2n <= 1e-6, "start_range rule n vs 2n nodes over %d points: max rel diff %.2g <= 1e-6", n,
               worst_2n);
    check_true(worst_engine <= 1e-9, "the engine's start_range density = the 2n-node sum (max rel diff %.2g <= 1e-9)",
               worst_engine);
}

/* nondecision_range: exact CDF difference vs GSL adaptive integration of the plain density over t0'. */
typedef struct {
    bl_wiener_params p;
    double rt;
    int up;
} tctx;

static double over_t0(double t0, void *vp)
{
    tctx *c = vp;
    bl_wiener_params q = c->p;
    q.value[BL_NONDECISION] = t0;
    q.value[BL_NONDECISION_RANGE] = 0;
    return exp(ld(&q, c->rt, c->up));
}

HARNESS_CASE(nondecision_range)
{
    gsl_integration_workspace *ws = gsl_integration_workspace_alloc(1000);
    static const double set[][6] = {{1.2, 1, 0.3, 0.45, 0.2, 0},
                                    {1.2, 1, 0.3, 0.45, 0.2, 0.8},
                                    {2, -1, 0.4, 0.6, 0.3, 0},
                                    {0.8, 2, 0.25, 0.5, 0.1, 1.5},
                                    {3, 0.5, 0.5, 0.3, 0.6, 0}};
    double rts[] = {0.22, 0.35, 0.5, 0.9, 2.5};
    for (size_t i = 0; i < sizeof set / sizeof set[0]; i++)
        for (int k = 0; k < 5; k++)
            for (int up = 0; up < 2; up++) {
                const double *s = set[i];
                tctx c = {mk(s[0], s[1], s[2], s[3], s[5], 0, s[4]), rts[k], up};
                double lo = s[2] - s[4] / 2, hi = s[2] + s[4] / 2;
                if (hi > rts[k]) hi = rts[k]; /* integrand is 0 for t0' >= rt */
                double r = 0, e;
                if (hi > lo) {
                    gsl_function F = {over_t0, &c};
                    gsl_integration_qags(&F, lo, hi, 0, 1e-12, 1000, ws, &r, &e);
                }
                r /= s[4];
                double got = exp(ld(&c.p, rts[k], up));
                if (r < 1e-300) {
                    check_true(got == 0, "nondecision_range: zero density before the earliest RT (rt %g)", rts[k]);
                    continue;
                }
                check_rel(got, r, s[5] > 0 ? 1e-6 : 1e-9,
                          "nondecision_range %g (drift_sd %g): CDF difference = GSL qags over t0', rt %g %s", s[4],
                          s[5], rts[k], up ? "upper" : "lower");
            }
    /* narrow windows (down to 1e-9 s): no digits lost to the CDF difference */
    double sts[] = {1e-3, 1e-5, 1e-7, 1e-9};
    for (int i = 0; i < 4; i++)
        for (int up = 0; up < 2; up++) {
            double st = sts[i];
            tctx c = {mk(1.2, 1, 0.3, 0.45, i % 2 ? 0.7 : 0, 0, st), 0.33 + 0.5 * i, up};
            gsl_function F = {over_t0, &c};
            double r, e;
            /* divide by the window as represented (0.3 +- st/2 rounds at 1e-17 absolute) */
            double lo = 0.3 - st / 2, hi = 0.3 + st / 2;
            gsl_integration_qags(&F, lo, hi, 0, 1e-13, 1000, ws, &r, &e);
            check_rel(exp(ld(&c.p, c.rt, up)), r / (hi - lo), 1e-10,
                      "nondecision_range %g s: density at rt %g (%s) keeps its digits", st, c.rt,
                      up ? "upper" : "lower");
        }
    gsl_integration_workspace_free(ws);
}

/* contaminants: (1 - p0) f + p0 / (2 (hi - lo)) on [lo, hi] (Ratcliff & Tuerlinckx 2002) */
HARNESS_CASE(contamination)
{
    bl_wiener_params p = mk(1.3, 1.1, 0.3, 0.5, 0, 0, 0), q = p;
    p.value[BL_CONTAMINATION] = 0.04;
    p.contamination_lo = 0.1;
    p.contamination_hi = 3.1;
    double rts[] = {0.05, 0.2, 0.31, 0.8, 2.0, 3.5};
    for (int k = 0; k < 6; k++)
        for (int up = 0; up < 2; up++) {
            double f = exp(ld(&q, rts[k], up));
            double c = (rts[k] >= 0.1 && rts[k] <= 3.1) ? 0.5 / 3.0 : 0;
            double want = 0.96 * f + 0.04 * c;
            double got = exp(ld(&p, rts[k], up));
            if (want == 0) check_true(got == 0, "contamination: zero outside the range and before the earliest RT");
            else check_rel(got, want, 1e-13, "contamination mixture at rt %g %s", rts[k], up ? "upper" : "lower");
        }
    double pu, pu0, F, F0;
    bl_wiener_p_upper(&p, &pu, NULL);
    bl_wiener_p_upper(&q, &pu0, NULL);
    check_rel(pu, 0.96 * pu0 + 0.02, 1e-14, "contamination: P_up = (1-p0) P + p0/2");
    bl_wiener_cdf(&p, 1.6, 1, &F, NULL);
    bl_wiener_cdf(&q, 1.6, 1, &F0, NULL);
    check_rel(F, 0.96 * F0 + 0.02 * 0.5, 1e-13, "contamination: CDF mixes a uniform CDF");
}

/* CDF with drift_sd at small and large times vs GSL qagi over the normal drift of the plain CDF */
typedef struct {
    double a, v, w, sv, y;
    int up;
} cctx;

static double cdf_over_nu(double x, void *vp)
{
    cctx *c = vp;
    bl_wiener_params q = mk(c->a, c->v + c->sv * x, 0, c->w, 0, 0, 0);
    double F;
    bl_wiener_cdf(&q, c->y, c->up, &F, NULL);
    return F * exp(-0.5 * x * x) / sqrt(2 * M_PI);
}

HARNESS_CASE(drift_sd_cdf)
{
    gsl_integration_workspace *ws = gsl_integration_workspace_alloc(1000);
    static const double set[][4] = {{1.2, 1, 0.45, 0.8}, {2, -0.5, 0.5, 2}, {0.8, 3, 0.3, 1.5}, {1.5, 0, 0.6, 3}};
    double ys[] = {0.03, 0.1, 0.3, 0.7, 2.0};
    for (int i = 0; i < 4; i++)
        for (int k = 0; k < 5; k++)
            for (int up = 0; up < 2; up++) {
                cctx c = {set[i][0], set[i][1], set[i][2], set[i][3], ys[k], up};
                gsl_function F = {cdf_over_nu, &c};
                double r, e, got;
                gsl_integration_qagi(&F, 1e-300, 1e-11, 1000, ws, &r, &e);
                bl_wiener_params p = mk(c.a, c.v, 0, c.w, c.sv, 0, 0);
                bl_wiener_cdf(&p, c.y, up, &got, NULL);
                check_rel(got, r, 1e-8, "drift_sd %g: CDF at %g s (%s) = int F(nu) N(nu) (GSL qagi)", c.sv, c.y,
                          up ? "upper" : "lower");
            }
    gsl_integration_workspace_free(ws);
}

/* p_upper and mean RT with drift_sd: GSL integration over the normal drift */
typedef struct {
    double a, v, w, sv;
    int what;
} nctx;

static double over_nu(double x, void *vp)
{
    nctx *c = vp;
    bl_wiener_params q = mk(c->a, c->v + c->sv * x, 0, c->w, 0, 0, 0);
    double pu, m;
    bl_wiener_p_upper(&q, &pu, NULL);
    double dens = exp(-0.5 * x * x) / sqrt(2 * M_PI);
    if (c->what == 0) return pu * dens;
    bl_wiener_mean_rt(&q, 1, &m, NULL);
    return pu * m * dens;
}

HARNESS_CASE(drift_sd_moments)
{
    gsl_integration_workspace *ws = gsl_integration_workspace_alloc(1000);
    static const double set[][4] = {{1.2, 1, 0.45, 0.8}, {2, -0.5, 0.5, 2}, {0.8, 3, 0.3, 1.5}};
    for (int i = 0; i < 3; i++) {
        nctx c = {set[i][0], set[i][1], set[i][2], set[i][3], 0};
        gsl_function F = {over_nu, &c};
        double P, M, e;
        gsl_integration_qagi(&F, 0, 1e-13, 1000, ws, &P, &e);
        c.what = 1;
        gsl_integration_qagi(&F, 0, 1e-13, 1000, ws, &M, &e);
        bl_wiener_params p = mk(c.a, c.v, 0.2, c.w, c.sv, 0, 0);
        double pu, m;
        bl_wiener_p_upper(&p, &pu, NULL);
        bl_wiener_mean_rt(&p, 1, &m, NULL);
        check_rel(pu, P, 1e-9, "drift_sd %g: P_up = int P_up(nu) N(nu) (GSL qagi)", c.sv);
        check_rel(m - 0.2, M / P, 1e-9, "drift_sd %g: E[T|up] = int P m N / P (GSL qagi)", c.sv);
    }
    gsl_integration_workspace_free(ws);
}

/* CDF with variability: its derivative in rt is the density; it tends to P(boundary); quantiles invert it. */
HARNESS_CASE(cdf_quantiles)
{
    bl_wiener_params set[6];
    set[5] = mk(2, -0.5, 0.3, 0.5, 2, 0, 0); /* wide drift_sd: P's logistic shape in the drift */
    set[0] = mk(1.2, 1, 0.3, 0.45, 0, 0, 0);
    set[1] = mk(1.2, 1, 0.3, 0.45, 1.0, 0, 0);
    set[2] = mk(1.2, 1, 0.3, 0.45, 0, 0.4, 0);
    set[3] = mk(1.2, 1, 0.3, 0.45, 0, 0, 0.25);
    set[4] = mk(1.5, -0.7, 0.35, 0.55, 0.6, 0.3, 0.2);
    set[4].value[BL_CONTAMINATION] = 0.03;
    set[4].contamination_lo = 0.2;
    set[4].contamination_hi = 3;
    for (int i = 0; i < 6; i++)
        for (int up = 0; up < 2; up++) {
            bl_wiener_params *p = &set[i];
            double rts[] = {0.36, 0.5, 0.8, 1.5};
            double worst = 0;
            for (int k = 0; k < 4; k++) {
                double h = 1e-5, Fp, Fm; /* O(h^2 F'''/F') ~ 1e-7 even near the onset */
                bl_wiener_cdf(p, rts[k] + h, up, &Fp, NULL);
                bl_wiener_cdf(p, rts[k] - h, up, &Fm, NULL);
                double f = exp(ld(p, rts[k], up));
                double e = fabs((Fp - Fm) / (2 * h) - f) / f;
                if (e > worst) worst = e;
            }
            check_true(worst < 1e-5, "set %d %s: dCDF/drt = density (central difference, max rel %.2g)", i,
                       up ? "upper" : "lower", worst);
            double pu, Finf;
            bl_wiener_p_upper(p, &pu, NULL);
            bl_wiener_cdf(p, 60, up, &Finf, NULL);
            check_rel(Finf, up ? pu : 1 - pu, 1e-9, "set %d %s: CDF(60 s) = P(boundary)", i, up ? "upper" : "lower");
            double probs[] = {0.1, 0.3, 0.5, 0.7, 0.9}, prev = 0;
            int ok = 1;
            for (int k = 0; k < 5; k++) {
                double q, F;
                bl_error err = {0};
                if (bl_wiener_quantile(p, probs[k], up, &q, &err) != BL_OK) {
                    ok = 0;
                    printf("  quantile failed: %s\n", err.message);
                    continue;
                }
                bl_wiener_cdf(p, q, up, &F, NULL);
                if (fabs(F / (up ? pu : 1 - pu) - probs[k]) > 1e-10 || q <= prev) ok = 0;
                prev = q;
            }
            check_true(ok, "set %d %s: quantiles 0.1..0.9 increase and invert the conditional CDF to 1e-10", i,
                       up ? "upper" : "lower");
        }
    /* a rare boundary (P ~ 3e-38) still has accurate probability and quantiles */
    bl_wiener_params p = mk(6, 8, 0.3, 0.9, 0, 0, 0);
    double q, plo, F;
    bl_wiener_p_boundary(&p, 0, &plo, NULL);
    /* closed form e^{-2vaw} (1 - e^{-2va(1-w)}) / (1 - e^{-2va}) (Cox & Miller 1965) */
    check_rel(plo, exp(-2 * 8 * 6 * 0.9) * (1 - exp(-2 * 8 * 6 * 0.1)) / (1 - exp(-2 * 8 * 6)), 1e-12,
              "P(lower) ~ 3e-38 keeps its digits");
    check_true(bl_wiener_quantile(&p, 0.5, 0, &q, NULL) == BL_OK && bl_wiener_cdf(&p, q, 0, &F, NULL) == BL_OK &&
                   fabs(F / plo - 0.5) < 1e-10,
               "median of the rare boundary inverts its CDF");
    /* a boundary whose probability underflows has no quantile: BL_ERR_NUMERIC, not garbage */
    p = mk(10, 40, 0.3, 0.9, 0, 0, 0);
    check_true(bl_wiener_quantile(&p, 0.5, 0, &q, NULL) == BL_ERR_NUMERIC,
               "quantile of a boundary with probability e^-720 reports BL_ERR_NUMERIC");
}

/* Full-path gradient (start_range, nondecision_range, contamination, with and without drift_sd) vs
 * central differences; tolerance 1e-5 relative (the CDF and quadrature carry ~1e-10 noise). */
HARNESS_CASE(full_gradient)
{
    bl_wiener_params set[7];
    set[6] = mk(1.3, 0.8, 0.3, 0.5, 0.4, 0, 1e-3); /* narrow window: density average path */
    set[0] = mk(1.2, 1, 0.3, 0.45, 0, 0.3, 0);
    set[1] = mk(1.2, -1, 0.3, 0.55, 0, 0, 0.2);
    set[2] = mk(1.6, 0.7, 0.3, 0.5, 0.9, 0.2, 0.15);
    set[3] = mk(0.9, 2, 0.25, 0.4, 0, 0, 0);
    set[3].value[BL_CONTAMINATION] = 0.05;
    set[3].contamination_lo = 0.1;
    set[3].contamination_hi = 3;
    set[4] = mk(2.2, 0.4, 0.4, 0.35, 1.2, 0.25, 0.3);
    set[4].value[BL_CONTAMINATION] = 0.02;
    set[4].contamination_lo = 0.2;
    set[4].contamination_hi = 4;
    set[5] = mk(1.0, 1.5, 0.2, 0.5, 0, 0, 0.3);
    double rts[] = {0.33, 0.42, 0.6, 1.1, 2.4};
    double worst = 0;
    int n = 0;
    for (int i = 0; i < 7; i++)
        for (int k = 0; k < 5; k++)
            for (int up = 0; up < 2; up++) {
                bl_wiener_params p = set[i];
                double g[BL_NPARAM], l;
                if (bl_wiener_log_density_grad(&p, rts[k], up, &l, g, NULL) != BL_OK || !isfinite(l)) continue;
                /* the gradient path may sum a term more (its own tail bounds): same value to ~1e-10 */
                check_rel(l, ld(&p, rts[k], up), 1e-9, "set %d rt %g: gradient call returns the same log-density", i,
                          rts[k]);
                for (int j = 0; j < BL_NPARAM; j++) {
                    double th = p.value[j];
                    if (j >= BL_DRIFT_SD && th == 0) continue; /* one-sided at the edge */
                    double h = 1e-5 * fmax(1, fabs(th));
                    if (j == BL_START || j == BL_START_RANGE || j == BL_CONTAMINATION) h = 1e-6;
                    bl_wiener_params pp = p, pm = p;
                    pp.value[j] = th + h;
                    pm.value[j] = th - h;
                    double fd = (ld(&pp, rts[k], up) - ld(&pm, rts[k], up)) / (2 * h);
                    double e = fabs(fd - g[j]) / fmax(1, fabs(g[j]));
                    if (e > 1e-5)
                        printf("  set %d rt %g up %d %s: analytic %.10g fd %.10g\n", i, rts[k], up, bl_param_name(j),
                               g[j], fd);
                    if (e > worst) worst = e;
                    n++;
                }
            }
    check_true(worst < 1e-5, "full-path gradient: %d partials vs central differences, max rel err %.2g", n, worst);
    /* below the earliest RT without contaminants: -inf and a zero gradient */
    bl_wiener_params p = set[1];
    double g[BL_NPARAM], l;
    bl_wiener_log_density_grad(&p, 0.15, 0, &l, g, NULL);
    int zero = l == -INFINITY;
    for (int j = 0; j < BL_NPARAM; j++) zero = zero && g[j] == 0;
    check_true(zero, "rt before nondecision - range/2: log-density -inf, gradient 0");
}

/* Thread safety: the quadrature tables are built under pthread_once on first use; threads that race
 * into the first call must see complete tables and get bit-identical results to a serial pass. */
enum { TS_N = 400, TS_THREADS = 4 };
static double ts_serial[TS_N][2];
static double ts_par[TS_THREADS][TS_N][2];

static void ts_params(int i, bl_wiener_params *p, double *rt)
{
    *p = mk(1.0 + 0.002 * i, -1 + 0.005 * i, 0.3, 0.45, 0.5 + 0.001 * i, 0.2, 0.1);
    *rt = 0.32 + 0.004 * i;
}

static void *ts_worker(void *arg)
{
    int k = *(int *)arg;
    for (int i = 0; i < TS_N; i++) {
        bl_wiener_params p;
        double rt, g[BL_NPARAM];
        ts_params(i, &p, &rt);
        bl_wiener_log_density(&p, rt, i % 2, &ts_par[k][i][0], NULL);
        bl_wiener_log_density_grad(&p, rt, i % 2, &ts_par[k][i][1], g, NULL);
        ts_par[k][i][1] += g[BL_START_RANGE];
    }
    return NULL;
}

HARNESS_CASE(thread_safety)
{
    pthread_t th[TS_THREADS];
    int ids[TS_THREADS], started = 0;
    for (int k = 0; k < TS_THREADS; k++) {
        ids[k] = k;
        if (pthread_create(&th[k], NULL, ts_worker, &ids[k]) == 0) started++;
        else break;
    }
    for (int k = 0; k < started; k++) pthread_join(th[k], NULL);
    check_true(started == TS_THREADS, "%d threads started", started);
    for (int i = 0; i < TS_N; i++) {
        bl_wiener_params p;
        double rt, g[BL_NPARAM];
        ts_params(i, &p, &rt);
        bl_wiener_log_density(&p, rt, i % 2, &ts_serial[i][0], NULL);
        bl_wiener_log_density_grad(&p, rt, i % 2, &ts_serial[i][1], g, NULL);
        ts_serial[i][1] += g[BL_START_RANGE];
    }
    int same = 1;
    for (int k = 0; k < started; k++) same &= memcmp(ts_par[k], ts_serial, sizeof ts_serial) == 0;
    check_true(same, "densities and gradients from %d racing threads are bit-identical to a serial pass", started);
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(thread_safety), /* first: its threads race into the table construction */
        HARNESS_ENTRY(start_range),   HARNESS_ENTRY(start_range_2n),   HARNESS_ENTRY(nondecision_range),
        HARNESS_ENTRY(contamination), HARNESS_ENTRY(drift_sd_moments), HARNESS_ENTRY(drift_sd_cdf),
        HARNESS_ENTRY(cdf_quantiles), HARNESS_ENTRY(full_gradient),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
