/* Wall time of the whole demo: `bandlink simulate` of a scenario, then the whole run of the study it
 * writes through the analysis handle, with the time of every step and its share of the run (ratios to the
 * total measured in the same run), the simulate+run total against a 20 s target, and the power step as a
 * multiple of two references measured in the same run: reading every recording byte once (plain read())
 * and decoding every recording once (libsndfile to doubles, as the power step must).
 * Usage: bench-pipeline [--scenario PATH] [--threads N] [--repeat R]   (default: demo/scenario.json,
 * all cores, best of 1). Run from the source root or give --scenario. */
#include "bandlink/analysis.h"
#include "bandlink/simulate.h"
#include "core/output.h"

#include <fcntl.h>
#include <sndfile.h>

#include <gsl/gsl_errno.h>
#include <dirent.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

/* Reference 1: every byte of the file read once. */
static void read_plain(const char *path)
{
    static char buf[1 << 16];
    int fd = open(path, O_RDONLY);
    if (fd < 0) return;
    while (read(fd, buf, sizeof buf) > 0) {}
    close(fd);
}

/* Reference 2: every frame decoded once to doubles. */
static void decode(const char *path)
{
    SF_INFO info = {0};
    SNDFILE *f = sf_open(path, SFM_READ, &info);
    if (!f) return;
    double *buf = malloc(4096 * (size_t)info.channels * sizeof *buf);
    while (buf && sf_readf_double(f, buf, 4096) > 0) {}
    free(buf);
    sf_close(f);
}

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
    double best_sim = 1e300, best_run = 1e300, best_read = 1e300, best_decode = 1e300, stage[BL_STEP_COUNT] = {0};
    if (bl_scenario_load(scenario, &sc, &err) != BL_OK) goto out;
    for (int r = 0; r < repeat; r++) {
        bl_simulate_options so = {0};
        so.force = 1;
        so.threads = threads;
        double t0 = now();
        if (bl_simulate_write(sc, study_dir, &so, NULL, &warn, &err) != BL_OK) goto out;
        double t_sim = now() - t0;

        /* The references, interleaved with the runs. */
        char rec[300];
        snprintf(rec, sizeof rec, "%s/recordings", study_dir);
        double t_read = 0, t_decode = 0;
        for (int pass = 0; pass < 2; pass++) {
            DIR *d = opendir(rec);
            struct dirent *e;
            t0 = now();
            while (d && (e = readdir(d))) {
                if (e->d_name[0] == '.') continue;
                char p[600];
                snprintf(p, sizeof p, "%s/%s", rec, e->d_name);
                if (pass == 0) read_plain(p);
                else decode(p);
            }
            *(pass == 0 ? &t_read : &t_decode) = now() - t0;
            if (d) closedir(d);
        }

        bl_analysis_options ao;
        bl_analysis_options_default(&ao);
        ao.threads = threads;
        bl_analysis *a = NULL;
        t0 = now();
        bl_status st = bl_analysis_open(study_path, &ao, &a, &err);
        if (!st) st = bl_analysis_target(a, results, 1, &err);
        if (!st) st = bl_analysis_power(a, &err);
        if (!st) st = bl_analysis_fit(a, &err);
        if (!st) st = bl_analysis_write(a, BL_OUTPUT_ALL, "run", &err);
        double t_run = now() - t0;
        if (!st && t_sim + t_run < best_sim + best_run) {
            best_sim = t_sim;
            best_run = t_run;
            for (int s = 0; s < BL_STEP_COUNT; s++) stage[s] = bl_analysis_step_seconds(a, (bl_step)s);
        }
        bl_analysis_close(a);
        if (st) goto out;
        if (t_read < best_read) best_read = t_read;
        if (t_decode < best_decode) best_decode = t_decode;
        bl_warnings_clear(&warn);
    }
    printf("scenario: %s   threads: %d (0 = all cores)   best of %d\n", scenario, threads, repeat);
    printf("simulate %8.3f s\nrun      %8.3f s\n", best_sim, best_run);
    for (int s = 0; s < BL_STEP_COUNT; s++)
        printf("  %-9s %8.3f s  %5.1f%% of the run\n", bl_step_name((bl_step)s), stage[s], 100.0 * stage[s] / best_run);
    printf("power step / one plain read of every recording byte: %.1f x (read %.3f s)\n",
           best_read > 0 ? stage[BL_STEP_POWER] / best_read : 0.0, best_read);
    printf("power step / one decode of every recording: %.1f x (decode %.3f s)\n",
           best_decode > 0 ? stage[BL_STEP_POWER] / best_decode : 0.0, best_decode);
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
