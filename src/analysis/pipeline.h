/* The whole job as one library call (`bandlink run`): band power -> fit every model -> compare ->
 * goodness of fit -> figures -> report, with provenance, stage timings and a results folder that is
 * written into a temporary folder beside the target and renamed into place only when complete.
 * Also the staging-folder helpers shared with `bandlink simulate`. */
#ifndef BL_PIPELINE_H
#define BL_PIPELINE_H

#include "signal/power.h"
#include "bandlink/status.h"
#include "design/study.h"
#include "design/trials.h"

#include <cjson/cJSON.h>

#include <stddef.h>

/* ---- Staging folder: build a folder completely, then move it into place. ---- */
typedef struct bl_stage bl_stage;

/* Prepare to (re)create folder `target`. When it exists and force == 0: BL_ERR_EXISTS naming it.
 * Creates the parent folder and a hidden temporary folder beside the target (".<name>.partial-<pid>-XXXXXX");
 * leftovers of killed runs (whose process is gone) are removed first. */
bl_status bl_stage_begin(const char *target, int force, bl_stage **out, bl_error *err);
/* The temporary folder to write into. */
const char *bl_stage_dir(const bl_stage *s);
/* Move the finished folder into place (replacing the old one atomically where the system allows, else
 * old -> aside, new -> target, old removed), free the stage. On failure the old folder is kept. */
bl_status bl_stage_commit(bl_stage *s, bl_error *err);
/* Remove the temporary folder and free. NULL-safe. */
void bl_stage_abort(bl_stage *s);
/* *inside = 1 when the existing file or folder `path` is `folder` or lies inside it (symbolic links
 * resolved); 0 otherwise, or when either does not exist. BL_ERR_NOMEM when memory ran out. Guards
 * --force against replacing a folder holding inputs. */
bl_status bl_path_inside(const char *path, const char *folder, int *inside, bl_error *err);
/* Remove a folder tree (like rm -r). */
bl_status bl_remove_tree(const char *path, bl_error *err);


/* The provenance record of fits.json (caller frees with cJSON_Delete): bandlink version, `started`
 * (UTC, from bl_utc_stamp), seed, threads, permutations, the study as parsed, SHA-256 of the study file,
 * the trial table and every recording `power` read (power may be NULL), Welch settings and the bins
 * of each band, exclusion counts. Used by `run` and `fit` alike. */
bl_status bl_provenance_create(const char *study_path, const bl_study *study, const bl_trials *trials,
                               const bl_power_result *power, unsigned long seed, int threads,
                               unsigned long permutations, const char *started, cJSON **out, bl_error *err);
/* The current UTC time as "YYYY-MM-DDTHH:MM:SSZ". */
void bl_utc_stamp(char out[32]);



/* ---- The whole job ---- */

typedef enum {
    BL_STAGE_SETUP = 0,    /* read the study and trial table, hash the inputs */
    BL_STAGE_POWER,        /* band power per trial, power.csv */
    BL_STAGE_FITS,         /* every model fitted and compared; fits.json, comparison.csv, trials.csv */
    BL_STAGE_GOODNESS,     /* fit_quantiles.csv */
    BL_STAGE_FIGURES,      /* figures/ */
    BL_STAGE_REPORT,       /* report.html */
    BL_STAGE_COUNT
} bl_stage_id;

/* Stage name as shown to users ("power", "fits", ...). */
const char *bl_stage_name(int stage);

typedef struct {
    const char *study_path;
    const char *out_dir;        /* NULL: the study's "output" folder */
    int threads;                /* <= 0: all cores (OpenMP default) */
    int has_seed;
    unsigned long seed;         /* default 1 */
    size_t permutations;        /* permutation refits per slope; 0 = none */
    int force;                  /* replace an existing results folder once the new one is complete */
    /* Progress (may be NULL): stage, a detail ("model theta-threshold", ""), steps done and total
     * (total 0 = unknown). Called from the calling thread only. */
    void (*progress)(void *user, int stage, const char *detail, size_t done, size_t total);
    void *progress_user;
} bl_run_options;

void bl_run_options_default(bl_run_options *o);

typedef struct {
    char *out_dir;                          /* the results folder written */
    double stage_seconds[BL_STAGE_COUNT];   /* wall time per stage */
    double total_seconds;
    char *summary;                          /* plain text: comparison table, best model's slopes */
    char *timings;                          /* plain text: wall time per stage and its share */
    size_t trials, kept, participants;
} bl_run_result;

/* Run the whole job. On success the results folder holds power.csv, fits.json (with provenance),
 * comparison.csv, trials.csv, fit_quantiles.csv, figures/ and report.html (docs/outputs.md). On failure
 * nothing is moved into place and an existing results folder is untouched. */
bl_status bl_run(const bl_run_options *opt, bl_run_result *out, bl_warnings *warn, bl_error *err);
void bl_run_result_clear(bl_run_result *r);
#endif
