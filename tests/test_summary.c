/* The printed summary of a fit set (src/analysis/summary.c): which model it calls best, when it reports a
 * close competitor, and what it prints for each slope. Built on hand-made comparison rows whose AIC/BIC
 * follow their definitions (Akaike 1974: AIC = 2k - 2LL; Schwarz 1978: BIC = k ln n - 2LL), so the
 * expected choice is known without fitting. */
#include "analysis/summary.h"
#include "harness.h"

#include <math.h>
#include <string.h>

static bl_coefficient slope(const char *parameter, const char *term, const char *level, double est)
{
    bl_coefficient c = {0};
    c.parameter = parameter;
    c.term = (char *)term;
    c.level = (char *)level;
    c.estimate = est;
    c.se = 0.1;
    c.ci_low = est - 0.196;
    c.ci_high = est + 0.196;
    c.p = 0.01;
    return c;
}

/* Two models on n trials with log-likelihoods ll[] and k[] parameters; AIC/BIC from their definitions. */
static void fill(bl_fit_set *set, bl_model_result *m, bl_comparison_row *r, const double *ll, const size_t *k, size_t n,
                 bl_coefficient *coefs)
{
    static char *names[2] = {"small", "large"};
    memset(set, 0, sizeof *set);
    set->n_models = 2;
    set->models = m;
    set->comparison = r;
    double min_aic = INFINITY, min_bic = INFINITY;
    for (int i = 0; i < 2; i++) {
        memset(&m[i], 0, sizeof m[i]);
        memset(&r[i], 0, sizeof r[i]);
        m[i].name = names[i];
        m[i].converged = 1;
        m[i].fit.n_coef = 1;
        m[i].fit.coef = &coefs[i];
        r[i].name = names[i];
        r[i].parameters = k[i];
        r[i].trials = n;
        r[i].log_likelihood = ll[i];
        r[i].aic = 2.0 * (double)k[i] - 2 * ll[i];
        r[i].bic = (double)k[i] * log((double)n) - 2 * ll[i];
        r[i].lrt_nested = -1;
        if (r[i].aic < min_aic) min_aic = r[i].aic;
        if (r[i].bic < min_bic) min_bic = r[i].bic;
    }
    for (int i = 0; i < 2; i++) {
        r[i].delta_aic = r[i].aic - min_aic;
        r[i].delta_bic = r[i].bic - min_bic;
    }
}

static bl_fit_set set;
static bl_model_result m[2];
static bl_comparison_row r[2];
static bl_coefficient c[2];

static void coefficients(void)
{
    c[0] = slope("threshold", "theta", "rich", 0.25);
    c[1] = slope("drift", "beta", "", -0.2);
}

HARNESS_CASE(aic_and_bic_disagree)
{
    coefficients();

    /* AIC and BIC disagree: one extra parameter gaining 1.5 log-likelihood units on 1000 trials lowers AIC by
     * 1 but raises BIC by ln(1000) - 3 = 3.9. */
    double ll1[2] = {-500, -498.5};
    size_t k1[2] = {5, 6};
    fill(&set, m, r, ll1, k1, 1000, c);
    char *s = bl_summary_fits(&set);
    check_true(s && strstr(s, "Best model by AIC: large"), "the lower AIC (large) is named best");
    check_true(s && strstr(s, "Competing model: small") && strstr(s, "BIC prefers it"),
               "AIC and BIC disagree: the model BIC prefers is shown as the competitor");
    check_true(s && strstr(s, "threshold: slope on theta [rich]") && strstr(s, "drift: slope on beta"),
               "the slopes of both the best and the competing model are printed");
    free(s);
}

HARNESS_CASE(clear_winner)
{
    coefficients();
    size_t k1[2] = {5, 6};
    /* A clear winner by both criteria (ΔAIC = 2*20 - 2 = 38): no competitor. */
    double ll2[2] = {-500, -480};
    fill(&set, m, r, ll2, k1, 1000, c);
    char *s = bl_summary_fits(&set);
    check_true(s && strstr(s, "Best model by AIC: large") && !strstr(s, "Competing model"),
               "a clear winner by AIC and BIC: no competing model");
    free(s);
}

HARNESS_CASE(close_call)
{
    coefficients();
    /* Same size, ΔAIC = 1 < 2 and BIC agrees: the runner-up is reported as within 2 AIC units (Burnham &
     * Anderson 2002: models within 2 AIC units have substantial support; common practice). */
    double ll3[2] = {-500, -499.5};
    size_t k3[2] = {6, 6};
    fill(&set, m, r, ll3, k3, 1000, c);
    char *s = bl_summary_fits(&set);
    check_true(s && strstr(s, "Competing model: small") && strstr(s, "within 2 AIC units"),
               "dAIC < 2 with BIC agreeing: the runner-up is shown as a close call");
    free(s);
}

HARNESS_CASE(no_finite_aic)
{
    coefficients();
    double ll[2] = {-500, -499.5};
    size_t k[2] = {6, 6};
    fill(&set, m, r, ll, k, 1000, c);
    /* No finite AIC (both fits failed): said plainly, no best model. */
    r[0].aic = r[1].aic = NAN;
    r[0].bic = r[1].bic = NAN;
    char *s = bl_summary_fits(&set);
    check_true(s && strstr(s, "No model has a finite AIC") && !strstr(s, "Best model"),
               "no finite AIC: no best model is named");
    free(s);
}

int main(int argc, char **argv)
{
    static const harness_case cases[] = {
        HARNESS_ENTRY(aic_and_bic_disagree),
        HARNESS_ENTRY(clear_winner),
        HARNESS_ENTRY(close_call),
        HARNESS_ENTRY(no_finite_aic),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
