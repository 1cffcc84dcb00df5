/* The "scan" block, checked key by key (scan_spec.h, docs/scan.md). */
#include "scan/scan_spec.h"
#include "core/strutil.h"

#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

typedef struct {
    const char *file;
    bl_error *err;
} ctx;

static bl_status bad(const ctx *c, const char *key, const cJSON *v, const char *what)
{
    if (!v) return bl_error_set(c->err, BL_ERR_INPUT, "%s: key \"%s\": %s", c->file, key, what);
    char *txt = cJSON_PrintUnformatted(v);
    bl_status st = bl_error_set(c->err, BL_ERR_INPUT, "%s: key \"%s\": %s (value: %.60s)", c->file, key, what,
                                txt ? txt : "?");
    cJSON_free(txt);
    return st;
}

static bl_status nomem(const ctx *c)
{
    return bl_error_set(c->err, BL_ERR_NOMEM, "%s: out of memory reading the scan block", c->file);
}

static const cJSON *get(const cJSON *o, const char *key)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(o, key);
    return v && !cJSON_IsNull(v) ? v : NULL;
}

static bl_status check_keys(const ctx *c, const cJSON *o, const char *path, const char *const *allowed)
{
    for (const cJSON *it = o->child; it; it = it->next) {
        int ok = 0;
        for (size_t i = 0; allowed[i]; i++) ok |= strcmp(it->string, allowed[i]) == 0;
        for (const cJSON *b = it->next; b && ok; b = b->next)
            if (strcmp(b->string, it->string) == 0) ok = 0;
        if (ok) continue;
        char key[256], list[400] = "";
        snprintf(key, sizeof key, "%s.%s", path, it->string);
        for (size_t i = 0; allowed[i]; i++) {
            size_t l = strlen(list);
            snprintf(list + l, sizeof list - l, "%s%s", i ? ", " : "", allowed[i]);
        }
        return bl_error_set(c->err, BL_ERR_INPUT, "%s: unknown or repeated key \"%s\" (allowed here: %s)", c->file, key,
                            list);
    }
    return BL_OK;
}

/* A finite number at path.key; required when def is NAN. */
static bl_status number(const ctx *c, const cJSON *o, const char *path, const char *key, double def, double *out)
{
    char k[256];
    snprintf(k, sizeof k, "%s.%s", path, key);
    const cJSON *v = get(o, key);
    *out = def;
    if (!v) return isnan(def) ? bad(c, k, NULL, "is required") : BL_OK;
    if (!cJSON_IsNumber(v) || !isfinite(v->valuedouble)) return bad(c, k, v, "must be a number");
    *out = v->valuedouble;
    return BL_OK;
}

static bl_status parse_frequencies(const ctx *c, const cJSON *f, bl_scan_spec *s)
{
    static const char *const keys[] = {"from", "to", "step", "count", "spacing", "bandwidth", "bandwidth_fraction",
                                       NULL};
    const char *P = "scan.frequencies";
    if (!cJSON_IsObject(f)) return bad(c, P, f, "must be an object {\"from\", \"to\", \"count\" or \"step\", ...}");
    bl_status st = check_keys(c, f, P, keys);
    double lo, hi, step, count, bw, frac;
    if (st || (st = number(c, f, P, "from", NAN, &lo)) || (st = number(c, f, P, "to", NAN, &hi)) ||
        (st = number(c, f, P, "step", 0, &step)) || (st = number(c, f, P, "count", 0, &count)) ||
        (st = number(c, f, P, "bandwidth", 0, &bw)) || (st = number(c, f, P, "bandwidth_fraction", 0, &frac)))
        return st;
    if (!(lo > 0)) return bad(c, "scan.frequencies.from", get(f, "from"), "must be above 0 Hz");
    if (!(hi >= lo)) return bad(c, "scan.frequencies.to", get(f, "to"), "must be at least scan.frequencies.from");
    const cJSON *sp = get(f, "spacing");
    int log_spacing = 0;
    if (sp && !(cJSON_IsString(sp) && (!strcmp(sp->valuestring, "linear") || !strcmp(sp->valuestring, "log"))))
        return bad(c, "scan.frequencies.spacing", sp, "must be \"linear\" or \"log\"");
    if (sp) log_spacing = !strcmp(sp->valuestring, "log");
    if ((get(f, "step") != NULL) == (get(f, "count") != NULL))
        return bad(c, P, NULL, "needs exactly one of \"step\" and \"count\"");
    size_t n;
    if (get(f, "count")) {
        if (!(count >= 1 && count <= 1000 && count == floor(count)))
            return bad(c, "scan.frequencies.count", get(f, "count"), "must be a whole number from 1 to 1000");
        n = (size_t)count;
        if (n > 1 && hi == lo)
            return bad(c, "scan.frequencies.to", get(f, "to"), "must exceed \"from\" when count > 1");
    } else {
        if (log_spacing && !(step > 1))
            return bad(c, "scan.frequencies.step", get(f, "step"), "must be a ratio above 1 with log spacing");
        if (!log_spacing && !(step > 0)) return bad(c, "scan.frequencies.step", get(f, "step"), "must be above 0 Hz");
        double span = log_spacing ? log(hi / lo) / log(step) : (hi - lo) / step;
        if (span > 999) return bad(c, "scan.frequencies.step", get(f, "step"), "gives more than 1000 frequencies");
        n = (size_t)floor(span + 1e-9) + 1;
    }
    if (!(s->freq = malloc(n * sizeof *s->freq))) return nomem(c);
    s->n_freqs = n;
    for (size_t i = 0; i < n; i++) {
        double t = n > 1 ? (double)i / (double)(n - 1) : 0;
        if (get(f, "count")) s->freq[i] = log_spacing ? lo * pow(hi / lo, t) : lo + t * (hi - lo);
        else s->freq[i] = log_spacing ? lo * pow(step, (double)i) : lo + (double)i * step;
    }
    if ((get(f, "bandwidth") != NULL) == (get(f, "bandwidth_fraction") != NULL))
        return bad(c, P, NULL, "needs exactly one of \"bandwidth\" (Hz) and \"bandwidth_fraction\" (of the frequency)");
    if (get(f, "bandwidth") && !(bw > 0))
        return bad(c, "scan.frequencies.bandwidth", get(f, "bandwidth"), "must be above 0 Hz");
    if (get(f, "bandwidth_fraction") && !(frac > 0 && frac <= 2))
        return bad(c, "scan.frequencies.bandwidth_fraction", get(f, "bandwidth_fraction"), "must be in (0, 2]");
    s->bandwidth = bw;
    s->bandwidth_fraction = frac;
    return BL_OK;
}

static bl_status parse_windows(const ctx *c, const cJSON *w, bl_scan_spec *s)
{
    static const char *const keys[] = {"align", "from", "to", "length", "step", NULL};
    const char *P = "scan.windows";
    if (!cJSON_IsObject(w)) return bad(c, P, w, "must be an object {\"from\", \"to\", \"length\", \"step\"}");
    bl_status st = check_keys(c, w, P, keys);
    if (st || (st = number(c, w, P, "from", NAN, &s->from)) || (st = number(c, w, P, "to", NAN, &s->to)) ||
        (st = number(c, w, P, "length", NAN, &s->length)) || (st = number(c, w, P, "step", NAN, &s->step)))
        return st;
    const cJSON *al = get(w, "align");
    s->align = BL_ALIGN_ONSET;
    if (al && !(cJSON_IsString(al) && (!strcmp(al->valuestring, "onset") || !strcmp(al->valuestring, "response"))))
        return bad(c, "scan.windows.align", al, "must be \"onset\" or \"response\"");
    if (al && !strcmp(al->valuestring, "response")) s->align = BL_ALIGN_RESPONSE;
    if (!(s->length > 0)) return bad(c, "scan.windows.length", get(w, "length"), "must be above 0 s");
    if (!(s->step > 0)) return bad(c, "scan.windows.step", get(w, "step"), "must be above 0 s");
    if (!(s->to - s->from >= s->length - 1e-9))
        return bad(c, "scan.windows.length", get(w, "length"), "is longer than the span scan.windows.from..to");
    double span = (s->to - s->from - s->length) / s->step;
    if (span > 999) return bad(c, "scan.windows.step", get(w, "step"), "gives more than 1000 windows");
    s->n_windows = (size_t)floor(span + 1e-9) + 1;
    if (!(s->window_from = malloc(s->n_windows * sizeof *s->window_from))) return nomem(c);
    for (size_t i = 0; i < s->n_windows; i++) s->window_from[i] = s->from + (double)i * s->step;
    return BL_OK;
}

static bl_status parse_parameter(const ctx *c, const cJSON *it, size_t i, bl_scan_param *p)
{
    char k[128];
    snprintf(k, sizeof k, "scan.parameters[%zu]", i);
    const cJSON *name = it, *by = NULL;
    if (cJSON_IsObject(it)) {
        static const char *const keys[] = {"parameter", "by", NULL};
        bl_status st = check_keys(c, it, k, keys);
        if (st) return st;
        name = get(it, "parameter");
        by = get(it, "by");
        snprintf(k, sizeof k, "scan.parameters[%zu].parameter", i);
    }
    if (!name || !cJSON_IsString(name)) return bad(c, k, name, "must name a parameter (\"threshold\", \"drift\", ...)");
    p->param = bl_param_index(name->valuestring);
    if (p->param < 0 || p->param == BL_CONTAMINATION) return bad(c, k, name, "is not a parameter that can have slopes");
    if (!by) return BL_OK;
    snprintf(k, sizeof k, "scan.parameters[%zu].by", i);
    if (!cJSON_IsArray(by)) return bad(c, k, by, "must be an array of column names");
    size_t n = (size_t)cJSON_GetArraySize(by);
    if (n && !(p->by = calloc(n, sizeof *p->by))) return nomem(c);
    for (const cJSON *b = by->child; b; b = b->next) {
        if (!cJSON_IsString(b) || !b->valuestring[0]) return bad(c, k, b, "must hold column names");
        if (!(p->by[p->n_by++] = bl_strdup(b->valuestring))) return nomem(c);
    }
    return BL_OK;
}

static bl_status parse_rest(const ctx *c, const cJSON *root, const bl_study *study, bl_scan_spec *s)
{
    const cJSON *ps = get(root, "parameters");
    if (!ps) return bad(c, "scan.parameters", NULL, "is required");
    if (!cJSON_IsArray(ps) || cJSON_GetArraySize(ps) == 0)
        return bad(c, "scan.parameters", ps, "must be a non-empty array of parameters");
    size_t n = (size_t)cJSON_GetArraySize(ps);
    if (!(s->params = calloc(n, sizeof *s->params))) return nomem(c);
    size_t i = 0;
    for (const cJSON *it = ps->child; it; it = it->next, i++) {
        bl_status st = parse_parameter(c, it, i, &s->params[i]);
        s->n_params = i + 1;
        if (st) return st;
        for (size_t j = 0; j < i; j++)
            if (s->params[j].param == s->params[i].param)
                return bad(c, "scan.parameters", ps, "names a parameter twice");
    }
    const cJSON *nm = get(root, "null_model");
    if (nm && !cJSON_IsString(nm)) return bad(c, "scan.null_model", nm, "must be a model name");
    const char *name = nm ? nm->valuestring : study->n_models ? study->models[0].name : NULL;
    int found = 0;
    for (size_t m = 0; name && m < study->n_models; m++) found |= !strcmp(study->models[m].name, name);
    if (!found)
        return bad(c, "scan.null_model", nm,
                   study->n_models ? "is not a model of the study" : "needs a model in \"models\"");
    if (!(s->null_model = bl_strdup(name))) return nomem(c);
    double perms, thr, refit;
    bl_status st = number(c, root, "scan", "permutations", 1000, &perms);
    if (st || (st = number(c, root, "scan", "cluster_threshold", 0.05, &thr)) ||
        (st = number(c, root, "scan", "refit", 0, &refit)))
        return st;
    if (!(refit >= 0 && refit <= 50 && refit == floor(refit)))
        return bad(c, "scan.refit", get(root, "refit"), "must be a whole number from 0 to 50");
    s->refit = (size_t)refit;
    if (!(perms >= 0 && perms <= 1e6 && perms == floor(perms)))
        return bad(c, "scan.permutations", get(root, "permutations"), "must be a whole number from 0 to 1000000");
    s->permutations = (size_t)perms;
    if (!(thr > 0 && thr < 1))
        return bad(c, "scan.cluster_threshold", get(root, "cluster_threshold"), "must be in (0, 1)");
    s->cluster_threshold = thr;
    const cJSON *cor = get(root, "correction");
    if (cor && !(cJSON_IsString(cor) && (!strcmp(cor->valuestring, "max") || !strcmp(cor->valuestring, "cluster"))))
        return bad(c, "scan.correction", cor, "must be \"max\" or \"cluster\"");
    s->correction = cor && !strcmp(cor->valuestring, "cluster") ? BL_SCAN_CORRECTION_CLUSTER : BL_SCAN_CORRECTION_MAX;
    return BL_OK;
}

bl_status bl_scan_spec_parse(const bl_study *study, bl_scan_spec **out, bl_error *err)
{
    *out = NULL;
    ctx c = {study->path, err};
    const cJSON *root = study->scan_json;
    if (!root)
        return bl_error_set(err, BL_ERR_INPUT, "%s: the study has no \"scan\" block (docs/scan.md)", study->path);
    if (!cJSON_IsObject(root)) return bad(&c, "scan", root, "must be an object {...}");
    if (!study->has_recordings || !study->has_power)
        return bad(&c, "scan", NULL,
                   "needs the study's \"recordings\" and \"power\" sections (scale, standardize, detrend)");
    static const char *const keys[] = {"frequencies", "windows",           "parameters", "null_model", "permutations",
                                       "correction",  "cluster_threshold", "refit",      NULL};
    bl_status st = check_keys(&c, root, "scan", keys);
    if (st) return st;
    bl_scan_spec *s = calloc(1, sizeof *s);
    if (!s) return nomem(&c);
    const cJSON *f = get(root, "frequencies"), *w = get(root, "windows");
    if (!f) st = bad(&c, "scan.frequencies", NULL, "is required");
    else if (!w) st = bad(&c, "scan.windows", NULL, "is required");
    if (!st) st = parse_frequencies(&c, f, s);
    if (!st) st = parse_windows(&c, w, s);
    if (!st) st = parse_rest(&c, root, study, s);
    if (st) {
        bl_scan_spec_destroy(s);
        return st;
    }
    *out = s;
    return BL_OK;
}

void bl_scan_spec_destroy(bl_scan_spec *s)
{
    if (!s) return;
    free(s->freq);
    free(s->window_from);
    for (size_t i = 0; i < s->n_params; i++) {
        for (size_t j = 0; j < s->params[i].n_by; j++) free(s->params[i].by[j]);
        free(s->params[i].by);
    }
    free(s->params);
    free(s->null_model);
    free(s);
}

double bl_scan_bandwidth(const bl_scan_spec *s, double f)
{
    return s->bandwidth_fraction > 0 ? s->bandwidth_fraction * f : s->bandwidth;
}

bl_status bl_scan_spec_check_signal(const bl_scan_spec *s, const bl_study *study, double fs, double shortest,
                                    bl_error *err)
{
    ctx c = {study->path, err};
    const cJSON *root = study->scan_json, *f = get(root, "frequencies"), *w = get(root, "windows");
    char what[256];
    if (s->length > shortest) {
        snprintf(what, sizeof what, "a window of %.6g s is longer than the shortest recording (%.6g s)", s->length,
                 shortest);
        return bad(&c, "scan.windows.length", get(w, "length"), what);
    }
    double top = s->freq[s->n_freqs - 1];
    if (top + bl_scan_bandwidth(s, top) / 2 > fs / 2) {
        snprintf(what, sizeof what,
                 "the band around %.6g Hz (half-width %.6g Hz) reaches above the Nyquist frequency "
                 "%.6g Hz of the recordings",
                 top, bl_scan_bandwidth(s, top) / 2, fs / 2);
        return bad(&c, "scan.frequencies.to", get(f, "to"), what);
    }
    double res = 2.0 / s->length, low = s->freq[0];
    if (bl_scan_bandwidth(s, low) < res * (1 - 1e-9)) {
        const char *key = s->bandwidth_fraction > 0 ? "bandwidth_fraction" : "bandwidth";
        char k[64];
        snprintf(k, sizeof k, "scan.frequencies.%s", key);
        snprintf(what, sizeof what,
                 "a bandwidth of %.6g Hz at %.6g Hz is below the resolution of one taper, 2 / window "
                 "length = %.6g Hz",
                 bl_scan_bandwidth(s, low), low, res);
        return bad(&c, k, get(f, key), what);
    }
    if (llround(s->length * fs) < 8) {
        snprintf(what, sizeof what, "%.6g s is fewer than 8 samples at %.6g Hz", s->length, fs);
        return bad(&c, "scan.windows.length", get(w, "length"), what);
    }
    return BL_OK;
}
