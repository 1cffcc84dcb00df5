/* Synthetic studies with known truth (`bandlink simulate`).
 *
 * A scenario file (JSON, keys documented in docs/simulate.md, strictly validated: an unknown key is an
 * error naming its path) describes participants, conditions, trial timing, the recordings (1/f-like
 * background per contact, a common-mode signal shared by every contact, trial-by-trial oscillatory bursts
 * whose amplitude varies from trial to trial) and the true regression of the decision-model parameters
 * on the band-power regressors, optionally with participant spread (per term, the SD of a normal offset
 * drawn once per participant). bl_simulate_write() writes a complete study folder:
 *   recordings/<participant>.flac|.wav   continuous multi-channel traces, 24-bit PCM
 *   trials.csv                           one row per trial: onsets, conditions, stimulus, choice, rt
 *   study.json                           a study file that analyses it (the scenario's models)
 *   truth.json                           the true coefficients, on the terms and levels of the fitted model
 *                                        (with a participant spread also each participant's own)
 *   truth_trials.csv                     the true parameters of every trial
 * Behaviour is drawn after the band power has been measured from the written recordings with the
 * study's own settings, so the truth is on the regressor the study will measure.
 * Deterministic for a given seed (GSL mt19937).
 */
#ifndef BANDLINK_SIMULATE_H
#define BANDLINK_SIMULATE_H

#include "bandlink/status.h"

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

typedef struct bl_scenario bl_scenario;

/* Read and validate a scenario; errors name the file and the key path (e.g. "bursts.theta.amplitude"). */
BL_API bl_status bl_scenario_load(const char *path, bl_scenario **out, bl_error *err);
BL_API bl_status bl_scenario_parse(const char *json, const char *name, bl_scenario **out, bl_error *err);
BL_API void bl_scenario_destroy(bl_scenario *sc);
/* The scenario's own seed (its "seed" key, default 1). */
BL_API unsigned long bl_scenario_seed(const bl_scenario *sc);

typedef struct {
    int has_seed; /* use `seed` instead of the scenario's */
    unsigned long seed;
    int force;   /* replace an existing output folder (only once the new one is complete) */
    int threads; /* for the band-power measurement; <= 0: default */
} bl_simulate_options;

typedef struct {
    size_t participants, trials;
    size_t recordings;
    double seconds; /* total recorded time, all participants */
    double p_upper; /* share of upper-boundary responses */
    double mean_rt; /* seconds */
    unsigned long seed;
} bl_simulate_summary;

/* Write the synthetic study into folder `out_dir` (created through a temporary folder beside it and
 * renamed at the end; an existing folder is an error unless opt->force). summary may be NULL. */
BL_API bl_status bl_simulate_write(const bl_scenario *sc, const char *out_dir, const bl_simulate_options *opt,
                                   bl_simulate_summary *summary, bl_warnings *warn, bl_error *err);

#ifdef __cplusplus
}
#endif
#endif
