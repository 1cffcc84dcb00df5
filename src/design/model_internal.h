/* Private layout of a compiled model, shared by model.c, likelihood.c and fit.c. */
#ifndef BL_MODEL_INTERNAL_H
#define BL_MODEL_INTERNAL_H

#include "design/model.h"

typedef struct {
    char *regressor;
    size_t n_by;
    char **by;
    size_t n_levels, first_coef;
    size_t *level;  /* per used trial: level index */
    double *x;      /* per used trial: regressor value as fitted (maybe shuffled) */
    double *x_orig; /* per used trial: the observed value */
    double rms;     /* root mean square of x over used trials (optimiser scaling) */
} bl_slope_design;

typedef struct {
    int is_free;
    int link; /* BL_LINK_IDENTITY or BL_LINK_LOG */
    double fixed;
    size_t n_per;
    char **per;
    size_t n_levels, first_coef;
    size_t *level; /* per used trial: intercept level index */
    size_t n_slopes;
    bl_slope_design *slopes;
} bl_param_design;

struct bl_model {
    char *name;
    size_t n;    /* used trials */
    size_t *row; /* table row of each used trial */
    double *rt;
    int *upper, *sign;
    size_t *participant;
    double rt_lo, rt_hi; /* observed RT range (contaminant distribution) */
    bl_param_design par[BL_NPARAM];
    size_t n_coef;
    bl_coef_info *coef;
    char **level_text; /* owned level strings of the coefficients */
};

/* Validity of one parameter set, cheaply (no message). */
int bl_model_params_valid(const bl_wiener_params *p);

/* Permutation cells of the used trials: participant x every column named in any `per` or `by` of
 * the model. cell[k] in [0, *n_cells). Caller frees *cell. */
bl_status bl_model_condition_cells(const bl_model *m, const bl_trials *trials, size_t **cell, size_t *n_cells,
                                   bl_error *err);

#endif
