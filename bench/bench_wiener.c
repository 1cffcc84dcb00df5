/* Speed of the Wiener engine, as ratios to exp() measured in the same run (issue 2 targets: plain
 * log-density <= 15 exp, gradient <= 3 log-densities, variability by quadrature <= 30 plain).
 * Usage: bench-wiener [--json] [--trials N]
 * Inputs mimic a likelihood pass: per-trial parameters that vary slightly, RTs spread over 0.3-1.8 s
 * (threshold ~1.2, drift ~1, start ~0.45, nondecision 0.25; noise s = 1). The measurements are
 * interleaved (every mode once per round, 9 rounds) and the fastest round counts, so load from other
 * processes affects exp() and the densities alike. */
#include "bandlink/wiener.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return ts.tv_sec + 1e-9 * ts.tv_nsec;
}

typedef struct {
    bl_wiener_params *p;
    double *rt;
    int *up;
    size_t n;
} trials;

static volatile double sink;

enum { M_EXP, M_PLAIN, M_GRAD, M_SV, M_SV_GRAD, M_SZ, M_ST, M_SZST, M_SZST_GRAD };

/* One timing: repeat passes over the trials for at least 20 ms; ns per call. */
static double run(int mode, const trials *T, size_t n)
{
    double acc = 0, t = now(), el;
    size_t calls = 0;
    do {
        for (size_t i = 0; i < n; i++) {
            double l, g[BL_NPARAM];
            if (mode == M_EXP) {
                acc += exp(-T->rt[i] * 3.1);
            } else if (mode == M_GRAD || mode == M_SV_GRAD || mode == M_SZST_GRAD) {
                bl_wiener_log_density_grad(&T->p[i], T->rt[i], T->up[i], &l, g, NULL);
                acc += l + g[0];
            } else {
                bl_wiener_log_density(&T->p[i], T->rt[i], T->up[i], &l, NULL);
                acc += l;
            }
        }
        calls += n;
        el = now() - t;
    } while (el < 0.02);
    sink = acc;
    return 1e9 * el / (double)calls;
}

static void setup(trials *T, size_t n, int mode, gsl_rng *r)
{
    for (size_t i = 0; i < n; i++) {
        bl_wiener_params *p = &T->p[i];
        bl_wiener_params_default(p);
        p->value[BL_THRESHOLD] = 1.2 * exp(0.1 * (gsl_rng_uniform(r) - 0.5));
        p->value[BL_DRIFT] = 1 + 0.4 * (gsl_rng_uniform(r) - 0.5);
        p->value[BL_START] = 0.45;
        p->value[BL_NONDECISION] = 0.25;
        if (mode == M_SV || mode == M_SV_GRAD) p->value[BL_DRIFT_SD] = 0.8;
        if (mode == M_SZ || mode == M_SZST || mode == M_SZST_GRAD) p->value[BL_START_RANGE] = 0.3;
        if (mode == M_ST || mode == M_SZST || mode == M_SZST_GRAD) p->value[BL_NONDECISION_RANGE] = 0.15;
        T->rt[i] = 0.3 + 1.5 * gsl_rng_uniform(r);
        T->up[i] = gsl_rng_uniform(r) < 0.8;
    }
}

int main(int argc, char **argv)
{
    int json = 0;
    size_t n = 50000;
    for (int i = 1; i < argc; i++) {
        if (!strcmp(argv[i], "--json")) json = 1;
        else if (!strcmp(argv[i], "--trials") && i + 1 < argc) n = strtoul(argv[++i], NULL, 10);
        else {
            fprintf(stderr, "usage: bench-wiener [--json] [--trials N]\n");
            return 2;
        }
    }
    if (n < 100) n = 100;
    gsl_set_error_handler_off();
    trials T[9];
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    size_t nm[9];
    for (int m = 0; m < 9; m++) {
        nm[m] = m >= M_SZ ? n / 20 : n;
        T[m].p = malloc(nm[m] * sizeof *T[m].p);
        T[m].rt = malloc(nm[m] * sizeof *T[m].rt);
        T[m].up = malloc(nm[m] * sizeof *T[m].up);
        if (!T[m].p || !T[m].rt || !T[m].up || !r) return 1;
        gsl_rng_set(r, 1);
        setup(&T[m], nm[m], m, r);
    }
    const char *names[] = {"exp",        "log_density",       "gradient",        "log_density_drift_sd",
                           "gradient_drift_sd", "log_density_start_range", "log_density_nondecision_range",
                           "log_density_start_range_nondecision_range", "gradient_start_range_nondecision_range"};
    double ns[9];
    for (int m = 0; m < 9; m++) ns[m] = INFINITY;
    for (int round = 0; round < 9; round++)
        for (int m = 0; m < 9; m++) {
            double x = run(m, &T[m], nm[m]);
            if (x < ns[m]) ns[m] = x;
        }
    if (json) {
        printf("{\n  \"trials\": %zu,\n  \"ns\": {", n);
        for (int m = 0; m < 9; m++) printf("%s\n    \"%s\": %.2f", m ? "," : "", names[m], ns[m]);
        printf("\n  },\n  \"ratios\": {\n");
        printf("    \"log_density_per_exp\": %.2f,\n", ns[M_PLAIN] / ns[M_EXP]);
        printf("    \"gradient_per_log_density\": %.2f,\n", ns[M_GRAD] / ns[M_PLAIN]);
        printf("    \"drift_sd_per_plain\": %.2f,\n", ns[M_SV] / ns[M_PLAIN]);
        printf("    \"start_range_per_plain\": %.2f,\n", ns[M_SZ] / ns[M_PLAIN]);
        printf("    \"nondecision_range_per_plain\": %.2f,\n", ns[M_ST] / ns[M_PLAIN]);
        printf("    \"start_range_nondecision_range_per_plain\": %.2f\n", ns[M_SZST] / ns[M_PLAIN]);
        printf("  },\n  \"targets\": {\"log_density_per_exp\": 15, \"gradient_per_log_density\": 3, "
               "\"variability_per_plain\": 30}\n}\n");
    } else {
        for (int m = 0; m < 9; m++) printf("%-45s %10.1f ns  (%6.2f x exp)\n", names[m], ns[m], ns[m] / ns[M_EXP]);
        printf("gradient / log-density: %.2f (target <= 3)\n", ns[M_GRAD] / ns[M_PLAIN]);
        printf("log-density / exp: %.2f (target <= 15)\n", ns[M_PLAIN] / ns[M_EXP]);
        printf("start_range+nondecision_range / plain: %.2f, start_range / plain: %.2f (target <= 30)\n",
               ns[M_SZST] / ns[M_PLAIN], ns[M_SZ] / ns[M_PLAIN]);
    }
    gsl_rng_free(r);
    for (int m = 0; m < 9; m++) {
        free(T[m].p);
        free(T[m].rt);
        free(T[m].up);
    }
    return 0;
}
