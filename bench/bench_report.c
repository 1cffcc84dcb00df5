/* Speed of the report module, as ratios to references measured in the same run:
 *  1. mixture quantiles of a group (5 quantiles, one boundary, n distinct trial distributions)
 *     vs n x 5 single-distribution quantiles by the engine (bl_wiener_quantile): how much the
 *     mixture costs compared with solving each trial alone;
 *  2. figures + report.html vs the goodness of fit of the same invented data set (600 trials, 2 models).
 * Usage: bench-report [n]   (default n = 360, a demo-sized condition cell). */
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

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    size_t n = argc > 1 ? (size_t)atol(argv[1]) : 360;
    if (n < 1) n = 360;
    bl_wiener_params *p = calloc(n, sizeof *p);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 7);
    for (size_t i = 0; i < n; i++)
        p[i] = fx_params(1.6 + 0.27 * gsl_ran_gaussian(rng, 1), 1.4 - 0.2 * gsl_ran_gaussian(rng, 1), 0.3);
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
    char dir[] = "/tmp/bl_bench_report_XXXXXX";
    if (!mkdtemp(dir)) return 1;
    char path[300];
    snprintf(path, sizeof path, "%s/report.html", dir);
    t = now();
    if (bl_figures_make(&fx->study, &fx->trials, &fx->power, &fx->set, g, &fs, NULL) != BL_OK) return 1;
    if (bl_report_write(path, NULL, &fx->study, &fx->trials, &fx->power, &fx->set, g, fs, NULL, NULL) != BL_OK) return 1;
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
    return sink == 12345.678 ? 2 : 0;
}
