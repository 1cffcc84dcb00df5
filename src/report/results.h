/* Writers for the fit outputs (docs/outputs.md): fits.json, comparison.csv, trials.csv.
 * Every file is written atomically (output.h). CSV: header
 * row, comma-separated, missing values "NA", numbers %.17g. JSON numbers that are NAN are null.
 *
 * fits.json: {"mode", "models": [{"name", "log_likelihood", "parameters", "trials", "aic", "bic",
 *   "converged", "diagnostics", "coefficients": [{"parameter", "term", "level", "estimate", "se",
 *   "ci_low", "ci_high", "z", "p"}], "covariance" (n_coef x n_coef rows in coefficient order, or null),
 *   "extends", "mode", "permutation_tests" (when run),
 *   separate mode: "participants": [{"participant", "name", ... as above}], "group": [{"parameter",
 *   "term", "level", "participants", "mean", "sd", "t", "df", "p", "random_effects": {...}}]}],
 *   "permutation" (when run), "warnings": [...], "provenance": {...}}
 * comparison.csv: name, parameters, trials, log_likelihood, aic, bic, delta_aic, delta_bic, aic_weight,
 *   lrt_against (the model it extends, NA when none), lrt_nested ("yes", "not nested", "not fitted",
 *   NA), lrt_statistic, lrt_df, lrt_p (NA unless nested)
 * trials.csv: model, participant, trial, threshold, drift, nondecision, start, p_upper, mean_rt,
 *   log_likelihood, then the trial's condition columns (the fitted models' `per` and slope `by`
 *   columns, participant left out, plus the stimulus column with stimulus coding) and regressor
 *   columns (the slopes' regressors), each once in order of first appearance, values as the trial
 *   table holds them (band regressors after scale and standardize). One row per used trial and
 *   model, models in study order, trials in table order. `study` may be NULL (no extra columns).
 */
#ifndef BL_RESULTS_H
#define BL_RESULTS_H

#include "fit/fit.h"
#include "bandlink/status.h"
#include "design/trials.h"

#include <cjson/cJSON.h>

/* "pooled", "separate" or "hierarchical", as written in fits.json. */
const char *bl_results_mode_name(bl_participants_mode mode);

bl_status bl_results_write_fits(const char *path, const bl_fit_set *set, const cJSON *provenance,
                                const bl_warnings *warnings, bl_error *err);
bl_status bl_results_write_comparison(const char *path, const bl_fit_set *set, bl_error *err);
bl_status bl_results_write_trials(const char *path, const bl_fit_set *set, const bl_study *study,
                                  const bl_trials *trials, bl_error *err);

#endif
