/* Slow statistical check (suite 'slow'): type-I error and power of the permutation tests of slopes
 * (src/fit/compare.c, bl_permutation_tests) over REPS simulated studies (default 300), each drawn with
 * the engine's exact sampler (tests/fit_testutil.h, sim_trials).
 *
 * A study: 4-6 participants who differ in threshold intercept, drift and nondecision time (offsets drawn
 * per study); threshold = a[context] + slope[context] * theta with slope 0.25 in context "rich" and 0 in
 * "lean"; a second regressor beta with no effect at all. The fitted model (threshold per context with a
 * theta slope per context, drift per difficulty with a beta slope) pools the participants (the default)
 * and so ignores their differences: the permutation test must stay exact anyway, because it shuffles
 * only within participant x condition cells.
 *
 * The p-value is p = (1 + b) / (1 + B), b = permutations whose statistic reaches the observed one
 * (Phipson & Smyth 2010, "Permutation p-values should never be zero", Stat. Appl. Genet. Mol. Biol. 9:39).
 * Under the null, when the shuffled values are exchangeable within the cells (here the regressor is drawn
 * independently of everything else, so they are), the observed statistic is equally likely to take any
 * rank among the 1 + B, and P(p <= k / (1 + B)) = k / (1 + B) exactly without ties (Good 2005,
 * "Permutation, Parametric, and Bootstrap Tests of Hypotheses", 3rd ed., ch. 3; cited from memory).
 * With B = 19: P(p <= 0.05) = 1/20, so the rejection count over REPS independent studies is
 * Binomial(REPS, 0.05); ties (counted as exceeding) only make the test conservative.
 *
 * Checks: (a) the per-level test of the true-zero level ("lean") and (b) the whole-slope test of beta
 * reject at p <= 0.05 in a number of studies within the central 99% range of Binomial(REPS, 0.05)
 * (limits from gsl_cdf_binomial_P / _Q); (c) the true 0.25 slope ("rich") is rejected in at least 95% of
 * the studies (see power_of_true_slope); also the whole null distribution of the lean and beta p-values
 * (null_p_values_uniform). Fixed seeds; opt.threads = 2 (the permutations draw from
 * per-permutation seeds, so the thread count does not change the counts: thread_count_invariance). */
#include "fit/fit.h"
#include "fit_testutil.h"
#include "binomial_range.h"
#include "harness.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <math.h>
#include <time.h>

static unsigned reps = 300;
static size_t trials_per_study = 600;

/* The three tests of one study (p-values, statistics, exceed counts); found = 0 when a test is missing. */
typedef struct {
    int found;
    double p_lean, p_beta, p_rich;
    double stat_lean, stat_beta, stat_rich;
    size_t exceed_lean, exceed_beta, exceed_rich;
} study_tests;

static const bl_permutation_test *find_test(const bl_model_result *r, const char *regressor, const char *level)
{
    for (size_t i = 0; i < r->n_permutation; i++)
        if (strcmp(r->permutation[i].regressor, regressor) == 0 && strcmp(r->permutation[i].level, level) == 0)
            return &r->permutation[i];
    return NULL;
}

/* Study r: simulate, fit pooled with 19 permutations, read the three tests. Returns 0 on failure. */
static int run_study(unsigned r, int threads, study_tests *out)
{
    memset(out, 0, sizeof *out);
    size_t np = 4 + r % 3;
    double a_off[6], v_off[6], t0_off[6];
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 90000 + r);
    for (size_t p = 0; p < np; p++) {
        a_off[p] = gsl_ran_flat(rng, -0.2, 0.2);
        v_off[p] = gsl_ran_flat(rng, -0.4, 0.4);
        t0_off[p] = gsl_ran_flat(rng, -0.06, 0.06);
    }
    gsl_rng_free(rng);
    sim_truth tr = {.n = trials_per_study,
                    .n_participants = np,
                    .a = {1.5, 1.1},
                    .a_slope = {0.25, 0.0},
                    .v = {2.0, 1.2, 0.6},
                    .v_slope = 0.0,
                    .t0 = 0.3,
                    .a_offset = a_off,
                    .v_offset = v_off,
                    .t0_offset = t0_off};
    bl_trials *t = sim_trials(&tr, 70000 + r);
    bl_model_spec spec;
    bl_slope_spec slopes[2];
    spec_regression(&spec, slopes, "theta-by-context");
    bl_study study;
    memset(&study, 0, sizeof study);
    study.fit.participants = BL_PARTICIPANTS_POOLED;
    study.fit.starts = 2;
    study.models = &spec;
    study.n_models = 1;
    bl_fit_options opt;
    bl_fit_options_default(&opt);
    opt.permutations = 19;
    opt.seed = 500 + r;
    opt.threads = threads;
    bl_fit_set *set = NULL;
    bl_error err = {0};
    bl_warnings warn = {0};
    int ok = bl_fit_study(&study, t, &opt, &set, &warn, &err) == BL_OK;
    if (!ok) printf("study %u: %s\n", r, err.message);
    if (ok) {
        const bl_model_result *m = &set->models[0];
        const bl_permutation_test *lean = find_test(m, "theta", "lean"), *rich = find_test(m, "theta", "rich"),
                                  *beta = find_test(m, "beta", "");
        if (lean && rich && beta) {
            *out = (study_tests){1,
                                 lean->p,
                                 beta->p,
                                 rich->p,
                                 lean->statistic,
                                 beta->statistic,
                                 rich->statistic,
                                 lean->exceed,
                                 beta->exceed,
                                 rich->exceed};
        }
    }
    bl_fit_set_destroy(set);
    bl_warnings_clear(&warn);
    bl_trials_destroy(t);
    return out->found;
}

/* The Monte-Carlo run every case reads; done once. */
static unsigned n_done, reject_lean, reject_beta, reject_rich;
static unsigned p_hist_lean[20], p_hist_beta[20];
static double min_stat_rich = INFINITY, max_stat_lean = -INFINITY;

static void simulate_studies(void)
{
    static int done;
    if (done) return;
    done = 1;
    struct timespec t0, t1;
    clock_gettime(CLOCK_MONOTONIC, &t0);
    for (unsigned r = 0; r < reps; r++) {
        study_tests s;
        if (!run_study(r, 2, &s)) continue;
        n_done++;
        /* p is a multiple of 1/20: p <= 0.05 means exceed == 0 (compared on the counts, not on rounding). */
        reject_lean += s.exceed_lean == 0;
        reject_beta += s.exceed_beta == 0;
        reject_rich += s.exceed_rich == 0;
        p_hist_lean[s.exceed_lean < 20 ? s.exceed_lean : 19]++;
        p_hist_beta[s.exceed_beta < 20 ? s.exceed_beta : 19]++;
        min_stat_rich = fmin(min_stat_rich, s.stat_rich);
        max_stat_lean = fmax(max_stat_lean, s.stat_lean);
    }
    clock_gettime(CLOCK_MONOTONIC, &t1);
    printf("%u studies of %zu trials (4-6 participants), 19 permutations each, 2 threads: %.1f s\n", n_done,
           trials_per_study, (double)(t1.tv_sec - t0.tv_sec) + 1e-9 * (double)(t1.tv_nsec - t0.tv_nsec));
    printf(
        "rejections at p <= 0.05: theta lean (true 0) %u, beta whole slope (no effect) %u, theta rich (true 0.25) %u\n",
        reject_lean, reject_beta, reject_rich);
    printf("studies by permutations reaching the observed statistic (0..19), theta lean:");
    for (int k = 0; k < 20; k++) printf(" %u", p_hist_lean[k]);
    printf("\n                                                          beta whole slope:");
    for (int k = 0; k < 20; k++) printf(" %u", p_hist_beta[k]);
    printf("\nstatistic 2 dLL: smallest of theta rich (true 0.25) %.2f, largest of theta lean (true 0) %.2f\n",
           min_stat_rich, max_stat_lean);
}

HARNESS_CASE(every_study_tested)
{
    simulate_studies();
    check_true(n_done == reps, "every study fitted with the three tests (%u of %u)", n_done, reps);
}

HARNESS_CASE(type1_true_zero_level)
{
    simulate_studies();
    unsigned lo, hi;
    binom_range(n_done, 0.05, 0.01, &lo, &hi);
    check_true(reject_lean >= lo && reject_lean <= hi,
               "theta slope in 'lean' (true 0), per-level test: p <= 0.05 in %u of %u studies (99%% range of "
               "Binomial(%u, 0.05): %u-%u)",
               reject_lean, n_done, n_done, lo, hi);
}

HARNESS_CASE(type1_no_effect_regressor)
{
    simulate_studies();
    unsigned lo, hi;
    binom_range(n_done, 0.05, 0.01, &lo, &hi);
    check_true(reject_beta >= lo && reject_beta <= hi,
               "beta (no effect), whole-slope test: p <= 0.05 in %u of %u studies (99%% range of Binomial(%u, "
               "0.05): %u-%u)",
               reject_beta, n_done, n_done, lo, hi);
}

/* Beyond p <= 0.05: the whole null distribution. Without ties the count b of the 19 permutations reaching
 * the observed statistic is uniform on 0..19 (the rank argument above), so the 20 bins of b over the studies
 * are compared with n/20 each by Pearson's chi-square goodness-of-fit test, 19 df (Pearson 1900, Phil. Mag.
 * 50:157-175), p from gsl_cdf_chisq_Q, failing below 0.001. */
static double uniformity_p(const unsigned hist[20], unsigned n)
{
    double e = n / 20.0, x2 = 0;
    for (int k = 0; k < 20; k++) x2 += (hist[k] - e) * (hist[k] - e) / e;
    return gsl_cdf_chisq_Q(x2, 19);
}

HARNESS_CASE(null_p_values_uniform)
{
    simulate_studies();
    double pl = uniformity_p(p_hist_lean, n_done), pb = uniformity_p(p_hist_beta, n_done);
    check_true(n_done >= 100 && pl >= 0.001, "theta lean: permutation counts uniform on 0..19 (chi-square p %.3g)", pl);
    check_true(n_done >= 100 && pb >= 0.001, "beta: permutation counts uniform on 0..19 (chi-square p %.3g)", pb);
}

/* Power: the smallest possible p with B = 19 is 0.05, reached when no permutation reaches the observed
 * statistic. With the trial count used, the observed statistic of the 0.25 slope is far beyond the null
 * permutation statistics (printed above), so rejection in every study is expected; at least 95% is
 * required: a broken test (p stuck at 1, shuffles that do not break the association, the wrong level
 * shuffled) rejects in about 5% and fails this by far, while one or a few unlucky studies do not. */
HARNESS_CASE(power_of_true_slope)
{
    simulate_studies();
    check_true(n_done > 0 && reject_rich >= (unsigned)ceil(0.95 * n_done),
               "theta slope in 'rich' (true 0.25), per-level test: p <= 0.05 in %u of %u studies (need >= 95%%)",
               reject_rich, n_done);
}

/* The permutations draw from seeds per (model, parameter, slope, level, permutation) and the likelihood
 * gives the same bytes on any thread count (design/model.h): one study with 1 thread and with 2. */
HARNESS_CASE(thread_count_invariance)
{
    study_tests one, two;
    if (!check_true(run_study(1, 1, &one) && run_study(1, 2, &two), "study 1 fitted on 1 and on 2 threads")) return;
    check_true(one.exceed_lean == two.exceed_lean && one.exceed_beta == two.exceed_beta &&
                   one.exceed_rich == two.exceed_rich,
               "same exceed counts on 1 and 2 threads (lean %zu/%zu, beta %zu/%zu, rich %zu/%zu)", one.exceed_lean,
               two.exceed_lean, one.exceed_beta, two.exceed_beta, one.exceed_rich, two.exceed_rich);
    check_true(one.stat_lean == two.stat_lean && one.stat_beta == two.stat_beta && one.stat_rich == two.stat_rich,
               "same statistics on 1 and 2 threads (lean %.17g, beta %.17g, rich %.17g)", two.stat_lean, two.stat_beta,
               two.stat_rich);
}

/* Usage: test_permutation_type1 [REPS [TRIALS]] [--list] [--case NAME]...
 * (REPS studies, default 300; TRIALS trials per study, default 600) */
int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    for (int k = 0; k < 2 && argc > 1 && argv[1][0] != '-'; k++) {
        if (k == 0) reps = (unsigned)atoi(argv[1]);
        else trials_per_study = (size_t)atol(argv[1]);
        argv[1] = argv[0];
        argv++;
        argc--;
    }
    static const harness_case cases[] = {
        HARNESS_ENTRY(every_study_tested),        HARNESS_ENTRY(type1_true_zero_level),
        HARNESS_ENTRY(type1_no_effect_regressor), HARNESS_ENTRY(null_p_values_uniform),
        HARNESS_ENTRY(power_of_true_slope),       HARNESS_ENTRY(thread_count_invariance),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
