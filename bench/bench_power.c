/* Band-power throughput on a realistic study, against scipy.signal.welch in the same run.
 *
 * Study: 20 participants x 500 trials, one FLAC file per participant (4 channels, 16-bit, 2 kHz, 1.25 s per
 * trial), montage ["1-2", "3-4"] (all 4 channels read), 1 s windows (2000 samples), Welch segment 0.5 s
 * (nperseg 1000, 50 % overlap, 3 segments), 4 bands. The files are generated in a temporary folder here.
 * Measured: bl_power_compute with 1 thread and with all threads (FLAC seek + decode, montage, Welch, bands,
 * standardize). Reference: bench_power_scipy.py doing the same per trial in Python (soundfile read of the
 * window + montage + scipy.signal.welch + band sums), and scipy.signal.welch alone on the in-memory windows
 * (per trial, and vectorised over all trials at once), on the same files in the same run.
 * usage: bench-power SCIPY_SCRIPT [PARTICIPANTS TRIALS]
 */
#include "signal/power.h"
#include "signal/spectrum.h"
#include "signal/trace.h"
#include "design/study.h"
#include "design/trials.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <sndfile.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static int make_study(const char *dir, int np, int nt)
{
    enum { FS = 2000, CH = 4 };
    const double spacing = 1.25;
    size_t frames = (size_t)((nt * spacing + 2.0) * FS);
    double *x = malloc(frames * CH * sizeof *x);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    char path[512];
    snprintf(path, sizeof path, "%s/trials.csv", dir);
    FILE *tf = fopen(path, "w");
    if (!x || !rng || !tf) return 0;
    fprintf(tf, "animal,trial,onset,rt,correct\n");
    for (int p = 0; p < np; p++) {
        gsl_rng_set(rng, 1000 + (unsigned long)p);
        /* a random walk plus 8 Hz and 25 Hz rhythms of trial-varying amplitude, small enough for FLAC to compress */
        double walk = 0;
        for (size_t i = 0; i < frames; i++) {
            walk = 0.995 * walk + gsl_ran_gaussian(rng, 0.002);
            double t = (double)i / FS;
            double a8 = 0.01 * (1 + 0.5 * sin(0.37 * t)), a25 = 0.004 * (1 + 0.5 * cos(0.23 * t));
            for (int c = 0; c < CH; c++)
                x[i * CH + (size_t)c] = walk + (c % 2 ? 0 : a8 * sin(2 * M_PI * 8 * t) + a25 * sin(2 * M_PI * 25 * t)) +
                                        gsl_ran_gaussian(rng, 0.003);
        }
        SF_INFO si = {0};
        si.samplerate = FS;
        si.channels = CH;
        si.format = SF_FORMAT_FLAC | SF_FORMAT_PCM_16;
        snprintf(path, sizeof path, "%s/p%02d.flac", dir, p);
        SNDFILE *f = sf_open(path, SFM_WRITE, &si);
        if (!f || sf_writef_double(f, x, (sf_count_t)frames) != (sf_count_t)frames) return 0;
        sf_close(f);
        for (int k = 0; k < nt; k++)
            fprintf(tf, "p%02d,%d,%.4f,%.3f,%d\n", p, k + 1, 1.5 + spacing * k, 0.4 + 0.5 * gsl_rng_uniform(rng),
                    gsl_rng_uniform(rng) < 0.75);
    }
    fclose(tf);
    snprintf(path, sizeof path, "%s/study.json", dir);
    FILE *sf = fopen(path, "w");
    fprintf(sf, "{\"trials\": {\"file\": \"trials.csv\", \"participant\": \"animal\", \"rt\": \"rt\", \"response\": "
                "\"correct\", \"upper\": [1]},\n"
                " \"recordings\": {\"file\": \"{animal}.flac\", \"onset\": \"onset\", \"gain\": 1000, \"unit\": "
                "\"uV\", \"channels\": [\"1-2\", \"3-4\"]},\n"
                " \"power\": {\"window\": {\"from\": -1.0, \"to\": 0.0}, \"segment\": 0.5, \"overlap\": 0.5,\n"
                "   \"bands\": {\"theta\": [4, 10], \"alpha\": [8, 13], \"beta\": [15, 30], \"gamma\": [30, 80]},\n"
                "   \"scale\": \"log10\", \"standardize\": \"participant\"}}\n");
    fclose(sf);
    free(x);
    gsl_rng_free(rng);
    return 1;
}

static double run(const bl_study *s, int threads, bl_power_result **keep)
{
    bl_error err = {0};
    bl_trials *t = NULL;
    bl_power_result *r = NULL;
    double best = INFINITY;
    for (int rep = 0; rep < 3; rep++) {
        if (bl_trials_load(s, &t, NULL, &err)) {
            fprintf(stderr, "bench_power: %s\n", err.message);
            exit(1);
        }
        double t0 = now();
        if (bl_power_compute(s, t, threads, &r, NULL, &err)) {
            fprintf(stderr, "bench_power: %s\n", err.message);
            exit(1);
        }
        double dt = now() - t0;
        if (dt < best) best = dt;
        bl_trials_destroy(t);
        if (keep && rep == 0) *keep = r;
        else bl_power_result_destroy(r);
    }
    return best;
}

/* Welch + band sums alone on in-memory windows (the same windows, montage applied), 1 thread. */
static double welch_only(const char *dir, int np, int nt)
{
    enum { L = 2000 };
    double *w = malloc((size_t)np * nt * L * sizeof *w), *raw = malloc(L * 4 * sizeof *raw);
    bl_error err = {0};
    const char *spec[] = {"1-2", "3-4"};
    bl_montage *m = NULL;
    bl_montage_parse(spec, 2, "channels", &m, &err);
    for (int p = 0; p < np; p++) {
        char path[600];
        snprintf(path, sizeof path, "%s/p%02d.flac", dir, p);
        bl_trace *t = NULL;
        if (bl_trace_open(path, NAN, &t, &err)) exit(1);
        for (int k = 0; k < nt; k++) {
            int64_t s = llround((1.5 + 1.25 * k) * 2000) - 2000;
            if (bl_trace_read(t, s, L, raw, &err)) exit(1);
            bl_montage_apply(m, raw, L, 4, 1000, w + ((size_t)p * nt + k) * L);
        }
        bl_trace_close(t);
    }
    bl_montage_destroy(m);
    bl_welch_plan *plan = NULL;
    bl_welch_work *work = NULL;
    bl_welch_plan_create(2000, 1000, 500, 0, BL_DETREND_MEAN, BL_WELCH_MEAN, BL_WELCH_DENSITY, &plan, &err);
    bl_welch_work_create(plan, L, &work, &err);
    double psd[501], lo[4] = {4, 8, 15, 30}, hi[4] = {10, 13, 30, 80}, sink = 0, best = INFINITY;
    for (int rep = 0; rep < 3; rep++) {
        double t0 = now();
        for (size_t i = 0; i < (size_t)np * nt; i++) {
            bl_welch_compute(plan, work, w + i * L, L, psd, &err);
            for (int b = 0; b < 4; b++) {
                size_t a, z;
                bl_band_bins(2.0, 501, lo[b], hi[b], &a, &z);
                sink += bl_band_power(psd, 2.0, a, z, NULL);
            }
        }
        double dt = now() - t0;
        if (dt < best) best = dt;
    }
    if (!(sink > 0)) printf("unexpected band power sum\n");
    bl_welch_work_destroy(work);
    bl_welch_plan_destroy(plan);
    free(w);
    free(raw);
    return best;
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    if (argc < 2) {
        fprintf(stderr, "usage: bench-power SCIPY_SCRIPT [PARTICIPANTS TRIALS]\n");
        return 2;
    }
    int np = argc > 3 ? atoi(argv[2]) : 20, nt = argc > 3 ? atoi(argv[3]) : 500;
    char dir[] = "/tmp/bl_bench_power_XXXXXX";
    if (!mkdtemp(dir)) return 1;
    double t0 = now();
    if (!make_study(dir, np, nt)) {
        fprintf(stderr, "bench_power: could not write the study in %s\n", dir);
        return 1;
    }
    printf("study: %d participants x %d trials, 4 channels, 2 kHz FLAC, 1 s windows (generated in %.1f s)\n", np, nt,
           now() - t0);
    char path[600];
    snprintf(path, sizeof path, "%s/study.json", dir);
    bl_study *s = NULL;
    bl_error err = {0};
    if (bl_study_load(path, &s, &err)) {
        fprintf(stderr, "bench_power: %s\n", err.message);
        return 1;
    }
    bl_power_result *r = NULL;
    double n = (double)np * nt;
    double t1 = run(s, 1, &r);
    double tn = run(s, 0, NULL);
    printf("bandlink  1 thread : %8.3f s  %9.0f trials/s\n", t1, n / t1);
    printf("bandlink  all cores: %8.3f s  %9.0f trials/s\n", tn, n / tn);
    double tw = welch_only(dir, np, nt);
    printf("bandlink  Welch + bands alone, in memory, 1 thread: %8.3f s  %9.0f trials/s\n", tw, n / tw);
    /* band power for the python side to compare against (sanity: same numbers) */
    snprintf(path, sizeof path, "%s/bandlink_theta.f64", dir);
    FILE *f = fopen(path, "wb");
    for (size_t i = 0; i < r->n_trials; i++) fwrite(&r->band_power[i * r->n_bands], sizeof(double), 1, f);
    fclose(f);
    bl_power_result_destroy(r);
    bl_study_destroy(s);

    char cmd[2048];
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 '%s' '%s' %d %d", argv[1], dir, np, nt);
    FILE *py = popen(cmd, "r");
    double sp_full = NAN, sp_loop = NAN, sp_vec = NAN, maxrel = NAN;
    char line[512];
    while (py && fgets(line, sizeof line, py)) {
        fputs(line, stdout);
        sscanf(line, "RESULT %lf %lf %lf %lf", &sp_full, &sp_loop, &sp_vec, &maxrel);
    }
    int prc = py ? pclose(py) : -1;
    if (prc != 0 || isnan(sp_full)) {
        printf("scipy reference unavailable (python3 with scipy, numpy, soundfile needed): no ratios\n");
    } else {
        printf("agreement: theta band power, worst relative difference to scipy %.2e\n", maxrel);
        printf("ratio (trials/s, bandlink 1 thread / scipy):  %.2fx vs the same pipeline in Python, %.2fx vs welch "
               "alone per trial, %.2fx vs welch alone vectorised\n",
               sp_full / t1, sp_loop / t1, sp_vec / t1);
        printf("ratio (trials/s, Welch + bands alone in memory, bandlink / scipy): %.2fx per trial, %.2fx vs scipy "
               "vectorised\n",
               sp_loop / tw, sp_vec / tw);
        printf("ratio (trials/s, bandlink all cores / scipy): %.2fx vs the same pipeline in Python, %.2fx vs welch "
               "alone per trial, %.2fx vs welch alone vectorised\n",
               sp_full / tn, sp_loop / tn, sp_vec / tn);
    }
    if (getenv("BL_BENCH_KEEP")) { /* keep the generated study for profiling */
        printf("kept %s\n", dir);
        return 0;
    }
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    if (system(cmd) != 0) fprintf(stderr, "bench_power: could not remove %s\n", dir);
    return 0;
}
