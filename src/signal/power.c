/* Band power per trial: windows from the recordings, Welch PSD, band sums, artifact flags, scale and
 * standardize, and power.csv.
 *
 * Conventions: docs/study-file.md ("power") and the shared signal conventions: window = [s + round(from*fs),
 * s + round(to*fs)) with s = round(onset*fs) (round = half away from zero, C99 llround); Welch as
 * scipy.signal.welch (spectrum.c); band power by the rectangle rule over the closed band, DC excluded;
 * line-noise bins within max(2 df, 2 Hz) of each harmonic left out; z-scores with the n-1 sample SD.
 *
 * Parallelism: trials are grouped by recording and cut into chunks; each thread owns its file handle,
 * buffers and Welch workspace (the plan is shared read-only). Every result is written to its own trial
 * row and errors are reported for the first failing chunk in a fixed order, so output is identical for
 * any thread count.
 */
#include "signal/power.h"
#include "core/output.h"
#include "signal/spectrum.h"
#include "signal/trace.h"
#include "signal/channels.h"
#include "signal/check_breakdown.h"
#include "design/trial_files.h"
#include "core/csvtext.h"
#include "core/groups.h"
#include "design/cells.h"
#include "core/strutil.h"
#include "core/textbuf.h"

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#ifdef _OPENMP
#include <omp.h>
#endif

enum { CHUNK_TRIALS = 32, BL_MAX_WINDOW_SAMPLES = 1 << 28 };
/* Fewest trials in a block worth a parallel region: two chunks. Starting a 2-thread team cost 0.05-7 ms
 * on the 2-core test machine (7 ms the first time under load), one trial's Welch spectrum of a 1 s
 * window at 1 kHz about 0.05-0.2 ms; below two chunks 1 thread was as fast or faster (docs/report.md). */
enum { PARALLEL_MIN_TRIALS = 2 * CHUNK_TRIALS };

/* CSV/TSV traces are parsed whole when opened, so one thread takes all trials of such a file. */
static int is_text_trace(const char *p)
{
    const char *dot = strrchr(p, '.');
    if (!dot || strchr(dot, '/')) return 0;
    return strcmp(dot, ".csv") == 0 || strcmp(dot, ".tsv") == 0 || strcmp(dot, ".txt") == 0 ||
           strcmp(dot, ".CSV") == 0 || strcmp(dot, ".TSV") == 0 || strcmp(dot, ".TXT") == 0;
}

typedef struct {
    size_t row;    /* trial index */
    size_t rec;    /* recording index */
    int64_t start; /* first sample of the window (may be outside the recording: checked when read) */
} job;

typedef struct {
    size_t rec, begin, end; /* jobs[begin..end) */
    bl_status status;
    bl_error err;
} item;

static int job_cmp(const void *a, const void *b)
{
    const job *x = a, *y = b;
    if (x->rec != y->rec) return x->rec < y->rec ? -1 : 1;
    if (x->start != y->start) return x->start < y->start ? -1 : 1;
    return x->row < y->row ? -1 : x->row > y->row;
}

void bl_power_result_destroy(bl_power_result *r)
{
    if (!r) return;
    for (size_t b = 0; b < r->n_bands; b++) {
        free(r->bands[b].name);
        free(r->bands[b].used);
    }
    free(r->bands);
    for (size_t i = 0; i < r->n_recordings; i++) {
        free(r->recordings[i].path);
        free(r->recordings[i].participant);
    }
    free(r->recordings);
    free(r->freq);
    for (size_t c = 0; c < r->n_spectra; c++) {
        free(r->spectra[c].condition);
        free(r->spectra[c].n);
        free(r->spectra[c].mean);
        free(r->spectra[c].m2);
    }
    free(r->spectra);
    free(r->band_power); /* artifact_power lives in the same block */
    free(r->row_recording);
    free(r->row_ptp);
    free(r->unit);
    free(r);
}

/* The recordings of the jobs, numbered by first appearance (by sorting the paths: one file per trial
 * stays O(n log n)). Takes ownership of paths[0..n_jobs). */
static bl_status assign_recordings(bl_power_result *r, const bl_trials *t, job *jobs, size_t n_jobs, char **paths,
                                   bl_error *err)
{
    size_t *id = malloc((n_jobs ? n_jobs : 1) * sizeof *id), n_rec = 0;
    bl_status st = BL_OK;
    if (!id) goto nomem;
    if ((st = bl_group_strings((const char *const *)paths, n_jobs, id, &n_rec, "recordings", err))) goto done;
    if (!(r->recordings = calloc(n_rec ? n_rec : 1, sizeof *r->recordings))) goto nomem;
    r->n_recordings = n_rec;
    for (size_t k = 0; k < n_jobs; k++) {
        bl_power_recording *rec = &r->recordings[id[k]];
        if (!rec->path) {
            rec->path = paths[k];
            paths[k] = NULL;
            if (!(rec->participant = bl_strdup(t->participants[t->participant[jobs[k].row]]))) goto nomem;
        }
        rec->n_trials++;
        jobs[k].rec = id[k];
    }
    goto done;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory listing the recordings");
done:
    for (size_t k = 0; k < n_jobs; k++) free(paths[k]);
    free(id);
    return st;
}

/* "<name>.*" recordings: the one file with a recording's extension; the last answer is kept, as
 * consecutive trials usually share a recording. */
typedef struct {
    char *pattern, *path;
} any_cache_t;

static bl_status any_extension(char **path, any_cache_t *cache, bl_error *err)
{
    size_t len = strlen(*path);
    if (len < 2 || strcmp(*path + len - 2, ".*") != 0) return BL_OK;
    if (!cache->pattern || strcmp(cache->pattern, *path) != 0) {
        char *found = NULL;
        bl_status st = bl_resolve_any_extension(*path, &found, err);
        if (st) return st;
        free(cache->pattern);
        free(cache->path);
        cache->pattern = *path;
        cache->path = found;
    } else {
        free(*path);
    }
    *path = bl_strdup(cache->path);
    return *path ? BL_OK : bl_error_set(err, BL_ERR_NOMEM, "out of memory");
}

/* Per-thread state. */
typedef struct {
    bl_trace *trace;
    size_t rec;     /* recording the trace belongs to, or SIZE_MAX */
    double *raw;    /* window_samples x channels */
    size_t raw_cap; /* doubles */
    double *x;      /* window_samples */
    bl_welch_work *work;
    bl_montage *mont;          /* the study's channels resolved for the open recording (names, units, gain) */
    double *psd_entry;         /* n_freqs: one entry's PSD when "average": "power" */
    double *clip_lo, *clip_hi; /* channels: full-scale values of the open recording, or NULL when it has none */
} thread_state;

static bl_status open_recording(thread_state *ts, const bl_study *s, bl_power_result *r, const bl_trials *t,
                                const bl_montage *m, size_t rec, size_t first_row, bl_error *err)
{
    bl_status st = BL_OK;
    bl_trace_close(ts->trace);
    ts->trace = NULL;
    ts->rec = SIZE_MAX;
    const char *path = r->recordings[rec].path;
    const char *part = t->participants[t->participant[first_row]];
    bl_error e = {0};
    if (is_text_trace(path)) { /* parsed whole: let threads parse different CSV files at once */
        st = bl_trace_open_series(path, s->recordings.rate, s->recordings.series, &ts->trace, &e);
    } else {
        /* sf_open reports failures through a process-wide sf_strerror(NULL): one thread at a time */
#ifdef _OPENMP
#pragma omp critical(bl_trace_open)
#endif
        st = bl_trace_open_series(path, s->recordings.rate, s->recordings.series, &ts->trace, &e);
    }
    if (st) return bl_error_set(err, st, "participant %s, trial %s: %s", part, t->trial_label[first_row], e.message);
    const bl_trace_info *info = bl_trace_get_info(ts->trace);
    if (fabs(info->rate - r->fs) > 1e-9 * r->fs)
        return bl_error_set(err, BL_ERR_INPUT,
                            "participant %s: %s is sampled at %.10g Hz, but the study uses %.10g Hz%s", part, path,
                            info->rate, r->fs,
                            isfinite(s->recordings.rate) ? " (recordings.rate)" : " (the rate of the first recording)");
    free(ts->clip_lo);
    free(ts->clip_hi);
    ts->clip_lo = ts->clip_hi = NULL;
    double lo, hi;
    if (s->power.clipping && bl_trace_channel_clip(ts->trace, 0, &lo, &hi)) {
        size_t ch = bl_trace_get_info(ts->trace)->channels;
        if (!(ts->clip_lo = malloc(ch * sizeof *ts->clip_lo)) || !(ts->clip_hi = malloc(ch * sizeof *ts->clip_hi)))
            return bl_error_set(err, BL_ERR_NOMEM, "out of memory opening %s", path);
        for (size_t c = 0; c < ch; c++) bl_trace_channel_clip(ts->trace, c, &ts->clip_lo[c], &ts->clip_hi[c]);
    }
    bl_montage_destroy(ts->mont);
    ts->mont = NULL;
    if ((st = bl_montage_resolve(m, ts->trace, "recordings.channels", s->recordings.unit,
                                 bl_study_recording_gain(s, path), &ts->mont, &e)))
        return bl_error_set(err, st, "participant %s, trial %s: %s", part, t->trial_label[first_row], e.message);
    size_t need = r->window_samples * info->channels;
    if (need > ts->raw_cap) {
        double *nr = realloc(ts->raw, need * sizeof *nr);
        if (!nr) return bl_error_set(err, BL_ERR_NOMEM, "out of memory for a window of %s", path);
        ts->raw = nr;
        ts->raw_cap = need;
    }
    ts->rec = rec;
    return BL_OK;
}

/* Artifact reason for a window, or NULL. `raw` holds every channel; only the montage's channels count
 * for clipping. */
static const char *artifact(const bl_study *s, const bl_trace_info *info, const bl_montage *m, const double *raw,
                            const double *x, size_t n, const double *clo, const double *chi)
{
    double lo = INFINITY, hi = -INFINITY;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(x[i])) return "artifact: non-finite";
        if (x[i] < lo) lo = x[i];
        if (x[i] > hi) hi = x[i];
    }
    if (s->power.clipping && clo) { /* per channel: integer PCM rails, EDF/BDF digital minimum/maximum */
        size_t ch = info->channels;
        for (size_t i = 0; i < n; i++)
            for (size_t k = 0; k < m->n; k++) {
                size_t a = (size_t)m->pos[k];
                if (raw[i * ch + a] <= clo[a] || raw[i * ch + a] >= chi[a]) return "artifact: clipping";
                if (m->neg[k] >= 0) {
                    size_t b = (size_t)m->neg[k];
                    if (raw[i * ch + b] <= clo[b] || raw[i * ch + b] >= chi[b]) return "artifact: clipping";
                }
            }
    }
    if (s->power.flat > 0 && hi - lo < s->power.flat) return "artifact: flat";
    if (s->power.peak_to_peak > 0 && hi - lo > s->power.peak_to_peak) return "artifact: peak-to-peak";
    return NULL;
}

/* One work item: its trials' PSDs go to block_psd (row k - block_begin), band power to the result. */
static double peak_to_peak(const double *x, size_t n)
{
    double lo = INFINITY, hi = -INFINITY;
    for (size_t i = 0; i < n; i++) {
        if (x[i] < lo) lo = x[i];
        if (x[i] > hi) hi = x[i];
    }
    return hi - lo;
}

/* "average": "power": the mean of each entry's PSD (so of each entry's band power, a linear sum of bins).
 * An entry's artifact is the window's; the PSD is computed only for windows without one, except that
 * flagged windows keep their power apart (as with the signal average) unless a sample is non-finite. */
static const char *power_average(const bl_study *s, const bl_trace_info *info, const bl_welch_plan *plan,
                                 thread_state *ts, size_t L, size_t nf, double *psd, double *ptp_out, bl_status *status,
                                 bl_error *e)
{
    const bl_montage *m = ts->mont;
    const char *why = NULL;
    for (size_t j = 0; j < nf; j++) psd[j] = 0;
    for (size_t k = 0; k < m->n; k++) {
        bl_montage_apply_entry(m, k, ts->raw, L, info->channels, ts->x);
        double ptp = peak_to_peak(ts->x, L);
        if (!(*ptp_out >= ptp)) *ptp_out = ptp;
        const char *w = artifact(s, info, m, ts->raw, ts->x, L, ts->clip_lo, ts->clip_hi);
        if (w && !why) why = w;
        if (why && strcmp(why, "artifact: non-finite") == 0) return why;
        if ((*status = bl_welch_compute(plan, ts->work, ts->x, L, ts->psd_entry, e))) return NULL;
        for (size_t j = 0; j < nf; j++) psd[j] += ts->psd_entry[j] / (double)m->n;
    }
    return why;
}

static void process_item(const bl_study *s, bl_power_result *r, const bl_trials *t, const bl_montage *m,
                         const bl_welch_plan *plan, const job *jobs, item *it, thread_state *ts, const char **reason,
                         double *block_psd, size_t block_begin)
{
    if (ts->rec != it->rec) {
        it->status = open_recording(ts, s, r, t, m, it->rec, jobs[it->begin].row, &it->err);
        if (it->status) return;
    }
    m = ts->mont;
    const bl_trace_info *info = bl_trace_get_info(ts->trace);
    if (it->begin == 0 || jobs[it->begin - 1].rec != it->rec) { /* first chunk of this recording: describe it */
        bl_power_recording *rec = &r->recordings[it->rec];
        rec->rate = info->rate;
        rec->channels = info->channels;
        rec->frames = info->frames;
        snprintf(rec->format, sizeof rec->format, "%s", info->format);
    }
    size_t L = r->window_samples, nf = r->n_freqs;
    for (size_t k = it->begin; k < it->end; k++) {
        size_t row = jobs[k].row;
        int64_t start = jobs[k].start;
        const char *part = t->participants[t->participant[row]];
        if (start < 0 || start + (int64_t)L > info->frames) {
            it->status = bl_error_set(&it->err, BL_ERR_INPUT,
                                      "participant %s, trial %s (%s line %zu): the window, samples %lld to %lld "
                                      "(%.6g s to %.6g s), is outside %s, which holds %lld samples (%.6g s)",
                                      part, t->trial_label[row], t->table->path ? t->table->path : "trials",
                                      t->table->line[row], (long long)start, (long long)(start + (int64_t)L) - 1,
                                      (double)start / r->fs, (double)(start + (int64_t)L) / r->fs,
                                      r->recordings[it->rec].path, (long long)info->frames,
                                      (double)info->frames / r->fs);
            return;
        }
        bl_error e = {0};
        if ((it->status = bl_trace_read(ts->trace, start, L, ts->raw, &e))) {
            bl_error_set(&it->err, it->status, "participant %s, trial %s: %s", part, t->trial_label[row], e.message);
            return;
        }
        double *psd = block_psd + (k - block_begin) * nf;
        r->row_recording[row] = it->rec;
        const char *why;
        if (s->recordings.average_power && m->n > 1) {
            r->row_ptp[row] = NAN;
            why = power_average(s, info, plan, ts, L, nf, psd, &r->row_ptp[row], &it->status, &e);
        } else {
            bl_montage_apply(m, ts->raw, L, info->channels, 1.0, ts->x); /* gain is inside the resolved montage */
            r->row_ptp[row] = peak_to_peak(ts->x, L);
            why = artifact(s, info, m, ts->raw, ts->x, L, ts->clip_lo, ts->clip_hi);
            if (!(why && strcmp(why, "artifact: non-finite") == 0))
                it->status = bl_welch_compute(plan, ts->work, ts->x, L, psd, &e);
        }
        if (why) reason[row] = why;
        if (!it->status && why && strcmp(why, "artifact: non-finite") == 0) continue;
        if (it->status) {
            bl_error_set(&it->err, it->status, "participant %s, trial %s: %s", part, t->trial_label[row], e.message);
            return;
        }
        /* a flagged trial's power is kept apart: power.csv shows it, the regressors never see it */
        double *dest = why ? r->artifact_power : r->band_power;
        for (size_t b = 0; b < r->n_bands; b++) {
            const bl_power_band *band = &r->bands[b];
            dest[row * r->n_bands + b] = bl_band_power(psd, r->df, band->first_bin, band->last_bin, band->used);
        }
    }
}

/* ---- groups and per-cell spectra ---- */

/* Standardize groups (participant, or participant x power.condition texts), numbered by first
 * appearance over all rows; first_of_group[g] is the first row of group g. Sorting keeps this
 * O(n log n) for any number of groups. */
static bl_status standardize_groups(const bl_study *s, const bl_trials *t, size_t *group, size_t *first_of_group,
                                    size_t *n_groups, bl_error *err)
{
    size_t n = t->n;
    *n_groups = n ? 1 : 0;
    if (s->power.standardize == BL_STANDARDIZE_NONE) {
        for (size_t i = 0; i < n; i++) group[i] = 0;
        first_of_group[0] = 0;
        return BL_OK;
    }
    int by_condition = s->power.standardize == BL_STANDARDIZE_PARTICIPANT_CONDITION;
    char **key = calloc(n ? n : 1, sizeof *key);
    bl_status st = BL_OK;
    if (!key) return bl_error_set(err, BL_ERR_NOMEM, "out of memory grouping trials for standardize");
    for (size_t i = 0; i < n && !st; i++) {
        /* participant number, then each condition value length-prefixed ("-" when missing): unambiguous */
        size_t len = 32;
        for (size_t k = 0; by_condition && k < s->power.n_condition; k++) {
            const char *v = t->table->cols[bl_table_find(t->table, s->power.condition[k])].text[i];
            len += 24 + (v ? strlen(v) : 0);
        }
        if (!(key[i] = malloc(len))) {
            st = bl_error_set(err, BL_ERR_NOMEM, "out of memory grouping trials for standardize");
            break;
        }
        int at = snprintf(key[i], len, "%zu", t->participant[i]);
        for (size_t k = 0; by_condition && k < s->power.n_condition; k++) {
            const char *v = t->table->cols[bl_table_find(t->table, s->power.condition[k])].text[i];
            at += v ? snprintf(key[i] + at, len - (size_t)at, "|%zu:%s", strlen(v), v)
                    : snprintf(key[i] + at, len - (size_t)at, "|-");
        }
    }
    if (!st) st = bl_group_strings((const char *const *)key, n, group, n_groups, "standardize groups", err);
    for (size_t i = 0; i < n; i++) free(key[i]);
    free(key);
    if (st) return st;
    for (size_t i = n; i-- > 0;) first_of_group[group[i]] = i;
    return BL_OK;
}

/* Accumulates each kept trial's PSD into the mean spectrum of its condition cell. A trial is kept
 * when it is not an artifact and all its band powers can be scaled; with standardize, the first kept
 * trial of a group waits (one PSD per group) until a second arrives, because the only kept trial
 * of a group is left out later. */
typedef struct {
    size_t *cell;           /* n rows: cell index, SIZE_MAX when cells are unknown */
    size_t *group;          /* n rows: standardize group */
    size_t *first_of_group; /* n_groups */
    size_t n_groups;
    size_t *kept;        /* n_groups: kept trials seen so far */
    size_t *pending_row; /* n_groups */
    double **pending;    /* n_groups: PSD of the first kept trial while it is the only one */
    int standardize;
} spectra_acc;

static void spectra_acc_free(spectra_acc *a)
{
    free(a->cell);
    free(a->group);
    free(a->first_of_group);
    free(a->kept);
    free(a->pending_row);
    for (size_t g = 0; a->pending && g < a->n_groups; g++) free(a->pending[g]);
    free(a->pending);
}

static bl_status spectra_setup(const bl_study *s, const bl_trials *t, bl_power_result *r, spectra_acc *a, bl_error *err)
{
    size_t n = t->n, nf = r->n_freqs;
    const char **cols = NULL;
    size_t n_cols = 0, n_cells = 0;
    int *ci = NULL;
    char **label = NULL;
    a->standardize = s->power.standardize != BL_STANDARDIZE_NONE;
    a->cell = malloc((n ? n : 1) * sizeof *a->cell);
    a->group = malloc((n ? n : 1) * sizeof *a->group);
    a->first_of_group = malloc((n ? n : 1) * sizeof *a->first_of_group);
    if (!a->cell || !a->group || !a->first_of_group) goto nomem;
    bl_status st = standardize_groups(s, t, a->group, a->first_of_group, &a->n_groups, err);
    if (st) return st;
    a->kept = calloc(a->n_groups ? a->n_groups : 1, sizeof *a->kept);
    a->pending_row = calloc(a->n_groups ? a->n_groups : 1, sizeof *a->pending_row);
    a->pending = calloc(a->n_groups ? a->n_groups : 1, sizeof *a->pending);
    if (!a->kept || !a->pending_row || !a->pending) goto nomem;
    for (size_t i = 0; i < n; i++) a->cell[i] = SIZE_MAX;
    if ((st = bl_cell_columns(s, NULL, 0, &cols, &n_cols, err))) return st;
    if (!(ci = malloc((n_cols ? n_cols : 1) * sizeof *ci))) goto nomem;
    for (size_t c = 0; c < n_cols; c++)
        if ((ci[c] = bl_table_find(t->table, cols[c])) < 0) goto done; /* the models' check names it */
    if (!(label = calloc(n ? n : 1, sizeof *label))) goto nomem;
    for (size_t i = 0; i < n; i++)
        if (!(label[i] = bl_cell_label(t->table, ci, n_cols, i))) goto nomem;
    if ((st = bl_group_strings((const char *const *)label, n, a->cell, &n_cells, "condition cells", err))) goto fail;
    if (!(r->spectra = calloc(n_cells ? n_cells : 1, sizeof *r->spectra))) goto nomem;
    r->n_spectra = n_cells;
    for (size_t i = 0; i < n; i++) {
        bl_power_spectrum *sp = &r->spectra[a->cell[i]];
        if (sp->condition) continue;
        sp->condition = label[i];
        label[i] = NULL;
        if (!(sp->n = calloc(nf, sizeof *sp->n)) || !(sp->mean = calloc(nf, sizeof *sp->mean)) ||
            !(sp->m2 = calloc(nf, sizeof *sp->m2)))
            goto nomem;
    }
    goto done;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory for the mean spectra");
    goto fail;
done:
    st = BL_OK;
fail:
    for (size_t i = 0; label && i < n; i++) free(label[i]);
    free(label);
    free(ci);
    free((void *)cols);
    return st;
}

/* Welford's update, bin by bin; non-finite values are left out of their bin. */
static void spectrum_add(bl_power_spectrum *sp, const double *psd, size_t nf)
{
    sp->trials++;
    for (size_t j = 0; j < nf; j++) {
        double v = psd[j];
        if (!isfinite(v)) continue;
        sp->n[j]++;
        double d = v - sp->mean[j];
        sp->mean[j] += d / (double)sp->n[j];
        sp->m2[j] += d * (v - sp->mean[j]);
    }
}

static double scaled(bl_scale sc, double v);

/* Take the PSD of a trial just computed (in job order, so the result does not depend on threads). */
static int spectra_take(spectra_acc *a, bl_power_result *r, const bl_study *s, size_t row, const double *psd)
{
    for (size_t b = 0; b < r->n_bands; b++)
        if (!isfinite(scaled(s->power.scale, r->band_power[row * r->n_bands + b]))) return 1; /* left out later */
    if (a->cell[row] == SIZE_MAX) return 1;
    size_t nf = r->n_freqs, g = a->group[row];
    if (a->standardize && a->kept[g] == 0) {
        if (!(a->pending[g] = malloc(nf * sizeof *a->pending[g]))) return 0;
        memcpy(a->pending[g], psd, nf * sizeof *psd);
        a->pending_row[g] = row;
        a->kept[g] = 1;
        return 1;
    }
    if (a->standardize && a->pending[g]) {
        spectrum_add(&r->spectra[a->cell[a->pending_row[g]]], a->pending[g], nf);
        free(a->pending[g]);
        a->pending[g] = NULL;
    }
    a->kept[g]++;
    spectrum_add(&r->spectra[a->cell[row]], psd, nf);
    return 1;
}

static double scaled(bl_scale sc, double v)
{
    switch (sc) {
    case BL_SCALE_LOG10: return log10(v);
    case BL_SCALE_DB: return 10.0 * log10(v);
    default: return v;
    }
}

/* Relative spread (sample SD / |mean|) of the raw band power of the kept trials of each standardize
 * group. Below 1e-9 the differences are rounding noise of one repeated value (double precision
 * carries about 16 digits), and the z-scores would turn that noise into a regressor with unit
 * variance: refuse, naming participant and band. */
static bl_status check_spread(const bl_study *s, const bl_trials *t, const double *raw, const spectra_acc *acc,
                              const char *band, bl_error *err)
{
    size_t ng = acc->n_groups;
    double *mean = calloc(ng ? ng : 1, sizeof *mean), *ss = calloc(ng ? ng : 1, sizeof *ss);
    size_t *cnt = calloc(ng ? ng : 1, sizeof *cnt);
    bl_status st = BL_OK;
    if (!mean || !ss || !cnt) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory standardizing band power");
        goto done;
    }
    for (size_t i = 0; i < t->n; i++)
        if (!t->excluded[i]) {
            mean[acc->group[i]] += raw[i];
            cnt[acc->group[i]]++;
        }
    for (size_t g = 0; g < ng; g++) mean[g] = cnt[g] ? mean[g] / (double)cnt[g] : NAN;
    for (size_t i = 0; i < t->n; i++)
        if (!t->excluded[i]) ss[acc->group[i]] += (raw[i] - mean[acc->group[i]]) * (raw[i] - mean[acc->group[i]]);
    for (size_t g = 0; g < ng && !st; g++) {
        if (cnt[g] < 2) continue;
        double rel = sqrt(ss[g] / (double)(cnt[g] - 1)) / fabs(mean[g]);
        if (rel > 0 && rel < 1e-9) {
            size_t j = acc->first_of_group[g];
            st = bl_error_set(err, BL_ERR_INPUT,
                              "band %s: the kept trials of participant %s%s have the same power up to rounding "
                              "(relative SD %.3g of %.10g %s^2, below 1e-9); standardizing would turn rounding noise "
                              "into a regressor",
                              band, t->participants[t->participant[j]],
                              s->power.standardize == BL_STANDARDIZE_PARTICIPANT_CONDITION ? " (in one condition)" : "",
                              rel, mean[g], s->recordings.unit);
        }
    }
done:
    free(mean);
    free(ss);
    free(cnt);
    return st;
}

/* z-score each band's scaled values within groups, over kept trials; adds the table columns. */
static bl_status add_regressors(const bl_study *s, bl_trials *t, bl_power_result *r, const spectra_acc *acc,
                                bl_warnings *warn, bl_error *err)
{
    size_t n = t->n, nb = r->n_bands;
    bl_status st = BL_OK;
    double *val = malloc(n * sizeof *val);
    double *raw = malloc(n * sizeof *raw);
    const size_t *group = acc->group, *first_of_group = acc->first_of_group;
    size_t n_groups = acc->n_groups;
    double *sum = calloc(n, sizeof *sum), *sum2 = calloc(n, sizeof *sum2);
    size_t *cnt = calloc(n, sizeof *cnt);
    if (!val || !raw || !sum || !sum2 || !cnt) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory standardizing band power");
        goto done;
    }

    /* non-positive band power cannot be log-scaled: say so per trial instead of writing -inf */
    /* ... and power that overflowed (samples near 1e154 or larger square to infinity) is a different cause */
    size_t n_zero = 0, n_overflow = 0, first_overflow = 0;
    for (size_t i = 0; i < n; i++) {
        if (t->excluded[i]) continue;
        for (size_t b = 0; b < nb; b++) {
            double v = r->band_power[i * nb + b];
            if (!isfinite(v)) {
                bl_trials_exclude(t, i, "non-finite band power");
                if (n_overflow++ == 0) first_overflow = i;
                break;
            }
            if (!isfinite(scaled(s->power.scale, v))) {
                bl_trials_exclude(t, i, "zero band power");
                n_zero++;
                break;
            }
        }
    }
    if (n_zero)
        bl_warnings_add(
            warn, "%zu trials have zero power in a band (a silent or disconnected channel?) and were left out", n_zero);
    if (n_overflow)
        bl_warnings_add(warn,
                        "%zu trials have non-finite band power, first participant %s, trial %s: their samples are so "
                        "large (|x| above about 1e150 %s) that the power overflows; they were left out (check "
                        "recordings.gain and the recording's values)",
                        n_overflow, t->participants[t->participant[first_overflow]], t->trial_label[first_overflow],
                        s->recordings.unit);
    if (s->power.standardize != BL_STANDARDIZE_NONE) {
        /* a group needs two kept trials for a sample SD */
        for (size_t i = 0; i < n; i++) cnt[group[i]] += !t->excluded[i];
        for (size_t i = 0; i < n; i++)
            if (!t->excluded[i] && cnt[group[i]] < 2) {
                bl_trials_exclude(t, i, "standardize: only trial of its group");
                bl_warnings_add(warn,
                                "participant %s, trial %s: the only kept trial of its standardize group; left out",
                                t->participants[t->participant[i]], t->trial_label[i]);
            }
    }
    for (size_t b = 0; b < nb; b++) {
        const char *name = r->bands[b].name;
        memset(sum, 0, n_groups * sizeof *sum);
        memset(sum2, 0, n_groups * sizeof *sum2);
        memset(cnt, 0, n_groups * sizeof *cnt);
        for (size_t i = 0; i < n; i++) {
            raw[i] = r->band_power[i * nb + b];
            val[i] = NAN;
            if (t->excluded[i]) continue;
            val[i] = scaled(s->power.scale, raw[i]);
            sum[group[i]] += val[i];
            cnt[group[i]]++;
        }
        if (s->power.standardize != BL_STANDARDIZE_NONE && (st = check_spread(s, t, raw, acc, name, err))) goto done;
        if (s->power.standardize != BL_STANDARDIZE_NONE) {
            for (size_t g = 0; g < n_groups; g++) sum[g] = cnt[g] ? sum[g] / (double)cnt[g] : NAN;
            for (size_t i = 0; i < n; i++)
                if (!t->excluded[i]) sum2[group[i]] += (val[i] - sum[group[i]]) * (val[i] - sum[group[i]]);
            for (size_t g = 0; g < n_groups; g++) {
                double sd = cnt[g] > 1 ? sqrt(sum2[g] / (double)(cnt[g] - 1)) : NAN;
                if (cnt[g] > 1 && !(sd > 0)) {
                    size_t j = first_of_group[g];
                    st = bl_error_set(
                        err, BL_ERR_INPUT,
                        "band %s: every kept trial of participant %s%s has the same power; it cannot be "
                        "standardized",
                        name, t->participants[t->participant[j]],
                        s->power.standardize == BL_STANDARDIZE_PARTICIPANT_CONDITION ? " (in one condition)" : "");
                    goto done;
                }
                sum2[g] = sd;
            }
            for (size_t i = 0; i < n; i++)
                if (!t->excluded[i]) val[i] = (val[i] - sum[group[i]]) / sum2[group[i]];
        }
        char col[300];
        snprintf(col, sizeof col, "%s_power", name);
        if ((st = bl_table_add_numeric(t->table, col, raw, err))) goto done;
        if ((st = bl_table_add_numeric(t->table, name, val, err))) goto done;
    }
done:
    free(val);
    free(raw);
    free(sum);
    free(sum2);
    free(cnt);
    return st;
}

/* Runs the work items in blocks of a few hundred trials: the threads fill one PSD row per trial of
 * the block, then the block's PSDs are added to the cell spectra in job order. Peak memory is one
 * block of PSDs, whatever the number of trials. Each thread keeps its file handle across blocks. */
static bl_status compute_blocks(const bl_study *s, bl_power_result *r, const bl_trials *t, const bl_montage *m,
                                const bl_welch_plan *plan, const job *jobs, item *items, size_t n_items, int threads,
                                const char **reason, spectra_acc *acc, bl_error *err)
{
    int nt = threads > 0 ? threads : 1;
#ifdef _OPENMP
    if (threads <= 0) nt = omp_get_max_threads();
#endif
    size_t nf = r->n_freqs, block_trials = (size_t)nt * CHUNK_TRIALS * 4;
    thread_state *ts = calloc((size_t)nt, sizeof *ts);
    double *block_psd = malloc(block_trials * nf * sizeof *block_psd);
    bl_status st = BL_OK;
    int failed_alloc = !ts || !block_psd;
    for (int i = 0; !failed_alloc && i < nt; i++) {
        bl_error e = {0};
        ts[i].rec = SIZE_MAX;
        ts[i].x = malloc(r->window_samples * sizeof *ts[i].x);
        ts[i].psd_entry = malloc(nf * sizeof *ts[i].psd_entry);
        if (!ts[i].x || !ts[i].psd_entry || bl_welch_work_create(plan, r->window_samples, &ts[i].work, &e) != BL_OK)
            failed_alloc = 1;
    }
    for (size_t first = 0; !failed_alloc && first < n_items;) {
        size_t last = first, block_begin = items[first].begin;
        while (last < n_items && items[last].end - block_begin <= block_trials) last++;
        /* A block of one item, or of fewer than PARALLEL_MIN_TRIALS trials, runs on the calling thread:
         * starting the team costs more than such a block (see PARALLEL_MIN_TRIALS). */
        int parallel = last - first >= 2 && items[last - 1].end - block_begin >= PARALLEL_MIN_TRIALS;
        (void)parallel;
#ifdef _OPENMP
#pragma omp parallel for num_threads(nt)                                                                               \
    schedule(static) if (parallel) /* contiguous: each thread reads its files forward */
#endif
        for (size_t k = first; k < last; k++) {
            int tid = 0;
#ifdef _OPENMP
            tid = omp_get_thread_num();
#endif
            process_item(s, r, t, m, plan, jobs, &items[k], &ts[tid], reason, block_psd, block_begin);
        }
        for (size_t k = first; k < last; k++)
            if (items[k].status) {
                st = bl_error_set(err, items[k].status, "%s", items[k].err.message);
                goto done;
            }
        for (size_t j = block_begin; j < items[last - 1].end; j++)
            if (!reason[jobs[j].row] && !spectra_take(acc, r, s, jobs[j].row, block_psd + (j - block_begin) * nf))
                failed_alloc = 1;
        first = last;
    }
done:
    for (int i = 0; ts && i < nt; i++) {
        bl_trace_close(ts[i].trace);
        bl_montage_destroy(ts[i].mont);
        free(ts[i].clip_lo);
        free(ts[i].clip_hi);
        free(ts[i].psd_entry);
        free(ts[i].raw);
        free(ts[i].x);
        bl_welch_work_destroy(ts[i].work);
    }
    free(ts);
    free(block_psd);
    if (!st && failed_alloc) st = bl_error_set(err, BL_ERR_NOMEM, "out of memory computing band power");
    return st;
}

static bl_status parse_onset(const bl_trials *t, int col, size_t i, const char *key, double *out, bl_error *err)
{
    const char *txt = t->table->cols[col].text[i];
    if (!txt)
        return bl_error_set(err, BL_ERR_INPUT, "%s:%zu: column \"%s\" (%s) is missing",
                            t->table->path ? t->table->path : "trials", t->table->line[i], t->table->cols[col].name,
                            key);
    char *end;
    double x = strtod(txt, &end);
    while (*end == ' ') end++;
    if (end == txt || *end || !isfinite(x))
        return bl_error_set(err, BL_ERR_INPUT, "%s:%zu: column \"%s\" (field %d, %s): '%s' is not a number of seconds",
                            t->table->path ? t->table->path : "trials", t->table->line[i], t->table->cols[col].name,
                            col + 1, key, txt);
    *out = x;
    return BL_OK;
}

/* A window whose place depends on the RT makes power depend on the RT: aligned to the response, a
 * window that starts before the stimulus onset covers more pre-stimulus signal the faster the
 * response; aligned to the onset, a window that ends after the response holds response-related
 * signal only on fast trials. Either way power correlates with RT and can fake threshold or drift
 * slopes (docs/study-file.md, "Windows and response times"). Counts the windows and warns. */
static void warn_window_confound(const bl_study *s, const bl_trials *t, const job *jobs, size_t n_jobs,
                                 bl_power_result *r, bl_warnings *warn)
{
    int to_response = s->power.align == BL_ALIGN_RESPONSE;
    size_t count = 0;
    for (size_t k = 0; k < n_jobs; k++) {
        double rt = t->rt[jobs[k].row];
        if (!isfinite(rt)) continue;
        /* window relative to the onset: [from, to) + rt when aligned to the response */
        if (to_response ? rt + s->power.from < 0 : s->power.to > rt) count++;
    }
    r->n_window_confounds = count;
    if (!count) return;
    if (to_response)
        bl_warnings_add(
            warn,
            "power.window (aligned to the response, from %.6g s) begins before the stimulus onset in "
            "%.1f%% of windows (%zu of %zu, every RT below %.6g s): window position follows RT, so band power "
            "can follow RT and fake threshold or drift slopes; see docs/study-file.md, \"Windows and response "
            "times\"",
            s->power.from, 100.0 * (double)count / (double)n_jobs, count, n_jobs, -s->power.from);
    else
        bl_warnings_add(warn,
                        "power.window (aligned to the onset, to %.6g s) reaches past the response in %.1f%% of "
                        "windows (%zu of %zu, every RT below %.6g s): the window then holds response-related signal on "
                        "fast trials only, so band power can follow RT and fake threshold or drift slopes; see "
                        "docs/study-file.md, \"Windows and response times\"",
                        s->power.to, 100.0 * (double)count / (double)n_jobs, count, n_jobs, s->power.to);
}

/* Alignment time (align[row], s) and recording of each kept trial: one job per windowed trial. */
static bl_status plan_jobs(const bl_study *s, const bl_trials *t, bl_power_result *r, int c_onset, job *jobs,
                           size_t *n_jobs_out, double *align, bl_error *err)
{
    size_t n = t->n, n_jobs = 0;
    any_cache_t any_cache = {NULL, NULL};
    char **paths = calloc(n ? n : 1, sizeof *paths);
    if (!paths) return bl_error_set(err, BL_ERR_NOMEM, "out of memory computing band power");
    bl_status st = BL_OK;
    for (size_t i = 0; i < n && !st; i++) {
        if (t->excluded[i]) continue;
        double onset = 0;
        if ((st = parse_onset(t, c_onset, i, "recordings.onset", &onset, err))) break;
        align[i] = onset + (s->power.align == BL_ALIGN_RESPONSE ? t->rt[i] : 0.0);
        if ((st = bl_pattern_expand(s->recordings.file, t->table, i, &paths[n_jobs], err))) break;
        if ((st = any_extension(&paths[n_jobs], &any_cache, err))) {
            free(paths[n_jobs]);
            paths[n_jobs] = NULL;
            break;
        }
        jobs[n_jobs].row = i;
        n_jobs++;
    }
    if (!st) st = assign_recordings(r, t, jobs, n_jobs, paths, err);
    else
        for (size_t k = 0; k < n_jobs; k++) free(paths[k]);
    free(paths);
    free(any_cache.pattern);
    free(any_cache.path);
    *n_jobs_out = n_jobs;
    return st;
}

/* The sampling rate: the study's, or the first recording's. */
static bl_status find_rate(const bl_study *s, const bl_trials *t, bl_power_result *r, const job *jobs, size_t n_jobs,
                           bl_error *err)
{
    if (isfinite(s->recordings.rate)) {
        r->fs = s->recordings.rate;
        return BL_OK;
    }
    if (!n_jobs)
        return bl_error_set(err, BL_ERR_INPUT, "%s: no trial is left to window (every trial is excluded)",
                            t->table->path);
    bl_trace *tr = NULL;
    bl_error e = {0};
    size_t row = jobs[0].row;
    bl_status st = bl_trace_open_series(r->recordings[0].path, NAN, s->recordings.series, &tr, &e);
    if (st)
        return bl_error_set(err, st, "participant %s, trial %s: %s", t->participants[t->participant[row]],
                            t->trial_label[row], e.message);
    r->fs = bl_trace_get_info(tr)->rate;
    bl_trace_close(tr);
    return BL_OK;
}

/* Window and Welch segment in samples, and each job's first sample. Range checks come before rounding to
 * 64-bit sample indices (llround of a value out of range is undefined). */
static bl_status window_geometry(const bl_study *s, const bl_trials *t, bl_power_result *r, job *jobs, size_t n_jobs,
                                 const double *align, bl_error *err)
{
    double fs = r->fs;
    if (!(fs > 0 && fabs(s->power.from * fs) < 0x1p62 && fabs(s->power.to * fs) < 0x1p62 &&
          (s->power.to - s->power.from) * fs <= (double)BL_MAX_WINDOW_SAMPLES))
        return bl_error_set(err, BL_ERR_INPUT,
                            "%s: key \"power.window\": from %.10g s to %.10g s is %.6g samples at %.10g Hz; at most "
                            "%d samples fit in a window",
                            s->path, s->power.from, s->power.to, (s->power.to - s->power.from) * fs, fs,
                            BL_MAX_WINDOW_SAMPLES);
    long long a = llround(s->power.from * fs), b = llround(s->power.to * fs);
    r->window_samples = b > a ? (size_t)(b - a) : 0;
    r->nperseg = (size_t)llround(s->power.segment * fs);
    if (r->nperseg > r->window_samples && r->nperseg <= r->window_samples + 1) r->nperseg = r->window_samples;
    if (r->window_samples < 2 || r->nperseg < 2)
        return bl_error_set(err, BL_ERR_INPUT,
                            "%s: key \"power.segment\": %.6g s is %zu samples at %.10g Hz (window %zu samples); at "
                            "least 2 are needed",
                            s->path, s->power.segment, r->nperseg, fs, r->window_samples);
    r->noverlap = (size_t)llround(s->power.overlap * (double)r->nperseg);
    if (r->noverlap >= r->nperseg) r->noverlap = r->nperseg - 1;
    r->nfft = r->nperseg;
    for (size_t k = 0; k < n_jobs; k++) {
        size_t row = jobs[k].row;
        if (!(fabs(align[row] * fs) < 0x1p62)) /* onset (+ rt) too large to be a sample index */
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s:%zu: column \"%s\" (recordings.onset)%s: %.10g s is sample %.6g at %.10g Hz, "
                                "beyond any recording",
                                t->table->path ? t->table->path : "trials", t->table->line[row], s->recordings.onset,
                                s->power.align == BL_ALIGN_RESPONSE ? " + rt" : "", align[row], align[row] * fs, fs);
        jobs[k].start = llround(align[row] * fs) + a;
    }
    return BL_OK;
}

/* The frequency grid and each band's bins (line-noise bins left out); warnings for thin or low bands. */
static bl_status make_bands(const bl_study *s, bl_power_result *r, bl_warnings *warn, bl_error *err)
{
    double fs = r->fs;
    if (!(r->freq = malloc(r->n_freqs * sizeof *r->freq)) ||
        !(r->bands = calloc(s->power.n_bands ? s->power.n_bands : 1, sizeof *r->bands)))
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory computing band power");
    r->n_bands = s->power.n_bands; /* only now: bl_power_result_destroy walks n_bands entries */
    for (size_t j = 0; j < r->n_freqs; j++) r->freq[j] = (double)j * r->df;
    double guard = fmax(2.0 * r->df, 2.0);
    for (size_t k = 0; k < r->n_bands; k++) {
        const bl_band_spec *bs = &s->power.bands[k];
        bl_power_band *pb = &r->bands[k];
        if (!(pb->name = bl_strdup(bs->name)) || !(pb->used = calloc(r->n_freqs, 1)))
            return bl_error_set(err, BL_ERR_NOMEM, "out of memory computing band power");
        pb->lo = bs->lo;
        pb->hi = bs->hi;
        if (bs->hi > fs / 2)
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s: key \"power.bands.%s\": the band [%.10g, %.10g] Hz reaches above the Nyquist "
                                "frequency %.10g Hz of the recordings",
                                s->path, bs->name, bs->lo, bs->hi, fs / 2);
        bl_band_bins(r->df, r->n_freqs, bs->lo, bs->hi, &pb->first_bin, &pb->last_bin);
        for (size_t j = pb->first_bin; j <= pb->last_bin && pb->first_bin <= pb->last_bin; j++) {
            int keep = 1;
            if (s->power.line_noise > 0)
                for (double h = s->power.line_noise; h <= fs / 2 + guard; h += s->power.line_noise)
                    if (fabs(r->freq[j] - h) <= guard) keep = 0;
            pb->used[j] = (unsigned char)keep;
            pb->n_bins += (size_t)keep;
        }
        if (pb->n_bins == 0)
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s: key \"power.bands.%s\": no frequency bin in [%.10g, %.10g] Hz at a resolution of "
                                "%.6g Hz%s; widen the band or lengthen power.segment",
                                s->path, bs->name, bs->lo, bs->hi, r->df,
                                s->power.line_noise > 0 ? " (after leaving out line-noise bins)" : "");
        if (pb->n_bins < 2)
            bl_warnings_add(warn,
                            "band %s [%g, %g] Hz holds only %zu frequency bin at %.6g Hz resolution; lengthen "
                            "power.segment for a steadier estimate",
                            bs->name, bs->lo, bs->hi, pb->n_bins, r->df);
        if (s->power.detrend != BL_DETREND_NONE && (double)pb->first_bin < 2.0)
            bl_warnings_add(warn,
                            "band %s starts at bin %zu (%.6g Hz), below 2 x the resolution %.6g Hz, where "
                            "detrending biases the PSD low",
                            bs->name, pb->first_bin, r->freq[pb->first_bin], r->df);
    }
    return BL_OK;
}

/* Per-row outputs, NAN until computed: band power, flagged trials' power (the second half of the block, which
 * the regressors never see), each row's recording and its window's peak-to-peak amplitude (the check's
 * breakdown and scale hints). */
static bl_status alloc_rows(bl_power_result *r, size_t n, bl_error *err)
{
    size_t nb = r->n_bands ? r->n_bands : 1;
    if (!(r->band_power = malloc(2 * (n ? n : 1) * nb * sizeof *r->band_power)) ||
        !(r->row_recording = malloc((n ? n : 1) * sizeof *r->row_recording)) ||
        !(r->row_ptp = malloc((n ? n : 1) * sizeof *r->row_ptp)))
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory computing band power");
    r->artifact_power = r->band_power + (n ? n : 1) * nb;
    for (size_t k = 0; k < n * r->n_bands; k++) r->band_power[k] = r->artifact_power[k] = NAN;
    for (size_t k = 0; k < n; k++) r->row_recording[k] = SIZE_MAX, r->row_ptp[k] = NAN;
    return BL_OK;
}

/* Work items: chunks of trials of one recording, in a fixed order. */
static bl_status make_items(job *jobs, size_t n_jobs, item **items_out, size_t *n_items, bl_error *err)
{
    qsort(jobs, n_jobs, sizeof *jobs, job_cmp);
    item *items = calloc(n_jobs ? n_jobs : 1, sizeof *items);
    if (!items) return bl_error_set(err, BL_ERR_NOMEM, "out of memory computing band power");
    *n_items = 0;
    for (size_t k = 0; k < n_jobs;) {
        size_t e = k;
        while (e < n_jobs && jobs[e].rec == jobs[k].rec && e - k < CHUNK_TRIALS) e++;
        items[*n_items].rec = jobs[k].rec;
        items[*n_items].begin = k;
        items[*n_items].end = e;
        (*n_items)++;
        k = e;
    }
    *items_out = items;
    return BL_OK;
}

/* Flagged trials excluded with their reason, regressors added, excluded trials' band power NAN; warnings. */
static bl_status finish_trials(const bl_study *s, bl_trials *t, bl_power_result *r, const char **reason, size_t n_jobs,
                               const spectra_acc *acc, bl_warnings *warn, bl_error *err)
{
    size_t n = t->n;
    for (size_t i = 0; i < n; i++)
        if (reason[i]) {
            bl_trials_exclude(t, i, reason[i]);
            r->n_artifacts++;
        }
    for (size_t i = 0; i < n; i++) /* excluded trials keep NAN band power */
        if (t->excluded[i])
            for (size_t k = 0; k < r->n_bands; k++) r->band_power[i * r->n_bands + k] = NAN;
    bl_status st = add_regressors(s, t, r, acc, warn, err);
    if (st) return st;
    for (size_t i = 0; i < n; i++)
        if (t->excluded[i])
            for (size_t k = 0; k < r->n_bands; k++) r->band_power[i * r->n_bands + k] = NAN;
    if (s->power.clipping)
        for (size_t k = 0; k < r->n_recordings; k++)
            if (!strstr(r->recordings[k].format, "-bit PCM") && strncmp(r->recordings[k].format, "EDF", 3) != 0 &&
                strncmp(r->recordings[k].format, "BDF", 3) != 0)
                bl_warnings_add(warn,
                                "%s (%s) has no integer full scale, so power.artifacts.clipping does not apply to it",
                                r->recordings[k].path, r->recordings[k].format);
    if (r->n_artifacts)
        bl_warnings_add(warn, "%zu of %zu windowed trials were flagged as artifacts and left out", r->n_artifacts,
                        n_jobs);
    return BL_OK;
}

bl_status bl_power_compute(const bl_study *s, bl_trials *t, int threads, bl_power_result **out, bl_warnings *warn,
                           bl_error *err)
{
    *out = NULL;
    if (!s->has_power || !s->has_recordings)
        return bl_error_set(err, BL_ERR_INPUT, "%s: the study has no \"recordings\" and \"power\" sections", s->path);
    bl_status st = BL_OK;
    bl_montage *m = NULL;
    bl_welch_plan *plan = NULL;
    job *jobs = NULL;
    item *items = NULL;
    const char **reason = NULL;
    double *align = NULL;
    spectra_acc acc = {0};
    size_t n = t->n, n_jobs = 0, n_items = 0;
    bl_power_result *r = calloc(1, sizeof *r);
    if (!r) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    r->n_trials = n;
    if (!(r->unit = bl_strdup(s->recordings.unit))) goto nomem;
    if ((st = bl_montage_parse((const char *const *)s->recordings.channels, s->recordings.n_channels,
                               "recordings.channels", &m, err)))
        goto fail;
    int c_onset = bl_table_find(t->table, s->recordings.onset);
    if (c_onset < 0) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: column \"%s\" (recordings.onset) is not in the trial table",
                          t->table->path, s->recordings.onset);
        goto fail;
    }
    jobs = malloc((n ? n : 1) * sizeof *jobs);
    reason = calloc(n ? n : 1, sizeof *reason);
    align = malloc((n ? n : 1) * sizeof *align);
    if (!jobs || !reason || !align) goto nomem;
    if ((st = plan_jobs(s, t, r, c_onset, jobs, &n_jobs, align, err)) || (st = find_rate(s, t, r, jobs, n_jobs, err)) ||
        (st = window_geometry(s, t, r, jobs, n_jobs, align, err)))
        goto fail;
    warn_window_confound(s, t, jobs, n_jobs, r, warn);
    if ((st = bl_welch_plan_create(r->fs, r->nperseg, r->noverlap, r->nfft, s->power.detrend,
                                   s->power.median ? BL_WELCH_MEDIAN : BL_WELCH_MEAN, BL_WELCH_DENSITY, &plan, err)))
        goto fail;
    r->df = bl_welch_df(plan);
    r->n_freqs = bl_welch_n_freqs(plan);
    r->n_segments = bl_welch_n_segments(plan, r->window_samples);
    size_t lpf = bl_largest_prime_factor(r->nperseg);
    if (lpf > 7)
        bl_warnings_add(warn,
                        "segment length %zu samples has the prime factor %zu, which makes the FFT slow; %zu samples "
                        "(power.segment = %.10g s) would be fast",
                        r->nperseg, lpf, bl_next_fast_size(r->nperseg), (double)bl_next_fast_size(r->nperseg) / r->fs);
    if ((st = make_bands(s, r, warn, err)) || (st = alloc_rows(r, n, err)) ||
        (st = spectra_setup(s, t, r, &acc, err)) || (st = make_items(jobs, n_jobs, &items, &n_items, err)) ||
        (st = compute_blocks(s, r, t, m, plan, jobs, items, n_items, threads, reason, &acc, err)) ||
        (st = finish_trials(s, t, r, reason, n_jobs, &acc, warn, err)))
        goto fail;
    goto done;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory computing band power");
fail:
    bl_power_result_destroy(r);
    r = NULL;
done:
    free(items);
    free(jobs);
    free(reason);
    free(align);
    spectra_acc_free(&acc);
    bl_montage_destroy(m);
    bl_welch_plan_destroy(plan);
    *out = r;
    return st;
}

/* ---- power.csv ---- */

static void put_field(FILE *f, const char *s) { bl_csv_text(f, s); }

static void put_number(FILE *f, double x)
{
    if (isfinite(x)) fprintf(f, "%.17g", x);
    else fputs("NA", f);
}

bl_status bl_power_write_csv(const bl_study *s, const bl_trials *t, const bl_power_result *r, const char *path,
                             bl_error *err)
{
    bl_outfile *of = NULL;
    bl_status st = bl_outfile_open(path, &of, err);
    if (st) return st;
    FILE *f = bl_outfile_stream(of);
    /* the trial file's own columns: everything but the band columns added by power */
    size_t nb = r ? r->n_bands : 0;
    size_t n_cols = t->table->n_cols;
    int *skip = calloc(n_cols ? n_cols : 1, sizeof *skip);
    if (!skip) {
        bl_outfile_abort(of);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory writing %s", path);
    }
    for (size_t j = 0; j < n_cols; j++) {
        const char *name = t->table->cols[j].name;
        for (size_t b = 0; b < nb; b++) {
            char pn[300];
            snprintf(pn, sizeof pn, "%s_power", r->bands[b].name);
            if (strcmp(name, r->bands[b].name) == 0 || strcmp(name, pn) == 0) skip[j] = 1;
        }
        /* the leading participant/trial columns already carry these */
        if (strcmp(name, "participant") == 0 && strcmp(s->trials.participant, "participant") == 0) skip[j] = 1;
        if (strcmp(name, "trial") == 0 && s->trials.trial && strcmp(s->trials.trial, "trial") == 0) skip[j] = 1;
    }
    fputs("participant,trial", f);
    for (size_t j = 0; j < n_cols; j++)
        if (!skip[j]) {
            fputc(',', f);
            put_field(f, t->table->cols[j].name);
        }
    for (size_t b = 0; b < nb; b++) {
        fputc(',', f);
        fprintf(f, "%s_power,", r->bands[b].name);
        put_field(f, r->bands[b].name);
    }
    fputs(",artifact\n", f);
    for (size_t i = 0; i < t->n; i++) {
        put_field(f, t->participants[t->participant[i]]);
        fputc(',', f);
        put_field(f, t->trial_label[i]);
        for (size_t j = 0; j < n_cols; j++)
            if (!skip[j]) {
                fputc(',', f);
                put_field(f, t->table->cols[j].text[i]);
            }
        for (size_t b = 0; b < nb; b++) {
            int c_raw, c_val;
            char pn[300];
            snprintf(pn, sizeof pn, "%s_power", r->bands[b].name);
            c_raw = bl_table_find(t->table, pn);
            c_val = bl_table_find(t->table, r->bands[b].name);
            double raw = c_raw >= 0 ? t->table->cols[c_raw].num[i] : NAN;
            if (!isfinite(raw) && r->artifact_power) raw = r->artifact_power[i * nb + b];
            fputc(',', f);
            put_number(f, raw);
            fputc(',', f);
            put_number(f, c_val >= 0 ? t->table->cols[c_val].num[i] : NAN);
        }
        fputc(',', f);
        if (t->excluded[i]) put_field(f, t->excluded[i]);
        fputc('\n', f);
    }
    free(skip);
    return bl_outfile_commit(of, err);
}

/* ---- check summary ---- */

bl_status bl_check_summary(const bl_study *s, const bl_trials *t, const bl_power_result *r, char **out, bl_error *err)
{
    *out = NULL;
    bl_textbuf b = {0};
    static const char *const scales[] = {"linear", "log10", "db"};
    static const char *const stds[] = {"none", "participant", "participant_condition"};
    static const char *const detrends[] = {"mean", "linear", "none"};
    bl_textbuf_printf(&b, "study        %s\n", s->path);
    bl_textbuf_printf(&b, "trial table  %s\n", s->trials.file);
    bl_textbuf_printf(&b, "participants %zu:", t->n_participants);
    for (size_t p = 0; p < t->n_participants && p < 20; p++) bl_textbuf_printf(&b, " %s", t->participants[p]);
    if (t->n_participants > 20) bl_textbuf_printf(&b, " ...");
    bl_textbuf_printf(&b, "\ntrials       %zu, kept %zu, excluded %zu\n", t->n, t->n_kept, t->n - t->n_kept);
    bl_exclusion_count *ec = NULL;
    size_t ne = 0;
    if (bl_trials_exclusion_counts(t, &ec, &ne, NULL)) b.failed = 1;
    for (size_t k = 0; ec && k < ne; k++) bl_textbuf_printf(&b, "  excluded   %-40s %zu\n", ec[k].reason, ec[k].count);
    free(ec);
    size_t n_up = 0, n_kept = 0;
    for (size_t i = 0; i < t->n; i++)
        if (!t->excluded[i]) {
            n_kept++;
            n_up += (size_t)t->upper[i];
        }
    bl_textbuf_printf(&b, "responses    %zu upper, %zu lower (kept trials; %s coding)\n", n_up, n_kept - n_up,
                      s->trials.stimulus ? "stimulus" : "accuracy");
    if (r) {
        bl_textbuf_printf(&b, "recordings   %zu file%s, %.10g Hz, channels", r->n_recordings,
                          r->n_recordings == 1 ? "" : "s", r->fs);
        for (size_t c = 0; c < s->recordings.n_channels; c++)
            bl_textbuf_printf(&b, "%s%s", c ? ", " : " ", s->recordings.channels[c]);
        if (s->recordings.n_gain_formats) { /* one gain per file extension */
            bl_textbuf_printf(&b, "%s, gain", s->recordings.n_channels > 1 ? " (averaged)" : "");
            for (size_t g = 0; g < s->recordings.n_gain_formats; g++)
                bl_textbuf_printf(&b, " %s %.10g%s", s->recordings.gain_format[g], s->recordings.gain_value[g],
                                  g + 1 < s->recordings.n_gain_formats ? "," : "");
            bl_textbuf_printf(&b, " (others 1), unit %s\n", s->recordings.unit);
        } else
            bl_textbuf_printf(&b, "%s, gain %.10g, unit %s\n", s->recordings.n_channels > 1 ? " (averaged)" : "",
                              s->recordings.gain, s->recordings.unit);
        for (size_t k = 0; k < r->n_recordings && k < 50; k++) {
            const bl_power_recording *rec = &r->recordings[k];
            bl_textbuf_printf(&b, "  %s: participant %s, %.10g Hz, %zu channel%s, %.6g s, %s, %zu trials\n", rec->path,
                              rec->participant, rec->rate, rec->channels, rec->channels == 1 ? "" : "s",
                              rec->rate > 0 ? (double)rec->frames / rec->rate : 0.0, rec->format, rec->n_trials);
        }
        if (r->n_recordings > 50) bl_textbuf_printf(&b, "  ... %zu more\n", r->n_recordings - 50);
        bl_textbuf_printf(&b, "window       %.6g s to %.6g s from the %s, %zu samples\n", s->power.from, s->power.to,
                          s->power.align == BL_ALIGN_RESPONSE ? "response" : "onset", r->window_samples);
        bl_textbuf_printf(
            &b, "welch        hann, segment %zu samples, overlap %zu, %zu segment%s, detrend %s, %s average\n",
            r->nperseg, r->noverlap, r->n_segments, r->n_segments == 1 ? "" : "s", detrends[s->power.detrend],
            s->power.median ? "median" : "mean");
        bl_textbuf_printf(&b, "resolution   %.6g Hz (%zu bins, 0 to %.6g Hz)\n", r->df, r->n_freqs,
                          r->freq[r->n_freqs - 1]);
        for (size_t k = 0; k < r->n_bands; k++) {
            const bl_power_band *pb = &r->bands[k];
            bl_textbuf_printf(&b, "  band %-12s [%g, %g] Hz: %zu bins (%.6g to %.6g Hz)%s\n", pb->name, pb->lo, pb->hi,
                              pb->n_bins, r->freq[pb->first_bin], r->freq[pb->last_bin],
                              pb->n_bins < pb->last_bin - pb->first_bin + 1 ? ", line-noise bins left out" : "");
        }
        bl_textbuf_printf(&b, "regressors   scale %s, standardize %s\n", scales[s->power.scale],
                          stds[s->power.standardize]);
        bl_textbuf_printf(&b, "artifacts    %zu trial%s flagged\n", r->n_artifacts, r->n_artifacts == 1 ? "" : "s");
    } else {
        bl_textbuf_printf(&b, "recordings   none (band regressors, if any, come from trial-table columns)\n");
    }
    char *breakdown = bl_check_breakdown(s, t, r); /* per participant and recording; scale/unit diagnosis */
    if (!breakdown) b.failed = 1;
    else bl_textbuf_printf(&b, "%s", breakdown);
    free(breakdown);
    bl_textbuf_printf(&b, "models       %zu", s->n_models);
    for (size_t k = 0; k < s->n_models; k++) bl_textbuf_printf(&b, "%s%s", k ? ", " : ": ", s->models[k].name);
    bl_participants_mode mode = bl_study_participants_mode(s, t->n_participants);
    bl_textbuf_printf(&b, "\nfit          participants %s%s, %d start%s\n",
                      mode == BL_PARTICIPANTS_SEPARATE       ? "separate"
                      : mode == BL_PARTICIPANTS_HIERARCHICAL ? "hierarchical"
                                                             : "pooled",
                      s->fit.participants_given || s->fit.participants != BL_PARTICIPANTS_POOLED
                          ? ""
                          : " (the default for this number of participants)",
                      s->fit.starts, s->fit.starts == 1 ? "" : "s");
    bl_textbuf_printf(&b, "output       %s\n", s->output);
    if (!(*out = bl_textbuf_take(&b)))
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory writing the check summary");
    return BL_OK;
}
