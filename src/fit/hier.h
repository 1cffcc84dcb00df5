/* Hierarchical fits (participants' effects integrated out): the setup from a model's `varies`, the
 * marginal log-likelihood, and the whole fit of one model with its inference. Private to src/fit. */
#ifndef BL_HIER_H
#define BL_HIER_H

#include "fit/fit.h"

typedef struct {
    bl_param param;
    char *label;  /* the `varies` entry ("intercept", "intercept:rich", "theta") */
    size_t *coef; /* coefficients of the model that this effect moves */
    size_t n;
} bl_hier_effect;

typedef struct bl_hier bl_hier;

/* The participants' effects of `spec` on the compiled (pooled) model m, one workspace per participant
 * with kept trials. Errors (BL_ERR_MODEL, naming model, parameter and term): a `varies` level the
 * model does not have, a coefficient moved by two effects, fewer than 2 participants, more than 3
 * effects with quadrature > 1, more than 12 effects. */
bl_status bl_hier_create(const bl_model_spec *spec, const bl_model *m, const bl_trials *trials, int quadrature,
                         int threads, bl_hier **out, bl_error *err);
void bl_hier_destroy(bl_hier *h);
size_t bl_hier_effects(const bl_hier *h);
/* 1 when an allocation failed inside an evaluation or maximisation (those return values, not statuses). */
int bl_hier_out_of_memory(const bl_hier *h);
size_t bl_hier_participants(const bl_hier *h);
/* Spread parameters: q (diagonal) or q(q+1)/2 (correlated, lower triangle of L by rows). */
size_t bl_hier_lambda_count(const bl_hier *h);
void bl_hier_lambda_to_l(const bl_hier *h, const double *lambda, double *L);
/* Summed marginal log-likelihood at psi = (coefficients, lambda). */
double bl_hier_marginal(bl_hier *h, const double *psi);

/* The Laplace value and its gradient (d values) at psi; NAN when the gradient is not available
 * (quadrature > 1, or a differenced point infeasible), -INFINITY when a participant has no mode. */
double bl_hier_marginal_gradient(bl_hier *h, const double *psi, double *grad);

/* Fit the model hierarchically from the pooled estimates `pooled` (with their covariance, may be NULL)
 * and fill r: fit (population coefficients, marginal log-likelihood, diagnostics), variance
 * components, correlation, participants (empirical Bayes). part_coef (J x n_coef, allocated here,
 * caller frees) receives each participant's coefficients for predictions; part_trials[j] the used
 * trials of participant j (pointers into h, valid while h lives). */
bl_status bl_hier_fit(bl_hier *h, const bl_fit_options *opt, const bl_fit_result *pooled, const double *pooled_coef,
                      bl_model_result *r, double **part_coef, bl_warnings *warn, bl_error *err);
/* Participant j's likelihood workspace (their trials only). */
bl_likelihood *bl_hier_participant_likelihood(const bl_hier *h, size_t j);
/* Effect r: its parameter and `varies` label. */
const char *bl_hier_effect_label(const bl_hier *h, size_t r, bl_param *param);
/* After bl_hier_fit: the maximum marginal log-likelihood refitted from the estimate, with the
 * coefficients flagged in coef_at_zero (n_coef flags, may be NULL) held at 0 (and the spread of an
 * effect that moves only those); the model's design may have changed since (permuted regressor).
 * Stops at a gradient of tol per pooled SE. -INFINITY when no feasible point is found. */
double bl_hier_refit(bl_hier *h, const unsigned char *coef_at_zero, double tol);
/* Permutation tests of every slope of a hierarchically fitted model (compare.c's design and seeds:
 * the regressor shuffled within participant x condition cells; each level's coefficient on its own
 * when the slope has several). m is the design h was built on; it is changed and restored. */
bl_status bl_hier_permutation_tests(bl_hier *h, bl_model *m, const bl_model_spec *spec, const bl_trials *trials,
                                    const bl_fit_options *opt, bl_model_result *r, bl_error *err);
/* Used trials (model indices) of participant j. */
const size_t *bl_hier_participant_trials(const bl_hier *h, size_t j, size_t *n);

#endif
