/* bandlink run STUDY.json [--out DIR] [--threads N] [--seed S] [--permutations N] [--force] [--timings] [--quiet] */
#include "analysis/pipeline.h"
#include "cli_common.h"
#include "commands.h"

#include <stdio.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

static void help(FILE *out)
{
    fprintf(out,
            "usage: bandlink run STUDY.json [--out DIR] [--threads N] [--seed S] [--permutations N] [--force]\n"
            "                    [--timings] [--quiet]\n\n"
            "The whole job: band power per trial, every model fitted and compared, goodness of fit, figures and\n"
            "a report. Writes power.csv, fits.json (with provenance), comparison.csv, trials.csv,\n"
            "fit_quantiles.csv, figures/ and report.html into the results folder (docs/outputs.md), then prints\n"
            "the comparison table, the best model's slopes with 95%% CIs and p-values, and the time per stage.\n\n"
            "options:\n"
            "  --out DIR          results folder (default: the study's \"output\", beside the study file)\n"
            "  --threads N        threads (default: all cores); results do not depend on it beyond rounding\n"
            "  --seed S           seed for optimiser starts and permutations (default 1)\n"
            "  --permutations N   permutation refits per slope (default 0: no permutation test)\n"
            "  --force            replace an existing results folder, only once the new one is complete\n"
            "  --timings          print the time per stage even with --quiet\n"
            "  --quiet            no progress, warnings or summary\n\n"
            "The results are written into a hidden folder beside DIR and moved into place at the end, so an\n"
            "interrupted run leaves earlier results as they were. Research use only; not a medical device.\n");
}

typedef struct {
    double stage_start;
    int stage;
} progress_state;

static double mono(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* Stage, detail, count and an ETA from the pace so far within the stage. */
static void on_progress(void *user, int stage, const char *detail, size_t done, size_t total)
{
    progress_state *ps = user;
    double now = mono();
    if (stage != ps->stage) {
        ps->stage = stage;
        ps->stage_start = now;
    }
    if (total > 0 && done > 0 && done < total) {
        double eta = (now - ps->stage_start) / (double)done * (double)(total - done);
        cli_progress("[%s] %s %zu/%zu, about %.0f s left", bl_stage_name(stage), detail, done, total, eta);
    } else if (total > 0) {
        cli_progress("[%s] %s %zu/%zu", bl_stage_name(stage), detail, done, total);
    } else {
        cli_progress("[%s] %s", bl_stage_name(stage), detail);
    }
}

int cmd_run(int argc, char **argv)
{
    bl_run_options opt;
    bl_run_options_default(&opt);
    int timings = 0;
    for (int i = 1; i < argc; i++) {
        const char *v;
        int missing = 0;
        unsigned long x;
        if (strcmp(argv[i], "--help") == 0 || strcmp(argv[i], "-h") == 0) {
            help(stdout);
            return CLI_EXIT_OK;
        } else if (strcmp(argv[i], "--force") == 0) {
            opt.force = 1;
        } else if (strcmp(argv[i], "--quiet") == 0) {
            cli_quiet = 1;
        } else if (strcmp(argv[i], "--timings") == 0) {
            timings = 1;
        } else if ((v = cli_option_value(argc, argv, &i, "--out", &missing)) || missing) {
            if (missing) return cli_usage_error("run", "option --out needs a folder");
            opt.out_dir = v;
        } else if ((v = cli_option_value(argc, argv, &i, "--threads", &missing)) || missing) {
            if (!cli_parse_threads("run", v, missing, &x)) return CLI_EXIT_USAGE;
            opt.threads = (int)x;
        } else if ((v = cli_option_value(argc, argv, &i, "--seed", &missing)) || missing) {
            if (missing) return cli_usage_error("run", "option --seed needs a value");
            if (!cli_parse_count("run", "--seed", v, &x)) return CLI_EXIT_USAGE;
            opt.has_seed = 1;
            opt.seed = x;
        } else if ((v = cli_option_value(argc, argv, &i, "--permutations", &missing)) || missing) {
            if (missing) return cli_usage_error("run", "option --permutations needs a value");
            if (!cli_parse_count("run", "--permutations", v, &x)) return CLI_EXIT_USAGE;
            if (x > 1000000) return cli_usage_error("run", "option --permutations: '%s' is above 1000000", v);
            opt.permutations = x;
        } else if (argv[i][0] == '-' && argv[i][1] != '\0') {
            return cli_usage_error("run", "unknown option '%s'", argv[i]);
        } else if (!opt.study_path) {
            opt.study_path = argv[i];
        } else {
            return cli_usage_error("run", "unexpected argument '%s' (one study file)", argv[i]);
        }
    }
    if (!opt.study_path) return cli_usage_error("run", "missing the study file");

    progress_state ps = {mono(), -1};
    opt.progress = on_progress;
    opt.progress_user = &ps;
    bl_error err = {0};
    bl_warnings warn = {0};
    bl_run_result res;
    bl_status st = bl_run(&opt, &res, &warn, &err);
    cli_progress("%s", "");
    cli_print_warnings(&warn);
    bl_warnings_clear(&warn);
    if (st != BL_OK) return cli_fail(&err);
    if (!cli_quiet) {
        printf("%s\n", res.summary);
        printf("%zu trials (%zu kept) from %zu participants\n", res.trials, res.kept, res.participants);
        printf("%s", res.timings);
        printf("results: %s/  report: %s/report.html\n", res.out_dir, res.out_dir);
    } else if (timings) {
        printf("%s", res.timings);
    }
    bl_run_result_clear(&res);
    return CLI_EXIT_OK;
}
