/* Profile-likelihood intervals (src/fit/profile.c) on likelihoods whose profiles are known in closed form.
 *
 * Normal sample x_1..x_n with mean mu and SD sigma, maximum (xbar, s), s^2 = sum (x - xbar)^2 / n:
 *   profile of mu:    2 (LL_max - LL_p(mu))    = n ln(1 + (xbar - mu)^2 / s^2), so the 95% ends are
 *                     xbar -+ s sqrt(exp(q / n) - 1), q the chi-square(1) 95% point;
 *   profile of sigma: 2 (LL_max - LL_p(sigma)) = n ((s / sigma)^2 - 1 - ln (s / sigma)^2), solved for its two
 *                     roots by GSL's Brent solver (gsl_root_fsolver_brent), independently of the search.
 * (Both from the normal log-likelihood; the profile of mu is the textbook example, e.g. Pawitan 2001, "In All
 * Likelihood", chapter on profile likelihood -- from memory.) q = 3.841458820694124: gsl_cdf_chisq_Pinv(0.95, 1).
 *
 * A variance that is even in its coefficient, x ~ N(0, 1 + tau^2) (as drift_sd enters the Wiener density
 * through drift_sd^2), with tau >= 0: when 2 (LL_max - LL(0)) < q the lower end must be exactly 0, the
 * upper end the root of the deviance (Brent again). */
#include "fit/profile.h"
#include "harness.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_roots.h>
#include <math.h>

typedef struct {
    const double *x;
    size_t n;
} sample;

/* Normal log-likelihood in (mu, sigma), gradient into g. */
static double normal_ll(void *user, double *c, double *g)
{
    const sample *s = user;
    double mu = c[0], sd = c[1];
    if (!(sd > 0)) return -INFINITY;
    double ss = 0, sr = 0;
    for (size_t i = 0; i < s->n; i++) {
        ss += (s->x[i] - mu) * (s->x[i] - mu);
        sr += s->x[i] - mu;
    }
    g[0] = sr / (sd * sd);
    g[1] = -(double)s->n / sd + ss / (sd * sd * sd);
    return -(double)s->n * log(sd) - ss / (2 * sd * sd);
}

/* x ~ N(0, 1 + tau^2): log-likelihood in tau, derivative into g[0]. */
static double even_ll(void *user, double *c, double *g)
{
    const sample *s = user;
    double v = 1 + c[0] * c[0], ss = 0;
    for (size_t i = 0; i < s->n; i++) ss += s->x[i] * s->x[i];
    g[0] = (-(double)s->n / (2 * v) + ss / (2 * v * v)) * 2 * c[0];
    return -0.5 * (double)s->n * log(v) - ss / (2 * v);
}

typedef struct {
    double n, a; /* deviance of the SD profile: n (a / sigma^2 - 1 - ln(a / sigma^2)) - q, a = s^2 */
    double ss;   /* even model: sum of squares */
    double ll_max;
} dev_params;

static double sd_deviance(double sigma, void *p)
{
    const dev_params *d = p;
    double r = d->a / (sigma * sigma);
    return d->n * (r - 1 - log(r)) - gsl_cdf_chisq_Pinv(0.95, 1);
}

static double even_deviance(double tau, void *p)
{
    const dev_params *d = p;
    double v = 1 + tau * tau;
    double ll = -0.5 * d->n * log(v) - d->ss / (2 * v);
    return 2 * (d->ll_max - ll) - gsl_cdf_chisq_Pinv(0.95, 1);
}

/* Root of f in [lo, hi] by Brent's method (GSL). */
static double brent(double (*f)(double, void *), void *p, double lo, double hi)
{
    gsl_function F = {f, p};
    gsl_root_fsolver *s = gsl_root_fsolver_alloc(gsl_root_fsolver_brent);
    gsl_root_fsolver_set(s, &F, lo, hi);
    double r = NAN;
    for (int it = 0; it < 200; it++) {
        gsl_root_fsolver_iterate(s);
        r = gsl_root_fsolver_root(s);
        if (gsl_root_test_interval(gsl_root_fsolver_x_lower(s), gsl_root_fsolver_x_upper(s), 0, 1e-14) == GSL_SUCCESS)
            break;
    }
    gsl_root_fsolver_free(s);
    return r;
}

/* A fixed pseudo-random sample (invented test data): n draws of a linear congruential generator mapped
 * to roughly normal values by summing 12 uniforms (mean 0, SD 1 before scaling). */
static void make_sample(double *x, size_t n, double mean, double sd, unsigned seed)
{
    unsigned long st = seed;
    for (size_t i = 0; i < n; i++) {
        double u = 0;
        for (int k = 0; k < 12; k++) {
            st = (st * 6364136223846793005UL + 1442695040888963407UL);
            u += (double)(st >> 11) / 9007199254740992.0;
        }
        x[i] = mean + sd * (u - 6);
    }
}

HARNESS_CASE(normal_mean_and_sd)
{
    enum { N = 40 };
    double x[N];
    make_sample(x, N, 2.0, 0.7, 7);
    double xbar = 0, s2 = 0;
    for (size_t i = 0; i < N; i++) xbar += x[i] / N;
    for (size_t i = 0; i < N; i++) s2 += (x[i] - xbar) * (x[i] - xbar) / N;
    double est[2] = {xbar, sqrt(s2)}, info[4] = {N / s2, 0, 0, 2 * N / s2}, g[2];
    sample smp = {x, N};
    bl_profile_problem p = {.k = 2, .estimate = est, .ll_max = normal_ll(&smp, est, g), .info = info, .loglik = normal_ll, .user = &smp};
    bl_error err = {0};
    double lo, hi;
    check_int(bl_profile_interval(&p, 0, -INFINITY, &lo, &hi, &err), BL_OK, "profile of the mean");
    double half = sqrt(s2) * sqrt(expm1(gsl_cdf_chisq_Pinv(0.95, 1) / N)); /* closed form above */
    check_rel(lo, xbar - half, 1e-4, "mean: lower end = xbar - s sqrt(exp(q/n) - 1)");
    check_rel(hi, xbar + half, 1e-4, "mean: upper end");
    check_int(bl_profile_interval(&p, 1, 0.0, &lo, &hi, &err), BL_OK, "profile of the SD");
    dev_params d = {N, s2, 0, 0};
    check_rel(lo, brent(sd_deviance, &d, 0.3 * sqrt(s2), sqrt(s2)), 1e-4, "SD: lower end (GSL Brent on the deviance)");
    check_rel(hi, brent(sd_deviance, &d, sqrt(s2), 3 * sqrt(s2)), 1e-4, "SD: upper end (GSL Brent)");
    check_true(hi - sqrt(s2) > sqrt(s2) - lo, "SD: the interval is longer above the estimate (%g, %g, %g)", lo,
               sqrt(s2), hi);
    check_true(p.evaluations > 0 && p.evaluations < 200, "evaluations counted, and few (%zu)", p.evaluations);
}

/* One sample of x ~ N(0, 1 + tau^2); zero_inside: whether the deviance at tau = 0 is below q (checked
 * from the closed form first). */
static void even_case(unsigned seed, int zero_inside)
{
    enum { N = 60 };
    double x[N];
    make_sample(x, N, 0.0, 1.1, seed);
    double ss = 0;
    for (size_t i = 0; i < N; i++) ss += x[i] * x[i];
    double s2 = ss / N;
    if (!check_true(s2 > 1, "seed %u: sample variance above 1 (%g): an interior maximum", seed, s2)) return;
    double tau = sqrt(s2 - 1), g[1];
    sample smp = {x, N};
    double ll = even_ll(&smp, &tau, g);
    /* second derivative of the log-likelihood in tau at its maximum: -2 n tau^2 / s2^2 (closed form) */
    double info[1] = {2.0 * N * tau * tau / (s2 * s2)};
    dev_params d = {N, 0, ss, ll};
    double zero = 0, dev0 = 2 * (ll - even_ll(&smp, &zero, g));
    if (!check_true((dev0 < gsl_cdf_chisq_Pinv(0.95, 1)) == zero_inside, "seed %u: deviance at 0 is %g", seed, dev0))
        return;
    bl_profile_problem p = {.k = 1, .estimate = &tau, .ll_max = ll, .info = info, .loglik = even_ll, .user = &smp};
    bl_error err = {0};
    double lo, hi;
    check_int(bl_profile_interval(&p, 0, 0.0, &lo, &hi, &err), BL_OK, "seed %u: profile of tau", seed);
    if (zero_inside) check_true(lo == 0, "seed %u: lower end exactly 0 (%g)", seed, lo);
    else check_rel(lo, brent(even_deviance, &d, 0, tau), 1e-3, "seed %u: lower end (GSL Brent)", seed);
    check_rel(hi, brent(even_deviance, &d, tau, 5 * tau + 1), 1e-3, "seed %u: upper end (GSL Brent)", seed);
}

HARNESS_CASE(even_variance_lower_end_at_zero)
{
    even_case(15, 1);
    even_case(12, 0);
}

HARNESS_CASE(infeasible_region_bisected)
{
    /* The SD's lower end with a feasibility edge: sigma <= 0 is infeasible; a tiny sample (n = 3) puts
     * the lower end far from the Wald guess, so the search must bracket through infeasible points. */
    double x[3] = {1.0, 1.3, 0.4};
    double xbar = 0.9, s2 = 0;
    for (int i = 0; i < 3; i++) s2 += (x[i] - xbar) * (x[i] - xbar) / 3;
    double est[2] = {xbar, sqrt(s2)}, info[4] = {3 / s2, 0, 0, 6 / s2}, g[2];
    sample smp = {x, 3};
    bl_profile_problem p = {.k = 2, .estimate = est, .ll_max = normal_ll(&smp, est, g), .info = info, .loglik = normal_ll, .user = &smp};
    bl_error err = {0};
    double lo, hi;
    check_int(bl_profile_interval(&p, 1, -INFINITY, &lo, &hi, &err), BL_OK, "profile of the SD, n = 3");
    dev_params d = {3, s2, 0, 0};
    /* the search stops when sqrt(deviance) is within 1e-3 of z: the deviance within 2 z 1e-3 of q */
    check_abs(sd_deviance(lo, &d), 0, 0.004, "n = 3: deviance at the lower end = q");
    check_abs(sd_deviance(hi, &d), 0, 0.004, "n = 3: deviance at the upper end = q");
    check_rel(lo, brent(sd_deviance, &d, 0.05 * sqrt(s2), sqrt(s2)), 1e-3, "n = 3: lower end (GSL Brent)");
    check_rel(hi, brent(sd_deviance, &d, sqrt(s2), 100 * sqrt(s2)), 1e-3, "n = 3: upper end (GSL Brent)");
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(normal_mean_and_sd),
        HARNESS_ENTRY(even_variance_lower_end_at_zero),
        HARNESS_ENTRY(infeasible_region_bisected),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
