/* Model comparison: AIC = 2k - 2LL (Akaike 1974, IEEE Trans. Autom. Control 19:716-723),
 * BIC = k ln n - 2LL (Schwarz 1978, Ann. Stat. 6:461-464), differences to the best model, Akaike
 * weights exp(-dAIC/2) / sum (Burnham & Anderson 2002, Model Selection and Multimodel Inference,
 * section 2.9), and the likelihood-ratio test of a model against the model it extends when nested:
 * 2 (LL_big - LL_small) ~ chi^2 with the difference in free coefficients as degrees of freedom
 * (Wilks 1938, Ann. Math. Stat. 9:60-62), upper tail from gsl_cdf_chisq_Q.
 */
#include "bandlink/fit.h"

#include <gsl/gsl_cdf.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

static char *dup_str(const char *s)
{
    if (!s) return NULL;
    size_t n = strlen(s) + 1;
    char *c = malloc(n);
    if (c) memcpy(c, s, n);
    return c;
}

void bl_aic_weights(const double *aic, size_t n, double *weights)
{
    double best = INFINITY;
    for (size_t i = 0; i < n; i++)
        if (isfinite(aic[i]) && aic[i] < best) best = aic[i];
    double sum = 0;
    for (size_t i = 0; i < n; i++) {
        weights[i] = isfinite(aic[i]) ? exp(-0.5 * (aic[i] - best)) : 0;
        sum += weights[i];
    }
    for (size_t i = 0; i < n; i++) weights[i] = sum > 0 && isfinite(aic[i]) ? weights[i] / sum : NAN;
}

bl_status bl_compare_models(bl_fit_set *set, bl_error *err)
{
    size_t n = set->n_models;
    if (set->comparison) {
        for (size_t i = 0; i < n; i++) {
            free(set->comparison[i].name);
            free(set->comparison[i].lrt_against);
        }
        free(set->comparison);
    }
    set->comparison = calloc(n ? n : 1, sizeof *set->comparison);
    double *aic = malloc((n ? n : 1) * sizeof *aic), *w = malloc((n ? n : 1) * sizeof *w);
    if (!set->comparison || !aic || !w) {
        free(aic);
        free(w);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory comparing models");
    }
    double best_aic = INFINITY, best_bic = INFINITY;
    for (size_t i = 0; i < n; i++) {
        const bl_model_result *r = &set->models[i];
        aic[i] = r->aic;
        if (isfinite(r->aic) && r->aic < best_aic) best_aic = r->aic;
        if (isfinite(r->bic) && r->bic < best_bic) best_bic = r->bic;
    }
    bl_aic_weights(aic, n, w);
    bl_status st = BL_OK;
    for (size_t i = 0; i < n; i++) {
        const bl_model_result *r = &set->models[i];
        bl_comparison_row *c = &set->comparison[i];
        if (!(c->name = dup_str(r->name))) st = BL_ERR_NOMEM;
        c->parameters = r->parameters;
        c->trials = r->trials;
        c->log_likelihood = r->log_likelihood;
        c->aic = r->aic;
        c->bic = r->bic;
        c->delta_aic = r->aic - best_aic;
        c->delta_bic = r->bic - best_bic;
        c->aic_weight = w[i];
        c->lrt_statistic = c->lrt_df = c->lrt_p = NAN;
        c->lrt_nested = -1;
        if (r->extends) {
            if (!(c->lrt_against = dup_str(r->extends))) st = BL_ERR_NOMEM;
            const bl_model_result *b = NULL;
            for (size_t j = 0; j < n; j++)
                if (!strcmp(set->models[j].name, r->extends)) b = &set->models[j];
            if (b) {
                c->lrt_nested = r->nested == 1;
                if (r->nested == 1) {
                    c->lrt_df = (double)r->parameters - (double)b->parameters;
                    /* The statistic is reported as found; a negative value (the bigger model fitted worse:
                     * an optimiser failure) gets p = 1. */
                    c->lrt_statistic = 2.0 * (r->log_likelihood - b->log_likelihood);
                    c->lrt_p = gsl_cdf_chisq_Q(fmax(0.0, c->lrt_statistic), c->lrt_df);
                }
            }
        }
    }
    free(aic);
    free(w);
    if (st) return bl_error_set(err, st, "out of memory comparing models");
    return BL_OK;
}
