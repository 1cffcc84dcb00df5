/* Plain-text summaries of a run (summary.h): what a user reads first on the terminal. */
#include "analysis/summary.h"
#include "core/textbuf.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

static void fmt_num(char *out, size_t size, double x, const char *f)
{
    if (!isfinite(x)) snprintf(out, size, "NA");
    else snprintf(out, size, f, x);
}

static void lrt_text(const bl_comparison_row *r, char *out, size_t size)
{
    if (r->lrt_nested == 1 && !isfinite(r->lrt_p))
        snprintf(out, size, "vs %s: not tested (a fit did not converge)", r->lrt_against);
    else if (r->lrt_nested == 1)
        snprintf(out, size, "vs %s: chi2(%g) = %.2f, p = %.3g", r->lrt_against, r->lrt_df, r->lrt_statistic, r->lrt_p);
    else if (r->lrt_nested == 0) snprintf(out, size, "vs %s: not nested", r->lrt_against ? r->lrt_against : "?");
    else snprintf(out, size, "-");
}

/* Hierarchical: how much participants differ in each varying term. */
static void spread_table(bl_textbuf *b, const bl_model_result *mr)
{
    if (!mr->n_variance) return;
    bl_textbuf_printf(b, "  Participant spread (SD of participants' values, link scale):\n");
    for (size_t k = 0; k < mr->n_variance; k++) {
        const bl_variance_component *v = &mr->variance[k];
        char name[160], sd[32], lo[32], hi[32], p[32];
        snprintf(name, sizeof name, "%s: %s", v->parameter, v->term);
        fmt_num(sd, sizeof sd, v->sd, "%.4f");
        fmt_num(lo, sizeof lo, v->ci_low, "%.4f");
        fmt_num(hi, sizeof hi, v->ci_high, "%.4f");
        fmt_num(p, sizeof p, v->lrt_p, "%.3g");
        bl_textbuf_printf(b, "  %-40s %10s   [%s, %s]   spread = 0: p = %s\n", name, sd, lo, hi, p);
    }
}

/* Pooled fit: nondecision and variability parameters with their profile-likelihood intervals. */
static void profile_table(bl_textbuf *b, const bl_fit_result *fr)
{
    int any = 0;
    for (size_t j = 0; j < fr->n_coef; j++) {
        const bl_coefficient *c = &fr->coef[j];
        if (!c->profiled) continue;
        if (!any) bl_textbuf_printf(b, "  Profile-likelihood 95%% intervals:\n");
        any = 1;
        char name[256], est[32], lo[32], hi[32];
        snprintf(name, sizeof name, "%s%s%s%s%s", c->parameter, strcmp(c->term, "intercept") ? ": slope on " : "",
                 strcmp(c->term, "intercept") ? c->term : "", c->level[0] ? " " : "", c->level);
        fmt_num(est, sizeof est, c->estimate, "%.4f");
        fmt_num(lo, sizeof lo, c->profile_low, "%.4f");
        fmt_num(hi, sizeof hi, c->profile_high, "%.4f");
        bl_textbuf_printf(b, "  %-40s %10s   [%s, %s]\n", name, est, lo, hi);
    }
}

static void comparison_table(bl_textbuf *b, const bl_fit_set *set)
{
    bl_textbuf_printf(b, "Model comparison (%s; lowest AIC is best)\n",
                      set->mode == BL_PARTICIPANTS_SEPARATE       ? "per-participant fits"
                      : set->mode == BL_PARTICIPANTS_HIERARCHICAL ? "hierarchical fits, marginal likelihood"
                                                                  : "pooled fits");
    int w = 5;
    for (size_t m = 0; m < set->n_models; m++)
        if ((int)strlen(set->comparison[m].name) > w) w = (int)strlen(set->comparison[m].name);
    bl_textbuf_printf(b, "  %-*s %10s %7s %13s %12s %9s %12s %9s %7s %9s  %s\n", w, "model", "parameters", "trials",
                      "log_lik", "AIC", "dAIC", "BIC", "dBIC", "weight", "converged", "LRT vs extended model");
    for (size_t m = 0; m < set->n_models; m++) {
        const bl_comparison_row *r = &set->comparison[m];
        char ll[32], aic[32], daic[32], bic[32], dbic[32], wt[32], lrt[160];
        fmt_num(ll, sizeof ll, r->log_likelihood, "%.2f");
        fmt_num(aic, sizeof aic, r->aic, "%.2f");
        fmt_num(daic, sizeof daic, r->delta_aic, "%.2f");
        fmt_num(bic, sizeof bic, r->bic, "%.2f");
        fmt_num(dbic, sizeof dbic, r->delta_bic, "%.2f");
        fmt_num(wt, sizeof wt, r->aic_weight, "%.3f");
        lrt_text(r, lrt, sizeof lrt);
        bl_textbuf_printf(b, "  %-*s %10zu %7zu %13s %12s %9s %12s %9s %7s %9s  %s\n", w, r->name, r->parameters,
                          r->trials, ll, aic, daic, bic, dbic, wt, set->models[m].converged ? "yes" : "NO", lrt);
    }
}

/* Index of the model with the lowest finite criterion (AIC: 0, BIC: 1); n_models when none. */
static size_t best_by(const bl_fit_set *set, int use_bic)
{
    size_t best = set->n_models;
    for (size_t m = 0; m < set->n_models; m++) {
        double x = use_bic ? set->comparison[m].bic : set->comparison[m].aic;
        if (!isfinite(x)) continue;
        double y = best == set->n_models ? INFINITY : use_bic ? set->comparison[best].bic : set->comparison[best].aic;
        if (x < y) best = m;
    }
    return best;
}

static void slopes_of(bl_textbuf *b, const bl_model_result *mr)
{
    const bl_fit_result *fr = &mr->fit;
    size_t n_slopes = 0;
    for (size_t j = 0; j < fr->n_coef; j++) n_slopes += strcmp(fr->coef[j].term, "intercept") != 0;
    if (n_slopes == 0) {
        bl_textbuf_printf(b, "  (no slopes: band power does not enter this model)\n");
        if (mr->mode == BL_PARTICIPANTS_POOLED) profile_table(b, fr);
        return;
    }
    bl_textbuf_printf(b, "  %-40s %10s %23s %10s\n", "slope", "estimate", "95% CI", "p");
    for (size_t j = 0; j < fr->n_coef; j++) {
        const bl_coefficient *c = &fr->coef[j];
        if (strcmp(c->term, "intercept") == 0) continue;
        char name[256], est[32], lo[32], hi[32], p[32], ci[80];
        snprintf(name, sizeof name, "%s: slope on %s%s%s%s", c->parameter, c->term, c->level[0] ? " [" : "", c->level,
                 c->level[0] ? "]" : "");
        fmt_num(est, sizeof est, c->estimate, "%.4f");
        fmt_num(lo, sizeof lo, c->ci_low, "%.4f");
        fmt_num(hi, sizeof hi, c->ci_high, "%.4f");
        fmt_num(p, sizeof p, c->p, "%.3g");
        snprintf(ci, sizeof ci, "[%s, %s]", lo, hi);
        bl_textbuf_printf(b, "  %-40s %10s %23s %10s\n", name, est, ci, p);
    }
    if (mr->mode == BL_PARTICIPANTS_POOLED) profile_table(b, fr);
    if (mr->mode == BL_PARTICIPANTS_SEPARATE)
        bl_textbuf_printf(b,
                          "  (separate fits: group random-effects estimates; per-participant values in fits.json)\n");
    if (mr->mode == BL_PARTICIPANTS_HIERARCHICAL) {
        bl_textbuf_printf(b,
                          "  (population values: they speak for the population the %zu participants were drawn from;\n"
                          "   intervals of terms that vary use t with participants - 1 df)\n",
                          mr->n_participants);
        spread_table(b, mr);
    }
    for (size_t k = 0; k < mr->n_permutation; k++) {
        const bl_permutation_test *pt = &mr->permutation[k];
        if (k == 0)
            bl_textbuf_printf(b, "  Permutation tests (the regressor shuffled within participant x condition):\n");
        char stat[32];
        fmt_num(stat, sizeof stat, pt->statistic, "%.2f");
        bl_textbuf_printf(b, "  %s: slope on %s%s%s%s: 2 dLL = %s, p = %.4g (%zu of %zu refits reached it)\n",
                          pt->parameter, pt->regressor, pt->level && pt->level[0] ? " [" : "",
                          pt->level ? pt->level : "", pt->level && pt->level[0] ? "]" : "", stat, pt->p, pt->exceed,
                          pt->permutations);
    }
}

char *bl_summary_fits(const bl_fit_set *set)
{
    bl_textbuf b = {0};
    comparison_table(&b, set);
    size_t best = best_by(set, 0), best_bic = best_by(set, 1);
    if (best == set->n_models) {
        bl_textbuf_printf(&b, "\nNo model has a finite AIC: see the warnings and fits.json.\n");
        return bl_textbuf_take(&b);
    }
    const bl_model_result *mr = &set->models[best];
    bl_textbuf_printf(&b, "\nBest model by AIC: %s%s\n", mr->name,
                      mr->converged ? "" : " (NOT CONVERGED: see fits.json)");
    slopes_of(&b, mr);
    /* A close call is reported as one: the model BIC prefers, else the runner-up within 2 AIC units. */
    size_t rival = set->n_models;
    const char *why = NULL;
    if (best_bic != set->n_models && best_bic != best) {
        rival = best_bic;
        why = "BIC prefers it (AIC and BIC disagree)";
    } else {
        for (size_t m = 0; m < set->n_models; m++)
            if (m != best && isfinite(set->comparison[m].delta_aic) && set->comparison[m].delta_aic < 2 &&
                (rival == set->n_models || set->comparison[m].delta_aic < set->comparison[rival].delta_aic))
                rival = m;
        if (rival != set->n_models) why = "within 2 AIC units of the best: the data do not clearly separate them";
    }
    if (rival != set->n_models) {
        char d[32];
        fmt_num(d, sizeof d, set->comparison[rival].delta_aic, "%.2f");
        bl_textbuf_printf(&b, "\nCompeting model: %s (dAIC = %s; %s)\n", set->models[rival].name, d, why);
        slopes_of(&b, &set->models[rival]);
    }
    return bl_textbuf_take(&b);
}

char *bl_summary_timings(const double *sec, const char *const *names, int n, double total)
{
    bl_textbuf b = {0};
    bl_textbuf_printf(&b, "Wall time per step (total %.2f s)\n", total);
    for (int s = 0; s < n; s++)
        bl_textbuf_printf(&b, "  %-9s %8.2f s  %5.1f%%\n", names[s], sec[s], total > 0 ? 100.0 * sec[s] / total : 0.0);
    return bl_textbuf_take(&b);
}
