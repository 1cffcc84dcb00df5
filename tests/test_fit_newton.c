/* The optimiser's Newton iterations and its stopping rule in standard-error units (docs/methods.md,
 * "Optimiser"), on data drawn with the engine's exact sampler under the full model:
 *  - the optimum equals an independent Nelder-Mead search (GSL nmsimplex2; Nelder & Mead 1965, Comput.
 *    J. 7:308-313) run here directly on the coefficients, in log-likelihood and in the estimates;
 *  - the reported Newton decrement is recomputed from the reported covariance and the gradient at the
 *    estimates: sqrt(g' I^-1 g) (Boyd & Vandenberghe 2004, Convex Optimization, sec. 9.5.1);
 *  - a maximum on the edge (start_range -> 0): the log-likelihood equals that of the model with
 *    start_range fixed at 0 (a maximum at the edge of a range is the maximum of the restricted model),
 *    the fit is reported converged, and the edge is named in a warning;
 *  - the 1,000-trial fit with drift_sd, start_range and nondecision_range free converges in fewer than
 *    1,000 likelihood evaluations (the BFGS optimiser it replaced used 3,829 on these data, measured). */
#include "fit/fit.h"
#include "fit_testutil.h"
#include "harness.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_multimin.h>
#include <math.h>

/* Trials drawn from the full model: threshold 1.4, drift 2 / 1 by context, nondecision 0.3, and the
 * given drift_sd, start_range, nondecision_range. */
static bl_trials *variability_trials(size_t n, unsigned long seed, double sv, double sz, double st)
{
    sim_truth tr = {.n = n, .n_participants = 1, .a = {1.2, 1.2}, .v = {1.5, 1.5, 1.5}, .t0 = 0.3};
    bl_trials *t = sim_trials(&tr, seed);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);
    const double vctx[2] = {2.0, 1.0};
    for (size_t i = 0; i < t->n; i++) {
        bl_wiener_params w;
        bl_wiener_params_default(&w);
        w.value[BL_THRESHOLD] = 1.4;
        w.value[BL_DRIFT] = vctx[i % 2]; /* sim_trials: context = i % 2 */
        w.value[BL_NONDECISION] = 0.3;
        w.value[BL_DRIFT_SD] = sv;
        w.value[BL_START_RANGE] = sz;
        w.value[BL_NONDECISION_RANGE] = st;
        int up;
        double rt;
        if (bl_wiener_sample(&w, rng, &up, &rt, NULL) != BL_OK) {
            fprintf(stderr, "sampler failed\n");
            exit(1);
        }
        t->upper[i] = up;
        t->rt[i] = rt;
        t->drift_sign[i] = 1;
    }
    gsl_rng_free(rng);
    return t;
}

/* Model: threshold, drift per context, nondecision, plus the variability parameters named free. */
static bl_model *variability_model(const bl_trials *t, int sv_free, int sz_free, int st_free)
{
    bl_model_spec s;
    spec_default(&s, "variability");
    s.param[BL_DRIFT].per = col_context;
    s.param[BL_DRIFT].n_per = 1;
    s.param[BL_DRIFT_SD].is_fixed = !sv_free;
    s.param[BL_START_RANGE].is_fixed = !sz_free;
    s.param[BL_NONDECISION_RANGE].is_fixed = !st_free;
    bl_model *m = NULL;
    bl_error err = {0};
    if (bl_model_build(&s, t, NULL, &m, &err)) fprintf(stderr, "model: %s\n", err.message);
    return m;
}

static int fit(bl_model *m, bl_fit_result *r, bl_warnings *warn)
{
    bl_fit_options opt;
    bl_fit_options_default(&opt);
    opt.threads = 1;
    bl_error err = {0};
    if (bl_fit_model(m, &opt, NULL, r, warn, &err) != BL_OK) {
        fprintf(stderr, "fit: %s\n", err.message);
        return 0;
    }
    return 1;
}

typedef struct {
    bl_likelihood *w;
} nm_ctx;

static double nm_f(const gsl_vector *x, void *p)
{
    nm_ctx *c = p;
    double ll = bl_likelihood_eval(c->w, x->data, NULL);
    return isfinite(ll) ? -ll : 1e300;
}

/* Nelder-Mead from x0 with restarts (McKinnon 1998, SIAM J. Optim. 9:148-158: the simplex can stall
 * on curved valleys); returns the maximum log-likelihood and leaves the coefficients in best. */
static double nelder_mead(bl_likelihood *w, size_t k, const double *x0, double *best)
{
    nm_ctx c = {w};
    gsl_multimin_function fn = {nm_f, k, &c};
    gsl_multimin_fminimizer *nm = gsl_multimin_fminimizer_alloc(gsl_multimin_fminimizer_nmsimplex2, k);
    gsl_vector *x = gsl_vector_alloc(k), *step = gsl_vector_alloc(k);
    for (size_t j = 0; j < k; j++) gsl_vector_set(x, j, x0[j]);
    gsl_vector_set_all(step, 0.05);
    gsl_multimin_fminimizer_set(nm, &fn, x, step);
    double fbest = INFINITY;
    for (int round = 0; round < 8; round++) {
        for (int it = 0; it < 20000; it++) {
            if (gsl_multimin_fminimizer_iterate(nm)) break;
            if (gsl_multimin_test_size(gsl_multimin_fminimizer_size(nm), 1e-9) == GSL_SUCCESS) break;
        }
        int better = fbest - nm->fval > 1e-10;
        if (nm->fval < fbest) {
            fbest = nm->fval;
            gsl_vector_memcpy(x, nm->x);
        }
        if (!better) break;
        gsl_vector_set_all(step, 0.01);
        gsl_multimin_fminimizer_set(nm, &fn, x, step);
    }
    for (size_t j = 0; j < k; j++) best[j] = gsl_vector_get(x, j);
    gsl_multimin_fminimizer_free(nm);
    gsl_vector_free(x);
    gsl_vector_free(step);
    return -fbest;
}

/* Independent optimiser on a model with drift_sd and nondecision_range free (5 coefficients). */
HARNESS_CASE(nelder_mead_agrees)
{
    bl_trials *t = variability_trials(400, 7, 1.0, 0, 0.15);
    bl_model *m = variability_model(t, 1, 0, 1);
    bl_warnings warn = {0};
    bl_fit_result r;
    if (!check_true(m && fit(m, &r, &warn), "fit runs")) return;
    check_true(r.converged, "converged (decrement %.3g)", r.diag.newton_decrement);
    size_t k = r.n_coef;
    bl_likelihood *w = NULL;
    bl_error err = {0};
    bl_likelihood_create(m, 1, &w, &err);
    /* started away from the optimum: threshold, drift rich, drift lean, nondecision, drift_sd, range */
    const double x0[6] = {1.2, 1.5, 1.5, 0.25, 0.5, 0.1};
    double best[6];
    double ll_nm = nelder_mead(w, k, x0, best);
    check_true(r.log_likelihood >= ll_nm - 1e-7, "Newton optimum %.9f >= Nelder-Mead %.9f", r.log_likelihood, ll_nm);
    check_abs(r.log_likelihood, ll_nm, 1e-5, "Newton optimum = Nelder-Mead optimum in log-likelihood");
    for (size_t j = 0; j < k; j++)
        check_abs(r.coef[j].estimate, best[j], 0.02 * r.coef[j].se, "%s %s: Newton = Nelder-Mead within 0.02 SE",
                  r.coef[j].parameter, r.coef[j].level);
    /* the decrement recomputed from the reported covariance and the gradient at the estimates */
    double c[6], g[6];
    for (size_t j = 0; j < k; j++) c[j] = r.coef[j].estimate;
    bl_likelihood_eval(w, c, g);
    double d2 = 0;
    for (size_t i = 0; i < k; i++)
        for (size_t j = 0; j < k; j++) d2 += g[i] * r.covariance[i * k + j] * g[j];
    check_true(sqrt(d2) <= 1e-2, "sqrt(g' I^-1 g) = %.3g standard errors at the estimates (<= 0.01)", sqrt(d2));
    check_true(r.diag.evaluations > 0, "evaluations reported (%zu)", r.diag.evaluations);
    bl_likelihood_destroy(w);
    bl_fit_result_clear(&r);
    bl_model_destroy(m);
    bl_trials_destroy(t);
    bl_warnings_clear(&warn);
}

/* Data without start variability; seeds 4 and 9 put the maximum of start_range at 0 (with 500 trials
 * about half the seeds do; the check below fails if it does not). */
HARNESS_CASE(edge_maximum)
{
    const unsigned long seeds[2] = {4, 9};
    for (int s = 0; s < 2; s++) {
        bl_trials *t = variability_trials(500, seeds[s], 0, 0, 0);
        bl_model *m_free = variability_model(t, 0, 1, 0), *m_fixed = variability_model(t, 0, 0, 0);
        bl_warnings warn = {0}, warn0 = {0};
        bl_fit_result r, r0;
        if (!check_true(m_free && m_fixed && fit(m_free, &r, &warn) && fit(m_fixed, &r0, &warn0), "fits run")) return;
        size_t jz = r.n_coef - 1; /* start_range is the last coefficient */
        check_true(!strcmp(r.coef[jz].parameter, "start_range"), "last coefficient is start_range");
        check_true(r.coef[jz].estimate < 1e-3, "seed %lu: start_range at the edge (%.3g)", seeds[s],
                   r.coef[jz].estimate);
        check_true(r.converged, "seed %lu: a maximum at the edge is reported converged (decrement %.3g)", seeds[s],
                   r.diag.newton_decrement);
        check_true(r.log_likelihood >= r0.log_likelihood - 1e-7, "seed %lu: free model LL %.9f >= restricted %.9f",
                   seeds[s], r.log_likelihood, r0.log_likelihood);
        check_abs(r.log_likelihood, r0.log_likelihood, 1e-5,
                  "seed %lu: LL at the edge = LL with start_range fixed at 0", seeds[s]);
        int named = 0;
        for (size_t i = 0; i < warn.count; i++)
            named |= strstr(warn.items[i], "edge") && strstr(warn.items[i], "start_range");
        check_true(named, "seed %lu: a warning names start_range at the edge", seeds[s]);
        bl_fit_result_clear(&r);
        bl_fit_result_clear(&r0);
        bl_model_destroy(m_free);
        bl_model_destroy(m_fixed);
        bl_trials_destroy(t);
        bl_warnings_clear(&warn);
        bl_warnings_clear(&warn0);
    }
}

/* The benchmark's fit (bench/bench_fit.c, dataset 1): all three variability parameters free. */
HARNESS_CASE(all_free_evaluations)
{
    bl_trials *t = variability_trials(1000, 99, 1.0, 0.3, 0.15);
    bl_model *m = variability_model(t, 1, 1, 1);
    bl_warnings warn = {0};
    bl_fit_result r;
    if (!check_true(m && fit(m, &r, &warn), "fit runs")) return;
    check_true(r.converged, "converged (decrement %.3g)", r.diag.newton_decrement);
    check_true(r.diag.evaluations < 1000, "%zu likelihood evaluations (< 1000)", r.diag.evaluations);
    check_int(r.diag.starts_agreed, r.diag.starts, "every start reached the same maximum");
    bl_fit_result_clear(&r);
    bl_model_destroy(m);
    bl_trials_destroy(t);
    bl_warnings_clear(&warn);
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(nelder_mead_agrees),
        HARNESS_ENTRY(edge_maximum),
        HARNESS_ENTRY(all_free_evaluations),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
