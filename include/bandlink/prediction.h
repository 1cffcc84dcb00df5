/* Predictions of a fitted model at chosen regressor values and condition levels, with delta-method
 * 95% intervals (`bandlink predict --from fits.json`, docs/cli.md).
 *
 * Reads a fits.json written by `bandlink run` or `bandlink fit` (docs/outputs.md): each model's
 * coefficients (on the link scale), their covariance ("covariance", null when not available) and,
 * for the model's design (per / slopes / fixed / link), the study as parsed (provenance.study).
 *
 * For parameter p with design row g (1 at the intercept of the chosen level, x at the slope on
 * regressor x of the chosen level) and coefficients b with covariance S:
 *     eta = g'b,  value = sign * h(eta)   (h = identity or exp; sign -1 only for the drift of a
 *                                          stimulus of the lower category under stimulus coding)
 *     se  = |h'(eta)| sqrt(g' S g)                                               (delta method)
 *     95% interval: value -+ 1.959964 se (identity link); exp(eta -+ 1.959964 sqrt(g'Sg)) for the log link,
 *     which stays positive like the parameter
 * Derived quantities f (P(upper), P(lower), mean RTs) use the chain rule with a numerical gradient:
 *     se(f) = sqrt(J S J'),  J_j = sum_p df/dparam_p * dparam_p/db_j,
 * df/dparam_p by central differences of the engine (one-sided at the edge of a parameter's range).
 * Source: the delta method (e.g. Casella & Berger 2002, Statistical Inference, 2nd ed., Thm 5.5.24).
 */
#ifndef BANDLINK_PREDICTION_H
#define BANDLINK_PREDICTION_H

#include "bandlink/status.h"
#include "bandlink/wiener.h"

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Normal quantile for 95% two-sided intervals (as in fits.json). */
#define BL_PREDICTION_Z975 1.959963984540054

enum { BL_PREDICTION_NQ = 5 };
/* RT quantile probabilities of the prediction: 0.1 0.3 0.5 0.7 0.9. */
BL_API extern const double bl_prediction_quantile_probs[BL_PREDICTION_NQ];

/* How a parameter was predicted (bl_prediction.link). */
enum { BL_PREDICTION_LINK_FIXED = 0, BL_PREDICTION_LINK_IDENTITY = 1, BL_PREDICTION_LINK_LOG = 2 };

typedef struct bl_fitted_models bl_fitted_models;

/* Read and check fits.json. Errors (BL_ERR_INPUT, exit 2) name the file and the key path
 * (`models[1].coefficients[3].estimate`) and the value; a missing or unreadable file names the file. */
BL_API bl_status bl_fitted_models_load(const char *path, bl_fitted_models **out, bl_error *err);
/* The same from text; `name` is used in messages. */
BL_API bl_status bl_fitted_models_parse(const char *text, const char *name, bl_fitted_models **out, bl_error *err);
BL_API void bl_fitted_models_destroy(bl_fitted_models *fm);
BL_API size_t bl_fitted_models_count(const bl_fitted_models *fm);
BL_API const char *bl_fitted_models_name(const bl_fitted_models *fm, size_t i);

/* One `name=value` of the request: a regressor (value a number on the regressor's scale as in
 * power.csv / trials.csv, i.e. standardised units when the study standardises) or a condition
 * column (value a level as written in the trial table), or the stimulus column. */
typedef struct {
    const char *name;
    const char *value;
} bl_prediction_setting;

typedef struct {
    const char *model;       /* model name */
    const char *participant; /* NULL: the model-level fit; else a participant of a separate fit */
    const bl_prediction_setting *at;
    size_t n_at;
    int has_contamination_range;               /* needed when the predicted contamination is > 0 */
    double contamination_lo, contamination_hi; /* seconds */
} bl_prediction_request;

/* A predicted number with its delta-method SE and 95% interval; NAN where not available (no
 * covariance, a boundary never reached). A fixed parameter has se 0. */
typedef struct {
    double value, se, ci_low, ci_high;
} bl_predicted;

typedef struct {
    bl_wiener_params params; /* the predicted parameter set (drift toward the upper boundary) */
    bl_predicted param[BL_NPARAM];
    int link[BL_NPARAM]; /* BL_PREDICTION_LINK_*: identity, log, or fixed */
    int drift_sign;      /* -1 for a stimulus of the lower category (stimulus coding), else 1 */
    int has_covariance;  /* 0: intervals are NAN (no covariance in fits.json) */
    int group_summary;   /* 1: the model-level coefficients of a separate fit (no covariance) */
    bl_predicted p_upper, p_lower;
    bl_predicted mean_rt_upper, mean_rt_lower; /* seconds, nondecision included; NAN for P = 0 */
    bl_predicted mean_rt;                      /* over both responses: P(upper) mean_upper + P(lower) mean_lower */
    double quantile[2][BL_PREDICTION_NQ];      /* [lower, upper], seconds; NAN when P(boundary) ~ 0 */
} bl_prediction;

/* Predict. Errors: BL_ERR_USAGE for an unknown model (the message lists the models), an unknown
 * name in `at` (lists the names the model uses), a regressor or condition the model uses that `at`
 * lacks, a level the fit has no coefficient for (lists the levels), a participant not in the fit
 * (lists them) or a participant asked of a pooled fit, a missing contamination range;
 * BL_ERR_INPUT for a value that is not a finite number; BL_ERR_RANGE when the predicted parameters
 * are invalid. Names in `at` that other models use but this one does not add a warning. */
BL_API bl_status bl_prediction_compute(const bl_fitted_models *fm, const bl_prediction_request *req, bl_prediction *out,
                                       bl_warnings *warn, bl_error *err);

/* One parameter from its design row (k coefficients): value = sign h(row'coef), se and interval by
 * the delta method with covariance `cov` (k x k row-major; NULL: se and interval NAN). */
BL_API void bl_prediction_linear(int link /* BL_PREDICTION_LINK_* */, const double *coef, const double *cov, size_t k,
                                 const double *row, double sign, bl_predicted *out);
/* sqrt(j' cov j) for a gradient j of k values (cov k x k row-major); NAN when any term is not finite. */
BL_API double bl_prediction_delta_se(const double *j, const double *cov, size_t k);

#ifdef __cplusplus
}
#endif
#endif
