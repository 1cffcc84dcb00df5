/* Welch PSD and band power: scipy.signal.welch fixtures, analytic signals, Parseval, helpers. */
#include "signal/spectrum.h"
#include "harness.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

static double *read_f64(const char *path, size_t *n)
{
    FILE *f = fopen(path, "rb");
    if (!f) return NULL;
    fseek(f, 0, SEEK_END);
    long sz = ftell(f);
    fseek(f, 0, SEEK_SET);
    double *x = malloc((size_t)sz + 8);
    *n = fread(x, sizeof(double), (size_t)sz / sizeof(double), f);
    fclose(f);
    return x;
}

static double *welch(const double *x, size_t n, double fs, size_t nperseg, size_t noverlap, size_t nfft, bl_detrend d,
                     bl_welch_average a, bl_welch_scaling s, size_t *nf)
{
    bl_welch_plan *p = NULL;
    bl_welch_work *w = NULL;
    bl_error err = {0};
    if (bl_welch_plan_create(fs, nperseg, noverlap, nfft, d, a, s, &p, &err) || bl_welch_work_create(p, n, &w, &err)) {
        printf("plan failed: %s\n", err.message);
        exit(1);
    }
    *nf = bl_welch_n_freqs(p);
    double *psd = malloc(*nf * sizeof *psd);
    if (bl_welch_compute(p, w, x, n, psd, &err)) {
        printf("welch failed: %s\n", err.message);
        exit(1);
    }
    bl_welch_work_destroy(w);
    bl_welch_plan_destroy(p);
    return psd;
}

/* Fixtures written by tests/reference/welch_fixtures.py from scipy 1.10.1 scipy.signal.welch. */
static void check_fixtures(const char *dir)
{
    char path[2048];
    snprintf(path, sizeof path, "%s/cases.txt", dir);
    FILE *f = fopen(path, "r");
    if (!check_true(f != NULL, "fixture list %s is readable", path)) return;
    char line[512];
    int cases = 0;
    while (fgets(line, sizeof line, f)) {
        if (line[0] == '#') continue;
        char name[64], det[16], avg[16], sc[16];
        size_t n, nperseg, noverlap, nfft;
        double fs;
        if (sscanf(line, "%63s %zu %lf %zu %zu %zu %15s %15s %15s", name, &n, &fs, &nperseg, &noverlap, &nfft, det, avg,
                   sc) != 9)
            continue;
        size_t nx = 0, np = 0, nf;
        snprintf(path, sizeof path, "%s/%s.x.f64", dir, name);
        double *x = read_f64(path, &nx);
        snprintf(path, sizeof path, "%s/%s.psd.f64", dir, name);
        double *want = read_f64(path, &np);
        if (!check_true(x && want && nx == n, "fixture %s: input and expected PSD read", name)) continue;
        bl_detrend d = strcmp(det, "constant") == 0 ? BL_DETREND_MEAN
                       : strcmp(det, "linear") == 0 ? BL_DETREND_LINEAR
                                                    : BL_DETREND_NONE;
        double *got = welch(x, n, fs, nperseg, noverlap, nfft, d,
                            strcmp(avg, "median") == 0 ? BL_WELCH_MEDIAN : BL_WELCH_MEAN,
                            strcmp(sc, "spectrum") == 0 ? BL_WELCH_SPECTRUM : BL_WELCH_DENSITY, &nf);
        check_true(nf == np, "fixture %s: %zu frequencies like scipy (%zu)", name, nf, np);
        /* criterion of the shared signal notes: |C - P| <= 1e-10 |P| + 1e-12 max(P) */
        double pmax = 0, worst = 0;
        for (size_t j = 0; j < np; j++) pmax = fmax(pmax, want[j]);
        int ok = nf == np;
        for (size_t j = 0; ok && j < np; j++) {
            double d2 = fabs(got[j] - want[j]), tol = 1e-10 * fabs(want[j]) + 1e-12 * pmax;
            if (d2 > tol) ok = 0;
            if (want[j] > 1e-6 * pmax) worst = fmax(worst, d2 / want[j]);
        }
        check_true(ok,
                   "fixture %s (%s, %s, %s, nperseg %zu, noverlap %zu, nfft %zu) matches scipy.signal.welch to 1e-10; "
                   "worst relative %.2g",
                   name, det, avg, sc, nperseg, noverlap, nfft, worst);
        cases++;
        free(x);
        free(want);
        free(got);
    }
    fclose(f);
    check_true(cases >= 12, "%d scipy fixtures checked", cases);
}

/* The scipy fixture folder: argv[1], $BL_SOURCE_ROOT, or beside this source file; __FILE__ is relative to the
 * build folder (where meson runs tests), so also try it relative to the folder above this executable. */
static char *fixture_dir;

static void fixture_dir_free(void) { free(fixture_dir); }

static void find_fixture_dir(int argc, char **argv)
{
    char dir[4096] = "";
    const char *root = getenv("BL_SOURCE_ROOT");
    char src[1024];
    snprintf(src, sizeof src, "%s", __FILE__);
    char *slash = strrchr(src, '/');
    if (slash) *slash = '\0';
    else snprintf(src, sizeof src, ".");
    if (argc > 1) snprintf(dir, sizeof dir, "%s", argv[1]);
    else if (root) snprintf(dir, sizeof dir, "%s/tests/fixtures/welch", root);
    else {
        snprintf(dir, sizeof dir, "%s/fixtures/welch", src);
        char exe[1024];
        ssize_t len = readlink("/proc/self/exe", exe, sizeof exe - 1);
        FILE *probe = fopen(dir, "r");
        if (probe) fclose(probe);
        else if (src[0] != '/' && len > 0) {
            exe[len] = '\0';
            for (int up = 0; up < 2; up++) { /* build/tests/test_spectrum -> build */
                char *e = strrchr(exe, '/');
                if (e) *e = '\0';
            }
            snprintf(dir, sizeof dir, "%s/%s/fixtures/welch", exe, src);
        }
    }
    fixture_dir = strdup(dir);
    atexit(fixture_dir_free);
}

HARNESS_CASE(scipy_fixtures) { check_fixtures(fixture_dir); }

HARNESS_CASE(bin_centred_sine)
{
    /* Analytic: A sin at a bin centre has total power A^2/2 (Parseval; the shared signal notes, table
     * "Analytic checks", observed 4.5000 with scipy 1.10.1). A = 3, fs = 1000, nperseg 1000 (df 1 Hz), 50 Hz. */
    {
        size_t n = 4000, nf;
        double *x = malloc(n * sizeof *x);
        for (size_t i = 0; i < n; i++) x[i] = 3.0 * sin(2 * M_PI * 50.0 * (double)i / 1000.0);
        double *p = welch(x, n, 1000, 1000, 500, 0, BL_DETREND_MEAN, BL_WELCH_MEAN, BL_WELCH_DENSITY, &nf);
        double total = bl_band_power(p, 1.0, 1, nf - 1, NULL);
        check_rel(total, 4.5, 1e-9, "bin-centred sine A=3: total power = A^2/2 = 4.5");
        size_t a, b;
        bl_band_bins(1.0, nf, 48, 52, &a, &b);
        check_rel(bl_band_power(p, 1.0, a, b, NULL), 4.5, 1e-9,
                  "band [48, 52] Hz holds the whole sine (Hann main lobe is +-1 bin)");
        free(p);
        /* spectrum scaling: the peak equals A^2/2 for a bin-centred sine (same table, 4.5000) */
        p = welch(x, n, 1000, 1000, 500, 0, BL_DETREND_MEAN, BL_WELCH_MEAN, BL_WELCH_SPECTRUM, &nf);
        check_rel(p[50], 4.5, 1e-9, "spectrum scaling: peak at 50 Hz = A^2/2");
        free(p);
        free(x);
    }
}

HARNESS_CASE(white_noise_and_parseval)
{
    /* White noise of variance s^2 has one-sided density 2 s^2 / fs (the shared signal notes: 0.015988 vs
     * 0.016 observed with scipy for its sigma^2 = 8). Here s = 2, fs = 1000: 0.008. */
    {
        gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
        gsl_rng_set(rng, 12345);
        size_t n = 1 << 17, nf;
        double *x = malloc(n * sizeof *x);
        double var = 0;
        for (size_t i = 0; i < n; i++) x[i] = gsl_ran_gaussian(rng, 2.0);
        for (size_t i = 0; i < n; i++) var += x[i] * x[i];
        var /= (double)n;
        double *p = welch(x, n, 1000, 256, 128, 0, BL_DETREND_NONE, BL_WELCH_MEAN, BL_WELCH_DENSITY, &nf);
        double mean = 0;
        for (size_t j = 1; j + 1 < nf; j++) mean += p[j];
        mean /= (double)(nf - 2);
        check_rel(mean, 2 * 4.0 / 1000, 0.01, "white noise sigma=2: interior density 2 sigma^2/fs = 0.008");
        /* Parseval for Welch (exact for any input; shared signal notes): sum P df = mean over segments of
         * sum (w y)^2 / sum w^2; without detrending and with K segments this is the windowed mean square. */
        size_t K = (n - 128) / 128;
        double want = 0, sw2 = 0;
        for (size_t k = 0; k < 256; k++) {
            double w = 0.5 - 0.5 * cos(2 * M_PI * (double)k / 256);
            sw2 += w * w;
        }
        for (size_t s = 0; s < K; s++)
            for (size_t k = 0; k < 256; k++) {
                double w = 0.5 - 0.5 * cos(2 * M_PI * (double)k / 256), y = x[s * 128 + k];
                want += w * w * y * y;
            }
        want /= (double)K * sw2;
        double df = 1000.0 / 256;
        check_rel(bl_band_power(p, df, 1, nf - 1, NULL) + p[0] * df, want, 1e-12,
                  "Parseval: sum P df = windowed mean square");
        check_rel(want, var, 0.02, "Parseval total close to the sample variance %.4f", var);
        free(p);
        free(x);
        gsl_rng_free(rng);
    }
}

HARNESS_CASE(band_bins)
{
    /* Band bins: closed band, DC never counts, edges on bins kept (shared signal conventions). */
    {
        size_t a, b, c;
        c = bl_band_bins(2.0, 251, 4, 10, &a, &b);
        check_true(c == 4 && a == 2 && b == 5, "band [4,10] at df 2 Hz: bins 2..5 (4, 6, 8, 10 Hz)");
        c = bl_band_bins(2.0, 251, 0, 3, &a, &b);
        check_true(c == 1 && a == 1 && b == 1, "band [0,3]: DC excluded, bin 1 only");
        c = bl_band_bins(4.0, 126, 5, 7, &a, &b);
        check_true(c == 0, "band [5,7] at df 4 Hz holds no bin");
        c = bl_band_bins(0.1, 5001, 0.3, 0.7, &a, &b);
        check_true(c == 5 && a == 3 && b == 7, "edges 0.3 and 0.7 Hz at df 0.1 Hz kept despite rounding (bins 3..7)");
        unsigned char mask[6] = {1, 1, 0, 1, 1, 1};
        double psd[6] = {100, 1, 2, 3, 4, 5};
        check_rel(bl_band_power(psd, 0.5, 1, 4, mask), 0.5 * (1 + 3 + 4), 1e-15, "masked bins leave the band sum");
    }
}

HARNESS_CASE(fft_sizes)
{
    /* Helpers: factorisation facts (arithmetic). */
    check_true(bl_largest_prime_factor(1024) == 2 && bl_largest_prime_factor(1000) == 5 &&
                   bl_largest_prime_factor(4099) == 4099 && bl_largest_prime_factor(1029) == 7,
               "largest prime factor of 1024, 1000, 4099 (prime), 1029 = 3*7^3");
    check_true(bl_next_fast_size(4099) == 4320 && bl_next_fast_size(257) == 270 && bl_next_fast_size(500) == 500,
               "next 2-3-5 size: 4099 -> 4320, 257 -> 270, 500 stays");
}

HARNESS_CASE(bad_settings)
{
    /* Bad settings are errors, not crashes */
    {
        bl_welch_plan *p = NULL;
        bl_error err = {0};
        check_true(bl_welch_plan_create(1000, 256, 256, 0, 0, 0, 0, &p, &err) == BL_ERR_INPUT && !p,
                   "noverlap = nperseg is rejected: %s", err.message);
        check_true(bl_welch_plan_create(1000, 256, 0, 128, 0, 0, 0, &p, &err) == BL_ERR_INPUT,
                   "nfft < nperseg is rejected: %s", err.message);
        bl_welch_plan_create(1000, 256, 128, 0, 0, 0, 0, &p, &err);
        bl_welch_work *w = NULL;
        bl_welch_work_create(p, 1000, &w, &err);
        double x[100] = {0}, psd[129];
        check_true(bl_welch_compute(p, w, x, 100, psd, &err) == BL_ERR_INPUT, "a signal shorter than a segment: %s",
                   err.message);
        bl_welch_work_destroy(w);
        bl_welch_plan_destroy(p);
    }
}

/* Usage: test_spectrum [FIXTURE_DIR] [--list] [--case NAME]... */
int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    int fixture_arg = argc > 1 && argv[1][0] != '-';
    find_fixture_dir(fixture_arg ? 2 : 1, argv);
    if (fixture_arg) {
        argv[1] = argv[0];
        argv++;
        argc--;
    }
    static const harness_case cases[] = {
        HARNESS_ENTRY(scipy_fixtures), HARNESS_ENTRY(bin_centred_sine), HARNESS_ENTRY(white_noise_and_parseval),
        HARNESS_ENTRY(band_bins),      HARNESS_ENTRY(fft_sizes),        HARNESS_ENTRY(bad_settings),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
