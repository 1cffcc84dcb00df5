/* Writers for the fit outputs of vocabulary.md: fits.json, comparison.csv, trials.csv.
 * Owned by the fit area (src/results.c). Every file is written atomically (output.h). CSV: header
 * row, comma-separated, missing values "NA", numbers %.17g. JSON numbers that are NAN are null.
 *
 * fits.json: {"mode", "models": [{"name", "log_likelihood", "parameters", "trials", "aic", "bic",
 *   "converged", "diagnostics", "coefficients": [{"parameter", "term", "level", "estimate", "se",
 *   "ci_low", "ci_high", "z", "p"}], "extends", "mode", "permutation_tests" (when run),
 *   separate mode: "participants": [{"participant", "name", ... as above}], "group": [{"parameter",
 *   "term", "level", "participants", "mean", "sd", "t", "df", "p", "random_effects": {...}}]}],
 *   "permutation" (when run), "warnings": [...], "provenance": {...}}
 * comparison.csv: name, parameters, trials, log_likelihood, aic, bic, delta_aic, delta_bic, aic_weight,
 *   lrt_against (the model it extends, NA when none), lrt_nested ("yes", "not nested", "not fitted",
 *   NA), lrt_statistic, lrt_df, lrt_p (NA unless nested)
 * trials.csv: model, participant, trial, threshold, drift, nondecision, start, p_upper, mean_rt,
 *   log_likelihood; one row per used trial and model, models in study order, trials in table order.
 */
#ifndef BL_RESULTS_H
#define BL_RESULTS_H

#include "fit/fit.h"
#include "bandlink/status.h"
#include "design/trials.h"

#include <cjson/cJSON.h>

bl_status bl_results_write_fits(const char *path, const bl_fit_set *set, const cJSON *provenance,
                                const bl_warnings *warnings, bl_error *err);
bl_status bl_results_write_comparison(const char *path, const bl_fit_set *set, bl_error *err);
bl_status bl_results_write_trials(const char *path, const bl_fit_set *set, const bl_trials *trials,
                                  bl_error *err);

/* All three into folder `dir` (created if missing). Existing files are replaced only with
 * force != 0, else BL_ERR_EXISTS naming the file. */
bl_status bl_results_write_all(const char *dir, const bl_fit_set *set, const bl_trials *trials,
                               const cJSON *provenance, const bl_warnings *warnings, int force,
                               bl_error *err);

#endif
