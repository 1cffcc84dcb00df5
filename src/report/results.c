/* Writers for fits.json, comparison.csv and trials.csv (docs/outputs.md), atomic via output.h.
 * CSV follows RFC 4180 quoting; numbers are printed with %.17g so they read back exactly. */
#include "report/results.h"
#include "core/csvtext.h"

#include "core/output.h"
#include "core/json.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static cJSON *num_or_null(double x) { return isfinite(x) ? cJSON_CreateNumber(x) : cJSON_CreateNull(); }

static int add(cJSON *obj, const char *key, cJSON *item)
{
    if (!item) return 0;
    if (!cJSON_AddItemToObject(obj, key, item)) {
        cJSON_Delete(item);
        return 0;
    }
    return 1;
}

static int add_num(cJSON *o, const char *k, double x) { return add(o, k, num_or_null(x)); }
static int add_str(cJSON *o, const char *k, const char *s)
{
    return add(o, k, s ? cJSON_CreateString(s) : cJSON_CreateNull());
}
static int add_bool(cJSON *o, const char *k, int b) { return add(o, k, cJSON_CreateBool(b != 0)); }

static cJSON *diagnostics_json(const bl_fit_diagnostics *d)
{
    cJSON *o = cJSON_CreateObject();
    if (!o) return NULL;
    int ok = add_str(o, "method", d->method ? d->method : "bfgs2") && add_bool(o, "converged", d->converged) &&
             add_num(o, "gradient_norm", d->gradient_norm) && add_num(o, "newton_decrement", d->newton_decrement) &&
             add_num(o, "iterations", (double)d->iterations) && add_num(o, "evaluations", (double)d->evaluations) &&
             add_num(o, "starts", d->starts) && add_num(o, "starts_agreed", d->starts_agreed) &&
             add_bool(o, "hessian_positive_definite", d->hessian_positive_definite) &&
             add_num(o, "condition_number", d->condition_number) &&
             add_num(o, "profile_restarts", (double)d->profile_restarts);
    if (!ok) {
        cJSON_Delete(o);
        return NULL;
    }
    return o;
}

static cJSON *coefficients_json(const bl_fit_result *f)
{
    cJSON *a = cJSON_CreateArray();
    if (!a) return NULL;
    for (size_t j = 0; j < f->n_coef; j++) {
        const bl_coefficient *c = &f->coef[j];
        cJSON *o = cJSON_CreateObject();
        if (!o || !cJSON_AddItemToArray(a, o)) {
            cJSON_Delete(o);
            cJSON_Delete(a);
            return NULL;
        }
        int ok = add_str(o, "parameter", c->parameter) && add_str(o, "term", c->term) &&
                 add_str(o, "level", c->level) && add_num(o, "estimate", c->estimate) && add_num(o, "se", c->se) &&
                 add_num(o, "ci_low", c->ci_low) && add_num(o, "ci_high", c->ci_high) && add_num(o, "z", c->z) &&
                 add_num(o, "p", c->p);
        if (ok && f->participant == NULL && isfinite(c->df)) ok = add_num(o, "df", c->df);
        if (ok && c->profiled)
            ok = add_num(o, "profile_ci_low", c->profile_low) && add_num(o, "profile_ci_high", c->profile_high);
        if (!ok) {
            cJSON_Delete(a);
            return NULL;
        }
    }
    return a;
}

/* The coefficient covariance (n_coef rows of n_coef numbers, coefficient order), or null when the
 * observed information was not positive definite or there is none (the group summary of separate fits). */
static cJSON *covariance_json(const bl_fit_result *f)
{
    if (!f->covariance || f->n_coef == 0) return cJSON_CreateNull();
    cJSON *rows = cJSON_CreateArray();
    if (!rows) return NULL;
    for (size_t i = 0; i < f->n_coef; i++) {
        cJSON *row = cJSON_CreateArray();
        if (!row || !cJSON_AddItemToArray(rows, row)) {
            cJSON_Delete(row);
            cJSON_Delete(rows);
            return NULL;
        }
        for (size_t j = 0; j < f->n_coef; j++) {
            cJSON *x = num_or_null(f->covariance[i * f->n_coef + j]);
            if (!x || !cJSON_AddItemToArray(row, x)) {
                cJSON_Delete(x);
                cJSON_Delete(rows);
                return NULL;
            }
        }
    }
    return rows;
}

/* The keys every fit carries (docs/outputs.md), for a model or one participant. */
static int fit_fields(cJSON *o, const char *name, const bl_fit_result *f, double ll, size_t k, size_t n, double aic,
                      double bic, int converged)
{
    return add_str(o, "name", name) && add_num(o, "log_likelihood", ll) && add_num(o, "parameters", (double)k) &&
           add_num(o, "trials", (double)n) && add_num(o, "aic", aic) && add_num(o, "bic", bic) &&
           add_bool(o, "converged", converged) && add(o, "diagnostics", diagnostics_json(&f->diag)) &&
           add(o, "coefficients", coefficients_json(f)) && add(o, "covariance", covariance_json(f));
}

const char *bl_results_mode_name(bl_participants_mode mode)
{
    return mode == BL_PARTICIPANTS_SEPARATE       ? "separate"
           : mode == BL_PARTICIPANTS_HIERARCHICAL ? "hierarchical"
                                                  : "pooled";
}

/* Hierarchical: the participant spread of every varying term and the participants' empirical-Bayes
 * estimates (docs/outputs.md). */
static int hierarchical_json(cJSON *o, const bl_model_result *r)
{
    cJSON *vcs = cJSON_CreateArray();
    int ok = add(o, "variance_components", vcs) &&
             add_str(o, "integration", r->quadrature > 1 ? "gauss-hermite" : "laplace") &&
             add_num(o, "quadrature", r->quadrature);
    for (size_t i = 0; ok && i < r->n_variance; i++) {
        const bl_variance_component *v = &r->variance[i];
        cJSON *e = cJSON_CreateObject();
        ok = e && cJSON_AddItemToArray(vcs, e);
        if (!ok) {
            cJSON_Delete(e);
            break;
        }
        ok = add_str(e, "parameter", v->parameter) && add_str(e, "term", v->term) && add_num(e, "sd", v->sd) &&
             add_num(e, "ci_low", v->ci_low) && add_num(e, "ci_high", v->ci_high) &&
             add_num(e, "lrt_statistic", v->lrt_statistic) && add_num(e, "lrt_p", v->lrt_p);
    }
    if (ok && r->correlation) {
        cJSON *rows = cJSON_CreateArray();
        ok = add(o, "correlation", rows);
        for (size_t a = 0; ok && a < r->n_variance; a++) {
            cJSON *row = cJSON_CreateArray();
            ok = row && cJSON_AddItemToArray(rows, row);
            if (!ok) {
                cJSON_Delete(row);
                break;
            }
            for (size_t b = 0; ok && b < r->n_variance; b++) {
                cJSON *x = num_or_null(r->correlation[a * r->n_variance + b]);
                ok = x && cJSON_AddItemToArray(row, x);
                if (!ok) cJSON_Delete(x);
            }
        }
    }
    cJSON *parts = ok ? cJSON_CreateArray() : NULL;
    ok = ok && add(o, "participants", parts);
    for (size_t i = 0; ok && i < r->n_participants; i++) {
        const bl_fit_result *f = &r->participants[i];
        cJSON *p = cJSON_CreateObject();
        ok = p && cJSON_AddItemToArray(parts, p);
        if (!ok) {
            cJSON_Delete(p);
            break;
        }
        ok = add_str(p, "participant", f->participant) && add_num(p, "trials", (double)f->trials) &&
             add_num(p, "log_likelihood", f->log_likelihood) && add(p, "coefficients", coefficients_json(f));
    }
    return ok;
}

static cJSON *model_json(const bl_model_result *r)
{
    cJSON *o = cJSON_CreateObject();
    if (!o) return NULL;
    int ok = fit_fields(o, r->name, &r->fit, r->log_likelihood, r->parameters, r->trials, r->aic, r->bic,
                        r->converged) &&
             add_str(o, "extends", r->extends) && add_str(o, "mode", bl_results_mode_name(r->mode));
    if (ok && r->mode == BL_PARTICIPANTS_HIERARCHICAL) ok = hierarchical_json(o, r);
    if (ok && r->mode == BL_PARTICIPANTS_SEPARATE) {
        cJSON *parts = cJSON_CreateArray();
        ok = add(o, "participants", parts);
        for (size_t i = 0; ok && i < r->n_participants; i++) {
            const bl_fit_result *f = &r->participants[i];
            cJSON *p = cJSON_CreateObject();
            ok = p && cJSON_AddItemToArray(parts, p);
            if (!ok) {
                cJSON_Delete(p);
                break;
            }
            ok = add_str(p, "participant", f->participant) &&
                 fit_fields(p, r->name, f, f->log_likelihood, f->parameters, f->trials, f->aic, f->bic, f->converged);
        }
        cJSON *grp = ok ? cJSON_CreateArray() : NULL;
        ok = ok && add(o, "group", grp);
        for (size_t g = 0; ok && g < r->n_group; g++) {
            const bl_group_coefficient *c = &r->group[g];
            cJSON *e = cJSON_CreateObject(), *re = cJSON_CreateObject();
            ok = e && re && cJSON_AddItemToArray(grp, e);
            if (!ok) {
                cJSON_Delete(e);
                cJSON_Delete(re);
                break;
            }
            ok = add_str(e, "parameter", c->parameter) && add_str(e, "term", c->term) &&
                 add_str(e, "level", c->level) && add_num(e, "participants", (double)c->n) &&
                 add_num(e, "mean", c->mean) && add_num(e, "sd", c->sd) && add_num(e, "t", c->t) &&
                 add_num(e, "df", c->df) && add_num(e, "p", c->p_t);
            ok = add(e, "random_effects", re) && ok;
            ok = ok && add_num(re, "estimate", c->re_estimate) && add_num(re, "se", c->re_se) &&
                 add_num(re, "ci_low", c->re_ci_low) && add_num(re, "ci_high", c->re_ci_high) &&
                 add_num(re, "z", c->re_z) && add_num(re, "p", c->re_p) && add_num(re, "tau2", c->tau2) &&
                 add_num(re, "q", c->q) && add_num(re, "participants", (double)c->n_with_se);
        }
    }
    if (ok && r->n_permutation) {
        cJSON *perm = cJSON_CreateArray();
        ok = add(o, "permutation_tests", perm);
        for (size_t i = 0; ok && i < r->n_permutation; i++) {
            const bl_permutation_test *t = &r->permutation[i];
            cJSON *e = cJSON_CreateObject();
            ok = e && cJSON_AddItemToArray(perm, e);
            if (!ok) {
                cJSON_Delete(e);
                break;
            }
            ok = add_str(e, "parameter", t->parameter) && add_str(e, "term", t->regressor) &&
                 add_str(e, "level", t->level ? t->level : "") && add_num(e, "statistic", t->statistic) &&
                 add_num(e, "permutations", (double)t->permutations) && add_num(e, "exceed", (double)t->exceed) &&
                 add_num(e, "p", t->p);
        }
    }
    if (!ok) {
        cJSON_Delete(o);
        return NULL;
    }
    return o;
}

/* The fits.json document (caller frees with cJSON_Delete). `provenance` (may be NULL) is copied
 * in under "provenance"; `warnings` (may be NULL) under "warnings". NULL on allocation failure
 * (the caller turns it into BL_ERR_NOMEM). */
static cJSON *bl_results_fits_json(const bl_fit_set *set, const cJSON *provenance, const bl_warnings *warnings)
{
    /* add() owns the item it is given (it deletes it when it cannot attach it), so each array is either
     * handed to add() or deleted here, never both. */
    cJSON *root = cJSON_CreateObject(), *models = cJSON_CreateArray(), *warn = cJSON_CreateArray();
    int ok = root && add(root, "mode", cJSON_CreateString(bl_results_mode_name(set->mode)));
    if (ok) ok = add(root, "models", models);
    else cJSON_Delete(models);
    for (size_t i = 0; ok && i < set->n_models; i++) {
        cJSON *m = model_json(&set->models[i]);
        ok = m && cJSON_AddItemToArray(models, m);
        if (!ok) cJSON_Delete(m);
    }
    if (ok && set->permutations) {
        cJSON *p = cJSON_CreateObject();
        ok = add(root, "permutation", p) && add_num(p, "permutations", (double)set->permutations) &&
             add_num(p, "seed", (double)set->seed);
    }
    if (ok) ok = add(root, "warnings", warn);
    else cJSON_Delete(warn);
    for (size_t i = 0; ok && warnings && i < warnings->count; i++) {
        cJSON *s = cJSON_CreateString(warnings->items[i]);
        ok = s && cJSON_AddItemToArray(warn, s);
        if (!ok) cJSON_Delete(s);
    }
    if (ok) ok = add(root, "provenance", provenance ? cJSON_Duplicate(provenance, 1) : cJSON_CreateObject());
    if (!ok) {
        cJSON_Delete(root);
        return NULL;
    }
    return root;
}

bl_status bl_results_write_fits(const char *path, const bl_fit_set *set, const cJSON *provenance,
                                const bl_warnings *warnings, bl_error *err)
{
    if (warnings && warnings->lost)
        return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory: %zu warnings could not be recorded", path,
                            warnings->lost);
    cJSON *root = bl_results_fits_json(set, provenance, warnings);
    /* A failed allocation while building may have dropped an item: never write such a document. */
    char *text = root && !bl_json_alloc_failures() ? cJSON_Print(root) : NULL;
    cJSON_Delete(root);
    if (!text) return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory building the JSON document", path);
    size_t n = strlen(text);
    char *buf = malloc(n + 2);
    if (!buf) {
        cJSON_free(text);
        return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", path);
    }
    memcpy(buf, text, n);
    buf[n] = '\n';
    cJSON_free(text);
    bl_status st = bl_write_file_atomic(path, buf, n + 1, err);
    free(buf);
    return st;
}

/* ---- CSV ------------------------------------------------------------------------------------- */

static void csv_text(FILE *f, const char *s) { bl_csv_text(f, s); }

static void csv_num(FILE *f, double x)
{
    if (isfinite(x)) fprintf(f, "%.17g", x);
    else fputs("NA", f);
}

bl_status bl_results_write_comparison(const char *path, const bl_fit_set *set, bl_error *err)
{
    bl_outfile *of;
    bl_status st = bl_outfile_open(path, &of, err);
    if (st) return st;
    FILE *f = bl_outfile_stream(of);
    fputs("name,parameters,trials,log_likelihood,aic,bic,delta_aic,delta_bic,aic_weight,lrt_against,lrt_nested,"
          "lrt_statistic,lrt_df,lrt_p\n",
          f);
    for (size_t i = 0; i < set->n_models && set->comparison; i++) {
        const bl_comparison_row *c = &set->comparison[i];
        csv_text(f, c->name);
        fprintf(f, ",%zu,%zu,", c->parameters, c->trials);
        csv_num(f, c->log_likelihood);
        fputc(',', f);
        csv_num(f, c->aic);
        fputc(',', f);
        csv_num(f, c->bic);
        fputc(',', f);
        csv_num(f, c->delta_aic);
        fputc(',', f);
        csv_num(f, c->delta_bic);
        fputc(',', f);
        csv_num(f, c->aic_weight);
        fputc(',', f);
        csv_text(f, c->lrt_against);
        fputc(',', f);
        fputs(c->lrt_nested == 1 ? "yes" : c->lrt_nested == 0 ? "not nested" : c->lrt_against ? "not fitted" : "NA", f);
        fputc(',', f);
        csv_num(f, c->lrt_statistic);
        fputc(',', f);
        csv_num(f, c->lrt_df);
        fputc(',', f);
        csv_num(f, c->lrt_p);
        fputc('\n', f);
    }
    return bl_outfile_commit(of, err);
}

/* Trial-table columns carried into trials.csv: the condition columns of the fitted models (`per` and
 * slope `by`, participant column left out, stimulus column added with stimulus coding), then their
 * slope regressors, each once in order of first appearance. Names equal to a fixed column are left
 * out (they would make the header ambiguous). cols[] receives table indices; returns the count. */
static const char *const trials_fixed_cols[] = {"model",       "participant", "trial",   "threshold", "drift",
                                                "nondecision", "start",       "p_upper", "mean_rt",   "log_likelihood"};

static void trials_add_col(const bl_trials *t, const char *name, int *cols, size_t *n, size_t cap)
{
    for (size_t k = 0; k < sizeof trials_fixed_cols / sizeof *trials_fixed_cols; k++)
        if (strcmp(name, trials_fixed_cols[k]) == 0) return;
    int c = bl_table_find(t->table, name);
    if (c < 0 || *n == cap) return;
    for (size_t k = 0; k < *n; k++)
        if (cols[k] == c) return;
    cols[(*n)++] = c;
}

static size_t trials_extra_cols(const bl_study *s, const bl_fit_set *set, const bl_trials *t, int *cols, size_t cap)
{
    size_t n = 0;
    if (!s || !t->table) return 0;
    for (int pass = 0; pass < 2; pass++) { /* conditions first, then regressors */
        for (size_t m = 0; m < set->n_models; m++)
            for (size_t k = 0; k < s->n_models; k++) {
                if (strcmp(s->models[k].name, set->models[m].name) != 0) continue;
                for (int p = 0; p < BL_NPARAM; p++) {
                    const bl_param_spec *ps = &s->models[k].param[p];
                    if (ps->is_fixed) continue;
                    for (size_t i = 0; pass == 0 && i < ps->n_per; i++)
                        if (strcmp(ps->per[i], s->trials.participant) != 0)
                            trials_add_col(t, ps->per[i], cols, &n, cap);
                    for (size_t j = 0; j < ps->n_slopes; j++) {
                        const bl_slope_spec *sl = &ps->slopes[j];
                        if (pass == 1) trials_add_col(t, sl->regressor, cols, &n, cap);
                        for (size_t i = 0; pass == 0 && i < sl->n_by; i++)
                            if (strcmp(sl->by[i], s->trials.participant) != 0)
                                trials_add_col(t, sl->by[i], cols, &n, cap);
                    }
                }
            }
        if (pass == 0 && s->trials.stimulus) trials_add_col(t, s->trials.stimulus, cols, &n, cap);
    }
    return n;
}

bl_status bl_results_write_trials(const char *path, const bl_fit_set *set, const bl_study *study,
                                  const bl_trials *trials, bl_error *err)
{
    size_t cap = trials->table ? trials->table->n_cols : 0;
    int *extra = malloc((cap ? cap : 1) * sizeof *extra);
    if (!extra) return bl_error_set(err, BL_ERR_NOMEM, "out of memory writing %s", path);
    size_t n_extra = trials_extra_cols(study, set, trials, extra, cap);
    bl_outfile *of;
    bl_status st = bl_outfile_open(path, &of, err);
    if (st) {
        free(extra);
        return st;
    }
    FILE *f = bl_outfile_stream(of);
    fputs("model,participant,trial,threshold,drift,nondecision,start,p_upper,mean_rt,log_likelihood", f);
    for (size_t k = 0; k < n_extra; k++) {
        fputc(',', f);
        csv_text(f, trials->table->cols[extra[k]].name);
    }
    fputc('\n', f);
    for (size_t m = 0; m < set->n_models; m++) {
        const bl_model_result *r = &set->models[m];
        for (size_t i = 0; i < r->n_rows && i < trials->n; i++) {
            if (!r->used[i]) continue;
            const bl_wiener_params *p = &r->predicted[i];
            csv_text(f, r->name);
            fputc(',', f);
            csv_text(f, trials->participants ? trials->participants[trials->participant[i]] : NULL);
            fputc(',', f);
            csv_text(f, trials->trial_label ? trials->trial_label[i] : NULL);
            const double v[] = {p->value[BL_THRESHOLD],    p->value[BL_DRIFT], p->value[BL_NONDECISION],
                                p->value[BL_START],        r->p_upper[i],      r->mean_rt[i],
                                r->trial_log_likelihood[i]};
            for (size_t j = 0; j < sizeof v / sizeof v[0]; j++) {
                fputc(',', f);
                csv_num(f, v[j]);
            }
            /* as the table holds them: conditions as read, band regressors %.17g after scale/standardize */
            for (size_t k = 0; k < n_extra; k++) {
                fputc(',', f);
                csv_text(f, trials->table->cols[extra[k]].text[i]);
            }
            fputc('\n', f);
        }
    }
    free(extra);
    return bl_outfile_commit(of, err);
}
