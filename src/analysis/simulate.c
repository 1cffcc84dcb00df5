/* Synthetic studies with known truth: scenario parsing, signal generation, behaviour drawn with the
 * exact Wiener sampler from the band power the study itself measures.
 *
 * Signal model (docs/simulate.md): per contact, Gaussian noise shaped in the frequency domain to a
 * 1/f^exponent power spectrum above a corner frequency (spectral shaping of white noise, e.g.
 * Timmer & Koenig 1995, "On generating power law noise", Astron. Astrophys. 300:707, with the random
 * amplitudes of their method replaced by the Gaussian spectrum of shaped white noise); plus a
 * common-mode signal added identically to every contact (its own 1/f noise and a mains line), which a
 * bipolar difference removes exactly; plus, per trial and band, a sine burst with a Tukey envelope
 * (cosine-tapered, taper fraction 0.2; common practice) whose peak amplitude is log-normal across trials.
 * Samples are stored as 24-bit PCM normalised to the scenario's full scale, so the study reads them back
 * with gain = full_scale.
 */
#include "engine/wiener_sample.h"
#include "core/gsl_guard.h"
#include "analysis/simulate.h"

#include "core/output.h"
#include "analysis/analysis_internal.h"
#include "signal/power.h"
#include "core/json.h"
#include "design/study.h"
#include "design/trials.h"
#include "bandlink/wiener.h"

#include <cjson/cJSON.h>
#include <errno.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_fft_halfcomplex.h>
#include <gsl/gsl_fft_real.h>
#include <gsl/gsl_randist.h>
#include <math.h>
#include <sndfile.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#ifdef _OPENMP
#include <omp.h>
#endif

/* Level combinations are labelled by joining the levels with this separator, as the fit labels them. */
#define LEVEL_SEP ":"

typedef struct {
    char *name;
    char **levels;
    size_t n_levels;
} factor;

typedef struct {
    char *name;
    double f_lo, f_hi;  /* Hz, frequency drawn uniformly per trial */
    double from, to;    /* s relative to onset */
    double amplitude;   /* median peak amplitude, unit */
    double variability; /* SD of the natural log of the amplitude across trials */
    double *weights;    /* per contact */
} burst_spec;

typedef struct {
    char *regressor;
    size_t *by; /* factor indices */
    size_t n_by;
    double *values; /* per level combination of `by` (1 value when n_by = 0) */
    double spread;  /* SD of each participant's offset, shared by every level; NAN when not given */
} truth_slope;

typedef struct {
    int given;
    size_t *per; /* factor indices */
    size_t n_per;
    double *intercept; /* per level combination (1 when n_per = 0) */
    truth_slope *slopes;
    size_t n_slopes;
    int has_spread;          /* a "spread" object was given */
    double intercept_spread; /* SD of each participant's intercept offset, shared by every level; NAN: not given */
} truth_param;

struct bl_scenario {
    char *path;
    char *name;
    unsigned long seed;
    char *participant_column;
    char **participants;
    size_t n_participants;
    size_t trials_per_participant;
    factor *factors;
    size_t n_factors;
    char *stimulus_column, *choice_column;
    char *stimulus_levels[2];
    double first_onset, interval_lo, interval_hi, tail;
    int wav;
    double rate;
    size_t contacts;
    char **channels;
    size_t n_channels;
    char *unit;
    double full_scale;
    double bg_rms, bg_exponent, bg_corner;
    double cm_rms, cm_exponent, line_frequency, line_amplitude;
    burst_spec *bursts;
    size_t n_bursts;
    truth_param truth[BL_NPARAM];
    int any_spread; /* some parameter has a "spread": truth.json then lists each participant's coefficients */
    cJSON *keep, *power, *fit, *models, *scan;
    char *truth_model;
};

/* ------------------------------------------------------------------------------------------------ */
/* Strict JSON access: every error names the scenario file and the key path. */

typedef struct {
    const char *file;
    bl_error *err;
} ctx;

static bl_status bad(ctx *c, const char *path, const char *fmt, ...) BL_PRINTF(3, 4);
static bl_status bad(ctx *c, const char *path, const char *fmt, ...)
{
    char msg[600];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    return bl_error_set(c->err, BL_ERR_INPUT, "%s: %s: %s", c->file, path, msg);
}

static char *dupstr(const char *s)
{
    if (!s) return NULL;
    size_t n = strlen(s) + 1;
    char *p = malloc(n);
    if (p) memcpy(p, s, n);
    return p;
}

static void join_path(char *out, size_t size, const char *path, const char *key)
{
    if (!path || !path[0]) snprintf(out, size, "%s", key);
    else snprintf(out, size, "%s.%s", path, key);
}

static bl_status check_keys(ctx *c, const cJSON *obj, const char *path, const char *const *allowed)
{
    if (!cJSON_IsObject(obj)) return bad(c, path[0] ? path : "(top level)", "must be an object");
    for (const cJSON *it = obj->child; it; it = it->next) {
        int ok = 0;
        for (const char *const *a = allowed; *a; a++)
            if (strcmp(*a, it->string) == 0) ok = 1;
        if (!ok) {
            char p[300];
            join_path(p, sizeof p, path, it->string);
            return bad(c, p, "unknown key");
        }
        for (const cJSON *o = obj->child; o != it; o = o->next)
            if (strcmp(o->string, it->string) == 0) {
                char p[300];
                join_path(p, sizeof p, path, it->string);
                return bad(c, p, "key given twice");
            }
    }
    return BL_OK;
}

static const cJSON *item(const cJSON *obj, const char *key) { return cJSON_GetObjectItemCaseSensitive(obj, key); }

/* A number at obj.key within [lo, hi] (open ends when the flags say so); `def` when absent and not required. */
static bl_status get_num(ctx *c, const cJSON *obj, const char *path, const char *key, int required, double def,
                         double lo, double hi, double *out)
{
    char p[300];
    join_path(p, sizeof p, path, key);
    const cJSON *v = item(obj, key);
    if (!v) {
        if (required) return bad(c, p, "required key is missing");
        *out = def;
        return BL_OK;
    }
    if (!cJSON_IsNumber(v) || !isfinite(v->valuedouble)) return bad(c, p, "must be a number");
    if (v->valuedouble < lo || v->valuedouble > hi)
        return bad(c, p, "%.10g is outside [%.10g, %.10g]", v->valuedouble, lo, hi);
    *out = v->valuedouble;
    return BL_OK;
}

static bl_status get_str(ctx *c, const cJSON *obj, const char *path, const char *key, const char *def, char **out)
{
    char p[300];
    join_path(p, sizeof p, path, key);
    const cJSON *v = item(obj, key);
    if (!v) {
        if (!def) return bad(c, p, "required key is missing");
        *out = dupstr(def);
    } else {
        if (!cJSON_IsString(v) || !v->valuestring[0]) return bad(c, p, "must be a non-empty string");
        if (strpbrk(v->valuestring, ",\"\n\r\t"))
            return bad(c, p, "'%s' contains a comma, quote, tab or line break", v->valuestring);
        *out = dupstr(v->valuestring);
    }
    return *out ? BL_OK : bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
}

/* An array of non-empty, distinct strings. */
static bl_status get_str_array(ctx *c, const cJSON *v, const char *p, size_t min, char ***out, size_t *n)
{
    if (!cJSON_IsArray(v)) return bad(c, p, "must be an array of strings");
    size_t k = (size_t)cJSON_GetArraySize(v);
    if (k < min) return bad(c, p, "needs at least %zu entries", min);
    char **a = calloc(k ? k : 1, sizeof *a);
    if (!a) return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
    *out = a;
    *n = 0;
    size_t i = 0;
    for (const cJSON *e = v->child; e; e = e->next, i++) {
        if (!cJSON_IsString(e) || !e->valuestring[0]) return bad(c, p, "entry %zu must be a non-empty string", i);
        if (strpbrk(e->valuestring, ",\"\n\r\t:/\\{}"))
            return bad(c, p, "entry '%s' contains one of , : / \\ { } a quote, tab or line break", e->valuestring);
        for (size_t j = 0; j < i; j++)
            if (strcmp(a[j], e->valuestring) == 0) return bad(c, p, "'%s' is listed twice", e->valuestring);
        if (!(a[i] = dupstr(e->valuestring))) return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
        *n = i + 1;
    }
    return BL_OK;
}

static void free_strs(char **a, size_t n)
{
    if (!a) return;
    for (size_t i = 0; i < n; i++) free(a[i]);
    free(a);
}

/* ------------------------------------------------------------------------------------------------ */

void bl_scenario_destroy(bl_scenario *sc)
{
    if (!sc) return;
    free(sc->path);
    free(sc->name);
    free(sc->participant_column);
    free_strs(sc->participants, sc->n_participants);
    for (size_t i = 0; i < sc->n_factors; i++) {
        free(sc->factors[i].name);
        free_strs(sc->factors[i].levels, sc->factors[i].n_levels);
    }
    free(sc->factors);
    free(sc->stimulus_column);
    free(sc->choice_column);
    free(sc->stimulus_levels[0]);
    free(sc->stimulus_levels[1]);
    free_strs(sc->channels, sc->n_channels);
    free(sc->unit);
    for (size_t i = 0; i < sc->n_bursts; i++) {
        free(sc->bursts[i].name);
        free(sc->bursts[i].weights);
    }
    free(sc->bursts);
    for (int p = 0; p < BL_NPARAM; p++) {
        truth_param *t = &sc->truth[p];
        free(t->per);
        free(t->intercept);
        for (size_t s = 0; s < t->n_slopes; s++) {
            free(t->slopes[s].regressor);
            free(t->slopes[s].by);
            free(t->slopes[s].values);
        }
        free(t->slopes);
    }
    cJSON_Delete(sc->keep);
    cJSON_Delete(sc->power);
    cJSON_Delete(sc->fit);
    cJSON_Delete(sc->scan);
    cJSON_Delete(sc->models);
    free(sc->truth_model);
    free(sc);
}

unsigned long bl_scenario_seed(const bl_scenario *sc) { return sc->seed; }

static size_t n_combos(const bl_scenario *sc, const size_t *f, size_t n)
{
    size_t k = 1;
    for (size_t i = 0; i < n; i++) k *= sc->factors[f[i]].n_levels;
    return k;
}

/* Label of combination `idx` (first factor slowest), levels joined with LEVEL_SEP. */
static void combo_label(const bl_scenario *sc, const size_t *f, size_t n, size_t idx, char *out, size_t size)
{
    size_t stride = n_combos(sc, f, n);
    out[0] = '\0';
    size_t len = 0;
    for (size_t i = 0; i < n; i++) {
        stride /= sc->factors[f[i]].n_levels;
        size_t lv = idx / stride % sc->factors[f[i]].n_levels;
        len += (size_t)snprintf(out + len, len < size ? size - len : 0, "%s%s", i ? LEVEL_SEP : "",
                                sc->factors[f[i]].levels[lv]);
    }
}

/* Combination index of a trial from its level index per factor. */
static size_t combo_index(const bl_scenario *sc, const size_t *f, size_t n, const size_t *level_of_factor)
{
    size_t idx = 0;
    for (size_t i = 0; i < n; i++) idx = idx * sc->factors[f[i]].n_levels + level_of_factor[f[i]];
    return idx;
}

/* Columns named in `per`/`by`: condition factors only. */
static bl_status parse_factor_list(ctx *c, const bl_scenario *sc, const cJSON *v, const char *p, size_t **out,
                                   size_t *n)
{
    char **names = NULL;
    size_t k = 0;
    bl_status st = get_str_array(c, v, p, 0, &names, &k);
    if (st == BL_OK) {
        *out = calloc(k ? k : 1, sizeof **out);
        if (!*out) st = bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
    }
    for (size_t i = 0; st == BL_OK && i < k; i++) {
        size_t j = 0;
        while (j < sc->n_factors && strcmp(sc->factors[j].name, names[i]) != 0) j++;
        if (j == sc->n_factors) st = bad(c, p, "'%s' is not one of the scenario's conditions", names[i]);
        else (*out)[i] = j;
    }
    if (st == BL_OK) *n = k;
    free_strs(names, k);
    return st;
}

/* A value per level combination: a number (only with no factors) or an object {label: number} covering
 * every combination exactly. */
static bl_status parse_values(ctx *c, const bl_scenario *sc, const cJSON *v, const char *p, const size_t *f, size_t n,
                              double **out)
{
    size_t k = n_combos(sc, f, n);
    *out = calloc(k, sizeof **out);
    if (!*out) return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
    if (n == 0) {
        if (!cJSON_IsNumber(v) || !isfinite(v->valuedouble)) return bad(c, p, "must be a number");
        (*out)[0] = v->valuedouble;
        return BL_OK;
    }
    if (!cJSON_IsObject(v)) return bad(c, p, "must be an object with one number per level combination");
    for (size_t i = 0; i < k; i++) {
        char label[256], q[600];
        combo_label(sc, f, n, i, label, sizeof label);
        const cJSON *e = item(v, label);
        snprintf(q, sizeof q, "%s.%s", p, label);
        if (!e) return bad(c, q, "missing (every level combination needs a value)");
        if (!cJSON_IsNumber(e) || !isfinite(e->valuedouble)) return bad(c, q, "must be a number");
        (*out)[i] = e->valuedouble;
    }
    for (const cJSON *e = v->child; e; e = e->next) {
        int found = 0;
        for (size_t i = 0; i < k && !found; i++) {
            char label[256];
            combo_label(sc, f, n, i, label, sizeof label);
            found = strcmp(label, e->string) == 0;
        }
        if (!found) {
            char q[600];
            snprintf(q, sizeof q, "%s.%s", p, e->string);
            return bad(c, q, "unknown level combination (levels are joined with '%s')", LEVEL_SEP);
        }
    }
    return BL_OK;
}

/* truth.<parameter>.slopes: {regressor: number} or {regressor: {"by": [columns], "values": {level: number}}}. */
static bl_status parse_truth_slopes(ctx *c, bl_scenario *sc, truth_param *tp, const cJSON *sl, const char *q)
{
    bl_status st;
    if (!cJSON_IsObject(sl)) return bad(c, q, "must be an object {regressor: value}");
    size_t ns = (size_t)cJSON_GetArraySize(sl);
    tp->slopes = calloc(ns ? ns : 1, sizeof *tp->slopes);
    if (!tp->slopes) return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
    for (const cJSON *se = sl->child; se; se = se->next) {
        truth_slope *s = &tp->slopes[tp->n_slopes++];
        s->spread = NAN;
        char r[500];
        snprintf(r, sizeof r, "%s.%s", q, se->string);
        if (!(s->regressor = dupstr(se->string))) return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
        if (cJSON_IsNumber(se)) {
            if ((st = parse_values(c, sc, se, r, NULL, 0, &s->values))) return st;
            continue;
        }
        static const char *const skeys[] = {"by", "values", NULL};
        if ((st = check_keys(c, se, r, skeys))) return st;
        char rr[600];
        snprintf(rr, sizeof rr, "%s.by", r);
        const cJSON *by = item(se, "by");
        if (!by) return bad(c, rr, "required key is missing");
        if ((st = parse_factor_list(c, sc, by, rr, &s->by, &s->n_by))) return st;
        snprintf(rr, sizeof rr, "%s.values", r);
        const cJSON *vals = item(se, "values");
        if (!vals) return bad(c, rr, "required key is missing");
        if ((st = parse_values(c, sc, vals, rr, s->by, s->n_by, &s->values))) return st;
    }
    return BL_OK;
}

/* truth.<parameter>.spread: {term: SD}, term "intercept" or one of the parameter's slopes; SD >= 0 on the
 * parameter's (identity) scale. Parsed after the slopes, whose names are the allowed keys. */
static bl_status parse_truth_spread(ctx *c, truth_param *tp, const cJSON *sp, const char *q)
{
    if (!cJSON_IsObject(sp)) return bad(c, q, "must be an object {term: SD} (term: intercept or a slope's regressor)");
    for (const cJSON *e = sp->child; e; e = e->next) {
        char r[500];
        snprintf(r, sizeof r, "%s.%s", q, e->string);
        double *sd = NULL;
        if (strcmp(e->string, "intercept") == 0) sd = &tp->intercept_spread;
        for (size_t s = 0; !sd && s < tp->n_slopes; s++)
            if (strcmp(tp->slopes[s].regressor, e->string) == 0) sd = &tp->slopes[s].spread;
        if (!sd) {
            char terms[400] = "intercept";
            size_t len = strlen(terms);
            for (size_t s = 0; s < tp->n_slopes && len < sizeof terms; s++)
                len += (size_t)snprintf(terms + len, sizeof terms - len, ", %s", tp->slopes[s].regressor);
            return bad(c, r, "'%s' is not a term of this parameter (terms: %s)", e->string, terms);
        }
        if (!isnan(*sd)) return bad(c, r, "key given twice");
        if (!cJSON_IsNumber(e) || !isfinite(e->valuedouble)) return bad(c, r, "must be a number (an SD >= 0)");
        if (!(e->valuedouble >= 0)) return bad(c, r, "%.10g is negative (an SD must be >= 0)", e->valuedouble);
        *sd = e->valuedouble;
    }
    tp->has_spread = 1;
    return BL_OK;
}

static bl_status parse_truth(ctx *c, bl_scenario *sc, const cJSON *t)
{
    static const char *const params[] = {"threshold", "drift",       "nondecision",       "start",
                                         "drift_sd",  "start_range", "nondecision_range", NULL};
    bl_status st = check_keys(c, t, "truth", params);
    if (st) return st;
    for (const cJSON *pe = t->child; pe; pe = pe->next) {
        int pi = bl_param_index(pe->string);
        truth_param *tp = &sc->truth[pi];
        char path[300];
        snprintf(path, sizeof path, "truth.%s", pe->string);
        static const char *const keys[] = {"intercept", "per", "slopes", "spread", NULL};
        if ((st = check_keys(c, pe, path, keys))) return st;
        tp->given = 1;
        tp->intercept_spread = NAN;
        char q[400];
        const cJSON *per = item(pe, "per");
        if (per) {
            snprintf(q, sizeof q, "%s.per", path);
            if ((st = parse_factor_list(c, sc, per, q, &tp->per, &tp->n_per))) return st;
        }
        const cJSON *ic = item(pe, "intercept");
        snprintf(q, sizeof q, "%s.intercept", path);
        if (!ic) return bad(c, q, "required key is missing");
        if ((st = parse_values(c, sc, ic, q, tp->per, tp->n_per, &tp->intercept))) return st;
        const cJSON *sl = item(pe, "slopes");
        snprintf(q, sizeof q, "%s.slopes", path);
        if (sl && (st = parse_truth_slopes(c, sc, tp, sl, q))) return st;
        const cJSON *sp = item(pe, "spread");
        snprintf(q, sizeof q, "%s.spread", path);
        if (sp && (st = parse_truth_spread(c, tp, sp, q))) return st;
        if (sp) sc->any_spread = 1;
    }
    static const char *const required[] = {"threshold", "drift", "nondecision"};
    for (int i = 0; i < 3; i++)
        if (!sc->truth[bl_param_index(required[i])].given) {
            char q[100];
            snprintf(q, sizeof q, "truth.%s", required[i]);
            return bad(c, q, "required key is missing");
        }
    return BL_OK;
}

static bl_status parse_bursts(ctx *c, bl_scenario *sc, const cJSON *b)
{
    if (!cJSON_IsObject(b)) return bad(c, "bursts", "must be an object {name: burst}");
    size_t n = (size_t)cJSON_GetArraySize(b);
    sc->bursts = calloc(n ? n : 1, sizeof *sc->bursts);
    if (!sc->bursts) return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
    bl_status st;
    for (const cJSON *e = b->child; e; e = e->next) {
        burst_spec *s = &sc->bursts[sc->n_bursts++];
        char path[300], q[400];
        snprintf(path, sizeof path, "bursts.%s", e->string);
        static const char *const keys[] = {"frequency", "from", "to", "amplitude", "variability", "contacts", NULL};
        if ((st = check_keys(c, e, path, keys))) return st;
        if (!(s->name = dupstr(e->string))) return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
        const cJSON *f = item(e, "frequency");
        snprintf(q, sizeof q, "%s.frequency", path);
        if (!f) return bad(c, q, "required key is missing");
        if (!cJSON_IsArray(f) || cJSON_GetArraySize(f) != 2 || !cJSON_IsNumber(f->child) ||
            !cJSON_IsNumber(f->child->next))
            return bad(c, q, "must be [low, high] in Hz");
        s->f_lo = f->child->valuedouble;
        s->f_hi = f->child->next->valuedouble;
        if (!(s->f_lo > 0 && s->f_hi >= s->f_lo && s->f_hi < sc->rate / 2))
            return bad(c, q, "[%g, %g] must satisfy 0 < low <= high < rate/2 = %g Hz", s->f_lo, s->f_hi, sc->rate / 2);
        if ((st = get_num(c, e, path, "from", 1, 0, -60, 60, &s->from)) ||
            (st = get_num(c, e, path, "to", 1, 0, -60, 60, &s->to)) ||
            (st = get_num(c, e, path, "amplitude", 1, 0, 0, 1e12, &s->amplitude)) ||
            (st = get_num(c, e, path, "variability", 0, 0.5, 0, 5, &s->variability)))
            return st;
        if (!(s->to > s->from)) {
            snprintf(q, sizeof q, "%s.to", path);
            return bad(c, q, "%g must be greater than from (%g)", s->to, s->from);
        }
        s->weights = calloc(sc->contacts, sizeof *s->weights);
        if (!s->weights) return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
        const cJSON *w = item(e, "contacts");
        snprintf(q, sizeof q, "%s.contacts", path);
        if (!w) {
            s->weights[0] = 1.0; /* default: the burst is seen by the first contact only */
        } else {
            if (!cJSON_IsArray(w) || (size_t)cJSON_GetArraySize(w) != sc->contacts)
                return bad(c, q, "must be an array of %zu weights (one per contact)", sc->contacts);
            size_t i = 0;
            for (const cJSON *x = w->child; x; x = x->next, i++) {
                if (!cJSON_IsNumber(x) || !isfinite(x->valuedouble)) return bad(c, q, "entry %zu must be a number", i);
                s->weights[i] = x->valuedouble;
            }
        }
    }
    return BL_OK;
}

static bl_status parse_recording(ctx *c, bl_scenario *sc, const cJSON *r)
{
    static const char *const keys[] = {"format",     "rate",       "contacts",    "channels", "unit",
                                       "full_scale", "background", "common_mode", NULL};
    bl_status st = check_keys(c, r, "recording", keys);
    if (st) return st;
    char *fmt = NULL;
    if ((st = get_str(c, r, "recording", "format", "flac", &fmt))) return st;
    int ok = strcmp(fmt, "flac") == 0 || strcmp(fmt, "wav") == 0;
    sc->wav = strcmp(fmt, "wav") == 0;
    if (!ok) {
        st = bad(c, "recording.format", "'%s' is not one of flac, wav", fmt);
        free(fmt);
        return st;
    }
    free(fmt);
    double contacts;
    if ((st = get_num(c, r, "recording", "rate", 0, 1000, 50, 655350, &sc->rate)) ||
        (st = get_num(c, r, "recording", "contacts", 0, 2, 1, 8, &contacts)) ||
        (st = get_str(c, r, "recording", "unit", "uV", &sc->unit)) ||
        (st = get_num(c, r, "recording", "full_scale", 1, 0, 1e-12, 1e12, &sc->full_scale)))
        return st;
    if (sc->rate != floor(sc->rate)) return bad(c, "recording.rate", "%g must be a whole number of Hz", sc->rate);
    if (contacts != floor(contacts)) return bad(c, "recording.contacts", "%g must be a whole number", contacts);
    sc->contacts = (size_t)contacts;
    const cJSON *ch = item(r, "channels");
    if (ch) {
        if (!cJSON_IsArray(ch) || cJSON_GetArraySize(ch) < 1)
            return bad(c, "recording.channels", "must be a non-empty array");
        sc->n_channels = (size_t)cJSON_GetArraySize(ch);
        sc->channels = calloc(sc->n_channels, sizeof *sc->channels);
        if (!sc->channels) return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
        size_t i = 0;
        for (const cJSON *e = ch->child; e; e = e->next, i++) {
            if (!cJSON_IsString(e)) return bad(c, "recording.channels", "entry %zu must be a string like \"1-2\"", i);
            if (!(sc->channels[i] = dupstr(e->valuestring))) return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
        }
    } else {
        sc->n_channels = 1;
        sc->channels = calloc(1, sizeof *sc->channels);
        if (!sc->channels || !(sc->channels[0] = dupstr(sc->contacts >= 2 ? "1-2" : "1")))
            return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
    }
    const cJSON *bg = item(r, "background");
    if (!bg) return bad(c, "recording.background", "required key is missing");
    static const char *const bkeys[] = {"rms", "exponent", "corner", NULL};
    if ((st = check_keys(c, bg, "recording.background", bkeys)) ||
        (st = get_num(c, bg, "recording.background", "rms", 1, 0, 0, 1e12, &sc->bg_rms)) ||
        (st = get_num(c, bg, "recording.background", "exponent", 0, 1.0, 0, 3, &sc->bg_exponent)) ||
        (st = get_num(c, bg, "recording.background", "corner", 0, 1.0, 1e-3, sc->rate / 2, &sc->bg_corner)))
        return st;
    const cJSON *cm = item(r, "common_mode");
    if (cm) {
        static const char *const ckeys[] = {"rms", "exponent", "line_frequency", "line_amplitude", NULL};
        if ((st = check_keys(c, cm, "recording.common_mode", ckeys)) ||
            (st = get_num(c, cm, "recording.common_mode", "rms", 0, 0, 0, 1e12, &sc->cm_rms)) ||
            (st = get_num(c, cm, "recording.common_mode", "exponent", 0, 1.0, 0, 3, &sc->cm_exponent)) ||
            (st = get_num(c, cm, "recording.common_mode", "line_frequency", 0, 50, 1, sc->rate / 2,
                          &sc->line_frequency)) ||
            (st = get_num(c, cm, "recording.common_mode", "line_amplitude", 0, 0, 0, 1e12, &sc->line_amplitude)))
            return st;
    }
    return BL_OK;
}

/* "participants": labels, or a count with a prefix. */
static bl_status parse_participants(ctx *c, bl_scenario *sc, const cJSON *root)
{
    bl_status st = BL_OK;
    const cJSON *pp = item(root, "participants");
    if (!pp) return bad(c, "participants", "required key is missing");
    static const char *const pkeys[] = {"column", "labels", "count", "prefix", NULL};
    if ((st = check_keys(c, pp, "participants", pkeys))) return st;
    if ((st = get_str(c, pp, "participants", "column", "participant", &sc->participant_column))) return st;
    if (item(pp, "labels")) {
        if (item(pp, "count") || item(pp, "prefix"))
            return bad(c, "participants", "give either labels or count (with prefix), not both");
        if ((st = get_str_array(c, item(pp, "labels"), "participants.labels", 1, &sc->participants,
                                &sc->n_participants)))
            return st;
    } else {
        double count;
        char *prefix = NULL;
        if ((st = get_num(c, pp, "participants", "count", 1, 0, 1, 1000, &count))) return st;
        if (count != floor(count)) return bad(c, "participants.count", "%g must be a whole number", count);
        if ((st = get_str(c, pp, "participants", "prefix", "p", &prefix))) return st;
        /* The prefix becomes part of labels and file names: the same characters as labels are refused. */
        if (strpbrk(prefix, ",\"\n\r\t:/\\{}")) {
            st = bad(c, "participants.prefix", "'%s' contains one of , : / \\ { } a quote, tab or line break", prefix);
            free(prefix);
            return st;
        }
        sc->participants = calloc((size_t)count, sizeof *sc->participants);
        if (!sc->participants) {
            free(prefix);
            return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
        }
        for (size_t i = 0; i < (size_t)count; i++) {
            char buf[300];
            snprintf(buf, sizeof buf, "%s%zu", prefix, i + 1);
            sc->participants[i] = dupstr(buf);
            sc->n_participants = i + 1;
        }
        free(prefix);
    }
    return st;
}

/* "conditions": {column: [levels]}. */
static bl_status parse_conditions(ctx *c, bl_scenario *sc, const cJSON *root)
{
    bl_status st = BL_OK;
    const cJSON *cond = item(root, "conditions");
    if (cond) {
        if (!cJSON_IsObject(cond)) return bad(c, "conditions", "must be an object {column: [levels]}");
        size_t n = (size_t)cJSON_GetArraySize(cond);
        sc->factors = calloc(n ? n : 1, sizeof *sc->factors);
        if (!sc->factors) return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
        for (const cJSON *e = cond->child; e; e = e->next) {
            factor *f = &sc->factors[sc->n_factors++];
            char q[300];
            snprintf(q, sizeof q, "conditions.%s", e->string);
            if (!(f->name = dupstr(e->string))) return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
            if ((st = get_str_array(c, e, q, 1, &f->levels, &f->n_levels))) return st;
        }
    }

    return st;
}

/* "stimulus": its column, two levels and the choice column. */
static bl_status parse_stimulus(ctx *c, bl_scenario *sc, const cJSON *root)
{
    bl_status st = BL_OK;
    const cJSON *stim = item(root, "stimulus");
    if (!stim) return bad(c, "stimulus", "required key is missing");
    static const char *const skeys[] = {"column", "levels", "choice_column", NULL};
    if ((st = check_keys(c, stim, "stimulus", skeys)) ||
        (st = get_str(c, stim, "stimulus", "column", "stimulus", &sc->stimulus_column)) ||
        (st = get_str(c, stim, "stimulus", "choice_column", "choice", &sc->choice_column)))
        return st;
    {
        char **lv = NULL;
        size_t n = 0;
        const cJSON *l = item(stim, "levels");
        if (!l) return bad(c, "stimulus.levels", "required key is missing");
        st = get_str_array(c, l, "stimulus.levels", 2, &lv, &n);
        if (st == BL_OK && n != 2) st = bad(c, "stimulus.levels", "needs exactly two levels (got %zu)", n);
        if (st == BL_OK) {
            sc->stimulus_levels[0] = lv[0];
            sc->stimulus_levels[1] = lv[1];
            free(lv);
        } else {
            free_strs(lv, n);
            return st;
        }
    }

    return st;
}

/* "timing": first onset, interval between onsets, tail after the last trial. */
static bl_status parse_timing(ctx *c, bl_scenario *sc, const cJSON *root)
{
    bl_status st = BL_OK;
    const cJSON *tm = item(root, "timing");
    if (!tm) return bad(c, "timing", "required key is missing");
    static const char *const tkeys[] = {"first_onset", "interval", "tail", NULL};
    if ((st = check_keys(c, tm, "timing", tkeys)) ||
        (st = get_num(c, tm, "timing", "first_onset", 0, 2.0, 0, 1e6, &sc->first_onset)) ||
        (st = get_num(c, tm, "timing", "tail", 0, 3.0, 0, 1e6, &sc->tail)))
        return st;
    const cJSON *iv = item(tm, "interval");
    if (!iv) return bad(c, "timing.interval", "required key is missing");
    if (!cJSON_IsArray(iv) || cJSON_GetArraySize(iv) != 2 || !cJSON_IsNumber(iv->child) ||
        !cJSON_IsNumber(iv->child->next))
        return bad(c, "timing.interval", "must be [shortest, longest] in seconds");
    sc->interval_lo = iv->child->valuedouble;
    sc->interval_hi = iv->child->next->valuedouble;
    if (!(sc->interval_lo > 0 && sc->interval_hi >= sc->interval_lo && sc->interval_hi < 1e5))
        return bad(c, "timing.interval", "[%g, %g] must satisfy 0 < shortest <= longest", sc->interval_lo,
                   sc->interval_hi);

    return st;
}

/* "study": the keep rules, power, fit and models copied into study.json. */
static bl_status parse_study_block(ctx *c, bl_scenario *sc, const cJSON *root)
{
    bl_status st = BL_OK;
    const cJSON *sd = item(root, "study");
    if (!sd) return bad(c, "study", "required key is missing");
    static const char *const dkeys[] = {"keep", "power", "fit", "models", "truth_model", "scan", NULL};
    if ((st = check_keys(c, sd, "study", dkeys))) return st;
    if (item(sd, "keep") && !(sc->keep = cJSON_Duplicate(item(sd, "keep"), 1)))
        return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
    if (!item(sd, "power")) return bad(c, "study.power", "required key is missing");
    if (!item(sd, "models")) return bad(c, "study.models", "required key is missing");
    if (!(sc->power = cJSON_Duplicate(item(sd, "power"), 1)) || !(sc->models = cJSON_Duplicate(item(sd, "models"), 1)))
        return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
    if (item(sd, "scan") && !(sc->scan = cJSON_Duplicate(item(sd, "scan"), 1)))
        return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
    if (item(sd, "fit") && !(sc->fit = cJSON_Duplicate(item(sd, "fit"), 1)))
        return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
    if ((st = get_str(c, sd, "study", "truth_model", NULL, &sc->truth_model))) return st;

    return st;
}

/* Names used as trial-table columns must be distinct. */
static bl_status check_columns_distinct(ctx *c, const bl_scenario *sc)
{
    const char *cols[64];
    size_t nc = 0;
    cols[nc++] = sc->participant_column;
    cols[nc++] = "trial";
    cols[nc++] = "onset";
    cols[nc++] = "correct";
    cols[nc++] = "rt";
    cols[nc++] = sc->stimulus_column;
    cols[nc++] = sc->choice_column;
    for (size_t i = 0; i < sc->n_factors && nc < 64; i++) cols[nc++] = sc->factors[i].name;
    for (size_t i = 0; i < nc; i++)
        for (size_t j = 0; j < i; j++)
            if (strcmp(cols[i], cols[j]) == 0)
                return bad(c, "conditions", "the trial-table column '%s' would appear twice", cols[i]);
    return BL_OK;
}

static bl_status parse_root(ctx *c, bl_scenario *sc, const cJSON *root)
{
    static const char *const keys[] = {"name",       "seed",     "participants", "trials_per_participant",
                                       "conditions", "stimulus", "timing",       "recording",
                                       "bursts",     "truth",    "study",        NULL};
    bl_status st = check_keys(c, root, "", keys);
    if (st) return st;
    const cJSON *nm = item(root, "name");
    if (nm && (!cJSON_IsString(nm) || strpbrk(nm->valuestring, "\n\r")))
        return bad(c, "name", "must be one line of text");
    if (!(sc->name = dupstr(nm ? nm->valuestring : "synthetic study")))
        return bl_error_set(c->err, BL_ERR_NOMEM, "out of memory");
    double seed;
    if ((st = get_num(c, root, "", "seed", 0, 1, 0, 4294967295.0, &seed))) return st;
    if (seed != floor(seed)) return bad(c, "seed", "%g must be a whole number", seed);
    sc->seed = (unsigned long)seed;

    if ((st = parse_participants(c, sc, root))) return st;
    double tpp;
    if ((st = get_num(c, root, "", "trials_per_participant", 1, 0, 1, 1e6, &tpp))) return st;
    if (tpp != floor(tpp)) return bad(c, "trials_per_participant", "%g must be a whole number", tpp);
    sc->trials_per_participant = (size_t)tpp;

    if ((st = parse_conditions(c, sc, root))) return st;
    if ((st = parse_stimulus(c, sc, root))) return st;
    if ((st = parse_timing(c, sc, root))) return st;
    const cJSON *rec = item(root, "recording");
    if (!rec) return bad(c, "recording", "required key is missing");
    if ((st = parse_recording(c, sc, rec))) return st;
    const cJSON *bu = item(root, "bursts");
    if (bu && (st = parse_bursts(c, sc, bu))) return st;
    for (size_t i = 0; i < sc->n_bursts; i++) {
        const burst_spec *b = &sc->bursts[i];
        if (sc->first_onset + b->from < 0) {
            char q[300];
            snprintf(q, sizeof q, "bursts.%s.from", b->name);
            return bad(
                c, q,
                "the burst of the first trial would start before the recording (timing.first_onset %g + from %g < 0)",
                sc->first_onset, b->from);
        }
    }
    const cJSON *tr = item(root, "truth");
    if (!tr) return bad(c, "truth", "required key is missing");
    if ((st = parse_truth(c, sc, tr))) return st;

    if ((st = parse_study_block(c, sc, root))) return st;
    return check_columns_distinct(c, sc);
}

bl_status bl_scenario_parse(const char *json, const char *name, bl_scenario **out, bl_error *err)
{
    *out = NULL;
    ctx c = {name ? name : "scenario", err};
    cJSON *root = NULL;
    bl_status pst = bl_json_parse(json, c.file, &root, err);
    if (pst) return pst;
    bl_scenario *sc = calloc(1, sizeof *sc);
    if (!sc) {
        cJSON_Delete(root);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    bl_status st = parse_root(&c, sc, root);
    cJSON_Delete(root);
    if (st == BL_OK && !(sc->path = dupstr(c.file))) st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    if (st) {
        bl_scenario_destroy(sc);
        return st;
    }
    *out = sc;
    return BL_OK;
}

bl_status bl_scenario_load(const char *path, bl_scenario **out, bl_error *err)
{
    *out = NULL;
    char *text = NULL;
    bl_status st = bl_json_read_file(path, "the scenario", &text, err);
    if (!st) st = bl_scenario_parse(text, path, out, err);
    free(text);
    return st;
}

/* ------------------------------------------------------------------------------------------------ */
/* Signals */

static size_t fast_size(size_t n)
{
    for (size_t m = n < 2 ? 2 : n;; m++) {
        size_t r = m;
        while (r % 2 == 0) r /= 2;
        while (r % 3 == 0) r /= 3;
        while (r % 5 == 0) r /= 5;
        if (r == 1) return m;
    }
}

bl_status bl_simulate_colored_noise(double *x, size_t n, double fs, double exponent, double corner, double rms,
                                    gsl_rng *rng, bl_error *err)
{
    bl_gsl_guard();
    if (n == 0) return BL_OK;
    if (!(fs > 0) || !(corner > 0) || !(rms >= 0) || !isfinite(exponent))
        return bl_error_set(err, BL_ERR_RANGE, "coloured noise: invalid settings (fs %g, corner %g, rms %g)", fs,
                            corner, rms);
    size_t N = fast_size(n);
    double *d = malloc(N * sizeof *d);
    gsl_fft_real_wavetable *rw = gsl_fft_real_wavetable_alloc(N);
    gsl_fft_halfcomplex_wavetable *hw = gsl_fft_halfcomplex_wavetable_alloc(N);
    gsl_fft_real_workspace *ws = gsl_fft_real_workspace_alloc(N);
    bl_status st = BL_OK;
    if (!d || !rw || !hw || !ws) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory for a %zu-point FFT", N);
        goto done;
    }
    for (size_t i = 0; i < N; i++) d[i] = gsl_ran_gaussian_ziggurat(rng, 1.0);
    int gs = gsl_fft_real_transform(d, 1, N, rw, ws);
    if (gs) {
        st = bl_error_set(err, BL_ERR_NUMERIC, "coloured noise: FFT failed: %s", gsl_strerror(gs));
        goto done;
    }
    /* Half-complex layout (GSL mixed radix): d[0] = Re X0, d[2j-1], d[2j] = Re, Im X_j, d[N-1] = Re X_{N/2}. */
    d[0] = 0.0;
    for (size_t j = 1; j <= N / 2; j++) {
        double f = (double)j * fs / (double)N;
        double g = pow(f > corner ? f : corner, -exponent / 2.0);
        d[2 * j - 1] *= g;
        if (2 * j < N) d[2 * j] *= g;
    }
    gs = gsl_fft_halfcomplex_inverse(d, 1, N, hw, ws);
    if (gs) {
        st = bl_error_set(err, BL_ERR_NUMERIC, "coloured noise: inverse FFT failed: %s", gsl_strerror(gs));
        goto done;
    }
    double mean = 0, ss = 0;
    for (size_t i = 0; i < n; i++) mean += d[i];
    mean /= (double)n;
    for (size_t i = 0; i < n; i++) ss += (d[i] - mean) * (d[i] - mean);
    double sd = sqrt(ss / (double)n);
    double scale = sd > 0 ? rms / sd : 0;
    for (size_t i = 0; i < n; i++) x[i] = (d[i] - mean) * scale;
done:
    free(d);
    gsl_fft_real_wavetable_free(rw);
    gsl_fft_halfcomplex_wavetable_free(hw);
    gsl_fft_real_workspace_free(ws);
    return st;
}

/* One trial of the schedule. */
typedef struct {
    size_t participant;
    size_t trial;  /* 1-based within participant */
    double onset;  /* s */
    size_t *level; /* level index per factor (points into a shared array) */
    int stimulus;  /* 0 or 1 */
    int upper;     /* drawn: 1 = correct */
    double rt;
    double param[BL_NPARAM]; /* true parameters */
} trial_rec;

/* Tukey (cosine-tapered) envelope, taper fraction 0.2, on u in [0, 1]. */
static double tukey(double u)
{
    const double r = 0.2;
    if (u < 0 || u > 1) return 0;
    if (u < r / 2) return 0.5 * (1 - cos(2 * M_PI * u / r));
    if (u > 1 - r / 2) return 0.5 * (1 - cos(2 * M_PI * (1 - u) / r));
    return 1;
}

static bl_status write_recording(const bl_scenario *sc, size_t p, const trial_rec *trials, size_t n_trials,
                                 const char *path, unsigned long seed, double *seconds, bl_error *err)
{
    double last = trials[n_trials - 1].onset;
    size_t frames = (size_t)ceil((last + sc->tail) * sc->rate);
    for (size_t b = 0; b < sc->n_bursts; b++) {
        size_t need = (size_t)ceil((last + sc->bursts[b].to) * sc->rate) + 1;
        if (need > frames) frames = need;
    }
    size_t C = sc->contacts;
    double *x = calloc(frames * C, sizeof *x), *tmp = malloc(frames * sizeof *tmp);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    SNDFILE *f = NULL;
    bl_status st = BL_OK;
    if (!x || !tmp || !rng) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory for a recording of %zu frames", frames);
        goto done;
    }
    /* One stream per participant, so recordings do not depend on each other. */
    gsl_rng_set(rng, seed * 1000003UL + 7919UL * (p + 1));
    for (size_t c = 0; c < C; c++) {
        if ((st = bl_simulate_colored_noise(tmp, frames, sc->rate, sc->bg_exponent, sc->bg_corner, sc->bg_rms, rng,
                                            err)))
            goto done;
        for (size_t i = 0; i < frames; i++) x[i * C + c] = tmp[i];
    }
    if (sc->cm_rms > 0 || sc->line_amplitude > 0) {
        if ((st = bl_simulate_colored_noise(tmp, frames, sc->rate, sc->cm_exponent, sc->bg_corner, sc->cm_rms, rng,
                                            err)))
            goto done;
        double phase = gsl_rng_uniform(rng) * 2 * M_PI;
        for (size_t i = 0; i < frames; i++) {
            double cm = tmp[i] + sc->line_amplitude * sin(2 * M_PI * sc->line_frequency * (double)i / sc->rate + phase);
            for (size_t c = 0; c < C; c++) x[i * C + c] += cm;
        }
    }
    for (size_t t = 0; t < n_trials; t++) {
        for (size_t b = 0; b < sc->n_bursts; b++) {
            const burst_spec *bs = &sc->bursts[b];
            double f0 = bs->f_lo + (bs->f_hi - bs->f_lo) * gsl_rng_uniform(rng);
            double ph = 2 * M_PI * gsl_rng_uniform(rng);
            double amp = bs->amplitude * exp(bs->variability * gsl_ran_gaussian_ziggurat(rng, 1.0));
            double t0 = trials[t].onset + bs->from, t1 = trials[t].onset + bs->to;
            size_t s0 = (size_t)floor(t0 * sc->rate), s1 = (size_t)ceil(t1 * sc->rate);
            if (s1 >= frames) s1 = frames - 1;
            for (size_t i = s0; i <= s1; i++) {
                double tt = (double)i / sc->rate;
                double v = amp * tukey((tt - t0) / (t1 - t0)) * sin(2 * M_PI * f0 * (tt - t0) + ph);
                for (size_t c = 0; c < C; c++) x[i * C + c] += bs->weights[c] * v;
            }
        }
    }
    /* Normalise to the full scale; 24-bit PCM holds [-1, (2^23 - 1) / 2^23]. */
    const double top = 8388607.0 / 8388608.0;
    for (size_t i = 0; i < frames * C; i++) {
        double v = x[i] / sc->full_scale;
        if (v > top || v < -1.0) {
            st = bl_error_set(err, BL_ERR_RANGE,
                              "%s: the simulated signal of %s reaches %.6g %s at %.3f s, beyond recording.full_scale "
                              "(%g %s); raise full_scale or lower the amplitudes",
                              sc->path, sc->participants[p], x[i], sc->unit, (double)(i / C) / sc->rate, sc->full_scale,
                              sc->unit);
            goto done;
        }
        x[i] = v;
    }
    SF_INFO info;
    memset(&info, 0, sizeof info);
    info.samplerate = (int)sc->rate;
    info.channels = (int)C;
    info.format = (sc->wav ? SF_FORMAT_WAV : SF_FORMAT_FLAC) | SF_FORMAT_PCM_24;
    if (!sf_format_check(&info)) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: %s 24-bit with %zu channels at %g Hz is not a writable format", path,
                          sc->wav ? "WAV" : "FLAC", C, sc->rate);
        goto done;
    }
    f = sf_open(path, SFM_WRITE, &info);
    if (!f) {
        st = bl_error_set(err, BL_ERR_IO, "%s: cannot create: %s", path, sf_strerror(NULL));
        goto done;
    }
    sf_count_t w = sf_writef_double(f, x, (sf_count_t)frames);
    if (w != (sf_count_t)frames) {
        st = bl_error_set(err, BL_ERR_IO, "%s: wrote %lld of %zu frames: %s", path, (long long)w, frames,
                          sf_strerror(f));
        goto done;
    }
    *seconds = (double)frames / sc->rate;
done:
    if (f && sf_close(f) != 0 && st == BL_OK) st = bl_error_set(err, BL_ERR_IO, "%s: closing failed", path);
    free(x);
    free(tmp);
    gsl_rng_free(rng);
    return st;
}

/* ------------------------------------------------------------------------------------------------ */

static bl_status write_trials_csv(const bl_scenario *sc, const trial_rec *tr, size_t n, const char *path,
                                  double provisional_rt, bl_error *err)
{
    bl_outfile *of = NULL;
    bl_status st = bl_outfile_open(path, &of, err);
    if (st) return st;
    FILE *f = bl_outfile_stream(of);
    fprintf(f, "%s,trial,onset", sc->participant_column);
    for (size_t k = 0; k < sc->n_factors; k++) fprintf(f, ",%s", sc->factors[k].name);
    fprintf(f, ",%s,%s,correct,rt\n", sc->stimulus_column, sc->choice_column);
    for (size_t i = 0; i < n; i++) {
        const trial_rec *t = &tr[i];
        int upper = provisional_rt > 0 ? 1 : t->upper;
        double rt = provisional_rt > 0 ? provisional_rt : t->rt;
        fprintf(f, "%s,%zu,%.6f", sc->participants[t->participant], t->trial, t->onset);
        for (size_t k = 0; k < sc->n_factors; k++) fprintf(f, ",%s", sc->factors[k].levels[t->level[k]]);
        int choice = upper ? t->stimulus : 1 - t->stimulus;
        fprintf(f, ",%s,%s,%d,%.6f\n", sc->stimulus_levels[t->stimulus], sc->stimulus_levels[choice], upper, rt);
    }
    return bl_outfile_commit(of, err);
}

static cJSON *study_json(const bl_scenario *sc)
{
    cJSON *root = cJSON_CreateObject();
    cJSON *tr = cJSON_AddObjectToObject(root, "trials");
    cJSON_AddStringToObject(tr, "file", "trials.csv");
    cJSON_AddStringToObject(tr, "participant", sc->participant_column);
    cJSON_AddStringToObject(tr, "rt", "rt");
    cJSON_AddStringToObject(tr, "rt_unit", "s");
    cJSON_AddStringToObject(tr, "response", "correct");
    cJSON *up = cJSON_AddArrayToObject(tr, "upper");
    cJSON_AddItemToArray(up, cJSON_CreateString("1"));
    if (sc->keep) cJSON_AddItemToObject(tr, "keep", cJSON_Duplicate(sc->keep, 1));
    cJSON *rec = cJSON_AddObjectToObject(root, "recordings");
    char pattern[512];
    snprintf(pattern, sizeof pattern, "recordings/{%s}.%s", sc->participant_column, sc->wav ? "wav" : "flac");
    cJSON_AddStringToObject(rec, "file", pattern);
    cJSON_AddStringToObject(rec, "onset", "onset");
    cJSON_AddNumberToObject(rec, "gain", sc->full_scale);
    cJSON_AddStringToObject(rec, "unit", sc->unit);
    cJSON *ch = cJSON_AddArrayToObject(rec, "channels");
    for (size_t i = 0; i < sc->n_channels; i++) cJSON_AddItemToArray(ch, cJSON_CreateString(sc->channels[i]));
    cJSON_AddItemToObject(root, "power", cJSON_Duplicate(sc->power, 1));
    if (sc->fit) cJSON_AddItemToObject(root, "fit", cJSON_Duplicate(sc->fit, 1));
    if (sc->scan) cJSON_AddItemToObject(root, "scan", cJSON_Duplicate(sc->scan, 1));
    cJSON_AddItemToObject(root, "models", cJSON_Duplicate(sc->models, 1));
    cJSON_AddStringToObject(root, "output", "results");
    return root;
}

static bl_status write_json(cJSON *obj, const char *path, bl_error *err)
{
    /* A failed allocation while building may have dropped an item: never write such a document. */
    char *s = obj && !bl_json_alloc_failures() ? cJSON_Print(obj) : NULL;
    if (!s) return bl_error_set(err, BL_ERR_NOMEM, "out of memory writing %s", path);
    size_t n = strlen(s);
    char *t = malloc(n + 2);
    if (!t) {
        cJSON_free(s);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory writing %s", path);
    }
    memcpy(t, s, n);
    t[n] = '\n';
    cJSON_free(s);
    bl_status st = bl_write_file_atomic(path, t, n + 1, err);
    free(t);
    return st;
}

/* The truth model named in the scenario must have the truth's structure: the same `per` columns and the
 * same slopes (regressor and `by` columns) for every parameter the truth gives. */
static bl_status check_truth_model(const bl_scenario *sc, const bl_study *study, bl_error *err)
{
    const bl_model_spec *m = NULL;
    for (size_t i = 0; i < study->n_models; i++)
        if (strcmp(study->models[i].name, sc->truth_model) == 0) m = &study->models[i];
    if (!m)
        return bl_error_set(err, BL_ERR_INPUT, "%s: study.truth_model: '%s' is not one of study.models", sc->path,
                            sc->truth_model);
    for (int p = 0; p < BL_NPARAM; p++) {
        const truth_param *t = &sc->truth[p];
        const bl_param_spec *ps = &m->param[p];
        if (!t->given) {
            if (!ps->is_fixed && p == BL_CONTAMINATION)
                return bl_error_set(err, BL_ERR_INPUT,
                                    "%s: study.truth_model: model '%s' estimates contamination, which simulate does not "
                                    "draw (there is no truth.contamination); name a truth model without it",
                                    sc->path, m->name);
            if (!ps->is_fixed)
                return bl_error_set(err, BL_ERR_INPUT,
                                    "%s: truth.%s: missing, but model '%s' estimates it; give its true value", sc->path,
                                    bl_param_name(p), m->name);
            continue;
        }
        int same = !ps->is_fixed && ps->n_per == t->n_per && ps->n_slopes == t->n_slopes;
        for (size_t i = 0; same && i < t->n_per; i++) same = strcmp(ps->per[i], sc->factors[t->per[i]].name) == 0;
        for (size_t s = 0; same && s < t->n_slopes; s++) {
            const truth_slope *ts = &t->slopes[s];
            const bl_slope_spec *ms = NULL;
            for (size_t k = 0; k < ps->n_slopes; k++)
                if (strcmp(ps->slopes[k].regressor, ts->regressor) == 0) ms = &ps->slopes[k];
            same = ms && ms->n_by == ts->n_by;
            for (size_t i = 0; same && i < ts->n_by; i++) same = strcmp(ms->by[i], sc->factors[ts->by[i]].name) == 0;
        }
        if (ps->is_fixed && t->n_per == 0 && t->n_slopes == 0 && t->intercept[0] == ps->fixed) same = 1;
        if (ps->is_fixed && t->intercept_spread > 0) /* NAN (not given) compares false */
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s: truth.%s.spread.intercept: %g, but model '%s' fixes %s; a participant "
                                "spread needs the parameter estimated",
                                sc->path, bl_param_name(p), t->intercept_spread, m->name, bl_param_name(p));
        if (!same)
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s: truth.%s: its intercepts/slopes do not have the structure of model '%s' "
                                "(same per columns, same slopes with the same by columns, in the same order)",
                                sc->path, bl_param_name(p), m->name);
        if (ps->link == BL_LINK_LOG)
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s: truth.%s: model '%s' uses the log link; the simulator's truth is "
                                "on the identity link",
                                sc->path, bl_param_name(p), m->name);
    }
    return BL_OK;
}

static void add_coef(cJSON *arr, const char *param, const char *term, const char *level, double value)
{
    cJSON *o = cJSON_CreateObject();
    cJSON_AddStringToObject(o, "parameter", param);
    cJSON_AddStringToObject(o, "term", term);
    cJSON_AddStringToObject(o, "level", level);
    cJSON_AddNumberToObject(o, "value", value);
    if (!cJSON_AddItemToArray(arr, o)) cJSON_Delete(o); /* arr NULL after a failed allocation: no leak */
}

/* Each participant's offsets from the population coefficients (truth.<parameter>.spread). For parameter
 * p, off[p][participant * (1 + n_slopes) + term] with term 0 the intercept and 1 + s slope s; NULL when
 * the parameter has no spread. One offset per participant and term, shared by every level of the term. */
typedef struct {
    double *off[BL_NPARAM];
} participant_offsets;

static void offsets_free(participant_offsets *po)
{
    for (int p = 0; p < BL_NPARAM; p++) free(po->off[p]);
}

static double offset_of(const bl_scenario *sc, const participant_offsets *po, int p, size_t participant, size_t term)
{
    if (!po || !po->off[p]) return 0.0;
    return po->off[p][participant * (1 + sc->truth[p].n_slopes) + term];
}

/* Draw the offsets N(0, SD²) from a stream of their own (so they depend on the seed alone, not on trial
 * counts or recordings), in a fixed order: participant, then parameter, then term (intercept, then the
 * slopes in scenario order); terms without an SD get 0 and consume no draw. */
static bl_status draw_offsets(const bl_scenario *sc, unsigned long seed, participant_offsets *po, bl_error *err)
{
    size_t P = sc->n_participants;
    for (int p = 0; p < BL_NPARAM; p++) {
        const truth_param *t = &sc->truth[p];
        if (!t->given || !t->has_spread) continue;
        if (!(po->off[p] = calloc(P * (1 + t->n_slopes), sizeof *po->off[p])))
            return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    if (!sc->any_spread) return BL_OK;
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    if (!rng) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    gsl_rng_set(rng, seed ^ 0x5bd1e995UL);
    for (size_t i = 0; i < P; i++)
        for (int p = 0; p < BL_NPARAM; p++) {
            const truth_param *t = &sc->truth[p];
            if (!po->off[p]) continue;
            double *o = po->off[p] + i * (1 + t->n_slopes);
            if (!isnan(t->intercept_spread)) o[0] = gsl_ran_gaussian(rng, t->intercept_spread);
            for (size_t s = 0; s < t->n_slopes; s++)
                if (!isnan(t->slopes[s].spread)) o[1 + s] = gsl_ran_gaussian(rng, t->slopes[s].spread);
        }
    gsl_rng_free(rng);
    return BL_OK;
}

/* The coefficients on the fitted model's parameter/term/level layout: the population's (participant =
 * SIZE_MAX) or one participant's (population + that participant's offsets). */
static void add_coefficients(cJSON *co, const bl_scenario *sc, const participant_offsets *po, size_t participant)
{
    for (int p = 0; p < BL_NPARAM; p++) {
        const truth_param *t = &sc->truth[p];
        if (!t->given) continue;
        int own = participant != SIZE_MAX;
        char label[256];
        size_t k = n_combos(sc, t->per, t->n_per);
        for (size_t i = 0; i < k; i++) {
            combo_label(sc, t->per, t->n_per, i, label, sizeof label);
            double v = t->intercept[i];
            if (own) v += offset_of(sc, po, p, participant, 0);
            add_coef(co, bl_param_name(p), "intercept", label, v);
        }
        for (size_t s = 0; s < t->n_slopes; s++) {
            const truth_slope *ts = &t->slopes[s];
            size_t ks = n_combos(sc, ts->by, ts->n_by);
            for (size_t i = 0; i < ks; i++) {
                combo_label(sc, ts->by, ts->n_by, i, label, sizeof label);
                double v = ts->values[i];
                if (own) v += offset_of(sc, po, p, participant, 1 + s);
                add_coef(co, bl_param_name(p), ts->regressor, label, v);
            }
        }
    }
}

/* "spread": the SD of every term given one; "participants": each participant's true coefficients. */
static void add_spread(cJSON *root, const bl_scenario *sc, const participant_offsets *po)
{
    cJSON *sp = cJSON_AddArrayToObject(root, "spread");
    for (int p = 0; p < BL_NPARAM; p++) {
        const truth_param *t = &sc->truth[p];
        if (!t->given || !t->has_spread) continue;
        for (size_t term = 0; term <= t->n_slopes; term++) {
            double sd = term == 0 ? t->intercept_spread : t->slopes[term - 1].spread;
            if (isnan(sd)) continue;
            cJSON *o = cJSON_CreateObject();
            cJSON_AddStringToObject(o, "parameter", bl_param_name(p));
            cJSON_AddStringToObject(o, "term", term == 0 ? "intercept" : t->slopes[term - 1].regressor);
            cJSON_AddNumberToObject(o, "sd", sd);
            if (!cJSON_AddItemToArray(sp, o)) cJSON_Delete(o);
        }
    }
    cJSON *pa = cJSON_AddArrayToObject(root, "participants");
    for (size_t i = 0; i < sc->n_participants; i++) {
        cJSON *o = cJSON_CreateObject();
        cJSON_AddStringToObject(o, "participant", sc->participants[i]);
        add_coefficients(cJSON_AddArrayToObject(o, "coefficients"), sc, po, i);
        if (!cJSON_AddItemToArray(pa, o)) cJSON_Delete(o);
    }
}

static cJSON *truth_json(const bl_scenario *sc, const participant_offsets *po, unsigned long seed, size_t n_trials,
                         size_t n_excluded, double max_shift)
{
    cJSON *root = cJSON_CreateObject();
    cJSON_AddStringToObject(root, "scenario", sc->name);
    cJSON_AddNumberToObject(root, "seed", (double)seed);
    cJSON_AddStringToObject(root, "model", sc->truth_model);
    cJSON_AddStringToObject(root, "link", "identity");
    cJSON_AddNumberToObject(root, "trials", (double)n_trials);
    cJSON_AddNumberToObject(root, "trials_excluded_by_study", (double)n_excluded);
    cJSON_AddNumberToObject(root, "regressor_shift_max", max_shift);
    add_coefficients(cJSON_AddArrayToObject(root, "coefficients"), sc, po, SIZE_MAX);
    if (sc->any_spread) add_spread(root, sc, po);
    cJSON *bands = cJSON_AddObjectToObject(root, "bursts");
    for (size_t b = 0; b < sc->n_bursts; b++) {
        cJSON *o = cJSON_AddObjectToObject(bands, sc->bursts[b].name);
        cJSON *fr = cJSON_AddArrayToObject(o, "frequency");
        cJSON_AddItemToArray(fr, cJSON_CreateNumber(sc->bursts[b].f_lo));
        cJSON_AddItemToArray(fr, cJSON_CreateNumber(sc->bursts[b].f_hi));
        cJSON_AddNumberToObject(o, "amplitude", sc->bursts[b].amplitude);
        cJSON_AddNumberToObject(o, "variability", sc->bursts[b].variability);
    }
    return root;
}

static bl_status write_truth_trials(const bl_scenario *sc, const trial_rec *tr, size_t n, const char *path,
                                    bl_error *err)
{
    bl_outfile *of = NULL;
    bl_status st = bl_outfile_open(path, &of, err);
    if (st) return st;
    FILE *f = bl_outfile_stream(of);
    fprintf(f, "%s,trial", sc->participant_column);
    for (int p = 0; p < BL_NPARAM - 1; p++) fprintf(f, ",%s", bl_param_name(p));
    fputc('\n', f);
    for (size_t i = 0; i < n; i++) {
        fprintf(f, "%s,%zu", sc->participants[tr[i].participant], tr[i].trial);
        for (int p = 0; p < BL_NPARAM - 1; p++) fprintf(f, ",%.17g", tr[i].param[p]);
        fputc('\n', f);
    }
    return bl_outfile_commit(of, err);
}

/* Regressor columns (by name) of the measured trial table; NULL when absent. */
static const double *regressor(const bl_trials *t, const char *name)
{
    int c = bl_table_find(t->table, name);
    return c < 0 || !t->table->cols[c].numeric ? NULL : t->table->cols[c].num;
}

/* The study's own band power on the written recordings, through the analysis handle every command uses. */
static bl_status measure(const char *study_path, int threads, bl_analysis **out, bl_warnings *warn, bl_error *err)
{
    bl_analysis_options o;
    bl_analysis_options_default(&o);
    o.threads = threads;
    bl_status st = bl_analysis_open(study_path, &o, out, err);
    if (!st) st = bl_analysis_power(*out, err);
    const bl_warnings *w = *out ? bl_analysis_warnings(*out) : NULL;
    for (size_t k = 0; w && warn && k < w->count; k++) bl_warnings_add(warn, "%s", w->items[k]);
    return st;
}

/* Schedule: each participant gets the condition combinations in turn, shuffled; a random stimulus; onsets
 * separated by uniform intervals. */
static void schedule_trials(const bl_scenario *sc, gsl_rng *rng, trial_rec *tr, size_t *levels, size_t *order)
{
    size_t T = sc->trials_per_participant, K = 1, nf = sc->n_factors ? sc->n_factors : 1;
    for (size_t k = 0; k < sc->n_factors; k++) K *= sc->factors[k].n_levels;
    for (size_t p = 0; p < sc->n_participants; p++) {
        for (size_t i = 0; i < T; i++) order[i] = i % K;
        gsl_ran_shuffle(rng, order, T, sizeof *order);
        double onset = sc->first_onset;
        for (size_t i = 0; i < T; i++) {
            trial_rec *t = &tr[p * T + i];
            t->participant = p;
            t->trial = i + 1;
            t->level = levels + (p * T + i) * nf;
            size_t rem = order[i];
            for (size_t k = sc->n_factors; k-- > 0;) {
                t->level[k] = rem % sc->factors[k].n_levels;
                rem /= sc->factors[k].n_levels;
            }
            t->stimulus = (int)gsl_rng_uniform_int(rng, 2);
            t->onset = onset;
            onset += sc->interval_lo + (sc->interval_hi - sc->interval_lo) * gsl_rng_uniform(rng);
        }
    }
}

/* Recordings in parallel, one participant per thread: each has its own random stream, so the files do not
 * depend on the thread count. The first failure in participant order is reported. */
static bl_status write_recordings(const bl_scenario *sc, const trial_rec *tr, const char *rec_dir, unsigned long seed,
                                  int threads, double *seconds, bl_error *err)
{
    size_t P = sc->n_participants, T = sc->trials_per_participant;
    bl_status *pst = calloc(P, sizeof *pst), st = BL_OK;
    bl_error *perr = calloc(P, sizeof *perr);
    double *psec = calloc(P, sizeof *psec);
    if (!pst || !perr || !psec) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto done;
    }
    int nth = threads > 0 ? threads : 0;
    /* One participant's recording is one task: with a single participant a team would idle (and its
     * start-up, up to milliseconds on a loaded machine, would be lost), so the region starts only for two
     * or more. */
#ifdef _OPENMP
    if (nth <= 0) nth = omp_get_max_threads();
#pragma omp parallel for schedule(dynamic, 1) num_threads(nth) if (P >= 2)
#else
    (void)nth;
#endif
    for (size_t p = 0; p < P; p++) {
        char name[600];
        snprintf(name, sizeof name, "%s.%s", sc->participants[p], sc->wav ? "wav" : "flac");
        char *path = NULL;
        pst[p] = bl_path_join(rec_dir, name, &path, &perr[p]);
        if (pst[p] == BL_OK) pst[p] = write_recording(sc, p, tr + p * T, T, path, seed, &psec[p], &perr[p]);
        free(path);
    }
    *seconds = 0;
    for (size_t p = 0; p < P && st == BL_OK; p++) {
        if (pst[p] != BL_OK) {
            if (err) *err = perr[p];
            st = pst[p];
        }
        *seconds += psec[p];
    }
done:
    free(pst);
    free(perr);
    free(psec);
    return st;
}

/* study.json, and a provisional trial table (every trial kept, one valid RT) so that the study measures
 * band power on exactly the recordings and windows it will analyse. */
static bl_status write_provisional_study(const bl_scenario *sc, const trial_rec *tr, const char *p_study,
                                         const char *p_trials, bl_error *err)
{
    size_t N = sc->n_participants * sc->trials_per_participant;
    cJSON *sj = study_json(sc);
    if (!sj) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    bl_status st = write_json(sj, p_study, err);
    cJSON_Delete(sj);
    if (st) return st;
    /* Parse first to learn the keep rules, then pick a provisional RT inside them. */
    bl_study *probe = NULL;
    if ((st = bl_study_load(p_study, &probe, err))) {
        char msg[BL_ERROR_MESSAGE_MAX];
        snprintf(msg, sizeof msg, "%s", err ? err->message : "");
        return bl_error_set(err, st, "%s: the study built from study.keep/power/fit/models is invalid: %s", sc->path,
                            msg);
    }
    st = check_truth_model(sc, probe, err);
    double lo = isnan(probe->trials.rt_min) ? 0 : probe->trials.rt_min;
    double hi = isnan(probe->trials.rt_max) ? 2 * lo + 2 : probe->trials.rt_max;
    bl_study_destroy(probe);
    if (!st) st = write_trials_csv(sc, tr, N, p_trials, 0.5 * (lo + hi), err);
    return st;
}

/* Behaviour: the true parameters of each trial from its measured regressors, then one draw of the exact
 * sampler. Trials the study excludes (e.g. an artifact) get regressor 0. */
static bl_status draw_behaviour(const bl_scenario *sc, const participant_offsets *po, const bl_trials *trials,
                                gsl_rng *rng, trial_rec *tr, size_t *n_upper, double *sum_rt, bl_error *err)
{
    size_t N = sc->n_participants * sc->trials_per_participant;
    *n_upper = 0;
    *sum_rt = 0;
    for (size_t i = 0; i < N; i++) {
        trial_rec *t = &tr[i];
        bl_wiener_params wp;
        bl_wiener_params_default(&wp);
        for (int p = 0; p < BL_NPARAM; p++) {
            const truth_param *tp = &sc->truth[p];
            if (!tp->given) continue;
            /* Offsets are added only for parameters with a spread: without one the values (and bytes) are
             * exactly those of the population. */
            int own = po->off[p] != NULL;
            double v = tp->intercept[combo_index(sc, tp->per, tp->n_per, t->level)];
            if (own) v += offset_of(sc, po, p, t->participant, 0);
            for (size_t s = 0; s < tp->n_slopes; s++) {
                const truth_slope *ts = &tp->slopes[s];
                const double *x = regressor(trials, ts->regressor);
                if (!x)
                    return bl_error_set(err, BL_ERR_INPUT,
                                        "%s: truth.%s.slopes.%s: the study has no numeric regressor "
                                        "of that name (bands: study.power.bands)",
                                        sc->path, bl_param_name(p), ts->regressor);
                double xi = isfinite(x[i]) ? x[i] : 0.0;
                double b = ts->values[combo_index(sc, ts->by, ts->n_by, t->level)];
                if (own) b += offset_of(sc, po, p, t->participant, 1 + s);
                v += b * xi;
            }
            wp.value[p] = v;
        }
        for (int p = 0; p < BL_NPARAM; p++) t->param[p] = wp.value[p];
        bl_error perr = {0};
        if (bl_wiener_check(&wp, &perr) != BL_OK)
            return bl_error_set(err, BL_ERR_RANGE,
                                "%s: truth gives invalid parameters for %s trial %zu: %s; make the "
                                "slopes smaller or the intercepts larger%s",
                                sc->path, sc->participants[t->participant], t->trial, perr.message,
                                sc->any_spread ? ", or the spread smaller (the values include this participant's "
                                                 "offsets drawn from truth.*.spread)"
                                               : "");
        bl_status st = bl_wiener_sample(&wp, rng, &t->upper, &t->rt, err);
        if (st) return st;
        *n_upper += (size_t)t->upper;
        *sum_rt += t->rt;
    }
    return BL_OK;
}

/* Largest change of a truth regressor between the provisional and the final measurement: keep rules on
 * the drawn RTs may exclude trials, which shifts the standardised regressors a little. */
static double regressor_shift(const bl_scenario *sc, const bl_trials *before, const bl_trials *after)
{
    size_t N = sc->n_participants * sc->trials_per_participant;
    double shift = 0;
    for (int p = 0; p < BL_NPARAM; p++)
        for (size_t s = 0; s < sc->truth[p].n_slopes; s++) {
            const char *name = sc->truth[p].slopes[s].regressor;
            const double *a = regressor(before, name), *b = regressor(after, name);
            for (size_t i = 0; a && b && i < N; i++)
                if (isfinite(a[i]) && isfinite(b[i]) && fabs(a[i] - b[i]) > shift) shift = fabs(a[i] - b[i]);
        }
    return shift;
}

bl_status bl_simulate_write(const bl_scenario *sc, const char *out_dir, const bl_simulate_options *opt,
                            bl_simulate_summary *summary, bl_warnings *warn, bl_error *err)
{
    bl_gsl_guard();
    bl_simulate_options defaults = {0};
    if (!opt) opt = &defaults;
    unsigned long seed = opt->has_seed ? opt->seed : sc->seed;
    size_t T = sc->trials_per_participant, N = sc->n_participants * T;
    trial_rec *tr = calloc(N, sizeof *tr);
    size_t *levels = calloc(N * (sc->n_factors ? sc->n_factors : 1), sizeof *levels);
    size_t *order = malloc(T * sizeof *order);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    bl_results_folder *stage = NULL;
    bl_analysis *first = NULL, *second = NULL;
    char *p_rec = NULL, *p_trials = NULL, *p_study = NULL, *p_truth = NULL, *p_tt = NULL;
    cJSON *tj = NULL;
    participant_offsets po = {{NULL}};
    bl_status st = BL_OK;
    double seconds = 0, sum_rt = 0;
    size_t n_upper = 0;
    const char *inputs[1] = {sc->path};
    if (!tr || !levels || !order || !rng) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory for %zu trials", N);
        goto done;
    }
    gsl_rng_set(rng, seed);
    schedule_trials(sc, rng, tr, levels, order);
    if ((st = draw_offsets(sc, seed, &po, err))) goto done;
    if ((st = bl_results_folder_check(out_dir, opt->force, inputs, 1, err))) goto done;
    if ((st = bl_results_folder_begin(out_dir, opt->force, "simulate", &stage, err))) goto done;
    const char *dir = bl_results_folder_dir(stage);
    if (bl_path_join(dir, "recordings", &p_rec, NULL) || bl_path_join(dir, "trials.csv", &p_trials, NULL) ||
        bl_path_join(dir, "study.json", &p_study, NULL) || bl_path_join(dir, "truth.json", &p_truth, NULL) ||
        bl_path_join(dir, "truth_trials.csv", &p_tt, NULL)) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto done;
    }
    if ((st = bl_mkdir_p(p_rec, err))) goto done;
    if ((st = write_recordings(sc, tr, p_rec, seed, opt->threads, &seconds, err))) goto done;
    if ((st = write_provisional_study(sc, tr, p_study, p_trials, err))) goto done;
    /* Warnings of this first measurement repeat in the second one: keep those only. */
    if ((st = measure(p_study, opt->threads, &first, NULL, err))) goto done;
    if (first->trials->n != N) {
        st = bl_error_set(err, BL_ERR_INTERNAL, "simulate: the study read %zu trials, %zu were written",
                          first->trials->n, N);
        goto done;
    }
    gsl_rng_set(rng, seed ^ 0x9e3779b9UL);
    if ((st = draw_behaviour(sc, &po, first->trials, rng, tr, &n_upper, &sum_rt, err))) goto done;
    if ((st = write_trials_csv(sc, tr, N, p_trials, 0, err))) goto done;
    /* Measure again from the final table, and record how far the regressors moved (truth.json). */
    if ((st = measure(p_study, opt->threads, &second, warn, err))) goto done;
    double shift = regressor_shift(sc, first->trials, second->trials);
    size_t excluded = N - second->trials->n_kept;
    if (excluded > 0)
        bl_warnings_add(warn,
                        "%zu of %zu simulated trials are excluded by the study's keep rules or artifact checks; "
                        "the standardised regressors moved by up to %.3g (truth.json: regressor_shift_max)",
                        excluded, N, shift);
    if (!(tj = truth_json(sc, &po, seed, N, excluded, shift))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto done;
    }
    if ((st = write_json(tj, p_truth, err)) || (st = write_truth_trials(sc, tr, N, p_tt, err))) goto done;
    st = bl_results_folder_commit(stage, err);
    stage = NULL;
    if (st) goto done;
    if (summary) {
        summary->participants = sc->n_participants;
        summary->trials = N;
        summary->recordings = sc->n_participants;
        summary->seconds = seconds;
        summary->p_upper = (double)n_upper / (double)N;
        summary->mean_rt = sum_rt / (double)N;
        summary->seed = seed;
    }
done:
    bl_results_folder_abort(stage);
    bl_analysis_close(first);
    bl_analysis_close(second);
    cJSON_Delete(tj);
    free(p_rec);
    free(p_trials);
    free(p_study);
    free(p_truth);
    free(p_tt);
    free(tr);
    free(levels);
    free(order);
    offsets_free(&po);
    gsl_rng_free(rng);
    return st;
}
