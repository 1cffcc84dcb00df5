/* Wall time of the whole demo: `bandlink simulate` of a scenario, then `bandlink run` of the study it
 * writes, with the time of every stage and its share of the run (ratios to the total measured in the same
 * run), the simulate+run total against the 20 s target of issue 5, and the power stage as a multiple of
 * the time to read every input byte once (SHA-256 pass over the recordings; an I/O-bound reference).
 * Usage: bench-pipeline [--scenario PATH] [--threads N] [--repeat R]   (default: demo/scenario.json,
 * all cores, best of 1). Run from the source root or give --scenario. */
#include "analysis/pipeline.h"
#include "core/sha256.h"
#include "analysis/simulate.h"

#include <gsl/gsl_errno.h>
#include <dirent.h>
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

int main(int argc, char **argv)
{
    const char *scenario = "demo/scenario.json";
    int threads = 0, repeat = 1;
    for (int i = 1; i < argc; i++) {
        if (strcmp(argv[i], "--scenario") == 0 && i + 1 < argc) scenario = argv[++i];
        else if (strcmp(argv[i], "--threads") == 0 && i + 1 < argc) threads = atoi(argv[++i]);
        else if (strcmp(argv[i], "--repeat") == 0 && i + 1 < argc) repeat = atoi(argv[++i]);
        else {
            fprintf(stderr, "usage: bench-pipeline [--scenario PATH] [--threads N] [--repeat R]\n");
            return 2;
        }
    }
    gsl_set_error_handler_off();
    char dir[] = "/tmp/bandlink-bench-XXXXXX";
    if (!mkdtemp(dir)) return 1;
    char study_dir[256], study_path[300], results[300];
    snprintf(study_dir, sizeof study_dir, "%s/study", dir);
    snprintf(study_path, sizeof study_path, "%s/study.json", study_dir);
    snprintf(results, sizeof results, "%s/results", dir);
    bl_error err = {0};
    bl_warnings warn = {0};
    bl_scenario *sc = NULL;
    int rc = 1;
    double best_sim = 1e300, best_run = 1e300, best_read = 1e300, stage[BL_STAGE_COUNT] = {0};
    if (bl_scenario_load(scenario, &sc, &err) != BL_OK) goto out;
    for (int r = 0; r < repeat; r++) {
        bl_simulate_options so = {0};
        so.force = 1;
        so.threads = threads;
        double t0 = now();
        if (bl_simulate_write(sc, study_dir, &so, NULL, &warn, &err) != BL_OK) goto out;
        double t_sim = now() - t0;

        /* Reference: read every recording byte once (hash pass). */
        char rec[300];
        snprintf(rec, sizeof rec, "%s/recordings", study_dir);
        DIR *d = opendir(rec);
        struct dirent *e;
        t0 = now();
        while (d && (e = readdir(d))) {
            if (e->d_name[0] == '.') continue;
            char p[600], hex[BL_SHA256_HEX_SIZE];
            snprintf(p, sizeof p, "%s/%s", rec, e->d_name);
            bl_sha256_file(p, hex, NULL);
        }
        double t_read = now() - t0;
        if (d) closedir(d);

        bl_run_options ro;
        bl_run_options_default(&ro);
        ro.study_path = study_path;
        ro.out_dir = results;
        ro.threads = threads;
        ro.force = 1;
        bl_run_result res;
        t0 = now();
        if (bl_run(&ro, &res, &warn, &err) != BL_OK) goto out;
        double t_run = now() - t0;
        if (t_sim + t_run < best_sim + best_run) {
            best_sim = t_sim;
            best_run = t_run;
            for (int s = 0; s < BL_STAGE_COUNT; s++) stage[s] = res.stage_seconds[s];
        }
        if (t_read < best_read) best_read = t_read;
        bl_run_result_clear(&res);
        bl_warnings_clear(&warn);
    }
    printf("scenario: %s   threads: %d (0 = all cores)   best of %d\n", scenario, threads, repeat);
    printf("simulate %8.3f s\nrun      %8.3f s\n", best_sim, best_run);
    for (int s = 0; s < BL_STAGE_COUNT; s++)
        printf("  %-9s %8.3f s  %5.1f%% of the run\n", bl_stage_name(s), stage[s], 100.0 * stage[s] / best_run);
    printf("power stage / one read of every recording byte: %.1f x (read %.3f s)\n",
           best_read > 0 ? stage[BL_STAGE_POWER] / best_read : 0.0, best_read);
    printf("simulate + run: %.3f s = %.3f x the 20 s target (%s)\n", best_sim + best_run, (best_sim + best_run) / 20.0,
           best_sim + best_run < 20.0 ? "met" : "NOT met");
    rc = 0;
out:
    if (rc) fprintf(stderr, "bench-pipeline: %s\n", err.message);
    bl_scenario_destroy(sc);
    bl_warnings_clear(&warn);
    bl_remove_tree(dir, NULL);
    return rc;
}
