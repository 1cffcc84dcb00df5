/* Helpers for the fit tests: trial sets built in memory and filled with responses drawn from
 * the engine's exact sampler under a known regression (invented test data, not a scenario). */
#ifndef BL_FIT_TESTUTIL_H
#define BL_FIT_TESTUTIL_H

#include "engine/wiener_sample.h"
#include "design/model.h"
#include "design/study.h"
#include "design/table.h"
#include "design/trials.h"
#include "bandlink/wiener.h"

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* Truth of a simulation: threshold = a[context] + a_slope[context] * theta,
 * drift = v[difficulty] + v_slope * beta, nondecision t0, start 0.5. The optional per-participant
 * offsets (n_participants entries each, NULL: none) make participants differ as in real studies. */
typedef struct {
    size_t n, n_participants;
    double a[2], a_slope[2];
    double v[3], v_slope;
    double t0;
    int stimulus;                                  /* 1: stimulus coding with random stimuli */
    double v_step;                                 /* participant p (0-based) adds p * v_step to drift */
    const double *a_offset, *v_offset, *t0_offset; /* participant p adds [p] to threshold, drift, t0 */
    double sv, sz, st;                             /* drift_sd, start_range, nondecision_range (0: none) */
} sim_truth;

static const char *sim_contexts[2] __attribute__((unused)) = {"rich", "lean"};
static const char *sim_difficulties[3] __attribute__((unused)) = {"easy", "medium", "hard"};

static inline char *sim_dup(const char *s)
{
    char *c = malloc(strlen(s) + 1);
    strcpy(c, s);
    return c;
}

/* Trials with columns participant, context, difficulty, theta, beta, flat (constant 1) and
 * responses sampled from the truth. */
static inline bl_trials *sim_trials(const sim_truth *tr, unsigned long seed)
{
    size_t n = tr->n;
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);
    bl_trials *t = calloc(1, sizeof *t);
    t->n = n;
    bl_table_create(n, &t->table, NULL);
    t->rt = malloc(n * sizeof *t->rt);
    t->upper = malloc(n * sizeof *t->upper);
    t->drift_sign = malloc(n * sizeof *t->drift_sign);
    t->participant = malloc(n * sizeof *t->participant);
    t->trial_label = calloc(n, sizeof *t->trial_label);
    t->excluded = calloc(n, sizeof *t->excluded);
    size_t np = tr->n_participants ? tr->n_participants : 1;
    t->n_participants = np;
    t->participants = calloc(np, sizeof *t->participants);
    for (size_t p = 0; p < np; p++) {
        char b[32];
        snprintf(b, sizeof b, "r%zu", p + 1);
        t->participants[p] = sim_dup(b);
    }
    const char **part = malloc(n * sizeof *part), **ctx = malloc(n * sizeof *ctx), **dif = malloc(n * sizeof *dif);
    double *theta = malloc(n * sizeof *theta), *beta = malloc(n * sizeof *beta), *flat = malloc(n * sizeof *flat);
    for (size_t i = 0; i < n; i++) {
        size_t p = i * np / n;
        int c = (int)(i % 2), d = (int)((i / 2) % 3);
        t->participant[i] = p;
        part[i] = t->participants[p];
        ctx[i] = sim_contexts[c];
        dif[i] = sim_difficulties[d];
        theta[i] = gsl_ran_gaussian(rng, 1.0);
        beta[i] = gsl_ran_gaussian(rng, 1.0);
        flat[i] = 1.0;
        char b[32];
        snprintf(b, sizeof b, "%zu", i + 1);
        t->trial_label[i] = sim_dup(b);
        bl_wiener_params w;
        bl_wiener_params_default(&w);
        w.value[BL_THRESHOLD] = tr->a[c] + tr->a_slope[c] * theta[i] + (tr->a_offset ? tr->a_offset[p] : 0);
        double v = tr->v[d] + tr->v_slope * beta[i] + (double)p * tr->v_step + (tr->v_offset ? tr->v_offset[p] : 0);
        int sign = 1;
        if (tr->stimulus) sign = gsl_rng_uniform(rng) < 0.5 ? -1 : 1;
        t->drift_sign[i] = sign;
        w.value[BL_DRIFT] = sign * v;
        w.value[BL_NONDECISION] = tr->t0 + (tr->t0_offset ? tr->t0_offset[p] : 0);
        w.value[BL_START] = 0.5;
        w.value[BL_DRIFT_SD] = tr->sv;
        w.value[BL_START_RANGE] = tr->sz;
        w.value[BL_NONDECISION_RANGE] = tr->st;
        int up;
        double rt;
        if (bl_wiener_sample(&w, rng, &up, &rt, NULL) != BL_OK) {
            fprintf(stderr, "sampler failed\n");
            exit(1);
        }
        t->upper[i] = up;
        t->rt[i] = rt;
    }
    bl_table_add_text(t->table, "participant", part, NULL);
    bl_table_add_text(t->table, "context", ctx, NULL);
    bl_table_add_text(t->table, "difficulty", dif, NULL);
    bl_table_add_numeric(t->table, "theta", theta, NULL);
    bl_table_add_numeric(t->table, "beta", beta, NULL);
    bl_table_add_numeric(t->table, "flat", flat, NULL);
    t->n_kept = n;
    free(part);
    free(ctx);
    free(dif);
    free(theta);
    free(beta);
    free(flat);
    gsl_rng_free(rng);
    return t;
}

/* A model spec in memory: the defaults (threshold, drift, nondecision free; start 0.5; the rest 0). */
static inline void spec_default(bl_model_spec *s, const char *name)
{
    memset(s, 0, sizeof *s);
    s->name = (char *)name;
    for (int p = 0; p < BL_NPARAM; p++) {
        if (p == BL_START) {
            s->param[p].is_fixed = 1;
            s->param[p].fixed = 0.5;
        } else if (p >= BL_DRIFT_SD) {
            s->param[p].is_fixed = 1;
            s->param[p].fixed = 0;
        }
    }
}

/* Column lists are static string arrays in the tests. */
static char *col_context[] __attribute__((unused)) = {"context"};
static char *col_difficulty[] __attribute__((unused)) = {"difficulty"};

/* The regression the fit tests, the coverage test and bench-fit share (9 coefficients): threshold per
 * context with a theta slope per context, drift per difficulty with one shared beta slope. `slopes`
 * (2 entries) holds the slope specs and must outlive `s`. */
static inline void spec_regression(bl_model_spec *s, bl_slope_spec slopes[2], const char *name)
{
    spec_default(s, name);
    slopes[0] = (bl_slope_spec){"theta", col_context, 1};
    slopes[1] = (bl_slope_spec){"beta", NULL, 0};
    s->param[BL_THRESHOLD].per = col_context;
    s->param[BL_THRESHOLD].n_per = 1;
    s->param[BL_THRESHOLD].slopes = &slopes[0];
    s->param[BL_THRESHOLD].n_slopes = 1;
    s->param[BL_DRIFT].per = col_difficulty;
    s->param[BL_DRIFT].n_per = 1;
    s->param[BL_DRIFT].slopes = &slopes[1];
    s->param[BL_DRIFT].n_slopes = 1;
}
static char *col_participant[] __attribute__((unused)) = {"participant"};

#endif
