/* Multitaper cell power for the scan (scan_power.h). */
#include "scan/scan_power.h"
#include "signal/trace.h"

#include <lapacke.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#ifdef _OPENMP
#include <omp.h>
#endif

#define BL_SCAN_PI 3.14159265358979323846

size_t bl_dpss_count(double NW)
{
    double k = floor(2.0 * NW + 1e-9) - 1.0;
    return k < 1 ? 1 : (size_t)k;
}

bl_status bl_dpss(size_t N, double NW, size_t K, double *tapers, bl_error *err)
{
    if (K < 1 || K > N) return bl_error_set(err, BL_ERR_INTERNAL, "dpss: %zu tapers of length %zu", K, N);
    double *d = malloc(N * sizeof *d), *e = malloc(N * sizeof *e), *w = malloc(N * sizeof *w);
    double *z = malloc(N * K * sizeof *z);
    lapack_int *supp = malloc(2 * K * sizeof *supp);
    bl_status st = BL_OK;
    if (!d || !e || !w || !z || !supp) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory for %zu tapers of %zu samples", K, N);
        goto done;
    }
    /* Slepian (1978): the sequences are eigenvectors of the symmetric tridiagonal matrix with
     * diagonal ((N-1-2t)/2)^2 cos(2 pi W) and off-diagonal t (N - t) / 2, W = NW / N. */
    double c = cos(2.0 * BL_SCAN_PI * NW / (double)N);
    for (size_t t = 0; t < N; t++) {
        double h = ((double)N - 1.0 - 2.0 * (double)t) / 2.0;
        d[t] = h * h * c;
        if (t + 1 < N) e[t] = (double)(t + 1) * (double)(N - t - 1) / 2.0;
    }
    lapack_int m = 0;
    lapack_int info = LAPACKE_dstevr(LAPACK_COL_MAJOR, 'V', 'I', (lapack_int)N, d, e, 0, 0, (lapack_int)(N - K + 1),
                                     (lapack_int)N, 0.0, &m, w, z, (lapack_int)N, supp);
    if (info != 0 || (size_t)m != K) {
        st = bl_error_set(err, BL_ERR_NUMERIC, "dpss: LAPACKE_dstevr failed (info %d) for N = %zu, NW = %.6g",
                          (int)info, N, NW);
        goto done;
    }
    double thresh = fmax(1e-7, 1.0 / (double)N);
    for (size_t k = 0; k < K; k++) {
        const double *v = z + (K - 1 - k) * N; /* largest eigenvalue first */
        double *h = tapers + k * N, norm = 0, sum = 0;
        for (size_t t = 0; t < N; t++) norm += v[t] * v[t];
        norm = 1.0 / sqrt(norm);
        for (size_t t = 0; t < N; t++) {
            h[t] = v[t] * norm;
            sum += h[t];
        }
        /* sign convention of Percival & Walden (1993, p. 379), as scipy.signal.windows.dpss applies it */
        int flip = 0;
        if (k % 2 == 0) {
            flip = sum < 0;
        } else {
            for (size_t t = 0; t < N; t++)
                if (h[t] * h[t] > thresh) {
                    flip = h[t] < 0;
                    break;
                }
        }
        if (flip)
            for (size_t t = 0; t < N; t++) h[t] = -h[t];
    }
done:
    free(d);
    free(e);
    free(w);
    free(z);
    free(supp);
    return st;
}

/* One frequency's demodulating kernels: rows (taper k, cos / -sin) of N values. */
typedef struct {
    size_t K;
    double *rows; /* 2 K x N */
} freq_kernel;

static bl_status make_kernels(const bl_scan_spec *sp, double fs, size_t N, freq_kernel *fk, bl_error *err)
{
    for (size_t f = 0; f < sp->n_freqs; f++) {
        double NW = (double)N * bl_scan_bandwidth(sp, sp->freq[f]) / 2.0 / fs;
        size_t K = bl_dpss_count(NW);
        if (K > N / 2) K = N / 2 ? N / 2 : 1;
        double *tap = malloc(K * N * sizeof *tap);
        fk[f].K = K;
        fk[f].rows = malloc(2 * K * N * sizeof *fk[f].rows);
        if (!tap || !fk[f].rows) {
            free(tap);
            return bl_error_set(err, BL_ERR_NOMEM, "out of memory for the scan's tapers");
        }
        bl_status st = bl_dpss(N, NW, K, tap, err);
        if (st) {
            free(tap);
            return st;
        }
        for (size_t k = 0; k < K; k++)
            for (size_t t = 0; t < N; t++) {
                double ph = 2.0 * BL_SCAN_PI * sp->freq[f] * (double)t / fs;
                fk[f].rows[(2 * k) * N + t] = tap[k * N + t] * cos(ph);
                fk[f].rows[(2 * k + 1) * N + t] = -tap[k * N + t] * sin(ph);
            }
        free(tap);
    }
    return BL_OK;
}

/* Remove the mean or the least-squares line of x[0..N) (stride s). */
static void detrend(double *x, size_t N, size_t s, bl_detrend how)
{
    if (how == BL_DETREND_NONE) return;
    double m = 0, tm = ((double)N - 1) / 2, stt = 0, sxt = 0;
    for (size_t t = 0; t < N; t++) m += x[t * s];
    m /= (double)N;
    if (how == BL_DETREND_LINEAR)
        for (size_t t = 0; t < N; t++) {
            stt += ((double)t - tm) * ((double)t - tm);
            sxt += ((double)t - tm) * (x[t * s] - m);
        }
    double b = how == BL_DETREND_LINEAR && stt > 0 ? sxt / stt : 0;
    for (size_t t = 0; t < N; t++) x[t * s] -= m + b * ((double)t - tm);
}

typedef struct {
    const bl_study *study;
    const bl_scan_spec *sp;
    const bl_trials *trials;
    const bl_montage *mont;
    const freq_kernel *fk;
    double fs;
    size_t N, nw, n, span;
    const int64_t *start;  /* per trial: first sample of the span */
    const int64_t *offset; /* per window: first sample relative to the span */
    char **path;           /* per trial: recording */
    const size_t *order;   /* trials in the order they are read: grouped by recording */
    const size_t *rows;
    double *out;
} power_job;

typedef struct {
    bl_trace *trace;
    const char *path;
    double *raw, *x, *xw, *acc;
} power_thread;

static bl_status trial_power(const power_job *jb, power_thread *th, size_t j, bl_error *err)
{
    size_t row = jb->rows[j];
    const bl_trials *t = jb->trials;
    const char *part = t->participants[t->participant[row]];
    bl_error e = {0};
    if (!th->path || strcmp(th->path, jb->path[j]) != 0) {
        bl_trace_close(th->trace);
        th->trace = NULL;
        th->path = NULL;
        bl_status st;
#ifdef _OPENMP
#pragma omp critical(bl_trace_open)
#endif
        st = bl_trace_open(jb->path[j], jb->study->recordings.rate, &th->trace, &e);
        if (st) return bl_error_set(err, st, "participant %s, trial %s: %s", part, t->trial_label[row], e.message);
        th->path = jb->path[j];
        free(th->raw);
        th->raw = malloc(jb->span * bl_trace_get_info(th->trace)->channels * sizeof *th->raw);
        if (!th->raw) return bl_error_set(err, BL_ERR_NOMEM, "out of memory reading %s", jb->path[j]);
    }
    const bl_trace_info *info = bl_trace_get_info(th->trace);
    if (jb->start[j] < 0 || jb->start[j] + (int64_t)jb->span > info->frames)
        return bl_error_set(
            err, BL_ERR_INPUT,
            "participant %s, trial %s: the scan windows (%.6g s to %.6g s of the recording) leave %s, which "
            "holds %.6g s; shorten scan.windows",
            part, t->trial_label[row], (double)jb->start[j] / jb->fs,
            (double)(jb->start[j] + (int64_t)jb->span) / jb->fs, jb->path[j], (double)info->frames / jb->fs);
    bl_status st = bl_trace_read(th->trace, jb->start[j], jb->span, th->raw, &e);
    if (st) return bl_error_set(err, st, "participant %s, trial %s: %s", part, t->trial_label[row], e.message);
    bl_montage_apply(jb->mont, th->raw, jb->span, info->channels, jb->study->recordings.gain, th->x);
    size_t N = jb->N, nw = jb->nw;
    for (size_t w = 0; w < nw; w++) {
        for (size_t s = 0; s < N; s++) {
            double v = th->x[jb->offset[w] + (int64_t)s];
            if (!isfinite(v))
                return bl_error_set(err, BL_ERR_INPUT, "participant %s, trial %s: a non-finite sample in %s", part,
                                    t->trial_label[row], jb->path[j]);
            th->xw[s * nw + w] = v;
        }
        detrend(th->xw + w, N, nw, jb->study->power.detrend);
    }
    /* windows side by side (xw is N x nw): the inner loop runs over windows, so it vectorises without
     * reordering any sum */
    for (size_t f = 0; f < jb->sp->n_freqs; f++) {
        const freq_kernel *k = &jb->fk[f];
        double *pw = th->acc + 2 * k->K * nw;
        memset(pw, 0, nw * sizeof *pw);
        for (size_t r = 0; r < 2 * k->K; r++) {
            double *acc = th->acc + r * nw;
            const double *kr = k->rows + r * N;
            memset(acc, 0, nw * sizeof *acc);
            for (size_t s = 0; s < N; s++) {
                double c = kr[s];
                const double *xs = th->xw + s * nw;
                for (size_t w = 0; w < nw; w++) acc[w] += c * xs[w];
            }
            for (size_t w = 0; w < nw; w++) pw[w] += acc[w] * acc[w];
        }
        for (size_t w = 0; w < nw; w++) jb->out[(f * nw + w) * jb->n + j] = 2.0 * pw[w] / ((double)k->K * jb->fs);
    }
    return BL_OK;
}

static bl_status run_trials(const power_job *jb, int threads, size_t max_k, bl_error *err)
{
    int status = BL_OK;
    int nt = threads > 0 ? threads : 1;
#ifdef _OPENMP
    if (threads <= 0) nt = omp_get_max_threads();
#pragma omp parallel num_threads(nt)
#endif
    {
        power_thread th = {0};
        bl_error e = {0};
        th.x = malloc(jb->span * sizeof *th.x);
        th.xw = malloc(jb->N * jb->nw * sizeof *th.xw);
        th.acc = malloc((2 * max_k + 1) * jb->nw * sizeof *th.acc);
        int ok = th.x && th.xw && th.acc;
#ifdef _OPENMP
#pragma omp for schedule(dynamic, 8)
#endif
        for (size_t k = 0; k < jb->n; k++) {
            size_t j = jb->order[k];
            int failed;
#ifdef _OPENMP
#pragma omp atomic read
#endif
            failed = status;
            if (failed || !ok) continue;
            bl_status st = trial_power(jb, &th, j, &e);
            if (st) {
#ifdef _OPENMP
#pragma omp critical(bl_scan_power_error)
#endif
                if (!status) {
                    status = (int)st;
                    *err = e;
                }
            }
        }
        if (!ok) {
#ifdef _OPENMP
#pragma omp critical(bl_scan_power_error)
#endif
            if (!status) status = (int)bl_error_set(err, BL_ERR_NOMEM, "out of memory for the scan's windows");
        }
        bl_trace_close(th.trace);
        free(th.raw);
        free(th.x);
        free(th.xw);
        free(th.acc);
    }
    (void)nt;
    return (bl_status)status;
}

/* Onset column value of a row, in seconds. */
static bl_status onset_of(const bl_study *s, const bl_trials *t, int col, size_t row, double *out, bl_error *err)
{
    const char *txt = t->table->cols[col].text[row];
    char *end = NULL;
    *out = txt ? strtod(txt, &end) : NAN;
    if (!txt || end == txt || !isfinite(*out))
        return bl_error_set(
            err, BL_ERR_INPUT, "%s:%zu: column \"%s\" (recordings.onset): '%s' is not a number of seconds",
            t->table->path ? t->table->path : "trials", t->table->line[row], s->recordings.onset, txt ? txt : "");
    return BL_OK;
}

/* Sampling rate and the shortest recording [s], from each recording's header. */
static bl_status survey(const bl_study *s, char **path, size_t n, double *fs, double *shortest, bl_error *err)
{
    *fs = NAN;
    *shortest = INFINITY;
    for (size_t j = 0; j < n; j++) {
        if (j && !strcmp(path[j], path[j - 1])) continue;
        bl_trace *tr = NULL;
        bl_status st = bl_trace_open(path[j], s->recordings.rate, &tr, err);
        if (st) return st;
        const bl_trace_info *info = bl_trace_get_info(tr);
        if (isnan(*fs)) *fs = info->rate;
        if (fabs(info->rate - *fs) > 1e-9 * *fs) {
            bl_trace_close(tr);
            return bl_error_set(err, BL_ERR_INPUT, "%s is sampled at %.10g Hz, but other recordings at %.10g Hz",
                                path[j], info->rate, *fs);
        }
        *shortest = fmin(*shortest, (double)info->frames / info->rate);
        bl_trace_close(tr);
    }
    return BL_OK;
}

/* Trials grouped by recording (then in scan order), so each thread opens a recording once per run of trials. */
typedef struct {
    const char *path;
    size_t j;
} read_slot;

static int by_path(const void *a, const void *b)
{
    const read_slot *x = a, *y = b;
    int c = strcmp(x->path, y->path);
    return c ? c : (x->j > y->j) - (x->j < y->j);
}

static size_t *read_order(char **path, size_t n)
{
    read_slot *slot = malloc((n ? n : 1) * sizeof *slot);
    size_t *order = malloc((n ? n : 1) * sizeof *order);
    if (!slot || !order) {
        free(slot);
        free(order);
        return NULL;
    }
    for (size_t j = 0; j < n; j++) slot[j] = (read_slot){path[j], j};
    qsort(slot, n, sizeof *slot, by_path);
    for (size_t j = 0; j < n; j++) order[j] = slot[j].j;
    free(slot);
    return order;
}

bl_status bl_scan_power(const bl_study *s, const bl_scan_spec *sp, const bl_trials *t, const size_t *rows, size_t n,
                        int threads, double *out, double *fs_out, bl_error *err)
{
    bl_status st = BL_OK;
    bl_montage *mont = NULL;
    char **path = calloc(n ? n : 1, sizeof *path);
    double *align = malloc((n ? n : 1) * sizeof *align);
    int64_t *start = malloc((n ? n : 1) * sizeof *start), *offset = malloc(sp->n_windows * sizeof *offset);
    freq_kernel *fk = calloc(sp->n_freqs, sizeof *fk);
    if (!path || !align || !start || !offset || !fk) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory for the scan");
        goto done;
    }
    if ((st = bl_montage_parse((const char *const *)s->recordings.channels, s->recordings.n_channels,
                               "recordings.channels", &mont, err)))
        goto done;
    int col = bl_table_find(t->table, s->recordings.onset);
    if (col < 0) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: column \"%s\" (recordings.onset) is not in the trial table",
                          t->table->path, s->recordings.onset);
        goto done;
    }
    for (size_t j = 0; j < n && !st; j++) {
        st = onset_of(s, t, col, rows[j], &align[j], err);
        if (!st) st = bl_pattern_expand(s->recordings.file, t->table, rows[j], &path[j], err);
        if (sp->align == BL_ALIGN_RESPONSE) align[j] += t->rt[rows[j]];
    }
    double fs = NAN, shortest = 0;
    if (!st) st = survey(s, path, n, &fs, &shortest, err);
    if (!st && n == 0) st = bl_error_set(err, BL_ERR_INPUT, "%s: no trial to scan", s->path);
    if (!st) st = bl_scan_spec_check_signal(sp, s, fs, shortest, err);
    if (st) goto done;
    size_t N = (size_t)llround(sp->length * fs), span = 0;
    int64_t first = llround(sp->window_from[0] * fs);
    for (size_t w = 0; w < sp->n_windows; w++) {
        offset[w] = llround(sp->window_from[w] * fs) - first;
        if ((size_t)offset[w] + N > span) span = (size_t)offset[w] + N;
    }
    for (size_t j = 0; j < n; j++) start[j] = llround(align[j] * fs) + first;
    if ((st = make_kernels(sp, fs, N, fk, err))) goto done;
    size_t max_k = 1;
    for (size_t f = 0; f < sp->n_freqs; f++) max_k = fk[f].K > max_k ? fk[f].K : max_k;
    size_t *order = read_order(path, n);
    if (!order) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory for the scan");
        goto done;
    }
    power_job jb = {s, sp, t, mont, fk, fs, N, sp->n_windows, n, span, start, offset, path, order, rows, out};
    st = run_trials(&jb, threads, max_k, err);
    free(order);
    if (fs_out) *fs_out = fs;
done:
    for (size_t j = 0; path && j < n; j++) free(path[j]);
    for (size_t f = 0; fk && f < sp->n_freqs; f++) free(fk[f].rows);
    free(fk);
    free(path);
    free(align);
    free(start);
    free(offset);
    bl_montage_destroy(mont);
    return st;
}

bl_status bl_scan_power_check(const bl_study *s, const bl_scan_spec *sp, const bl_trials *t, bl_error *err)
{
    size_t n = 0;
    char **path = calloc(t->n ? t->n : 1, sizeof *path);
    if (!path) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    bl_status st = BL_OK;
    for (size_t i = 0; i < t->n && !st; i++) {
        if (t->excluded[i]) continue;
        char *p = NULL;
        st = bl_pattern_expand(s->recordings.file, t->table, i, &p, err);
        if (!st && (!n || strcmp(p, path[n - 1]))) path[n++] = p;
        else free(p);
    }
    double fs = NAN, shortest = 0;
    if (!st && n == 0) st = bl_error_set(err, BL_ERR_INPUT, "%s: no trial to scan", s->path);
    if (!st) st = survey(s, path, n, &fs, &shortest, err);
    if (!st) st = bl_scan_spec_check_signal(sp, s, fs, shortest, err);
    for (size_t j = 0; j < n; j++) free(path[j]);
    free(path);
    return st;
}

static double scaled(bl_scale sc, double v)
{
    return sc == BL_SCALE_LOG10 ? log10(v) : sc == BL_SCALE_DB ? 10.0 * log10(v) : v;
}

/* Standardisation group of each trial: participant, or participant x power.condition (by text). */
static bl_status groups_of(const bl_study *s, const bl_trials *t, const size_t *rows, size_t n, size_t *group,
                           size_t *n_groups, bl_error *err)
{
    size_t *first = malloc((n ? n : 1) * sizeof *first);
    if (!first) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    *n_groups = 0;
    for (size_t j = 0; j < n; j++) {
        size_t g = 0, i = rows[j];
        if (s->power.standardize == BL_STANDARDIZE_NONE) {
            group[j] = 0;
            *n_groups = 1;
            continue;
        }
        for (g = 0; g < *n_groups; g++) {
            size_t q = rows[first[g]];
            int same = t->participant[q] == t->participant[i];
            for (size_t k = 0;
                 same && s->power.standardize == BL_STANDARDIZE_PARTICIPANT_CONDITION && k < s->power.n_condition;
                 k++) {
                int c = bl_table_find(t->table, s->power.condition[k]);
                const char *a = c >= 0 ? t->table->cols[c].text[i] : NULL,
                           *b = c >= 0 ? t->table->cols[c].text[q] : NULL;
                same = (!a && !b) || (a && b && !strcmp(a, b));
            }
            if (same) break;
        }
        if (g == *n_groups) first[(*n_groups)++] = j;
        group[j] = g;
    }
    free(first);
    return BL_OK;
}

bl_status bl_scan_standardize(const bl_study *s, const bl_trials *t, const size_t *rows, size_t n,
                              const bl_scan_spec *sp, double *x, bl_error *err)
{
    size_t *group = malloc((n ? n : 1) * sizeof *group), n_groups = 0;
    double *mean = calloc(n ? n : 1, sizeof *mean), *sd = calloc(n ? n : 1, sizeof *sd);
    size_t *cnt = calloc(n ? n : 1, sizeof *cnt);
    bl_status st = BL_OK;
    if (!group || !mean || !sd || !cnt) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory standardizing scan power");
        goto done;
    }
    if ((st = groups_of(s, t, rows, n, group, &n_groups, err))) goto done;
    for (size_t j = 0; j < n; j++) cnt[group[j]]++;
    size_t nc = sp->n_freqs * sp->n_windows;
    for (size_t c = 0; c < nc; c++) {
        double *v = x + c * n;
        double f = sp->freq[c / sp->n_windows], w0 = sp->window_from[c % sp->n_windows];
        for (size_t j = 0; j < n; j++) {
            v[j] = scaled(s->power.scale, v[j]);
            if (!isfinite(v[j])) {
                size_t r = rows[j];
                st = bl_error_set(err, BL_ERR_INPUT,
                                  "participant %s, trial %s: zero power at %.6g Hz in the window from "
                                  "%.6g s, which power.scale cannot take",
                                  t->participants[t->participant[r]], t->trial_label[r], f, w0);
                goto done;
            }
        }
        if (s->power.standardize == BL_STANDARDIZE_NONE) continue;
        memset(mean, 0, n_groups * sizeof *mean);
        memset(sd, 0, n_groups * sizeof *sd);
        for (size_t j = 0; j < n; j++) mean[group[j]] += v[j];
        for (size_t g = 0; g < n_groups; g++) mean[g] /= (double)cnt[g];
        for (size_t j = 0; j < n; j++) sd[group[j]] += (v[j] - mean[group[j]]) * (v[j] - mean[group[j]]);
        for (size_t g = 0; g < n_groups; g++) {
            sd[g] = cnt[g] > 1 ? sqrt(sd[g] / (double)(cnt[g] - 1)) : 0;
            if (!(sd[g] > 0)) {
                st = bl_error_set(err, BL_ERR_INPUT,
                                  "scan power at %.6g Hz, window from %.6g s: a standardize group has "
                                  "fewer than two trials or no spread",
                                  f, w0);
                goto done;
            }
        }
        for (size_t j = 0; j < n; j++) v[j] = (v[j] - mean[group[j]]) / sd[group[j]];
    }
done:
    free(group);
    free(mean);
    free(sd);
    free(cnt);
    return st;
}
