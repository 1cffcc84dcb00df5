/* bandlink power STUDY.json [--out DIR] [--force] [--threads N]: band power per trial -> power.csv. */
#include "core/output.h"
#include "signal/power.h"
#include "design/study.h"
#include "design/trials.h"
#include "cli_common.h"
#include "commands.h"

#include <errno.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

static void help(void)
{
    printf("usage: bandlink power STUDY.json [--out DIR] [--force] [--threads N] [--quiet]\n\n"
           "Computes Welch band power in each kept trial's window and writes DIR/power.csv: participant, trial,\n"
           "the trial table's columns, <band>_power (raw, unit^2) and <band> (scaled and standardized) per band,\n"
           "and artifact (empty, or why the trial was left out).\n\n"
           "  --out DIR     output folder (default: the study's \"output\", relative to the study file)\n"
           "  --force       overwrite an existing power.csv\n"
           "  --threads N   worker threads (default: all cores); results do not depend on N\n");
}

int cmd_power(int argc, char **argv)
{
    const char *study_path = NULL, *out_dir = NULL;
    int force = 0;
    unsigned long threads = 0;
    for (int i = 1; i < argc; i++) {
        int missing;
        const char *v;
        if (strcmp(argv[i], "--help") == 0 || strcmp(argv[i], "-h") == 0) {
            help();
            return CLI_EXIT_OK;
        } else if (strcmp(argv[i], "--force") == 0) {
            force = 1;
        } else if (strcmp(argv[i], "--quiet") == 0) {
            cli_quiet = 1;
        } else if ((v = cli_option_value(argc, argv, &i, "--out", &missing)) || missing) {
            if (missing) return cli_usage_error("power", "option --out needs a folder");
            out_dir = v;
        } else if ((v = cli_option_value(argc, argv, &i, "--threads", &missing)) || missing) {
            if (!cli_parse_threads("power", v, missing, &threads)) return CLI_EXIT_USAGE;
        } else if (argv[i][0] == '-' && argv[i][1]) {
            return cli_usage_error("power", "unknown option '%s'", argv[i]);
        } else if (!study_path) {
            study_path = argv[i];
        } else {
            return cli_usage_error("power", "unexpected argument '%s' (one study file only)", argv[i]);
        }
    }
    if (!study_path) return cli_usage_error("power", "missing the study file");

    bl_error err = {0};
    bl_warnings warn = {0};
    bl_study *study = NULL;
    bl_trials *trials = NULL;
    bl_power_result *res = NULL;
    char *path = NULL;
    int code = CLI_EXIT_OK;
    if (bl_study_load(study_path, &study, &err)) goto fail;
    if (!study->has_power) {
        bl_error_set(&err, BL_ERR_INPUT, "%s: the study has no \"power\" section, so there is no band power to compute",
                     study_path);
        goto fail;
    }
    const char *dir = out_dir ? out_dir : study->output;
    if (bl_path_join(dir, "power.csv", &path, NULL)) {
        bl_error_set(&err, BL_ERR_NOMEM, "out of memory");
        goto fail;
    }
    struct stat sb;
    if (!force && stat(path, &sb) == 0) {
        bl_error_set(&err, BL_ERR_EXISTS, "%s exists; use --force to overwrite it", path);
        goto fail;
    }
    cli_progress("reading trials");
    if (bl_trials_load(study, &trials, &warn, &err)) goto fail;
    cli_progress("computing band power for %zu trials", trials->n_kept);
    if (bl_power_compute(study, trials, (int)threads, &res, &warn, &err)) goto fail;
    if (bl_mkdir_p(dir, &err)) goto fail;
    if (bl_power_write_csv(study, trials, res, path, &err)) goto fail;
    cli_progress("%s", "");
    cli_print_warnings(&warn);
    if (!cli_quiet)
        printf("wrote %s: %zu trials, %zu kept, %zu excluded (%zu artifacts), %zu band%s\n", path, trials->n,
               trials->n_kept, trials->n - trials->n_kept, res->n_artifacts, res->n_bands, res->n_bands == 1 ? "" : "s");
    goto done;
fail:
    cli_progress("%s", "");
    cli_print_warnings(&warn);
    code = cli_fail(&err);
done:
    free(path);
    bl_power_result_destroy(res);
    bl_trials_destroy(trials);
    bl_study_destroy(study);
    bl_warnings_clear(&warn);
    return code;
}
