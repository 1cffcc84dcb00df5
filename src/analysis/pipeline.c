/* The whole job (`bandlink run`) and the staging folder it (and `bandlink simulate`) writes through.
 *
 * Job: study -> trials -> band power (power.csv) -> every model fitted and compared (comparison.csv,
 * trials.csv) -> goodness of fit (fit_quantiles.csv) -> figures/ -> report.html -> provenance with the
 * SHA-256 of every input (FIPS 180-4, sha256.c) -> fits.json, each stage timed with a monotonic clock.
 *
 * Staging: everything is written into a hidden temporary folder beside the target; only a complete
 * folder is moved into place. Replacing an existing folder uses renameat2(RENAME_EXCHANGE) (Linux >= 3.15)
 * so the old folder stays whole until the swap; elsewhere the old folder is renamed aside first and
 * restored if the second rename fails. A run killed part-way leaves only the hidden folder, which the
 * next run removes once its process is gone.
 */
#define _GNU_SOURCE 1 /* renameat2, RENAME_EXCHANGE */
#include "analysis/pipeline.h"
#include "core/json.h"

#include "report/figures.h"
#include "fit/fit.h"
#include "report/goodness.h"
#include "core/output.h"
#include "signal/power.h"
#include "report/report.h"
#include "report/results.h"
#include "core/sha256.h"
#include "design/study.h"
#include "design/trials.h"
#include "bl_config.h"

#include <cjson/cJSON.h>
#include <dirent.h>
#include <errno.h>
#include <fcntl.h>
#include <ftw.h>
#include <math.h>
#include <signal.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>
#ifdef _OPENMP
#include <omp.h>
#endif

struct bl_stage {
    char *target;
    char *temp;
    int replace;     /* the target existed */
};

static char *dupstr(const char *s)
{
    size_t n = strlen(s) + 1;
    char *p = malloc(n);
    if (p) memcpy(p, s, n);
    return p;
}

static int remove_entry(const char *path, const struct stat *sb, int type, struct FTW *ftw)
{
    (void)sb;
    (void)ftw;
    return (type == FTW_DP ? rmdir(path) : unlink(path)) != 0 ? -1 : 0;
}

bl_status bl_remove_tree(const char *path, bl_error *err)
{
    struct stat sb;
    if (lstat(path, &sb) != 0) return errno == ENOENT ? BL_OK : bl_error_set(err, BL_ERR_IO, "%s: %s", path, strerror(errno));
    if (nftw(path, remove_entry, 16, FTW_DEPTH | FTW_PHYS) != 0)
        return bl_error_set(err, BL_ERR_IO, "%s: cannot remove: %s", path, strerror(errno));
    return BL_OK;
}

bl_status bl_path_inside(const char *path, const char *folder, int *inside, bl_error *err)
{
    errno = 0;
    char *p = realpath(path, NULL);
    int nomem = !p && errno == ENOMEM;
    errno = 0;
    char *f = realpath(folder, NULL);
    nomem = nomem || (!f && errno == ENOMEM);
    *inside = 0;
    if (p && f) {
        size_t n = strlen(f);
        *inside = strncmp(p, f, n) == 0 && (p[n] == '\0' || p[n] == '/' || (n == 1 && f[0] == '/'));
    }
    free(p);
    free(f);
    if (nomem) return bl_error_set(err, BL_ERR_NOMEM, "out of memory resolving %s and %s", path, folder);
    return BL_OK;
}

/* Split "a/b/name" into a newly allocated parent ("a/b", or "." ) and a pointer to the name. */
static char *parent_of(const char *path, const char **name)
{
    size_t n = strlen(path);
    while (n > 1 && path[n - 1] == '/') n--;
    size_t k = n;
    while (k > 0 && path[k - 1] != '/') k--;
    *name = path + k;
    if (k == 0) return dupstr(".");
    char *p = malloc(k + 1);
    if (!p) return NULL;
    memcpy(p, path, k);
    p[k] = '\0';
    if (k > 1) p[k - 1] = '\0'; /* drop the trailing slash, but keep "/" */
    return p;
}

/* Remove ".<name>.partial-<pid>-*" folders whose process no longer exists. */
static void remove_stale(const char *parent, const char *name)
{
    DIR *d = opendir(parent);
    if (!d) return;
    char prefix[512];
    int np = snprintf(prefix, sizeof prefix, ".%s.partial-", name);
    if (np < 0 || (size_t)np >= sizeof prefix) {
        closedir(d);
        return;
    }
    struct dirent *e;
    while ((e = readdir(d))) {
        if (strncmp(e->d_name, prefix, (size_t)np) != 0) continue;
        long pid = strtol(e->d_name + np, NULL, 10);
        if (pid <= 0 || pid == (long)getpid()) continue;
        if (kill((pid_t)pid, 0) == 0 || errno == EPERM) continue; /* still running */
        char *p = NULL;
        if (bl_path_join(parent, e->d_name, &p, NULL) == BL_OK) bl_remove_tree(p, NULL);
        free(p);
    }
    closedir(d);
}

/* --force replaces only what bandlink wrote: an empty folder, or one holding a results file of run,
 * power or simulate. Anything else (a thesis folder named by mistake) is never deleted. */
static int replaceable_folder(const char *dir)
{
    static const char *const markers[] = {"fits.json", "power.csv", "truth.json"};
    DIR *d = opendir(dir);
    if (!d) return 0;
    int empty = 1;
    struct dirent *e;
    while ((e = readdir(d)))
        if (strcmp(e->d_name, ".") != 0 && strcmp(e->d_name, "..") != 0) empty = 0;
    closedir(d);
    if (empty) return 1;
    for (size_t i = 0; i < sizeof markers / sizeof markers[0]; i++) {
        char *p = NULL;
        struct stat sb;
        int found = bl_path_join(dir, markers[i], &p, NULL) == BL_OK && stat(p, &sb) == 0 && S_ISREG(sb.st_mode);
        free(p);
        if (found) return 1;
    }
    return 0;
}

bl_status bl_stage_begin(const char *target_in, int force, bl_stage **out, bl_error *err)
{
    *out = NULL;
    const char *name;
    char *parent = NULL;
    bl_stage *s = calloc(1, sizeof *s);
    bl_status st = BL_OK;
    if (!s || !(s->target = dupstr(target_in))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto fail;
    }
    /* "results/" and "results" are the same folder. */
    for (size_t n = strlen(s->target); n > 1 && s->target[n - 1] == '/'; n--) s->target[n - 1] = '\0';
    const char *target = s->target;
    if (!(parent = parent_of(target, &name))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto fail;
    }
    if (!name[0] || strcmp(name, ".") == 0 || strcmp(name, "..") == 0) {
        st = bl_error_set(err, BL_ERR_USAGE, "'%s' cannot be used as an output folder; name a folder", target);
        goto fail;
    }
    struct stat sb;
    if (stat(target, &sb) == 0) {
        if (!S_ISDIR(sb.st_mode)) {
            st = bl_error_set(err, BL_ERR_EXISTS, "%s exists and is not a folder; choose another output", target);
            goto fail;
        }
        if (!force) {
            st = bl_error_set(err, BL_ERR_EXISTS, "the output folder %s already exists; use --force to replace it "
                              "(it is replaced only once the new results are complete)", target);
            goto fail;
        }
        if (!replaceable_folder(target)) {
            st = bl_error_set(err, BL_ERR_EXISTS, "the output folder %s holds files bandlink did not write (no fits.json, "
                              "power.csv or truth.json); it is not replaced even with --force: choose another folder",
                              target);
            goto fail;
        }
        s->replace = 1;
    } else if (errno != ENOENT) {
        st = bl_error_set(err, BL_ERR_IO, "%s: %s", target, strerror(errno));
        goto fail;
    }
    if ((st = bl_mkdir_p(parent, err))) goto fail;
    remove_stale(parent, name);
    char buf[64];
    snprintf(buf, sizeof buf, ".partial-%ld-XXXXXX", (long)getpid());
    size_t n = strlen(parent) + strlen(name) + strlen(buf) + 4;
    if (!(s->temp = malloc(n))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto fail;
    }
    snprintf(s->temp, n, "%s/.%s%s", parent, name, buf);
    if (!mkdtemp(s->temp)) {
        st = bl_error_set(err, BL_ERR_IO, "%s: cannot create a temporary folder beside it: %s", target, strerror(errno));
        free(s->temp);
        s->temp = NULL;
        goto fail;
    }
    chmod(s->temp, 0755);
    free(parent);
    *out = s;
    return BL_OK;
fail:
    free(parent);
    bl_stage_abort(s);
    return st;
}

const char *bl_stage_dir(const bl_stage *s) { return s->temp; }

static void fsync_dir(const char *path)
{
    int fd = open(path, O_RDONLY | O_DIRECTORY);
    if (fd >= 0) {
        fsync(fd);
        close(fd);
    }
}

bl_status bl_stage_commit(bl_stage *s, bl_error *err)
{
    bl_status st = BL_OK;
    const char *name;
    char *parent = parent_of(s->target, &name);
    fsync_dir(s->temp);
    if (!s->replace) {
        if (rename(s->temp, s->target) != 0)
            st = bl_error_set(err, BL_ERR_IO, "%s: cannot move the finished results into place: %s", s->target,
                              strerror(errno));
        else s->temp[0] = '\0';
    } else {
#ifdef RENAME_EXCHANGE
        if (renameat2(AT_FDCWD, s->temp, AT_FDCWD, s->target, RENAME_EXCHANGE) == 0) {
            /* s->temp now holds the old results: removed below. */
            if (parent) fsync_dir(parent);
            free(parent);
            bl_stage_abort(s);
            return BL_OK;
        }
        if (errno != EINVAL && errno != ENOSYS && errno != ENOTSUP) {
            st = bl_error_set(err, BL_ERR_IO, "%s: cannot swap in the new results: %s", s->target, strerror(errno));
            goto done;
        }
#endif
        /* Fallback: old aside, new in, old removed (restored if the second step fails). */
        size_t n = strlen(s->temp) + 8;
        char *aside = malloc(n);
        if (!aside) {
            st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
            goto done;
        }
        snprintf(aside, n, "%s.old", s->temp);
        if (rename(s->target, aside) != 0) {
            st = bl_error_set(err, BL_ERR_IO, "%s: cannot move the old results aside: %s", s->target, strerror(errno));
        } else if (rename(s->temp, s->target) != 0) {
            st = bl_error_set(err, BL_ERR_IO, "%s: cannot move the new results into place: %s", s->target, strerror(errno));
            rename(aside, s->target);
        } else {
            s->temp[0] = '\0';
            bl_remove_tree(aside, NULL);
        }
        free(aside);
    }
done:
    if (parent && st == BL_OK) fsync_dir(parent);
    free(parent);
    bl_stage_abort(s);
    return st;
}

void bl_stage_abort(bl_stage *s)
{
    if (!s) return;
    if (s->temp && s->temp[0]) bl_remove_tree(s->temp, NULL);
    free(s->temp);
    free(s->target);
    free(s);
}

/* ================================================================================================ */
/* The whole job. */

static const char *const stage_names[BL_STAGE_COUNT] = {"setup", "power", "fits", "goodness", "figures", "report"};

const char *bl_stage_name(int stage) { return stage >= 0 && stage < BL_STAGE_COUNT ? stage_names[stage] : "?"; }

void bl_run_options_default(bl_run_options *o)
{
    memset(o, 0, sizeof *o);
    o->seed = 1;
}

void bl_run_result_clear(bl_run_result *r)
{
    if (!r) return;
    free(r->out_dir);
    free(r->summary);
    free(r->timings);
    memset(r, 0, sizeof *r);
}

static double now_seconds(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

void bl_utc_stamp(char out[32])
{
    struct timespec ts;
    clock_gettime(CLOCK_REALTIME, &ts);
    struct tm tm;
    gmtime_r(&ts.tv_sec, &tm);
    strftime(out, 32, "%Y-%m-%dT%H:%M:%SZ", &tm);
}

/* A growing text buffer for the summaries. */
typedef struct {
    char *s;
    size_t n, cap;
    int failed;
} textbuf;

static void tb_printf(textbuf *b, const char *fmt, ...) BL_PRINTF(2, 3);
static void tb_printf(textbuf *b, const char *fmt, ...)
{
    if (b->failed) return;
    va_list ap;
    va_start(ap, fmt);
    int k = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (k < 0) {
        b->failed = 1;
        return;
    }
    if (b->n + (size_t)k + 1 > b->cap) {
        size_t cap = b->cap ? b->cap : 1024;
        while (cap < b->n + (size_t)k + 1) cap *= 2;
        char *ns = realloc(b->s, cap);
        if (!ns) {
            b->failed = 1;
            return;
        }
        b->s = ns;
        b->cap = cap;
    }
    va_start(ap, fmt);
    vsnprintf(b->s + b->n, (size_t)k + 1, fmt, ap);
    va_end(ap);
    b->n += (size_t)k;
}

static char *tb_take(textbuf *b)
{
    if (b->failed || !b->s) {
        free(b->s);
        return NULL;
    }
    return b->s;
}

static void fmt_num(char *out, size_t size, double x, const char *f)
{
    if (isnan(x)) snprintf(out, size, "NA");
    else snprintf(out, size, f, x);
}

/* The plain-text summary: comparison table, then every slope of the best model (lowest AIC). */
static char *make_summary(const bl_fit_set *set)
{
    textbuf b = {0};
    tb_printf(&b, "Model comparison (%s fits; lowest AIC is best)\n",
              set->mode == BL_PARTICIPANTS_SEPARATE ? "per-participant" : "pooled");
    size_t w = 5;
    for (size_t m = 0; m < set->n_models; m++)
        if (strlen(set->comparison[m].name) > w) w = strlen(set->comparison[m].name);
    tb_printf(&b, "  %-*s %10s %7s %13s %12s %9s %12s %9s %7s %9s  %s\n", (int)w, "model", "parameters", "trials",
              "log_lik", "AIC", "dAIC", "BIC", "dBIC", "weight", "converged", "LRT vs extended model");
    size_t best = 0;
    for (size_t m = 0; m < set->n_models; m++) {
        const bl_comparison_row *r = &set->comparison[m];
        if (!isnan(r->aic) && (isnan(set->comparison[best].aic) || r->aic < set->comparison[best].aic)) best = m;
        char ll[32], aic[32], daic[32], bic[32], dbic[32], wt[32], lrt[160];
        fmt_num(ll, sizeof ll, r->log_likelihood, "%.2f");
        fmt_num(aic, sizeof aic, r->aic, "%.2f");
        fmt_num(daic, sizeof daic, r->delta_aic, "%.2f");
        fmt_num(bic, sizeof bic, r->bic, "%.2f");
        fmt_num(dbic, sizeof dbic, r->delta_bic, "%.2f");
        fmt_num(wt, sizeof wt, r->aic_weight, "%.3f");
        if (r->lrt_nested == 1 && !isfinite(r->lrt_p))
            snprintf(lrt, sizeof lrt, "vs %s: not tested (a fit did not converge)", r->lrt_against);
        else if (r->lrt_nested == 1)
            snprintf(lrt, sizeof lrt, "vs %s: chi2(%g) = %.2f, p = %.3g", r->lrt_against, r->lrt_df, r->lrt_statistic,
                     r->lrt_p);
        else if (r->lrt_nested == 0)
            snprintf(lrt, sizeof lrt, "vs %s: not nested", r->lrt_against ? r->lrt_against : "?");
        else snprintf(lrt, sizeof lrt, "-");
        tb_printf(&b, "  %-*s %10zu %7zu %13s %12s %9s %12s %9s %7s %9s  %s\n", (int)w, r->name, r->parameters,
                  r->trials, ll, aic, daic, bic, dbic, wt, set->models[m].converged ? "yes" : "NO", lrt);
    }
    if (set->n_models == 0) return tb_take(&b);
    const bl_model_result *mr = &set->models[best];
    tb_printf(&b, "\nBest model by AIC: %s%s\n", mr->name, mr->converged ? "" : " (NOT CONVERGED: see fits.json)");
    const bl_fit_result *fr = &mr->fit;
    size_t n_slopes = 0;
    for (size_t j = 0; j < fr->n_coef; j++) n_slopes += strcmp(fr->coef[j].term, "intercept") != 0;
    if (n_slopes == 0) {
        tb_printf(&b, "  (no slopes: band power does not enter this model)\n");
        return tb_take(&b);
    }
    tb_printf(&b, "  %-40s %10s %23s %10s\n", "slope", "estimate", "95% CI", "p");
    for (size_t j = 0; j < fr->n_coef; j++) {
        const bl_coefficient *c = &fr->coef[j];
        if (strcmp(c->term, "intercept") == 0) continue;
        char name[256], est[32], lo[32], hi[32], p[32], ci[80];
        snprintf(name, sizeof name, "%s: slope on %s%s%s%s", c->parameter, c->term, c->level[0] ? " [" : "", c->level,
                 c->level[0] ? "]" : "");
        fmt_num(est, sizeof est, c->estimate, "%.4f");
        fmt_num(lo, sizeof lo, c->ci_low, "%.4f");
        fmt_num(hi, sizeof hi, c->ci_high, "%.4f");
        fmt_num(p, sizeof p, c->p, "%.3g");
        snprintf(ci, sizeof ci, "[%s, %s]", lo, hi);
        tb_printf(&b, "  %-40s %10s %23s %10s\n", name, est, ci, p);
    }
    if (mr->mode == BL_PARTICIPANTS_SEPARATE)
        tb_printf(&b, "  (separate fits: group random-effects estimates; per-participant values in fits.json)\n");
    for (size_t k = 0; k < mr->n_permutation; k++) {
        const bl_permutation_test *pt = &mr->permutation[k];
        if (k == 0) tb_printf(&b, "Permutation tests (regressor shuffled, all levels of a slope at once):\n");
        tb_printf(&b, "  %s: slope on %s: 2 dLL = %.2f, p = %.4g (%zu of %zu refits reached it)\n", pt->parameter, pt->regressor,
                  pt->statistic, pt->p, pt->exceed, pt->permutations);
    }
    return tb_take(&b);
}

static char *make_timings(const double *sec, double total)
{
    textbuf b = {0};
    tb_printf(&b, "Wall time per stage (total %.2f s)\n", total);
    for (int s = 0; s < BL_STAGE_COUNT; s++)
        tb_printf(&b, "  %-9s %8.2f s  %5.1f%%\n", stage_names[s], sec[s], total > 0 ? 100.0 * sec[s] / total : 0.0);
    return tb_take(&b);
}

static const char *detrend_name(bl_detrend d)
{
    return d == BL_DETREND_LINEAR ? "linear" : d == BL_DETREND_NONE ? "none" : "mean";
}

static cJSON *input_entry(cJSON *arr, const char *role, const char *path, bl_error *err, bl_status *st)
{
    char hex[BL_SHA256_HEX_SIZE];
    if ((*st = bl_sha256_file(path, hex, err)) != BL_OK) return NULL;
    cJSON *o = cJSON_CreateObject();
    if (!o) return NULL;
    cJSON_AddStringToObject(o, "role", role);
    cJSON_AddStringToObject(o, "path", path);
    cJSON_AddStringToObject(o, "sha256", hex);
    cJSON_AddItemToArray(arr, o);
    return o;
}

/* The provenance record of fits.json (docs/outputs.md). */
bl_status bl_provenance_create(const char *study_path, const bl_study *study, const bl_trials *trials,
                               const bl_power_result *pr, unsigned long seed, int threads, unsigned long permutations,
                               const char *started, cJSON **out, bl_error *err)
{
    bl_status st = BL_OK;
    cJSON *p = cJSON_CreateObject();
    char *sj = NULL;
    bl_exclusion_count *ex = NULL;
    if (!p) goto nomem;
    if ((st = bl_study_to_json(study, &sj, err))) goto fail;
    cJSON_AddStringToObject(p, "bandlink_version", BL_VERSION_STRING);
    cJSON_AddStringToObject(p, "started", started);
    cJSON_AddNumberToObject(p, "seed", (double)seed);
    cJSON_AddNumberToObject(p, "threads", threads);
    cJSON_AddNumberToObject(p, "permutations", (double)permutations);
    cJSON *parsed = NULL;
    if ((st = bl_json_parse(sj, "the parsed study", &parsed, err))) goto fail;
    cJSON_AddItemToObject(p, "study", parsed);

    cJSON *inputs = cJSON_AddArrayToObject(p, "inputs");
    if (!inputs) goto nomem;
    if (!input_entry(inputs, "study", study_path, err, &st)) goto fail_or_nomem;
    if (!input_entry(inputs, "trials", study->trials.file, err, &st)) goto fail_or_nomem;
    for (size_t r = 0; pr && r < pr->n_recordings; r++) {
        const bl_power_recording *rec = &pr->recordings[r];
        cJSON *o = input_entry(inputs, "recording", rec->path, err, &st);
        if (!o) goto fail_or_nomem;
        cJSON_AddStringToObject(o, "participant", rec->participant ? rec->participant : "");
        cJSON_AddStringToObject(o, "format", rec->format);
        cJSON_AddNumberToObject(o, "rate", rec->rate);
        cJSON_AddNumberToObject(o, "channels", (double)rec->channels);
        cJSON_AddNumberToObject(o, "frames", (double)rec->frames);
        cJSON_AddNumberToObject(o, "trials", (double)rec->n_trials);
    }

    if (pr) {
        cJSON *w = cJSON_AddObjectToObject(p, "welch");
        if (!w) goto nomem;
        cJSON_AddNumberToObject(w, "rate", pr->fs);
        cJSON_AddStringToObject(w, "align", study->power.align == BL_ALIGN_RESPONSE ? "response" : "onset");
        cJSON_AddNumberToObject(w, "from", study->power.from);
        cJSON_AddNumberToObject(w, "to", study->power.to);
        cJSON_AddNumberToObject(w, "window_samples", (double)pr->window_samples);
        cJSON_AddNumberToObject(w, "segment_samples", (double)pr->nperseg);
        cJSON_AddNumberToObject(w, "overlap_samples", (double)pr->noverlap);
        cJSON_AddNumberToObject(w, "fft_length", (double)pr->nfft);
        cJSON_AddNumberToObject(w, "segments", (double)pr->n_segments);
        cJSON_AddNumberToObject(w, "resolution_hz", pr->df);
        cJSON_AddStringToObject(w, "taper", "hann");
        cJSON_AddStringToObject(w, "detrend", detrend_name(study->power.detrend));
        cJSON_AddStringToObject(w, "average", study->power.median ? "median" : "mean");
        cJSON_AddStringToObject(w, "unit", pr->unit ? pr->unit : "");
        cJSON_AddNumberToObject(w, "line_noise", study->power.line_noise);
        cJSON *bands = cJSON_AddArrayToObject(p, "bands");
        if (!bands) goto nomem;
        for (size_t b = 0; b < pr->n_bands; b++) {
            const bl_power_band *pb = &pr->bands[b];
            cJSON *o = cJSON_CreateObject();
            if (!o) goto nomem;
            cJSON_AddItemToArray(bands, o);
            cJSON_AddStringToObject(o, "name", pb->name);
            cJSON_AddNumberToObject(o, "lo", pb->lo);
            cJSON_AddNumberToObject(o, "hi", pb->hi);
            cJSON_AddNumberToObject(o, "bins", (double)pb->n_bins);
            cJSON *fr = cJSON_AddArrayToObject(o, "frequencies");
            if (!fr) goto nomem;
            for (size_t j = 0; j < pr->n_freqs; j++)
                if (pb->used && pb->used[j]) cJSON_AddItemToArray(fr, cJSON_CreateNumber(pr->freq[j]));
        }
    }

    cJSON *tr = cJSON_AddObjectToObject(p, "trials");
    if (!tr) goto nomem;
    cJSON_AddNumberToObject(tr, "total", (double)trials->n);
    cJSON_AddNumberToObject(tr, "kept", (double)trials->n_kept);
    cJSON_AddNumberToObject(tr, "participants", (double)trials->n_participants);
    cJSON *exo = cJSON_AddObjectToObject(tr, "excluded");
    if (!exo) goto nomem;
    size_t nex = 0;
    if ((st = bl_trials_exclusion_counts(trials, &ex, &nex, err))) goto fail;
    for (size_t i = 0; i < nex; i++) cJSON_AddNumberToObject(exo, ex[i].reason, (double)ex[i].count);
    free(ex);
    free(sj);
    *out = p;
    return BL_OK;
fail_or_nomem:
    if (st != BL_OK) goto fail;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory building the provenance record");
fail:
    free(sj);
    cJSON_Delete(p);
    return st;
}

static void say(const bl_run_options *opt, int stage, const char *detail, size_t done, size_t total)
{
    if (opt->progress) opt->progress(opt->progress_user, stage, detail, done, total);
}

/* Goodness of fit, figures and report (the report area's API), each timed as its own stage. */
static bl_status run_report_stages(const bl_run_options *opt, const bl_study *study, const bl_trials *trials,
                                   const bl_power_result *pr, const bl_fit_set *set, const char *dir, double *sec,
                                   int threads, unsigned long seed, const char *started, bl_warnings *warn,
                                   bl_error *err)
{
    bl_status st = BL_OK;
    bl_goodness *g = NULL;
    bl_figure_set *figs = NULL;
    char *path = NULL;
    double t = now_seconds();
    say(opt, BL_STAGE_GOODNESS, "observed vs predicted quantiles", 0, 0);
    if (bl_path_join(dir, "fit_quantiles.csv", &path, NULL)) goto nomem;
    if ((st = bl_goodness_compute(study, trials, set, threads, &g, err))) goto done;
    if ((st = bl_goodness_write_csv(g, path, err))) goto done;
    free(path);
    path = NULL;
    sec[BL_STAGE_GOODNESS] = now_seconds() - t;

    t = now_seconds();
    say(opt, BL_STAGE_FIGURES, "drawing", 0, 0);
    if (bl_path_join(dir, "figures", &path, NULL)) goto nomem;
    if ((st = bl_figures_make(study, trials, pr, set, g, &figs, err))) goto done;
    if ((st = bl_figures_write(figs, path, err))) goto done;
    free(path);
    path = NULL;
    sec[BL_STAGE_FIGURES] = now_seconds() - t;

    t = now_seconds();
    say(opt, BL_STAGE_REPORT, "writing report.html", 0, 0);
    {
        char finished[32];
        bl_utc_stamp(finished);
        bl_report_job job = {0};
        job.version = BL_VERSION_STRING;
        job.study_path = opt->study_path;
        job.started = started;
        job.finished = finished;
        job.has_seed = 1;
        job.seed = seed;
        job.threads = threads;
        job.permutations = opt->permutations;
        job.n_stages = BL_STAGE_REPORT; /* the stages done before the report */
        job.stage_names = stage_names;
        job.stage_seconds = sec;
        if (bl_path_join(dir, "report.html", &path, NULL)) goto nomem;
        if ((st = bl_report_write(path, &job, study, trials, pr, set, g, figs, warn, err))) goto done;
    }
    sec[BL_STAGE_REPORT] = now_seconds() - t;
    goto done;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
done:
    free(path);
    bl_figure_set_destroy(figs);
    bl_goodness_destroy(g);
    return st;
}

typedef struct {
    const bl_run_options *opt;
} fit_progress_ctx;

static void fit_progress(void *user, const char *stage, size_t done, size_t total)
{
    fit_progress_ctx *c = user;
    if (c->opt->progress) c->opt->progress(c->opt->progress_user, BL_STAGE_FITS, stage, done, total);
}


bl_status bl_run(const bl_run_options *opt, bl_run_result *out, bl_warnings *warn, bl_error *err)
{
    memset(out, 0, sizeof *out);
    double t_all = now_seconds(), t = t_all;
    char started[32], finished[32];
    bl_utc_stamp(started);
    unsigned long seed = opt->has_seed ? opt->seed : 1;
    int threads = opt->threads;
#ifdef _OPENMP
    if (threads <= 0) threads = omp_get_max_threads();
#else
    threads = 1;
#endif
    bl_study *study = NULL;
    bl_trials *trials = NULL;
    bl_power_result *pr = NULL;
    bl_fit_set *set = NULL;
    bl_stage *stage = NULL;
    cJSON *prov = NULL;
    char *path = NULL;
    bl_status st = BL_OK;

    say(opt, BL_STAGE_SETUP, "reading the study", 0, 0);
    if ((st = bl_study_load(opt->study_path, &study, err))) goto done;
    const char *target = opt->out_dir ? opt->out_dir : study->output;
    if (!target || !target[0]) {
        st = bl_error_set(err, BL_ERR_USAGE, "%s: no output folder: give --out DIR or the study's \"output\"", opt->study_path);
        goto done;
    }
    /* Never replace a folder that holds the inputs (e.g. --out pointing at the study's own folder). */
    {
        const char *inputs[3] = {opt->study_path, study->trials.file, NULL};
        char *rec_dir = NULL;
        if (study->has_recordings) {
            /* The fixed part of the recordings pattern: its folder up to the first placeholder. */
            rec_dir = strdup(study->recordings.file);
            if (!rec_dir) goto nomem;
            char *brace = strchr(rec_dir, '{');
            if (brace) *brace = '\0';
            char *slash = strrchr(rec_dir, '/');
            if (slash) *slash = '\0';
            else strcpy(rec_dir, ".");
            inputs[2] = rec_dir;
        }
        for (int i = 0; i < 3 && st == BL_OK; i++)
            if (inputs[i]) {
                int inside = 0;
                if ((st = bl_path_inside(inputs[i], target, &inside, err))) break;
                if (inside)
                    st = bl_error_set(err, BL_ERR_USAGE, "the output folder %s holds the study's inputs (%s); choose "
                                      "another output folder", target, inputs[i]);
            }
        free(rec_dir);
        if (st) goto done;
    }
    /* Claim the output first, so a refused overwrite costs nothing. */
    if ((st = bl_stage_begin(target, opt->force, &stage, err))) goto done;
    if (!(out->out_dir = strdup(target))) goto nomem;
    const char *dir = bl_stage_dir(stage);
    if ((st = bl_trials_load(study, &trials, warn, err))) goto done;
    out->stage_seconds[BL_STAGE_SETUP] = now_seconds() - t;

    t = now_seconds();
    if (study->has_recordings && study->has_power) {
        say(opt, BL_STAGE_POWER, "band power", 0, trials->n);
        if ((st = bl_power_compute(study, trials, threads, &pr, warn, err))) goto done;
        if (bl_path_join(dir, "power.csv", &path, NULL)) goto nomem;
        if ((st = bl_power_write_csv(study, trials, pr, path, err))) goto done;
        free(path);
        path = NULL;
        say(opt, BL_STAGE_POWER, "band power", trials->n, trials->n);
    }
    out->stage_seconds[BL_STAGE_POWER] = now_seconds() - t;

    t = now_seconds();
    {
        bl_fit_options fo;
        bl_fit_options_default(&fo);
        fit_progress_ctx pc = {opt};
        fo.threads = threads;
        fo.seed = seed;
        fo.permutations = opt->permutations;
        fo.progress = fit_progress;
        fo.progress_user = &pc;
        if ((st = bl_fit_study(study, trials, &fo, &set, warn, err))) goto done;
        if (bl_path_join(dir, "comparison.csv", &path, NULL)) goto nomem;
        if ((st = bl_results_write_comparison(path, set, err))) goto done;
        free(path);
        if (bl_path_join(dir, "trials.csv", &path, NULL)) goto nomem;
        if ((st = bl_results_write_trials(path, set, trials, err))) goto done;
        free(path);
        path = NULL;
    }
    out->stage_seconds[BL_STAGE_FITS] = now_seconds() - t;

    /* Goodness of fit, figures and the report: the report area's API. */
    if ((st = run_report_stages(opt, study, trials, pr, set, dir, out->stage_seconds, threads, seed, started, warn, err))) goto done;

    /* Setup also covers hashing the inputs and writing fits.json (its provenance needs the end time). */
    t = now_seconds();
    say(opt, BL_STAGE_SETUP, "hashing the inputs, writing fits.json", 0, 0);
    if ((st = bl_provenance_create(opt->study_path, study, trials, pr, seed, threads, opt->permutations, started, &prov,
                                   err)))
        goto done;
    out->stage_seconds[BL_STAGE_SETUP] += now_seconds() - t;
    out->total_seconds = now_seconds() - t_all;
    bl_utc_stamp(finished);
    cJSON_AddStringToObject(prov, "finished", finished);
    {
        cJSON *ss = cJSON_AddObjectToObject(prov, "stage_seconds");
        for (int s = 0; ss && s < BL_STAGE_COUNT; s++) cJSON_AddNumberToObject(ss, stage_names[s], out->stage_seconds[s]);
    }
    if (bl_path_join(dir, "fits.json", &path, NULL)) goto nomem;
    if ((st = bl_results_write_fits(path, set, prov, warn, err))) goto done;
    if ((st = bl_stage_commit(stage, err))) {
        stage = NULL;
        goto done;
    }
    stage = NULL;
    out->summary = make_summary(set);
    out->timings = make_timings(out->stage_seconds, out->total_seconds);
    out->trials = trials->n;
    out->kept = trials->n_kept;
    out->participants = trials->n_participants;
    if (!out->summary || !out->timings) goto nomem;
    goto done;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
done:
    if (st != BL_OK) {
        char *keep = out->out_dir;
        out->out_dir = NULL;
        bl_run_result_clear(out);
        free(keep);
    }
    free(path);
    cJSON_Delete(prov);
    bl_stage_abort(stage);
    bl_fit_set_destroy(set);
    bl_power_result_destroy(pr);
    bl_trials_destroy(trials);
    bl_study_destroy(study);
    return st;
}
