/* Private interface of the fit module: fit.c (one design fitted: optimiser, inference, units) is
 * called by compare.c (group summaries, permutation refits) and fit_study.c (a study's fits, in
 * order); fit_study.c calls compare.c. No file calls back up this chain. */
#ifndef BL_FIT_INTERNAL_H
#define BL_FIT_INTERNAL_H

#include "fit/fit.h"

/* The compiled designs fitted for one model: one unit when pooled, one per participant (with kept
 * trials) when separate; each with its likelihood workspace and its estimates. */
typedef struct {
    size_t n_units;
    bl_model **models;
    bl_likelihood **liks;
    double **coef;
} bl_unit_set;

void bl_unit_set_free(bl_unit_set *u);
/* unit_names (may be NULL) receives the participant label of each unit (separate mode; caller
 * frees the array, not the strings). */
bl_status bl_build_units(const bl_model_spec *spec, const bl_trials *trials, bl_participants_mode mode,
                         const bl_fit_options *opt, bl_unit_set *u, char ***unit_names, bl_warnings *warn,
                         bl_error *err);
/* Maximise from n_starts starts (the first `first` when feasible, else EZ values); infer = 0 skips
 * the observed information (permutation refits), 1 gives Wald inference, 2 adds profile-likelihood
 * intervals of nondecision and the variability parameters. coef_out (may be NULL) receives the estimates. */
bl_status bl_fit_core(const bl_model *m, bl_likelihood *lik, const bl_fit_options *opt, int n_starts,
                      const double *first, int infer, bl_fit_result *res, double *coef_out, bl_error *err);
int bl_fit_default_starts(const bl_fit_options *opt);
/* Warnings for one finished fit: information not positive definite, not converged, estimates at the
 * edge of their range, starts that disagree. participant may be NULL (pooled). */
void bl_fit_warn(const bl_model *m, const char *participant, const bl_fit_result *r, bl_warnings *warn);
/* A reproducible seed from the user's seed, a text and a number (FNV-1a). */
unsigned long bl_fit_mix_seed(unsigned long seed, const char *text, unsigned long extra);

/* compare.c: group summary of a separate-mode model; permutation tests of every slope of a model. */
bl_status bl_group_summary(bl_model_result *r, bl_error *err);
bl_status bl_permutation_tests(const bl_study *study, const bl_model_spec *spec, const bl_trials *trials,
                               const bl_fit_options *opt, bl_unit_set *full, bl_model_result *r, bl_error *err);

#endif
