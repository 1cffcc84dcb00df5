/* Scaling with the number of trials, as ratios to a reference run of the same program on 10x fewer
 * trials in the same run (never timed assertions). Linear work gives a time ratio near 10, n log n a
 * little more, quadratic work 100.
 *  fit:   `bandlink run` on a trial table without recordings (N trials; default 1,000,000 vs 100,000):
 *         wall seconds per stage from fits.json's provenance, and peak resident size of the process.
 *  power: `bandlink power` at 20 kHz with 1 s windows and 1 s Welch segments (10,001 frequency bins;
 *         default 100,000 vs 10,000 trials cycling over one 60 s 16-bit WAV): wall time and peak
 *         resident size. Keeping every trial's spectrum would cost 80 kB a trial (8 GB at 100,000).
 * Data: behaviour drawn with the engine's exact sampler (threshold rises with a regressor x); the
 * recording is Gaussian noise. Invented, only for timing.
 * usage: bench-scale BANDLINK [fit N | power N | both N_FIT N_POWER]   (default: both 1000000 100000)
 *        BL_BENCH_KEEP=1 keeps the generated folders. */
#define _DEFAULT_SOURCE /* wait4 */
#include "engine/wiener_sample.h"
#include "bandlink/wiener.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/time.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

/* Runs argv quietly; wall seconds, CPU seconds (user + system) and peak RSS (MiB) of that child alone
 * (wait4). CPU time is what to compare on a loaded machine. */
static int run_child(char *const *argv, double *seconds, double *cpu, double *peak_mib)
{
    fflush(stdout); /* or the child would write the parent's buffered lines again */
    fflush(stderr);
    double t0 = now();
    pid_t pid = fork();
    if (pid < 0) return 0;
    if (pid == 0) {
        if (!freopen("/dev/null", "w", stdout)) _exit(127);
        execv(argv[0], argv);
        _exit(127);
    }
    int status = 0;
    struct rusage ru;
    if (wait4(pid, &status, 0, &ru) != pid) return 0;
    *seconds = now() - t0;
    *peak_mib = (double)ru.ru_maxrss / 1024.0;
    *cpu = (double)ru.ru_utime.tv_sec + 1e-6 * (double)ru.ru_utime.tv_usec + (double)ru.ru_stime.tv_sec +
           1e-6 * (double)ru.ru_stime.tv_usec;
    return WIFEXITED(status) && WEXITSTATUS(status) == 0;
}

static int write_fit_study(const char *dir, long n)
{
    char path[600];
    snprintf(path, sizeof path, "%s/trials.csv", dir);
    FILE *f = fopen(path, "w");
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    if (!f || !rng) return 0;
    gsl_rng_set(rng, 20261202);
    fprintf(f, "participant,trial,x,rt,correct\n");
    for (long i = 0; i < n; i++) {
        double x = gsl_ran_gaussian(rng, 1);
        bl_wiener_params p;
        bl_wiener_params_default(&p);
        p.value[BL_THRESHOLD] = 1.3 + 0.1 * x;
        p.value[BL_DRIFT] = 1.2;
        p.value[BL_NONDECISION] = 0.3;
        p.value[BL_START] = 0.5;
        int up;
        double rt;
        if (bl_wiener_sample(&p, rng, &up, &rt, NULL) != BL_OK) return 0;
        fprintf(f, "p%ld,%ld,%.6f,%.4f,%d\n", i % 20 + 1, i / 20 + 1, x, rt, up);
    }
    gsl_rng_free(rng);
    if (fclose(f)) return 0;
    snprintf(path, sizeof path, "%s/study.json", dir);
    f = fopen(path, "w");
    if (!f) return 0;
    fputs("{\"trials\": {\"file\": \"trials.csv\", \"participant\": \"participant\", \"rt\": \"rt\", \"response\": "
          "\"correct\", \"upper\": [\"1\"]},\n \"fit\": {\"participants\": \"pooled\", \"starts\": 1},\n"
          " \"models\": [{\"name\": \"baseline\"}, {\"name\": \"x-threshold\", \"extends\": \"baseline\", "
          "\"threshold\": {\"slopes\": {\"x\": []}}}]}\n",
          f);
    return fclose(f) == 0;
}

static int write_power_study(const char *dir, long n)
{
    enum { RATE = 20000, SECONDS = 60 };
    char path[600];
    snprintf(path, sizeof path, "%s/p1.wav", dir);
    FILE *f = fopen(path, "wb");
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    if (!f || !rng) return 0;
    gsl_rng_set(rng, 7);
    /* RIFF/WAVE header, 16-bit PCM mono (Microsoft/IBM 1991, Multimedia Programming Interface 1.0) */
    uint32_t data = (uint32_t)RATE * SECONDS * 2;
    unsigned char h[44];
    memcpy(h, "RIFF", 4);
    uint32_t v32 = 36 + data;
    memcpy(h + 4, &v32, 4);
    memcpy(h + 8, "WAVEfmt ", 8);
    v32 = 16;
    memcpy(h + 16, &v32, 4);
    uint16_t fmt[2] = {1, 1};
    memcpy(h + 20, fmt, 4);
    v32 = RATE;
    memcpy(h + 24, &v32, 4);
    v32 = RATE * 2;
    memcpy(h + 28, &v32, 4);
    uint16_t align_bits[2] = {2, 16};
    memcpy(h + 32, align_bits, 4);
    memcpy(h + 36, "data", 4);
    memcpy(h + 40, &data, 4);
    fwrite(h, 1, sizeof h, f);
    for (long i = 0; i < (long)RATE * SECONDS; i++) {
        int16_t s = (int16_t)(3000 * gsl_ran_gaussian_ziggurat(rng, 1));
        fwrite(&s, 2, 1, f);
    }
    gsl_rng_free(rng);
    if (fclose(f)) return 0;
    snprintf(path, sizeof path, "%s/trials.csv", dir);
    if (!(f = fopen(path, "w"))) return 0;
    fprintf(f, "participant,onset,rt,correct\n");
    for (long i = 0; i < n; i++) /* windows overlap: trials cycle over the recording */
        fprintf(f, "p%ld,%.4f,%.3f,%ld\n", i % 10 + 1, 1.5 + (double)((i * 37) % 5600) / 100.0,
                0.4 + 0.001 * (double)(i % 300), i % 2);
    if (fclose(f)) return 0;
    snprintf(path, sizeof path, "%s/study.json", dir);
    if (!(f = fopen(path, "w"))) return 0;
    fputs("{\"trials\": {\"file\": \"trials.csv\", \"participant\": \"participant\", \"rt\": \"rt\", \"response\": "
          "\"correct\", \"upper\": [\"1\"]},\n \"recordings\": {\"file\": \"p1.wav\", \"onset\": \"onset\", \"unit\": "
          "\"uV\", \"gain\": 1000},\n \"power\": {\"window\": {\"align\": \"onset\", \"from\": -1.0, \"to\": 0.0}, "
          "\"segment\": 1.0, \"bands\": {\"theta\": [4, 10], \"gamma\": [60, 200]}},\n"
          " \"models\": [{\"name\": \"baseline\"}]}\n",
          f);
    return fclose(f) == 0;
}

/* "stage": seconds from fits.json's provenance (stage_seconds), NAN when absent. */
static double stage_seconds(const char *fits, const char *stage)
{
    FILE *f = fopen(fits, "rb");
    if (!f) return NAN;
    static char buf[1 << 20];
    size_t n = fread(buf, 1, sizeof buf - 1, f);
    fclose(f);
    buf[n] = '\0';
    const char *s = strstr(buf, "\"stage_seconds\"");
    char key[64];
    snprintf(key, sizeof key, "\"%s\":", stage);
    const char *k = s ? strstr(s, key) : NULL;
    return k ? strtod(k + strlen(key), NULL) : NAN;
}

typedef struct {
    double wall, cpu, peak, stage[6];
} measure;

static const char *stages[6] = {"setup", "power", "fits", "goodness", "figures", "report"};

static int measure_run(const char *bandlink, const char *root, const char *kind, long n, measure *m)
{
    char dir[512], study[600], out[600], fits[700];
    snprintf(dir, sizeof dir, "%s/%s-%ld", root, kind, n);
    char cmd[600];
    snprintf(cmd, sizeof cmd, "mkdir -p '%s'", dir);
    if (system(cmd) != 0) return 0;
    int fit = strcmp(kind, "fit") == 0;
    fprintf(stderr, "  writing %s data, %ld trials ...\n", kind, n);
    if (!(fit ? write_fit_study(dir, n) : write_power_study(dir, n))) return 0;
    snprintf(study, sizeof study, "%s/study.json", dir);
    snprintf(out, sizeof out, "%s/out", dir);
    char *argv[] = {(char *)bandlink, fit ? "run" : "power", study, "--out", out, "--threads", "1", "--quiet", NULL};
    fprintf(stderr, "  bandlink %s on %ld trials ...\n", argv[1], n);
    if (!run_child(argv, &m->wall, &m->cpu, &m->peak)) return 0;
    snprintf(fits, sizeof fits, "%s/fits.json", out);
    for (int s = 0; s < 6; s++) m->stage[s] = fit ? stage_seconds(fits, stages[s]) : NAN;
    return 1;
}

static int bench(const char *bandlink, const char *root, const char *kind, long n)
{
    measure ref, big;
    long nref = n / 10 > 0 ? n / 10 : 1;
    printf("%s: %ld trials against a reference of %ld trials (1 thread)\n", kind, n, nref);
    if (!measure_run(bandlink, root, kind, nref, &ref) || !measure_run(bandlink, root, kind, n, &big)) {
        printf("  FAILED to run bandlink %s\n", kind);
        return 0;
    }
    printf("  %-10s %12s %12s %8s\n", "", "reference", "large", "ratio");
    printf("  %-10s %10.2f s %10.2f s %8.1f   (linear: 10, quadratic: 100)\n", "wall", ref.wall, big.wall,
           big.wall / ref.wall);
    printf("  %-10s %10.2f s %10.2f s %8.1f\n", "CPU", ref.cpu, big.cpu, big.cpu / ref.cpu);
    for (int s = 0; s < 6; s++)
        if (!isnan(big.stage[s]) && big.stage[s] >= 0.01)
            printf("  %-10s %10.2f s %10.2f s %8.1f\n", stages[s], ref.stage[s], big.stage[s],
                   big.stage[s] / fmax(ref.stage[s], 1e-3));
    printf("  %-10s %8.1f MiB %8.1f MiB %8.2f   (memory per trial: %.2f kB)\n", "peak RSS", ref.peak, big.peak,
           big.peak / ref.peak, (big.peak - ref.peak) * 1024.0 / (double)(n - nref));
    return 1;
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        fprintf(stderr, "usage: bench-scale BANDLINK [fit N | power N | both N_FIT N_POWER]\n");
        return 2;
    }
    gsl_set_error_handler_off();
    const char *mode = argc > 2 ? argv[2] : "both";
    long n_fit = 1000000, n_power = 100000;
    if (strcmp(mode, "fit") == 0 && argc > 3) n_fit = atol(argv[3]);
    if (strcmp(mode, "power") == 0 && argc > 3) n_power = atol(argv[3]);
    if (strcmp(mode, "both") == 0 && argc > 4) n_fit = atol(argv[3]), n_power = atol(argv[4]);
    char root[] = "/tmp/bl-bench-scale-XXXXXX";
    if (!mkdtemp(root)) return 1;
    int ok = 1;
    if (strcmp(mode, "power") != 0) ok &= bench(argv[1], root, "fit", n_fit);
    if (strcmp(mode, "fit") != 0) ok &= bench(argv[1], root, "power", n_power);
    if (!getenv("BL_BENCH_KEEP")) {
        char cmd[600];
        snprintf(cmd, sizeof cmd, "rm -rf '%s'", root);
        if (system(cmd) != 0) ok = 0;
    } else {
        printf("kept %s\n", root);
    }
    return ok ? 0 : 1;
}
