/* The shared driver of the analysis commands (run, fit, power, check): their options, the order of the
 * steps on the library's analysis handle, progress with an estimate of the time left, warnings, exit codes.
 * Each command file only says which options and outputs it has and what it prints at the end. */
#ifndef BL_CLI_ANALYSIS_H
#define BL_CLI_ANALYSIS_H

#include "bandlink/analysis.h"

#include <stdio.h>

/* Options a command accepts (besides --help and --quiet, which every command has). */
enum {
    CLI_OPT_OUT = 1u << 0,
    CLI_OPT_FORCE = 1u << 1,
    CLI_OPT_THREADS = 1u << 2,
    CLI_OPT_SEED = 1u << 3,
    CLI_OPT_PERMUTATIONS = 1u << 4,
    CLI_OPT_MODEL = 1u << 5,
    CLI_OPT_TIMINGS = 1u << 6,
    CLI_OPT_SCAN_PERMUTATIONS = 1u << 7, /* --permutations as the scan's family-wise permutations */
};

typedef struct {
    const char *study_path;
    const char *out_dir; /* NULL: the study's "output" */
    int force, timings;
    bl_analysis_options opt;
} cli_job;

typedef struct {
    const char *name; /* "run" */
    unsigned options; /* CLI_OPT_* */
    int needs_power;  /* the study must have a "power" section */
    int fits;         /* fit the models */
    unsigned outputs; /* BL_OUTPUT_*; 0: nothing is written (check) */
    void (*help)(FILE *out);
    /* What the command prints on success (not called with --quiet). Returns 0, or -1 when a summary is
     * NULL (memory ran out). */
    int (*print)(bl_analysis *a, const cli_job *job);
    int scans; /* run the time-frequency scan (bl_analysis_scan) */
} cli_analysis_command;

/* Parse, run the steps, print warnings and the result; returns the exit code. */
int cli_analysis_main(const cli_analysis_command *cmd, int argc, char **argv);

/* The options lines of --help for the options in `options`, in one wording for every command. */
void cli_analysis_options_help(FILE *out, unsigned options);

#endif
