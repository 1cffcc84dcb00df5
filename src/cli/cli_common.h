/* Shared helpers for the CLI commands: messages, exit codes, option values. */
#ifndef BL_CLI_COMMON_H
#define BL_CLI_COMMON_H

#include "bandlink/status.h"

#include <stdio.h>

/* Exit codes (docs/cli.md): 0 ok, 1 failure while running, 2 bad usage or bad input. */
enum { CLI_EXIT_OK = 0, CLI_EXIT_FAILURE = 1, CLI_EXIT_USAGE = 2 };

/* Set by --quiet anywhere on the command line. */
extern int cli_quiet;

/* Print "bandlink: error: <message>" to stderr and return the exit code for the status. */
int cli_fail(const bl_error *err);
/* Print "bandlink <cmd>: <message>" plus a hint to run --help, return CLI_EXIT_USAGE. */
int cli_usage_error(const char *cmd, const char *fmt, ...) BL_PRINTF(2, 3);
/* Print warnings to stderr ("bandlink: warning: ..."), unless quiet. */
void cli_print_warnings(const bl_warnings *w);
/* Progress line on stderr, only when stderr is a terminal and not quiet. */
void cli_progress(const char *fmt, ...) BL_PRINTF(1, 2);

/* Parse a finite double / a non-negative integer option value; on failure print a usage error
 * naming the option and the value, return 0. */
int cli_parse_double(const char *cmd, const char *option, const char *value, double *out);
int cli_parse_count(const char *cmd, const char *option, const char *value, unsigned long *out);

/* --threads: a whole number from 1 to 1024. `missing` is what cli_option_value reported. On failure print a
 * usage error naming the option and value, return 0. */
int cli_parse_threads(const char *cmd, const char *value, int missing, unsigned long *out);

/* Take the value of an option of the form "--name VALUE" or "--name=VALUE" at argv[*i].
 * Returns the value (advancing *i past it) or NULL when argv[*i] is not that option.
 * Sets *missing when the option is present without a value (at the end, or followed by another "--" option). */
const char *cli_option_value(int argc, char **argv, int *i, const char *name, int *missing);

#endif
