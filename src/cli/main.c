/* bandlink command-line tool: a thin layer over the library. Dispatches to one command. */
#include "bl_config.h"
#include "cli_common.h"
#include "commands.h"

#include <gsl/gsl_errno.h>
#include <stdio.h>
#include <string.h>

static const struct {
    const char *name;
    int (*run)(int, char **);
    const char *summary;
} commands[] = {
    {"run", cmd_run, "the whole pipeline: power, fits, comparison, goodness of fit, figures, report"},
    {"power", cmd_power, "band power per trial only (power.csv)"},
    {"fit", cmd_fit, "fit and compare the study's models (fits.json, comparison.csv, trials.csv)"},
    {"check", cmd_check, "validate the study file and its inputs; print a summary"},
    {"simulate", cmd_simulate, "write a synthetic study with known truth"},
    {"predict", cmd_predict, "choice probabilities, RT quantiles and densities for given parameters"},
    {"scan", cmd_scan, "test every frequency x time window of power against the model (scan.csv)"},
};

static void usage(FILE *out)
{
    fprintf(out, "usage: bandlink COMMAND [OPTIONS]\n\n"
                 "Links trial-wise oscillation band power to the parameters of the Wiener diffusion model.\n\n"
                 "commands:\n");
    for (size_t i = 0; i < sizeof commands / sizeof commands[0]; i++)
        fprintf(out, "  %-9s %s\n", commands[i].name, commands[i].summary);
    fprintf(out, "\ncommon options: --help, --version, --quiet\n"
                 "exit codes: 0 ok, 1 failure while running, 2 bad usage or bad input\n"
                 "'bandlink COMMAND --help' describes a command. Research use only; not a medical device.\n");
}

int main(int argc, char **argv)
{
    /* GSL aborts on errors by default; the library checks every status itself. */
    gsl_set_error_handler_off();
    if (argc < 2) {
        usage(stderr);
        return CLI_EXIT_USAGE;
    }
    for (int i = 1; i < argc; i++)
        if (strcmp(argv[i], "--quiet") == 0) cli_quiet = 1;
    if (strcmp(argv[1], "--help") == 0 || strcmp(argv[1], "-h") == 0 || strcmp(argv[1], "help") == 0) {
        usage(stdout);
        return CLI_EXIT_OK;
    }
    if (strcmp(argv[1], "--version") == 0) {
        printf("bandlink %s\n", BL_VERSION_STRING);
        return CLI_EXIT_OK;
    }
    for (size_t i = 0; i < sizeof commands / sizeof commands[0]; i++)
        if (strcmp(argv[1], commands[i].name) == 0) return commands[i].run(argc - 1, argv + 1);
    fprintf(stderr, "bandlink: unknown command '%s' (see 'bandlink --help')\n", argv[1]);
    return CLI_EXIT_USAGE;
}
