/* Scan statistics (src/scan/scan_stats.c) and tapers (src/scan/scan_power.c).
 * Outside references, beside each check:
 *  - the score is the derivative of the log-likelihood in the slope at the null estimate, and the
 *    information its negative second derivative (Rao 1948; Cox & Hinkley 1974, Theoretical Statistics,
 *    section 9.3): compared with central differences of the exact log-likelihood;
 *  - the efficient variance is the Schur complement 1 / [I^-1]_gg of the full model's information (same
 *    references), against central differences of the likelihood module's analytic gradient;
 *  - the score statistic and the likelihood-ratio statistic agree asymptotically (same references):
 *    compared on 6,000 simulated trials against a full refit by the library's optimiser;
 *  - Slepian sequences are orthonormal and even/odd (Slepian 1978, Bell Syst. Tech. J. 57);
 *  - determinism across thread counts (DEVELOPERS.md: fixed-order sums, seeds per permutation).
 * Simulated data come from the engine's exact sampler (tests/fit_testutil.h). */
#include "harness.h"
#include "fit_testutil.h"
#include "design/model_internal.h"
#include "fit/fit.h"
#include "scan/scan_power.h"
#include "scan/scan_stats.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Log-likelihood of the null model with gamma * x added to one parameter's linear predictor
 * (identity link; drift toward the upper boundary carries the trial's stimulus sign). */
static double loglik_shift(const bl_model *m, const double *coef, int param, const double *x, double gamma)
{
    double ll = 0;
    for (size_t k = 0; k < m->n; k++) {
        bl_wiener_params p;
        bl_model_predict(m, coef, k, &p);
        if (m->par[param].link == BL_LINK_LOG) p.value[param] *= exp(gamma * x[k]); /* exp(eta + gamma x) */
        else p.value[param] += gamma * x[k] * (param == BL_DRIFT ? (double)m->sign[k] : 1.0);
        double lf;
        if (bl_wiener_log_density(&p, m->rt[k], m->upper[k], &lf, NULL) != BL_OK) return NAN;
        ll += lf;
    }
    return ll;
}

static bl_study dummy_study = {.path = "test-study.json"};

/* Null model: threshold per context, drift per difficulty, nondecision; tests on threshold and drift.
 * log_link: threshold and nondecision on the log link. */
static bl_scan_null *make_null_link(const bl_trials *t, bl_model_spec *spec, bl_participants_mode mode, int log_link)
{
    spec_default(spec, "null");
    if (log_link) spec->param[BL_THRESHOLD].link = spec->param[BL_NONDECISION].link = BL_LINK_LOG;
    spec->param[BL_THRESHOLD].per = col_context;
    spec->param[BL_THRESHOLD].n_per = 1;
    spec->param[BL_DRIFT].per = col_difficulty;
    spec->param[BL_DRIFT].n_per = 1;
    bl_scan_param params[2] = {{BL_THRESHOLD, NULL, 0}, {BL_DRIFT, NULL, 0}};
    bl_scan_null *nm = NULL;
    bl_warnings w = {0};
    bl_error err = {0};
    if (bl_scan_null_create(&dummy_study, spec, t, mode, params, 2, 1, 1, &nm, &w, &err) != BL_OK)
        fprintf(stderr, "null: %s\n", err.message);
    bl_warnings_clear(&w);
    return nm;
}

static bl_scan_null *make_null(const bl_trials *t, bl_model_spec *spec, bl_participants_mode mode)
{
    return make_null_link(t, spec, mode, 0);
}

static void test_score_is_derivative(int log_link)
{
    sim_truth tr = {.n = 1200, .n_participants = 1, .a = {1.4, 1.1}, .v = {2.0, 1.2, 0.5}, .t0 = 0.3, .stimulus = 1};
    bl_trials *t = sim_trials(&tr, 11);
    bl_model_spec spec;
    printf("-- %s link on threshold\n", log_link ? "log" : "identity");
    bl_scan_null *nm = make_null_link(t, &spec, BL_PARTICIPANTS_POOLED, log_link);
    check_true(nm != NULL, "null model fitted");
    if (!nm) return;
    bl_model *m = NULL;
    bl_error err = {0};
    bl_model_build(&spec, t, NULL, &m, &err);
    size_t kc;
    const double *coef = bl_scan_null_coef(nm, &kc);
    size_t n = bl_scan_null_n_trials(nm);
    const size_t *rows = bl_scan_null_rows(nm);
    double *x = malloc(n * sizeof *x);
    int theta = bl_table_find(t->table, "theta");
    for (size_t j = 0; j < n; j++) x[j] = t->table->cols[theta].num[rows[j]] + 0.3; /* not centred */
    double score[2], eff[2], igg[2], v[2];
    bl_scan_null_score(nm, x, score, eff, igg, v);
    for (int q = 0; q < 2; q++) {
        int param = q == 0 ? BL_THRESHOLD : BL_DRIFT;
        double h = 1e-4;
        double lp = loglik_shift(m, coef, param, x, h), lm = loglik_shift(m, coef, param, x, -h),
               l0 = loglik_shift(m, coef, param, x, 0);
        double d1 = (lp - lm) / (2 * h), d2 = (lp - 2 * l0 + lm) / (h * h);
        /* Rao (1948): the score is d loglik / d gamma at gamma = 0 */
        check_rel(score[q], d1, 1e-4, "%s: score = central difference of the log-likelihood", bl_param_name(param));
        /* Cox & Hinkley (1974): information = -d^2 loglik / d gamma^2 */
        check_rel(igg[q], -d2, 2e-3, "%s: information = minus the second difference", bl_param_name(param));
        check_true(v[q] > 0 && v[q] <= igg[q], "%s: efficient variance %.6g in (0, I_gg = %.6g]", bl_param_name(param),
                   v[q], igg[q]);
    }
    free(x);
    bl_model_destroy(m);
    bl_scan_null_destroy(nm);
    bl_trials_destroy(t);
}

/* Score statistic vs a likelihood-ratio refit, with x correlated with the context intercepts so the
 * nuisance adjustment matters. */
static void test_score_close_to_lr(void)
{
    sim_truth tr = {.n = 6000,
                    .n_participants = 1,
                    .a = {1.4, 1.1},
                    .a_slope = {0.05, 0.05},
                    .v = {2.0, 1.2, 0.5},
                    .t0 = 0.3,
                    .stimulus = 1};
    bl_trials *t = sim_trials(&tr, 23);
    bl_model_spec spec;
    bl_scan_null *nm = make_null(t, &spec, BL_PARTICIPANTS_POOLED);
    check_true(nm != NULL, "null model fitted (6000 trials)");
    if (!nm) return;
    size_t n = bl_scan_null_n_trials(nm);
    const size_t *rows = bl_scan_null_rows(nm);
    int theta = bl_table_find(t->table, "theta"), ctx = bl_table_find(t->table, "context");
    double *x = malloc(n * sizeof *x), *col = malloc(t->n * sizeof *col);
    for (size_t i = 0; i < t->n; i++)
        col[i] = t->table->cols[theta].num[i] + (strcmp(t->table->cols[ctx].text[i], "rich") == 0 ? 0.8 : 0.0);
    for (size_t j = 0; j < n; j++) x[j] = col[rows[j]];
    bl_table_add_numeric(t->table, "xc", col, NULL);
    double eff[2], v[2];
    bl_scan_null_score(nm, x, NULL, eff, NULL, v);
    double score_stat = eff[0] * eff[0] / v[0];
    /* full refits: null and null + slope on xc */
    bl_fit_options o;
    bl_fit_options_default(&o);
    o.threads = 1;
    bl_model *m0 = NULL, *m1 = NULL;
    bl_error err = {0};
    bl_model_spec alt = spec;
    alt.name = "alt";
    bl_slope_spec sl = {"xc", NULL, 0};
    alt.param[BL_THRESHOLD].slopes = &sl;
    alt.param[BL_THRESHOLD].n_slopes = 1;
    bl_fit_result r0, r1;
    bl_model_build(&spec, t, NULL, &m0, &err);
    bl_model_build(&alt, t, NULL, &m1, &err);
    bl_fit_model(m0, &o, NULL, &r0, NULL, &err);
    bl_fit_model(m1, &o, NULL, &r1, NULL, &err);
    /* the efficient variance is 1 / [I^-1]_gg of the full model's information at (b^, 0) (the Schur complement;
     * Cox & Hinkley 1974, 9.3): information from central differences of the analytic gradient */
    {
        size_t k1 = bl_model_n_coef(m1), k0, jg = 0;
        const double *c0 = bl_scan_null_coef(nm, &k0);
        double *c1 = malloc(k1 * sizeof *c1), *info = malloc(k1 * k1 * sizeof *info),
               *cov = malloc(k1 * k1 * sizeof *cov);
        double *gp = malloc(k1 * sizeof *gp), *gm = malloc(k1 * sizeof *gm);
        for (size_t j = 0, i = 0; j < k1; j++) {
            if (!strcmp(bl_model_coef(m1, j)->term, "xc")) {
                jg = j;
                c1[j] = 0;
            } else {
                c1[j] = c0[i++];
            }
        }
        bl_likelihood *lk = NULL;
        bl_likelihood_create(m1, 1, &lk, NULL);
        for (size_t a = 0; a < k1; a++) {
            double h = 1e-5, keep = c1[a];
            c1[a] = keep + h;
            bl_likelihood_eval(lk, c1, gp);
            c1[a] = keep - h;
            bl_likelihood_eval(lk, c1, gm);
            c1[a] = keep;
            for (size_t b = 0; b < k1; b++) info[a * k1 + b] = -(gp[b] - gm[b]) / (2 * h);
        }
        for (size_t a = 0; a < k1; a++)
            for (size_t b = 0; b < a; b++)
                info[a * k1 + b] = info[b * k1 + a] = 0.5 * (info[a * k1 + b] + info[b * k1 + a]);
        double cond;
        int pd = 0;
        if (bl_information_inverse(info, k1, cov, &cond, &pd, NULL) == BL_OK && pd)
            check_rel(v[0], 1.0 / cov[jg * k1 + jg], 1e-4, "efficient variance = 1 / [I^-1]_gg of the full model");
        else check_true(0, "full-model information positive definite");
        bl_likelihood_destroy(lk);
        free(c1);
        free(info);
        free(cov);
        free(gp);
        free(gm);
    }
    double lr = 2 * (r1.log_likelihood - r0.log_likelihood);
    check_true(lr > 4, "planted slope gives a clear likelihood-ratio statistic (%.3f)", lr);
    /* Rao (1948) / Cox & Hinkley (1974): score and LR statistics agree to O(n^-1/2) under local alternatives */
    check_rel(score_stat, lr, 0.05, "score statistic vs likelihood-ratio statistic (6000 trials)");
    /* the one-step estimate (efficient score over V) approximates the refitted slope */
    double slope = NAN;
    for (size_t j = 0; j < r1.n_coef; j++)
        if (!strcmp(r1.coef[j].term, "xc")) slope = r1.coef[j].estimate;
    check_rel(eff[0] / v[0], slope, 0.05, "one-step estimate vs the refitted slope");
    bl_fit_result_clear(&r0);
    bl_fit_result_clear(&r1);
    bl_model_destroy(m0);
    bl_model_destroy(m1);
    free(x);
    free(col);
    bl_scan_null_destroy(nm);
    bl_trials_destroy(t);
}

static void test_grid_threads(void)
{
    sim_truth tr = {.n = 900, .n_participants = 3, .a = {1.4, 1.1}, .v = {2.0, 1.2, 0.5}, .t0 = 0.3, .v_step = 0.2};
    bl_trials *t = sim_trials(&tr, 5);
    bl_model_spec spec;
    bl_scan_null *nm = make_null(t, &spec, BL_PARTICIPANTS_SEPARATE);
    check_true(nm != NULL, "null model fitted per participant");
    if (!nm) return;
    size_t n = bl_scan_null_n_trials(nm), nf = 3, nw = 4;
    const size_t *rows = bl_scan_null_rows(nm);
    int theta = bl_table_find(t->table, "theta"), beta = bl_table_find(t->table, "beta");
    double *x = malloc(nf * nw * n * sizeof *x);
    for (size_t c = 0; c < nf * nw; c++)
        for (size_t j = 0; j < n; j++)
            x[c * n + j] = (double)(c % 3) * t->table->cols[theta].num[rows[j]] +
                           t->table->cols[beta].num[rows[j]] * (double)c;
    bl_scan_stats *s1 = NULL, *s2 = NULL, *s3 = NULL;
    bl_error err = {0};
    bl_scan_grid(nm, x, nf, nw, 200, BL_SCAN_CORRECTION_MAX, 0.05, 7, 1, NULL, NULL, &s1, &err);
    bl_scan_grid(nm, x, nf, nw, 200, BL_SCAN_CORRECTION_MAX, 0.05, 7, 2, NULL, NULL, &s2, &err);
    bl_scan_grid(nm, x, nf, nw, 200, BL_SCAN_CORRECTION_CLUSTER, 0.05, 7, 2, NULL, NULL, &s3, &err);
    check_true(s1 && s2 && s3, "grids computed");
    if (s1 && s2 && s3) {
        check_true(memcmp(s1->null_max, s2->null_max, 200 * sizeof(double)) == 0,
                   "1 and 2 threads: identical permutation maxima");
        check_true(memcmp(s1->p_familywise, s2->p_familywise, 2 * nf * nw * sizeof(double)) == 0,
                   "1 and 2 threads: identical family-wise p");
        int ok = 1;
        for (size_t i = 0; i < 2 * nf * nw; i++)
            ok &= !isfinite(s1->p_familywise[i]) || (s1->p_familywise[i] >= s1->p[i] - 1e-12 || s1->p[i] < 1.0 / 201);
        check_true(ok, "family-wise p never below the uncorrected p (unless at the permutation floor)");
        /* cluster ids refer to clusters whose cells pass the stated threshold */
        int okc = 1;
        for (size_t i = 0; i < 2 * nf * nw; i++)
            if (s3->cluster[i]) okc &= s3->statistic[i] > s3->cluster_statistic && s3->p[i] < 0.05;
        check_true(okc, "every cell in a cluster passes the cluster-forming threshold (statistic %.4f)",
                   s3->cluster_statistic);
        /* chi^2(1) upper 5% point is 3.841459 (e.g. Abramowitz & Stegun 1964, table 26.8) */
        check_abs(s3->cluster_statistic, 3.841459, 1e-5, "cluster-forming statistic for p = 0.05");
    }
    bl_scan_stats_destroy(s1);
    bl_scan_stats_destroy(s2);
    bl_scan_stats_destroy(s3);
    free(x);
    bl_scan_null_destroy(nm);
    bl_trials_destroy(t);
}

static void test_dpss_properties(void)
{
    size_t N = 256, K = 5;
    double NW = 3.0, *h = malloc(K * N * sizeof *h);
    bl_error err = {0};
    check_true(bl_dpss(N, NW, K, h, &err) == BL_OK, "dpss computed");
    double worst = 0, sym = 0;
    for (size_t a = 0; a < K; a++) {
        for (size_t b = 0; b < K; b++) {
            double d = 0;
            for (size_t t = 0; t < N; t++) d += h[a * N + t] * h[b * N + t];
            worst = fmax(worst, fabs(d - (a == b)));
        }
        for (size_t t = 0; t < N; t++) sym = fmax(sym, fabs(h[a * N + t] - (a % 2 ? -1 : 1) * h[a * N + N - 1 - t]));
    }
    /* Slepian (1978): orthonormal; even order symmetric, odd order antisymmetric */
    check_abs(worst, 0, 1e-10, "tapers orthonormal");
    check_abs(sym, 0, 1e-10, "tapers even/odd");
    check_true(bl_dpss_count(3.0) == 5 && bl_dpss_count(1.0) == 1 && bl_dpss_count(0.4) == 1,
               "K = 2NW - 1, at least 1");
    free(h);
}

int main(void)
{
    test_dpss_properties();
    test_score_is_derivative(0);
    test_score_is_derivative(1);
    test_grid_threads();
    test_score_close_to_lr();
    return harness_summary();
}
