/* Fit benchmark: (1) a 1,000-trial fit with drift_sd, start_range and nondecision_range free (plus
 * threshold, a drift per context and nondecision; 7 coefficients, one core) on responses drawn with
 * that variability; (2) a 9-coefficient regression (threshold per context with a theta slope per context,
 * drift per difficulty with a shared beta slope, one nondecision) on 2,000 simulated trials.
 * Prints wall time per fit, likelihood evaluations, the time per trial-density inside the fit
 * against the engine's plain density(+gradient) cost measured in the same run, 1 vs 2 threads, and
 * the permutation-test throughput.
 * usage: bench-fit [PERMUTATIONS (default 100)] | bench-fit --variability-only [DATASETS] */
#include "../tests/fit_testutil.h"
#include "fit/fit.h"

#include <gsl/gsl_errno.h>
#include <math.h>
#include <time.h>

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* The engine's density+gradient over the model's trials at coef (ns per trial; one pass). */
static double reference_pass(const bl_model *m, const bl_trials *t, const double *coef, double *sink)
{
    size_t n = bl_model_n_trials(m);
    double t0 = now(), acc = 0;
    for (size_t k = 0; k < n; k++) {
        bl_wiener_params p;
        double lf, g[BL_NPARAM];
        bl_model_predict(m, coef, k, &p);
        bl_wiener_log_density_grad(&p, t->rt[bl_model_row(m, k)], t->upper[bl_model_row(m, k)], &lf, g, NULL);
        acc += lf + g[0];
    }
    *sink += acc;
    return (now() - t0) / (double)n * 1e9;
}

/* Trials drawn from the full model (threshold 1.4, drift 2 / 1 by context, nondecision 0.3, drift_sd
 * 1, start_range 0.3, nondecision_range 0.15) with the engine's sampler, and the model with all of
 * them free. Returns NULL on failure. */
static bl_model *variability_data(unsigned long seed, bl_trials **out)
{
    sim_truth tr = {.n = 1000, .n_participants = 1, .a = {1.2, 1.2}, .v = {1.5, 1.5, 1.5}, .t0 = 0.3};
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
        w.value[BL_DRIFT_SD] = 1.0;
        w.value[BL_START_RANGE] = 0.3;
        w.value[BL_NONDECISION_RANGE] = 0.15;
        int up;
        double rt;
        if (bl_wiener_sample(&w, rng, &up, &rt, NULL) != BL_OK) return NULL;
        t->upper[i] = up;
        t->rt[i] = rt;
        t->drift_sign[i] = 1;
    }
    gsl_rng_free(rng);
    bl_model_spec s;
    spec_default(&s, "variability");
    s.param[BL_DRIFT].per = col_context;
    s.param[BL_DRIFT].n_per = 1;
    for (int p = BL_DRIFT_SD; p <= BL_NONDECISION_RANGE; p++) s.param[p].is_fixed = 0;
    bl_error err = {0};
    bl_model *m = NULL;
    if (bl_model_build(&s, t, NULL, &m, &err)) {
        fprintf(stderr, "bench-fit: %s\n", err.message);
        bl_trials_destroy(t);
        return NULL;
    }
    *out = t;
    return m;
}

/* The reference: plain density+gradient (no variability) over the model's trials at threshold 1.4,
 * drift 1.5, nondecision 0.3 (ns per trial). */
static double plain_reference(const bl_model *m, const bl_trials *t, double *sink)
{
    size_t n = bl_model_n_trials(m);
    double t0 = now(), acc = 0;
    for (size_t k = 0; k < n; k++) {
        bl_wiener_params p;
        bl_wiener_params_default(&p);
        p.value[BL_THRESHOLD] = 1.4;
        p.value[BL_DRIFT] = 1.5;
        p.value[BL_NONDECISION] = 0.3;
        double lf, g[BL_NPARAM];
        bl_wiener_log_density_grad(&p, t->rt[bl_model_row(m, k)], t->upper[bl_model_row(m, k)], &lf, g, NULL);
        acc += lf + g[0];
    }
    *sink += acc;
    return (now() - t0) / (double)n * 1e9;
}

/* 1,000-trial fits with all three variability parameters free, on one core: the first dataset timed
 * `rounds` times (the fastest counts), further datasets once, each fit right after a reference pass
 * (5 plain density+gradient passes over its trials), so load hits both alike. The fit's time is
 * also given in reference passes: a whole fit can never cost less than one. */
static int variability_fit(int rounds, int datasets)
{
    double sink = 0;
    for (int d = 0; d < datasets; d++) {
        bl_trials *t = NULL;
        bl_model *m = variability_data(99 + (unsigned long)d, &t);
        if (!m) return 1;
        size_t k = bl_model_n_coef(m), n = bl_model_n_trials(m);
        double best_fit = INFINITY, best_ref = INFINITY, best_prof = INFINITY;
        size_t evals_fit = 0;
        bl_fit_result r = {0};
        bl_error err = {0};
        bl_warnings warn = {0};
        for (int round = 0; round < (d == 0 ? rounds : 1); round++) {
            for (int rr = 0; rr < 5; rr++) best_ref = fmin(best_ref, plain_reference(m, t, &sink));
            bl_fit_options opt;
            bl_fit_options_default(&opt);
            opt.threads = 1;
            opt.parallel_trials = -1;
            /* the fit with Wald inference only, then the same fit with profile intervals */
            for (int prof = 0; prof < 2; prof++) {
                opt.profiles = prof;
                bl_fit_result_clear(&r);
                bl_warnings_clear(&warn);
                double t0 = now();
                if (bl_fit_model(m, &opt, NULL, &r, &warn, &err)) {
                    fprintf(stderr, "bench-fit: %s\n", err.message);
                    return 1;
                }
                double dt = now() - t0;
                if (prof) best_prof = fmin(best_prof, dt);
                else {
                    best_fit = fmin(best_fit, dt);
                    evals_fit = r.diag.evaluations;
                }
            }
        }
        double ref_pass = best_ref * (double)n * 1e-9;
        printf("variability fit, dataset %d (1,000 trials; threshold, drift per context, nondecision, drift_sd, "
               "start_range, nondecision_range free; 1 thread): %.3f s = %.0f plain passes (%.1f ns per plain "
               "density+gradient), %zu likelihood evaluations (%s, %zu iterations of the best start, Newton "
               "decrement %.2g), %s, LL %.6f; target < 2 s\n",
               d + 1, best_fit, best_fit / ref_pass, best_ref, evals_fit, r.diag.method, r.diag.iterations,
               r.diag.newton_decrement, r.converged ? "converged" : "NOT CONVERGED", r.log_likelihood);
        printf("  with profile-likelihood intervals of nondecision and the three variability parameters: %.3f s = "
               "%.0f plain passes, %zu likelihood evaluations (%zu for the intervals)\n",
               best_prof, best_prof / ref_pass, r.diag.evaluations, r.diag.evaluations - evals_fit);
        for (size_t j = 0; j < k; j++) {
            printf("  %-18s %-10s %9.5f  (SE %.5f)", r.coef[j].parameter, r.coef[j].level, r.coef[j].estimate,
                   r.coef[j].se);
            if (r.coef[j].profiled) printf("  profile 95%% [%.5f, %.5f]", r.coef[j].profile_low, r.coef[j].profile_high);
            printf("\n");
        }
        for (size_t w = 0; w < warn.count; w++) printf("  warning: %s\n", warn.items[w]);
        bl_fit_result_clear(&r);
        bl_model_destroy(m);
        bl_trials_destroy(t);
        bl_warnings_clear(&warn);
    }
    if (sink == 0) printf(" \n");
    return 0;
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    int only = argc > 1 && !strcmp(argv[1], "--variability-only");
    int datasets = only && argc > 2 ? atoi(argv[2]) : 1;
    if (variability_fit(only ? 1 : 3, datasets > 0 ? datasets : 1)) return 1;
    if (only) return 0;
    size_t perms = argc > 1 ? (size_t)strtoul(argv[1], NULL, 10) : 100;
    sim_truth tr = {.n = 2000,
                    .n_participants = 4,
                    .a = {1.5, 1.1},
                    .a_slope = {0.25, 0.0},
                    .v = {2.2, 1.3, 0.6},
                    .v_slope = -0.3,
                    .t0 = 0.28};
    bl_trials *t = sim_trials(&tr, 2024);
    bl_model_spec s;
    bl_slope_spec slopes[2];
    spec_regression(&s, slopes, "bench");
    bl_error err = {0};
    bl_warnings warn = {0};
    bl_model *m = NULL;
    if (bl_model_build(&s, t, NULL, &m, &err)) {
        fprintf(stderr, "bench-fit: %s\n", err.message);
        return 1;
    }
    size_t n = bl_model_n_trials(m);
    printf("bench-fit: %zu trials, %zu coefficients\n", n, bl_model_n_coef(m));

    /* Reference: the engine's density and density+gradient on the same trials, plain loop. */
    bl_wiener_params *p = malloc(n * sizeof *p);
    const double truth[9] = {1.5, 1.1, 0.25, 0.0, 2.2, 1.3, 0.6, -0.3, 0.28};
    for (size_t k = 0; k < n; k++) bl_model_predict(m, truth, k, &p[k]);
    double sink = 0, g[BL_NPARAM];
    int reps = 200;
    double t0 = now();
    for (int r = 0; r < reps; r++)
        for (size_t k = 0; k < n; k++) {
            double lf;
            bl_wiener_log_density(&p[k], t->rt[bl_model_row(m, k)], t->upper[bl_model_row(m, k)], &lf, NULL);
            sink += lf;
        }
    double ns_density = (now() - t0) / (reps * (double)n) * 1e9;
    t0 = now();
    for (int r = 0; r < reps; r++)
        for (size_t k = 0; k < n; k++) {
            double lf;
            bl_wiener_log_density_grad(&p[k], t->rt[bl_model_row(m, k)], t->upper[bl_model_row(m, k)], &lf, g, NULL);
            sink += lf + g[0];
        }
    double ns_grad = (now() - t0) / (reps * (double)n) * 1e9;
    printf("engine reference: %.1f ns per log-density, %.1f ns per log-density+gradient (checksum %.3f)\n", ns_density,
           ns_grad, sink / 1e6);

    /* Control: the same plain density+gradient loop split over 2 threads with no design, no
     * reduction order and one parallel region: the parallelism the machine offers right now. */
    double ctl[3] = {0};
    for (int th = 1; th <= 2; th++) {
        t0 = now();
        double acc = 0;
#ifdef _OPENMP
#pragma omp parallel for num_threads(th) reduction(+ : acc) schedule(static)
#endif
        for (long q = 0; q < (long)reps * (long)n; q++) {
            size_t k = (size_t)(q % (long)n);
            double lf, gq[BL_NPARAM];
            bl_wiener_log_density_grad(&p[k], t->rt[bl_model_row(m, k)], t->upper[bl_model_row(m, k)], &lf, gq, NULL);
            acc += lf;
        }
        ctl[th] = now() - t0;
        sink += acc;
    }
    double ideal = ctl[1] / ctl[2];
    /* Control: the cost of one empty 2-thread parallel region (fork + join), which a likelihood
     * evaluation split over threads pays once. */
    double us_region = NAN;
#ifdef _OPENMP
    {
        volatile double xs[32];
        int regions = 2000;
        t0 = now();
        for (int r = 0; r < regions; r++) {
#pragma omp parallel for schedule(dynamic, 1) num_threads(2)
            for (int b = 0; b < 32; b++) xs[b] = b * r;
        }
        us_region = (now() - t0) / regions * 1e6;
        sink += xs[31];
    }
#endif
    printf("control: an empty 2-thread parallel region costs %.1f us (one likelihood evaluation: %.0f us of work)\n",
           us_region, ns_grad * (double)n * 1e-3);
    printf("control: plain density+gradient loop, 2 threads vs 1 in one parallel region: %.2fx (the machine's "
           "available parallelism in this run)\n",
           ideal);

    /* One likelihood+gradient evaluation through the model, 1 and 2 threads. */
    double ns_eval[3] = {0};
    for (int th = 1; th <= 2; th++) {
        bl_likelihood *w = NULL;
        if (bl_likelihood_create(m, th, &w, &err)) return 1;
        bl_likelihood_set_parallel(w, th > 1 ? BL_PARALLEL_SPLIT
                                             : BL_PARALLEL_UNSPLIT); /* forced: the parallel path itself */
        double gg[9];
        int er = 300;
        t0 = now();
        for (int r = 0; r < er; r++) sink += bl_likelihood_eval(w, truth, gg);
        ns_eval[th] = (now() - t0) / er / (double)n * 1e9;
        bl_likelihood_destroy(w);
    }
    printf("likelihood+gradient through the design: %.1f ns per trial (1 thread, %.2fx the plain density+gradient), "
           "%.1f ns per trial (2 threads forced, speed-up %.2fx)\n",
           ns_eval[1], ns_eval[1] / ns_grad, ns_eval[2], ns_eval[1] / ns_eval[2]);

    /* Whole fits: optimisation + inference, one start and three starts; 1 thread, and 2 threads with
     * the trials always split (forced) and chosen by timing (auto, the default). */
    const char *mode_name[3] = {"1 thread", "2 threads forced", "2 threads auto"};
    double fit_time[3][4] = {{0}};
    for (int mode = 0; mode < 3; mode++)
        for (int starts = 1; starts <= 3; starts += 2) {
            bl_fit_options opt;
            bl_fit_options_default(&opt);
            opt.threads = mode == 0 ? 1 : 2;
            opt.parallel_trials = mode == 1 ? BL_PARALLEL_SPLIT : BL_PARALLEL_AUTO;
            opt.starts = starts;
            int fits = 5;
            size_t evals = 0;
            double ll = 0;
            int conv = 1;
            /* each fit is timed on its own, with a reference pass (the plain density+gradient over the
             * same trials) right before it; the fastest of each counts, so load hits both alike */
            double best_fit = INFINITY, best_ref = INFINITY;
            size_t best_evals = 0;
            for (int f = 0; f < fits; f++) {
                double ref = 0;
                for (int rr = 0; rr < 5; rr++) ref += reference_pass(m, t, truth, &sink);
                if (ref / 5 < best_ref) best_ref = ref / 5;
                bl_fit_result r;
                t0 = now();
                if (bl_fit_model(m, &opt, NULL, &r, &warn, &err)) {
                    fprintf(stderr, "bench-fit: %s\n", err.message);
                    return 1;
                }
                double el = now() - t0;
                if (el < best_fit) {
                    best_fit = el;
                    best_evals = r.diag.evaluations;
                }
                evals += r.diag.evaluations;
                ll = r.log_likelihood;
                conv = conv && r.converged;
                bl_fit_result_clear(&r);
            }
            if (best_ref < ns_grad) ns_grad = best_ref;
            double per_fit = best_fit;
            evals = best_evals * (size_t)fits;
            fit_time[mode][starts] = per_fit;
            double per_eval = per_fit / ((double)evals / fits);
            printf("fit, %s, %d start%s: %.4f s per fit, %zu likelihood evaluations per fit, "
                   "%.1f ns per trial-density inside the fit (%.2fx the plain density+gradient), LL %.6f%s\n",
                   mode_name[mode], starts, starts > 1 ? "s" : "", per_fit, evals / fits, per_eval / (double)n * 1e9,
                   per_eval / (double)n * 1e9 / ns_grad, ll, conv ? "" : " NOT CONVERGED");
        }
    printf("fit speed-up, 2 threads vs 1: forced %.2fx (1 start), %.2fx (3 starts); auto %.2fx, %.2fx; control %.2fx\n",
           fit_time[0][1] / fit_time[1][1], fit_time[0][3] / fit_time[1][3], fit_time[0][1] / fit_time[2][1],
           fit_time[0][3] / fit_time[2][3], ideal);

    /* Permutation throughput: refits with theta shuffled within participant x context cells. */
    if (perms > 0) {
        bl_study study;
        memset(&study, 0, sizeof study);
        study.fit.participants = BL_PARTICIPANTS_POOLED;
        study.fit.starts = 1;
        study.models = &s;
        study.n_models = 1;
        for (int th = 1; th <= 2; th++) {
            bl_fit_options opt;
            bl_fit_options_default(&opt);
            opt.threads = th;
            opt.permutations = perms;
            opt.seed = 7;
            bl_fit_set *set = NULL;
            t0 = now();
            if (bl_fit_study(&study, t, &opt, &set, &warn, &err)) {
                fprintf(stderr, "bench-fit: %s\n", err.message);
                return 1;
            }
            double el = now() - t0;
            /* Two slopes are tested (theta on threshold, beta on drift): 2 x perms refits. */
            double per = el / (2.0 * (double)perms);
            printf("permutations, %d thread%s: %zu refits in %.2f s = %.4f s per refit; 1,000 permutations of one "
                   "slope: %.1f s (p theta %.4f, p beta %.4f)\n",
                   th, th > 1 ? "s" : "", 2 * perms, el, per, 1000 * per, set->models[0].permutation[0].p,
                   set->models[0].permutation[1].p);
            bl_fit_set_destroy(set);
        }
    }
    free(p);
    bl_model_destroy(m);
    bl_trials_destroy(t);
    bl_warnings_clear(&warn);
    return 0;
}
