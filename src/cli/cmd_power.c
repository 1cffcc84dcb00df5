/* bandlink power: band power per trial only (power.csv). */
#include "cli_analysis.h"
#include "commands.h"

static const unsigned OPTIONS = CLI_OPT_OUT | CLI_OPT_FORCE | CLI_OPT_THREADS | CLI_OPT_TIMINGS;

static void help(FILE *out)
{
    fprintf(out,
            "usage: bandlink power STUDY.json [--out DIR] [--force] [--threads N] [--timings] [--quiet]\n\n"
            "Computes Welch band power in each kept trial's window and writes power.csv (participant, trial, the\n"
            "trial table's columns, <band>_power (raw, unit^2) and <band> (scaled and standardised) per band, and\n"
            "artifact: empty, or why the trial was left out) and provenance.json into the results folder.\n\n"
            "options:\n");
    cli_analysis_options_help(out, OPTIONS);
}

static int print(bl_analysis *a, const cli_job *job)
{
    (void)job;
    const char *summary = bl_analysis_power_summary(a);
    if (!summary) return -1;
    printf("wrote %s/power.csv: %s\n", bl_analysis_output(a), summary);
    return 0;
}

int cmd_power(int argc, char **argv)
{
    static const cli_analysis_command cmd = {"power", OPTIONS, 1, 0, BL_OUTPUT_POWER, help, print, 0};
    return cli_analysis_main(&cmd, argc, argv);
}
