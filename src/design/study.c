/* Study file (JSON) -> plain structs, checked strictly.
 *
 * Every object is checked against its list of allowed keys (case-sensitive), every value against its
 * type and range; an error names the file, the key path ("models[1].threshold.slopes") and the value.
 * JSON syntax errors give line and column (cJSON_ParseWithLengthOpts with the parse end; cJSON 1.7).
 * The user-facing contract is docs/study-file.md.
 */
#include "design/study.h"
#include "signal/trace.h"
#include "core/json.h"
#include "core/strutil.h"

#include <cjson/cJSON.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

/* Parameter names as users write them (vocabulary), in bl_param order. Kept here so the study
 * module does not depend on the likelihood engine. */
static const char *const param_names[BL_NPARAM] = {
    "threshold", "drift", "nondecision", "start", "drift_sd", "start_range", "nondecision_range", "contamination",
};

typedef struct {
    const char *file;
    bl_error *err;
} ctx;

static void free_strings(char **v, size_t n)
{
    if (!v) return;
    for (size_t i = 0; i < n; i++) free(v[i]);
    free(v);
}

static char **copy_strings(char *const *v, size_t n, int *ok)
{
    *ok = 1;
    if (n == 0) return NULL;
    char **d = calloc(n, sizeof *d);
    if (!d) {
        *ok = 0;
        return NULL;
    }
    for (size_t i = 0; i < n; i++)
        if (!(d[i] = bl_strdup(v[i]))) {
            free_strings(d, n);
            *ok = 0;
            return NULL;
        }
    return d;
}

/* A short printed form of a JSON value for messages. */
static void value_text(const cJSON *v, char *buf, size_t size)
{
    char *s = v ? cJSON_PrintUnformatted(v) : NULL;
    if (!s) {
        snprintf(buf, size, "%s", v ? "?" : "missing");
        return;
    }
    if (strlen(s) > 60) snprintf(buf, size, "%.57s...", s);
    else snprintf(buf, size, "%s", s);
    cJSON_free(s);
}

static bl_status bad(ctx *c, const char *key, const cJSON *v, const char *what)
{
    char vt[80];
    value_text(v, vt, sizeof vt);
    if (v) return bl_error_set(c->err, BL_ERR_INPUT, "%s: key \"%s\": %s (value: %s)", c->file, key, what, vt);
    return bl_error_set(c->err, BL_ERR_INPUT, "%s: key \"%s\": %s", c->file, key, what);
}

static bl_status nomem(ctx *c)
{
    return bl_error_set(c->err, BL_ERR_NOMEM, "%s: out of memory while reading the study", c->file);
}

static void join_key(char *out, size_t size, const char *path, const char *key)
{
    if (path && path[0]) snprintf(out, size, "%s.%s", path, key);
    else snprintf(out, size, "%s", key);
}

/* Every key of obj must be in allowed (NULL-terminated). */
static bl_status check_keys(ctx *c, const cJSON *obj, const char *path, const char *const *allowed)
{
    for (const cJSON *it = obj->child; it; it = it->next) {
        int found = 0;
        for (size_t i = 0; allowed[i]; i++)
            if (strcmp(it->string, allowed[i]) == 0) found = 1;
        if (found) continue;
        char key[256], list[512] = "";
        join_key(key, sizeof key, path, it->string);
        for (size_t i = 0; allowed[i]; i++) {
            size_t l = strlen(list);
            snprintf(list + l, sizeof list - l, "%s%s", i ? ", " : "", allowed[i]);
        }
        return bl_error_set(c->err, BL_ERR_INPUT, "%s: unknown key \"%s\" (allowed here: %s)", c->file, key, list);
    }
    /* duplicate keys: cJSON keeps both; the user meant one of them */
    for (const cJSON *a = obj->child; a; a = a->next)
        for (const cJSON *b = a->next; b; b = b->next)
            if (strcmp(a->string, b->string) == 0) {
                char key[256];
                join_key(key, sizeof key, path, a->string);
                return bl_error_set(c->err, BL_ERR_INPUT, "%s: key \"%s\" appears twice", c->file, key);
            }
    return BL_OK;
}

static const cJSON *get(const cJSON *obj, const char *key)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(obj, key);
    return (v && cJSON_IsNull(v)) ? NULL : v;
}

static bl_status get_object(ctx *c, const cJSON *obj, const char *path, const char *key, int required,
                            const cJSON **out)
{
    char k[256];
    join_key(k, sizeof k, path, key);
    const cJSON *v = get(obj, key);
    *out = NULL;
    if (!v) return required ? bad(c, k, NULL, "is required") : BL_OK;
    if (!cJSON_IsObject(v)) return bad(c, k, v, "must be an object {...}");
    *out = v;
    return BL_OK;
}

static bl_status get_string(ctx *c, const cJSON *obj, const char *path, const char *key, const char *def, char **out)
{
    char k[256];
    join_key(k, sizeof k, path, key);
    const cJSON *v = get(obj, key);
    *out = NULL;
    if (!v) {
        if (!def) return BL_OK;
        if (!(*out = bl_strdup(def))) return nomem(c);
        return BL_OK;
    }
    if (!cJSON_IsString(v)) return bad(c, k, v, "must be a string");
    if (!v->valuestring[0]) return bad(c, k, v, "must not be empty");
    if (!(*out = bl_strdup(v->valuestring))) return nomem(c);
    return BL_OK;
}

static bl_status require_string(ctx *c, const cJSON *obj, const char *path, const char *key, char **out)
{
    bl_status s = get_string(c, obj, path, key, NULL, out);
    if (s) return s;
    if (!*out) {
        char k[256];
        join_key(k, sizeof k, path, key);
        return bad(c, k, NULL, "is required");
    }
    return BL_OK;
}

/* An enumerated string: returns the index into names, def when absent. */
static bl_status get_choice(ctx *c, const cJSON *obj, const char *path, const char *key, const char *const *names,
                            int def, int *out)
{
    char k[256];
    join_key(k, sizeof k, path, key);
    const cJSON *v = get(obj, key);
    *out = def;
    if (!v) return BL_OK;
    if (cJSON_IsString(v))
        for (int i = 0; names[i]; i++)
            if (strcmp(v->valuestring, names[i]) == 0) {
                *out = i;
                return BL_OK;
            }
    char what[256] = "must be one of ";
    for (int i = 0; names[i]; i++) {
        size_t l = strlen(what);
        snprintf(what + l, sizeof what - l, "%s\"%s\"", i ? ", " : "", names[i]);
    }
    return bad(c, k, v, what);
}

/* A finite number; *present says whether it was given. */
static bl_status get_number(ctx *c, const cJSON *obj, const char *path, const char *key, double def, double *out,
                            int *present)
{
    char k[256];
    join_key(k, sizeof k, path, key);
    const cJSON *v = get(obj, key);
    *out = def;
    if (present) *present = v != NULL;
    if (!v) return BL_OK;
    if (!cJSON_IsNumber(v) || !isfinite(v->valuedouble)) return bad(c, k, v, "must be a number");
    *out = v->valuedouble;
    return BL_OK;
}

/* An array of strings (numbers are accepted and kept as their JSON text when allow_numbers). */
static bl_status get_string_array(ctx *c, const cJSON *v, const char *k, int allow_numbers, int allow_empty,
                                  char ***out, size_t *n_out)
{
    *out = NULL;
    *n_out = 0;
    if (!cJSON_IsArray(v))
        return bad(c, k, v, allow_numbers ? "must be an array of strings or numbers" : "must be an array of strings");
    size_t n = (size_t)cJSON_GetArraySize(v);
    if (n == 0 && !allow_empty) return bad(c, k, v, "must not be empty");
    char **arr = n ? calloc(n, sizeof *arr) : NULL;
    if (n && !arr) return nomem(c);
    size_t i = 0;
    for (const cJSON *it = v->child; it; it = it->next, i++) {
        char buf[64];
        const char *s = NULL;
        if (cJSON_IsString(it) && it->valuestring[0]) s = it->valuestring;
        else if (allow_numbers && cJSON_IsNumber(it) && isfinite(it->valuedouble)) {
            snprintf(buf, sizeof buf, "%.17g", it->valuedouble);
            s = buf;
        }
        if (!s) {
            char kk[300];
            snprintf(kk, sizeof kk, "%s[%zu]", k, i);
            free_strings(arr, n);
            return bad(c, kk, it,
                       allow_numbers ? "must be a non-empty string or a number" : "must be a non-empty string");
        }
        for (size_t j = 0; j < i; j++)
            if (strcmp(arr[j], s) == 0) {
                char kk[300];
                snprintf(kk, sizeof kk, "%s[%zu]", k, i);
                free_strings(arr, n);
                return bad(c, kk, it, "is listed twice");
            }
        if (!(arr[i] = bl_strdup(s))) {
            free_strings(arr, n);
            return nomem(c);
        }
    }
    *out = arr;
    *n_out = n;
    return BL_OK;
}

static char *resolve_path(const char *dir, const char *p)
{
    if (p[0] == '/' || !dir || !dir[0] || strcmp(dir, ".") == 0) return bl_strdup(p);
    size_t nd = strlen(dir), np = strlen(p);
    char *r = malloc(nd + np + 2);
    if (!r) return NULL;
    memcpy(r, dir, nd);
    r[nd] = '/';
    memcpy(r + nd + 1, p, np + 1);
    return r;
}

static int is_csv_name(const char *p)
{
    const char *dot = strrchr(p, '.');
    if (!dot || strchr(dot, '/')) return 0;
    return strcmp(dot, ".csv") == 0 || strcmp(dot, ".tsv") == 0 || strcmp(dot, ".txt") == 0 ||
           strcmp(dot, ".CSV") == 0 || strcmp(dot, ".TSV") == 0 || strcmp(dot, ".TXT") == 0;
}

/* ---- sections ---- */

/* "split": {"trial_type": ["side", "difficulty"]}: a column of "left/easy" values into named columns. */
static bl_status parse_split(ctx *c, const cJSON *o, bl_study *s)
{
    const cJSON *sp;
    bl_status st;
    if ((st = get_object(c, o, "trials", "split", 0, &sp))) return st;
    if (!sp) return BL_OK;
    size_t n = (size_t)cJSON_GetArraySize(sp);
    if (!(s->split.column = calloc(n + 1, sizeof *s->split.column)) ||
        !(s->split.into = calloc(n + 1, sizeof *s->split.into)) ||
        !(s->split.n_into = calloc(n + 1, sizeof *s->split.n_into)))
        return nomem(c);
    for (const cJSON *e = sp->child; e; e = e->next) {
        char key[300];
        snprintf(key, sizeof key, "trials.split.%s", e->string);
        size_t i = s->split.n++;
        if (!(s->split.column[i] = bl_strdup(e->string))) return nomem(c);
        if (!cJSON_IsArray(e)) return bad(c, key, e, "must be an array of column names, one per part");
        if ((st = get_string_array(c, e, key, 0, 0, &s->split.into[i], &s->split.n_into[i]))) return st;
        if (s->split.n_into[i] < 2) return bad(c, key, e, "needs at least two column names");
    }
    return BL_OK;
}

/* "bids": {"root": ".", "task": "..."}: trials and recordings found in a BIDS dataset. */
static bl_status parse_bids(ctx *c, const cJSON *o, bl_study *s)
{
    static const char *const keys[] = {"root", "task", NULL};
    bl_status st;
    char *root = NULL;
    if ((st = check_keys(c, o, "bids", keys))) return st;
    if ((st = get_string(c, o, "bids", "root", ".", &root))) return st;
    s->bids.root = resolve_path(s->dir, root);
    free(root);
    if (!s->bids.root) return nomem(c);
    size_t len = strlen(s->bids.root); /* "dir/." and "dir/" are "dir" */
    while (len > 1 && (s->bids.root[len - 1] == '/' || (s->bids.root[len - 1] == '.' && s->bids.root[len - 2] == '/')))
        s->bids.root[--len] = '\0';
    if ((st = require_string(c, o, "bids", "task", &s->bids.task))) return st;
    if (!*s->bids.task || strpbrk(s->bids.task, "_-/ "))
        return bad(c, "bids.task", get(o, "task"), "must be a BIDS label (letters and digits, no '_', '-' or '/')");
    return BL_OK;
}

static bl_status parse_trials(ctx *c, const cJSON *o, bl_study *s)
{
    static const char *const keys[] = {"file",  "participant", "trial", "rt",    "rt_unit", "response",
                                       "upper", "stimulus",    "keep",  "split", NULL};
    static const char *const units[] = {"s", "ms", NULL};
    bl_status st;
    char *file = NULL;
    if ((st = check_keys(c, o, "trials", keys))) return st;
    if (s->bids.root && !get(o, "file")) { /* the events files of the BIDS tree (design/trial_files.c) */
        if (!(s->trials.file = bl_strdup(s->bids.root))) return nomem(c);
    } else {
        if ((st = require_string(c, o, "trials", "file", &file))) return st;
        s->trials.file = resolve_path(s->dir, file);
        free(file);
        if (!s->trials.file) return nomem(c);
    }
    if (s->bids.root && !get(o, "participant")) {
        if (!(s->trials.participant = bl_strdup("participant"))) return nomem(c);
    } else if ((st = require_string(c, o, "trials", "participant", &s->trials.participant))) return st;
    if ((st = parse_split(c, o, s))) return st;
    if ((st = require_string(c, o, "trials", "rt", &s->trials.rt))) return st;
    int unit;
    if ((st = get_choice(c, o, "trials", "rt_unit", units, 0, &unit))) return st;
    s->trials.rt_in_ms = unit == 1;
    if ((st = require_string(c, o, "trials", "response", &s->trials.response))) return st;
    const cJSON *up = get(o, "upper");
    if (!up) return bad(c, "trials.upper", NULL, "is required (the response values meaning the upper boundary)");
    if ((st = get_string_array(c, up, "trials.upper", 1, 0, &s->trials.upper, &s->trials.n_upper))) return st;
    if ((st = get_string(c, o, "trials", "stimulus", NULL, &s->trials.stimulus))) return st;
    s->trials.trial_given = get(o, "trial") != NULL;
    if ((st = get_string(c, o, "trials", "trial", "trial", &s->trials.trial))) return st;

    s->trials.rt_min = s->trials.rt_max = NAN;
    const cJSON *keep;
    if ((st = get_object(c, o, "trials", "keep", 0, &keep))) return st;
    if (keep) {
        static const char *const kk[] = {"rt_min", "rt_max", NULL};
        if ((st = check_keys(c, keep, "trials.keep", kk))) return st;
        if ((st = get_number(c, keep, "trials.keep", "rt_min", NAN, &s->trials.rt_min, NULL))) return st;
        if ((st = get_number(c, keep, "trials.keep", "rt_max", NAN, &s->trials.rt_max, NULL))) return st;
        if (s->trials.rt_min < 0) return bad(c, "trials.keep.rt_min", get(keep, "rt_min"), "must be >= 0 (seconds)");
        if (s->trials.rt_max <= 0) return bad(c, "trials.keep.rt_max", get(keep, "rt_max"), "must be > 0 (seconds)");
        if (s->trials.rt_max <= s->trials.rt_min)
            return bad(c, "trials.keep.rt_max", get(keep, "rt_max"), "must be greater than trials.keep.rt_min");
    }
    return BL_OK;
}

/* "gain": {"flac": 838860.8, "csv": 1}: one gain per file extension (sound files and CSV traces need one,
 * formats with physical units normally none), so recordings of several formats share a study. */
static bl_status parse_gain_formats(ctx *c, const cJSON *g, bl_study *s)
{
    size_t n = (size_t)cJSON_GetArraySize(g);
    s->recordings.gain = 1.0;
    if (!(s->recordings.gain_format = calloc(n + 1, sizeof *s->recordings.gain_format)) ||
        !(s->recordings.gain_value = calloc(n + 1, sizeof *s->recordings.gain_value)))
        return nomem(c);
    for (const cJSON *e = g->child; e; e = e->next) {
        char key[300];
        snprintf(key, sizeof key, "recordings.gain.%s", e->string);
        const char *ext = e->string[0] == '.' ? e->string + 1 : e->string;
        if (!*ext || strchr(ext, '.') || strchr(ext, '/')) return bad(c, key, e, "must be keyed by a file extension");
        if (!cJSON_IsNumber(e) || !(e->valuedouble > 0)) return bad(c, key, e, "must be a number > 0");
        size_t i = s->recordings.n_gain_formats++;
        if (!(s->recordings.gain_format[i] = bl_strdup(ext))) return nomem(c);
        s->recordings.gain_value[i] = e->valuedouble;
    }
    return BL_OK;
}

double bl_study_recording_gain(const bl_study *s, const char *path)
{
    const char *dot = strrchr(path, '.');
    for (size_t i = 0; dot && !strchr(dot, '/') && i < s->recordings.n_gain_formats; i++)
        if (strcasecmp(dot + 1, s->recordings.gain_format[i]) == 0) return s->recordings.gain_value[i];
    return s->recordings.gain;
}

static const char *const unit_names[] = {"V", "mV", "uV", "\xc2\xb5V", "nV", "au", NULL};

static bl_status parse_recordings(ctx *c, const cJSON *o, bl_study *s)
{
    static const char *const keys[] = {"file", "onset", "gain", "unit", "rate", "channels", "average", "series", NULL};
    static const char *const averages[] = {"signal", "power", NULL};
    bl_status st;
    char *file = NULL;
    if ((st = check_keys(c, o, "recordings", keys))) return st;
    if (s->bids.root && !get(o, "file")) { /* each events file's own recording, found by the BIDS scan */
        size_t len = strlen(s->bids.root) + 32;
        if (!(s->recordings.file = malloc(len))) return nomem(c);
        snprintf(s->recordings.file, len, "%s/{bids_recording}", s->bids.root);
    } else {
        if ((st = require_string(c, o, "recordings", "file", &file))) return st;
        s->recordings.file = resolve_path(s->dir, file);
        free(file);
        if (!s->recordings.file) return nomem(c);
    }
    if (s->bids.root && !get(o, "onset")) {
        if (!(s->recordings.onset = bl_strdup("onset"))) return nomem(c);
    } else if ((st = require_string(c, o, "recordings", "onset", &s->recordings.onset))) return st;
    if (cJSON_IsObject(get(o, "gain"))) {
        if ((st = parse_gain_formats(c, get(o, "gain"), s))) return st;
    } else {
        if ((st = get_number(c, o, "recordings", "gain", 1.0, &s->recordings.gain, NULL))) return st;
        if (!(s->recordings.gain > 0)) return bad(c, "recordings.gain", get(o, "gain"), "must be > 0");
    }
    int u;
    if ((st = get_choice(c, o, "recordings", "unit", unit_names, 5, &u))) return st;
    if (!(s->recordings.unit = bl_strdup(unit_names[u]))) return nomem(c);
    if ((st = get_string(c, o, "recordings", "series", NULL, &s->recordings.series))) return st;
    int average;
    if ((st = get_choice(c, o, "recordings", "average", averages, 0, &average))) return st;
    s->recordings.average_power = average == 1;
    int has_rate;
    if ((st = get_number(c, o, "recordings", "rate", NAN, &s->recordings.rate, &has_rate))) return st;
    if (has_rate && !(s->recordings.rate > 0)) return bad(c, "recordings.rate", get(o, "rate"), "must be > 0 (Hz)");
    if (!has_rate && is_csv_name(s->recordings.file))
        return bad(c, "recordings.rate", NULL, "is required for CSV/TSV traces (samples per second)");
    const cJSON *ch = get(o, "channels");
    if (ch) {
        if ((st = get_string_array(c, ch, "recordings.channels", 1, 0, &s->recordings.channels,
                                   &s->recordings.n_channels)))
            return st;
    } else {
        if (!(s->recordings.channels = calloc(1, sizeof(char *))) || !(s->recordings.channels[0] = bl_strdup("1")))
            return nomem(c);
        s->recordings.n_channels = 1;
    }
    bl_montage *m = NULL;
    bl_error merr = {0};
    if (bl_montage_parse((const char *const *)s->recordings.channels, s->recordings.n_channels, "recordings.channels",
                         &m, &merr))
        return bl_error_set(c->err, merr.status, "%s: %s", c->file, merr.message);
    bl_montage_destroy(m);
    return BL_OK;
}

static int valid_name(const char *n)
{
    if (!n[0]) return 0;
    for (const char *p = n; *p; p++)
        if (!((*p >= 'a' && *p <= 'z') || (*p >= 'A' && *p <= 'Z') || (*p >= '0' && *p <= '9') || *p == '_' ||
              *p == '-' || *p == '.'))
            return 0;
    return 1;
}

static bl_status parse_power(ctx *c, const cJSON *o, bl_study *s)
{
    static const char *const keys[] = {"window",     "segment",   "overlap", "taper",       "detrend",
                                       "average",    "bands",     "scale",   "standardize", "condition",
                                       "line_noise", "artifacts", NULL};
    static const char *const aligns[] = {"onset", "response", NULL};
    static const char *const tapers[] = {"hann", NULL};
    static const char *const detrends[] = {"mean", "linear", "none", NULL};
    static const char *const averages[] = {"mean", "median", NULL};
    static const char *const scales[] = {"linear", "log10", "db", NULL};
    static const char *const stds[] = {"none", "participant", "participant_condition", NULL};
    bl_status st;
    int tmp, present;
    if ((st = check_keys(c, o, "power", keys))) return st;

    const cJSON *w;
    if ((st = get_object(c, o, "power", "window", 1, &w))) return st;
    static const char *const wk[] = {"align", "from", "to", NULL};
    if ((st = check_keys(c, w, "power.window", wk))) return st;
    if ((st = get_choice(c, w, "power.window", "align", aligns, 0, &tmp))) return st;
    s->power.align = tmp ? BL_ALIGN_RESPONSE : BL_ALIGN_ONSET;
    if ((st = get_number(c, w, "power.window", "from", NAN, &s->power.from, &present))) return st;
    if (!present) return bad(c, "power.window.from", NULL, "is required (seconds relative to the alignment point)");
    if ((st = get_number(c, w, "power.window", "to", NAN, &s->power.to, &present))) return st;
    if (!present) return bad(c, "power.window.to", NULL, "is required (seconds relative to the alignment point)");
    /* Limits before any arithmetic: sample indices are computed as round(seconds x rate) in 64 bits. */
    if (!(fabs(s->power.from) <= BL_MAX_WINDOW_SECONDS))
        return bad(c, "power.window.from", get(w, "from"), "must be within +-1e6 s of the alignment point");
    if (!(fabs(s->power.to) <= BL_MAX_WINDOW_SECONDS))
        return bad(c, "power.window.to", get(w, "to"), "must be within +-1e6 s of the alignment point");
    if (!(s->power.to > s->power.from))
        return bad(c, "power.window.to", get(w, "to"), "must be greater than power.window.from");
    double len = s->power.to - s->power.from;

    if ((st = get_number(c, o, "power", "segment", len, &s->power.segment, NULL))) return st;
    if (!(s->power.segment > 0)) return bad(c, "power.segment", get(o, "segment"), "must be > 0 (seconds)");
    if (s->power.segment > len * (1 + 1e-12))
        return bad(c, "power.segment", get(o, "segment"),
                   "must not be longer than the window (power.window.to - from)");
    if ((st = get_number(c, o, "power", "overlap", 0.5, &s->power.overlap, NULL))) return st;
    if (!(s->power.overlap >= 0 && s->power.overlap < 1))
        return bad(c, "power.overlap", get(o, "overlap"), "must be in [0, 1) (a fraction of the segment)");
    if ((st = get_choice(c, o, "power", "taper", tapers, 0, &tmp))) return st;
    if ((st = get_choice(c, o, "power", "detrend", detrends, 0, &tmp))) return st;
    s->power.detrend = tmp == 0 ? BL_DETREND_MEAN : tmp == 1 ? BL_DETREND_LINEAR : BL_DETREND_NONE;
    if ((st = get_choice(c, o, "power", "average", averages, 0, &s->power.median))) return st;

    const cJSON *b = get(o, "bands");
    if (!b) return bad(c, "power.bands", NULL, "is required (e.g. {\"theta\": [4, 8]})");
    if (!cJSON_IsObject(b) || !b->child)
        return bad(c, "power.bands", b, "must be a non-empty object of name: [lo, hi]");
    size_t nb = (size_t)cJSON_GetArraySize(b);
    if (!(s->power.bands = calloc(nb, sizeof *s->power.bands))) return nomem(c);
    for (const cJSON *it = b->child; it; it = it->next) {
        char k[256];
        snprintf(k, sizeof k, "power.bands.%s", it->string);
        for (size_t j = 0; j < s->power.n_bands; j++)
            if (strcmp(s->power.bands[j].name, it->string) == 0) return bad(c, k, it, "is given twice");
        if (!valid_name(it->string)) return bad(c, k, it, "band names may use letters, digits, '_', '-' and '.' only");
        if (!cJSON_IsArray(it) || cJSON_GetArraySize(it) != 2 || !cJSON_IsNumber(it->child) ||
            !cJSON_IsNumber(it->child->next))
            return bad(c, k, it, "must be [lo, hi] in Hz");
        double lo = it->child->valuedouble, hi = it->child->next->valuedouble;
        if (!(lo >= 0) || !isfinite(hi)) return bad(c, k, it, "edges must be finite and lo >= 0 Hz");
        if (!(lo < hi)) return bad(c, k, it, "lo must be below hi");
        if (isfinite(s->recordings.rate) && hi > s->recordings.rate / 2)
            return bad(c, k, it, "hi is above the Nyquist frequency (recordings.rate / 2)");
        bl_band_spec *bs = &s->power.bands[s->power.n_bands++];
        if (!(bs->name = bl_strdup(it->string))) return nomem(c);
        bs->lo = lo;
        bs->hi = hi;
    }
    if ((st = get_choice(c, o, "power", "scale", scales, 1, &tmp))) return st;
    s->power.scale = (bl_scale)tmp;
    if ((st = get_choice(c, o, "power", "standardize", stds, 1, &tmp))) return st;
    s->power.standardize = (bl_standardize)tmp;
    const cJSON *cond = get(o, "condition");
    if (s->power.standardize == BL_STANDARDIZE_PARTICIPANT_CONDITION) {
        if (!cond)
            return bad(c, "power.condition", NULL,
                       "is required with standardize \"participant_condition\" (the columns that define a condition)");
        if ((st = get_string_array(c, cond, "power.condition", 0, 0, &s->power.condition, &s->power.n_condition)))
            return st;
    } else if (cond) {
        return bad(c, "power.condition", cond, "is only used with standardize \"participant_condition\"");
    }
    if ((st = get_number(c, o, "power", "line_noise", 0, &s->power.line_noise, &present))) return st;
    if (present && s->power.line_noise != 50 && s->power.line_noise != 60)
        return bad(c, "power.line_noise", get(o, "line_noise"), "must be 50 or 60 (Hz)");

    const cJSON *a;
    if ((st = get_object(c, o, "power", "artifacts", 0, &a))) return st;
    if (a) {
        static const char *const ak[] = {"peak_to_peak", "flat", "clipping", NULL};
        if ((st = check_keys(c, a, "power.artifacts", ak))) return st;
        if ((st = get_number(c, a, "power.artifacts", "peak_to_peak", 0, &s->power.peak_to_peak, &present))) return st;
        if (present && !(s->power.peak_to_peak > 0))
            return bad(c, "power.artifacts.peak_to_peak", get(a, "peak_to_peak"), "must be > 0 (in recordings.unit)");
        if ((st = get_number(c, a, "power.artifacts", "flat", 0, &s->power.flat, &present))) return st;
        if (present && !(s->power.flat > 0))
            return bad(c, "power.artifacts.flat", get(a, "flat"), "must be > 0 (in recordings.unit)");
        if (s->power.peak_to_peak > 0 && s->power.flat >= s->power.peak_to_peak)
            return bad(c, "power.artifacts.flat", get(a, "flat"), "must be below power.artifacts.peak_to_peak");
        const cJSON *cl = get(a, "clipping");
        if (cl) {
            if (!cJSON_IsBool(cl)) return bad(c, "power.artifacts.clipping", cl, "must be true or false");
            s->power.clipping = cJSON_IsTrue(cl);
        }
    }
    return BL_OK;
}

static bl_status parse_fit(ctx *c, const cJSON *o, bl_study *s)
{
    static const char *const keys[] = {"participants", "starts", "quadrature", NULL};
    static const char *const modes[] = {"pooled", "separate", "hierarchical", NULL};
    bl_status st;
    int tmp;
    if ((st = check_keys(c, o, "fit", keys))) return st;
    if ((st = get_choice(c, o, "fit", "participants", modes, -1, &tmp))) return st;
    s->fit.participants_given = tmp >= 0;
    s->fit.participants = tmp == 1   ? BL_PARTICIPANTS_SEPARATE
                          : tmp == 2 ? BL_PARTICIPANTS_HIERARCHICAL
                                     : BL_PARTICIPANTS_POOLED;
    double nodes;
    if ((st = get_number(c, o, "fit", "quadrature", 1, &nodes, NULL))) return st;
    /* 1 node is the Laplace approximation; 3 effects x 20 nodes is 8,000 points per participant */
    if (!(nodes >= 1 && nodes <= 20 && nodes == floor(nodes)))
        return bad(c, "fit.quadrature", get(o, "quadrature"), "must be a whole number of nodes from 1 to 20");
    s->fit.quadrature = (int)nodes;
    if (s->fit.quadrature > 1 && s->fit.participants_given && s->fit.participants != BL_PARTICIPANTS_HIERARCHICAL)
        return bad(c, "fit.quadrature", get(o, "quadrature"),
                   "integrates participants' effects: it needs \"participants\": \"hierarchical\"");
    double starts;
    if ((st = get_number(c, o, "fit", "starts", 3, &starts, NULL))) return st;
    if (!(starts >= 1 && starts <= 1000 && starts == floor(starts)))
        return bad(c, "fit.starts", get(o, "starts"), "must be a whole number from 1 to 1000");
    s->fit.starts = (int)starts;
    return BL_OK;
}

/* ---- models ---- */

static void param_free(bl_param_spec *p)
{
    free_strings(p->per, p->n_per);
    free_strings(p->varies, p->n_varies);
    for (size_t i = 0; i < p->n_slopes; i++) {
        free(p->slopes[i].regressor);
        free_strings(p->slopes[i].by, p->slopes[i].n_by);
    }
    free(p->slopes);
    memset(p, 0, sizeof *p);
}

/* A deep copy of a parameter spec (for `extends`); partial copies are freed by param_free. */
static bl_status param_copy(ctx *c, bl_param_spec *d, const bl_param_spec *src)
{
    int ok;
    *d = *src;
    d->per = NULL;
    d->slopes = NULL;
    d->varies = NULL;
    d->n_per = d->n_slopes = d->n_varies = 0;
    d->per = copy_strings(src->per, src->n_per, &ok);
    if (!ok) return nomem(c);
    d->n_per = src->n_per;
    d->varies = copy_strings(src->varies, src->n_varies, &ok);
    if (!ok) return nomem(c);
    d->n_varies = src->n_varies;
    if (src->n_slopes) {
        if (!(d->slopes = calloc(src->n_slopes, sizeof *d->slopes))) return nomem(c);
        for (size_t i = 0; i < src->n_slopes; i++) {
            d->n_slopes = i + 1;
            if (!(d->slopes[i].regressor = bl_strdup(src->slopes[i].regressor))) return nomem(c);
            d->slopes[i].by = copy_strings(src->slopes[i].by, src->slopes[i].n_by, &ok);
            if (!ok) return nomem(c);
            d->slopes[i].n_by = src->slopes[i].n_by;
        }
    }
    return BL_OK;
}

static void param_default(bl_param_spec *p, int which)
{
    memset(p, 0, sizeof *p);
    if (which == BL_START) {
        p->is_fixed = 1;
        p->fixed = 0.5;
    } else if (which >= BL_DRIFT_SD) {
        p->is_fixed = 1;
        p->fixed = 0;
    }
}

static bl_status check_fixed(ctx *c, const char *k, const cJSON *v, int which, double x)
{
    int ok = 1;
    switch (which) {
    case BL_THRESHOLD: ok = x > 0; break;
    case BL_DRIFT: ok = 1; break;
    case BL_NONDECISION: ok = x >= 0; break;
    case BL_START: ok = x > 0 && x < 1; break;
    case BL_DRIFT_SD: ok = x >= 0; break;
    case BL_START_RANGE: ok = x >= 0 && x < 1; break;
    case BL_NONDECISION_RANGE: ok = x >= 0; break;
    case BL_CONTAMINATION: ok = x >= 0 && x < 1; break;
    default: break;
    }
    static const char *const ranges[BL_NPARAM] = {"> 0",  "any number", ">= 0 (seconds)", "in (0, 1)",
                                                  ">= 0", "in [0, 1)",  ">= 0 (seconds)", "in [0, 1)"};
    if (!ok) {
        char what[96];
        snprintf(what, sizeof what, "a fixed %s must be %s", param_names[which], ranges[which]);
        return bad(c, k, v, what);
    }
    return BL_OK;
}

/* Each `varies` entry names the intercept or one of the parameter's slopes, optionally ":<level>"
 * (levels are checked against the trials when the model is built); a fixed parameter has no
 * coefficient that could vary. */
static bl_status check_varies(ctx *c, const char *k, const cJSON *va, const bl_param_spec *p)
{
    if (p->n_varies && p->is_fixed) return bad(c, k, va, "names terms of a fixed parameter, which has no coefficients");
    for (size_t i = 0; i < p->n_varies; i++) {
        const char *t = p->varies[i];
        size_t len = strcspn(t, ":");
        int known = (len == 9 && !strncmp(t, "intercept", 9));
        for (size_t j = 0; !known && j < p->n_slopes; j++)
            known = strlen(p->slopes[j].regressor) == len && !strncmp(p->slopes[j].regressor, t, len);
        char what[320];
        if (!known) {
            snprintf(what, sizeof what,
                     "\"%s\" is neither \"intercept\" nor a slope of this parameter (give \"intercept\", a "
                     "regressor of its slopes, or either with \":<level>\")",
                     t);
            return bad(c, k, va, what);
        }
        if (t[len] == ':' && !t[len + 1]) {
            snprintf(what, sizeof what, "\"%s\": the level after ':' is empty", t);
            return bad(c, k, va, what);
        }
        for (size_t j = 0; j < i; j++)
            if (!strcmp(p->varies[j], t)) {
                snprintf(what, sizeof what, "\"%s\" is given twice", t);
                return bad(c, k, va, what);
            }
    }
    return BL_OK;
}

static bl_status parse_param(ctx *c, const cJSON *v, const char *path, int which, bl_param_spec *p)
{
    static const char *const keys[] = {"per", "slopes", "fixed", "link", "varies", NULL};
    static const char *const links[] = {"identity", "log", NULL};
    bl_status st;
    memset(p, 0, sizeof *p);
    if (!cJSON_IsObject(v)) return bad(c, path, v, "must be an object with per, slopes, fixed or link");
    if ((st = check_keys(c, v, path, keys))) return st;
    p->named = 1;
    const cJSON *fx = get(v, "fixed");
    const cJSON *per = get(v, "per");
    const cJSON *sl = get(v, "slopes");
    char k[256];
    if (fx) {
        join_key(k, sizeof k, path, "fixed");
        if (per || sl) return bad(c, k, fx, "cannot be combined with per or slopes");
        if (!cJSON_IsNumber(fx) || !isfinite(fx->valuedouble)) return bad(c, k, fx, "must be a number");
        if ((st = check_fixed(c, k, fx, which, fx->valuedouble))) return st;
        p->is_fixed = 1;
        p->fixed = fx->valuedouble;
    }
    if (per) {
        join_key(k, sizeof k, path, "per");
        if ((st = get_string_array(c, per, k, 0, 1, &p->per, &p->n_per))) return st;
    }
    if (sl) {
        join_key(k, sizeof k, path, "slopes");
        if (!cJSON_IsObject(sl)) return bad(c, k, sl, "must be an object {regressor: [columns]}");
        size_t n = (size_t)cJSON_GetArraySize(sl);
        if (n && !(p->slopes = calloc(n, sizeof *p->slopes))) return nomem(c);
        for (const cJSON *it = sl->child; it; it = it->next) {
            char kk[300];
            snprintf(kk, sizeof kk, "%s.%s", k, it->string);
            for (size_t j = 0; j < p->n_slopes; j++)
                if (strcmp(p->slopes[j].regressor, it->string) == 0) return bad(c, kk, it, "is given twice");
            if (!it->string[0]) return bad(c, kk, it, "a regressor name must not be empty");
            bl_slope_spec *ss = &p->slopes[p->n_slopes++];
            if (!(ss->regressor = bl_strdup(it->string))) return nomem(c);
            if ((st = get_string_array(c, it, kk, 0, 1, &ss->by, &ss->n_by))) return st;
        }
    }
    int link;
    if ((st = get_choice(c, v, path, "link", links, -1, &link))) return st;
    p->link = link < 0 ? BL_LINK_DEFAULT : link == 0 ? BL_LINK_IDENTITY : BL_LINK_LOG;
    const cJSON *va = get(v, "varies");
    if (va) {
        join_key(k, sizeof k, path, "varies");
        if ((st = get_string_array(c, va, k, 0, 1, &p->varies, &p->n_varies))) return st;
        p->varies_given = 1;
        if ((st = check_varies(c, k, va, p))) return st;
    }
    return BL_OK;
}

typedef struct {
    const cJSON *obj;
    int state; /* 0 todo, 1 in progress, 2 done */
} model_job;

static bl_status resolve_model(ctx *c, bl_study *s, model_job *jobs, size_t i)
{
    bl_model_spec *m = &s->models[i];
    if (jobs[i].state == 2) return BL_OK;
    char path[64];
    snprintf(path, sizeof path, "models[%zu]", i);
    if (jobs[i].state == 1) {
        char k[96];
        snprintf(k, sizeof k, "%s.extends", path);
        return bad(c, k, get(jobs[i].obj, "extends"), "models extend each other in a cycle");
    }
    jobs[i].state = 1;
    bl_status st;
    if (m->extends) {
        size_t b = s->n_models;
        for (size_t j = 0; j < s->n_models; j++)
            if (strcmp(s->models[j].name, m->extends) == 0) b = j;
        char k[96];
        snprintf(k, sizeof k, "%s.extends", path);
        if (b == s->n_models) {
            char what[300];
            snprintf(what, sizeof what, "model \"%s\" extends \"%s\", which is not a model of this study", m->name,
                     m->extends);
            return bad(c, k, get(jobs[i].obj, "extends"), what);
        }
        if (b == i) return bad(c, k, get(jobs[i].obj, "extends"), "a model cannot extend itself");
        if ((st = resolve_model(c, s, jobs, b))) return st;
        m->correlated = s->models[b].correlated;
        for (int p = 0; p < BL_NPARAM; p++) {
            param_free(&m->param[p]);
            if ((st = param_copy(c, &m->param[p], &s->models[b].param[p]))) return st;
        }
    } else {
        for (int p = 0; p < BL_NPARAM; p++) param_default(&m->param[p], p);
    }
    for (int p = 0; p < BL_NPARAM; p++) {
        const cJSON *v = cJSON_GetObjectItemCaseSensitive(jobs[i].obj, param_names[p]);
        if (!v) continue;
        char k[96];
        snprintf(k, sizeof k, "%s.%s", path, param_names[p]);
        bl_param_spec ps;
        st = parse_param(c, v, k, p, &ps);
        if (st) {
            param_free(&ps);
            return st;
        }
        param_free(&m->param[p]);
        m->param[p] = ps;
    }
    const cJSON *cor = cJSON_GetObjectItemCaseSensitive(jobs[i].obj, "correlated");
    if (cor) {
        char k[96];
        snprintf(k, sizeof k, "%s.correlated", path);
        if (!cJSON_IsBool(cor)) return bad(c, k, cor, "must be true or false");
        m->correlated = cJSON_IsTrue(cor);
    }
    jobs[i].state = 2;
    return BL_OK;
}

static bl_status parse_models(ctx *c, const cJSON *v, bl_study *s)
{
    if (!cJSON_IsArray(v)) return bad(c, "models", v, "must be an array of model objects");
    size_t n = (size_t)cJSON_GetArraySize(v);
    if (n == 0) return bad(c, "models", v, "must hold at least one model");
    if (!(s->models = calloc(n, sizeof *s->models))) return nomem(c);
    model_job *jobs = calloc(n, sizeof *jobs);
    if (!jobs) return nomem(c);
    bl_status st = BL_OK;
    const char *keys[BL_NPARAM + 4] = {"name", "extends", "correlated"};
    for (int p = 0; p < BL_NPARAM; p++) keys[3 + p] = param_names[p];
    keys[BL_NPARAM + 3] = NULL;
    size_t i = 0;
    for (const cJSON *it = v->child; it; it = it->next, i++) {
        char path[64];
        snprintf(path, sizeof path, "models[%zu]", i);
        s->n_models = i + 1;
        if (!cJSON_IsObject(it)) {
            st = bad(c, path, it, "must be an object with a name");
            goto done;
        }
        if ((st = check_keys(c, it, path, keys))) goto done;
        if ((st = require_string(c, it, path, "name", &s->models[i].name))) goto done;
        if ((st = get_string(c, it, path, "extends", NULL, &s->models[i].extends))) goto done;
        for (size_t j = 0; j < i; j++)
            if (strcmp(s->models[j].name, s->models[i].name) == 0) {
                char k[96];
                snprintf(k, sizeof k, "%s.name", path);
                st = bad(c, k, get(it, "name"), "another model has this name");
                goto done;
            }
        jobs[i].obj = it;
    }
    for (i = 0; i < n; i++)
        if ((st = resolve_model(c, s, jobs, i))) goto done;
done:
    free(jobs);
    return st;
}

/* `varies` and `correlated` describe participants' effects: a study that names another mode cannot use them. */
static bl_status check_hierarchical_keys(ctx *c, const cJSON *models, const bl_study *s)
{
    if (!s->fit.participants_given || s->fit.participants == BL_PARTICIPANTS_HIERARCHICAL) return BL_OK;
    const char *mode = s->fit.participants == BL_PARTICIPANTS_SEPARATE ? "separate" : "pooled";
    size_t i = 0;
    for (const cJSON *it = models->child; it; it = it->next, i++) {
        char k[128], what[200];
        snprintf(what, sizeof what,
                 "describes participants' effects, but fit.participants is \"%s\" (use \"hierarchical\")", mode);
        const cJSON *cor = get(it, "correlated");
        if (cor) {
            snprintf(k, sizeof k, "models[%zu].correlated", i);
            return bad(c, k, cor, what);
        }
        for (int p = 0; p < BL_NPARAM; p++) {
            const cJSON *pv = cJSON_GetObjectItemCaseSensitive(it, param_names[p]);
            const cJSON *va = cJSON_IsObject(pv) ? get(pv, "varies") : NULL;
            if (!va) continue;
            snprintf(k, sizeof k, "models[%zu].%s.varies", i, param_names[p]);
            return bad(c, k, va, what);
        }
    }
    return BL_OK;
}

bl_participants_mode bl_study_participants_mode(const bl_study *s, size_t n_participants)
{
    /* a mode set in the struct (not only parsed) counts as given too */
    if (s->fit.participants_given || s->fit.participants != BL_PARTICIPANTS_POOLED) return s->fit.participants;
    return n_participants >= 3 ? BL_PARTICIPANTS_HIERARCHICAL : BL_PARTICIPANTS_POOLED;
}

/* ---- entry points ---- */

bl_status bl_study_parse(const char *json, const char *path, bl_study **out, bl_error *err)
{
    *out = NULL;
    const char *name = path ? path : "study";
    ctx c = {name, err};
    cJSON *root = NULL;
    bl_status pst = bl_json_parse(json, name, &root, err);
    if (pst) return pst;
    bl_status st = BL_OK;
    bl_study *s = calloc(1, sizeof *s);
    if (!s) {
        cJSON_Delete(root);
        return nomem(&c);
    }
    s->path = bl_strdup(name);
    const char *slash = strrchr(name, '/');
    s->dir = slash ? strndup(name, (size_t)(slash - name) + (slash == name)) : bl_strdup(".");
    if (!s->path || !s->dir) {
        st = nomem(&c);
        goto fail;
    }
    s->recordings.rate = NAN;
    s->trials.rt_min = s->trials.rt_max = NAN;
    s->fit.starts = 3;
    s->fit.quadrature = 1;
    if (!cJSON_IsObject(root)) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: the study must be a JSON object {...}", name);
        goto fail;
    }
    static const char *const keys[] = {"trials", "recordings", "power", "fit", "models",
                                       "output", "scan",       "bids",  NULL};
    if ((st = check_keys(&c, root, "", keys))) goto fail;

    const cJSON *o;
    if ((st = get_object(&c, root, "", "bids", 0, &o))) goto fail;
    if (o && (st = parse_bids(&c, o, s))) goto fail;
    if ((st = get_object(&c, root, "", "trials", 1, &o))) goto fail;
    if ((st = parse_trials(&c, o, s))) goto fail;
    if ((st = get_object(&c, root, "", "recordings", 0, &o))) goto fail;
    if (o) {
        s->has_recordings = 1;
        if ((st = parse_recordings(&c, o, s))) goto fail;
    }
    if ((st = get_object(&c, root, "", "power", 0, &o))) goto fail;
    if (o) {
        s->has_power = 1;
        if ((st = parse_power(&c, o, s))) goto fail;
    }
    if (s->has_power && !s->has_recordings) {
        st = bad(&c, "recordings", NULL, "is required when the study has a \"power\" section");
        goto fail;
    }
    if (s->has_recordings && !s->has_power) {
        st = bad(&c, "power", NULL, "is required when the study has a \"recordings\" section");
        goto fail;
    }
    if ((st = get_object(&c, root, "", "fit", 0, &o))) goto fail;
    if (o && (st = parse_fit(&c, o, s))) goto fail;
    const cJSON *models = get(root, "models");
    if (models && (st = parse_models(&c, models, s))) goto fail;
    if (models && (st = check_hierarchical_keys(&c, models, s))) goto fail;
    char *outname = NULL;
    if ((st = get_string(&c, root, "", "output", "results", &outname))) goto fail;
    s->output = resolve_path(s->dir, outname);
    free(outname);
    if (!s->output) {
        st = nomem(&c);
        goto fail;
    }
    /* the "scan" block is checked by src/scan/scan_spec.c; keep a copy of it */
    if (get(root, "scan") && !(s->scan_json = cJSON_Duplicate(get(root, "scan"), 1))) {
        st = nomem(&c);
        goto fail;
    }
    cJSON_Delete(root);
    *out = s;
    return BL_OK;
fail:
    cJSON_Delete(root);
    bl_study_destroy(s);
    return st;
}

bl_status bl_study_load(const char *path, bl_study **out, bl_error *err)
{
    *out = NULL;
    char *text = NULL;
    bl_status st = bl_json_read_file(path, "the study file", &text, err);
    if (!st) st = bl_study_parse(text, path, out, err);
    free(text);
    return st;
}

/* ---- back to JSON (provenance) ---- */

static cJSON *string_array(char *const *v, size_t n)
{
    cJSON *a = cJSON_CreateArray();
    for (size_t i = 0; a && i < n; i++) cJSON_AddItemToArray(a, cJSON_CreateString(v[i]));
    return a;
}

static cJSON *num_or_null(double x) { return isfinite(x) ? cJSON_CreateNumber(x) : cJSON_CreateNull(); }

bl_status bl_study_to_json(const bl_study *s, char **out, bl_error *err)
{
    *out = NULL;
    static const char *const aligns[] = {"onset", "response"};
    static const char *const detrends[] = {"mean", "linear", "none"};
    static const char *const scales[] = {"linear", "log10", "db"};
    static const char *const stds[] = {"none", "participant", "participant_condition"};
    static const char *const links[] = {"default", "identity", "log"};
    /* Failures counted while this document is built (not since the program started: one earlier
     * transient failure must not make every later call fail). */
    unsigned long failures_before = bl_json_alloc_failures();
    cJSON *root = cJSON_CreateObject();
    if (!root) return bl_error_set(err, BL_ERR_NOMEM, "out of memory writing the study as JSON");
    if (s->bids.root) { /* trials.file is then the root folder: the recorded study keeps the block instead */
        cJSON *b = cJSON_AddObjectToObject(root, "bids");
        cJSON_AddStringToObject(b, "root", s->bids.root);
        cJSON_AddStringToObject(b, "task", s->bids.task);
    }
    cJSON *t = cJSON_AddObjectToObject(root, "trials");
    if (!s->bids.root || strcmp(s->trials.file, s->bids.root) != 0) cJSON_AddStringToObject(t, "file", s->trials.file);
    cJSON_AddStringToObject(t, "participant", s->trials.participant);
    if (s->trials.trial_given) cJSON_AddStringToObject(t, "trial", s->trials.trial);
    cJSON_AddStringToObject(t, "rt", s->trials.rt);
    cJSON_AddStringToObject(t, "rt_unit", s->trials.rt_in_ms ? "ms" : "s");
    cJSON_AddStringToObject(t, "response", s->trials.response);
    cJSON_AddItemToObject(t, "upper", string_array(s->trials.upper, s->trials.n_upper));
    if (s->trials.stimulus) cJSON_AddStringToObject(t, "stimulus", s->trials.stimulus);
    else cJSON_AddNullToObject(t, "stimulus");
    if (s->split.n) {
        cJSON *sp = cJSON_AddObjectToObject(t, "split");
        for (size_t i = 0; sp && i < s->split.n; i++)
            cJSON_AddItemToObject(sp, s->split.column[i], string_array(s->split.into[i], s->split.n_into[i]));
    }
    cJSON *k = cJSON_AddObjectToObject(t, "keep");
    cJSON_AddItemToObject(k, "rt_min", num_or_null(s->trials.rt_min));
    cJSON_AddItemToObject(k, "rt_max", num_or_null(s->trials.rt_max));
    if (s->has_recordings) {
        cJSON *r = cJSON_AddObjectToObject(root, "recordings");
        cJSON_AddStringToObject(r, "file", s->recordings.file);
        cJSON_AddStringToObject(r, "onset", s->recordings.onset);
        if (s->recordings.n_gain_formats) {
            cJSON *g = cJSON_AddObjectToObject(r, "gain");
            for (size_t i = 0; g && i < s->recordings.n_gain_formats; i++)
                cJSON_AddNumberToObject(g, s->recordings.gain_format[i], s->recordings.gain_value[i]);
        } else cJSON_AddNumberToObject(r, "gain", s->recordings.gain);
        cJSON_AddStringToObject(r, "unit", s->recordings.unit);
        cJSON_AddStringToObject(r, "average", s->recordings.average_power ? "power" : "signal");
        if (s->recordings.series) cJSON_AddStringToObject(r, "series", s->recordings.series);
        cJSON_AddItemToObject(r, "rate", num_or_null(s->recordings.rate));
        cJSON_AddItemToObject(r, "channels", string_array(s->recordings.channels, s->recordings.n_channels));
    }
    if (s->has_power) {
        cJSON *p = cJSON_AddObjectToObject(root, "power");
        cJSON *w = cJSON_AddObjectToObject(p, "window");
        cJSON_AddStringToObject(w, "align", aligns[s->power.align]);
        cJSON_AddNumberToObject(w, "from", s->power.from);
        cJSON_AddNumberToObject(w, "to", s->power.to);
        cJSON_AddNumberToObject(p, "segment", s->power.segment);
        cJSON_AddNumberToObject(p, "overlap", s->power.overlap);
        cJSON_AddStringToObject(p, "taper", "hann");
        cJSON_AddStringToObject(p, "detrend", detrends[s->power.detrend]);
        cJSON_AddStringToObject(p, "average", s->power.median ? "median" : "mean");
        cJSON *b = cJSON_AddObjectToObject(p, "bands");
        for (size_t i = 0; i < s->power.n_bands; i++) {
            double e[2] = {s->power.bands[i].lo, s->power.bands[i].hi};
            cJSON_AddItemToObject(b, s->power.bands[i].name, cJSON_CreateDoubleArray(e, 2));
        }
        cJSON_AddStringToObject(p, "scale", scales[s->power.scale]);
        cJSON_AddStringToObject(p, "standardize", stds[s->power.standardize]);
        if (s->power.n_condition)
            cJSON_AddItemToObject(p, "condition", string_array(s->power.condition, s->power.n_condition));
        if (s->power.line_noise > 0) cJSON_AddNumberToObject(p, "line_noise", s->power.line_noise);
        else cJSON_AddNullToObject(p, "line_noise");
        cJSON *a = cJSON_AddObjectToObject(p, "artifacts");
        cJSON_AddItemToObject(a, "peak_to_peak",
                              s->power.peak_to_peak > 0 ? cJSON_CreateNumber(s->power.peak_to_peak)
                                                        : cJSON_CreateNull());
        cJSON_AddItemToObject(a, "flat", s->power.flat > 0 ? cJSON_CreateNumber(s->power.flat) : cJSON_CreateNull());
        cJSON_AddBoolToObject(a, "clipping", s->power.clipping);
    }
    cJSON *f = cJSON_AddObjectToObject(root, "fit");
    if (s->fit.participants_given) /* otherwise decided by the number of participants */
        cJSON_AddStringToObject(f, "participants",
                                s->fit.participants == BL_PARTICIPANTS_SEPARATE       ? "separate"
                                : s->fit.participants == BL_PARTICIPANTS_HIERARCHICAL ? "hierarchical"
                                                                                      : "pooled");
    cJSON_AddNumberToObject(f, "starts", s->fit.starts);
    cJSON_AddNumberToObject(f, "quadrature", s->fit.quadrature);
    cJSON *ms = cJSON_AddArrayToObject(root, "models");
    for (size_t i = 0; i < s->n_models; i++) {
        const bl_model_spec *m = &s->models[i];
        cJSON *mo = cJSON_CreateObject();
        cJSON_AddItemToArray(ms, mo);
        cJSON_AddStringToObject(mo, "name", m->name);
        if (m->extends) cJSON_AddStringToObject(mo, "extends", m->extends);
        for (int p = 0; p < BL_NPARAM; p++) {
            const bl_param_spec *ps = &m->param[p];
            cJSON *po = cJSON_AddObjectToObject(mo, param_names[p]);
            if (ps->is_fixed) {
                cJSON_AddNumberToObject(po, "fixed", ps->fixed);
            } else {
                cJSON_AddItemToObject(po, "per", string_array(ps->per, ps->n_per));
                cJSON *so = cJSON_AddObjectToObject(po, "slopes");
                for (size_t j = 0; j < ps->n_slopes; j++)
                    cJSON_AddItemToObject(so, ps->slopes[j].regressor,
                                          string_array(ps->slopes[j].by, ps->slopes[j].n_by));
            }
            if (ps->link != BL_LINK_DEFAULT) cJSON_AddStringToObject(po, "link", links[ps->link]);
            if (ps->varies_given) cJSON_AddItemToObject(po, "varies", string_array(ps->varies, ps->n_varies));
        }
        if (m->correlated) cJSON_AddBoolToObject(mo, "correlated", 1);
    }
    cJSON_AddStringToObject(root, "output", s->output);
    if (s->scan_json) { /* a failed allocation here is counted, and caught just below */
        cJSON *scan = cJSON_Duplicate(s->scan_json, 1);
        if (scan && !cJSON_AddItemToObject(root, "scan", scan)) cJSON_Delete(scan);
    }
    char *txt = bl_json_alloc_failures() != failures_before ? NULL : cJSON_Print(root);
    cJSON_Delete(root);
    /* cJSON_Print allocates with its hooks (malloc by default); hand back a plain malloc'd copy */
    *out = txt ? bl_strdup(txt) : NULL;
    cJSON_free(txt);
    if (!*out) return bl_error_set(err, BL_ERR_NOMEM, "out of memory writing the study as JSON");
    return BL_OK;
}

void bl_study_destroy(bl_study *s)
{
    if (!s) return;
    free(s->path);
    free(s->dir);
    free(s->trials.file);
    for (size_t i = 0; i < s->recordings.n_gain_formats; i++) free(s->recordings.gain_format[i]);
    free(s->recordings.gain_format);
    free(s->recordings.gain_value);
    free(s->recordings.series);
    free(s->bids.root);
    free(s->bids.task);
    for (size_t i = 0; i < s->split.n; i++) {
        free(s->split.column[i]);
        for (size_t k = 0; k < s->split.n_into[i]; k++) free(s->split.into[i][k]);
        free(s->split.into[i]);
    }
    free(s->split.column);
    free(s->split.into);
    free(s->split.n_into);
    free(s->trials.participant);
    free(s->trials.rt);
    free(s->trials.response);
    free_strings(s->trials.upper, s->trials.n_upper);
    free(s->trials.stimulus);
    free(s->trials.trial);
    free(s->recordings.file);
    free(s->recordings.onset);
    free(s->recordings.unit);
    free_strings(s->recordings.channels, s->recordings.n_channels);
    for (size_t i = 0; i < s->power.n_bands; i++) free(s->power.bands[i].name);
    free(s->power.bands);
    free_strings(s->power.condition, s->power.n_condition);
    for (size_t i = 0; i < s->n_models; i++) {
        free(s->models[i].name);
        free(s->models[i].extends);
        for (int p = 0; p < BL_NPARAM; p++) param_free(&s->models[i].param[p]);
    }
    free(s->models);
    free(s->output);
    cJSON_Delete(s->scan_json);
    free(s);
}
