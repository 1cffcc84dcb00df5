/* bandlink fit: load the study and its trials, compute band power when the study has recordings
 * and bands, fit the study's models, write fits.json, comparison.csv and trials.csv, print a summary. */
#include "bl_config.h"
#include "cli_common.h"
#include "commands.h"

#include "fit/fit.h"
#include "analysis/pipeline.h"
#include "signal/power.h"
#include "report/results.h"
#include "design/study.h"
#include "design/trials.h"

#include <cjson/cJSON.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

static void usage(FILE *out)
{
    fprintf(out,
            "usage: bandlink fit STUDY.json [--model NAME ...] [--out DIR] [--threads N]\n"
            "                    [--permutations N] [--seed S] [--force] [--quiet]\n\n"
            "Fit the study's models by maximum likelihood (band power is computed first when the study\n"
            "has recordings and bands) and write fits.json, comparison.csv and trials.csv.\n\n"
            "options:\n"
            "  --model NAME        fit only this model (repeat for several; default: every model)\n"
            "  --out DIR           results folder (default: the study's \"output\")\n"
            "  --threads N         threads for the likelihood (default: all cores); results do not depend on it\n"
            "  --permutations N    permutation test of every slope with N refits (default 0: none)\n"
            "  --seed S            seed of the extra optimiser starts and the permutations (default 1)\n"
            "  --force             replace existing result files\n"
            "  --quiet             no summary, warnings or progress\n");
}

static void progress(void *user, const char *stage, size_t done, size_t total)
{
    (void)user;
    cli_progress("fitting: %s (%zu/%zu)", stage, done, total);
}

static const char *fmt_num(char *buf, size_t n, double x, const char *f)
{
    if (!isfinite(x)) snprintf(buf, n, "NA");
    else snprintf(buf, n, f, x);
    return buf;
}

static void print_summary(const bl_fit_set *set)
{
    char b1[32], b2[32], b3[32], b4[32], b5[32];
    printf("%-24s %10s %7s %14s %12s %9s %7s %s\n", "model", "parameters", "trials", "log_likelihood", "aic", "delta_aic",
           "weight", "converged");
    for (size_t i = 0; i < set->n_models; i++) {
        const bl_comparison_row *c = &set->comparison[i];
        printf("%-24s %10zu %7zu %14s %12s %9s %7s %s\n", c->name, c->parameters, c->trials,
               fmt_num(b1, sizeof b1, c->log_likelihood, "%.3f"), fmt_num(b2, sizeof b2, c->aic, "%.2f"),
               fmt_num(b3, sizeof b3, c->delta_aic, "%.2f"), fmt_num(b4, sizeof b4, c->aic_weight, "%.3f"),
               set->models[i].converged ? "yes" : "NO");
    }
    for (size_t i = 0; i < set->n_models; i++) {
        const bl_comparison_row *c = &set->comparison[i];
        if (c->lrt_nested == 1 && !isfinite(c->lrt_p))
            printf("likelihood-ratio test %s vs %s: not tested (a fit did not converge)\n", c->name, c->lrt_against);
        else if (c->lrt_nested == 1)
            printf("likelihood-ratio test %s vs %s: chi2(%g) = %s, p = %s\n", c->name, c->lrt_against, c->lrt_df,
                   fmt_num(b1, sizeof b1, c->lrt_statistic, "%.3f"), fmt_num(b2, sizeof b2, c->lrt_p, "%.4g"));
        else if (c->lrt_nested == 0)
            printf("likelihood-ratio test %s vs %s: not nested\n", c->name, c->lrt_against);
    }
    for (size_t i = 0; i < set->n_models; i++) {
        const bl_model_result *r = &set->models[i];
        printf("\n%s%s\n", r->name,
               r->mode == BL_PARTICIPANTS_SEPARATE ? " (group: random-effects estimates across participants)" : "");
        printf("  %-12s %-14s %-16s %11s %10s %23s %10s\n", "parameter", "term", "level", "estimate", "se",
               "95% CI", "p");
        for (size_t j = 0; j < r->fit.n_coef; j++) {
            const bl_coefficient *c = &r->fit.coef[j];
            char ci[64];
            if (isfinite(c->ci_low)) snprintf(ci, sizeof ci, "[%.4g, %.4g]", c->ci_low, c->ci_high);
            else snprintf(ci, sizeof ci, "NA");
            printf("  %-12s %-14s %-16s %11s %10s %23s %10s\n", c->parameter, c->term, c->level[0] ? c->level : "-",
                   fmt_num(b3, sizeof b3, c->estimate, "%.5g"), fmt_num(b4, sizeof b4, c->se, "%.3g"), ci,
                   fmt_num(b5, sizeof b5, c->p, "%.3g"));
        }
        for (size_t t = 0; t < r->n_permutation; t++) {
            const bl_permutation_test *p = &r->permutation[t];
            printf("  permutation test, %s slope on '%s': LR = %s, p = %.4g (%zu permutations)\n", p->parameter,
                   p->regressor, fmt_num(b1, sizeof b1, p->statistic, "%.3f"), p->p, p->permutations);
        }
    }
}

int cmd_fit(int argc, char **argv)
{
    const char *study_path = NULL, *out_dir = NULL;
    const char **models = calloc((size_t)argc + 1, sizeof *models);
    size_t n_models = 0;
    unsigned long threads = 0, perms = 0, seed = 1;
    int force = 0, code = CLI_EXIT_OK;
    bl_study *study = NULL;
    bl_trials *trials = NULL;
    bl_power_result *power = NULL;
    bl_fit_set *set = NULL;
    cJSON *prov = NULL;
    bl_warnings warn = {0};
    bl_error err = {0};
    if (!models) {
        bl_error_set(&err, BL_ERR_NOMEM, "out of memory");
        return cli_fail(&err);
    }
    for (int i = 1; i < argc; i++) {
        const char *a = argv[i], *v;
        int missing = 0;
        if (!strcmp(a, "--help") || !strcmp(a, "-h")) {
            usage(stdout);
            goto done;
        } else if (!strcmp(a, "--quiet")) {
            cli_quiet = 1;
        } else if (!strcmp(a, "--force")) {
            force = 1;
        } else if ((v = cli_option_value(argc, argv, &i, "--model", &missing)) || missing) {
            if (missing) {
                code = cli_usage_error("fit", "option %s needs a value", a);
                goto done;
            }
            for (size_t q = 0; q < n_models; q++)
                if (strcmp(models[q], v) == 0) {
                    code = cli_usage_error("fit", "option --model: '%s' is given twice", v);
                    goto done;
                }
            models[n_models++] = v;
        } else if ((v = cli_option_value(argc, argv, &i, "--out", &missing)) || missing) {
            if (missing) {
                code = cli_usage_error("fit", "option %s needs a value", a);
                goto done;
            }
            out_dir = v;
        } else if ((v = cli_option_value(argc, argv, &i, "--threads", &missing)) || missing) {
            if (!cli_parse_threads("fit", v, missing, &threads)) goto usage_fail;
        } else if ((v = cli_option_value(argc, argv, &i, "--permutations", &missing)) || missing) {
            if (missing) {
                code = cli_usage_error("fit", "option %s needs a value", a);
                goto done;
            }
            if (!cli_parse_count("fit", "--permutations", v, &perms)) goto usage_fail;
            if (perms > 1000000) {
                code = cli_usage_error("fit", "option --permutations: '%s' is more than 1000000", v);
                goto done;
            }
        } else if ((v = cli_option_value(argc, argv, &i, "--seed", &missing)) || missing) {
            if (missing) {
                code = cli_usage_error("fit", "option %s needs a value", a);
                goto done;
            }
            if (!cli_parse_count("fit", "--seed", v, &seed)) goto usage_fail;
        } else if (a[0] == '-' && a[1] != '\0') {
            code = cli_usage_error("fit", "unknown option '%s'", a);
            goto done;
        } else if (!study_path) {
            study_path = a;
        } else {
            code = cli_usage_error("fit", "more than one study file ('%s' and '%s')", study_path, a);
            goto done;
        }
    }
    if (!study_path) {
        code = cli_usage_error("fit", "missing the study file");
        goto done;
    }

    char started[32];
    bl_utc_stamp(started);
    if (bl_study_load(study_path, &study, &err)) goto fail;
    if (bl_trials_load(study, &trials, &warn, &err)) goto fail;
    if (study->has_recordings && study->has_power && study->power.n_bands > 0) {
        cli_progress("computing band power");
        if (bl_power_compute(study, trials, (int)threads, &power, &warn, &err)) goto fail;
    }
    bl_fit_options opt;
    bl_fit_options_default(&opt);
    opt.threads = (int)threads;
    opt.seed = seed;
    opt.permutations = perms;
    opt.models = models;
    opt.n_models = n_models;
    opt.progress = progress;
    if (bl_fit_study(study, trials, &opt, &set, &warn, &err)) goto fail;
    cli_progress("%s", "");
    /* The same provenance record as `bandlink run` (inputs hashed, Welch settings, exclusions). */
    if (bl_provenance_create(study_path, study, trials, power, seed, opt.threads, perms, started, &prov, &err))
        goto fail;
    char finished[32];
    bl_utc_stamp(finished);
    if (!cJSON_AddStringToObject(prov, "command", "fit") || !cJSON_AddStringToObject(prov, "finished", finished)) {
        bl_error_set(&err, BL_ERR_NOMEM, "out of memory");
        goto fail;
    }
    const char *dir = out_dir ? out_dir : study->output;
    if (!dir) {
        bl_error_set(&err, BL_ERR_USAGE, "%s: the study names no \"output\" folder; give --out DIR", study_path);
        goto fail;
    }
    if (bl_results_write_all(dir, set, study, trials, prov, &warn, force, &err)) goto fail;
    cli_print_warnings(&warn);
    if (!cli_quiet) {
        print_summary(set);
        printf("\nwrote %s/fits.json, %s/comparison.csv, %s/trials.csv\n", dir, dir, dir);
    }
    goto done;
usage_fail:
    code = CLI_EXIT_USAGE;
    goto done;
fail:
    cli_progress("%s", "");
    cli_print_warnings(&warn);
    code = cli_fail(&err);
done:
    cJSON_Delete(prov);
    bl_fit_set_destroy(set);
    bl_power_result_destroy(power);
    bl_trials_destroy(trials);
    bl_study_destroy(study);
    bl_warnings_clear(&warn);
    free(models);
    return code;
}
