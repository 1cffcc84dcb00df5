/* One analysis of one study (bandlink/analysis.h): the order of the job and its bookkeeping. Every command
 * drives this handle; the work itself is done by the modules it calls (signal/, fit/, report/). */
#include "analysis/analysis_internal.h"
#include "analysis/provenance.h"
#include "analysis/summary.h"
#include "design/trial_files.h"
#include "core/clock.h"
#include "core/output.h"
#include "core/strutil.h"
#include "core/textbuf.h"
#include "report/report.h"
#include "report/results.h"
#include "scan/scan.h"
#include "bl_config.h"

#include <stdint.h>
#include <stdlib.h>
#include <string.h>
#ifdef _OPENMP
#include <omp.h>
#endif

/* A joined path, or NULL when memory ran out (the caller reports it where it checks). */
static char *joined(const char *dir, const char *name)
{
    char *p = NULL;
    return bl_path_join(dir, name, &p, NULL) == BL_OK ? p : NULL;
}

static void scan_free(bl_analysis *a);
static bl_status write_scan(bl_analysis *a, const char *dir, bl_error *err);

static const char *const step_names[BL_STEP_COUNT] = {"setup", "power", "fits", "goodness", "figures", "report"};

const char *bl_step_name(bl_step step) { return (int)step >= 0 && step < BL_STEP_COUNT ? step_names[step] : "?"; }

void bl_analysis_options_default(bl_analysis_options *opt)
{
    memset(opt, 0, sizeof *opt);
    opt->seed = 1;
}

static void say(const bl_analysis *a, bl_step step, const char *detail, size_t done, size_t total)
{
    if (a->opt.progress) a->opt.progress(a->opt.progress_user, step, detail, done, total);
}

bl_status bl_analysis_open(const char *study_path, const bl_analysis_options *opt, bl_analysis **out, bl_error *err)
{
    *out = NULL;
    bl_analysis *a = calloc(1, sizeof *a);
    if (!a || !(a->study_path = bl_strdup(study_path))) {
        free(a);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    if (opt) a->opt = *opt;
    else bl_analysis_options_default(&a->opt);
    a->threads = a->opt.threads;
#ifdef _OPENMP
    if (a->threads <= 0) a->threads = omp_get_max_threads();
#else
    a->threads = 1;
#endif
    if (a->threads < 1) a->threads = 1;
    bl_utc_stamp(a->started);
    a->opened_at = bl_clock_seconds();
    say(a, BL_STEP_SETUP, "reading the study", 0, 0);
    bl_status st = bl_study_load(study_path, &a->study, err);
    if (!st) st = bl_trials_load(a->study, &a->trials, &a->warnings, err);
    a->seconds[BL_STEP_SETUP] = bl_clock_seconds() - a->opened_at;
    if (st) {
        bl_analysis_close(a);
        return st;
    }
    *out = a;
    return BL_OK;
}

void bl_analysis_close(bl_analysis *a)
{
    if (!a) return;
    bl_input_hashes_destroy(a->hashes);
    scan_free(a);
    bl_fit_set_destroy(a->fits);
    bl_power_result_destroy(a->power);
    bl_trials_destroy(a->trials);
    bl_study_destroy(a->study);
    bl_warnings_clear(&a->warnings);
    free(a->study_path);
    free(a->target);
    free(a->fit_summary);
    free(a->check_summary);
    free(a->power_summary);
    free(a->timings);
    free(a);
}

/* The fixed part of the recordings pattern: its folder up to the first placeholder. */
static char *recordings_folder(const bl_study *study)
{
    char *dir = bl_strdup(study->recordings.file);
    if (!dir) return NULL;
    char *brace = strchr(dir, '{');
    if (brace) *brace = '\0';
    char *slash = strrchr(dir, '/');
    if (slash) *slash = '\0';
    else strcpy(dir, ".");
    return dir;
}

bl_status bl_analysis_target(bl_analysis *a, const char *out_dir, int force, bl_error *err)
{
    const char *target = out_dir ? out_dir : a->study->output;
    if (!target || !target[0])
        return bl_error_set(err, BL_ERR_USAGE, "%s: no output folder: give --out DIR or the study's \"output\"",
                            a->study_path);
    char *rec_dir = NULL;
    if (a->study->has_recordings && !(rec_dir = recordings_folder(a->study)))
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    const char *inputs[3] = {a->study_path, a->study->trials.file, rec_dir};
    bl_status st = bl_results_folder_check(target, force, inputs, 3, err);
    free(rec_dir);
    if (st) return st;
    free(a->target);
    if (!(a->target = bl_strdup(target))) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    /* "results/" and "results" are the same folder. */
    for (size_t n = strlen(a->target); n > 1 && a->target[n - 1] == '/'; n--) a->target[n - 1] = '\0';
    a->force = force;
    return BL_OK;
}

/* Hash the inputs (study file, trial table, every recording read) on a thread of their own while the
 * fits run; the provenance waits for them. Measured on the demo: the hashing (13% of a run when done as a
 * pass of its own) now overlaps the fits. */
static bl_status start_hashing(bl_analysis *a, bl_error *err)
{
    if (!a->target) return BL_OK; /* nothing will be written (check): no provenance, no hashing */
    /* a trials.file pattern or a BIDS tree: every file read, in place of the pattern */
    const bl_trial_sources *files = a->trials ? a->trials->files : NULL;
    size_t n_tables = files ? files->n : 1;
    size_t n = 1 + n_tables + (a->power ? a->power->n_recordings : 0);
    const char **paths = malloc(n * sizeof *paths);
    if (!paths) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    paths[0] = a->study_path;
    for (size_t k = 0; k < n_tables; k++) paths[1 + k] = files ? files->path[k] : a->study->trials.file;
    for (size_t r = 1 + n_tables; r < n; r++) paths[r] = a->power->recordings[r - 1 - n_tables].path;
    bl_input_hashes_destroy(a->hashes);
    a->hashes = NULL;
    bl_status st = bl_input_hashes_start(paths, n, &a->hashes, err);
    free(paths);
    return st;
}

int bl_analysis_has_power(const bl_analysis *a)
{
    return a->study->has_recordings && a->study->has_power && a->study->power.n_bands > 0;
}

bl_status bl_analysis_power(bl_analysis *a, bl_error *err)
{
    if (!bl_analysis_has_power(a)) return BL_OK;
    double t = bl_clock_seconds();
    say(a, BL_STEP_POWER, "band power", 0, a->trials->n);
    bl_power_result_destroy(a->power);
    a->power = NULL;
    bl_status st = bl_power_compute(a->study, a->trials, a->threads, &a->power, &a->warnings, err);
    if (st) return st;
    say(a, BL_STEP_POWER, "band power", a->trials->n, a->trials->n);
    a->seconds[BL_STEP_POWER] += bl_clock_seconds() - t;
    return start_hashing(a, err);
}

typedef struct {
    const bl_analysis *a;
} fit_progress_ctx;

static void fit_progress(void *user, const char *detail, size_t done, size_t total)
{
    const fit_progress_ctx *c = user;
    say(c->a, BL_STEP_FITS, detail, done, total);
}

bl_status bl_analysis_fit(bl_analysis *a, bl_error *err)
{
    double t = bl_clock_seconds();
    if (!a->hashes) {
        bl_status hs = start_hashing(a, err);
        if (hs) return hs;
    }
    bl_fit_options fo;
    bl_fit_options_default(&fo);
    fit_progress_ctx pc = {a};
    fo.threads = a->threads;
    fo.seed = a->opt.seed;
    fo.permutations = a->opt.permutations;
    fo.models = a->opt.models;
    fo.n_models = a->opt.models ? a->opt.n_models : 0;
    fo.progress = fit_progress;
    fo.progress_user = &pc;
    bl_fit_set_destroy(a->fits);
    a->fits = NULL;
    bl_status st = bl_fit_study(a->study, a->trials, &fo, &a->fits, &a->warnings, err);
    a->seconds[BL_STEP_FITS] += bl_clock_seconds() - t;
    return st;
}

static bl_status write_power(const bl_analysis *a, const char *dir, bl_error *err)
{
    char *path = joined(dir, "power.csv");
    if (!path) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    bl_status st = bl_power_write_csv(a->study, a->trials, a->power, path, err);
    free(path);
    return st;
}

static bl_status write_fit_tables(const bl_analysis *a, const char *dir, bl_error *err)
{
    static const char *const names[2] = {"comparison.csv", "trials.csv"};
    bl_status st = BL_OK;
    for (int i = 0; i < 2 && !st; i++) {
        char *path = joined(dir, names[i]);
        if (!path) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        st = i == 0 ? bl_results_write_comparison(path, a->fits, err)
                    : bl_results_write_trials(path, a->fits, a->study, a->trials, err);
        free(path);
    }
    return st;
}

/* Goodness of fit, figures and report.html: the report module's one entry point, timed per step. */
static bl_status write_report(bl_analysis *a, const char *dir, bl_error *err)
{
    char finished[32];
    bl_utc_stamp(finished);
    bl_report_job job = {0};
    job.version = BL_VERSION_STRING;
    job.study_path = a->study_path;
    job.started = a->started;
    job.finished = finished;
    job.has_seed = 1;
    job.seed = a->opt.seed;
    job.threads = a->threads;
    job.permutations = a->opt.permutations;
    job.n_stages = BL_STEP_GOODNESS; /* the steps done before the report's own three */
    job.stage_names = step_names;
    job.stage_seconds = a->seconds;
    double sec[3];
    say(a, BL_STEP_GOODNESS, "observed vs predicted quantiles, figures, report.html", 0, 0);
    bl_status st = bl_report_outputs_write(dir, &job, a->study, a->trials, a->power, a->fits, &a->warnings, a->threads,
                                           sec, err);
    for (int i = 0; i < 3; i++) a->seconds[BL_STEP_GOODNESS + i] += sec[i];
    return st;
}

/* The provenance record, made before the report so that the report's setup time includes hashing. */
static bl_status provenance_begin(bl_analysis *a, cJSON **prov, bl_error *err)
{
    double t = bl_clock_seconds();
    say(a, BL_STEP_SETUP, "hashing the inputs", 0, 0);
    const char(*hex)[BL_SHA256_HEX_SIZE] = NULL;
    bl_status st = a->hashes ? bl_input_hashes_wait(a->hashes, &hex, err) : BL_OK;
    if (!st)
        st = bl_provenance_create(a->study_path, a->study, a->trials, a->power, a->opt.seed, a->threads,
                                  a->opt.permutations, a->started, hex, prov, err);
    a->seconds[BL_STEP_SETUP] += bl_clock_seconds() - t;
    return st;
}

/* provenance.json, and fits.json with the same record inside, once every step's time is known. */
static bl_status provenance_finish(bl_analysis *a, cJSON *prov, const char *dir, unsigned outputs, const char *command,
                                   bl_error *err)
{
    char *path = NULL, *text = NULL;
    char finished[32];
    bl_utc_stamp(finished);
    cJSON *ss = NULL;
    bl_status st = BL_OK;
    if (!cJSON_AddStringToObject(prov, "command", command) || !cJSON_AddStringToObject(prov, "finished", finished) ||
        !(ss = cJSON_AddObjectToObject(prov, "stage_seconds")))
        goto nomem;
    for (int s = 0; s < BL_STEP_COUNT; s++)
        if (!cJSON_AddNumberToObject(ss, step_names[s], a->seconds[s])) goto nomem;
    if ((outputs & BL_OUTPUT_FITS) && a->fits) {
        if (!(path = joined(dir, "fits.json"))) goto nomem;
        if ((st = bl_results_write_fits(path, a->fits, prov, &a->warnings, err))) goto done;
        free(path);
    }
    if (!(path = joined(dir, "provenance.json")) || !(text = cJSON_Print(prov))) goto nomem;
    size_t n = strlen(text);
    text[n] = '\n'; /* cJSON_Print's terminator becomes the final newline */
    st = bl_write_file_atomic(path, text, n + 1, err);
    goto done;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory writing the provenance");
done:
    cJSON_free(text);
    free(path);
    return st;
}

bl_status bl_analysis_write(bl_analysis *a, unsigned outputs, const char *command, bl_error *err)
{
    if (!a->target)
        return bl_error_set(err, BL_ERR_INTERNAL, "no results folder chosen (bl_analysis_target) before writing");
    if ((outputs & (BL_OUTPUT_FITS | BL_OUTPUT_REPORT)) && !a->fits)
        return bl_error_set(err, BL_ERR_INTERNAL, "fits and report outputs need bl_analysis_fit first");
    if (a->warnings.lost)
        return bl_error_set(err, BL_ERR_NOMEM,
                            "out of memory: %zu warnings could not be recorded, so no results are "
                            "written",
                            a->warnings.lost);
    bl_results_folder *folder = NULL;
    cJSON *prov = NULL;
    bl_status st = bl_results_folder_begin(a->target, a->force, command, &folder, err);
    if (st) return st;
    const char *dir = bl_results_folder_dir(folder);
    if ((outputs & BL_OUTPUT_POWER) && a->power) {
        double t = bl_clock_seconds();
        st = write_power(a, dir, err);
        a->seconds[BL_STEP_POWER] += bl_clock_seconds() - t;
    }
    if (!st && (outputs & BL_OUTPUT_FITS)) {
        double t = bl_clock_seconds();
        st = write_fit_tables(a, dir, err);
        a->seconds[BL_STEP_FITS] += bl_clock_seconds() - t;
    }
    if (!st && (outputs & BL_OUTPUT_SCAN)) st = write_scan(a, dir, err);
    if (!st) st = provenance_begin(a, &prov, err);
    if (!st && (outputs & BL_OUTPUT_REPORT)) st = write_report(a, dir, err);
    if (!st) st = provenance_finish(a, prov, dir, outputs, command, err);
    cJSON_Delete(prov);
    if (st) {
        bl_results_folder_abort(folder);
        return st;
    }
    return bl_results_folder_commit(folder, err);
}

const char *bl_analysis_fit_summary(bl_analysis *a)
{
    if (!a->fits) return NULL;
    if (!a->fit_summary) a->fit_summary = bl_summary_fits(a->fits);
    return a->fit_summary;
}

const char *bl_analysis_check_summary(bl_analysis *a)
{
    if (!a->check_summary && bl_check_summary(a->study, a->trials, a->power, &a->check_summary, NULL) != BL_OK)
        a->check_summary = NULL;
    return a->check_summary;
}

const char *bl_analysis_power_summary(bl_analysis *a)
{
    if (!a->power) return NULL;
    free(a->power_summary);
    bl_textbuf b = {0};
    bl_textbuf_printf(&b, "%zu trials, %zu kept, %zu excluded (%zu artifacts), %zu band%s", a->trials->n,
                      a->trials->n_kept, a->trials->n - a->trials->n_kept, a->power->n_artifacts, a->power->n_bands,
                      a->power->n_bands == 1 ? "" : "s");
    a->power_summary = bl_textbuf_take(&b);
    return a->power_summary;
}

const char *bl_analysis_timings(bl_analysis *a)
{
    double total = 0;
    for (int s = 0; s < BL_STEP_COUNT; s++) total += a->seconds[s];
    free(a->timings);
    a->timings = bl_summary_timings(a->seconds, step_names, BL_STEP_COUNT, total);
    return a->timings;
}

const char *bl_analysis_output(const bl_analysis *a) { return a->target; }

void bl_analysis_counts(const bl_analysis *a, size_t *trials, size_t *kept, size_t *participants)
{
    if (trials) *trials = a->trials->n;
    if (kept) *kept = a->trials->n_kept;
    if (participants) *participants = a->trials->n_participants;
}

const bl_warnings *bl_analysis_warnings(const bl_analysis *a) { return &a->warnings; }

double bl_analysis_step_seconds(const bl_analysis *a, bl_step step)
{
    return (int)step >= 0 && step < BL_STEP_COUNT ? a->seconds[step] : 0;
}

/* ---- scan (docs/scan.md) ---- */

static void scan_free(bl_analysis *a)
{
    bl_scan_result_destroy(a->scan);
    free(a->scan_summary);
    a->scan = NULL;
    a->scan_summary = NULL;
}

static void scan_progress(void *user, const char *detail, size_t done, size_t total)
{
    say(user, BL_STEP_FITS, detail, done, total);
}

bl_status bl_analysis_scan(bl_analysis *a, bl_error *err)
{
    double t = bl_clock_seconds();
    if (!a->hashes) {
        bl_status hs = start_hashing(a, err);
        if (hs) return hs;
    }
    scan_free(a);
    bl_scan_options so = {a->threads, a->opt.seed, a->opt.permutations > 0 ? a->opt.permutations : SIZE_MAX,
                          scan_progress, a};
    bl_status st = bl_scan_run(a->study, a->trials, &so, &a->scan, &a->warnings, err);
    if (!st) a->seconds[BL_STEP_POWER] += a->scan->seconds_power;
    a->seconds[BL_STEP_FITS] += bl_clock_seconds() - t - (st ? 0 : a->scan->seconds_power);
    return st;
}

const char *bl_analysis_scan_summary(bl_analysis *a)
{
    if (!a->scan) return NULL;
    if (!a->scan_summary) a->scan_summary = bl_scan_summary(a->scan);
    return a->scan_summary;
}

static bl_status write_scan(bl_analysis *a, const char *dir, bl_error *err)
{
    if (!a->scan) return bl_error_set(err, BL_ERR_INTERNAL, "scan outputs need bl_analysis_scan first");
    char *path = joined(dir, "scan.csv");
    if (!path) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    bl_status st = bl_scan_write_csv(a->scan, path, err);
    free(path);
    if (!st) st = bl_scan_write_figures(a->scan, dir, err);
    if (!st) st = bl_scan_write_report(a->scan, a->study_path, dir, err);
    if (!st && a->scan->n_refits) {
        if (!(path = joined(dir, "scan_refits.csv"))) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        st = bl_scan_write_refits(a->scan, path, err);
        free(path);
    }
    return st;
}
