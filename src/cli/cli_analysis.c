/* The shared driver of the analysis commands (cli_analysis.h). */
#include "cli_analysis.h"
#include "cli_common.h"

#include <stdlib.h>
#include <string.h>
#include <time.h>

static double mono(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

typedef struct {
    double step_start;
    int step;
} progress_state;

/* Step, detail, count and an estimate of the time left from the pace so far within the step. */
static void on_progress(void *user, bl_step step, const char *detail, size_t done, size_t total)
{
    progress_state *ps = user;
    double now = mono();
    if ((int)step != ps->step) {
        ps->step = (int)step;
        ps->step_start = now;
    }
    if (total > 0 && done > 0 && done < total) {
        double eta = (now - ps->step_start) / (double)done * (double)(total - done);
        cli_progress("[%s] %s %zu/%zu, about %.0f s left", bl_step_name(step), detail, done, total, eta);
    } else if (total > 0) {
        cli_progress("[%s] %s %zu/%zu", bl_step_name(step), detail, done, total);
    } else {
        cli_progress("[%s] %s", bl_step_name(step), detail);
    }
}

void cli_analysis_options_help(FILE *out, unsigned o)
{
    if (o & CLI_OPT_MODEL)
        fprintf(out, "  --model NAME        fit only this model (repeat for several; default: every model)\n");
    if (o & CLI_OPT_OUT)
        fprintf(out, "  --out DIR           results folder (default: the study's \"output\", beside the study file)\n");
    if (o & CLI_OPT_FORCE)
        fprintf(out, "  --force             replace an existing results folder that bandlink wrote, only once the new\n"
                     "                      one is complete\n");
    if (o & CLI_OPT_THREADS)
        fprintf(out, "  --threads N         threads, 1-1024 (default: all cores); results do not depend on it\n");
    if (o & CLI_OPT_SEED)
        fprintf(out, "  --seed S            seed of the optimiser starts and the permutations (default 1)\n");
    if (o & CLI_OPT_SCAN_PERMUTATIONS)
        fprintf(out, "  --permutations N    permutations for the family-wise error (default: the scan block's\n"
                     "                      \"permutations\")\n");
    if (o & CLI_OPT_PERMUTATIONS)
        fprintf(out,
                "  --permutations N    permutation test of every slope coefficient with N refits (default 0: none)\n");
    if (o & CLI_OPT_TIMINGS) fprintf(out, "  --timings           print the time per step even with --quiet\n");
    fprintf(out, "  --quiet             no progress, warnings or summary\n"
                 "  --help              this text\n");
}

/* -1: keep going; otherwise the exit code. */
static int parse(const cli_analysis_command *cmd, int argc, char **argv, cli_job *job, const char **models,
                 size_t *n_models)
{
    const char *name = cmd->name;
    unsigned o = cmd->options;
    for (int i = 1; i < argc; i++) {
        const char *a = argv[i], *v;
        int missing = 0;
        unsigned long x;
        if (!strcmp(a, "--help") || !strcmp(a, "-h")) {
            cmd->help(stdout);
            return CLI_EXIT_OK;
        } else if (!strcmp(a, "--quiet")) {
            cli_quiet = 1;
        } else if ((o & CLI_OPT_FORCE) && !strcmp(a, "--force")) {
            job->force = 1;
        } else if ((o & CLI_OPT_TIMINGS) && !strcmp(a, "--timings")) {
            job->timings = 1;
        } else if ((o & CLI_OPT_MODEL) && ((v = cli_option_value(argc, argv, &i, "--model", &missing)) || missing)) {
            if (missing) return cli_usage_error(name, "option --model needs a value (a model name)");
            for (size_t q = 0; q < *n_models; q++)
                if (!strcmp(models[q], v)) return cli_usage_error(name, "option --model: '%s' is given twice", v);
            models[(*n_models)++] = v;
        } else if ((o & CLI_OPT_OUT) && ((v = cli_option_value(argc, argv, &i, "--out", &missing)) || missing)) {
            if (missing) return cli_usage_error(name, "option --out needs a value (a folder)");
            job->out_dir = v;
        } else if ((o & CLI_OPT_THREADS) &&
                   ((v = cli_option_value(argc, argv, &i, "--threads", &missing)) || missing)) {
            if (!cli_parse_threads(name, v, missing, &x)) return CLI_EXIT_USAGE;
            job->opt.threads = (int)x;
        } else if ((o & CLI_OPT_SEED) && ((v = cli_option_value(argc, argv, &i, "--seed", &missing)) || missing)) {
            if (missing) return cli_usage_error(name, "option --seed needs a value");
            if (!cli_parse_count(name, "--seed", v, &x)) return CLI_EXIT_USAGE;
            job->opt.seed = x;
        } else if ((o & (CLI_OPT_PERMUTATIONS | CLI_OPT_SCAN_PERMUTATIONS)) &&
                   ((v = cli_option_value(argc, argv, &i, "--permutations", &missing)) || missing)) {
            if (missing) return cli_usage_error(name, "option --permutations needs a value");
            if (!cli_parse_count(name, "--permutations", v, &x)) return CLI_EXIT_USAGE;
            if (x > 1000000) return cli_usage_error(name, "option --permutations: '%s' is more than 1000000", v);
            job->opt.permutations = x;
        } else if (a[0] == '-' && a[1] != '\0') {
            return cli_usage_error(name, "unknown option '%s'", a);
        } else if (!job->study_path) {
            job->study_path = a;
        } else {
            return cli_usage_error(name, "more than one study file ('%s' and '%s')", job->study_path, a);
        }
    }
    if (!job->study_path) return cli_usage_error(name, "missing the study file");
    return -1;
}

static bl_status run_steps(const cli_analysis_command *cmd, const cli_job *job, bl_analysis *a, bl_error *err)
{
    bl_status st = BL_OK;
    if (cmd->outputs) st = bl_analysis_target(a, job->out_dir, job->force, err);
    if (!st) st = bl_analysis_power(a, err);
    if (!st && cmd->fits) st = bl_analysis_fit(a, err);
    if (!st && cmd->scans) st = bl_analysis_scan(a, err);
    if (!st && cmd->outputs) st = bl_analysis_write(a, cmd->outputs, cmd->name, err);
    return st;
}

int cli_analysis_main(const cli_analysis_command *cmd, int argc, char **argv)
{
    cli_job job = {0};
    bl_analysis_options_default(&job.opt);
    const char **models = calloc((size_t)argc + 1, sizeof *models);
    size_t n_models = 0;
    bl_error err = {0};
    bl_analysis *a = NULL;
    if (!models) {
        bl_error_set(&err, BL_ERR_NOMEM, "out of memory");
        return cli_fail(&err);
    }
    int code = parse(cmd, argc, argv, &job, models, &n_models);
    if (code >= 0) goto done;
    code = CLI_EXIT_OK;
    if (n_models) {
        job.opt.models = models;
        job.opt.n_models = n_models;
    }
    progress_state ps = {mono(), -1};
    job.opt.progress = on_progress;
    job.opt.progress_user = &ps;
    bl_status st = bl_analysis_open(job.study_path, &job.opt, &a, &err);
    if (!st && cmd->needs_power && !bl_analysis_has_power(a))
        st = bl_error_set(&err, BL_ERR_INPUT,
                          "%s: the study has no \"power\" section, so there is no band power to "
                          "compute",
                          job.study_path);
    if (!st) st = run_steps(cmd, &job, a, &err);
    cli_progress("%s", "");
    if (a) cli_print_warnings(bl_analysis_warnings(a));
    if (st) {
        code = cli_fail(&err);
        goto done;
    }
    const char *timings = job.timings ? bl_analysis_timings(a) : "";
    if ((!cli_quiet && cmd->print(a, &job) != 0) || !timings) {
        bl_error_set(&err, BL_ERR_NOMEM, "out of memory printing the summary (the results are written)");
        code = cli_fail(&err);
    } else if (cli_quiet && job.timings) {
        fputs(timings, stdout);
    }
done:
    bl_analysis_close(a);
    free(models);
    return code;
}
