/* Fitting a study's models by maximum likelihood, with inference and model comparison.
 * docs/models.md explains the methods.
 *
 *   bl_fit_options opt;  bl_fit_options_default(&opt);  opt.threads = 2;
 *   bl_fit_set *set;     bl_fit_study(study, trials, &opt, &set, &warnings, &err);
 *   ... set->models[m].coef[j].estimate, set->models[m].predicted[row], set->comparison[m] ...
 *   bl_fit_set_destroy(set);
 *
 * Memory: every pointer inside a bl_fit_set belongs to the set; bl_fit_set_destroy frees it all.
 * Numbers that could not be computed are NAN (written as null / NA).
 */
#ifndef BL_FIT_H
#define BL_FIT_H

#include "design/model.h"
#include "bandlink/status.h"
#include "design/study.h"
#include "design/trials.h"
#include "bandlink/wiener.h"

#include <stddef.h>

typedef struct {
    int threads;               /* OpenMP threads for the likelihood; <= 0: OpenMP default */
    unsigned long seed;        /* seeds the extra optimiser starts and the permutations */
    size_t permutations;       /* refits per slope with the regressor shuffled; 0 = no test */
    const char *const *models; /* fit only these model names (all when n_models == 0) */
    size_t n_models;
    int starts;                       /* optimiser starts per fit; <= 0: the study's fit.starts, else 3 */
    int simplex_only;                 /* 1: Nelder-Mead (nmsimplex2) alone instead of BFGS (for checks) */
    int profiles;                     /* 1 (default): profile-likelihood intervals of nondecision and the
                                         variability parameters in pooled and separate fits; 0: Wald only */
    bl_parallel_mode parallel_trials; /* a single fit's trials over threads (default AUTO: measured;
                                       see bl_likelihood_set_parallel) */
    /* Called between fits (may be NULL): stage text, steps done, steps in total. */
    void (*progress)(void *user, const char *stage, size_t done, size_t total);
    void *progress_user;
} bl_fit_options;

void bl_fit_options_default(bl_fit_options *o);

typedef struct {
    bl_param param;
    const char *parameter;  /* "threshold", ... (static) */
    char *term;             /* "intercept" or the regressor name */
    char *level;            /* "rich", "rich:easy", "" for a single coefficient */
    double estimate;        /* on the link scale (log link: log of the parameter) */
    double se, z, p;        /* Wald; NAN when the observed information is not positive definite */
    double ci_low, ci_high; /* 95% Wald interval, NAN as above */
    double df;              /* hierarchical: degrees of freedom of the t reference (participants - 1) for a
                               coefficient that varies by participant; NAN: normal reference */
    int profiled;           /* 1: profile_low/high were sought (nondecision and the variability parameters of
                               a converged pooled or separate fit) */
    double profile_low, profile_high; /* 95% profile-likelihood interval; an end not found is NAN; the lower
                                         end is 0 when a variability parameter's value 0 lies inside */
} bl_coefficient;

typedef struct {
    const char *method;      /* "newton", "newton+bfgs2", "newton+bfgs2+nmsimplex2" (fallbacks used),
                                "nmsimplex2" with simplex_only; hierarchical: "laplace+bfgs2" or
                                "gauss-hermite+bfgs2" */
    int converged;           /* gradient small in SE units and information positive definite */
    double gradient_norm;    /* max |d loglik / d coef| at the optimum */
    double newton_decrement; /* sqrt(g' H^-1 g): distance to the optimum in SE units; NAN if no H */
    size_t iterations;       /* optimiser iterations of the best start */
    size_t evaluations;      /* likelihood evaluations over all starts (and inference) */
    int starts;              /* starts run */
    int starts_agreed;       /* starts whose log-likelihood is within 0.01 of the best */
    int hessian_positive_definite;
    double condition_number; /* of the observed information (NAN when not computed) */
    double seconds;          /* wall time of the fit */
    int profile_restarts;    /* restarts from a profile-likelihood point above the optimiser's maximum */
} bl_fit_diagnostics;

/* One likelihood maximised: a model on all trials (pooled) or on one participant (separate). */
typedef struct {
    char *participant; /* NULL when pooled */
    double log_likelihood;
    size_t parameters; /* free coefficients */
    size_t trials;     /* trials in the likelihood */
    double aic, bic;   /* 2k - 2LL; k ln n - 2LL */
    int converged;
    bl_fit_diagnostics diag;
    size_t n_coef;
    bl_coefficient *coef;
    double *covariance; /* n_coef x n_coef, row-major; NULL when not positive definite */
} bl_fit_result;

/* Group summary of one coefficient across participants (separate mode). */
typedef struct {
    bl_param param;
    const char *parameter;
    char *term, *level;
    size_t n;                  /* participants that have this coefficient */
    double mean, sd;           /* of the per-participant estimates */
    double t, df, p_t;         /* one-sample t-test of mean = 0 (NAN when n < 2) */
    double re_estimate, re_se; /* DerSimonian-Laird random-effects estimate and its SE */
    double re_ci_low, re_ci_high, re_z, re_p;
    double tau2;      /* between-participant variance (DerSimonian-Laird) */
    double q;         /* Cochran's Q */
    size_t n_with_se; /* participants whose estimate has an SE (used by the RE model) */
} bl_group_coefficient;

/* Permutation test of one slope (all its levels at once). */
typedef struct {
    bl_param param;
    const char *parameter;
    char *regressor;
    char *level;         /* the slope's level ("rich"); "" when the test covers every level */
    double statistic;    /* 2 (LL_model - LL_model without this slope) */
    size_t permutations; /* refits done */
    size_t exceed;       /* refits whose log-likelihood reached the observed one */
    double p;            /* (1 + exceed) / (1 + permutations) */
} bl_permutation_test;

/* Hierarchical mode: the participant spread of one varying term (SD of the participants' offsets on
 * the parameter's link scale) with its profile-likelihood interval and its test against no spread. */
typedef struct {
    bl_param param;
    const char *parameter;
    char *term;             /* as named in `varies`: "intercept", "intercept:rich", "theta", ... */
    double sd;              /* maximum marginal-likelihood estimate (>= 0) */
    double ci_low, ci_high; /* 95% profile-likelihood interval (ci_low = 0 when SD = 0 is inside) */
    double lrt_statistic;   /* 2 (LL - LL with this SD = 0) */
    double lrt_p;           /* against the 50:50 mixture of chi-square(0) and chi-square(1) */
} bl_variance_component;

typedef struct {
    char *name;
    char *extends; /* NULL when the model extends none */
    int nested;    /* 1: nested in the model it extends (same trials, design inside
                                       its design); 0: not nested; -1: extends none or it was not fitted */
    bl_participants_mode mode;
    /* Totals (separate: sums over participants). */
    double log_likelihood;
    size_t parameters, trials;
    double aic, bic;
    int converged; /* every fit converged */
    /* Pooled: the one fit. Separate: coefficients of the group summary (random-effects estimate). */
    bl_fit_result fit;
    size_t n_participants; /* separate mode: per-participant fits */
    bl_fit_result *participants;
    size_t n_group;
    bl_group_coefficient *group;
    /* Hierarchical: participants[] hold the empirical-Bayes estimates (coefficients of each participant:
     * population value plus their conditional-mode offset, with conditional SEs; log_likelihood is
     * their trials' log-likelihood at those estimates); `fit` holds the population coefficients and the
     * marginal log-likelihood. */
    size_t n_variance;
    bl_variance_component *variance;
    double *correlation; /* n_variance x n_variance (correlated effects), else NULL */
    double *separate_estimate; /* n_participants x fit.n_coef: each participant's own (separate) fit of the
                                  model, for the shrinkage figure; NAN where a participant's fit lacks the
                                  coefficient or failed; NULL when no separate fit could be built */
    int quadrature;      /* nodes per dimension; 1 = Laplace */
    size_t n_permutation;
    bl_permutation_test *permutation;
    /* Trial-wise predictions, indexed by table row (n_rows = trials->n); used[row] = 0 for rows not
     * in the likelihood (excluded trials), whose values are NAN. drift is toward the upper boundary
     * (stimulus sign applied). mean_rt is the predicted mean RT over both responses [s]. */
    size_t n_rows;
    unsigned char *used;
    bl_wiener_params *predicted;
    double *p_upper, *mean_rt, *trial_log_likelihood;
} bl_model_result;

typedef struct {
    char *name;
    size_t parameters, trials;
    double log_likelihood, aic, bic, delta_aic, delta_bic, aic_weight;
    char *lrt_against;                   /* the model it extends, NULL when none (or not fitted) */
    int lrt_nested;                      /* 1 nested, 0 not nested, -1 no model to test against */
    double lrt_statistic, lrt_df, lrt_p; /* NAN unless nested */
} bl_comparison_row;

typedef struct {
    bl_participants_mode mode;
    size_t n_models;
    bl_model_result *models;
    bl_comparison_row *comparison; /* n_models rows, same order */
    size_t permutations;
    unsigned long seed;
    int threads;
} bl_fit_set;

/* Fit every model of the study (or those named in options) to the kept trials. Regressors are the
 * numeric columns of trials->table (band power columns included once computed). Errors: a model
 * that cannot be built (BL_ERR_MODEL, naming model, parameter, level), an unknown model name in
 * options (BL_ERR_USAGE). Non-convergence is not an error: it is reported in the diagnostics and
 * as a warning. */
bl_status bl_fit_study(const bl_study *study, const bl_trials *trials, const bl_fit_options *opt, bl_fit_set **out,
                       bl_warnings *warn, bl_error *err);
void bl_fit_set_destroy(bl_fit_set *set);

/* Lower-level: fit one compiled model (maximum likelihood + inference). `start` (may be NULL)
 * gives a starting coefficient vector tried first. Fills `res` (free with bl_fit_result_clear). */
bl_status bl_fit_model(const bl_model *m, const bl_fit_options *opt, const double *start, bl_fit_result *res,
                       bl_warnings *warn, bl_error *err);
void bl_fit_result_clear(bl_fit_result *res);

/* EZ-diffusion (Wagenmakers, van der Maas & Grasman 2007) with noise s = 1: from the proportion
 * correct pc, the variance vrt [s^2] and mean mrt [s] of correct RTs, give drift, threshold and
 * nondecision. BL_ERR_NUMERIC when the moments admit no solution (pc of 0, 0.5 or 1, vrt <= 0). */
bl_status bl_ez_diffusion(double pc, double vrt, double mrt, double *drift, double *threshold, double *nondecision,
                          bl_error *err);

/* Covariance from an observed information matrix (k x k, row-major, symmetric) by Cholesky
 * (LAPACKE dpotrf/dpotri). *positive_definite = 1 and cov filled when info is positive definite, 0
 * when it is not (cov undefined then). cond receives the ratio of its largest to smallest eigenvalue
 * (INFINITY when not positive, NAN when the eigenvalues fail). BL_ERR_NOMEM when memory ran out. */
bl_status bl_information_inverse(const double *info, size_t k, double *cov, double *cond, int *positive_definite,
                                 bl_error *err);

/* Comparison (src/compare.c): fill set->comparison from set->models. */
bl_status bl_compare_models(bl_fit_set *set, bl_error *err);
/* Akaike weights of n AIC values (NAN-aware). */
void bl_aic_weights(const double *aic, size_t n, double *weights);

#endif
