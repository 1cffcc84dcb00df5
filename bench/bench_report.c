/* Speed of the report module, as ratios to references measured in the same run:
 *  1. mixture quantiles of a group (5 quantiles, both boundaries, n distinct trial distributions) by
 *     the tabulated mixture CDF (bl_goodness_mixture_quantiles) vs the previous method, safeguarded
 *     Newton on the whole mixture for every quantile (ref_newton_mixture_quantiles below, kept here
 *     as the reference), timed in alternating rounds in the same run, with the largest relative
 *     difference between the two answers; for plain trials, trials with across-trial variability,
 *     and a single trial;
 *  2. mixture quantiles vs n x 5 single-distribution quantiles by the engine (bl_wiener_quantile);
 *  3. figures + report.html vs the goodness of fit of the same invented data set (600 trials, 2 models),
 *     and that goodness of fit with 1 vs 2 threads.
 * Usage: bench-report [n] [rounds]   (default n = 360, a demo-sized condition cell; 7 rounds). */
#include "report/report.h"
#include "report_fixture.h"

#include <gsl/gsl_errno.h>
#include <stdio.h>
#include <time.h>
#include <unistd.h>

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

/* ---- reference: the previous method, Newton per quantile on the whole mixture ---- */

static unsigned long ref_evaluations; /* mixture evaluations (each: every trial's CDF and density) */

typedef struct {
    const bl_wiener_params *p;
    const double *w;
    size_t n;
    int upper;
    double target; /* prob x sum w_i P_i */
    bl_error *err;
} ref_ctx;

/* f(t) = sum w_i cdf_i(t) - target and, when df != NULL, f'(t) = sum w_i density_i(t). */
static bl_status ref_eval(const ref_ctx *c, double t, double *f, double *df)
{
    double sum = 0, dsum = 0;
    ref_evaluations++;
    for (size_t i = 0; i < c->n; i++) {
        double wi = c->w ? c->w[i] : 1.0, v, ld;
        bl_status st = bl_wiener_cdf(&c->p[i], t, c->upper, &v, c->err);
        if (st != BL_OK) return st;
        sum += wi * v;
        if (df) {
            if ((st = bl_wiener_log_density(&c->p[i], t, c->upper, &ld, c->err)) != BL_OK) return st;
            dsum += wi * exp(ld);
        }
    }
    *f = sum - c->target;
    if (df) *df = dsum;
    return BL_OK;
}

static double ref_earliest(const bl_wiener_params *p)
{
    double t = p->value[BL_NONDECISION] - p->value[BL_NONDECISION_RANGE] / 2;
    if (p->value[BL_CONTAMINATION] > 0 && p->contamination_lo < t) t = p->contamination_lo;
    return t > 0 ? t : 0;
}

enum { REF_MAX_STEPS = 200 };
static const double REF_TOL = 1e-9; /* seconds */

/* Root of the increasing function f in [a, b] with f(a) <= 0 <= f(b): Newton steps on the mixture
 * density, kept inside the bracket, and bisection whenever a Newton step would leave the bracket or
 * does not halve the previous step (Press et al. 2007, Numerical Recipes 3rd ed., section 9.4,
 * "rtsafe"). x is the first point tried. */
static bl_status ref_solve(const ref_ctx *c, double a, double b, double x, double *root, bl_error *err)
{
    double dx_old = b - a, dx = dx_old;
    for (int it = 0; it < REF_MAX_STEPS; it++) {
        double f, df;
        bl_status st = ref_eval(c, x, &f, &df);
        if (st != BL_OK) return st;
        if (f == 0) {
            *root = x;
            return BL_OK;
        }
        if (f < 0) a = x;
        else b = x;
        /* Converged when the Newton step itself is below the tolerance. */
        if (df > 0 && fabs(f) < REF_TOL * df) {
            *root = x - f / df;
            return BL_OK;
        }
        double xn = (df > 0 && isfinite(df)) ? x - f / df : NAN;
        if (!(xn > a && xn < b) || fabs(2 * f) > fabs(dx_old * df)) {
            dx_old = dx;
            xn = 0.5 * (a + b);
            dx = xn - x;
        } else {
            dx_old = dx;
            dx = xn - x;
        }
        if (fabs(dx) < REF_TOL || b - a < REF_TOL) {
            *root = xn;
            return BL_OK;
        }
        x = xn;
    }
    return bl_error_set(err, BL_ERR_NUMERIC, "mixture quantile: no convergence in %d steps (bracket [%.17g, %.17g] s)",
                        REF_MAX_STEPS, a, b);
}

static bl_status ref_newton_mixture_quantiles(const bl_wiener_params *params, const double *w, size_t n, int upper,
                                              const double *probs, size_t k, double *q, double *share, bl_error *err)
{
    for (size_t j = 0; j < k; j++) q[j] = NAN;
    if (share) *share = NAN;
    if (n == 0) return BL_OK;
    double wsum = 0, psum = 0, lo = INFINITY, maxmean = 0;
    for (size_t i = 0; i < n; i++) {
        double wi = w ? w[i] : 1.0, pu, m;
        bl_status st = bl_wiener_p_upper(&params[i], &pu, err);
        if (st != BL_OK) return st;
        double pb = upper ? pu : 1 - pu;
        wsum += wi;
        psum += wi * pb;
        double e = ref_earliest(&params[i]);
        if (e < lo) lo = e;
        /* Largest conditional mean RT, for the Markov bracket below (components that never reach
         * this boundary do not count). */
        if (pb > 1e-300 && bl_wiener_mean_rt(&params[i], upper, &m, NULL) == BL_OK && isfinite(m) && m > maxmean)
            maxmean = m;
    }
    if (share) *share = psum / wsum;
    if (!(psum / wsum >= 1e-12)) return BL_OK;

    ref_ctx c = {params, w, n, upper, 0, err};
    for (size_t j = 0; j < k; j++) {
        double prob = probs[j];
        if (!(prob > 0 && prob < 1))
            return bl_error_set(err, BL_ERR_RANGE, "quantile probability %g is outside (0, 1)", prob);
        c.target = prob * psum;
        /* Bracket: nothing is below the earliest RT (or the previous, smaller quantile); by Markov's
         * inequality every conditional CDF is >= prob at E[RT | boundary] / (1 - prob), so the
         * mixture is too. */
        double a = (j > 0 && isfinite(q[j - 1]) && probs[j - 1] < prob) ? q[j - 1] : lo;
        double b = fmax(maxmean / (1 - prob), a + 4 * REF_TOL);
        /* Start from the previous quantile (Newton moves right from there) or the bracket's middle.
         * F(a) < p needs no check (a is the earliest RT or a smaller quantile); F(b) >= p holds
         * by Markov's inequality, and is checked only when the root lands on b (engine rounding). */
        double x0 = j > 0 ? a : 0.5 * (a + b);
        bl_status st = ref_solve(&c, a, b, x0, &q[j], err);
        for (int grow = 0; st == BL_OK && q[j] > b - 2 * REF_TOL; grow++) {
            double fb;
            if ((st = ref_eval(&c, b, &fb, NULL)) != BL_OK) break;
            if (fb >= 0) break;
            if (grow == 40) {
                st = bl_error_set(err, BL_ERR_NUMERIC,
                                  "mixture quantile %g: cannot bracket the root (F-p = %g at %g s)", prob, fb, b);
                break;
            }
            a = b;
            b = a + 2 * (b - lo);
            st = ref_solve(&c, a, b, a, &q[j], err);
        }
        if (st != BL_OK) return st;
    }
    return BL_OK;
}

/* ---- comparison ---- */

typedef bl_status (*mixture_fn)(const bl_wiener_params *, const double *, size_t, int, const double *, size_t, double *,
                                double *, bl_error *);

/* Both boundaries of one group; seconds; q[2][5] filled. */
static double time_both(mixture_fn fn, const bl_wiener_params *p, size_t n, double q[2][5], int *fail)
{
    double t = now(), share;
    bl_error err = {0};
    for (int u = 0; u < 2; u++)
        if (fn(p, NULL, n, u, bl_goodness_probs, 5, q[u], &share, &err) != BL_OK) {
            fprintf(stderr, "bench-report: %s\n", err.message);
            *fail = 1;
        }
    return now() - t;
}

/* New vs old in alternating rounds (best of `rounds` each); returns 0 on success. */
static int compare(const char *label, const bl_wiener_params *p, size_t n, int rounds)
{
    double best_new = INFINITY, best_old = INFINITY, qn[2][5], qo[2][5], worst = 0;
    int fail = 0;
    unsigned long evals = 0;
    for (int r = 0; r < rounds; r++) {
        best_new = fmin(best_new, time_both(bl_goodness_mixture_quantiles, p, n, qn, &fail));
        ref_evaluations = 0;
        best_old = fmin(best_old, time_both(ref_newton_mixture_quantiles, p, n, qo, &fail));
        evals = ref_evaluations;
        for (int u = 0; u < 2; u++)
            for (int k = 0; k < 5; k++) {
                if (isnan(qn[u][k]) && isnan(qo[u][k])) continue;
                double d = fabs(qn[u][k] - qo[u][k]) / fabs(qo[u][k]);
                worst = isnan(d) ? INFINITY : fmax(worst, d);
            }
    }
    if (fail) return 1;
    printf("%s, %zu trials x 5 quantiles x 2 boundaries: tabulated mixture CDF %.3f ms, Newton per quantile %.3f ms "
           "(%lu mixture evaluations); speed-up %.2f; largest relative difference %.1e\n",
           label, n, 1e3 * best_new, 1e3 * best_old, evals, best_old / best_new, worst);
    return 0;
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    size_t n = argc > 1 ? (size_t)atol(argv[1]) : 360;
    int rounds = argc > 2 ? atoi(argv[2]) : 7;
    if (n < 1) n = 360;
    if (rounds < 1) rounds = 7;
    bl_wiener_params *p = calloc(n, sizeof *p), *pv = calloc(n, sizeof *pv), *pst = calloc(n, sizeof *pst);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 7);
    for (size_t i = 0; i < n; i++) {
        p[i] = fx_params(1.6 + 0.27 * gsl_ran_gaussian(rng, 1), 1.4 - 0.2 * gsl_ran_gaussian(rng, 1), 0.3);
        /* The same with across-trial variability of drift and start; and of nondecision. */
        pv[i] = p[i];
        pv[i].value[BL_DRIFT_SD] = 0.6 + 0.1 * gsl_rng_uniform(rng);
        pv[i].value[BL_START_RANGE] = 0.2;
        pst[i] = pv[i];
        pst[i].value[BL_NONDECISION_RANGE] = 0.08;
    }
    if (compare("plain trials", p, n, rounds)) return 1;
    if (compare("drift_sd, start_range", pv, n < 40 ? n : 40, rounds)) return 1;
    /* The CDF with nondecision_range integrates over it (48 nodes): ~0.2 s per trial and group. */
    if (compare("drift_sd, start_range, nondecision_range", pst, n < 2 ? n : 2, rounds < 2 ? rounds : 2)) return 1;
    if (compare("one trial", p, 1, rounds)) return 1;

    double q[5], share, sink = 0;
    int reps = 10;
    double t = now();
    for (int r = 0; r < reps; r++)
        for (int u = 0; u < 2; u++) {
            if (bl_goodness_mixture_quantiles(p, NULL, n, u, bl_goodness_probs, 5, q, &share, NULL) != BL_OK) return 1;
            sink += q[2];
        }
    double mix = (now() - t) / (2.0 * reps);
    t = now();
    for (int r = 0; r < 2; r++)
        for (size_t i = 0; i < n; i++)
            for (int k = 0; k < 5; k++) {
                double x;
                if (bl_wiener_quantile(&p[i], bl_goodness_probs[k], r, &x, NULL) != BL_OK) return 1;
                sink += x;
            }
    double single = (now() - t) / 2.0;
    printf("mixture quantiles, %zu trials x 5 quantiles: %.2f ms; the same as %zu x 5 single quantiles: %.2f ms; "
           "ratio %.2f\n",
           n, 1e3 * mix, n, 1e3 * single, mix / single);

    fixture *fx = fixture_create(20261202, 0);
    bl_goodness *g = NULL;
    bl_figure_set *fs = NULL;
    t = now();
    if (bl_goodness_compute(&fx->study, &fx->trials, &fx->set, 1, &g, NULL) != BL_OK) return 1;
    double tg = now() - t;
    /* 1 vs 2 threads on the same small input (1200 trials over all tasks: just above the threshold at
     * which bl_goodness_compute starts a team), alternating, best of `rounds`. */
    double best1 = INFINITY, best2 = INFINITY;
    for (int r = 0; r < rounds; r++)
        for (int th = 1; th <= 2; th++) {
            bl_goodness *gt = NULL;
            double t1 = now();
            if (bl_goodness_compute(&fx->study, &fx->trials, &fx->set, th, &gt, NULL) != BL_OK) return 1;
            double d = now() - t1;
            if (th == 1) best1 = fmin(best1, d);
            else best2 = fmin(best2, d);
            bl_goodness_destroy(gt);
        }
    printf("goodness of fit, 600 trials x 2 models: 1 thread %.2f ms, 2 threads %.2f ms; ratio %.2f\n", 1e3 * best1,
           1e3 * best2, best2 / best1);
    char dir[] = "/tmp/bl_bench_report_XXXXXX";
    if (!mkdtemp(dir)) return 1;
    char path[300];
    snprintf(path, sizeof path, "%s/report.html", dir);
    t = now();
    if (bl_figures_make(&fx->study, &fx->trials, &fx->power, &fx->set, g, &fs, NULL) != BL_OK) return 1;
    if (bl_report_write(path, NULL, &fx->study, &fx->trials, &fx->power, &fx->set, g, fs, NULL, NULL) != BL_OK)
        return 1;
    double tf = now() - t;
    unlink(path);
    rmdir(dir);
    printf("600 trials, 2 models, 1 thread: goodness of fit %.1f ms; figures + report.html %.1f ms; ratio %.3f\n",
           1e3 * tg, 1e3 * tf, tf / tg);
    bl_figure_set_destroy(fs);
    bl_goodness_destroy(g);
    fixture_destroy(fx);
    gsl_rng_free(rng);
    free(p);
    free(pv);
    free(pst);
    return sink == 12345.678 ? 2 : 0;
}
