/* One analysis of one study: the handle every bandlink command drives.
 *
 *   bl_analysis_open      read the study file and its trial table (nothing is written)
 *   bl_analysis_target    choose and check the results folder before any work (nothing is created)
 *   bl_analysis_power     Welch band power of every kept trial's window -> trial-wise regressors
 *   bl_analysis_fit       every model (or those named) fitted, compared, optionally permutation-tested
 *   bl_analysis_write     the chosen outputs into the results folder, written whole or not at all, with
 *                         provenance (version, the parsed study, SHA-256 of every input, seed, threads)
 *
 * Steps run in this order; a step whose input is missing (no recordings: no band power) is skipped.
 * Warnings found on the way collect in the handle (bl_analysis_warnings). Outputs: docs/outputs.md.
 * Research use only; not a medical device.
 */
#ifndef BANDLINK_ANALYSIS_H
#define BANDLINK_ANALYSIS_H

#include "bandlink/status.h"

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

typedef struct bl_analysis bl_analysis;

/* The steps of a whole run, as timed and reported. */
typedef enum {
    BL_STEP_SETUP = 0, /* read the study and trial table, hash the inputs, provenance */
    BL_STEP_POWER,     /* band power per trial (power.csv) */
    BL_STEP_FITS,      /* models fitted and compared (fits.json, comparison.csv, trials.csv) */
    BL_STEP_GOODNESS,  /* observed vs predicted quantiles (fit_quantiles.csv) */
    BL_STEP_FIGURES,   /* figures/ */
    BL_STEP_REPORT,    /* report.html */
    BL_STEP_COUNT
} bl_step;

/* "setup", "power", "fits", "goodness", "figures", "report". */
BL_API const char *bl_step_name(bl_step step);

typedef struct {
    int threads;               /* <= 0: all cores; results do not depend on it */
    unsigned long seed;        /* optimiser starts and permutations; default 1 */
    size_t permutations;       /* permutation refits per slope coefficient; 0 = none */
    const char *const *models; /* fit only these models (NULL: every model of the study) */
    size_t n_models;
    /* Progress (may be NULL): the step, a detail ("model theta-threshold"), steps done and total
     * (total 0 = unknown). Called from the calling thread only. */
    void (*progress)(void *user, bl_step step, const char *detail, size_t done, size_t total);
    void *progress_user;
} bl_analysis_options;

BL_API void bl_analysis_options_default(bl_analysis_options *opt);

/* Read and check the study file and its trial table. `opt` is copied (the model names must outlive the
 * handle). On failure *out is NULL and err names the file, line/column or key, and the value. */
BL_API bl_status bl_analysis_open(const char *study_path, const bl_analysis_options *opt, bl_analysis **out,
                                  bl_error *err);
BL_API void bl_analysis_close(bl_analysis *a);

/* The results folder: `out_dir`, or the study's "output" when NULL. Checked now, before any work: it must
 * not hold an input, must not be a symbolic link, and an existing folder is replaced only with `force` and
 * only when bandlink wrote everything in it. Nothing is created until bl_analysis_write. */
BL_API bl_status bl_analysis_target(bl_analysis *a, const char *out_dir, int force, bl_error *err);

/* 1 when the study has recordings and bands, so that bl_analysis_power has work to do. */
BL_API int bl_analysis_has_power(const bl_analysis *a);
/* Band power per kept trial (a no-op when the study has no recordings or bands). */
BL_API bl_status bl_analysis_power(bl_analysis *a, bl_error *err);
/* Fit and compare the models; permutation tests when opt->permutations > 0. Needs bl_analysis_power
 * first when the models use band-power regressors. */
BL_API bl_status bl_analysis_fit(bl_analysis *a, bl_error *err);

/* What bl_analysis_write writes. */
enum {
    BL_OUTPUT_POWER = 1u << 0,  /* power.csv */
    BL_OUTPUT_FITS = 1u << 1,   /* fits.json, comparison.csv, trials.csv */
    BL_OUTPUT_REPORT = 1u << 2, /* fit_quantiles.csv, figures/, report.html */
    BL_OUTPUT_ALL = 7u
};

/* Write `outputs` (those whose step ran) plus provenance.json into the folder chosen with
 * bl_analysis_target, through a temporary folder moved into place only when complete. `command` ("run",
 * "fit", "power") is recorded in the provenance. */
BL_API bl_status bl_analysis_write(bl_analysis *a, unsigned outputs, const char *command, bl_error *err);

/* Plain-text summaries, owned by the handle; NULL when memory ran out, and the fit (power) summary also
 * before bl_analysis_fit (bl_analysis_power):
 * the model comparison with likelihood-ratio tests, the best model's slopes with 95% CIs and p-values
 * (and the competing model's when AIC and BIC disagree or ΔAIC < 2), permutation tests per slope coefficient. */
BL_API const char *bl_analysis_fit_summary(bl_analysis *a);
/* `bandlink check`: participants, trials kept and excluded by reason, recordings, Welch settings,
 * frequency resolution and bins per band, models. */
BL_API const char *bl_analysis_check_summary(bl_analysis *a);
/* One line: what bl_analysis_power found (trials, kept, artifacts, bands). */
BL_API const char *bl_analysis_power_summary(bl_analysis *a);
/* Wall time per step so far and its share. */
BL_API const char *bl_analysis_timings(bl_analysis *a);

/* The results folder (as given or from the study); NULL before bl_analysis_target. */
BL_API const char *bl_analysis_output(const bl_analysis *a);
/* Counts of the trial table: every row, rows kept for fitting, participants. */
BL_API void bl_analysis_counts(const bl_analysis *a, size_t *trials, size_t *kept, size_t *participants);
/* Warnings so far (the handle keeps them). */
BL_API const bl_warnings *bl_analysis_warnings(const bl_analysis *a);
/* Wall time of a step in seconds (0 when it has not run). */
BL_API double bl_analysis_step_seconds(const bl_analysis *a, bl_step step);

/* ---- scan (docs/scan.md) ---- */

/* Output flag: scan.csv and one heat map per tested parameter (scan_<parameter>[_<level>].svg). */
enum { BL_OUTPUT_SCAN = 1u << 3 };

/* The time-frequency scan of the study's "scan" block: the null model fitted once, multitaper power of
 * every cell, score statistics, permutation family-wise error (opt->permutations > 0 overrides the
 * block's count). Run after bl_analysis_power (its artifact rules decide which trials are kept).
 * Progress is reported as the "fits" step. */
BL_API bl_status bl_analysis_scan(bl_analysis *a, bl_error *err);
/* The scan's summary (grid, correction, the strongest cells); NULL before bl_analysis_scan. */
BL_API const char *bl_analysis_scan_summary(bl_analysis *a);

#ifdef __cplusplus
}
#endif
#endif
