/* bandlink simulate SCENARIO.json --out DIR [--seed S] [--threads N] [--force] */
#include "bandlink/simulate.h"
#include "cli_common.h"
#include "commands.h"

#include <string.h>

static void help(FILE *out)
{
    fprintf(out, "usage: bandlink simulate SCENARIO.json --out DIR [--seed S] [--threads N] [--force] [--quiet]\n\n"
                 "Writes a complete synthetic study with known truth into DIR: recordings/ (continuous traces,\n"
                 "24-bit FLAC or WAV), trials.csv, study.json (analyses it), truth.json (the true coefficients on the\n"
                 "terms and levels of the fitted model; with a participant spread, each participant's too) and\n"
                 "truth_trials.csv (true parameters per trial). Behaviour is drawn from the band power the study\n"
                 "itself measures. Same seed, same files.\n\n"
                 "options:\n"
                 "  --out DIR      folder to create (required); an existing folder needs --force\n"
                 "  --seed S       random seed (default: the scenario's \"seed\")\n"
                 "  --threads N    threads for measuring band power (default: all cores)\n"
                 "  --force        replace DIR (only a folder bandlink wrote), once the new study is complete\n"
                 "  --quiet        no warnings or summary\n"
                 "  --help         this text\n\n"
                 "The scenario keys are described in docs/simulate.md; 'bash demo/run' uses demo/scenario.json.\n");
}

int cmd_simulate(int argc, char **argv)
{
    const char *scenario = NULL, *out = NULL;
    bl_simulate_options opt = {0};
    for (int i = 1; i < argc; i++) {
        const char *v;
        int missing = 0;
        if (strcmp(argv[i], "--help") == 0 || strcmp(argv[i], "-h") == 0) {
            help(stdout);
            return CLI_EXIT_OK;
        } else if (strcmp(argv[i], "--force") == 0) {
            opt.force = 1;
        } else if (strcmp(argv[i], "--quiet") == 0) {
            cli_quiet = 1;
        } else if ((v = cli_option_value(argc, argv, &i, "--out", &missing)) || missing) {
            if (missing) return cli_usage_error("simulate", "option --out needs a folder");
            out = v;
        } else if ((v = cli_option_value(argc, argv, &i, "--seed", &missing)) || missing) {
            unsigned long s;
            if (missing) return cli_usage_error("simulate", "option --seed needs a value");
            if (!cli_parse_count("simulate", "--seed", v, &s)) return CLI_EXIT_USAGE;
            if (s > 4294967295UL) return cli_usage_error("simulate", "option --seed: '%s' is above 4294967295", v);
            opt.has_seed = 1;
            opt.seed = s;
        } else if ((v = cli_option_value(argc, argv, &i, "--threads", &missing)) || missing) {
            unsigned long t;
            if (!cli_parse_threads("simulate", v, missing, &t)) return CLI_EXIT_USAGE;
            opt.threads = (int)t;
        } else if (argv[i][0] == '-' && argv[i][1] != '\0') {
            return cli_usage_error("simulate", "unknown option '%s'", argv[i]);
        } else if (!scenario) {
            scenario = argv[i];
        } else {
            return cli_usage_error("simulate", "unexpected argument '%s' (one scenario file)", argv[i]);
        }
    }
    if (!scenario) return cli_usage_error("simulate", "missing the scenario file");
    if (!out) return cli_usage_error("simulate", "missing --out DIR");

    bl_error err = {0};
    bl_warnings warn = {0};
    bl_scenario *sc = NULL;
    bl_simulate_summary sum = {0};
    bl_status st = bl_scenario_load(scenario, &sc, &err);
    if (st == BL_OK) {
        cli_progress("simulating %s ...", scenario);
        st = bl_simulate_write(sc, out, &opt, &sum, &warn, &err);
        cli_progress("%s", "");
    }
    bl_scenario_destroy(sc);
    cli_print_warnings(&warn);
    bl_warnings_clear(&warn);
    if (st != BL_OK) return cli_fail(&err);
    if (!cli_quiet) {
        printf("simulated %zu participants, %zu trials, %.0f s of recording (seed %lu)\n", sum.participants, sum.trials,
               sum.seconds, sum.seed);
        printf("upper-boundary (correct) share %.3f, mean RT %.3f s\n", sum.p_upper, sum.mean_rt);
        printf("study: %s/study.json   truth: %s/truth.json\n", out, out);
    }
    return CLI_EXIT_OK;
}
