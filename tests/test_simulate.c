/* The simulator's building blocks: 1/f^alpha noise (spectral slope measured with Welch's method and a
 * least-squares line in log-log coordinates: the definition of a power-law spectrum, e.g. Timmer &
 * Koenig 1995, Astron. Astrophys. 300:707), exact RMS, determinism; the scenario parser's strictness
 * (every error names the key path). The end-to-end study (files, truth on the measured regressor,
 * bipolar removal of the common mode) is tested from the CLI in tests/cli/simulate.sh. */
#include "analysis/simulate.h"
#include "signal/spectrum.h"
#include "harness.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_fit.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* Slope of log10 PSD against log10 f over [f_lo, f_hi]. */
static double spectral_slope(const double *x, size_t n, double fs, double f_lo, double f_hi)
{
    bl_welch_plan *plan = NULL;
    bl_welch_work *work = NULL;
    bl_error err = {0};
    size_t nper = 2000;
    if (bl_welch_plan_create(fs, nper, nper / 2, 0, BL_DETREND_MEAN, BL_WELCH_MEAN, BL_WELCH_DENSITY, &plan, &err) !=
            BL_OK ||
        bl_welch_work_create(plan, n, &work, &err) != BL_OK)
        return NAN;
    size_t nf = bl_welch_n_freqs(plan);
    double df = bl_welch_df(plan);
    double *psd = malloc(nf * sizeof *psd), *lx = malloc(nf * sizeof *lx), *ly = malloc(nf * sizeof *ly);
    double slope = NAN;
    if (psd && lx && ly && bl_welch_compute(plan, work, x, n, psd, &err) == BL_OK) {
        size_t k = 0;
        for (size_t j = 1; j < nf; j++) {
            double f = (double)j * df;
            if (f < f_lo || f > f_hi) continue;
            lx[k] = log10(f);
            ly[k] = log10(psd[j]);
            k++;
        }
        double c0, c1, cov00, cov01, cov11, sumsq;
        if (gsl_fit_linear(lx, 1, ly, 1, k, &c0, &c1, &cov00, &cov01, &cov11, &sumsq) == 0) slope = c1;
    }
    free(psd);
    free(lx);
    free(ly);
    bl_welch_work_destroy(work);
    bl_welch_plan_destroy(plan);
    return slope;
}

/* Replace the first occurrence of `from` by `to` (new string). */
static char *replace(const char *s, const char *from, const char *to)
{
    const char *p = strstr(s, from);
    if (!p) return NULL;
    size_t a = (size_t)(p - s), nf = strlen(from), nt = strlen(to), n = strlen(s);
    char *r = malloc(n - nf + nt + 1);
    memcpy(r, s, a);
    memcpy(r + a, to, nt);
    memcpy(r + a + nt, p + nf, n - a - nf + 1);
    return r;
}

/* The edited scenario must fail with a message containing `want`. */
static void expect_error(const char *base, const char *from, const char *to, const char *want)
{
    char *s = replace(base, from, to);
    if (!check_true(s != NULL, "test setup: '%s' occurs in the demo scenario", from)) return;
    bl_scenario *sc = NULL;
    bl_error err = {0};
    bl_status st = bl_scenario_parse(s, "scenario.json", &sc, &err);
    check_true(st == BL_ERR_INPUT && strstr(err.message, want) != NULL, "edit '%s' -> '%s': error names '%s' (%s)",
               from, to, want, err.message);
    bl_scenario_destroy(sc);
    free(s);
}

/* Buffers and generator of the noise cases: two signals of 200 s at 1000 Hz; freed at exit. */
static const double fs = 1000.0;
static const size_t n = 200000;
static double *x, *y;
static gsl_rng *r;

static void noise_free(void)
{
    free(x);
    free(y);
    gsl_rng_free(r);
}

static int noise_buffers(void)
{
    if (!x) {
        x = malloc(n * sizeof *x);
        y = malloc(n * sizeof *y);
        r = gsl_rng_alloc(gsl_rng_mt19937);
        atexit(noise_free);
    }
    return check_true(x && y && r, "noise buffers allocated");
}

HARNESS_CASE(coloured_noise_spectra)
{
    if (!noise_buffers()) return;
    bl_error err = {0};
    const double alphas[] = {0.0, 1.0, 2.0};
    for (size_t a = 0; a < 3; a++) {
        gsl_rng_set(r, 11 + a);
        bl_status st = bl_simulate_colored_noise(x, n, fs, alphas[a], 1.0, 30.0, r, &err);
        check_true(st == BL_OK, "coloured noise alpha %g generated (%s)", alphas[a], err.message);
        double m = 0, ss = 0;
        for (size_t i = 0; i < n; i++) m += x[i];
        m /= (double)n;
        for (size_t i = 0; i < n; i++) ss += (x[i] - m) * (x[i] - m);
        check_abs(m, 0.0, 1e-9, "alpha %g: mean removed", alphas[a]);
        check_rel(sqrt(ss / (double)n), 30.0, 1e-12, "alpha %g: RMS scaled exactly to 30", alphas[a]);
        /* PSD ~ f^-alpha: slope of log PSD vs log f over 2..200 Hz (Welch estimate; tolerance from the
         * estimator's scatter over ~200 averaged segments, common practice). */
        double s = spectral_slope(x, n, fs, 2.0, 200.0);
        check_abs(s, -alphas[a], 0.08, "alpha %g: log-log PSD slope over 2-200 Hz", alphas[a]);
    }
}

HARNESS_CASE(flat_below_the_corner)
{
    if (!noise_buffers()) return;
    bl_error err = {0};
    /* Flat below the corner: with corner 20 Hz, the slope over 1..15 Hz is ~0. */
    gsl_rng_set(r, 5);
    bl_simulate_colored_noise(x, n, fs, 2.0, 20.0, 1.0, r, &err);
    check_abs(spectral_slope(x, n, fs, 1.0, 15.0), 0.0, 0.15, "alpha 2, corner 20 Hz: flat below the corner");
}

HARNESS_CASE(seeds)
{
    if (!noise_buffers()) return;
    bl_error err = {0};
    /* Same seed, same samples; another seed, other samples. */
    gsl_rng_set(r, 99);
    bl_simulate_colored_noise(x, 5000, fs, 1.0, 1.0, 1.0, r, &err);
    gsl_rng_set(r, 99);
    bl_simulate_colored_noise(y, 5000, fs, 1.0, 1.0, 1.0, r, &err);
    check_true(memcmp(x, y, 5000 * sizeof *x) == 0, "same seed: identical noise");
    gsl_rng_set(r, 100);
    bl_simulate_colored_noise(y, 5000, fs, 1.0, 1.0, 1.0, r, &err);
    check_true(memcmp(x, y, 5000 * sizeof *x) != 0, "other seed: different noise");
}

HARNESS_CASE(scenario_parsing)
{
    bl_error err = {0};
    /* Scenario parsing: the demo scenario is valid; edits produce errors naming the key path. */
    const char *root = getenv("BL_SOURCE_ROOT");
    char path[4096];
    if (root) {
        snprintf(path, sizeof path, "%s/demo/scenario.json", root);
    } else {
        /* Unit tests run without the CLI environment: find the source tree from this file's path. */
        snprintf(path, sizeof path, "%s", __FILE__);
        char *cut = strstr(path, "tests/test_simulate.c");
        if (cut) snprintf(cut, sizeof path - (size_t)(cut - path), "demo/scenario.json");
        else snprintf(path, sizeof path, "demo/scenario.json");
    }
    char *demo = harness_read_file(path);
    if (check_true(demo != NULL, "read %s", path)) {
        bl_scenario *sc = NULL;
        bl_status st = bl_scenario_parse(demo, path, &sc, &err);
        check_true(st == BL_OK, "demo scenario parses (%s)", st ? err.message : "ok");
        if (sc) check_true(bl_scenario_seed(sc) == 20261202UL, "demo scenario seed read");
        bl_scenario_destroy(sc);
        expect_error(demo, "\"amplitude\": 25", "\"amplitud\": 25", "bursts.theta.amplitud: unknown key");
        expect_error(demo, "\"seed\"", "\"sede\"", "sede: unknown key");
        expect_error(demo, "\"lean\": 1.3", "\"loan\": 1.3", "truth.threshold.intercept.lean: missing");
        expect_error(demo, "\"rich\": 0.25, \"lean\": 0.0", "\"rich\": 0.25, \"lean\": 0.0, \"poor\": 1",
                     "truth.threshold.slopes.theta.values.poor: unknown level");
        expect_error(demo, "\"format\": \"flac\"", "\"format\": \"mp3\"", "recording.format: 'mp3' is not one of");
        expect_error(demo, "\"rate\": 1000", "\"rate\": \"fast\"", "recording.rate: must be a number");
        expect_error(demo, "\"full_scale\": 5000,", "", "recording.full_scale: required key is missing");
        expect_error(demo, "\"by\": [\"context\"]", "\"by\": [\"season\"]",
                     "truth.threshold.slopes.theta.by: 'season' is not one of the scenario's conditions");
        expect_error(demo, "\"contacts\": [1.0, 0.2]", "\"contacts\": [1.0]",
                     "bursts.theta.contacts: must be an array of 2");
        expect_error(demo, "\"interval\": [2.5, 3.5]", "\"interval\": [3.5, 2.5]", "timing.interval");
        expect_error(demo, "\"truth_model\": \"theta-and-beta\"", "\"truth_modl\": \"x\"",
                     "study.truth_modl: unknown key");
        expect_error(demo, "\"prefix\": \"rat\"", "\"prefix\": \"rat\", \"labels\": [\"a\"]",
                     "participants: give either labels or count");
        expect_error(demo, "\"prefix\": \"rat\"", "\"prefix\": \"rat/\"",
                     "participants.prefix: 'rat/' contains one of");
        expect_error(demo, "{", "{,", "scenario.json:1:");
    }
    free(demo);
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(coloured_noise_spectra),
        HARNESS_ENTRY(flat_below_the_corner),
        HARNESS_ENTRY(seeds),
        HARNESS_ENTRY(scenario_parsing),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
