/* bandlink fit: band power (when the study has recordings and bands), then every model fitted and
 * compared; no goodness of fit, figures or report. */
#include "cli_analysis.h"
#include "commands.h"

static const unsigned OPTIONS = CLI_OPT_MODEL | CLI_OPT_OUT | CLI_OPT_FORCE | CLI_OPT_THREADS | CLI_OPT_SEED |
                                CLI_OPT_PERMUTATIONS | CLI_OPT_TIMINGS;

static void help(FILE *out)
{
    fprintf(out,
            "usage: bandlink fit STUDY.json [--model NAME ...] [--out DIR] [--force] [--threads N] [--seed S]\n"
            "                    [--permutations N] [--timings] [--quiet]\n\n"
            "Fit the study's models by maximum likelihood (band power is computed first when the study has\n"
            "recordings and bands) and write fits.json, comparison.csv, trials.csv, power.csv (with band power)\n"
            "and provenance.json into the results folder; print the model comparison and the best model's slopes.\n\n"
            "options:\n");
    cli_analysis_options_help(out, OPTIONS);
}

static int print(bl_analysis *a, const cli_job *job)
{
    (void)job;
    const char *summary = bl_analysis_fit_summary(a);
    if (!summary) return -1;
    printf("%s\n", summary);
    printf("results: %s/ (fits.json, comparison.csv, trials.csv)\n", bl_analysis_output(a));
    return 0;
}

int cmd_fit(int argc, char **argv)
{
    static const cli_analysis_command cmd = {"fit", OPTIONS, 0, 1, BL_OUTPUT_POWER | BL_OUTPUT_FITS, help, print, 0};
    return cli_analysis_main(&cmd, argc, argv);
}
