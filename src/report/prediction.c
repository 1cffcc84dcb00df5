/* Predictions of a fitted model from fits.json, with delta-method intervals (prediction.h). */
#include "bandlink/prediction.h"

#include "core/json.h"
#include "core/strutil.h"
#include "design/study.h"

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* The public link codes are the study's own. */
_Static_assert(BL_PREDICTION_LINK_FIXED == (int)BL_LINK_DEFAULT &&
                   BL_PREDICTION_LINK_IDENTITY == (int)BL_LINK_IDENTITY && BL_PREDICTION_LINK_LOG == (int)BL_LINK_LOG,
               "link codes");

const double bl_prediction_quantile_probs[BL_PREDICTION_NQ] = {0.1, 0.3, 0.5, 0.7, 0.9};

/* One maximised likelihood as read back: coefficients (link scale) and their covariance. */
typedef struct {
    char *participant; /* NULL for the model-level fit */
    size_t n_coef;
    int *param; /* bl_param index per coefficient */
    char **term, **level;
    double *estimate; /* NAN where fits.json has null */
    double *cov;      /* n_coef x n_coef, NULL when fits.json has null or no "covariance" */
} fit_entry;

typedef struct {
    char *name;
    int pooled;   /* "mode": "pooled" */
    int separate; /* "mode": "separate" (the model-level fit is a group summary) */
    fit_entry fit;
    size_t n_parts;
    fit_entry *parts;
    const bl_model_spec *spec; /* in the study of provenance.study */
} model_entry;

struct bl_fitted_models {
    char *name; /* the file, for messages */
    bl_study *study;
    size_t n_models;
    model_entry *models;
};

/* ---- reading fits.json ----------------------------------------------------------------------- */

static void fit_entry_free(fit_entry *e)
{
    for (size_t j = 0; j < e->n_coef; j++) {
        free(e->term[j]);
        free(e->level[j]);
    }
    free(e->participant);
    free(e->param);
    free(e->term);
    free(e->level);
    free(e->estimate);
    free(e->cov);
}

void bl_fitted_models_destroy(bl_fitted_models *fm)
{
    if (!fm) return;
    for (size_t i = 0; i < fm->n_models; i++) {
        model_entry *m = &fm->models[i];
        free(m->name);
        fit_entry_free(&m->fit);
        for (size_t p = 0; p < m->n_parts; p++) fit_entry_free(&m->parts[p]);
        free(m->parts);
    }
    free(fm->models);
    bl_study_destroy(fm->study);
    free(fm->name);
    free(fm);
}

size_t bl_fitted_models_count(const bl_fitted_models *fm) { return fm ? fm->n_models : 0; }
const char *bl_fitted_models_name(const bl_fitted_models *fm, size_t i)
{
    return fm && i < fm->n_models ? fm->models[i].name : NULL;
}

static bl_status bad_key(bl_error *err, const char *file, const char *path, const char *what)
{
    return bl_error_set(err, BL_ERR_INPUT, "%s: key '%s' %s", file, path, what);
}

/* A number, or null (NAN); anything else is an error naming the key path. */
static bl_status read_number(const char *file, const cJSON *v, const char *path, double *out, bl_error *err)
{
    if (cJSON_IsNumber(v)) *out = v->valuedouble;
    else if (cJSON_IsNull(v)) *out = NAN;
    else return bad_key(err, file, path, v ? "is not a number" : "is missing");
    return BL_OK;
}

static bl_status read_string(const char *file, const cJSON *v, const char *path, char **out, bl_error *err)
{
    if (!cJSON_IsString(v)) return bad_key(err, file, path, v ? "is not a string" : "is missing");
    if (!(*out = bl_strdup(v->valuestring))) return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", file);
    return BL_OK;
}

static bl_status read_covariance(const char *file, const cJSON *o, const char *prefix, fit_entry *e, bl_error *err)
{
    const cJSON *cov = cJSON_GetObjectItemCaseSensitive(o, "covariance");
    char path[256];
    snprintf(path, sizeof path, "%s.covariance", prefix);
    if (!cov || cJSON_IsNull(cov)) return BL_OK; /* written by an older bandlink, or not available */
    size_t k = e->n_coef;
    if (!cJSON_IsArray(cov) || (size_t)cJSON_GetArraySize(cov) != k)
        return bl_error_set(err, BL_ERR_INPUT, "%s: key '%s' must be null or %zu rows of %zu numbers", file, path, k,
                            k);
    if (!(e->cov = malloc((k ? k * k : 1) * sizeof *e->cov)))
        return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", file);
    size_t i = 0;
    for (const cJSON *row = cov->child; row; row = row->next, i++) {
        if (!cJSON_IsArray(row) || (size_t)cJSON_GetArraySize(row) != k)
            return bl_error_set(err, BL_ERR_INPUT, "%s: key '%s[%zu]' must be a row of %zu numbers", file, path, i, k);
        size_t j = 0;
        for (const cJSON *x = row->child; x; x = x->next, j++) {
            char p2[300];
            snprintf(p2, sizeof p2, "%s[%zu][%zu]", path, i, j);
            bl_status st = read_number(file, x, p2, &e->cov[i * k + j], err);
            if (st) return st;
        }
    }
    return BL_OK;
}

/* Coefficients and covariance of one fit (a model, or one participant of a separate fit). */
static bl_status read_fit(const char *file, const cJSON *o, const char *prefix, fit_entry *e, bl_error *err)
{
    const cJSON *coefs = cJSON_GetObjectItemCaseSensitive(o, "coefficients");
    char path[256];
    snprintf(path, sizeof path, "%s.coefficients", prefix);
    if (!cJSON_IsArray(coefs)) return bad_key(err, file, path, coefs ? "is not an array" : "is missing");
    size_t k = (size_t)cJSON_GetArraySize(coefs), n = k ? k : 1;
    e->param = calloc(n, sizeof *e->param);
    e->term = calloc(n, sizeof *e->term);
    e->level = calloc(n, sizeof *e->level);
    e->estimate = calloc(n, sizeof *e->estimate);
    if (!e->param || !e->term || !e->level || !e->estimate)
        return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", file);
    e->n_coef = k;
    size_t j = 0;
    for (const cJSON *c = coefs->child; c; c = c->next, j++) {
        char p2[300];
        snprintf(p2, sizeof p2, "%s[%zu].parameter", path, j);
        const cJSON *par = cJSON_GetObjectItemCaseSensitive(c, "parameter");
        if (!cJSON_IsString(par)) return bad_key(err, file, p2, par ? "is not a string" : "is missing");
        if ((e->param[j] = bl_param_index(par->valuestring)) < 0)
            return bl_error_set(err, BL_ERR_INPUT, "%s: key '%s' is '%s', not a parameter name", file, p2,
                                par->valuestring);
        bl_status st;
        snprintf(p2, sizeof p2, "%s[%zu].term", path, j);
        if ((st = read_string(file, cJSON_GetObjectItemCaseSensitive(c, "term"), p2, &e->term[j], err))) return st;
        snprintf(p2, sizeof p2, "%s[%zu].level", path, j);
        if ((st = read_string(file, cJSON_GetObjectItemCaseSensitive(c, "level"), p2, &e->level[j], err))) return st;
        snprintf(p2, sizeof p2, "%s[%zu].estimate", path, j);
        if ((st = read_number(file, cJSON_GetObjectItemCaseSensitive(c, "estimate"), p2, &e->estimate[j], err)))
            return st;
    }
    return read_covariance(file, o, prefix, e, err);
}

static bl_status read_model(bl_fitted_models *fm, const cJSON *o, size_t i, bl_error *err)
{
    const char *file = fm->name;
    model_entry *m = &fm->models[i];
    char prefix[64], path[256];
    snprintf(prefix, sizeof prefix, "models[%zu]", i);
    snprintf(path, sizeof path, "%s.name", prefix);
    bl_status st = read_string(file, cJSON_GetObjectItemCaseSensitive(o, "name"), path, &m->name, err);
    if (st) return st;
    const cJSON *mode = cJSON_GetObjectItemCaseSensitive(o, "mode");
    snprintf(path, sizeof path, "%s.mode", prefix);
    if (!cJSON_IsString(mode)) return bad_key(err, file, path, mode ? "is not a string" : "is missing");
    m->pooled = strcmp(mode->valuestring, "pooled") == 0;
    m->separate = strcmp(mode->valuestring, "separate") == 0;
    if ((st = read_fit(file, o, prefix, &m->fit, err))) return st;
    const cJSON *parts = cJSON_GetObjectItemCaseSensitive(o, "participants");
    snprintf(path, sizeof path, "%s.participants", prefix);
    if (parts && !cJSON_IsArray(parts)) return bad_key(err, file, path, "is not an array");
    if (!m->pooled && !parts) return bad_key(err, file, path, "is missing (the model was not fitted pooled)");
    size_t np = parts ? (size_t)cJSON_GetArraySize(parts) : 0;
    if (np && !(m->parts = calloc(np, sizeof *m->parts)))
        return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", file);
    for (const cJSON *p = parts ? parts->child : NULL; p; p = p->next, m->n_parts++) {
        char pp[128];
        snprintf(pp, sizeof pp, "%s.participants[%zu]", prefix, m->n_parts);
        snprintf(path, sizeof path, "%s.participant", pp);
        fit_entry *e = &m->parts[m->n_parts];
        if ((st = read_string(file, cJSON_GetObjectItemCaseSensitive(p, "participant"), path, &e->participant, err)) ||
            (st = read_fit(file, p, pp, e, err))) {
            m->n_parts++; /* freed by the caller */
            return st;
        }
    }
    for (size_t s = 0; s < fm->study->n_models; s++)
        if (strcmp(fm->study->models[s].name, m->name) == 0) m->spec = &fm->study->models[s];
    if (!m->spec)
        return bl_error_set(err, BL_ERR_INPUT, "%s: key '%s.name' is '%s', a model not in provenance.study.models",
                            file, prefix, m->name);
    return BL_OK;
}

/* The study as parsed (provenance.study) gives each model's design: per, slopes, fixed, link. */
static bl_status read_study(bl_fitted_models *fm, const cJSON *root, bl_error *err)
{
    const cJSON *prov = cJSON_GetObjectItemCaseSensitive(root, "provenance");
    const cJSON *study = cJSON_IsObject(prov) ? cJSON_GetObjectItemCaseSensitive(prov, "study") : NULL;
    if (!cJSON_IsObject(study))
        return bad_key(err, fm->name, "provenance.study", "is missing or not an object (it holds the models' designs)");
    char *text = cJSON_PrintUnformatted(study);
    size_t n = strlen(fm->name) + 32;
    char *name = malloc(n);
    if (!text || !name) {
        cJSON_free(text);
        free(name);
        return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", fm->name);
    }
    snprintf(name, n, "%s: provenance.study", fm->name);
    bl_status st = bl_study_parse(text, name, &fm->study, err);
    cJSON_free(text);
    free(name);
    return st;
}

bl_status bl_fitted_models_parse(const char *text, const char *name, bl_fitted_models **out, bl_error *err)
{
    *out = NULL;
    cJSON *root = NULL;
    bl_fitted_models *fm = calloc(1, sizeof *fm);
    if (!fm || !(fm->name = bl_strdup(name ? name : "fits.json"))) {
        free(fm);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory reading %s", name ? name : "fits.json");
    }
    bl_status st = bl_json_parse(text, fm->name, &root, err);
    if (st) goto fail;
    if (!cJSON_IsObject(root)) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: not a fits.json document (a JSON object is expected)", fm->name);
        goto fail;
    }
    const cJSON *models = cJSON_GetObjectItemCaseSensitive(root, "models");
    if (!cJSON_IsArray(models) || cJSON_GetArraySize(models) == 0) {
        st = bad_key(err, fm->name, "models", models ? "is not a non-empty array" : "is missing");
        goto fail;
    }
    if ((st = read_study(fm, root, err))) goto fail;
    size_t nm = (size_t)cJSON_GetArraySize(models);
    if (!(fm->models = calloc(nm, sizeof *fm->models))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", fm->name);
        goto fail;
    }
    for (const cJSON *m = models->child; m; m = m->next) {
        size_t i = fm->n_models++;
        if (!cJSON_IsObject(m)) {
            char path[64];
            snprintf(path, sizeof path, "models[%zu]", i);
            st = bad_key(err, fm->name, path, "is not an object");
            goto fail;
        }
        if ((st = read_model(fm, m, i, err))) goto fail;
    }
    cJSON_Delete(root);
    *out = fm;
    return BL_OK;
fail:
    cJSON_Delete(root);
    bl_fitted_models_destroy(fm);
    return st;
}

bl_status bl_fitted_models_load(const char *path, bl_fitted_models **out, bl_error *err)
{
    *out = NULL;
    char *text = NULL;
    bl_status st = bl_json_read_file(path, "the fits.json document", &text, err);
    if (!st) st = bl_fitted_models_parse(text, path, out, err);
    free(text);
    return st;
}

/* ---- the delta method ------------------------------------------------------------------------ */

double bl_prediction_delta_se(const double *j, const double *cov, size_t k)
{
    double v = 0;
    for (size_t a = 0; a < k; a++) {
        if (j[a] == 0) continue;
        for (size_t b = 0; b < k; b++)
            if (j[b] != 0) v += j[a] * cov[a * k + b] * j[b];
    }
    return isfinite(v) && v >= 0 ? sqrt(v) : NAN;
}

void bl_prediction_linear(int link, const double *coef, const double *cov, size_t k, const double *row, double sign,
                          bl_predicted *out)
{
    double eta = 0;
    for (size_t j = 0; j < k; j++)
        if (row[j] != 0) eta += row[j] * coef[j];
    double h = link == BL_LINK_LOG ? exp(eta) : eta;
    double dh = link == BL_LINK_LOG ? h : 1.0; /* d h / d eta */
    double se_eta = cov ? bl_prediction_delta_se(row, cov, k) : NAN;
    out->value = sign * h;
    out->se = fabs(dh) * se_eta;
    if (link == BL_LINK_LOG) {
        /* The interval of eta mapped through exp: it stays on the positive side, as the parameter does
         * (the Wald interval of the link scale, as fits.json reports it, transformed). */
        double a = sign * exp(eta - BL_PREDICTION_Z975 * se_eta), b = sign * exp(eta + BL_PREDICTION_Z975 * se_eta);
        out->ci_low = a < b ? a : b;
        out->ci_high = a < b ? b : a;
    } else {
        out->ci_low = out->value - BL_PREDICTION_Z975 * out->se;
        out->ci_high = out->value + BL_PREDICTION_Z975 * out->se;
    }
}

/* ---- the request: names, values, levels ------------------------------------------------------ */

/* A growing "a, b, c" list for messages (truncated politely when long). */
typedef struct {
    char text[600];
    size_t len, count;
} name_list;

static void list_add(name_list *l, const char *s)
{
    if (l->len + strlen(s) + 8 >= sizeof l->text) {
        if (l->len + 6 < sizeof l->text && (l->len < 5 || strcmp(l->text + l->len - 5, ", ...") != 0))
            l->len += (size_t)snprintf(l->text + l->len, sizeof l->text - l->len, ", ...");
        l->count++;
        return;
    }
    l->len += (size_t)snprintf(l->text + l->len, sizeof l->text - l->len, "%s%s", l->count ? ", " : "", s);
    l->count++;
}

static int names_contain(char *const *names, size_t n, const char *s)
{
    for (size_t i = 0; i < n; i++)
        if (strcmp(names[i], s) == 0) return 1;
    return 0;
}

/* Does the model use `name` as a regressor (1), a condition column (2), or not at all (0)? */
static int model_uses(const bl_model_spec *spec, const char *name)
{
    int use = 0;
    for (int p = 0; p < BL_NPARAM; p++) {
        const bl_param_spec *ps = &spec->param[p];
        if (ps->is_fixed) continue;
        if (names_contain(ps->per, ps->n_per, name)) use |= 2;
        for (size_t s = 0; s < ps->n_slopes; s++) {
            if (strcmp(ps->slopes[s].regressor, name) == 0) use |= 1;
            if (names_contain(ps->slopes[s].by, ps->slopes[s].n_by, name)) use |= 2;
        }
    }
    return use;
}

/* "theta (regressor), context, difficulty": every name the model uses, each once, in model order. */
static void model_names(const bl_model_spec *spec, const char *stimulus, name_list *l)
{
    char seen[BL_NPARAM * 16][128];
    size_t n_seen = 0;
    for (int p = 0; p < BL_NPARAM; p++) {
        const bl_param_spec *ps = &spec->param[p];
        if (ps->is_fixed) continue;
        for (size_t s = 0; s <= ps->n_slopes; s++) {
            char *const *cols = s == 0 ? ps->per : ps->slopes[s - 1].by;
            size_t nc = s == 0 ? ps->n_per : ps->slopes[s - 1].n_by;
            for (size_t c = 0; c <= nc; c++) {
                const char *nm = c < nc ? cols[c] : (s > 0 ? ps->slopes[s - 1].regressor : NULL);
                if (!nm) continue;
                size_t i = 0;
                while (i < n_seen && strcmp(seen[i], nm) != 0) i++;
                if (i < n_seen) continue;
                if (n_seen < sizeof seen / sizeof seen[0]) snprintf(seen[n_seen++], sizeof seen[0], "%s", nm);
                char item[160];
                snprintf(item, sizeof item, "%s%s", nm, model_uses(spec, nm) & 1 ? " (regressor)" : "");
                list_add(l, item);
            }
        }
    }
    if (stimulus && !model_uses(spec, stimulus)) {
        char item[160];
        snprintf(item, sizeof item, "%s (stimulus, optional)", stimulus);
        list_add(l, item);
    }
    if (!l->count) list_add(l, "nothing: every parameter has one value");
}

static const bl_prediction_setting *setting(const bl_prediction_request *req, const char *name)
{
    for (size_t i = 0; i < req->n_at; i++)
        if (strcmp(req->at[i].name, name) == 0) return &req->at[i];
    return NULL;
}

/* Check the names of the request against the model (unknown, twice, missing) and warn about names
 * that other models of the study use but this one does not. */
static bl_status check_names(const bl_fitted_models *fm, const model_entry *m, const bl_prediction_request *req,
                             bl_warnings *warn, bl_error *err)
{
    const char *stim = fm->study->trials.stimulus;
    for (size_t i = 0; i < req->n_at; i++) {
        const char *nm = req->at[i].name;
        for (size_t j = 0; j < i; j++)
            if (strcmp(req->at[j].name, nm) == 0) return bl_error_set(err, BL_ERR_USAGE, "'%s' is given twice", nm);
        if (model_uses(m->spec, nm) || (stim && strcmp(stim, nm) == 0)) continue;
        int elsewhere = 0;
        for (size_t s = 0; s < fm->study->n_models; s++) elsewhere |= model_uses(&fm->study->models[s], nm);
        if (elsewhere) {
            bl_warnings_add(warn, "model '%s' does not use '%s': its value %s is ignored", m->name, nm,
                            req->at[i].value);
            continue;
        }
        name_list l = {0};
        model_names(m->spec, stim, &l);
        return bl_error_set(err, BL_ERR_USAGE, "unknown name '%s' (model '%s' uses: %s)", nm, m->name, l.text);
    }
    for (int p = 0; p < BL_NPARAM; p++) {
        const bl_param_spec *ps = &m->spec->param[p];
        if (ps->is_fixed) continue;
        for (size_t s = 0; s <= ps->n_slopes; s++) {
            char *const *cols = s == 0 ? ps->per : ps->slopes[s - 1].by;
            size_t nc = s == 0 ? ps->n_per : ps->slopes[s - 1].n_by;
            for (size_t c = 0; c <= nc; c++) {
                const char *nm = c < nc ? cols[c] : (s > 0 ? ps->slopes[s - 1].regressor : NULL);
                if (!nm || setting(req, nm)) continue;
                int regressor = c == nc;
                return bl_error_set(err, BL_ERR_USAGE,
                                    "model '%s' uses %s '%s' (in %s) but no value is given for it (%s=%s)", m->name,
                                    regressor ? "regressor" : "condition column", nm, bl_param_name(p), nm,
                                    regressor ? "VALUE" : "LEVEL");
            }
        }
    }
    return BL_OK;
}

static bl_status regressor_value(const bl_prediction_setting *s, double *x, bl_error *err)
{
    char *end;
    errno = 0;
    *x = strtod(s->value, &end);
    if (end == s->value || *end || !isfinite(*x))
        return bl_error_set(err, BL_ERR_INPUT, "regressor '%s': '%s' is not a finite number", s->name, s->value);
    return BL_OK;
}

/* The level key: the values of `cols` joined by ':' (as the fit names levels). */
static void level_key(const bl_prediction_request *req, char *const *cols, size_t n, char *key, size_t cap)
{
    size_t len = 0;
    key[0] = '\0';
    for (size_t c = 0; c < n && len < cap; c++)
        len += (size_t)snprintf(key + len, cap - len, "%s%s", c ? ":" : "", setting(req, cols[c])->value);
}

/* Index of the coefficient (parameter, term, level) in the fit, or an error listing the levels there. */
static bl_status find_coef(const model_entry *m, const fit_entry *e, int p, const char *term, char *const *cols,
                           size_t n_cols, const char *key, size_t *out, bl_error *err)
{
    name_list levels = {0};
    for (size_t j = 0; j < e->n_coef; j++) {
        if (e->param[j] != p || strcmp(e->term[j], term) != 0) continue;
        if (strcmp(e->level[j], key) == 0) {
            *out = j;
            return BL_OK;
        }
        list_add(&levels, e->level[j]);
    }
    char who[300] = "";
    if (e->participant) snprintf(who, sizeof who, " (participant '%s')", e->participant);
    if (!levels.count)
        return bl_error_set(err, BL_ERR_INPUT, "model '%s'%s: fits.json has no coefficient %s/%s", m->name, who,
                            bl_param_name(p), term);
    char colnames[300] = "";
    size_t len = 0;
    for (size_t c = 0; c < n_cols && len < sizeof colnames; c++)
        len += (size_t)snprintf(colnames + len, sizeof colnames - len, "%s%s", c ? ":" : "", cols[c]);
    return bl_error_set(err, BL_ERR_USAGE, "model '%s'%s: %s has no %s%s for %s = '%s' (levels in the fit: %s)",
                        m->name, who, bl_param_name(p), strcmp(term, "intercept") ? "slope on " : "intercept",
                        strcmp(term, "intercept") ? term : "", colnames, key, levels.text);
}

/* ---- parameters and derived quantities ------------------------------------------------------- */

/* Fill out->param[], out->params and drow (BL_NPARAM x k: d param / d coefficient). */
static bl_status predict_parameters(const bl_fitted_models *fm, const model_entry *m, const fit_entry *e,
                                    const bl_prediction_request *req, bl_prediction *out, double *drow, bl_error *err)
{
    size_t k = e->n_coef;
    double *row = calloc(k ? k : 1, sizeof *row);
    if (!row) return bl_error_set(err, BL_ERR_NOMEM, "out of memory predicting model '%s'", m->name);
    bl_status st = BL_OK;
    char key[512];
    for (int p = 0; p < BL_NPARAM && !st; p++) {
        const bl_param_spec *ps = &m->spec->param[p];
        double sign = p == BL_DRIFT ? out->drift_sign : 1.0;
        if (ps->is_fixed) {
            out->link[p] = BL_LINK_DEFAULT;
            out->param[p] = (bl_predicted){sign * ps->fixed, 0, sign * ps->fixed, sign * ps->fixed};
            out->params.value[p] = sign * ps->fixed;
            continue;
        }
        memset(row, 0, k * sizeof *row);
        size_t j;
        level_key(req, ps->per, ps->n_per, key, sizeof key);
        if ((st = find_coef(m, e, p, "intercept", ps->per, ps->n_per, key, &j, err))) break;
        row[j] = 1;
        for (size_t s = 0; s < ps->n_slopes && !st; s++) {
            const bl_slope_spec *sl = &ps->slopes[s];
            double x;
            level_key(req, sl->by, sl->n_by, key, sizeof key);
            if (!(st = regressor_value(setting(req, sl->regressor), &x, err)) &&
                !(st = find_coef(m, e, p, sl->regressor, sl->by, sl->n_by, key, &j, err)))
                row[j] += x;
        }
        if (st) break;
        for (size_t i = 0; i < k; i++)
            if (row[i] != 0 && !isfinite(e->estimate[i]))
                st = bl_error_set(err, BL_ERR_INPUT, "%s: model '%s': coefficient %s/%s/%s has no estimate (null)",
                                  fm->name, m->name, bl_param_name(p), e->term[i], e->level[i]);
        if (st) break;
        int link = ps->link == BL_LINK_LOG ? BL_LINK_LOG : BL_LINK_IDENTITY;
        out->link[p] = link;
        bl_prediction_linear(link, e->estimate, e->cov, k, row, sign, &out->param[p]);
        out->params.value[p] = out->param[p].value;
        /* d param / d b = sign h'(eta) row; h' = 1 (identity) or h (log), so sign h' = value for log. */
        double dh = link == BL_LINK_LOG ? out->param[p].value : sign;
        for (size_t i = 0; i < k; i++) drow[(size_t)p * k + i] = dh * row[i];
    }
    free(row);
    return st;
}

enum { F_P_UPPER, F_P_LOWER, F_MEAN_UPPER, F_MEAN_LOWER, F_MEAN, NF };

/* P(upper), P(lower), mean RT per boundary and over both. Returns 0 when the parameters are invalid
 * (f untouched), 1 otherwise (an entry the engine cannot give is NAN); -1 on an engine failure. */
static int derived(const bl_wiener_params *par, double f[NF], bl_error *err)
{
    if (bl_wiener_check(par, NULL) != BL_OK) return 0;
    double p[2], mean[2];
    for (int b = 0; b < 2; b++) {
        if (bl_wiener_p_boundary(par, b, &p[b], err)) return -1;
        mean[b] = NAN;
        bl_error me = {0};
        if (p[b] > 0 && bl_wiener_mean_rt(par, b, &mean[b], &me) != BL_OK) mean[b] = NAN;
    }
    f[F_P_UPPER] = p[1];
    f[F_P_LOWER] = p[0];
    f[F_MEAN_UPPER] = mean[1];
    f[F_MEAN_LOWER] = mean[0];
    double total = 0;
    for (int b = 0; b < 2; b++) total += p[b] > 0 ? p[b] * mean[b] : 0;
    f[F_MEAN] = total;
    return 1;
}

/* d f / d param_q by central differences (one-sided at the edge of the valid range). */
static int derived_gradient(const bl_wiener_params *par, int q, const double f0[NF], double df[NF], bl_error *err)
{
    double x = par->value[q];
    /* Relative step: the engine's quantities are accurate to ~1e-10 relative, so a step near 1e-4
     * keeps the difference error near 1e-6 relative while the truncation error is ~1e-8. */
    double h = 1e-4 * fmax(fabs(x), 0.1);
    bl_wiener_params lo = *par, hi = *par;
    lo.value[q] = x - h;
    hi.value[q] = x + h;
    double fl[NF], fh[NF];
    int ol = derived(&lo, fl, err), oh = derived(&hi, fh, err);
    if (ol < 0 || oh < 0) return 0;
    for (int i = 0; i < NF; i++) {
        if (ol && oh) df[i] = (fh[i] - fl[i]) / (2 * h);
        else if (oh) df[i] = (fh[i] - f0[i]) / h;
        else if (ol) df[i] = (f0[i] - fl[i]) / h;
        else df[i] = NAN;
    }
    return 1;
}

/* Quantities derived from the parameters, with delta-method intervals through the coefficients. */
static bl_status predict_derived(const bl_fitted_models *fm, const model_entry *m, const fit_entry *e,
                                 bl_prediction *out, const double *drow, bl_error *err)
{
    (void)fm;
    size_t k = e->n_coef;
    double f0[NF], df[BL_NPARAM][NF];
    if (derived(&out->params, f0, err) != 1)
        return err && err->status ? err->status
                                  : bl_error_set(err, BL_ERR_INTERNAL, "model '%s': invalid prediction", m->name);
    for (int q = 0; q < BL_NPARAM; q++) {
        for (int i = 0; i < NF; i++) df[q][i] = 0;
        if (out->link[q] == BL_LINK_DEFAULT || !e->cov) continue;
        if (!derived_gradient(&out->params, q, f0, df[q], err)) return err->status;
    }
    double *jac = malloc((k ? k : 1) * sizeof *jac);
    if (!jac) return bl_error_set(err, BL_ERR_NOMEM, "out of memory predicting model '%s'", m->name);
    bl_predicted *res[NF] = {&out->p_upper, &out->p_lower, &out->mean_rt_upper, &out->mean_rt_lower, &out->mean_rt};
    for (int i = 0; i < NF; i++) {
        for (size_t j = 0; j < k; j++) {
            jac[j] = 0;
            for (int q = 0; q < BL_NPARAM; q++)
                if (drow[(size_t)q * k + j] != 0) jac[j] += df[q][i] * drow[(size_t)q * k + j];
        }
        double se = e->cov && isfinite(f0[i]) ? bl_prediction_delta_se(jac, e->cov, k) : NAN;
        *res[i] = (bl_predicted){f0[i], se, f0[i] - BL_PREDICTION_Z975 * se, f0[i] + BL_PREDICTION_Z975 * se};
    }
    free(jac);
    for (int b = 0; b < 2; b++)
        for (int j = 0; j < BL_PREDICTION_NQ; j++) {
            bl_error qe = {0};
            double p = b ? f0[F_P_UPPER] : f0[F_P_LOWER], q = NAN;
            bl_status s = bl_wiener_quantile(&out->params, bl_prediction_quantile_probs[j], b, &q, &qe);
            /* A boundary that is never reached has no quantiles; anything else is a failure. */
            if (s && !(s == BL_ERR_NUMERIC && p < 1e-250)) {
                if (err) *err = qe;
                return s;
            }
            out->quantile[b][j] = s ? NAN : q;
        }
    return BL_OK;
}

static bl_status choose_fit(const bl_fitted_models *fm, const model_entry *m, const char *participant,
                            const fit_entry **out, bl_error *err)
{
    *out = &m->fit;
    if (!participant) return BL_OK;
    if (m->pooled)
        return bl_error_set(err, BL_ERR_USAGE,
                            "model '%s' in %s was fitted with participants pooled: it has no fit of participant '%s' "
                            "(a participant column in `per` is a condition: give it as name=level)",
                            m->name, fm->name, participant);
    name_list l = {0};
    for (size_t i = 0; i < m->n_parts; i++) {
        if (strcmp(m->parts[i].participant, participant) == 0) {
            *out = &m->parts[i];
            return BL_OK;
        }
        list_add(&l, m->parts[i].participant);
    }
    return bl_error_set(err, BL_ERR_USAGE, "participant '%s' is not in the fit of model '%s' in %s (participants: %s)",
                        participant, m->name, fm->name, l.count ? l.text : "none");
}

bl_status bl_prediction_compute(const bl_fitted_models *fm, const bl_prediction_request *req, bl_prediction *out,
                                bl_warnings *warn, bl_error *err)
{
    memset(out, 0, sizeof *out);
    const model_entry *m = NULL;
    name_list avail = {0};
    for (size_t i = 0; i < fm->n_models; i++) {
        if (req->model && strcmp(fm->models[i].name, req->model) == 0) m = &fm->models[i];
        list_add(&avail, fm->models[i].name);
    }
    if (!m)
        return bl_error_set(err, BL_ERR_USAGE, "no model '%s' in %s (models: %s)", req->model ? req->model : "",
                            fm->name, avail.text);
    const fit_entry *e;
    bl_status st = choose_fit(fm, m, req->participant, &e, err);
    if (st || (st = check_names(fm, m, req, warn, err))) return st;
    bl_wiener_params_default(&out->params);
    out->drift_sign = 1;
    const char *stim = fm->study->trials.stimulus;
    const bl_prediction_setting *ss = stim ? setting(req, stim) : NULL;
    if (ss && !names_contain(fm->study->trials.upper, fm->study->trials.n_upper, ss->value)) out->drift_sign = -1;
    out->has_covariance = e->cov != NULL;
    out->group_summary = m->separate && !req->participant;
    size_t k = e->n_coef;
    double *drow = calloc(BL_NPARAM * (k ? k : 1), sizeof *drow);
    if (!drow) return bl_error_set(err, BL_ERR_NOMEM, "out of memory predicting model '%s'", m->name);
    if ((st = predict_parameters(fm, m, e, req, out, drow, err))) goto done;
    if (out->params.value[BL_CONTAMINATION] > 0) {
        if (!req->has_contamination_range) {
            st = bl_error_set(err, BL_ERR_USAGE,
                              "model '%s' predicts contamination %g: give the contaminant RT range "
                              "(--contamination-range LO,HI; the fit used the fastest to slowest kept RT)",
                              m->name, out->params.value[BL_CONTAMINATION]);
            goto done;
        }
        out->params.contamination_lo = req->contamination_lo;
        out->params.contamination_hi = req->contamination_hi;
    }
    bl_error ce = {0};
    if (bl_wiener_check(&out->params, &ce) != BL_OK) {
        st = bl_error_set(err, BL_ERR_RANGE, "model '%s': the predicted parameters are invalid here: %s", m->name,
                          ce.message);
        goto done;
    }
    st = predict_derived(fm, m, e, out, drow, err);
done:
    free(drow);
    return st;
}
