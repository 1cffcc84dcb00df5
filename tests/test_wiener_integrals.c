/* Integral identities of the Wiener first-passage time distribution, checked with GSL adaptive
 * quadrature (gsl_integration_qags / qagiu, outside the engine) and with an independent numerical
 * solution of the backward Kolmogorov equation (Crank-Nicolson, written here).
 * - int f_b dt = P_b (closed form; Cox & Miller 1965, "The Theory of Stochastic Processes", 5.7) to 1e-9
 * - int t f_b dt / P_b = E[T | b]; E[T | b] also against the biased-start formula
 *   E[T|up] = [a coth(va) - z coth(vz)] / v (Grasman, Wagenmakers & van der Maas 2009, J. Math.
 *   Psych. 53:55-68, from memory; equivalent Laplace-transform derivation in the numerics notes 3) to 1e-8
 * - int_0^t f = F(t) (Blurton, Kesselmeier & Gondan 2012 series in the engine) to 1e-9
 * - drift_sd closed form = int f(t | nu) N(nu; v, sv^2) dnu (GSL qagi) to 1e-8
 * - Crank-Nicolson with Rannacher start (Rannacher 1984, Numer. Math. 43:309-327) for
 *   G_t = v G_x + G_xx / 2, G(0,t) = 1, G(a,t) = 0: G(aw, t) = F_lo(t), agreement to the scheme's
 *   O(h^2) error and, after Richardson extrapolation, to 1e-8. */
#include "bandlink/wiener.h"
#include "harness.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_integration.h>
#include <math.h>
#include <stdlib.h>

typedef struct {
    bl_wiener_params p;
    int up;
    int moment;
    double v_nu; /* for the drift integral */
    double t;
} ctx;

static double fdens(double t, void *vp)
{
    ctx *c = vp;
    double l;
    if (bl_wiener_log_density(&c->p, c->p.value[BL_NONDECISION] + t, c->up, &l, NULL) != BL_OK) return NAN;
    double f = exp(l);
    return c->moment ? t * f : f;
}

static double integrate_t(ctx *c, double lo_t, double hi_t)
{
    gsl_integration_workspace *ws = gsl_integration_workspace_alloc(1000);
    double a2 = c->p.value[BL_THRESHOLD] * c->p.value[BL_THRESHOLD];
    /* split where the density changes character (u = t/a^2 = 0.01, 0.05, 0.3, 1, 3, 10) */
    static const double cuts[] = {0, 0.01, 0.05, 0.3, 1, 3, 10};
    gsl_function F = {fdens, c};
    double total = 0, r, e;
    for (int i = 0; i < 6; i++) {
        double lo = cuts[i] * a2, hi = cuts[i + 1] * a2;
        if (lo >= hi_t) break;
        if (hi > hi_t) hi = hi_t;
        if (lo < lo_t) lo = lo_t;
        if (hi <= lo) continue;
        if (gsl_integration_qags(&F, lo, hi, 0, 1e-13, 1000, ws, &r, &e)) return NAN;
        total += r;
    }
    if (hi_t == INFINITY) {
        if (gsl_integration_qagiu(&F, 10 * a2, 0, 1e-13, 1000, ws, &r, &e)) return NAN;
        total += r;
    }
    gsl_integration_workspace_free(ws);
    return total;
}

static bl_wiener_params mk(double a, double v, double w)
{
    bl_wiener_params p;
    bl_wiener_params_default(&p);
    p.value[BL_THRESHOLD] = a;
    p.value[BL_DRIFT] = v;
    p.value[BL_START] = w;
    p.value[BL_NONDECISION] = 0.2;
    return p;
}

HARNESS_CASE(probability_and_moments)
{
    static const double set[][3] = {{1, 1, 0.5},  {2, -1.5, 0.3},   {1.5, 2, 0.6},  {0.5, 0, 0.5},
                                    {4, -6, 0.9}, {1.2, 0.3, 0.05}, {3, 0.8, 0.97}, {0.3, 8, 0.5}};
    for (size_t i = 0; i < sizeof set / sizeof set[0]; i++)
        for (int up = 0; up < 2; up++) {
            ctx c = {.p = mk(set[i][0], set[i][1], set[i][2]), .up = up};
            double a = set[i][0], v = set[i][1], w = set[i][2];
            double pu;
            bl_wiener_p_upper(&c.p, &pu, NULL);
            double pb = up ? pu : 1 - pu;
            /* closed-form gambler's-ruin probability, written out here (Cox & Miller 1965) */
            double z = up ? a * w : a * (1 - w), vv = up ? v : -v; /* z: distance from the far boundary */
            double pref = vv == 0 ? z / a : (1 - exp(-2 * vv * z)) / (1 - exp(-2 * vv * a));
            if (pb < 1e-12) continue; /* ~0: nothing to integrate */
            check_rel(pb, pref, 1e-12, "P_%s closed form a=%g v=%g w=%g", up ? "up" : "lo", a, v, w);
            double I = integrate_t(&c, 0, INFINITY);
            check_rel(I, pb, 1e-9, "int f_%s dt = P (GSL qags) a=%g v=%g w=%g", up ? "up" : "lo", a, v, w);
            c.moment = 1;
            double m1 = integrate_t(&c, 0, INFINITY) / pb, mrt;
            bl_wiener_mean_rt(&c.p, up, &mrt, NULL);
            check_rel(mrt - 0.2, m1, 1e-8, "E[T|%s] = int t f / P (GSL) a=%g v=%g w=%g", up ? "up" : "lo", a, v, w);
            /* Biased-start formula with the distance zz from the far boundary */
            double zz = up ? a * w : a * (1 - w);
            if (fabs(v) * a > 0.01) {
                double ref = (a / tanh(vv * a) - zz / tanh(vv * zz)) / vv;
                check_rel(mrt - 0.2, ref, 1e-8, "E[T|%s] biased-start formula a=%g v=%g w=%g", up ? "up" : "lo", a, v,
                          w);
            }
            /* CDF at an interior time equals the integral up to it */
            c.moment = 0;
            double tm = m1;
            double F;
            bl_wiener_cdf(&c.p, 0.2 + tm, up, &F, NULL);
            check_rel(F, integrate_t(&c, 0, tm), 1e-9, "F_%s(mean) = int_0^mean f (GSL) a=%g v=%g w=%g",
                      up ? "up" : "lo", a, v, w);
        }
}

/* ---- drift_sd closed form against integration over a normal drift -------------------------------- */
static double over_nu(double nu, void *vp)
{
    ctx *c = vp;
    bl_wiener_params q = c->p;
    double sv = q.value[BL_DRIFT_SD], v = q.value[BL_DRIFT];
    q.value[BL_DRIFT] = nu;
    q.value[BL_DRIFT_SD] = 0;
    double l;
    bl_wiener_log_density(&q, c->t, c->up, &l, NULL);
    double zz = (nu - v) / sv;
    return exp(l - 0.5 * zz * zz) / (sv * sqrt(2 * M_PI));
}

HARNESS_CASE(drift_sd)
{
    static const double set[][5] = {{1, 1, 0.5, 0.5, 0.6},
                                    {1.5, 1, 0.4, 1.2, 0.95},
                                    {2, -2, 0.3, 2.5, 0.45},
                                    {0.8, 0.5, 0.7, 0.3, 3.0},
                                    {1.2, 3, 0.5, 1, 0.22}};
    gsl_integration_workspace *ws = gsl_integration_workspace_alloc(1000);
    for (size_t i = 0; i < sizeof set / sizeof set[0]; i++)
        for (int up = 0; up < 2; up++) {
            ctx c = {.p = mk(set[i][0], set[i][1], set[i][2]), .up = up, .t = set[i][4]};
            c.p.value[BL_DRIFT_SD] = set[i][3];
            gsl_function F = {over_nu, &c};
            double r, e;
            int st = gsl_integration_qagi(&F, 0, 1e-12, 1000, ws, &r, &e);
            double l;
            bl_wiener_log_density(&c.p, c.t, up, &l, NULL);
            check_true(st == 0, "GSL qagi converged");
            check_rel(exp(l), r, 1e-8, "drift_sd %g closed form = int over normal drift (GSL qagi), %s, rt %g",
                      set[i][3], up ? "upper" : "lower", c.t);
        }
    gsl_integration_workspace_free(ws);
}

/* ---- Crank-Nicolson backward Kolmogorov solver ----------------------------------------------------- */
/* Returns G(aw, t) at the requested times (sorted), with J intervals and nt = steps per unit time*tmax. */
static void cn_solve(double a, double v, double w, int J, int nt, double tmax, const double *times, int ntimes,
                     double *out)
{
    double h = a / J, dt = tmax / nt;
    int jz = (int)lround(w * J);
    double *G = calloc(J + 1, sizeof *G), *rhs = calloc(J + 1, sizeof *G), *cp = calloc(J + 1, sizeof *G),
           *dp = calloc(J + 1, sizeof *G);
    double lo = 0.5 / (h * h) - v / (2 * h), di = -1 / (h * h), up = 0.5 / (h * h) + v / (2 * h);
    G[0] = 1; /* boundary for t > 0 */
    double t = 0;
    int k = 0;
    /* Rannacher start: 4 implicit Euler half steps, then Crank-Nicolson */
    int step = 0;
    while (k < ntimes) {
        int euler = step < 4;
        double tau = euler ? dt / 2 : dt;
        double th = euler ? 1.0 : 0.5; /* implicit weight */
        /* (I - th tau L) G_new = (I + (1-th) tau L) G_old, boundaries fixed */
        for (int j = 1; j < J; j++) {
            double LG = lo * G[j - 1] + di * G[j] + up * G[j + 1];
            rhs[j] = G[j] + (1 - th) * tau * LG;
        }
        rhs[1] += th * tau * lo * 1.0;
        /* Thomas algorithm on j = 1..J-1 */
        double A = -th * tau * lo, B = 1 - th * tau * di, C = -th * tau * up;
        cp[1] = C / B;
        dp[1] = rhs[1] / B;
        for (int j = 2; j < J; j++) {
            double m = B - A * cp[j - 1];
            cp[j] = C / m;
            dp[j] = (rhs[j] - A * dp[j - 1]) / m;
        }
        G[J - 1] = dp[J - 1];
        for (int j = J - 2; j >= 1; j--) G[j] = dp[j] - cp[j] * G[j + 1];
        t += tau;
        step++;
        while (k < ntimes && fabs(t - times[k]) < 1e-9 * tmax) out[k++] = G[jz];
        if (t > tmax + dt) break;
    }
    free(G);
    free(rhs);
    free(cp);
    free(dp);
}

HARNESS_CASE(crank_nicolson)
{
    /* start on a grid node: w J integer for J = 200, 400, 800 */
    static const double set[][3] = {{1, 1, 0.5}, {2, -1.5, 0.3}, {1.2, 0.5, 0.35}};
    for (int i = 0; i < 3; i++) {
        double a = set[i][0], v = set[i][1], w = set[i][2];
        double tmax = 1.0;
        double times[4] = {0.25, 0.5, 0.75, 1.0};
        double g1[4], g2[4], g3[4];
        cn_solve(a, v, w, 200, 400, tmax, times, 4, g1);
        cn_solve(a, v, w, 400, 800, tmax, times, 4, g2);
        cn_solve(a, v, w, 800, 1600, tmax, times, 4, g3);
        bl_wiener_params p = mk(a, v, w);
        p.value[BL_NONDECISION] = 0;
        for (int k = 0; k < 4; k++) {
            double F;
            bl_wiener_cdf(&p, times[k], 0, &F, NULL);
            /* second order: error(800) ~ (g3 - g2)/3; allow 2x that plus rounding */
            double est = fabs(g3[k] - g2[k]) / 3;
            check_abs(g3[k], F, 2 * est + 1e-10,
                      "Crank-Nicolson J=800 vs F_lo within its O(h^2) error %.2g (a=%g v=%g w=%g t=%g)", est, a, v, w,
                      times[k]);
            check_true(fabs(g1[k] - F) > fabs(g2[k] - F) && fabs(g2[k] - F) > fabs(g3[k] - F),
                       "Crank-Nicolson error shrinks with the grid (a=%g v=%g w=%g t=%g)", a, v, w, times[k]);
            double rich = (4 * g3[k] - g2[k]) / 3;
            check_abs(rich, F, 1e-8, "Richardson-extrapolated Crank-Nicolson vs F_lo (a=%g v=%g w=%g t=%g)", a, v, w,
                      times[k]);
        }
        /* density = dG/dt: central difference of the J=800 solution around t = 0.5 */
        double tt[3] = {0.5 - 0.01, 0.5, 0.5 + 0.01}, gg[3], gh[3];
        cn_solve(a, v, w, 800, 1600, tmax, tt, 3, gg);
        cn_solve(a, v, w, 400, 800, tmax, tt, 3, gh);
        double fd = (gg[2] - gg[0]) / 0.02, fdh = (gh[2] - gh[0]) / 0.02;
        double l;
        bl_wiener_log_density(&p, 0.5, 0, &l, NULL);
        /* time-difference error ~ f''' (0.01)^2/6, grid error estimated from the two grids */
        double f2[2], tq[2] = {0.49, 0.51};
        for (int q = 0; q < 2; q++) {
            bl_wiener_params pp = p;
            double Fq;
            bl_wiener_cdf(&pp, tq[q], 0, &Fq, NULL);
            f2[q] = Fq;
        }
        double fd_exact = (f2[1] - f2[0]) / 0.02; /* same difference quotient on the engine's CDF */
        check_abs(fd, fd_exact, 2 * fabs(fd - fdh) / 3 + 1e-9,
                  "Crank-Nicolson dG/dt matches the engine's CDF difference (a=%g v=%g w=%g)", a, v, w);
        /* and the engine's density is the derivative of that CDF (step 1e-3: O(h^2) ~ 1e-6) */
        double Fp, Fm;
        bl_wiener_cdf(&p, 0.501, 0, &Fp, NULL);
        bl_wiener_cdf(&p, 0.499, 0, &Fm, NULL);
        check_rel((Fp - Fm) / 0.002, exp(l), 2e-5, "density = dF/dt at t=0.5 (a=%g v=%g w=%g)", a, v, w);
    }
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(probability_and_moments),
        HARNESS_ENTRY(drift_sd),
        HARNESS_ENTRY(crank_nicolson),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
