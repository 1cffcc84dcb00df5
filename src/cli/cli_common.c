/* Shared helpers for the CLI commands. */
#include "cli_common.h"

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

int cli_quiet = 0;

int cli_fail(const bl_error *err)
{
    fprintf(stderr, "bandlink: error: %s\n", err->message[0] ? err->message : bl_strerror(err->status));
    int code = bl_status_exit_code(err->status);
    return code ? code : CLI_EXIT_FAILURE;
}

int cli_usage_error(const char *cmd, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    fprintf(stderr, "bandlink %s: ", cmd);
    vfprintf(stderr, fmt, ap);
    fprintf(stderr, " (see 'bandlink %s --help')\n", cmd);
    va_end(ap);
    return CLI_EXIT_USAGE;
}

void cli_print_warnings(const bl_warnings *w)
{
    if (cli_quiet || !w) return;
    for (size_t i = 0; i < w->count; i++) fprintf(stderr, "bandlink: warning: %s\n", w->items[i]);
    if (w->lost) fprintf(stderr, "bandlink: warning: %zu further warnings were lost (out of memory)\n", w->lost);
}

void cli_progress(const char *fmt, ...)
{
    if (cli_quiet || !isatty(STDERR_FILENO)) return;
    va_list ap;
    va_start(ap, fmt);
    fputs("\r\033[K", stderr);
    vfprintf(stderr, fmt, ap);
    fflush(stderr);
    va_end(ap);
}

int cli_parse_double(const char *cmd, const char *option, const char *value, double *out)
{
    char *end;
    errno = 0;
    double x = strtod(value, &end);
    if (end == value || *end != '\0' || errno == ERANGE || !isfinite(x)) {
        cli_usage_error(cmd, "option %s: '%s' is not a finite number", option, value);
        return 0;
    }
    *out = x;
    return 1;
}

int cli_parse_count(const char *cmd, const char *option, const char *value, unsigned long *out)
{
    char *end;
    errno = 0;
    if (value[0] == '-' || value[0] == '+') {
        cli_usage_error(cmd, "option %s: '%s' is not a non-negative whole number", option, value);
        return 0;
    }
    unsigned long x = strtoul(value, &end, 10);
    if (end == value || *end != '\0' || errno == ERANGE) {
        cli_usage_error(cmd, "option %s: '%s' is not a non-negative whole number", option, value);
        return 0;
    }
    *out = x;
    return 1;
}

int cli_parse_threads(const char *cmd, const char *value, int missing, unsigned long *out)
{
    if (missing) {
        cli_usage_error(cmd, "option --threads needs a number");
        return 0;
    }
    if (!cli_parse_count(cmd, "--threads", value, out)) return 0;
    if (*out < 1 || *out > 1024) {
        cli_usage_error(cmd, "option --threads: '%s' must be a whole number from 1 to 1024", value);
        return 0;
    }
    return 1;
}

const char *cli_option_value(int argc, char **argv, int *i, const char *name, int *missing)
{
    size_t n = strlen(name);
    const char *a = argv[*i];
    *missing = 0;
    if (strncmp(a, name, n) != 0) return NULL;
    if (a[n] == '=') return a + n + 1;
    if (a[n] != '\0') return NULL;
    /* "--out --quiet": the next word is another option, not this one's value. */
    if (*i + 1 >= argc || strncmp(argv[*i + 1], "--", 2) == 0) {
        *missing = 1;
        return NULL;
    }
    *i += 1;
    return argv[*i];
}
