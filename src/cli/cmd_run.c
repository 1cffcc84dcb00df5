/* bandlink run: the whole job, from recordings and trial table to report.html. */
#include "cli_analysis.h"
#include "commands.h"

static const unsigned OPTIONS = CLI_OPT_OUT | CLI_OPT_FORCE | CLI_OPT_THREADS | CLI_OPT_SEED | CLI_OPT_PERMUTATIONS |
                                CLI_OPT_MODEL | CLI_OPT_TIMINGS;

static void help(FILE *out)
{
    fprintf(out, "usage: bandlink run STUDY.json [--out DIR] [--force] [--threads N] [--seed S] [--permutations N]\n"
                 "                    [--model NAME ...] [--timings] [--quiet]\n\n"
                 "The whole job: band power per trial, every model fitted and compared, goodness of fit, figures and\n"
                 "a report. Writes power.csv, fits.json, comparison.csv, trials.csv, fit_quantiles.csv, figures/,\n"
                 "report.html and provenance.json into the results folder (docs/outputs.md), then prints the model\n"
                 "comparison, the best model's slopes with 95%% CIs and p-values, and the time per step.\n\n"
                 "options:\n");
    cli_analysis_options_help(out, OPTIONS);
    fprintf(out, "\nThe results are written into a hidden folder beside DIR and moved into place at the end, so an\n"
                 "interrupted run leaves earlier results as they were. Research use only; not a medical device.\n");
}

static int print(bl_analysis *a, const cli_job *job)
{
    (void)job;
    size_t trials, kept, participants;
    bl_analysis_counts(a, &trials, &kept, &participants);
    const char *summary = bl_analysis_fit_summary(a), *timings = bl_analysis_timings(a);
    if (!summary || !timings) return -1;
    printf("%s\n", summary);
    printf("%zu trials (%zu kept) from %zu participants\n", trials, kept, participants);
    fputs(timings, stdout);
    printf("results: %s/  report: %s/report.html\n", bl_analysis_output(a), bl_analysis_output(a));
    return 0;
}

int cmd_run(int argc, char **argv)
{
    static const cli_analysis_command cmd = {"run", OPTIONS, 0, 1, BL_OUTPUT_ALL, help, print, 0};
    return cli_analysis_main(&cmd, argc, argv);
}
