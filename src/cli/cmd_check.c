/* bandlink check: validate the study, the trial table and every recording window (band power is computed
 * but not written); print a summary on stdout and warnings on stderr. */
#include "cli_analysis.h"
#include "commands.h"

static const unsigned OPTIONS = CLI_OPT_THREADS;

static void help(FILE *out)
{
    fprintf(out, "usage: bandlink check STUDY.json [--threads N] [--quiet]\n\n"
                 "Validates the study file, the trial table and every recording window without fitting or writing,\n"
                 "and prints a summary: participants, trials kept and excluded by reason, recordings (rate, channels,\n"
                 "duration, format), Welch settings, frequency resolution and bins per band, models. Exit 0 when\n"
                 "everything is usable, 2 with a message naming the culprit otherwise.\n\n"
                 "options:\n");
    cli_analysis_options_help(out, OPTIONS);
}

static int print(bl_analysis *a, const cli_job *job)
{
    (void)job;
    const char *summary = bl_analysis_check_summary(a);
    if (!summary) return -1;
    fputs(summary, stdout);
    printf("warnings     %zu\n", bl_analysis_warnings(a)->count);
    return 0;
}

int cmd_check(int argc, char **argv)
{
    static const cli_analysis_command cmd = {"check", OPTIONS, 0, 0, 0, help, print, 0};
    return cli_analysis_main(&cmd, argc, argv);
}
