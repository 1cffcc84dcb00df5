/* Heterogeneous multi-participant studies for the hierarchical tests and bench-hier: every participant
 * has their own threshold intercept, threshold slope on `theta`, drift and nondecision, drawn around
 * population values with a given spread (identity link, so offsets add on the parameter's own scale),
 * and responses drawn with the engine's exact sampler (bl_wiener_sample). Invented test data. */
#ifndef BL_HIER_TESTUTIL_H
#define BL_HIER_TESTUTIL_H

#include "fit_testutil.h"

#include <math.h>

/* Population values and participant SDs. Trials per participant are drawn uniformly from
 * [trials_min, trials_max] (equal when the two agree). */
typedef struct {
    size_t participants, trials_min, trials_max;
    double a, a_slope, v, t0;           /* population threshold intercept, theta slope, drift, nondecision */
    double sd_a, sd_slope, sd_v, sd_t0; /* participant SDs of the same four */
} hier_truth;

/* One participant's own values (filled by hier_sim when the caller passes an array). */
typedef struct {
    double a, a_slope, v, t0;
} hier_participant;

/* Draws participants and trials. Participants whose values would make the process ill-defined for
 * typical regressor values (threshold intercept < 0.5, nondecision < 0.1) are redrawn: with the
 * settings the tests use this happens beyond 2.5 SDs, so the spread is barely truncated. A trial whose
 * threshold would fall below 0.25 has its theta redrawn (a tail of well under 1 in 1000 trials). */
static inline bl_trials *hier_sim(const hier_truth *tr, unsigned long seed, hier_participant *who)
{
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);
    size_t np = tr->participants, *count = malloc(np * sizeof *count), n = 0;
    hier_participant *own = malloc(np * sizeof *own);
    for (size_t p = 0; p < np; p++) {
        count[p] = tr->trials_min + (tr->trials_max > tr->trials_min
                                         ? gsl_rng_uniform_int(rng, tr->trials_max - tr->trials_min + 1)
                                         : 0);
        n += count[p];
        do {
            own[p].a = tr->a + gsl_ran_gaussian(rng, tr->sd_a);
            own[p].a_slope = tr->a_slope + gsl_ran_gaussian(rng, tr->sd_slope);
            own[p].v = tr->v + gsl_ran_gaussian(rng, tr->sd_v);
            own[p].t0 = tr->t0 + gsl_ran_gaussian(rng, tr->sd_t0);
        } while (own[p].a < 0.5 || own[p].t0 < 0.1);
        if (who) who[p] = own[p];
    }
    bl_trials *t = calloc(1, sizeof *t);
    t->n = n;
    bl_table_create(n, &t->table, NULL);
    t->rt = malloc(n * sizeof *t->rt);
    t->upper = malloc(n * sizeof *t->upper);
    t->drift_sign = malloc(n * sizeof *t->drift_sign);
    t->participant = malloc(n * sizeof *t->participant);
    t->trial_label = calloc(n, sizeof *t->trial_label);
    t->excluded = calloc(n, sizeof *t->excluded);
    t->n_participants = np;
    t->participants = calloc(np, sizeof *t->participants);
    const char **part = malloc(n * sizeof *part);
    double *theta = malloc(n * sizeof *theta);
    size_t i = 0;
    for (size_t p = 0; p < np; p++) {
        char b[32];
        snprintf(b, sizeof b, "s%02zu", p + 1);
        t->participants[p] = sim_dup(b);
        for (size_t k = 0; k < count[p]; k++, i++) {
            double a;
            do {
                theta[i] = gsl_ran_gaussian(rng, 1.0);
                a = own[p].a + own[p].a_slope * theta[i];
            } while (a < 0.25);
            t->participant[i] = p;
            part[i] = t->participants[p];
            snprintf(b, sizeof b, "%zu", k + 1);
            t->trial_label[i] = sim_dup(b);
            bl_wiener_params w;
            bl_wiener_params_default(&w);
            w.value[BL_THRESHOLD] = a;
            w.value[BL_DRIFT] = own[p].v;
            w.value[BL_NONDECISION] = own[p].t0;
            w.value[BL_START] = 0.5;
            int up;
            double rt;
            if (bl_wiener_sample(&w, rng, &up, &rt, NULL) != BL_OK) {
                fprintf(stderr, "sampler failed\n");
                exit(1);
            }
            t->upper[i] = up;
            t->rt[i] = rt;
            t->drift_sign[i] = 1;
        }
    }
    bl_table_add_text(t->table, "participant", part, NULL);
    bl_table_add_numeric(t->table, "theta", theta, NULL);
    t->n_kept = n;
    free(part);
    free(theta);
    free(own);
    free(count);
    gsl_rng_free(rng);
    return t;
}

/* A study (parsed from JSON like a user's file) with one model: threshold with a shared theta slope,
 * drift and nondecision free; participants `mode` ("hierarchical" or "pooled"). In hierarchical mode
 * the threshold intercept and slope vary, and drift and nondecision intercepts vary by default.
 * `quadrature` 1 = Laplace. `slope_varies` 0 leaves the slope fixed (3 effects). */
static inline bl_study *hier_study(const char *mode, int quadrature, int slope_varies)
{
    char json[1024], fit[96];
    int hier = !strcmp(mode, "hierarchical");
    if (hier)
        snprintf(fit, sizeof fit, "\"participants\": \"hierarchical\", \"starts\": 1, \"quadrature\": %d",
                 quadrature);
    else
        snprintf(fit, sizeof fit, "\"participants\": \"%s\", \"starts\": 1", mode);
    snprintf(json, sizeof json,
             "{\"trials\": {\"file\": \"trials.csv\", \"participant\": \"participant\", \"rt\": \"rt\","
             " \"response\": \"response\", \"upper\": [\"1\"]},"
             " \"fit\": {%s},"
             " \"models\": [{\"name\": \"spread\","
             " \"threshold\": {\"slopes\": {\"theta\": []}%s}}]}",
             fit, !hier ? "" : slope_varies ? ", \"varies\": [\"intercept\", \"theta\"]" : ", \"varies\": [\"intercept\"]");
    bl_study *s = NULL;
    bl_error err = {0};
    if (bl_study_parse(json, "hier-test/study.json", &s, &err)) {
        fprintf(stderr, "study: %s\n", err.message);
        return NULL;
    }
    return s;
}

#endif
