/* Permutation tests of hierarchically fitted models: for each slope (and each level's coefficient of a
 * slope with several), the observed statistic 2 (log L - log L without it) and refits of the whole
 * model with the regressor shuffled among the trials of each participant x condition cell (the
 * exchangeable units under no effect; docs/models.md section 7). Same seeds as the pooled tests in
 * compare.c. Refits start from the estimate; one design is shared by all participants' likelihoods,
 * so permutations run one after another (each refit uses the threads over participants). */
#include "fit/hier.h"
#include "fit/fit_internal.h"
#include "design/model_internal.h"

#include "core/strutil.h"

#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* Refit tolerance (gradient per pooled SE): the log-likelihood is then within ~1e-5 of the maximum. */
#define HIER_PERM_TOL 3e-3

static size_t slope_level_count(const bl_model *m, bl_param p, size_t s) { return bl_model_slope_levels(m, p, s); }

/* Flags of the coefficients a test removes: one level, or every level (level < 0). */
static void removed_coefficients(const bl_model *m, bl_param p, size_t s, long level, unsigned char *flags)
{
    memset(flags, 0, m->n_coef);
    size_t first = m->par[p].slopes[s].first_coef, n = slope_level_count(m, p, s);
    for (size_t l = 0; l < n; l++)
        if (level < 0 || (size_t)level == l) flags[first + l] = 1;
}

static bl_status one_test(bl_hier *h, bl_model *m, const size_t *cells, const bl_fit_options *opt, bl_model_result *r,
                          bl_param p, size_t s, long level, unsigned char *flags, bl_permutation_test *pt,
                          bl_error *err)
{
    size_t n_levels = slope_level_count(m, p, s);
    bl_slope_design *sl = &m->par[p].slopes[s];
    double *keep = malloc((m->n ? m->n : 1) * sizeof *keep);
    if (!keep) return bl_error_set(err, BL_ERR_NOMEM, "out of memory in the permutation test");
    memcpy(keep, sl->x_orig, m->n * sizeof *keep);
    removed_coefficients(m, p, s, level, flags);
    for (size_t l = 0; l < n_levels; l++) /* the null model: those coefficients no longer enter */
        if (flags[sl->first_coef + l]) bl_model_drop_slope_level(m, p, s, l);
    double ll_null = bl_hier_refit(h, flags, HIER_PERM_TOL);
    memcpy(sl->x_orig, keep, m->n * sizeof *keep); /* dropping is permanent in the design: undo it */
    free(keep);
    bl_model_restore_slopes(m);
    pt->statistic = 2 * (r->log_likelihood - ll_null);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    if (!rng) return bl_error_set(err, BL_ERR_NOMEM, "out of memory in the permutation test");
    size_t exceed = 0;
    bl_status st = BL_OK;
    for (size_t b = 0; b < opt->permutations && !st; b++) {
        gsl_rng_set(rng, bl_fit_mix_seed(opt->seed, r->name,
                                         (unsigned long)p * 1000003UL + (unsigned long)s * 7919UL +
                                             (unsigned long)b * 2654435761UL +
                                             (level >= 0 ? (unsigned long)(level + 1) * 104729UL : 0)));
        st = bl_model_permute_slope(m, p, s, cells, level, rng, err);
        double ll_perm = st ? -INFINITY : bl_hier_refit(h, NULL, HIER_PERM_TOL);
        bl_model_restore_slopes(m);
        /* Ties count as reaching the observed value (a tolerance for optimiser noise). */
        if (ll_perm >= r->log_likelihood - 1e-6) exceed++;
        if (opt->progress) {
            char stage[256];
            snprintf(stage, sizeof stage, "%s: permutations of the %s slope on '%s'%s", r->name, bl_param_name(p),
                     m->par[p].slopes[s].regressor, level >= 0 ? " (one level)" : "");
            opt->progress(opt->progress_user, stage, b + 1, opt->permutations);
        }
    }
    gsl_rng_free(rng);
    if (!st && bl_hier_out_of_memory(h)) st = bl_error_set(err, BL_ERR_NOMEM, "out of memory in the permutation test");
    pt->permutations = opt->permutations;
    pt->exceed = exceed;
    pt->p = (1.0 + (double)exceed) / (1.0 + (double)opt->permutations);
    return st;
}

bl_status bl_hier_permutation_tests(bl_hier *h, bl_model *m, const bl_model_spec *spec, const bl_trials *trials,
                                    const bl_fit_options *opt, bl_model_result *r, bl_error *err)
{
    size_t n_tests = 0;
    for (int p = 0; p < BL_NPARAM; p++)
        if (bl_model_param_free(m, (bl_param)p))
            for (size_t s = 0; s < spec->param[p].n_slopes; s++) {
                size_t L = slope_level_count(m, (bl_param)p, s);
                n_tests += 1 + (L > 1 ? L : 0);
            }
    if (n_tests == 0 || opt->permutations == 0) return BL_OK;
    r->permutation = calloc(n_tests, sizeof *r->permutation);
    unsigned char *flags = malloc(m->n_coef ? m->n_coef : 1);
    size_t *cells = NULL, n_cells;
    bl_status st = !r->permutation || !flags ? bl_error_set(err, BL_ERR_NOMEM, "out of memory") : BL_OK;
    if (!st) st = bl_model_condition_cells(m, trials, &cells, &n_cells, err);
    size_t t = 0;
    for (int pi = 0; pi < BL_NPARAM && !st; pi++) {
        bl_param p = (bl_param)pi;
        if (!bl_model_param_free(m, p)) continue;
        for (size_t s = 0; s < spec->param[p].n_slopes && !st; s++) {
            size_t L = slope_level_count(m, p, s);
            for (long level = -1; level < (long)(L > 1 ? L : 0) && !st; level++, t++) {
                bl_permutation_test *pt = &r->permutation[t];
                r->n_permutation = t + 1;
                pt->param = p;
                pt->parameter = bl_param_name(p);
                const char *lv = level < 0 ? "" : m->coef[m->par[p].slopes[s].first_coef + (size_t)level].level;
                if (!(pt->regressor = bl_strdup(spec->param[p].slopes[s].regressor)) || !(pt->level = bl_strdup(lv))) {
                    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
                    break;
                }
                st = one_test(h, m, cells, opt, r, p, s, level, flags, pt, err);
            }
        }
    }
    free(cells);
    free(flags);
    return st;
}
