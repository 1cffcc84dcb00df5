/* Core Wiener engine checks: reference log-densities, boundary probabilities, CDF values and moments,
 * closed forms, identities, extreme values, invalid parameters and analytic gradients.
 * Reference values come from the project's numerics notes, section 6, which were computed with mpmath
 * at 40 digits from two independent series (Navarro & Fuss 2009 small- and large-time forms);
 * tests/reference/wiener_mpmath.py recomputes a subset live. */
#include "bandlink/wiener.h"
#include "engine/wiener_internal.h" /* blw_sincospi */
#include "harness.h"

#include <gsl/gsl_errno.h>
#include <math.h>
#include <string.h>

#define BL_TEST_PI 3.14159265358979323846

static bl_wiener_params mk(double a, double v, double t0, double w, double sv)
{
    bl_wiener_params p;
    bl_wiener_params_default(&p);
    p.value[BL_THRESHOLD] = a;
    p.value[BL_DRIFT] = v;
    p.value[BL_NONDECISION] = t0;
    p.value[BL_START] = w;
    p.value[BL_DRIFT_SD] = sv;
    return p;
}

static double ld(const bl_wiener_params *p, double rt, int up)
{
    double x = NAN;
    bl_error e = {0};
    if (bl_wiener_log_density(p, rt, up, &x, &e) != BL_OK) return NAN;
    return x;
}

HARNESS_CASE(reference_densities)
{
    /* numerics notes 6.1 (mpmath, 40 digits): t, v, a, w, sv, ln f_lo, ln f_up */
    static const double ref[][7] = {
        {0.35, 1, 1, 0.5, 0, -1.2574538785445, -0.25745387854453},
        {0.9, -1.5, 2, 0.3, 0, -1.5954601810654, -4.7639732257502},
        {0.05, 2, 1.5, 0.6, 0, -6.5307006385315, 0.56383425336032},
        {3.0, 0, 0.5, 0.5, 0, -56.686602159567, -56.686602159567},
        {1e-4, 0.5, 2, 0.5, 0, -4987.6034404752, -4986.6034404752},
        {50, 3, 1, 0.5, 0, -472.09538014138, -469.09538014138},
        {0.5, -6, 4, 0.9, 0, 1.03968322602, -12.355508494239},
        {0.7, 1, 1.5, 0.4, 1.2, -1.9319788730285, -1.048319221803},
    };
    for (size_t i = 0; i < sizeof ref / sizeof ref[0]; i++) {
        const double *r = ref[i];
        bl_wiener_params p = mk(r[2], r[1], 0, r[3], r[4]);
        /* 13-14 printed digits: compare to 1e-12 relative (absolute 1e-11 near zero) */
        double tol_lo = 1e-12 * fmax(1, fabs(r[5])), tol_up = 1e-12 * fmax(1, fabs(r[6]));
        if (i == 6) tol_lo = 1e-11; /* printed to 12 digits */
        check_abs(ld(&p, r[0], 0), r[5], tol_lo, "numerics 6.1 ln f_lo row %zu", i + 1);
        check_abs(ld(&p, r[0], 1), r[6], tol_up, "numerics 6.1 ln f_up row %zu", i + 1);
    }
    /* nondecision shifts the time axis */
    bl_wiener_params p = mk(1, 1, 0.3, 0.5, 0);
    check_abs(ld(&p, 0.65, 0), -1.2574538785445, 1e-12, "nondecision 0.3 shifts rt 0.65 to t 0.35");
    check_true(ld(&p, 0.3, 0) == -INFINITY && ld(&p, 0.1, 1) == -INFINITY, "rt <= nondecision gives -inf");
}

HARNESS_CASE(reference_probabilities)
{
    /* numerics notes 6.2: P_lo closed form (Cox & Miller 1965 gambler's-ruin probability) */
    static const double ref[][4] = {{1, 1, 0.5, 0.2689414213699951},
                                    {-1.5, 2, 0.3, 0.9874520721527246},
                                    {2, 1.5, 0.6, 0.02490670782686564},
                                    {-6, 4, 0.9, 0.99177025295098}};
    for (int i = 0; i < 4; i++) {
        bl_wiener_params p = mk(ref[i][1], ref[i][0], 0, ref[i][2], 0);
        double pu = NAN;
        bl_wiener_p_upper(&p, &pu, NULL);
        check_rel(1 - pu, ref[i][3], i == 3 ? 1e-13 : 1e-14, "numerics 6.2 P_lo row %d", i + 1);
    }
    /* v = 0: P_up = w (Feller 1968, symmetric random walk) */
    bl_wiener_params p = mk(1.3, 0, 0, 0.37, 0);
    double pu;
    bl_wiener_p_upper(&p, &pu, NULL);
    check_rel(pu, 0.37, 1e-15, "zero drift: P_up = start");
    /* tiny drift is continuous with zero drift */
    p.value[BL_DRIFT] = 1e-12;
    double pu2;
    bl_wiener_p_upper(&p, &pu2, NULL);
    check_rel(pu2, 0.37, 1e-10, "drift 1e-12: P_up ~ start");
}

HARNESS_CASE(reference_cdf_and_moments)
{
    /* numerics notes 6.3: F_lo (small and large forms agree) */
    static const double ref[][5] = {{0.35, 1, 1, 0.5, 0.2166160740499516},
                                    {0.9, -1.5, 2, 0.3, 0.9055484332360449},
                                    {0.05, 2, 1.5, 0.6, 8.607573688154192e-6},
                                    {1.0, 0.5, 1.2, 0.35, 0.4965116914062277}};
    for (int i = 0; i < 4; i++) {
        bl_wiener_params p = mk(ref[i][2], ref[i][1], 0, ref[i][3], 0);
        double F = NAN;
        bl_wiener_cdf(&p, ref[i][0], 0, &F, NULL);
        check_rel(F, ref[i][4], 1e-12, "numerics 6.3 F_lo row %d", i + 1);
    }
    /* with drift_sd (numerics 6.3, Gauss-Hermite over the drift, 12 digits printed) */
    bl_wiener_params p = mk(1, 1, 0, 0.5, 0.5);
    double F;
    bl_wiener_cdf(&p, 0.3, 0, &F, NULL);
    check_rel(F, 0.206973716942, 5e-11, "numerics 6.3 F_lo with drift_sd 0.5");
    p = mk(1.2, -1, 0, 0.6, 1.5);
    bl_wiener_cdf(&p, 1.0, 0, &F, NULL);
    check_rel(F, 0.603466389189, 5e-11, "numerics 6.3 F_lo with drift_sd 1.5");

    /* numerics notes 6.4: conditional mean decision times */
    p = mk(2, -1.5, 0, 0.3, 0);
    double m;
    bl_wiener_mean_rt(&p, 0, &m, NULL);
    check_rel(m, 0.378208545094245, 1e-13, "numerics 6.4 E[T|lower] (-1.5, 2, 0.3)");
    bl_wiener_mean_rt(&p, 1, &m, NULL);
    check_rel(m, 0.781532863206248, 1e-13, "numerics 6.4 E[T|upper] (-1.5, 2, 0.3)");
    p = mk(1, 1, 0.25, 0.5, 0);
    bl_wiener_mean_rt(&p, 1, &m, NULL);
    check_rel(m, 0.25 + 0.231058578630005, 1e-13, "numerics 6.4 mean (1, 1, 0.5) plus nondecision");
}

/* EZ-diffusion (Wagenmakers, van der Maas & Grasman 2007, Psychon. Bull. Rev. 14:3-22), noise s = 1,
 * w = 1/2: Pc = 1/(1+e^y), MDT = (a/(2v)) (1-e^y)/(1+e^y), y = -va. The mean decision time is the
 * same for both boundaries at w = 1/2. */
HARNESS_CASE(ez_diffusion)
{
    static const double av[][2] = {{1.0, 1.0}, {2.2, 0.4}, {0.8, -2.5}, {3.0, 3.0}, {1.5, 1e-4}};
    for (int i = 0; i < 5; i++) {
        double a = av[i][0], v = av[i][1], y = -v * a;
        double mdt = a / (2 * v) * (1 - exp(y)) / (1 + exp(y));
        bl_wiener_params p = mk(a, v, 0, 0.5, 0);
        double mu, ml, pu;
        bl_wiener_mean_rt(&p, 1, &mu, NULL);
        bl_wiener_mean_rt(&p, 0, &ml, NULL);
        bl_wiener_p_upper(&p, &pu, NULL);
        check_rel(mu, mdt, 1e-8, "EZ MDT upper a=%g v=%g", a, v);
        check_rel(ml, mdt, 1e-8, "EZ MDT lower a=%g v=%g", a, v);
        check_rel(pu, 1 / (1 + exp(y)), 1e-12, "EZ Pc a=%g v=%g", a, v);
    }
}

/* Identities (numerics notes 6.6): at w = 1/2, ln f_up - ln f_lo = v a for every t (mirror rule of
 * Navarro & Fuss 2009); series switch continuity at u = 0.25. */
HARNESS_CASE(identities)
{
    bl_wiener_params p = mk(1.7, 0.83, 0, 0.5, 0);
    for (double t = 0.01; t < 8; t *= 1.9)
        check_rel(ld(&p, t, 1) - ld(&p, t, 0), 0.83 * 1.7, 1e-12, "ln f_up - ln f_lo = v a at t %g", t);
    /* continuity across the small/large-time switch: both series converge to the same function */
    for (int i = 0; i < 4; i++) {
        double ws[] = {0.2, 0.5, 0.77, 0.9995};
        bl_wiener_params q = mk(1.3, -0.6, 0, ws[i], 0);
        double t = 0.25 * 1.3 * 1.3;
        double l1 = ld(&q, t * (1 - 1e-12), 0), l2 = ld(&q, t * (1 + 1e-12), 0);
        check_abs(l1, l2, 1e-10, "density continuous across the series switch, w %g", ws[i]);
    }
}

/* Small-time truncation validated in relative terms on the far-boundary corner (numerics notes 1.3:
 * an absolute-error count, including a tightened w-dependent one in the spirit of Gondan, Blurton &
 * Kesselmeier 2014, lost the k = -1 image there). Reference: the Navarro & Fuss (2009) image series
 * summed over k = -30..30 in long double, far past any truncation. */
static double brute_lo(double t, double v, double a, double w)
{
    long double u = (long double)t / ((long double)a * a), s = 0;
    for (int k = -30; k <= 30; k++) {
        long double x = w + 2.0L * k;
        s += x * expl(-x * x / (2 * u));
    }
    return (double)(-(long double)v * a * w - (long double)v * v * t / 2 - 2 * logl(a) -
                    0.5L * logl(2 * 3.14159265358979323846264338327950288L * u * u * u) + logl(s));
}

HARNESS_CASE(far_boundary_corner)
{
    double worst = 0;
    int n = 0;
    double ws[] = {0.962, 0.99, 0.999, 0.9999, 1 - 1e-6, 0.001, 0.01, 0.5};
    double us[] = {0.002, 0.01, 0.05, 0.1, 0.2, 0.2499};
    double vs[] = {-1.856, 0, 2.5};
    for (int i = 0; i < 8; i++)
        for (int j = 0; j < 6; j++)
            for (int k = 0; k < 3; k++) {
                double a = 4.316, t = us[j] * a * a;
                bl_wiener_params p = mk(a, vs[k], 0, ws[i], 0);
                double got = ld(&p, t, 0), want = brute_lo(t, vs[k], a, ws[i]);
                /* relative error of the density = absolute error of its log */
                double e = fabs(got - want);
                if (e > worst) worst = e;
                n++;
            }
    check_true(worst < 2e-10,
               "far-boundary corner: %d small-time densities within %.2g relative of the long-double "
               "image sum (target 1e-10 truncation)",
               n, worst);
    /* the numerics notes' example: v=-1.856, a=4.316, w=0.962, t=0.3388 (lower boundary) */
    bl_wiener_params p = mk(4.316, -1.856, 0, 0.962, 0);
    check_abs(ld(&p, 0.3388, 0), brute_lo(0.3388, -1.856, 4.316, 0.962), 1e-12, "numerics 1.3 corner example");
}

/* The Gondan, Blurton & Kesselmeier (2014, J. Math. Psych. 60:20-22) small-time term count, as we
 * recall it (not checked against the paper): with u_e = min(-1, ln(2 pi u^2 eps^2)),
 * K = ceil(max((sqrt(2u) - w)/2, (sqrt(-u (u_e - sqrt(-2 u_e - 2))) - w)/2)), images |k| <= K, for an
 * absolute error eps on phi. Validation: it keeps its absolute promise, is accurate in relative terms
 * away from the far boundary, and loses relative accuracy near it (the numerics notes' factor 6-13),
 * which is why the engine truncates relative to the partial sum instead. */
static int gbk_terms(double u, double w, double eps)
{
    double ue = fmin(-1, log(2 * BL_TEST_PI * u * u * eps * eps));
    double k1 = (sqrt(2 * u) - w) / 2, k2 = (sqrt(-u * (ue - sqrt(-2 * ue - 2))) - w) / 2;
    return (int)ceil(fmax(k1, k2));
}

HARNESS_CASE(gbk_bound)
{
    double ws[] = {0.001, 0.01, 0.1, 0.3, 0.5, 0.7, 0.9, 0.962, 0.99, 0.999};
    double epss[] = {1e-6, 1e-10};
    for (int e = 0; e < 2; e++) {
        double eps = epss[e], worst_abs = 0, worst_in = 0, worst_corner = 0, worst_engine = 0;
        for (int i = 0; i < 10; i++)
            for (double u = 0.001; u < 0.25; u *= 1.3) {
                double w = ws[i];
                long double tru = 0;
                for (int k = -30; k <= 30; k++) {
                    long double x = w + 2.0L * k;
                    tru += x * expl(-x * x / (2 * (long double)u));
                }
                tru /= sqrtl(2 * 3.14159265358979323846264338327950288L * u * u * u);
                int K = gbk_terms(u, w, eps);
                double g = 0;
                for (int k = -K; k <= K; k++) g += (w + 2.0 * k) * exp(-(w + 2.0 * k) * (w + 2.0 * k) / (2 * u));
                g /= sqrt(2 * BL_TEST_PI * u * u * u);
                double ae = (double)fabsl(g - tru), re = (double)(fabsl(g - tru) / tru);
                worst_abs = fmax(worst_abs, ae / eps);
                if (w <= 0.9) worst_in = fmax(worst_in, re);
                else worst_corner = fmax(worst_corner, re);
                /* the engine at a = 1, v = 0 (f = phi) */
                bl_wiener_params p = mk(1, 0, 0, w, 0);
                worst_engine = fmax(worst_engine, fabs(ld(&p, u, 0) - (double)logl(tru)));
            }
        check_true(worst_abs <= 1, "GBK 2014 count (as recalled), eps %g: absolute error within eps (max %.2g eps)",
                   eps, worst_abs);
        check_true(worst_in <= 1e4 * eps, "GBK 2014 count, eps %g: relative error %.2g for start <= 0.9", eps,
                   worst_in);
        check_true(worst_corner > 0.1,
                   "GBK 2014 count, eps %g: relative error %.3g near the far boundary (start > 0.9)", eps,
                   worst_corner);
        check_true(worst_engine < 2e-10, "engine's relative truncation on the same grid: max relative error %.2g",
                   worst_engine);
    }
}

HARNESS_CASE(extremes_and_errors)
{
    /* extremes: t -> t0, t = 20 s, a = 0.3 and 6, v = +-8 must give finite logs */
    double as[] = {0.3, 1, 6}, vs[] = {-8, 0, 8}, ts[] = {1e-6, 1e-3, 0.05, 1, 20}, ws[] = {1e-6, 0.5, 1 - 1e-6};
    int finite = 1, n = 0;
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++)
            for (int k = 0; k < 5; k++)
                for (int l = 0; l < 3; l++)
                    for (int up = 0; up < 2; up++) {
                        bl_wiener_params p = mk(as[i], vs[j], 0.2, ws[l], 0);
                        double x = ld(&p, 0.2 + ts[k], up), g[BL_NPARAM], y = NAN;
                        bl_wiener_log_density_grad(&p, 0.2 + ts[k], up, &y, g, NULL);
                        int ok = isfinite(x) && y == x;
                        for (int m = 0; m < BL_NPARAM; m++) ok = ok && isfinite(g[m]);
                        if (!ok)
                            printf("  not finite: a %g v %g t %g w %g up %d: %g\n", as[i], vs[j], ts[k], ws[l], up, x);
                        finite &= ok;
                        n++;
                    }
    check_true(finite, "%d extreme combinations give finite log-densities and gradients", n);

    /* invalid parameters: BL_ERR_RANGE with a message naming the parameter, never NaN */
    struct {
        int idx;
        double val;
        const char *name;
    } bad[] = {{BL_THRESHOLD, 0, "threshold"},
               {BL_THRESHOLD, -1, "threshold"},
               {BL_THRESHOLD, NAN, "threshold"},
               {BL_DRIFT, INFINITY, "drift"},
               {BL_NONDECISION, -0.1, "nondecision"},
               {BL_START, 0, "start"},
               {BL_START, 1, "start"},
               {BL_DRIFT_SD, -1, "drift_sd"},
               {BL_START_RANGE, 1, "start_range"},
               {BL_NONDECISION_RANGE, 1, "nondecision_range"},
               {BL_CONTAMINATION, 1, "contamination"},
               {BL_CONTAMINATION, 0.1, "contamination"}};
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        bl_wiener_params p = mk(1, 1, 0.3, 0.5, 0);
        p.value[bad[i].idx] = bad[i].val;
        bl_error e = {0};
        double x = 12345, g[BL_NPARAM], pu = 12345, m = 12345, F = 12345, q = 12345;
        int ok = bl_wiener_log_density(&p, 0.8, 1, &x, &e) == BL_ERR_RANGE && strstr(e.message, bad[i].name);
        ok = ok && bl_wiener_log_density_grad(&p, 0.8, 1, &x, g, NULL) == BL_ERR_RANGE;
        ok = ok && bl_wiener_p_upper(&p, &pu, NULL) == BL_ERR_RANGE;
        ok = ok && bl_wiener_mean_rt(&p, 0, &m, NULL) == BL_ERR_RANGE;
        ok = ok && bl_wiener_cdf(&p, 0.8, 0, &F, NULL) == BL_ERR_RANGE;
        ok = ok && bl_wiener_quantile(&p, 0.5, 0, &q, NULL) == BL_ERR_RANGE;
        ok = ok && x == 12345 && pu == 12345 && m == 12345 && F == 12345 && q == 12345;
        check_true(ok, "invalid %s = %g -> BL_ERR_RANGE naming it (%s)", bad[i].name, bad[i].val, e.message);
    }
    bl_wiener_params p = mk(1, 1, 0.3, 0.2, 0);
    p.value[BL_START_RANGE] = 0.5; /* start - range/2 = -0.05 leaves (0, 1) */
    bl_error e = {0};
    double x;
    check_true(bl_wiener_log_density(&p, 0.8, 0, &x, &e) == BL_ERR_RANGE && strstr(e.message, "start_range"),
               "start_range reaching outside (0, 1) -> BL_ERR_RANGE (%s)", e.message);
    p = mk(1, 1, 0.3, 0.5, 0);
    check_true(bl_wiener_log_density(&p, NAN, 0, &x, NULL) == BL_ERR_RANGE, "NaN rt -> BL_ERR_RANGE");
    check_true(bl_param_index("drift_sd") == BL_DRIFT_SD && !strcmp(bl_param_name(BL_CONTAMINATION), "contamination") &&
                   bl_param_name(BL_NPARAM) == NULL && bl_param_index("bogus") == -1,
               "parameter names follow the vocabulary");
}

/* Gradients: numerics notes 6.5 reference values and central finite differences (numerics 6.9,
 * h = 1e-5 max(1,|theta|), 1e-6 relative) across the small/large-time switch. */
HARNESS_CASE(gradients)
{
    bl_wiener_params p = mk(1, 1, 0, 0.5, 0);
    double g[BL_NPARAM], l;
    bl_wiener_log_density_grad(&p, 0.5, 0, &l, g, NULL);
    check_rel(l, -2.0726712224488, 1e-12, "numerics 6.5 ln f (sv 0)");
    check_rel(g[BL_DRIFT], -1, 1e-12, "numerics 6.5 d/dv (sv 0)");
    check_rel(g[BL_THRESHOLD], 2.43480188369627, 1e-12, "numerics 6.5 d/da (sv 0)");
    check_rel(g[BL_START], -1.00766432337007, 1e-12, "numerics 6.5 d/dw (sv 0)");
    check_rel(-g[BL_NONDECISION], -5.43480188369627, 1e-12, "numerics 6.5 d/dt (sv 0)");
    p.value[BL_DRIFT_SD] = 1;
    bl_wiener_log_density_grad(&p, 0.5, 0, &l, g, NULL);
    check_rel(l, -1.94207044316955, 1e-12, "numerics 6.5 ln f (sv 1)");
    check_rel(g[BL_DRIFT], -2.0 / 3, 1e-12, "numerics 6.5 d/dv (sv 1)");
    check_rel(g[BL_THRESHOLD], 2.7681352170296, 1e-12, "numerics 6.5 d/da (sv 1)");
    check_rel(g[BL_START], -0.340997656703407, 1e-11, "numerics 6.5 d/dw (sv 1)");
    check_rel(-g[BL_NONDECISION], -5.32369077258516, 1e-12, "numerics 6.5 d/dt (sv 1)");
    check_rel(g[BL_DRIFT_SD], 1.0 / 9, 1e-12, "numerics 6.5 d/dsv (sv 1)");

    /* finite differences over a grid spanning u = t/a^2 from 0.02 to 3 */
    double maxerr = 0;
    int n = 0;
    static const double pts[][5] = {
        {1.2, 0.8, 0.45, 0.0, 0.05},   {1.2, -1.3, 0.6, 0.7, 0.2}, {0.9, 2.5, 0.3, 0.0, 0.36},
        {2.0, 0.3, 0.5, 1.5, 0.99},    {2.0, -3.0, 0.8, 0.0, 1.0}, {0.7, 1.0, 0.55, 0.3, 0.1225},
        {0.7, 1.0, 0.55, 0.3, 0.1226}, {1.5, 4.0, 0.2, 2.0, 5.0},  {3.0, -0.2, 0.93, 0.5, 0.6}};
    for (size_t i = 0; i < sizeof pts / sizeof pts[0]; i++)
        for (int up = 0; up < 2; up++) {
            const double *r = pts[i];
            bl_wiener_params q = mk(r[0], r[1], 0.25, r[2], r[3]);
            double rt = 0.25 + r[4];
            double gg[BL_NPARAM], l0;
            bl_wiener_log_density_grad(&q, rt, up, &l0, gg, NULL);
            int idx[] = {BL_THRESHOLD, BL_DRIFT, BL_NONDECISION, BL_START, BL_DRIFT_SD};
            for (int k = 0; k < (r[3] > 0 ? 5 : 4); k++) {
                int j = idx[k];
                double th = q.value[j], h = 1e-5 * fmax(1, fabs(th));
                if (j == BL_START) h = 1e-6;
                bl_wiener_params qp = q, qm = q;
                qp.value[j] = th + h;
                qm.value[j] = th - h;
                double fd = (ld(&qp, rt, up) - ld(&qm, rt, up)) / (2 * h);
                double e = fabs(fd - gg[j]) / fmax(1, fabs(gg[j]));
                if (e > maxerr) maxerr = e;
                n++;
                if (e > 1e-6)
                    printf("  grad %s point %zu up %d: analytic %.12g fd %.12g\n", bl_param_name(j), i, up, gg[j], fd);
            }
        }
    check_true(maxerr < 1e-6, "%d analytic partials vs central differences, max rel err %.2g < 1e-6", n, maxerr);
}

/* The engine's sin(pi x), cos(pi x) polynomials against glibc's sin/cos (accurate to < 1 ulp) evaluated
 * in long double, on x in (0, 0.5]. */
HARNESS_CASE(sincospi)
{
    double es = 0, ec = 0;
    for (int i = 1; i <= 100000; i++) {
        double x = 0.5 * i / 100000.0, s, c;
        blw_sincospi(x, &s, &c);
        long double z = 3.14159265358979323846264338327950288L * x;
        long double S = sinl(z), C = cosl(z);
        es = fmax(es, (double)(fabsl(s - S) / S));
        if (C > 1e-3L) ec = fmax(ec, (double)(fabsl(c - C) / C));
        else ec = fmax(ec, (double)fabsl(c - C)); /* absolute near pi/2: what the recurrence needs */
    }
    check_true(es < 1e-15, "sin(pi x) polynomial: max relative error %.2g (long double sinl)", es);
    check_true(ec < 1e-15, "cos(pi x) polynomial: max relative (absolute near 0.5) error %.2g (cosl)", ec);
}

/* The large-time series uses a fixed four terms (five for the gradient). Re-check the design bound at
 * the series switch q = pi^2/8 (the worst case, u = 0.25): the tail after four terms, in units of
 * sin(pi w), against 0.9 eps (S >= 0.9 sin(pi w)); and S/sin(pi w) >= 0.9 over w. Bounds from the
 * numerics notes 1.3 (|sin k pi w| <= k sin pi w; first omitted term plus the tail integral). */
HARNESS_CASE(large_time_terms)
{
    double q = BL_TEST_PI * BL_TEST_PI / 8, X = 5;
    double tail = (X * X + X / (2 * q) + 1 / (4 * q * q * X)) * exp(-(X * X - 1) * q);
    check_true(tail <= 0.9 * BL_WIENER_EPS, "large-time tail after 4 terms at u = 0.25: %.2g sin(pi w) <= 0.9 eps",
               tail);
    double X6 = 6, tail4 = (pow(X6, 4) + pow(X6, 3) / (2 * q) + 0.75 * X6 / (q * q) + 0.375 / (q * q * q * X6)) *
                           exp(-(X6 * X6 - 1) * q);
    check_true(tail4 <= 1e-14, "gradient k^3 tail after 5 terms at u = 0.25: %.2g sin(pi w)", tail4);
    double worst = 1;
    for (int i = 1; i < 1000; i++) {
        double w = i / 1000.0, S = 0;
        for (int k = 1; k <= 30; k++) S += k * sin(k * BL_TEST_PI * w) * exp(-(k * k - 1) * q);
        worst = fmin(worst, S / sin(BL_TEST_PI * w));
    }
    check_true(worst >= 0.9, "large-time sum >= 0.9 sin(pi w) at u = 0.25 for all w (min %.4f)", worst);
    /* and the fixed-term density agrees with the long-double image sum just above the switch */
    double werr = 0;
    for (int i = 1; i < 200; i++) {
        double w = i / 200.0, a = 1.7, t = 0.2500001 * a * a;
        bl_wiener_params p = mk(a, 0.8, 0, w, 0);
        werr = fmax(werr, fabs(ld(&p, t, 0) - brute_lo(t, 0.8, a, w)));
    }
    check_true(werr < 1e-10, "fixed four-term large-time density at u = 0.25: max relative error %.2g", werr);
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(sincospi),
        HARNESS_ENTRY(large_time_terms),
        HARNESS_ENTRY(reference_densities),
        HARNESS_ENTRY(reference_probabilities),
        HARNESS_ENTRY(reference_cdf_and_moments),
        HARNESS_ENTRY(ez_diffusion),
        HARNESS_ENTRY(identities),
        HARNESS_ENTRY(far_boundary_corner),
        HARNESS_ENTRY(gbk_bound),
        HARNESS_ENTRY(extremes_and_errors),
        HARNESS_ENTRY(gradients),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
