/* Speed of `bandlink scan` at the size the issue asks for: 30 frequencies x 20 windows x 2 parameters x
 * 1,000 permutations on 2,004 trials of 6 participants (a simulated study, theta bursts raising the
 * threshold). Prints the wall time of each part (null fit, multitaper power, statistics) and its share,
 * the total against the 60 s target, and the total as a multiple of a reference measured in the same run:
 * one fit of the null model by `bl_fit_study` (what a refit-per-cell scan would pay 1,200,000 times).
 * Usage: bench-scan [--threads N] [--permutations P]   (default 2 threads, 1000 permutations) */
#include "analysis/analysis_internal.h"
#include "bandlink/simulate.h"
#include "core/output.h"
#include "fit/fit.h"
#include "scan/scan.h"

#include <gsl/gsl_errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static const char *scenario =
    "{\"name\": \"scan benchmark\", \"seed\": 7,"
    " \"participants\": {\"column\": \"rat\", \"count\": 6, \"prefix\": \"rat\"}, \"trials_per_participant\": 334,"
    " \"conditions\": {\"context\": [\"rich\", \"lean\"]},"
    " \"stimulus\": {\"column\": \"tone\", \"levels\": [\"higher\", \"lower\"], \"choice_column\": \"choice\"},"
    " \"timing\": {\"first_onset\": 2.0, \"interval\": [2.5, 3.5], \"tail\": 3.0},"
    " \"recording\": {\"format\": \"flac\", \"rate\": 1000, \"contacts\": 2, \"channels\": [\"1-2\"], \"unit\": \"uV\","
    "   \"full_scale\": 5000, \"background\": {\"rms\": 30}},"
    " \"bursts\": {\"theta\": {\"frequency\": [5, 8], \"from\": -0.8, \"to\": -0.2, \"amplitude\": 25, "
    "\"variability\": 0.5,"
    "   \"contacts\": [1.0, 0.2]}},"
    " \"truth\": {\"threshold\": {\"intercept\": 1.4, \"slopes\": {\"theta\": 0.15}},"
    "   \"drift\": {\"per\": [\"context\"], \"intercept\": {\"rich\": 1.8, \"lean\": 1.0}}, \"nondecision\": "
    "{\"intercept\": 0.3}},"
    " \"study\": {\"keep\": {\"rt_min\": 0.15, \"rt_max\": 5.0},"
    "   \"power\": {\"window\": {\"align\": \"onset\", \"from\": -0.8, \"to\": -0.2}, \"segment\": 0.3, \"overlap\": "
    "0.5,"
    "     \"bands\": {\"theta\": [4, 9]}, \"scale\": \"log10\", \"standardize\": \"participant\"},"
    "   \"models\": [{\"name\": \"baseline\", \"drift\": {\"per\": [\"context\"]}},"
    "     {\"name\": \"theta-threshold\", \"extends\": \"baseline\", \"threshold\": {\"slopes\": {\"theta\": []}}}],"
    "   \"truth_model\": \"theta-threshold\"}}";

static const char *scan_block =
    ",\n\"scan\": {\"frequencies\": {\"from\": 3, \"to\": 45, \"count\": 30, \"spacing\": \"log\", \"bandwidth\": 4},"
    " \"windows\": {\"align\": \"onset\", \"from\": -1.2, \"to\": 0.44, \"length\": 0.5, \"step\": 0.06},"
    " \"parameters\": [\"threshold\", \"drift\"], \"null_model\": \"baseline\", \"permutations\": 1000}\n}\n";

static int fail(const bl_error *e)
{
    fprintf(stderr, "bench-scan: %s\n", e->message);
    return 1;
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    int threads = 2;
    size_t perms = 1000;
    for (int i = 1; i + 1 < argc; i += 2) {
        if (!strcmp(argv[i], "--threads")) threads = atoi(argv[i + 1]);
        else if (!strcmp(argv[i], "--permutations")) perms = (size_t)atol(argv[i + 1]);
    }
    char dir[] = "/tmp/bench-scan-XXXXXX";
    if (!mkdtemp(dir)) return 1;
    char study_dir[128], study_path[160];
    snprintf(study_dir, sizeof study_dir, "%s/study", dir);
    snprintf(study_path, sizeof study_path, "%s/study.json", study_dir);
    bl_error err = {0};
    bl_warnings warn = {0};
    bl_scenario *sc = NULL;
    bl_simulate_options so = {0, 0, 0, threads};
    if (bl_scenario_parse(scenario, "bench scenario", &sc, &err) ||
        bl_simulate_write(sc, study_dir, &so, NULL, &warn, &err))
        return fail(&err);
    bl_scenario_destroy(sc);
    /* append the scan block to the study file */
    FILE *f = fopen(study_path, "r+");
    if (!f || fseek(f, -1, SEEK_END)) return 1;
    long end = ftell(f);
    int c;
    while (end > 0 && (fseek(f, end, SEEK_SET), c = fgetc(f)) != '}') end--;
    fseek(f, end, SEEK_SET);
    fputs(scan_block, f);
    fclose(f);

    bl_analysis_options ao;
    bl_analysis_options_default(&ao);
    ao.threads = threads;
    ao.permutations = perms;
    bl_analysis *a = NULL;
    double t0 = now();
    if (bl_analysis_open(study_path, &ao, &a, &err) || bl_analysis_power(a, &err)) return fail(&err);
    double t1 = now();
    if (bl_analysis_scan(a, &err)) return fail(&err);
    double t2 = now();
    const bl_scan_result *r = a->scan;
    /* reference: one fit of the null model */
    bl_fit_options fo;
    bl_fit_options_default(&fo);
    fo.threads = threads;
    const char *only[1] = {"baseline"};
    fo.models = only;
    fo.n_models = 1;
    bl_fit_set *set = NULL;
    double t3 = now();
    if (bl_fit_study(a->study, a->trials, &fo, &set, &warn, &err)) return fail(&err);
    double ref = now() - t3;
    bl_fit_set_destroy(set);
    double scan = t2 - t1, total = t2 - t0;
    printf("scan of %zu frequencies x %zu windows x %zu tests, %zu permutations, %zu trials, %zu participants, %d "
           "threads\n",
           r->spec->n_freqs, r->spec->n_windows, r->n_tests, r->stats->permutations, r->n_trials, r->n_participants,
           threads);
    printf("  setup + band power (study)   %7.2f s\n", t1 - t0);
    printf("  null model fit               %7.2f s  %5.1f%% of the scan\n", r->seconds_null,
           100 * r->seconds_null / scan);
    printf("  multitaper power (cells)     %7.2f s  %5.1f%% of the scan\n", r->seconds_power,
           100 * r->seconds_power / scan);
    printf("  score statistics + perms     %7.2f s  %5.1f%% of the scan\n", r->seconds_stats,
           100 * r->seconds_stats / scan);
    printf("  scan total                   %7.2f s  (whole job %.2f s; target < 60 s)\n", scan, total);
    printf("  reference: one null fit      %7.2f s  -> the scan costs %.1f null fits for %zu cell tests x %zu "
           "permutations\n",
           ref, scan / ref, r->spec->n_freqs * r->spec->n_windows * r->n_tests, r->stats->permutations);
    bl_analysis_close(a);
    bl_warnings_clear(&warn);
    bl_remove_tree(dir, &err);
    return 0;
}
