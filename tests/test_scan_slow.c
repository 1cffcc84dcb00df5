/* Slow suite: family-wise error of the scan under a global null. 500 simulated studies (4 participants
 * whose drift rates differ, 480 trials), each scanned over a 6 x 5 grid of regressors unrelated to
 * behaviour (smooth across neighbouring cells, like power at nearby frequencies and windows), 199
 * permutations, maximum statistic (250 studies) or cluster mass (250 studies), pooled (odd studies) or
 * separate participants (even studies). The share of studies with any cell at family-wise p <= 0.05 must
 * lie within the 99% binomial limits of 5% (exact binomial quantiles for n = 250, p = 0.05, from GSL's
 * gsl_cdf_binomial_P). Data from the engine's exact sampler (tests/fit_testutil.h). */
#include "harness.h"
#include "fit_testutil.h"
#include "scan/scan_stats.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_randist.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

static bl_study dummy_study = {.path = "slow-test-study.json"};

static int one_study(unsigned long seed, bl_scan_correction corr, bl_participants_mode mode)
{
    sim_truth tr = {
        .n = 480, .n_participants = 4, .a = {1.3, 1.1}, .v = {1.8, 1.1, 0.5}, .t0 = 0.3, .stimulus = 1, .v_step = 0.35};
    bl_trials *t = sim_trials(&tr, seed);
    bl_model_spec spec;
    spec_default(&spec, "null");
    spec.param[BL_THRESHOLD].per = col_context;
    spec.param[BL_THRESHOLD].n_per = 1;
    spec.param[BL_DRIFT].per = col_difficulty;
    spec.param[BL_DRIFT].n_per = 1;
    bl_scan_param params[2] = {{BL_THRESHOLD, NULL, 0}, {BL_DRIFT, NULL, 0}};
    bl_scan_null *nm = NULL;
    bl_warnings w = {0};
    bl_error err = {0};
    int rejected = -1;
    if (bl_scan_null_create(&dummy_study, &spec, t, mode, params, 2, 2, seed, &nm, &w, &err)) {
        fprintf(stderr, "null: %s\n", err.message);
        goto done;
    }
    size_t n = bl_scan_null_n_trials(nm), nf = 6, nw = 5, nc = nf * nw;
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed * 7919 + 1);
    double *e = malloc(nc * n * sizeof *e), *x = malloc(nc * n * sizeof *x);
    for (size_t i = 0; i < nc * n; i++) e[i] = gsl_ran_gaussian(rng, 1.0);
    for (size_t c = 0; c < nc; c++) {
        size_t f = c / nw, wi = c % nw;
        for (size_t j = 0; j < n; j++) {
            double s = 2 * e[c * n + j];
            if (f > 0) s += e[(c - nw) * n + j];
            if (f + 1 < nf) s += e[(c + nw) * n + j];
            if (wi > 0) s += e[(c - 1) * n + j];
            if (wi + 1 < nw) s += e[(c + 1) * n + j];
            x[c * n + j] = s;
        }
    }
    bl_scan_stats *s = NULL;
    if (bl_scan_grid(nm, x, nf, nw, 199, corr, 0.05, seed, 2, NULL, NULL, &s, &err) == BL_OK) {
        rejected = 0;
        for (size_t i = 0; i < 2 * nc; i++) rejected |= s->p_familywise[i] <= 0.05;
    }
    bl_scan_stats_destroy(s);
    free(e);
    free(x);
    gsl_rng_free(rng);
done:
    bl_scan_null_destroy(nm);
    bl_warnings_clear(&w);
    bl_trials_destroy(t);
    return rejected;
}

int main(void)
{
    const int n = 250;
    /* 99% two-sided binomial limits for 250 studies at 5% (GSL gsl_cdf_binomial_P) */
    unsigned lo = 0, hi = 0;
    while (gsl_cdf_binomial_P(lo, 0.05, n) < 0.005) lo++;
    while (gsl_cdf_binomial_P(hi, 0.05, n) < 0.995) hi++;
    for (int corr = 0; corr < 2; corr++) {
        int rej = 0, failed = 0;
        for (int k = 0; k < n; k++) {
            int r = one_study(1000 + (unsigned long)(corr * n + k),
                              corr ? BL_SCAN_CORRECTION_CLUSTER : BL_SCAN_CORRECTION_MAX,
                              k % 2 ? BL_PARTICIPANTS_POOLED : BL_PARTICIPANTS_SEPARATE);
            if (r < 0) failed++;
            else rej += r;
        }
        check_true(failed == 0, "%s: every study scanned (%d failed)", corr ? "cluster mass" : "maximum statistic",
                   failed);
        check_true((unsigned)rej >= lo && (unsigned)rej <= hi,
                   "%s: %d of %d null studies with a family-wise p <= 0.05 (%.1f%%), 99%% binomial limits [%u, %u]",
                   corr ? "cluster mass" : "maximum statistic", rej, n, 100.0 * rej / n, lo, hi);
    }
    return harness_summary();
}
