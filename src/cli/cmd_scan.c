/* bandlink scan: band power as in `fit`, then the time-frequency scan of the study's "scan" block
 * (docs/scan.md): scan.csv, one heat map per tested parameter, power.csv and provenance.json. */
#include "cli_analysis.h"
#include "commands.h"

static const unsigned OPTIONS = CLI_OPT_OUT | CLI_OPT_FORCE | CLI_OPT_THREADS | CLI_OPT_SEED |
                                CLI_OPT_SCAN_PERMUTATIONS | CLI_OPT_TIMINGS;

static void help(FILE *out)
{
    fprintf(out,
            "usage: bandlink scan STUDY.json [--out DIR] [--force] [--threads N] [--seed S] [--permutations N]\n"
            "                     [--timings] [--quiet]\n\n"
            "Scan a grid of frequencies x time windows (the study's \"scan\" block): fit the null model once, measure\n"
            "multitaper power of every cell on every trial, and test a slope on each cell's power for every listed\n"
            "parameter with a score statistic; family-wise error by permutation (maximum statistic or cluster\n"
            "mass). Writes scan.csv, scan_<parameter>.svg heat maps, scan_report.html, power.csv and provenance.json.\n"
            "\n"
            "options:\n");
    cli_analysis_options_help(out, OPTIONS);
}

static int print(bl_analysis *a, const cli_job *job)
{
    (void)job;
    const char *summary = bl_analysis_scan_summary(a);
    if (!summary) return -1;
    printf("%s", summary);
    printf("results: %s/ (scan.csv, scan_*.svg)\n", bl_analysis_output(a));
    return 0;
}

int cmd_scan(int argc, char **argv)
{
    static const cli_analysis_command cmd = {"scan", OPTIONS, 1, 0, BL_OUTPUT_POWER | BL_OUTPUT_SCAN, help, print, 1};
    return cli_analysis_main(&cmd, argc, argv);
}
