/* An invented, fully known data set for the report tests: a study description, coded trials
 * drawn from the engine's sampler, a synthetic per-trial spectrum, and a fit set whose trial-wise
 * predictions are the generating parameters. Not real data; only for tests and the sample program. */
#ifndef BL_REPORT_FIXTURE_H
#define BL_REPORT_FIXTURE_H

#include "engine/wiener_sample.h"
#include "fit/fit.h"
#include "signal/power.h"
#include "design/study.h"
#include "design/trials.h"
#include "bandlink/wiener.h"

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

enum { FX_N = 600, FX_NF = 65 };

typedef struct {
    bl_study study;
    bl_band_spec bands[2];
    bl_model_spec specs[2];
    bl_slope_spec slope;
    char *per_ctx[1], *by_ctx[1];
    char *upper_vals[1];
    bl_trials trials;
    char *participants[2];
    bl_power_result power;
    bl_power_band pbands[2];
    bl_power_spectrum spectra[2];
    size_t spec_n[2][FX_NF];
    double spec_mean[2][FX_NF], spec_m2[2][FX_NF];
    bl_fit_set set;
    bl_model_result models[2];
    unsigned char used[FX_N];
    bl_wiener_params base[FX_N], truth[FX_N];
    double p_upper[2][FX_N];
    bl_coefficient coef0[3], coef1[5];
    bl_fit_result part[2][2];
    bl_coefficient pcoef[2][2][5];
    bl_group_coefficient group[5];
    double theta[FX_N];
} fixture;

static bl_wiener_params fx_params(double a, double v, double t0)
{
    bl_wiener_params p;
    bl_wiener_params_default(&p);
    p.value[BL_THRESHOLD] = a;
    p.value[BL_DRIFT] = v;
    p.value[BL_NONDECISION] = t0;
    return p;
}

static void fx_coef(bl_coefficient *c, int param, const char *term, const char *level, double est, double se)
{
    c->param = param;
    c->parameter = bl_param_name(param);
    c->term = (char *)term;
    c->level = (char *)level;
    c->estimate = est;
    c->se = se;
    c->z = est / se;
    c->p = erfc(fabs(c->z) / sqrt(2));
    c->ci_low = est - 1.959963984540054 * se;
    c->ci_high = est + 1.959963984540054 * se;
}

/* separate != 0: the second model is fitted per participant with a group summary. */
static fixture *fixture_create(unsigned long seed, int separate)
{
    fixture *fx = calloc(1, sizeof *fx);
    if (!fx) return NULL;
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);

    /* Study: two contexts, theta raises the threshold in "rich". */
    bl_study *st = &fx->study;
    st->path = "fixture/study.json";
    st->trials.file = "fixture/trials.csv";
    st->trials.participant = "animal";
    st->trials.response = "correct";
    fx->upper_vals[0] = "1";
    st->trials.upper = fx->upper_vals;
    st->trials.n_upper = 1;
    st->has_recordings = st->has_power = 1;
    st->recordings.unit = "uV";
    fx->bands[0] = (bl_band_spec){"theta", 4, 10};
    fx->bands[1] = (bl_band_spec){"beta", 15, 30};
    st->power.bands = fx->bands;
    st->power.n_bands = 2;
    st->power.scale = BL_SCALE_LOG10;
    st->power.standardize = BL_STANDARDIZE_PARTICIPANT;
    fx->per_ctx[0] = "context";
    fx->by_ctx[0] = "context";
    fx->slope = (bl_slope_spec){"theta", fx->by_ctx, 1};
    fx->specs[0].name = "baseline";
    fx->specs[0].param[BL_THRESHOLD].per = fx->per_ctx;
    fx->specs[0].param[BL_THRESHOLD].n_per = 1;
    fx->specs[1] = fx->specs[0];
    fx->specs[1].name = "theta-threshold";
    fx->specs[1].extends = "baseline";
    fx->specs[1].param[BL_THRESHOLD].slopes = &fx->slope;
    fx->specs[1].param[BL_THRESHOLD].n_slopes = 1;
    for (int m = 0; m < 2; m++)
        for (int p = BL_START; p < BL_NPARAM; p++) fx->specs[m].param[p].is_fixed = 1;
    st->models = fx->specs;
    st->n_models = 2;
    st->fit.participants = separate ? BL_PARTICIPANTS_SEPARATE : BL_PARTICIPANTS_POOLED;

    /* Trials. */
    bl_trials *t = &fx->trials;
    t->n = FX_N;
    bl_table_create(FX_N, &t->table, NULL);
    t->rt = calloc(FX_N, sizeof *t->rt);
    t->upper = calloc(FX_N, sizeof *t->upper);
    t->drift_sign = calloc(FX_N, sizeof *t->drift_sign);
    t->participant = calloc(FX_N, sizeof *t->participant);
    t->excluded = calloc(FX_N, sizeof *t->excluded);
    fx->participants[0] = "r1";
    fx->participants[1] = "r2";
    t->participants = fx->participants;
    t->n_participants = 2;
    const char *ctx[FX_N], *anim[FX_N], *correct[FX_N];
    for (size_t i = 0; i < FX_N; i++) {
        int rich = (i / 3) % 2 == 0;
        ctx[i] = rich ? "rich" : "lean";
        t->participant[i] = i < FX_N / 2 ? 0 : 1;
        anim[i] = fx->participants[t->participant[i]];
        fx->theta[i] = gsl_ran_gaussian(rng, 1.0);
        fx->truth[i] = fx_params(rich ? 1.3 + 0.25 * fx->theta[i] : 1.1, 1.2, 0.25);
        fx->base[i] = fx_params(rich ? 1.3 : 1.1, 1.2, 0.25);
        bl_wiener_sample(&fx->truth[i], rng, &t->upper[i], &t->rt[i], NULL);
        correct[i] = t->upper[i] ? "1" : "0";
        t->drift_sign[i] = 1;
        fx->used[i] = 1;
    }
    t->excluded[7] = "rt_min";
    t->excluded[100] = "artifact: flat";
    t->excluded[101] = "artifact: flat";
    fx->used[7] = fx->used[100] = fx->used[101] = 0;
    t->n_kept = FX_N - 3;
    bl_table_add_text(t->table, "context", ctx, NULL);
    bl_table_add_text(t->table, "animal", anim, NULL);
    bl_table_add_text(t->table, "correct", correct, NULL);
    bl_table_add_numeric(t->table, "theta", fx->theta, NULL);

    /* Spectrum: 1/f background, a theta bump whose height follows the trial's theta. */
    bl_power_result *pr = &fx->power;
    pr->fs = 1000;
    pr->nperseg = 500;
    pr->noverlap = 250;
    pr->nfft = 500;
    pr->n_segments = 3;
    pr->window_samples = 1000;
    pr->df = 2;
    pr->n_freqs = FX_NF;
    pr->freq = calloc(FX_NF, sizeof *pr->freq);
    for (size_t j = 0; j < FX_NF; j++) pr->freq[j] = 2.0 * (double)j;
    pr->n_trials = FX_N;
    /* One mean spectrum per context cell, accumulated trial by trial as band power does (Welford). */
    pr->n_spectra = 2;
    pr->spectra = fx->spectra;
    for (int c = 0; c < 2; c++) {
        fx->spectra[c] = (bl_power_spectrum){c ? "context=lean" : "context=rich", 0, fx->spec_n[c], fx->spec_mean[c],
                                             fx->spec_m2[c]};
        memset(fx->spec_n[c], 0, sizeof fx->spec_n[c]);
        memset(fx->spec_mean[c], 0, sizeof fx->spec_mean[c]);
        memset(fx->spec_m2[c], 0, sizeof fx->spec_m2[c]);
    }
    for (size_t i = 0; i < FX_N; i++)
        for (size_t j = 0; j < FX_NF; j++) {
            double f = pr->freq[j];
            double v = 40 / (1 + f) + 6 * exp(0.4 * fx->theta[i]) * exp(-0.5 * pow((f - 7) / 1.5, 2)) +
                       (ctx[i][0] == 'r' ? 1.5 : 0.8) * exp(-0.5 * pow((f - 22) / 3, 2));
            v *= 0.8 + 0.4 * gsl_rng_uniform(rng);
            if (t->excluded[i]) continue;
            bl_power_spectrum *sp = &fx->spectra[ctx[i][0] == 'r' ? 0 : 1];
            sp->trials += j == 0;
            sp->n[j]++;
            double d = v - sp->mean[j];
            sp->mean[j] += d / (double)sp->n[j];
            sp->m2[j] += d * (v - sp->mean[j]);
        }
    fx->pbands[0] = (bl_power_band){"theta", 4, 10, 2, 5, 4, NULL};
    fx->pbands[1] = (bl_power_band){"beta", 15, 30, 8, 15, 8, NULL};
    pr->bands = fx->pbands;
    pr->n_bands = 2;
    pr->unit = "uV";
    pr->n_recordings = 2;

    /* Fit set. */
    bl_fit_set *set = &fx->set;
    set->mode = separate ? BL_PARTICIPANTS_SEPARATE : BL_PARTICIPANTS_POOLED;
    set->n_models = 2;
    set->models = fx->models;
    const double ll[2] = {-412.75, -398.125};
    for (int m = 0; m < 2; m++) {
        bl_model_result *mr = &fx->models[m];
        mr->name = (char *)fx->specs[m].name;
        mr->extends = m ? "baseline" : NULL;
        mr->mode = set->mode;
        mr->log_likelihood = ll[m];
        mr->parameters = m ? 5 : 4;
        mr->trials = FX_N - 3;
        mr->aic = 2.0 * (double)mr->parameters - 2 * ll[m];
        mr->bic = log((double)mr->trials) * (double)mr->parameters - 2 * ll[m];
        mr->converged = 1;
        mr->fit.converged = 1;
        mr->fit.log_likelihood = ll[m];
        mr->n_rows = FX_N;
        mr->used = fx->used;
        mr->predicted = m ? fx->truth : fx->base;
        mr->p_upper = fx->p_upper[m];
        for (size_t i = 0; i < FX_N; i++) bl_wiener_p_upper(&mr->predicted[i], &fx->p_upper[m][i], NULL);
    }
    bl_coefficient *c0 = fx->coef0, *c1 = fx->coef1;
    fx_coef(&c0[0], BL_THRESHOLD, "intercept", "rich", 1.31, 0.04);
    fx_coef(&c0[1], BL_THRESHOLD, "intercept", "lean", 1.09, 0.035);
    fx_coef(&c0[2], BL_DRIFT, "intercept", "", 1.18, 0.06);
    fx->models[0].fit.coef = c0;
    fx->models[0].fit.n_coef = 3;
    fx_coef(&c1[0], BL_THRESHOLD, "intercept", "rich", 1.30, 0.04);
    fx_coef(&c1[1], BL_THRESHOLD, "intercept", "lean", 1.10, 0.035);
    fx_coef(&c1[2], BL_THRESHOLD, "theta", "rich", 0.24, 0.05);
    fx_coef(&c1[3], BL_THRESHOLD, "theta", "lean", 0.01, 0.045);
    fx_coef(&c1[4], BL_DRIFT, "intercept", "", 1.19, 0.06);
    fx->models[1].fit.coef = c1;
    fx->models[1].fit.n_coef = 5;
    fx->models[1].nested = 1;
    if (separate) {
        for (int m = 0; m < 2; m++) {
            bl_model_result *mr = &fx->models[m];
            mr->n_participants = 2;
            mr->participants = fx->part[m];
            size_t nc = mr->fit.n_coef;
            for (int q = 0; q < 2; q++) {
                bl_fit_result *pf = &fx->part[m][q];
                pf->participant = fx->participants[q];
                pf->log_likelihood = mr->log_likelihood / 2;
                pf->trials = mr->trials / 2;
                pf->converged = 1;
                pf->n_coef = nc;
                pf->coef = fx->pcoef[m][q];
                for (size_t j = 0; j < nc; j++) {
                    const bl_coefficient *g = &mr->fit.coef[j];
                    fx_coef(&pf->coef[j], g->param, g->term, g->level, g->estimate + (q ? 0.03 : -0.03), g->se * 1.4);
                }
            }
        }
        bl_model_result *mr = &fx->models[1];
        mr->n_group = 5;
        mr->group = fx->group;
        for (int j = 0; j < 5; j++) {
            bl_group_coefficient *g = &fx->group[j];
            const bl_coefficient *c = &c1[j];
            g->param = c->param;
            g->parameter = c->parameter;
            g->term = c->term;
            g->level = c->level;
            g->n = 2;
            g->mean = c->estimate;
            g->sd = 0.042;
            g->re_estimate = c->estimate;
            g->re_se = c->se;
            g->re_ci_low = c->ci_low;
            g->re_ci_high = c->ci_high;
            g->re_p = c->p;
            g->t = g->df = g->p_t = NAN;
            g->tau2 = 0.0004;
        }
    }
    bl_compare_models(set, NULL);
    gsl_rng_free(rng);
    return fx;
}

static void fixture_destroy(fixture *fx)
{
    if (!fx) return;
    bl_table_destroy(fx->trials.table);
    free(fx->trials.rt);
    free(fx->trials.upper);
    free(fx->trials.drift_sign);
    free(fx->trials.participant);
    free(fx->trials.excluded);
    free(fx->power.freq);
    for (size_t i = 0; fx->set.comparison && i < fx->set.n_models; i++) {
        free(fx->set.comparison[i].name);
        free(fx->set.comparison[i].lrt_against);
    }
    free(fx->set.comparison);
    free(fx);
}

#endif
