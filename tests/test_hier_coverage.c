/* Slow statistical check (suite 'slow'): frequentist behaviour of hierarchical fits (participants as
 * random effects) over simulated heterogeneous studies. Each study draws its own design and truth from a
 * seeded generator: 8-16 participants, each with 100-250 trials (ranges scaled by TRIAL_SCALE), population
 * threshold intercept, theta slope, drift and nondecision, and participant SDs on all four
 * (tests/hier_testutil.h; responses from the engine's exact sampler). Every study is fitted by
 * bl_fit_study from a study file parsed from JSON: threshold intercept + theta slope, drift, nondecision,
 * all four varying by participant (Laplace).
 *
 * Checks. Coverage of the population 95% intervals (t reference with participants - 1 df, fits.json
 * `coefficients[]`) for the slope and each intercept, and of the participant SDs' 95% profile-likelihood
 * intervals: over the studies that gave an interval, the count that holds the truth must lie in the
 * central 99.9% range of Binomial(n, 0.95) (limits from GSL gsl_cdf_binomial_P/Q). Mean bias of every SD
 * is printed. Every study must be fitted (case every_study_fitted).
 * Studies are fitted in parallel (OpenMP over studies, 1 thread per fit); results are stored by study
 * index, so they do not depend on the thread count.
 *
 * Measured (scale 0.3, 2 threads): every study fitted, 198 of 200 converged; population intervals cover
 * 185-191 of 198; SD profile intervals 179-188 of 198; SDs 11-30% low (maximum likelihood); 126 s wall.
 * Scale 1 (100-250 trials, the intended design) costs several times more, hence the suite runs scale 0.3.
 * usage: test_hier_coverage [STUDIES [TRIAL_SCALE [THREADS]]] [--list] [--case NAME]...
 *        (defaults 200 studies, scale 1, 2 threads; the suite runs 200 0.3 2) */
#include "fit/fit.h"
#include "binomial_range.h"
#include "harness.h"
#include "hier_testutil.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <time.h>
#ifdef _OPENMP
#include <omp.h>
#endif

enum { N_TERM = 4 };
static const char *const term_name[N_TERM] = {"threshold intercept", "threshold theta slope", "drift intercept",
                                              "nondecision intercept"};

typedef struct {
    int fitted, converged;
    size_t participants, trials;
    double truth[N_TERM], sd_truth[N_TERM];
    double est[N_TERM], lo[N_TERM], hi[N_TERM];          /* population coefficients, 95% interval */
    double sd[N_TERM], sd_lo[N_TERM], sd_hi[N_TERM];     /* variance components, profile interval */
    double lrt[N_TERM];                                  /* test of SD = 0 (statistic) */
} study_outcome;

static unsigned n_studies = 200;
static double trial_scale = 1.0;
static int n_threads = 2;
static study_outcome *outcome;
static double wall_seconds;

/* Index 0-3 of a coefficient or variance component (threshold intercept/theta, drift, nondecision). */
static int term_index(bl_param param, const char *term)
{
    if (param == BL_THRESHOLD) return !strcmp(term, "intercept") ? 0 : !strcmp(term, "theta") ? 1 : -1;
    if (!strcmp(term, "intercept")) return param == BL_DRIFT ? 2 : param == BL_NONDECISION ? 3 : -1;
    return -1;
}

/* Study r's generator settings, drawn from its own seed: design, population values, spreads. */
static hier_truth study_settings(unsigned r)
{
    gsl_rng *g = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(g, 7000 + r);
    size_t lo = (size_t)(100 * trial_scale + 0.5), hi = (size_t)(250 * trial_scale + 0.5);
    size_t a = lo + gsl_rng_uniform_int(g, hi - lo + 1), b = lo + gsl_rng_uniform_int(g, hi - lo + 1);
    hier_truth tr = {.participants = 8 + gsl_rng_uniform_int(g, 9),
                     .trials_min = a < b ? a : b,
                     .trials_max = a < b ? b : a,
                     .a = gsl_ran_flat(g, 1.1, 1.6),
                     .a_slope = gsl_ran_flat(g, 0.0, 0.2),
                     .v = gsl_ran_flat(g, 0.8, 2.0),
                     .t0 = gsl_ran_flat(g, 0.22, 0.38),
                     .sd_a = gsl_ran_flat(g, 0.15, 0.3),
                     .sd_slope = gsl_ran_flat(g, 0.04, 0.08),
                     .sd_v = gsl_ran_flat(g, 0.25, 0.45),
                     .sd_t0 = gsl_ran_flat(g, 0.03, 0.05)};
    gsl_rng_free(g);
    return tr;
}

static void fit_one(unsigned r, const bl_study *study, study_outcome *o)
{
    hier_truth tr = study_settings(r);
    const double truth[N_TERM] = {tr.a, tr.a_slope, tr.v, tr.t0}, sd[N_TERM] = {tr.sd_a, tr.sd_slope, tr.sd_v, tr.sd_t0};
    for (int k = 0; k < N_TERM; k++) {
        o->truth[k] = truth[k];
        o->sd_truth[k] = sd[k];
        o->est[k] = o->lo[k] = o->hi[k] = o->sd[k] = o->sd_lo[k] = o->sd_hi[k] = o->lrt[k] = NAN;
    }
    bl_trials *t = hier_sim(&tr, 90000 + r, NULL);
    o->participants = tr.participants;
    o->trials = t->n;
    bl_fit_options opt;
    bl_fit_options_default(&opt);
    opt.threads = 1;
    opt.parallel_trials = BL_PARALLEL_UNSPLIT;
    bl_fit_set *set = NULL;
    bl_error err = {0};
    bl_warnings warn = {0};
    if (bl_fit_study(study, t, &opt, &set, &warn, &err) == BL_OK) {
        const bl_model_result *m = &set->models[0];
        o->fitted = m->mode == BL_PARTICIPANTS_HIERARCHICAL;
        o->converged = m->converged;
        for (size_t j = 0; j < m->fit.n_coef; j++) {
            int k = term_index(m->fit.coef[j].param, m->fit.coef[j].term);
            if (k < 0) continue;
            o->est[k] = m->fit.coef[j].estimate;
            o->lo[k] = m->fit.coef[j].ci_low;
            o->hi[k] = m->fit.coef[j].ci_high;
        }
        for (size_t v = 0; v < m->n_variance; v++) {
            int k = term_index(m->variance[v].param, m->variance[v].term);
            if (k < 0) continue;
            o->sd[k] = m->variance[v].sd;
            o->sd_lo[k] = m->variance[v].ci_low;
            o->sd_hi[k] = m->variance[v].ci_high;
            o->lrt[k] = m->variance[v].lrt_statistic;
        }
    } else {
        fprintf(stderr, "study %u: %s\n", r, err.message);
    }
    bl_fit_set_destroy(set);
    bl_warnings_clear(&warn);
    bl_trials_destroy(t);
    /* one line per study (stderr): truth, estimate, interval of the four terms, then the SDs */
    char line[1024];
    int w = snprintf(line, sizeof line, "study %u: J %zu n %zu conv %d |", r, o->participants, o->trials, o->converged);
    for (int k = 0; k < N_TERM && w > 0 && (size_t)w < sizeof line; k++)
        w += snprintf(line + w, sizeof line - (size_t)w, " %.4g %.4g [%.4g, %.4g]", o->truth[k], o->est[k], o->lo[k],
                      o->hi[k]);
    for (int k = 0; k < N_TERM && w > 0 && (size_t)w < sizeof line; k++)
        w += snprintf(line + w, sizeof line - (size_t)w, " | %.4g %.4g [%.4g, %.4g] %.3g", o->sd_truth[k], o->sd[k],
                      o->sd_lo[k], o->sd_hi[k], o->lrt[k]);
    fprintf(stderr, "%s\n", line);
}

static double wall_now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* The Monte-Carlo run every case reads; done once. */
static void simulate_and_fit(void)
{
    if (outcome) return;
    outcome = calloc(n_studies, sizeof *outcome);
    bl_study *study = hier_study("hierarchical", 1, 1);
    if (!study) return;
    double t0 = wall_now();
#ifdef _OPENMP
#pragma omp parallel for schedule(dynamic, 1) num_threads(n_threads)
#endif
    for (long r = 0; r < (long)n_studies; r++) fit_one((unsigned)r, study, &outcome[r]);
    wall_seconds = wall_now() - t0;
    bl_study_destroy(study);
    printf("%u studies (8-16 participants, %.0f-%.0f trials each), %d threads: %.1f s wall\n", n_studies,
           100 * trial_scale, 250 * trial_scale, n_threads, wall_seconds);
}

static int covers(double lo, double x, double hi) { return lo <= x && x <= hi; }

HARNESS_CASE(every_study_fitted)
{
    simulate_and_fit();
    unsigned fitted = 0, conv = 0;
    for (unsigned r = 0; r < n_studies; r++) {
        fitted += outcome[r].fitted;
        conv += outcome[r].converged;
    }
    printf("fitted hierarchically: %u of %u; converged: %u of %u\n", fitted, n_studies, conv, n_studies);
    check_true(fitted == n_studies, "every study fitted hierarchically (%u of %u)", fitted, n_studies);
}

/* Coverage is judged over the studies that gave an interval: a study without a fit is a failure of its
 * own (case every_study_fitted), not a wrong interval. The count over all studies is printed too. */
HARNESS_CASE(population_interval_coverage)
{
    simulate_and_fit();
    printf("%-24s %9s %9s %9s %9s %12s  (99.9%% binomial range for the studies with an interval)\n",
           "population coefficient", "covered", "of all", "mean bias", "mean est", "range");
    for (int k = 0; k < N_TERM; k++) {
        unsigned c = 0, with_ci = 0, lo, hi;
        double bias = 0, mean = 0;
        size_t nb = 0;
        for (unsigned r = 0; r < n_studies; r++) {
            const study_outcome *o = &outcome[r];
            with_ci += isfinite(o->lo[k]) && isfinite(o->hi[k]);
            c += covers(o->lo[k], o->truth[k], o->hi[k]);
            if (isfinite(o->est[k])) {
                bias += o->est[k] - o->truth[k];
                mean += o->est[k];
                nb++;
            }
        }
        binom_range(with_ci, 0.95, 0.001, &lo, &hi);
        printf("%-24s %5u/%-3u %5u/%-3u %9.4f %9.4f %8u-%u\n", term_name[k], c, with_ci, c, n_studies,
               bias / (double)nb, mean / (double)nb, lo, hi);
        check_true(2 * with_ci >= n_studies, "%s: an interval in %u of %u studies (at least half needed to judge)",
                   term_name[k], with_ci, n_studies);
        check_true(c >= lo && c <= hi,
                   "%s: 95%% interval covered the truth in %u of the %u studies with an interval (99.9%% range %u-%u)",
                   term_name[k], c, with_ci, lo, hi);
    }
}

/* Variance components: bias of the SD estimates and coverage of their profile intervals (over the
 * studies with an interval, as above); asserted like the population intervals. */
HARNESS_CASE(variance_components)
{
    simulate_and_fit();
    printf("%-24s %9s %9s %9s %9s %9s %9s %9s %12s\n", "participant SD", "mean true", "mean est", "mean bias",
           "rel. bias", "at zero", "no test", "covered", "range");
    for (int k = 0; k < N_TERM; k++) {
        double truth = 0, est = 0, rel = 0;
        unsigned n = 0, zero = 0, no_test = 0, cover = 0, with_ci = 0, lo, hi;
        for (unsigned r = 0; r < n_studies; r++) {
            const study_outcome *o = &outcome[r];
            if (!o->fitted || !isfinite(o->sd[k])) continue;
            with_ci += !isnan(o->sd_lo[k]) && !isnan(o->sd_hi[k]);
            cover += covers(o->sd_lo[k], o->sd_truth[k], o->sd_hi[k]);
            no_test += !isfinite(o->lrt[k]);
            truth += o->sd_truth[k];
            est += o->sd[k];
            rel += o->sd[k] / o->sd_truth[k] - 1;
            zero += o->sd[k] < 1e-3 * o->sd_truth[k];
            n++;
        }
        binom_range(with_ci, 0.95, 0.001, &lo, &hi);
        printf("%-24s %9.4f %9.4f %9.4f %8.1f%% %9u %9u %5u/%-3u %8u-%u\n", term_name[k], truth / n, est / n,
               (est - truth) / n, 100 * rel / n, zero, no_test, cover, with_ci, lo, hi);
        check_true(2 * with_ci >= n_studies, "%s SD: an interval in %u of %u studies", term_name[k], with_ci, n_studies);
        check_true(cover >= lo && cover <= hi,
                   "%s SD: profile interval covered the truth in %u of the %u studies with one (99.9%% range %u-%u)",
                   term_name[k], cover, with_ci, lo, hi);
    }
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    int pos = 0;
    while (argc > 1 && argv[1][0] != '-' && pos < 3) {
        if (pos == 0) n_studies = (unsigned)atoi(argv[1]);
        if (pos == 1) trial_scale = atof(argv[1]);
        if (pos == 2) n_threads = atoi(argv[1]);
        pos++;
        argv[1] = argv[0];
        argv++;
        argc--;
    }
    if (n_studies < 1 || !(trial_scale > 0) || n_threads < 1) {
        fprintf(stderr, "usage: test_hier_coverage [STUDIES [TRIAL_SCALE [THREADS]]] [--list] [--case NAME]...\n");
        return 2;
    }
    static const harness_case cases[] = {
        HARNESS_ENTRY(every_study_fitted),
        HARNESS_ENTRY(population_interval_coverage),
        HARNESS_ENTRY(variance_components),
    };
    int rc = harness_main(argc, argv, cases, HARNESS_COUNT(cases));
    free(outcome);
    return rc;
}
