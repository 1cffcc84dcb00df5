/* Slow statistical check (suite 'slow'): coverage of the 95% Wald intervals over 300 datasets drawn
 * with the engine's exact sampler from a known 9-coefficient regression (docs/models.md, inference). Each
 * coefficient's coverage count must lie inside the central 99.9% range of Binomial(300, 0.95)
 * (limits from gsl_cdf_binomial_P), and the count over all coefficients inside the 99.9% range of
 * Binomial(2700, 0.95). Also the Wald test and the likelihood-ratio test (chi^2 with 1 df, Wilks 1938)
 * of true-zero slopes: rejection rates at 5% within the 99.9% range of Binomial(300, 0.05). */
#include "fit/fit.h"
#include "fit_testutil.h"
#include "binomial_range.h"
#include "harness.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <math.h>

/* The Monte-Carlo run every case reads: reps data sets, each fitted with and without a null slope; done once. */
static unsigned reps = 300;
static unsigned cover[9], conv, reject_null, reject_lrt, n_lrt;

static void simulate_and_fit(void)
{
    static int done;
    if (done) return;
    done = 1;
    const double truth[9] = {1.5, 1.1, 0.25, 0.0, 2.2, 1.3, 0.6, -0.3, 0.28};
    bl_error err = {0};
    bl_warnings warn = {0};
    for (unsigned r = 0; r < reps; r++) {
        sim_truth tr = {.n = 1000,
                        .n_participants = 2,
                        .a = {1.5, 1.1},
                        .a_slope = {0.25, 0.0},
                        .v = {2.2, 1.3, 0.6},
                        .v_slope = -0.3,
                        .t0 = 0.28};
        bl_trials *t = sim_trials(&tr, 5000 + r);
        bl_model_spec s;
        bl_slope_spec slopes[2];
        spec_regression(&s, slopes, "coverage");
        bl_model *m = NULL;
        if (bl_model_build(&s, t, NULL, &m, &err)) {
            check_true(0, "dataset %u: %s", r, err.message);
            bl_trials_destroy(t);
            continue;
        }
        bl_fit_options opt;
        bl_fit_options_default(&opt);
        opt.threads = 1;
        opt.starts = 1;
        bl_fit_result res;
        double ll0 = NAN;
        if (bl_fit_model(m, &opt, NULL, &res, &warn, &err) == BL_OK) {
            conv += res.converged;
            for (int j = 0; j < 9; j++) cover[j] += res.coef[j].ci_low <= truth[j] && truth[j] <= res.coef[j].ci_high;
            reject_null += res.coef[3].p < 0.05;
            ll0 = res.log_likelihood;
            bl_fit_result_clear(&res);
        }
        bl_model_destroy(m);
        /* The same model plus a threshold slope on beta (truth 0): LRT with 1 df (Wilks 1938). */
        bl_slope_spec two[2] = {{"theta", col_context, 1}, {"beta", NULL, 0}};
        s.param[BL_THRESHOLD].slopes = two;
        s.param[BL_THRESHOLD].n_slopes = 2;
        m = NULL;
        if (bl_model_build(&s, t, NULL, &m, &err) == BL_OK && bl_fit_model(m, &opt, NULL, &res, &warn, &err) == BL_OK) {
            double lr = 2 * (res.log_likelihood - ll0);
            n_lrt++;
            reject_lrt += gsl_cdf_chisq_Q(fmax(lr, 0), 1) < 0.05;
            bl_fit_result_clear(&res);
        }
        bl_model_destroy(m);
        bl_trials_destroy(t);
        bl_warnings_clear(&warn);
    }
}

HARNESS_CASE(convergence)
{
    simulate_and_fit();
    check_true(conv == reps, "every fit converged (%u of %u)", conv, reps);
}

HARNESS_CASE(wald_interval_coverage)
{
    simulate_and_fit();
    unsigned lo, hi, total = 0;
    binom_range(reps, 0.95, 0.001, &lo, &hi);
    const char *names[9] = {"threshold rich", "threshold lean", "theta slope rich", "theta slope lean", "drift easy",
                            "drift medium",   "drift hard",     "beta slope",       "nondecision"};
    for (int j = 0; j < 9; j++) {
        check_true(cover[j] >= lo && cover[j] <= hi,
                   "%s: 95%% interval covered the truth %u of %u times (99.9%% "
                   "binomial range %u-%u)",
                   names[j], cover[j], reps, lo, hi);
        total += cover[j];
    }
    unsigned tlo, thi;
    binom_range(9 * reps, 0.95, 0.001, &tlo, &thi);
    check_true(total >= tlo && total <= thi, "all coefficients: covered %u of %u (range %u-%u)", total, 9 * reps, tlo,
               thi);
}

HARNESS_CASE(null_slope_rejection_rates)
{
    simulate_and_fit();
    unsigned nlo, nhi;
    binom_range(reps, 0.05, 0.001, &nlo, &nhi);
    check_true(reject_null >= nlo && reject_null <= nhi,
               "true-zero slope: Wald test rejects at 5%% in %u of %u datasets (range %u-%u)", reject_null, reps, nlo,
               nhi);
    check_true(n_lrt == reps, "LRT fits done (%u)", n_lrt);
    check_true(reject_lrt >= nlo && reject_lrt <= nhi,
               "true-zero slope: LRT (chi^2, 1 df) rejects at 5%% in %u of %u datasets (range %u-%u)", reject_lrt, reps,
               nlo, nhi);
}

/* Usage: test_fit_coverage [REPS] [--list] [--case NAME]...   (REPS data sets, default 300) */
int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    if (argc > 1 && argv[1][0] != '-') {
        reps = (unsigned)atoi(argv[1]);
        argv[1] = argv[0];
        argv++;
        argc--;
    }
    static const harness_case cases[] = {
        HARNESS_ENTRY(convergence),
        HARNESS_ENTRY(wald_interval_coverage),
        HARNESS_ENTRY(null_slope_rejection_rates),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
