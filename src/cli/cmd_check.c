/* bandlink check STUDY.json: validate the study, the trial table and every recording window (band power
 * is computed but not written); print a summary on stdout and warnings on stderr. */
#include "signal/power.h"
#include "design/study.h"
#include "design/trials.h"
#include "cli_common.h"
#include "commands.h"

#include <stdlib.h>
#include <string.h>

static void help(void)
{
    printf("usage: bandlink check STUDY.json [--threads N] [--quiet]\n\n"
           "Validates the study file, the trial table and every recording window without fitting, and prints a\n"
           "summary: participants, trials kept and excluded by reason, recordings (rate, channels, duration,\n"
           "format), Welch settings, frequency resolution and bins per band, models. Exit 0 when everything is\n"
           "usable, 2 with a message naming the culprit otherwise.\n");
}

int cmd_check(int argc, char **argv)
{
    const char *study_path = NULL;
    unsigned long threads = 0;
    for (int i = 1; i < argc; i++) {
        int missing;
        const char *v;
        if (strcmp(argv[i], "--help") == 0 || strcmp(argv[i], "-h") == 0) {
            help();
            return CLI_EXIT_OK;
        } else if (strcmp(argv[i], "--quiet") == 0) {
            cli_quiet = 1;
        } else if ((v = cli_option_value(argc, argv, &i, "--threads", &missing)) || missing) {
            if (!cli_parse_threads("check", v, missing, &threads)) return CLI_EXIT_USAGE;
        } else if (argv[i][0] == '-' && argv[i][1]) {
            return cli_usage_error("check", "unknown option '%s'", argv[i]);
        } else if (!study_path) {
            study_path = argv[i];
        } else {
            return cli_usage_error("check", "unexpected argument '%s' (one study file only)", argv[i]);
        }
    }
    if (!study_path) return cli_usage_error("check", "missing the study file");

    bl_error err = {0};
    bl_warnings warn = {0};
    bl_study *study = NULL;
    bl_trials *trials = NULL;
    bl_power_result *res = NULL;
    int code = CLI_EXIT_OK;
    if (bl_study_load(study_path, &study, &err)) goto fail;
    if (bl_trials_load(study, &trials, &warn, &err)) goto fail;
    if (study->has_power && bl_power_compute(study, trials, (int)threads, &res, &warn, &err)) goto fail;
    char *summary = NULL;
    if (bl_check_summary(study, trials, res, &summary, &err)) goto fail;
    if (!cli_quiet) fputs(summary, stdout);
    free(summary);
    if (!cli_quiet) printf("warnings     %zu\n", warn.count);
    cli_print_warnings(&warn);
    goto done;
fail:
    cli_print_warnings(&warn);
    code = cli_fail(&err);
done:
    bl_power_result_destroy(res);
    bl_trials_destroy(trials);
    bl_study_destroy(study);
    bl_warnings_clear(&warn);
    return code;
}
