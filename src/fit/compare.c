/* Model comparison and group-level inference.
 *
 * AIC = 2k - 2LL (Akaike 1974, IEEE Trans. Autom. Control 19:716-723),
 * BIC = k ln n - 2LL (Schwarz 1978, Ann. Stat. 6:461-464), differences to the best model, Akaike
 * weights exp(-dAIC/2) / sum (Burnham & Anderson 2002, Model Selection and Multimodel Inference,
 * section 2.9), and the likelihood-ratio test of a model against the model it extends when nested:
 * 2 (LL_big - LL_small) ~ chi^2 with the difference in free coefficients as degrees of freedom
 * (Wilks 1938, Ann. Math. Stat. 9:60-62), upper tail from gsl_cdf_chisq_Q.
 * Permutation test of each slope: refits with the regressor shuffled within participant x condition
 * cells, p = (1 + exceed) / (1 + B) (Phipson & Smyth 2010, Stat. Appl. Genet. Mol. Biol. 9:39).
 * Separate mode: one-sample t-test across participants, and the DerSimonian & Laird (1986, Controlled
 * Clinical Trials 7:177-188) random-effects estimate with its between-participant variance.
 */
#include "fit/fit_internal.h"
#include "core/gsl_guard.h"
#include "design/model_internal.h"
#include "core/strutil.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#ifdef _OPENMP
#include <omp.h>
#endif

#define Z975 1.959963984540054 /* standard normal 97.5% quantile */

void bl_aic_weights(const double *aic, size_t n, double *weights)
{
    double best = INFINITY;
    for (size_t i = 0; i < n; i++)
        if (isfinite(aic[i]) && aic[i] < best) best = aic[i];
    double sum = 0;
    for (size_t i = 0; i < n; i++) {
        weights[i] = isfinite(aic[i]) ? exp(-0.5 * (aic[i] - best)) : 0;
        sum += weights[i];
    }
    for (size_t i = 0; i < n; i++) weights[i] = sum > 0 && isfinite(aic[i]) ? weights[i] / sum : NAN;
}

bl_status bl_compare_models(bl_fit_set *set, bl_error *err)
{
    size_t n = set->n_models;
    if (set->comparison) {
        for (size_t i = 0; i < n; i++) {
            free(set->comparison[i].name);
            free(set->comparison[i].lrt_against);
        }
        free(set->comparison);
    }
    set->comparison = calloc(n ? n : 1, sizeof *set->comparison);
    double *aic = calloc(n ? n : 1, sizeof *aic), *w = malloc((n ? n : 1) * sizeof *w);
    if (!set->comparison || !aic || !w) {
        free(aic);
        free(w);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory comparing models");
    }
    double best_aic = INFINITY, best_bic = INFINITY;
    for (size_t i = 0; i < n; i++) {
        const bl_model_result *r = &set->models[i];
        aic[i] = r->aic;
        if (isfinite(r->aic) && r->aic < best_aic) best_aic = r->aic;
        if (isfinite(r->bic) && r->bic < best_bic) best_bic = r->bic;
    }
    bl_aic_weights(aic, n, w);
    bl_status st = BL_OK;
    for (size_t i = 0; i < n; i++) {
        const bl_model_result *r = &set->models[i];
        bl_comparison_row *c = &set->comparison[i];
        if (!(c->name = bl_strdup(r->name))) st = BL_ERR_NOMEM;
        c->parameters = r->parameters;
        c->trials = r->trials;
        c->log_likelihood = r->log_likelihood;
        c->aic = r->aic;
        c->bic = r->bic;
        c->delta_aic = r->aic - best_aic;
        c->delta_bic = r->bic - best_bic;
        c->aic_weight = w[i];
        c->lrt_statistic = c->lrt_df = c->lrt_p = NAN;
        c->lrt_nested = -1;
        if (r->extends) {
            if (!(c->lrt_against = bl_strdup(r->extends))) st = BL_ERR_NOMEM;
            const bl_model_result *b = NULL;
            for (size_t j = 0; j < n; j++)
                if (!strcmp(set->models[j].name, r->extends)) b = &set->models[j];
            if (b) {
                c->lrt_nested = r->nested == 1;
                if (r->nested == 1) {
                    c->lrt_df = (double)r->parameters - (double)b->parameters;
                }
                /* A likelihood-ratio test needs both maxima: with either fit unconverged it stays NA. */
                if (r->nested == 1 && r->converged && b->converged) {
                    /* The statistic is reported as found; a negative value (the bigger model fitted worse:
                     * an optimiser failure) gets p = 1. */
                    c->lrt_statistic = 2.0 * (r->log_likelihood - b->log_likelihood);
                    c->lrt_p = gsl_cdf_chisq_Q(fmax(0.0, c->lrt_statistic), c->lrt_df);
                }
            }
        }
    }
    free(aic);
    free(w);
    if (st) return bl_error_set(err, st, "out of memory comparing models");
    return BL_OK;
}

static int same_term(const bl_coefficient *c, const bl_group_coefficient *gc)
{
    return c->param == gc->param && !strcmp(c->term, gc->term) && !strcmp(c->level, gc->level);
}

/* The distinct coefficients (parameter, term, level) over all participants, in order of first appearance. */
static bl_status collect_group_terms(bl_model_result *r, bl_error *err)
{
    size_t cap = 0;
    for (size_t i = 0; i < r->n_participants; i++) cap += r->participants[i].n_coef;
    r->group = calloc(cap ? cap : 1, sizeof *r->group);
    if (!r->group) return bl_error_set(err, BL_ERR_NOMEM, "out of memory in the group summary");
    for (size_t i = 0; i < r->n_participants; i++)
        for (size_t j = 0; j < r->participants[i].n_coef; j++) {
            const bl_coefficient *c = &r->participants[i].coef[j];
            size_t g = 0;
            while (g < r->n_group && !same_term(c, &r->group[g])) g++;
            if (g < r->n_group) continue;
            bl_group_coefficient *gc = &r->group[r->n_group++];
            gc->param = c->param;
            gc->parameter = c->parameter;
            gc->term = bl_strdup(c->term);
            gc->level = bl_strdup(c->level);
            if (!gc->term || !gc->level) return bl_error_set(err, BL_ERR_NOMEM, "out of memory in the group summary");
        }
    return BL_OK;
}

/* Mean, SD and one-sample t-test of one coefficient over participants; the estimates with a
 * standard error go into y[] and their variances into v[] (*nw of them) for the random-effects model. */
static void group_t_test(const bl_model_result *r, bl_group_coefficient *gc, double *y, double *v, size_t *nw)
{
    size_t n = 0;
    double sum = 0;
    *nw = 0;
    for (size_t i = 0; i < r->n_participants; i++)
        for (size_t j = 0; j < r->participants[i].n_coef; j++) {
            const bl_coefficient *c = &r->participants[i].coef[j];
            if (!same_term(c, gc)) continue;
            sum += c->estimate;
            if (isfinite(c->se) && c->se > 0) {
                y[*nw] = c->estimate;
                v[*nw] = c->se * c->se;
                (*nw)++;
            }
            n++;
        }
    gc->n = n;
    gc->mean = sum / (double)n;
    double ss = 0;
    for (size_t i = 0; i < r->n_participants; i++)
        for (size_t j = 0; j < r->participants[i].n_coef; j++) {
            const bl_coefficient *c = &r->participants[i].coef[j];
            if (same_term(c, gc)) ss += (c->estimate - gc->mean) * (c->estimate - gc->mean);
        }
    gc->sd = gc->t = gc->df = gc->p_t = NAN;
    if (n >= 2) {
        gc->sd = sqrt(ss / (double)(n - 1));
        gc->df = (double)(n - 1);
        gc->t = gc->mean / (gc->sd / sqrt((double)n));
        gc->p_t = isfinite(gc->t) ? 2 * gsl_cdf_tdist_Q(fabs(gc->t), gc->df) : NAN;
    }
}

/* DerSimonian & Laird (1986): moment estimate of tau^2 from Cochran's Q, then the random-effects
 * estimate of nw estimates y[] with variances v[]. */
static void dersimonian_laird(bl_group_coefficient *gc, const double *y, const double *v, size_t nw)
{
    gc->n_with_se = nw;
    gc->re_estimate = gc->re_se = gc->re_ci_low = gc->re_ci_high = gc->re_z = gc->re_p = NAN;
    gc->tau2 = gc->q = NAN;
    if (nw < 1) return;
    double sw = 0, sw2 = 0, swy = 0;
    for (size_t i = 0; i < nw; i++) {
        double w = 1 / v[i];
        sw += w;
        sw2 += w * w;
        swy += w * y[i];
    }
    double yf = swy / sw, q = 0;
    for (size_t i = 0; i < nw; i++) q += (y[i] - yf) * (y[i] - yf) / v[i];
    double tau2 = 0;
    if (nw >= 2) tau2 = fmax(0.0, (q - (double)(nw - 1)) / (sw - sw2 / sw));
    double sws = 0, swsy = 0;
    for (size_t i = 0; i < nw; i++) {
        double w = 1 / (v[i] + tau2);
        sws += w;
        swsy += w * y[i];
    }
    gc->q = q;
    gc->tau2 = tau2;
    gc->re_estimate = swsy / sws;
    gc->re_se = sqrt(1 / sws);
    gc->re_z = gc->re_estimate / gc->re_se;
    gc->re_p = 2 * gsl_cdf_ugaussian_Q(fabs(gc->re_z));
    gc->re_ci_low = gc->re_estimate - Z975 * gc->re_se;
    gc->re_ci_high = gc->re_estimate + Z975 * gc->re_se;
}

/* The model-level coefficients in separate mode are the random-effects estimates. */
static bl_status group_as_model_coefficients(bl_model_result *r, bl_error *err)
{
    bl_fit_result *f = &r->fit;
    size_t ng = r->n_group;
    f->coef = calloc(ng ? ng : 1, sizeof *f->coef);
    if (!f->coef) return bl_error_set(err, BL_ERR_NOMEM, "out of memory in the group summary");
    f->n_coef = ng; /* only now: bl_fit_result_clear walks n_coef entries */
    for (size_t g = 0; g < ng; g++) {
        bl_coefficient *c = &f->coef[g];
        const bl_group_coefficient *gc = &r->group[g];
        c->param = gc->param;
        c->parameter = gc->parameter;
        c->term = bl_strdup(gc->term);
        c->level = bl_strdup(gc->level);
        if (!c->term || !c->level) return bl_error_set(err, BL_ERR_NOMEM, "out of memory in the group summary");
        c->estimate = gc->re_estimate;
        c->se = gc->re_se;
        c->z = gc->re_z;
        c->p = gc->re_p;
        c->ci_low = gc->re_ci_low;
        c->ci_high = gc->re_ci_high;
    }
    return BL_OK;
}

/* Group summary over participants (separate mode). */
bl_status bl_group_summary(bl_model_result *r, bl_error *err)
{
    bl_status st = collect_group_terms(r, err);
    if (st) return st;
    double *y = malloc((r->n_participants + 1) * sizeof *y), *v = malloc((r->n_participants + 1) * sizeof *v);
    if (!y || !v) {
        free(y);
        free(v);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory in the group summary");
    }
    for (size_t g = 0; g < r->n_group; g++) {
        size_t nw = 0;
        group_t_test(r, &r->group[g], y, v, &nw);
        dersimonian_laird(&r->group[g], y, v, nw);
    }
    free(y);
    free(v);
    return group_as_model_coefficients(r, err);
}

/* A copy of a spec without slope s of parameter p (for the permutation statistic's null model).
 * Only the slopes array of that parameter is new; everything else is shared. */
static bl_status spec_without_slope(const bl_model_spec *spec, bl_param p, size_t s, bl_model_spec *out,
                                    bl_slope_spec **mem, bl_error *err)
{
    *out = *spec;
    size_t n = spec->param[p].n_slopes;
    *mem = malloc((n ? n : 1) * sizeof **mem);
    if (!*mem) return bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory for the permutation test", spec->name);
    size_t w = 0;
    for (size_t i = 0; i < n; i++)
        if (i != s) (*mem)[w++] = spec->param[p].slopes[i];
    out->param[p].slopes = *mem;
    out->param[p].n_slopes = w;
    return BL_OK;
}

/* Maximum log-likelihood summed over units, refitted from warm starts without inference. */
static bl_status refit_units(bl_unit_set *u, const bl_fit_options *opt, double *ll_total, bl_error *err)
{
    double total = 0;
    for (size_t i = 0; i < u->n_units; i++) {
        bl_fit_result r;
        double *c = malloc(u->models[i]->n_coef * sizeof *c);
        if (!c) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        bl_status st = bl_fit_core(u->models[i], u->liks[i], opt, 1, u->coef[i], 0, &r, c, err);
        if (st) {
            free(c);
            return st;
        }
        total += r.log_likelihood;
        bl_fit_result_clear(&r);
        free(c);
    }
    *ll_total = total;
    return BL_OK;
}

/* The refits of one slope's permutation test. Permutation b shuffles with its own generator seeded
 * from (seed, model, parameter, slope, b), so the refits can run on several threads (each with its
 * own copy of the designs and a one-thread likelihood) and still give the same count. */
static bl_status run_permutations(const bl_unit_set *full, size_t **cells, const bl_fit_options *opt,
                                  const bl_model_result *r, bl_param p, size_t s, long level, size_t *exceed_out,
                                  bl_error *err)
{
    size_t n_perm = opt->permutations, exceed = 0, done_count = 0;
    bl_status st_all = BL_OK;
    bl_error err_all = {0};
    int nt = 1;
#ifdef _OPENMP
    nt = opt->threads > 0 ? opt->threads : omp_get_max_threads();
    if (nt < 1) nt = 1;
    if ((size_t)nt > n_perm) nt = n_perm > 0 ? (int)n_perm : 1;
#pragma omp parallel num_threads(nt) reduction(+ : exceed)
#endif
    {
        bl_fit_options one = *opt;
        one.threads = 1;
        one.progress = NULL;
        bl_unit_set mine = {0};
        gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
        int ok = rng != NULL;
        mine.n_units = full->n_units;
        mine.models = calloc(full->n_units, sizeof *mine.models);
        mine.liks = calloc(full->n_units, sizeof *mine.liks);
        mine.coef = calloc(full->n_units, sizeof *mine.coef);
        ok = ok && mine.models && mine.liks && mine.coef;
        for (size_t i = 0; ok && i < full->n_units; i++) {
            ok = bl_model_copy(full->models[i], &mine.models[i], NULL) == BL_OK &&
                 bl_likelihood_create(mine.models[i], 1, &mine.liks[i], NULL) == BL_OK;
            mine.coef[i] = malloc(full->models[i]->n_coef * sizeof(double));
            ok = ok && mine.coef[i];
            if (ok) memcpy(mine.coef[i], full->coef[i], full->models[i]->n_coef * sizeof(double));
        }
        if (!ok) {
#ifdef _OPENMP
#pragma omp critical(bl_perm_error)
#endif
            if (!st_all) st_all = bl_error_set(&err_all, BL_ERR_NOMEM, "out of memory in the permutation test");
        }
#ifdef _OPENMP
#pragma omp for schedule(dynamic, 1)
#endif
        for (size_t b = 0; b < n_perm; b++) {
            if (!ok) continue;
            bl_error e = {0};
            bl_status st = BL_OK;
            /* One seed per (model, parameter, slope, level, permutation); the whole-slope test (level < 0)
             * keeps the seeds it always had. */
            gsl_rng_set(rng, bl_fit_mix_seed(opt->seed, r->name,
                                             (unsigned long)p * 1000003UL + (unsigned long)s * 7919UL +
                                                 (unsigned long)b * 2654435761UL +
                                                 (level >= 0 ? (unsigned long)(level + 1) * 104729UL : 0)));
            for (size_t i = 0; !st && i < mine.n_units; i++)
                st = bl_model_permute_slope(mine.models[i], p, s, cells[i], level, rng, &e);
            double ll_perm = -INFINITY;
            if (!st) st = refit_units(&mine, &one, &ll_perm, &e);
            if (st) {
#ifdef _OPENMP
#pragma omp critical(bl_perm_error)
#endif
                if (!st_all) {
                    st_all = st;
                    err_all = e;
                }
                continue;
            }
            /* Ties count as reaching the observed value (a tolerance for optimiser noise). */
            if (ll_perm >= r->log_likelihood - 1e-6) exceed++;
            if (opt->progress) {
#ifdef _OPENMP
#pragma omp critical(bl_perm_progress)
#endif
                {
                    done_count++;
                    char stage[256];
                    snprintf(stage, sizeof stage, "%s: permutations of the %s slope on '%s'%s", r->name,
                             bl_param_name(p), full->models[0]->par[p].slopes[s].regressor,
                             level >= 0 ? " (one level)" : "");
                    opt->progress(opt->progress_user, stage, done_count, n_perm);
                }
            }
        }
        gsl_rng_free(rng);
        bl_unit_set_free(&mine);
    }
    if (st_all) {
        if (err) *err = err_all;
        return st_all;
    }
    *exceed_out = exceed;
    return BL_OK;
}

/* Maximum log-likelihood of the full model without coefficient `level` of slope s (its regressor set to 0
 * on that level's trials), refitted from the full estimates with that coefficient at 0. */
static bl_status level_null_ll(const bl_unit_set *full, const bl_fit_options *opt, bl_param p, size_t s, size_t level,
                               double *ll, bl_error *err)
{
    bl_fit_options one = *opt;
    one.progress = NULL;
    bl_unit_set red = {0};
    bl_status st = BL_OK;
    red.n_units = full->n_units;
    red.models = calloc(full->n_units, sizeof *red.models);
    red.liks = calloc(full->n_units, sizeof *red.liks);
    red.coef = calloc(full->n_units, sizeof *red.coef);
    if (!red.models || !red.liks || !red.coef) st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    for (size_t i = 0; !st && i < full->n_units; i++) {
        const bl_model *m = full->models[i];
        if ((st = bl_model_copy(m, &red.models[i], err))) break;
        bl_model_drop_slope_level(red.models[i], p, s, level);
        if ((st = bl_likelihood_create(red.models[i], opt->threads, &red.liks[i], err))) break;
        if (!(red.coef[i] = malloc(m->n_coef * sizeof(double)))) {
            st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
            break;
        }
        memcpy(red.coef[i], full->coef[i], m->n_coef * sizeof(double));
        red.coef[i][m->par[p].slopes[s].first_coef + level] = 0;
    }
    if (!st) st = refit_units(&red, &one, ll, err);
    bl_unit_set_free(&red);
    return st;
}

/* The whole-slope null model: the same model without slope s, fitted afresh. */
static bl_status slope_null_ll(const bl_study *study, const bl_model_spec *spec, const bl_trials *trials,
                               const bl_fit_options *opt, bl_param p, size_t s, double *ll, bl_error *err)
{
    bl_model_spec reduced;
    bl_slope_spec *mem = NULL;
    bl_unit_set red;
    bl_status st = spec_without_slope(spec, p, s, &reduced, &mem, err);
    if (st) return st;
    st = bl_build_units(&reduced, trials, study ? study->fit.participants : BL_PARTICIPANTS_POOLED, opt, &red, NULL,
                        NULL, err);
    free(mem);
    if (st) return st;
    double total = 0;
    for (size_t i = 0; i < red.n_units && !st; i++) {
        bl_fit_result fr;
        st = bl_fit_core(red.models[i], red.liks[i], opt, bl_fit_default_starts(opt), NULL, 0, &fr, NULL, err);
        if (!st) total += fr.log_likelihood;
        bl_fit_result_clear(&fr);
    }
    bl_unit_set_free(&red);
    *ll = total;
    return st;
}

/* Coefficient tests per slope: every level on its own when the slope has several and one likelihood is
 * fitted (pooled); separate fits keep the whole-slope test only (participants may lack a level). */
static size_t level_tests(const bl_unit_set *full, bl_param p, size_t s)
{
    size_t L = bl_model_slope_levels(full->models[0], p, s);
    return full->n_units == 1 && L > 1 ? L : 0;
}

bl_status bl_permutation_tests(const bl_study *study, const bl_model_spec *spec, const bl_trials *trials,
                               const bl_fit_options *opt, bl_unit_set *full, bl_model_result *r, bl_error *err)
{
    bl_gsl_guard();
    size_t n_tests = 0;
    for (int p = 0; p < BL_NPARAM; p++)
        if (!spec->param[p].is_fixed)
            for (size_t s = 0; s < spec->param[p].n_slopes; s++) n_tests += 1 + level_tests(full, (bl_param)p, s);
    if (n_tests == 0 || opt->permutations == 0) return BL_OK;
    r->permutation = calloc(n_tests, sizeof *r->permutation);
    if (!r->permutation) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    bl_status st = BL_OK;
    size_t **cells = calloc(full->n_units, sizeof *cells);
    if (!cells) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    for (size_t i = 0; i < full->n_units; i++) {
        size_t nc;
        if ((st = bl_model_condition_cells(full->models[i], trials, &cells[i], &nc, err))) goto done;
    }
    size_t t = 0;
    for (int pi = 0; pi < BL_NPARAM; pi++) {
        bl_param p = (bl_param)pi;
        if (spec->param[p].is_fixed) continue;
        for (size_t s = 0; s < spec->param[p].n_slopes; s++) {
            size_t nl = level_tests(full, p, s);
            /* level -1: every level at once; then each level's coefficient on its own. */
            for (long level = -1; level < (long)nl; level++, t++) {
                bl_permutation_test *pt = &r->permutation[t];
                r->n_permutation = t + 1;
                pt->param = p;
                pt->parameter = bl_param_name(p);
                const bl_model *m0 = full->models[0];
                const char *lv = level < 0 ? "" : m0->coef[m0->par[p].slopes[s].first_coef + (size_t)level].level;
                if (!(pt->regressor = bl_strdup(spec->param[p].slopes[s].regressor)) || !(pt->level = bl_strdup(lv))) {
                    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
                    goto done;
                }
                double ll_null = NAN;
                st = level < 0 ? slope_null_ll(study, spec, trials, opt, p, s, &ll_null, err)
                               : level_null_ll(full, opt, p, s, (size_t)level, &ll_null, err);
                if (st) goto done;
                pt->statistic = 2 * (r->log_likelihood - ll_null);
                size_t exceed = 0;
                if ((st = run_permutations(full, cells, opt, r, p, s, level, &exceed, err))) goto done;
                pt->permutations = opt->permutations;
                pt->exceed = exceed;
                pt->p = (1.0 + (double)exceed) / (1.0 + (double)opt->permutations);
            }
        }
    }
done:
    if (cells)
        for (size_t i = 0; i < full->n_units; i++) free(cells[i]);
    free(cells);
    return st;
}
