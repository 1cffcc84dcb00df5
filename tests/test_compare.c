/* Model comparison and result files:
 *  - AIC = 2k - 2LL (Akaike 1974), BIC = k ln n - 2LL (Schwarz 1978), Akaike weights
 *    exp(-dAIC/2) / sum (Burnham & Anderson 2002, section 2.9);
 *  - likelihood-ratio test against the extended model: 2 dLL ~ chi^2(dk) (Wilks 1938), p from
 *    gsl_cdf_chisq_Q; "not nested" when the designs are not nested;
 *  - permutation test: p = (1 + exceed) / (1 + B) (Phipson & Smyth 2010, Stat. Appl. Genet. Mol.
 *    Biol. 9:39), reproducible for a seed and independent of the thread count;
 *  - fits.json keys, comparison.csv and trials.csv columns as in docs/outputs.md; numbers read back
 *    exactly (%.17g); existing files kept unless forced. */
#include "fit/fit.h"
#include "report/results.h"
#include "fit_testutil.h"
#include "harness.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <math.h>
#include <unistd.h>

static char *slurp(const char *path)
{
    FILE *f = fopen(path, "rb");
    if (!f) return NULL;
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    char *b = malloc((size_t)n + 1);
    if (fread(b, 1, (size_t)n, f) != (size_t)n) n = 0;
    b[n] = 0;
    fclose(f);
    return b;
}

HARNESS_CASE(akaike_weights_hand_example)
{
    /* Akaike weights of a hand example: w_i = exp(-dAIC_i/2) / sum_j exp(-dAIC_j/2) (Burnham & Anderson 2002,
     * "Model Selection and Multimodel Inference", section 2.9; cited from memory). */
    const double aic[3] = {100, 102, 110};
    double w[3];
    bl_aic_weights(aic, 3, w);
    double z = 1 + exp(-1) + exp(-5);
    check_rel(w[0], 1 / z, 1e-15, "Akaike weight of the best model");
    check_rel(w[1], exp(-1) / z, 1e-15, "Akaike weight dAIC = 2");
    check_rel(w[2], exp(-5) / z, 1e-15, "Akaike weight dAIC = 10");
}

/* Three models (baseline, theta-threshold with the true slope, drift-by-participant) fitted once to simulated
 * trials with 19 permutations, seed 5, 2 threads; freed at exit. */
static bl_trials *t;
static bl_model_spec models[3];
static bl_slope_spec ts = {"theta", col_context, 1};
static bl_fit_set *set;

static void fixture_free(void)
{
    bl_fit_set_destroy(set);
    bl_trials_destroy(t);
}

static bl_study fixture_study(bl_model_spec *study_models, size_t n)
{
    bl_study study;
    memset(&study, 0, sizeof study);
    study.fit.participants = BL_PARTICIPANTS_POOLED;
    study.fit.starts = 2;
    study.models = study_models;
    study.n_models = n;
    return study;
}

static void fixture_options(bl_fit_options *opt)
{
    bl_fit_options_default(opt);
    opt->permutations = 19;
    opt->seed = 5;
    opt->threads = 2;
}

static int fixture(void)
{
    static int tried;
    if (tried) return set != NULL;
    tried = 1;
    bl_error err = {0};
    bl_warnings warn = {0};
    sim_truth tr = {.n = 2000,
                    .n_participants = 2,
                    .a = {1.5, 1.1},
                    .a_slope = {0.25, 0.0},
                    .v = {2.0, 1.2, 0.6},
                    .v_slope = 0,
                    .t0 = 0.3};
    t = sim_trials(&tr, 1234);
    atexit(fixture_free);

    spec_default(&models[0], "baseline");
    models[0].param[BL_THRESHOLD].per = col_context;
    models[0].param[BL_THRESHOLD].n_per = 1;
    models[0].param[BL_DRIFT].per = col_difficulty;
    models[0].param[BL_DRIFT].n_per = 1;
    models[1] = models[0];
    models[1].name = "theta-threshold";
    models[1].extends = "baseline";
    models[1].param[BL_THRESHOLD].slopes = &ts;
    models[1].param[BL_THRESHOLD].n_slopes = 1;
    models[2] = models[0];
    models[2].name = "drift-by-participant";
    models[2].extends = "baseline";
    models[2].param[BL_DRIFT].per = col_participant;

    bl_study study = fixture_study(models, 3);
    bl_fit_options opt;
    fixture_options(&opt);
    int ok = check_true(bl_fit_study(&study, t, &opt, &set, &warn, &err) == BL_OK, "study fit (%s)", err.message) &&
             check_true(set->n_models == 3, "3 models");
    bl_warnings_clear(&warn);
    return ok;
}

HARNESS_CASE(information_criteria)
{
    if (!fixture()) return;
    const bl_comparison_row *c = set->comparison;
    double best_aic = fmin(fmin(c[0].aic, c[1].aic), c[2].aic);
    double best_bic = fmin(fmin(c[0].bic, c[1].bic), c[2].bic);
    double wsum = 0;
    /* The definitions: AIC = 2k - 2 ln L (Akaike 1974, IEEE Trans. Autom. Control 19:716-723);
     * BIC = k ln n - 2 ln L (Schwarz 1978, Ann. Stat. 6:461-464), n = trials; differences to the smallest value. */
    for (int i = 0; i < 3; i++) {
        check_rel(c[i].aic, 2.0 * (double)c[i].parameters - 2 * c[i].log_likelihood, 1e-14, "%s: AIC = 2k - 2LL",
                  c[i].name);
        check_rel(c[i].bic, (double)c[i].parameters * log(2000.0) - 2 * c[i].log_likelihood, 1e-14,
                  "%s: BIC = k ln n - 2LL", c[i].name);
        check_abs(c[i].delta_aic, c[i].aic - best_aic, 1e-9, "%s: delta AIC", c[i].name);
        check_abs(c[i].delta_bic, c[i].bic - best_bic, 1e-9, "%s: delta BIC", c[i].name);
        check_rel(c[i].aic_weight / c[0].aic_weight, exp(-0.5 * (c[i].aic - c[0].aic)), 1e-12,
                  "%s: weight ratio exp(-dAIC/2)", c[i].name);
        wsum += c[i].aic_weight;
    }
    check_rel(wsum, 1, 1e-14, "weights sum to 1");
    check_true(c[0].parameters == 6 && c[1].parameters == 8 && c[2].parameters == 5, "coefficient counts 6, 8, 5");
    check_true(c[1].delta_aic == 0, "the model with the true slope has the best AIC");
}

/* LRT theta-threshold vs baseline. */
HARNESS_CASE(likelihood_ratio_tests)
{
    if (!fixture()) return;
    const bl_comparison_row *c = set->comparison;
    check_true(c[0].lrt_nested == -1 && c[0].lrt_against == NULL && isnan(c[0].lrt_p), "baseline extends nothing");
    check_true(c[1].lrt_nested == 1 && !strcmp(c[1].lrt_against, "baseline"), "theta-threshold is nested");
    check_rel(c[1].lrt_statistic, 2 * (c[1].log_likelihood - c[0].log_likelihood), 1e-14, "LR statistic = 2 dLL");
    check_true(c[1].lrt_df == 2, "LRT df = 2");
    check_rel(c[1].lrt_p, gsl_cdf_chisq_Q(c[1].lrt_statistic, 2), 1e-14, "LRT p = chi^2(2) upper tail");
    check_true(c[1].lrt_p < 1e-6, "the true slope is detected (p %.3g)", c[1].lrt_p);
    check_true(c[2].lrt_nested == 0 && isnan(c[2].lrt_statistic) && isnan(c[2].lrt_p),
               "drift per participant instead of difficulty: not nested");
}

HARNESS_CASE(permutation_test)
{
    if (!fixture()) return;
    const bl_comparison_row *c = set->comparison;
    /* Permutation test of the theta slope: its statistic is the LRT against the model without it
     * (= baseline), and no shuffled regressor reaches the observed fit. */
    const bl_model_result *r1 = &set->models[1];
    check_true(r1->n_permutation == 3 && !strcmp(r1->permutation[0].regressor, "theta") &&
                   !strcmp(r1->permutation[0].level, ""),
               "the slope tested as a whole, then each of its 2 levels (%zu tests)", r1->n_permutation);
    check_abs(r1->permutation[0].statistic, c[1].lrt_statistic, 1e-6, "permutation statistic = LR vs baseline");
    check_true(r1->permutation[0].permutations == 19 && r1->permutation[0].exceed == 0, "no permutation reached it");
    check_rel(r1->permutation[0].p, 1.0 / 20.0, 1e-15, "permutation p = 1/(B+1)");
    check_true(set->models[0].n_permutation == 0, "no slopes, no permutation test");
    /* Each level's coefficient: its LR statistic (the model refitted without that one coefficient) agrees
     * with its Wald z^2, the two being asymptotically equivalent (Wald 1943; Engle 1984, Handbook of
     * Econometrics II, ch. 13); the tolerance 0.15 z^2 + 0.5 is common practice for n = 2000, not a bound.
     * The coefficients sit on disjoint trials, so the whole-slope statistic is close to the sum of the two. */
    double sum = 0;
    for (size_t k = 1; k < r1->n_permutation && k < 3; k++) {
        const bl_permutation_test *pt = &r1->permutation[k];
        const bl_coefficient *cf = NULL;
        for (size_t j = 0; j < r1->fit.n_coef; j++)
            if (!strcmp(r1->fit.coef[j].term, "theta") && !strcmp(r1->fit.coef[j].level, pt->level))
                cf = &r1->fit.coef[j];
        if (!check_true(cf != NULL, "level '%s' is a coefficient of the fit", pt->level)) continue;
        double z2 = (cf->estimate / cf->se) * (cf->estimate / cf->se);
        check_abs(pt->statistic, z2, 0.15 * z2 + 0.5, "level '%s': LR statistic %.3f vs Wald z^2 %.3f", pt->level,
                  pt->statistic, z2);
        check_rel(pt->p, (1.0 + (double)pt->exceed) / 20.0, 1e-15, "level '%s': p = (1 + exceed)/(1 + B)", pt->level);
        if (fabs(cf->estimate / cf->se) > 5)
            check_true(pt->exceed == 0, "level '%s' (the true slope 0.25): no permutation reached it", pt->level);
        sum += pt->statistic;
    }
    check_abs(r1->permutation[0].statistic, sum, 0.02 * sum + 0.2,
              "whole-slope statistic %.3f ~ the sum of the per-level statistics %.3f", r1->permutation[0].statistic,
              sum);
}

HARNESS_CASE(null_slope_permutation)
{
    if (!fixture()) return;
    bl_error err = {0};
    bl_warnings warn = {0};
    bl_fit_options opt;
    fixture_options(&opt);
    /* Null slope: beta has no effect on threshold; reproducible for a seed, same for 1 thread. */
    bl_model_spec nullm = models[0];
    nullm.name = "beta-threshold";
    nullm.extends = "baseline";
    bl_slope_spec bs = {"beta", NULL, 0};
    nullm.param[BL_THRESHOLD].slopes = &bs;
    nullm.param[BL_THRESHOLD].n_slopes = 1;
    bl_model_spec two[2] = {models[0], nullm};
    bl_study study = fixture_study(two, 2);
    bl_fit_set *s1 = NULL, *s2 = NULL;
    bl_fit_study(&study, t, &opt, &s1, &warn, &err);
    opt.threads = 1;
    bl_fit_study(&study, t, &opt, &s2, &warn, &err);
    const bl_permutation_test *p1 = &s1->models[1].permutation[0], *p2 = &s2->models[1].permutation[0];
    check_true(p1->exceed == p2->exceed && p1->p == p2->p, "same seed, 1 vs 2 threads: same permutation result");
    check_true(p1->p > 1.0 / 20.0, "null slope: some permutations reach the observed fit (p %.3f)", p1->p);
    check_rel(p1->p, (1.0 + (double)p1->exceed) / 20.0, 1e-15, "p = (1 + exceed)/(1 + B)");
    bl_fit_set_destroy(s1);
    bl_fit_set_destroy(s2);
    bl_warnings_clear(&warn);
}

HARNESS_CASE(result_files)
{
    if (!fixture()) return;
    bl_error err = {0};
    bl_warnings warn = {0};
    /* --- result files --- */
    char dir[] = "/tmp/bl_test_compare_XXXXXX";
    check_true(mkdtemp(dir) != NULL, "temporary folder");
    cJSON *prov = cJSON_CreateObject();
    cJSON_AddStringToObject(prov, "command", "test");
    {
        /* The three writers one by one (the results folder's overwrite policy is tested in
         * tests/cli/output_safety.sh). */
        char pf[600], pc[600], pt[600];
        snprintf(pf, sizeof pf, "%s/fits.json", dir);
        snprintf(pc, sizeof pc, "%s/comparison.csv", dir);
        snprintf(pt, sizeof pt, "%s/trials.csv", dir);
        check_true(bl_results_write_fits(pf, set, prov, &warn, &err) == BL_OK &&
                       bl_results_write_comparison(pc, set, &err) == BL_OK &&
                       bl_results_write_trials(pt, set, NULL, t, &err) == BL_OK,
                   "write results (%s)", err.message);
    }

    char path[512];
    snprintf(path, sizeof path, "%s/fits.json", dir);
    char *json = slurp(path);
    cJSON *root = json ? cJSON_Parse(json) : NULL;
    check_true(root != NULL, "fits.json parses");
    cJSON *ms = cJSON_GetObjectItem(root, "models");
    check_true(cJSON_GetArraySize(ms) == 3, "fits.json has 3 models");
    const char *keys[] = {"name", "log_likelihood", "parameters", "trials", "aic", "bic", "converged", "coefficients"};
    cJSON *m1 = cJSON_GetArrayItem(ms, 1);
    for (size_t i = 0; i < sizeof keys / sizeof keys[0]; i++)
        check_true(cJSON_GetObjectItem(m1, keys[i]) != NULL, "fits.json model has '%s'", keys[i]);
    cJSON *co = cJSON_GetArrayItem(cJSON_GetObjectItem(m1, "coefficients"), 2);
    const char *ckeys[] = {"parameter", "term", "level", "estimate", "se", "ci_low", "ci_high", "z", "p"};
    for (size_t i = 0; i < sizeof ckeys / sizeof ckeys[0]; i++)
        check_true(cJSON_GetObjectItem(co, ckeys[i]) != NULL, "coefficient has '%s'", ckeys[i]);
    check_true(!strcmp(cJSON_GetObjectItem(co, "term")->valuestring, "theta") &&
                   !strcmp(cJSON_GetObjectItem(co, "level")->valuestring, "rich"),
               "third coefficient is the theta slope at rich");
    check_true(cJSON_GetObjectItem(co, "estimate")->valuedouble == set->models[1].fit.coef[2].estimate,
               "estimate reads back exactly");
    check_true(cJSON_GetObjectItem(cJSON_GetObjectItem(root, "provenance"), "command") != NULL, "provenance copied in");
    check_true(cJSON_GetObjectItem(m1, "diagnostics") && cJSON_GetObjectItem(m1, "permutation_tests"),
               "diagnostics and permutation tests present");
    cJSON_Delete(root);
    free(json);

    snprintf(path, sizeof path, "%s/comparison.csv", dir);
    char *csv = slurp(path);
    const char *header = "name,parameters,trials,log_likelihood,aic,bic,delta_aic,delta_bic,aic_weight,lrt_against,"
                         "lrt_nested,lrt_statistic,lrt_df,lrt_p\n";
    check_true(csv && !strncmp(csv, header, strlen(header)), "comparison.csv header");
    char *line2 = csv ? strchr(strchr(csv, '\n') + 1, '\n') + 1 : NULL;
    check_true(line2 && !strncmp(line2, "theta-threshold,8,2000,", 23), "comparison.csv row 2 starts with name, k, n");
    double ll_read = line2 ? strtod(line2 + 23, NULL) : NAN;
    check_true(ll_read == set->comparison[1].log_likelihood, "log_likelihood reads back exactly");
    check_true(csv && strstr(csv, ",baseline,yes,") && strstr(csv, ",baseline,not nested,NA,NA,NA\n") &&
                   strstr(csv, "baseline,6,2000,"),
               "LRT columns: nested / not nested / NA");
    free(csv);

    snprintf(path, sizeof path, "%s/trials.csv", dir);
    char *tc = slurp(path);
    size_t lines = 0;
    for (char *p = tc; p && *p; p++) lines += *p == '\n';
    check_true(lines == 1 + 3 * 2000, "trials.csv: header + one row per trial and model (%zu lines)", lines);
    check_true(tc && !strncmp(tc,
                              "model,participant,trial,threshold,drift,nondecision,start,p_upper,mean_rt,"
                              "log_likelihood\nbaseline,r1,1,",
                              strlen("model,participant,trial,threshold,drift,nondecision,start,p_upper,mean_rt,"
                                     "log_likelihood\nbaseline,r1,1,")),
               "trials.csv header and first row");
    free(tc);
    const char *names[] = {"fits.json", "comparison.csv", "trials.csv"};
    for (int i = 0; i < 3; i++) {
        snprintf(path, sizeof path, "%s/%s", dir, names[i]);
        unlink(path);
    }
    check_true(rmdir(dir) == 0, "no temporary files left behind");
    cJSON_Delete(prov);
    bl_warnings_clear(&warn);
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(akaike_weights_hand_example), HARNESS_ENTRY(information_criteria),
        HARNESS_ENTRY(likelihood_ratio_tests),      HARNESS_ENTRY(permutation_test),
        HARNESS_ENTRY(null_slope_permutation),      HARNESS_ENTRY(result_files),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
