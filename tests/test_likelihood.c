/* Summed log-likelihood with trial-wise parameters: value against the definition (sum of the
 * engine's per-trial log-densities with parameters computed here from the regression), analytic
 * gradient against central finite differences (Nocedal & Wright 2006,
 * Numerical Optimization, section 8.1), invariance to the thread count, infeasible points. */
#include "design/model.h"
#include "fit_testutil.h"
#include "harness.h"

#include <gsl/gsl_errno.h>
#include <math.h>

static bl_model_spec regression_spec(bl_slope_spec *a_slope, bl_slope_spec *v_slope, int log_threshold)
{
    bl_model_spec s;
    spec_default(&s, "regression");
    s.param[BL_THRESHOLD].per = col_context;
    s.param[BL_THRESHOLD].n_per = 1;
    a_slope->regressor = "theta";
    a_slope->by = col_context;
    a_slope->n_by = 1;
    s.param[BL_THRESHOLD].slopes = a_slope;
    s.param[BL_THRESHOLD].n_slopes = 1;
    s.param[BL_THRESHOLD].link = log_threshold ? BL_LINK_LOG : BL_LINK_IDENTITY;
    s.param[BL_DRIFT].per = col_difficulty;
    s.param[BL_DRIFT].n_per = 1;
    v_slope->regressor = "beta";
    v_slope->by = NULL;
    v_slope->n_by = 0;
    s.param[BL_DRIFT].slopes = v_slope;
    s.param[BL_DRIFT].n_slopes = 1;
    return s;
}

/* Coefficients: threshold rich, lean, theta:rich, theta:lean, drift easy, medium, hard, beta, t0. */
static void check_gradient(bl_likelihood *w, const double *coef, size_t k, const char *label)
{
    double *g = malloc(k * sizeof *g), *c = malloc(k * sizeof *c);
    double ll = bl_likelihood_eval(w, coef, g);
    check_true(isfinite(ll), "%s: finite log-likelihood %.6f", label, ll);
    for (size_t j = 0; j < k; j++) {
        memcpy(c, coef, k * sizeof *c);
        double h = 1e-5 * fmax(1.0, fabs(coef[j]));
        c[j] = coef[j] + h;
        double lp = bl_likelihood_eval(w, c, NULL);
        c[j] = coef[j] - h;
        double lm = bl_likelihood_eval(w, c, NULL);
        double fd = (lp - lm) / (2 * h);
        /* Central differences: O(h^2) truncation plus ~1e-10*|LL|/h rounding from the series
         * tolerance; 1e-5 relative (or 1e-3 absolute near zero) is well above both. */
        check_abs(g[j], fd, 1e-5 * fabs(fd) + 1e-3, "%s: d loglik / d coef %zu analytic vs central difference", label,
                  j);
    }
    free(g);
    free(c);
}

/* The trials and the identity-link regression model every case uses, built once; freed at exit. */
static bl_trials *t;
static bl_model *m;
static bl_slope_spec fx_as, fx_vs;
static bl_model_spec fx_spec;
static const double coef[9] = {1.37, 1.05, 0.15, 0.03, 1.8, 1.1, 0.45, -0.15, 0.27};

static void fixture_free(void)
{
    bl_model_destroy(m);
    bl_trials_destroy(t);
}

static int fixture(void)
{
    static int tried;
    if (tried) return m != NULL;
    tried = 1;
    sim_truth tr = {.n = 600,
                    .n_participants = 2,
                    .a = {1.4, 1.0},
                    .a_slope = {0.2, 0.0},
                    .v = {2.0, 1.2, 0.5},
                    .v_slope = -0.2,
                    .t0 = 0.3,
                    .stimulus = 1};
    t = sim_trials(&tr, 11);
    atexit(fixture_free);
    fx_spec = regression_spec(&fx_as, &fx_vs, 0);
    bl_error err = {0};
    if (!check_true(bl_model_build(&fx_spec, t, NULL, &m, &err) == BL_OK, "model builds (%s)", err.message)) return 0;
    size_t k = bl_model_n_coef(m);
    return check_true(k == 9, "9 coefficients (got %zu)", k);
}

HARNESS_CASE(value_gradient_and_count)
{
    if (!fixture()) return;
    /* Value: the definition, computed here trial by trial from the regression and the engine's
     * log-density, with drift multiplied by the stimulus sign (stimulus coding). */
    bl_error err = {0};
    bl_likelihood *w1 = NULL;
    check_true(bl_likelihood_create(m, 1, &w1, &err) == BL_OK, "likelihood workspace");
    double ll = bl_likelihood_eval(w1, coef, NULL);
    const bl_table *tab = t->table;
    int c_theta = bl_table_find(tab, "theta"), c_beta = bl_table_find(tab, "beta");
    double want = 0;
    for (size_t i = 0; i < t->n; i++) {
        int ctx = strcmp(tab->cols[bl_table_find(tab, "context")].text[i], "rich") == 0 ? 0 : 1;
        const char *d = tab->cols[bl_table_find(tab, "difficulty")].text[i];
        int dif = !strcmp(d, "easy") ? 0 : !strcmp(d, "medium") ? 1 : 2;
        bl_wiener_params p;
        bl_wiener_params_default(&p);
        p.value[BL_THRESHOLD] = coef[ctx] + coef[2 + ctx] * tab->cols[c_theta].num[i];
        p.value[BL_DRIFT] = t->drift_sign[i] * (coef[4 + dif] + coef[7] * tab->cols[c_beta].num[i]);
        p.value[BL_NONDECISION] = coef[8];
        p.value[BL_START] = 0.5;
        double lf;
        bl_wiener_log_density(&p, t->rt[i], t->upper[i], &lf, NULL);
        want += lf;
    }
    /* The engine's series tolerance is 1e-10 relative (docs/methods.md), so the two routines agree to that. */
    check_rel(ll, want, 1e-10, "total log-likelihood equals the sum of per-trial log-densities");

    check_gradient(w1, coef, bl_model_n_coef(m), "identity link");
    /* 1 evaluation above and 19 in check_gradient. */
    check_true(bl_likelihood_evaluations(w1) >= 20, "evaluations are counted (%zu)", bl_likelihood_evaluations(w1));
    bl_likelihood_destroy(w1);
}

/* Predicted parameters of a trial agree with the regression too. */
HARNESS_CASE(predicted_parameters)
{
    if (!fixture()) return;
    const bl_table *tab = t->table;
    int c_beta = bl_table_find(tab, "beta");
    bl_wiener_params pp;
    int valid = bl_model_predict(m, coef, 5, &pp);
    size_t row5 = bl_model_row(m, 5);
    check_true(valid, "trial 5 predicted parameters are valid");
    check_rel(pp.value[BL_NONDECISION], 0.27, 1e-15, "predicted nondecision");
    check_rel(fabs(pp.value[BL_DRIFT]), fabs(coef[4 + (int)((row5 / 2) % 3)] + coef[7] * tab->cols[c_beta].num[row5]),
              1e-14, "predicted drift magnitude (trial 5)");
}

/* Thread-count invariance: the fixed block reduction gives the same bits. */
HARNESS_CASE(thread_invariance)
{
    if (!fixture()) return;
    double g1[9], g2[9], g3[9];
    bl_error err = {0};
    bl_likelihood *w1 = NULL, *w2 = NULL, *w3 = NULL;
    bl_likelihood_create(m, 1, &w1, &err);
    bl_likelihood_create(m, 2, &w2, &err);
    bl_likelihood_create(m, 3, &w3, &err);
    /* Force the parallel path (600 trials would otherwise run on one thread). */
    bl_likelihood_set_parallel(w2, BL_PARALLEL_SPLIT);
    bl_likelihood_set_parallel(w3, BL_PARALLEL_SPLIT);
    double l1 = bl_likelihood_eval(w1, coef, g1), l2 = bl_likelihood_eval(w2, coef, g2),
           l3 = bl_likelihood_eval(w3, coef, g3);
    check_abs(l2, l1, 1e-12 * fabs(l1), "1 vs 2 threads: same log-likelihood");
    check_abs(l3, l1, 1e-12 * fabs(l1), "1 vs 3 threads: same log-likelihood");
    double gd = 0;
    for (int j = 0; j < 9; j++) gd = fmax(gd, fmax(fabs(g2[j] - g1[j]), fabs(g3[j] - g1[j])));
    check_abs(gd, 0, 1e-12, "1 vs 2 vs 3 threads: same gradient");
    bl_likelihood_destroy(w1);
    bl_likelihood_destroy(w2);
    bl_likelihood_destroy(w3);
}

/* Infeasible points: a negative threshold on some trials, nondecision above the fastest RT. */
HARNESS_CASE(infeasible_points)
{
    if (!fixture()) return;
    bl_likelihood *w1 = NULL;
    if (!check_true(bl_likelihood_create(m, 1, &w1, NULL) == BL_OK, "likelihood workspace")) return;
    double bad[9];
    memcpy(bad, coef, sizeof bad);
    bad[2] = 3.0; /* theta slope 3 at rich: threshold < 0 when theta < -0.46 */
    double gb[9];
    double lb = bl_likelihood_eval(w1, bad, gb);
    int zero = 1;
    for (int j = 0; j < 9; j++) zero = zero && gb[j] == 0;
    check_true(lb == -INFINITY && zero, "negative threshold on a trial: -inf and zero gradient, no NaN");
    memcpy(bad, coef, sizeof bad);
    double minrt = INFINITY;
    for (size_t i = 0; i < t->n; i++) minrt = fmin(minrt, t->rt[i]);
    bad[8] = minrt + 0.01;
    check_true(bl_likelihood_eval(w1, bad, gb) == -INFINITY, "nondecision above the fastest RT: -inf");
    bad[8] = NAN;
    check_true(bl_likelihood_eval(w1, bad, gb) == -INFINITY, "NaN coefficient: -inf");
    bl_likelihood_destroy(w1);
}

/* Per-trial values sum to the total. */
HARNESS_CASE(per_trial_sum)
{
    if (!fixture()) return;
    bl_likelihood *w1 = NULL;
    if (!check_true(bl_likelihood_create(m, 1, &w1, NULL) == BL_OK, "likelihood workspace")) return;
    double *tll = malloc(t->n * sizeof *tll);
    double tot = bl_likelihood_trials(w1, coef, tll), s = 0;
    for (size_t i = 0; i < t->n; i++) s += tll[i];
    check_rel(s, tot, 1e-12, "per-trial log-likelihoods sum to the total");
    free(tll);
    bl_likelihood_destroy(w1);
}

/* Log link on threshold: chain-rule factor theta. */
HARNESS_CASE(log_link)
{
    if (!fixture()) return;
    bl_error err = {0};
    const bl_table *tab = t->table;
    int c_theta = bl_table_find(tab, "theta");
    bl_slope_spec as2, vs2;
    bl_model_spec spec2 = regression_spec(&as2, &vs2, 1);
    bl_model *m2 = NULL;
    check_true(bl_model_build(&spec2, t, NULL, &m2, &err) == BL_OK, "log-link model builds");
    bl_likelihood *wl = NULL;
    bl_likelihood_create(m2, 2, &wl, &err);
    const double coefl[9] = {log(1.37), log(1.05), 0.1, 0.02, 1.8, 1.1, 0.45, -0.15, 0.27};
    check_gradient(wl, coefl, 9, "log link");
    bl_wiener_params pl;
    bl_model_predict(m2, coefl, 0, &pl);
    check_rel(pl.value[BL_THRESHOLD], exp(coefl[0] + coefl[2] * tab->cols[c_theta].num[bl_model_row(m2, 0)]), 1e-14,
              "log link: threshold = exp(linear predictor)");
    bl_likelihood_destroy(wl);
    bl_model_destroy(m2);
}

/* Variability parameters free: the gradient still matches (drift_sd enters through the engine's
 * closed form). */
HARNESS_CASE(free_start_and_drift_sd)
{
    if (!fixture()) return;
    bl_error err = {0};
    bl_slope_spec as2, vs2;
    bl_model_spec spec3 = regression_spec(&as2, &vs2, 1);
    spec3.param[BL_DRIFT_SD].is_fixed = 0;
    spec3.param[BL_START].is_fixed = 0;
    bl_model *m3 = NULL;
    check_true(bl_model_build(&spec3, t, NULL, &m3, &err) == BL_OK, "model with free start and drift_sd builds");
    bl_likelihood *w4 = NULL;
    bl_likelihood_create(m3, 1, &w4, &err);
    /* Order: threshold(4), drift(4), nondecision, start, drift_sd. */
    const double coef3[11] = {log(1.37), log(1.05), 0.1, 0.02, 1.8, 1.1, 0.45, -0.15, 0.27, 0.47, 0.6};
    check_true(bl_model_n_coef(m3) == 11, "11 coefficients");
    check_gradient(w4, coef3, 11, "free start and drift_sd");
    bl_likelihood_destroy(w4);
    bl_model_destroy(m3);
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(value_gradient_and_count), HARNESS_ENTRY(predicted_parameters), HARNESS_ENTRY(thread_invariance),
        HARNESS_ENTRY(infeasible_points),        HARNESS_ENTRY(per_trial_sum),        HARNESS_ENTRY(log_link),
        HARNESS_ENTRY(free_start_and_drift_sd),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
