/* Speed of the Wiener engine: every combination of the three variability parameters (drift_sd,
 * start_range, nondecision_range), each with and without contaminants, value and gradient, as ratios
 * to the plain log-density (and its gradient) timed in the same run, plus the plain log-density as a
 * ratio to exp(). Targets: plain log-density <= 15 exp, gradient <= 3 log-densities, every variability
 * combination <= 30 x plain (stretch 15 x).
 * Usage: bench-wiener [--json] [--trials N]
 * Inputs mimic a likelihood pass: per-trial parameters that vary slightly, RTs spread over 0.3-1.8 s
 * (threshold ~1.2, drift ~1, start ~0.45, nondecision 0.25; drift_sd 0.8, start_range 0.3,
 * nondecision_range 0.15, contamination 0.02 on [0.2, 3] s; noise s = 1). The measurements are
 * interleaved (every mode once per round, 9 rounds) and the fastest round counts, so load from other
 * processes affects the reference and the variability modes alike. */
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

/* Modes: 0 = exp; then 1 + 2 * c + grad for c = combo (bits: 1 drift_sd, 2 start_range,
 * 4 nondecision_range, 8 contamination) and grad = 0 (log-density) or 1 (gradient). */
#define NCOMBO 16
#define NMODE (1 + 2 * NCOMBO)

static double run(int mode, const trials *T)
{
    double acc = 0, t = now(), el;
    size_t calls = 0;
    do {
        for (size_t i = 0; i < T->n; i++) {
            double l, g[BL_NPARAM];
            if (mode == 0) {
                acc += exp(-T->rt[i] * 3.1);
            } else if ((mode - 1) % 2) {
                bl_wiener_log_density_grad(&T->p[i], T->rt[i], T->up[i], &l, g, NULL);
                acc += l + g[0];
            } else {
                bl_wiener_log_density(&T->p[i], T->rt[i], T->up[i], &l, NULL);
                acc += l;
            }
        }
        calls += T->n;
        el = now() - t;
    } while (el < 0.02);
    sink = acc;
    return 1e9 * el / (double)calls;
}

static void setup(trials *T, int combo, gsl_rng *r)
{
    for (size_t i = 0; i < T->n; i++) {
        bl_wiener_params *p = &T->p[i];
        bl_wiener_params_default(p);
        p->value[BL_THRESHOLD] = 1.2 * exp(0.1 * (gsl_rng_uniform(r) - 0.5));
        p->value[BL_DRIFT] = 1 + 0.4 * (gsl_rng_uniform(r) - 0.5);
        p->value[BL_START] = 0.45;
        p->value[BL_NONDECISION] = 0.25;
        if (combo & 1) p->value[BL_DRIFT_SD] = 0.8;
        if (combo & 2) p->value[BL_START_RANGE] = 0.3;
        if (combo & 4) p->value[BL_NONDECISION_RANGE] = 0.15;
        if (combo & 8) {
            p->value[BL_CONTAMINATION] = 0.02;
            p->contamination_lo = 0.2;
            p->contamination_hi = 3;
        }
        T->rt[i] = 0.3 + 1.5 * gsl_rng_uniform(r);
        T->up[i] = gsl_rng_uniform(r) < 0.8;
    }
}

static void combo_name(int c, char *buf, size_t len)
{
    snprintf(buf, len, "%s%s%s%s%s", c & 7 ? "" : "plain", c & 1 ? "drift_sd" : "",
             (c & 2) ? (c & 1 ? "+start_range" : "start_range") : "",
             (c & 4) ? (c & 3 ? "+nondecision_range" : "nondecision_range") : "", c & 8 ? "+contamination" : "");
}

int main(int argc, char **argv)
{
    int json = 0;
    size_t n = 20000;
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
    trials T[NMODE];
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    if (!r) return 1;
    for (int m = 0; m < NMODE; m++) {
        int combo = m == 0 ? 0 : (m - 1) / 2;
        /* fewer trials where a call is expensive, so a round stays short */
        T[m].n = m == 0 || (combo & 7) == 0 ? n : n / 10;
        T[m].p = malloc(T[m].n * sizeof *T[m].p);
        T[m].rt = malloc(T[m].n * sizeof *T[m].rt);
        T[m].up = malloc(T[m].n * sizeof *T[m].up);
        if (!T[m].p || !T[m].rt || !T[m].up) return 1;
        gsl_rng_set(r, 1);
        setup(&T[m], combo, r);
    }
    double ns[NMODE];
    for (int m = 0; m < NMODE; m++) ns[m] = INFINITY;
    for (int round = 0; round < 9; round++)
        for (int m = 0; m < NMODE; m++) {
            double x = run(m, &T[m]);
            if (x < ns[m]) ns[m] = x;
        }
    double plain = ns[1], plain_g = ns[2], worst = 0;
    if (json) printf("{\n  \"trials\": %zu,\n  \"exp_ns\": %.2f,\n  \"combinations\": [", n, ns[0]);
    else printf("%-48s %10s %9s %10s %9s %9s\n", "density case", "ns", "/ plain", "grad ns", "/ p.grad", "/ plain");
    for (int c = 0; c < NCOMBO; c++) {
        char name[96];
        combo_name(c, name, sizeof name);
        double v = ns[1 + 2 * c], g = ns[2 + 2 * c];
        if (c & 7 && v / plain > worst) worst = v / plain;
        if (c & 7 && g / plain_g > worst) worst = g / plain_g;
        if (json)
            printf("%s\n    {\"case\": \"%s\", \"ns\": %.2f, \"per_plain\": %.3f, \"gradient_ns\": %.2f, "
                   "\"gradient_per_plain_gradient\": %.3f, \"gradient_per_plain\": %.3f}",
                   c ? "," : "", name, v, v / plain, g, g / plain_g, g / plain);
        else printf("%-48s %10.1f %9.2f %10.1f %9.2f %9.2f\n", name, v, v / plain, g, g / plain_g, g / plain);
    }
    if (json)
        printf("\n  ],\n  \"log_density_per_exp\": %.2f,\n  \"gradient_per_log_density\": %.2f,\n"
               "  \"worst_variability_per_plain\": %.2f,\n  \"targets\": {\"log_density_per_exp\": 15, "
               "\"gradient_per_log_density\": 3, \"variability_per_plain\": 30}\n}\n",
               plain / ns[0], plain_g / plain, worst);
    else
        printf("exp %.1f ns; plain log-density / exp: %.2f (target <= 15); gradient / log-density: %.2f "
               "(target <= 3)\nworst variability case / plain (value vs value, gradient vs gradient): %.2f "
               "(target <= 30, stretch 15)\n",
               ns[0], plain / ns[0], plain_g / plain, worst);
    gsl_rng_free(r);
    for (int m = 0; m < NMODE; m++) {
        free(T[m].p);
        free(T[m].rt);
        free(T[m].up);
    }
    return 0;
}
