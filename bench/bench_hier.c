/* Hierarchical-fit benchmark: 12 participants x 200 trials whose threshold intercept, threshold slope
 * on theta, drift and nondecision differ (tests/hier_testutil.h). On one thread:
 * wall time (min and median over the runs) and CPU time (least) of each fit.
 * (1) the hierarchical fit (3 varying intercepts + the varying slope, Laplace) against the pooled fit of
 *     the same model on the same data, run alternately so that load on the machine hits both alike;
 *     min and median wall time of each and their ratio (the hierarchical fit includes its pooled start);
 * (2) Laplace against adaptive Gauss-Hermite with 5 nodes per dimension on the 3 varying intercepts
 *     (slope fixed): time, marginal log-likelihood, population estimates and SDs side by side.
 * usage: bench-hier [REPS (default 3)] */
#include "../tests/hier_testutil.h"
#include "fit/fit.h"

#include <gsl/gsl_errno.h>
#include <time.h>

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* CPU time of this process: the fits run on one thread, so it is the fit's own cost whatever the
 * machine's load (the wall time is inflated when other processes share the cores). */
static double cpu_now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static int by_value(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static double median(double *x, int n)
{
    qsort(x, (size_t)n, sizeof *x, by_value);
    return n % 2 ? x[n / 2] : 0.5 * (x[n / 2 - 1] + x[n / 2]);
}

/* One fit of the study's only model on one thread; wall time in *seconds, the set in *out. */
static int fit_once(const bl_study *s, const bl_trials *t, double *seconds, double *cpu, bl_fit_set **out)
{
    bl_fit_options opt;
    bl_fit_options_default(&opt);
    opt.threads = 1;
    opt.parallel_trials = BL_PARALLEL_UNSPLIT;
    bl_error err = {0};
    bl_warnings warn = {0};
    double t0 = now(), c0 = cpu_now();
    bl_status st = bl_fit_study(s, t, &opt, out, &warn, &err);
    *seconds = now() - t0;
    *cpu = cpu_now() - c0;
    bl_warnings_clear(&warn);
    if (st) fprintf(stderr, "bench-hier: %s\n", err.message);
    return st != BL_OK;
}

static void print_model(const char *label, const bl_model_result *r, double min_s, double med_s, double cpu_s)
{
    printf("%-22s %8.3f %8.3f %8.3f  LL %11.4f  %s  evaluations %zu\n", label, min_s, med_s, cpu_s, r->log_likelihood,
           r->converged ? "converged" : "NOT CONVERGED", r->fit.diag.evaluations);
}

/* Population coefficients (and SDs when hierarchical) of two fits side by side. */
static void print_estimates(const char *la, const bl_model_result *a, const char *lb, const bl_model_result *b)
{
    printf("  %-26s %18s %18s\n", "coefficient", la, lb);
    for (size_t j = 0; j < a->fit.n_coef && j < b->fit.n_coef; j++)
        printf("  %-12s %-13s %9.4f (%.4f) %9.4f (%.4f)\n", a->fit.coef[j].parameter, a->fit.coef[j].term,
               a->fit.coef[j].estimate, a->fit.coef[j].se, b->fit.coef[j].estimate, b->fit.coef[j].se);
    for (size_t v = 0; v < a->n_variance; v++)
        printf("  SD %-9s %-13s %9.4f          %9.4f\n", a->variance[v].parameter, a->variance[v].term,
               a->variance[v].sd, v < b->n_variance ? b->variance[v].sd : NAN);
}

/* Alternate fits of study sa and study sb, reps times each; timings into ta, tb; last sets kept. */
/* Alternate fits of study sa and study sb, reps times each; wall times into ta, tb, the least CPU
 * time of each into ca, cb; last sets kept. */
static int alternate(const bl_study *sa, const bl_study *sb, const bl_trials *t, int reps, double *ta, double *tb,
                     double *ca, double *cb, bl_fit_set **fa, bl_fit_set **fb)
{
    *ca = *cb = INFINITY;
    for (int r = 0; r < reps; r++) {
        if (*fa) bl_fit_set_destroy(*fa);
        if (*fb) bl_fit_set_destroy(*fb);
        *fa = *fb = NULL;
        double c1, c2;
        if (fit_once(sa, t, &ta[r], &c1, fa) || fit_once(sb, t, &tb[r], &c2, fb)) return 1;
        *ca = fmin(*ca, c1);
        *cb = fmin(*cb, c2);
    }
    return 0;
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    int reps = argc > 1 ? atoi(argv[1]) : 3;
    if (reps < 1 || reps > 100) reps = 3;
    /* Spread as in a typical perceptual-decision group study (values from common practice). */
    hier_truth tr = {.participants = 12, .trials_min = 200, .trials_max = 200, .a = 1.3, .a_slope = 0.12, .v = 1.4,
                     .t0 = 0.3, .sd_a = 0.25, .sd_slope = 0.06, .sd_v = 0.35, .sd_t0 = 0.04};
    bl_trials *t = hier_sim(&tr, 2026, NULL);
    bl_study *hier = hier_study("hierarchical", 1, 1), *pooled = hier_study("pooled", 1, 1);
    bl_study *lap3 = hier_study("hierarchical", 1, 0), *gh3 = hier_study("hierarchical", 5, 0);
    if (!hier || !pooled || !lap3 || !gh3) return 1;
    printf("bench-hier: %zu participants x %zu trials, 1 thread, %d alternating runs of each fit\n", tr.participants,
           tr.trials_min, reps);
    double *ta = malloc(4 * (size_t)reps * sizeof *ta), *tb = ta + reps, *tc = tb + reps, *td = tc + reps;
    bl_fit_set *fh = NULL, *fp = NULL, *fl = NULL, *fg = NULL;
    double h_cpu, p_cpu, l_cpu, g_cpu;
    if (alternate(hier, pooled, t, reps, ta, tb, &h_cpu, &p_cpu, &fh, &fp)) return 1;
    if (alternate(lap3, gh3, t, reps, tc, td, &l_cpu, &g_cpu, &fl, &fg)) return 1;

    double h_min = ta[0], p_min = tb[0], l_min = tc[0], g_min = td[0];
    for (int r = 1; r < reps; r++) {
        h_min = fmin(h_min, ta[r]);
        p_min = fmin(p_min, tb[r]);
        l_min = fmin(l_min, tc[r]);
        g_min = fmin(g_min, td[r]);
    }
    double h_med = median(ta, reps), p_med = median(tb, reps), l_med = median(tc, reps), g_med = median(td, reps);
    printf("\n%-22s %8s %8s %8s\n", "fit", "min s", "median s", "min CPU s");
    print_model("pooled", &fp->models[0], p_min, p_med, p_cpu);
    print_model("hierarchical, 4 eff.", &fh->models[0], h_min, h_med, h_cpu);
    print_model("Laplace, 3 eff.", &fl->models[0], l_min, l_med, l_cpu);
    print_model("quadrature 5, 3 eff.", &fg->models[0], g_min, g_med, g_cpu);
    printf("\nhierarchical / pooled: %.1fx (min wall), %.1fx (median wall), %.1fx (CPU); goal: hierarchical fit < 5 s "
           "on one core (stretch 1 s), CPU: %s\n",
           h_min / p_min, h_med / p_med, h_cpu / p_cpu, h_cpu < 1 ? "stretch met" : h_cpu < 5 ? "met" : "NOT MET");
    printf("quadrature 5 / Laplace (3 effects): %.1fx (min wall), %.1fx (median wall), %.1fx (CPU); marginal LL "
           "difference %.2e\n\n",
           g_min / l_min, g_med / l_med, g_cpu / l_cpu, fg->models[0].log_likelihood - fl->models[0].log_likelihood);
    printf("hierarchical (4 effects) vs pooled, estimate (SE); truth: threshold %.2f, theta slope %.2f, drift %.2f, "
           "nondecision %.2f; SDs %.2f %.2f %.2f %.2f\n",
           tr.a, tr.a_slope, tr.v, tr.t0, tr.sd_a, tr.sd_slope, tr.sd_v, tr.sd_t0);
    print_estimates("hierarchical", &fh->models[0], "pooled", &fp->models[0]);
    printf("\nLaplace vs quadrature 5 (3 effects):\n");
    print_estimates("Laplace", &fl->models[0], "quadrature 5", &fg->models[0]);
    bl_fit_set_destroy(fh);
    bl_fit_set_destroy(fp);
    bl_fit_set_destroy(fl);
    bl_fit_set_destroy(fg);
    bl_study_destroy(hier);
    bl_study_destroy(pooled);
    bl_study_destroy(lap3);
    bl_study_destroy(gh3);
    bl_trials_destroy(t);
    free(ta);
    return 0;
}
