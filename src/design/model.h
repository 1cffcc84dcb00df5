/* A model compiled against a trial set: the design of every Wiener parameter, the trial-wise
 * log-likelihood with its analytic gradient, and trial-wise predicted parameters.
 * docs/models.md describes the grammar.
 *
 * Design. Each free parameter p has a linear predictor per trial
 *     eta_i = b[intercept of the level combination of `per` that trial i falls in]
 *           + sum over slopes s of b[slope s at the level combination of its `by` columns] * x_s,i
 * and the parameter is eta_i (link identity, the default) or exp(eta_i) (link log). Level
 * combinations are the ones that occur among the trials used, in order of first appearance. Fixed parameters take their value on every trial.
 *
 * Valid range. A coefficient vector is feasible when every trial's predicted parameters are valid
 * (threshold > 0, start in (0,1), nondecision >= 0, drift_sd >= 0, ...) and give every trial a
 * positive density. Otherwise the log-likelihood is -INFINITY (never NaN), so a line search backs
 * off; nothing is clamped.
 *
 * Coefficients are numbered parameter by parameter (bl_param order), within a parameter the
 * intercepts first (level order), then each slope's coefficients (slope order, level order).
 */
#ifndef BL_MODEL_H
#define BL_MODEL_H

#include "bandlink/status.h"
#include "design/study.h"
#include "design/trials.h"
#include "bandlink/wiener.h"

#include <gsl/gsl_rng.h>
#include <stddef.h>

typedef struct bl_model bl_model;

typedef struct {
    bl_param param;
    int slope;         /* -1 for an intercept, else the index of the slope within the parameter */
    const char *term;  /* "intercept" or the regressor name */
    const char *level; /* "rich", "rich:easy" (values of the columns joined by ':'), "" when single */
} bl_coef_info;

/* Compile `spec` against `trials`. `use` (n flags, may be NULL) selects table rows to fit among the
 * kept ones (NULL: every kept trial). Errors (BL_ERR_MODEL, message naming the model, the parameter
 * and the level or name): unknown regressor or column, a regressor missing or not numeric on a used
 * trial, no trials, a rank-deficient or collinear design (singular value test by LAPACKE SVD). */
bl_status bl_model_build(const bl_model_spec *spec, const bl_trials *trials, const unsigned char *use, bl_model **out,
                         bl_error *err);
void bl_model_destroy(bl_model *m);
/* A deep copy (for permutation refits). BL_ERR_NOMEM (*out NULL) when memory ran out. */
bl_status bl_model_copy(const bl_model *m, bl_model **out, bl_error *err);

size_t bl_model_n_coef(const bl_model *m);
const bl_coef_info *bl_model_coef(const bl_model *m, size_t j);
size_t bl_model_n_trials(const bl_model *m);
/* Table row of used trial k. */
size_t bl_model_row(const bl_model *m, size_t k);
int bl_model_param_free(const bl_model *m, bl_param param); /* 1 when the parameter has coefficients */

/* Index of the intercept coefficient of `param` that used trial k falls in (param must be free). */
size_t bl_model_intercept_index(const bl_model *m, bl_param param, size_t k);
/* *nested = 1 when model a is nested in model b: same trials, and for every parameter a's design
 * spans a subspace of b's on the same link (a fixed value counts as a constant b can take); 0 when
 * not. BL_ERR_NOMEM when memory ran out (*nested 0). */
bl_status bl_model_nested_in(const bl_model *a, const bl_model *b, int *nested, bl_error *err);

/* Predicted parameters of used trial k (drift already multiplied by the trial's stimulus sign, i.e.
 * drift toward the upper boundary). Returns 1 when valid, 0 when out of range (values still set). */
int bl_model_predict(const bl_model *m, const double *coef, size_t k, bl_wiener_params *p);

/* Permutation support: shuffle the values of slope s of `param` among used trials within the cells
 * given by cell[k] (k = used trial), with a Fisher-Yates shuffle per cell driven by `rng`. level >= 0:
 * only the trials of that level of the slope are shuffled (among themselves, within each cell), the test
 * of that one coefficient; level < 0: every trial. */
bl_status bl_model_permute_slope(bl_model *m, bl_param param, size_t s, const size_t *cell, long level, gsl_rng *rng,
                                 bl_error *err);
/* Levels (coefficients) of slope s of `param`; 0 when there is no such slope. */
size_t bl_model_slope_levels(const bl_model *m, bl_param param, size_t s);
/* The model without one coefficient of slope s: the regressor is set to 0 on that level's trials, so the
 * coefficient no longer enters the likelihood (the null model of that coefficient's test). */
void bl_model_drop_slope_level(bl_model *m, bl_param param, size_t s, size_t level);
/* Restore all slope values to the unshuffled design. */
void bl_model_restore_slopes(bl_model *m);

/* Summed log-likelihood workspace. Trials are evaluated in fixed blocks of 64; partial sums are added
 * in block order, so the result is bit-identical for any thread count. threads <= 0: OpenMP default.
 * Fewer than 1,024 trials are evaluated on one thread. */
typedef struct bl_likelihood bl_likelihood;
/* BL_ERR_NOMEM (*out NULL) when memory ran out. The workspace keeps a pointer to `m`. */
bl_status bl_likelihood_create(const bl_model *m, int threads, bl_likelihood **out, bl_error *err);
/* A workspace over some used trials only (`trials`: n used-trial indices of m, copied), evaluated
 * on the calling thread: one participant's likelihood in a hierarchical fit. bl_likelihood_trials
 * then fills only those trials' entries. */
bl_status bl_likelihood_create_subset(const bl_model *m, const size_t *trials, size_t n, bl_likelihood **out,
                                      bl_error *err);
void bl_likelihood_destroy(bl_likelihood *w);
/* How one likelihood's trials are spread over threads (the one encoding of this choice, used by the
 * workspace and by bl_fit_options.parallel_trials). Results are the same bytes in every mode.
 * AUTO (the default, 0): measure both ways on a few evaluations and keep the faster, re-measuring
 *   every 64 evaluations (less often while one thread keeps winning): fork-join can lose on a busy
 *   machine; fewer than 1,024 trials stay on one thread.
 * SPLIT: always `threads` threads (even below 1,024 trials).
 * UNSPLIT: always one thread. */
typedef enum { BL_PARALLEL_AUTO = 0, BL_PARALLEL_SPLIT, BL_PARALLEL_UNSPLIT } bl_parallel_mode;
void bl_likelihood_set_parallel(bl_likelihood *w, bl_parallel_mode mode);
/* Total log-likelihood at `coef` (n_coef values); `grad` (may be NULL) receives d/dcoef. Returns
 * -INFINITY (gradient zeroed) when the point is infeasible. Counts evaluations. */
double bl_likelihood_eval(bl_likelihood *w, const double *coef, double *grad);
/* Per-trial log-likelihood (n_trials values) at `coef`; returns the total (or -INFINITY). */
double bl_likelihood_trials(bl_likelihood *w, const double *coef, double *trial_ll);
size_t bl_likelihood_evaluations(const bl_likelihood *w);

#endif
