/* Band power end to end through the library: window convention, analytic band power of a bin-centred sine
 * behind a bipolar montage, scale and standardize, artifacts, line-noise bins, thread invariance, errors,
 * and power.csv. Analytic values: a sine of amplitude A has power A^2/2 (Parseval; Hann main lobe +-1 bin). */
#include "signal/power.h"
#include "design/study.h"
#include "design/table.h"
#include "design/trials.h"
#include "harness.h"

#include <gsl/gsl_errno.h>
#include <sndfile.h>
#include <stdlib.h>
#include <string.h>

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

enum { FS = 1000, SECONDS = 30, NTR = 12 };
static char dir[] = "/tmp/bl_test_power_XXXXXX";
static double amp[2][NTR];

static void write_text(const char *name, const char *text)
{
    char p[256];
    snprintf(p, sizeof p, "%s/%s", dir, name);
    FILE *f = fopen(p, "w");
    fputs(text, f);
    fclose(f);
}

/* Participant file: channel 2 = common-mode signal, channel 1 = common + a 10 Hz sine of amplitude amp[p][k]
 * exactly in the samples of trial k's window [s - 1000, s), s = round(onset * FS), onset = 2 k + 2.0004. */
static void write_recording(int p, int format, const char *name)
{
    static double x[FS * SECONDS * 2];
    for (size_t i = 0; i < FS * SECONDS; i++) {
        double common = 0.3 * sin(0.0123 * (double)i) + 0.1 * cos(2 * M_PI * 50 * (double)i / FS);
        x[2 * i] = x[2 * i + 1] = common;
    }
    for (int k = 0; k < NTR; k++) {
        long s = lround((2.0 * k + 2.0004) * FS);
        for (long i = s - FS; i < s; i++) x[2 * i] += amp[p][k] * sin(2 * M_PI * 10 * (double)(i - (s - FS)) / FS);
        x[2 * s] += 0.5; /* spikes just outside the window: an off-by-one would see them */
        x[2 * (s - FS - 1)] += 0.5;
    }
    if (p == 0) { /* trial 4: flat; trial 5: a non-finite sample */
        long s = lround((2.0 * 3 + 2.0004) * FS);
        for (long i = s - FS; i < s; i++) x[2 * i] = x[2 * i + 1];
        s = lround((2.0 * 4 + 2.0004) * FS);
        x[2 * (s - 10)] = NAN;
    } else { /* trial 4: a sample at full scale (clipping); trial 5: a big step (peak-to-peak) */
        long s = lround((2.0 * 3 + 2.0004) * FS);
        x[2 * (s - 100)] = 1.0;
        s = lround((2.0 * 4 + 2.0004) * FS);
        for (long i = s - 300; i < s; i++) x[2 * i] += 0.45;
    }
    SF_INFO si = {0};
    si.samplerate = FS;
    si.channels = 2;
    si.format = format;
    char path[256];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    SNDFILE *f = sf_open(path, SFM_WRITE, &si);
    sf_command(f, SFC_SET_CLIPPING, NULL, SF_TRUE);
    sf_writef_double(f, x, FS * SECONDS);
    sf_close(f);
}

static const char *study_json =
    "{\"trials\": {\"file\": \"trials.csv\", \"participant\": \"rat\", \"rt\": \"rt\", \"response\": \"correct\", "
    "\"upper\": [1]},"
    " \"recordings\": {\"file\": \"{rat}.{ext}\", \"onset\": \"onset\", \"gain\": 2, \"unit\": \"mV\", \"channels\": "
    "[\"1-2\"]},"
    " \"power\": {\"window\": {\"from\": -1.0, \"to\": 0}, \"segment\": 0.5, \"overlap\": 0.5,"
    "   \"bands\": {\"alpha\": [6, 14], \"line\": [40, 60]}, \"scale\": \"log10\", \"standardize\": \"participant\","
    "   \"line_noise\": 50, \"artifacts\": {\"peak_to_peak\": 0.8, \"flat\": 1e-6, \"clipping\": true}}}";

static bl_study *load_study(const char *json)
{
    char p[256];
    snprintf(p, sizeof p, "%s/study.json", dir);
    bl_study *s = NULL;
    bl_error err = {0};
    if (bl_study_parse(json, p, &s, &err)) printf("study: %s\n", err.message);
    return s;
}

/* The study every case uses: two recordings and their trial table in a fresh folder, loaded, and band power
 * computed with 1 thread, once; freed (and the folder removed) at exit. */
static struct {
    int ready;
    bl_study *s;
    bl_trials *t;
    bl_power_result *r;
    bl_warnings w; /* the fixture's warnings, kept for the cases that check them */
} fx;

static void fixture_free(void)
{
    bl_power_result_destroy(fx.r);
    bl_warnings_clear(&fx.w);
    bl_trials_destroy(fx.t);
    bl_study_destroy(fx.s);
    char cmd[300];
    snprintf(cmd, sizeof cmd, "rm -rf %s", dir);
    if (system(cmd) != 0) printf("note: could not remove %s\n", dir);
}

static int write_fixture_files(void)
{
    if (!check_true(mkdtemp(dir) != NULL, "temporary folder %s", dir)) return 0;
    atexit(fixture_free);
    char rows[4096] = "rat,ext,onset,rt,correct\n";
    for (int p = 0; p < 2; p++)
        for (int k = 0; k < NTR; k++) {
            amp[p][k] = 0.05 + 0.01 * k + 0.003 * p;
            size_t l = strlen(rows);
            snprintf(rows + l, sizeof rows - l, "%s,%s,%.4f,0.5,1\n", p ? "r2" : "r1", p ? "wav" : "w64",
                     2.0 * k + 2.0004);
        }
    write_text("trials.csv", rows);
    write_recording(0, SF_FORMAT_W64 | SF_FORMAT_DOUBLE, "r1.w64");
    write_recording(1, SF_FORMAT_WAV | SF_FORMAT_PCM_24, "r2.wav");
    return 1;
}

static int fixture(void)
{
    if (fx.ready) return fx.ready > 0;
    fx.ready = -1;
    if (!write_fixture_files()) return 0;
    bl_error err = {0};
    fx.s = load_study(study_json);
    int ok = check_true(fx.s && bl_trials_load(fx.s, &fx.t, &fx.w, &err) == BL_OK, "study and trials load: %s",
                        err.message) &&
             check_true(bl_power_compute(fx.s, fx.t, 1, &fx.r, &fx.w, &err) == BL_OK, "power computed: %s",
                        err.message);
    if (ok) fx.ready = 1;
    return ok;
}

/* Window convention, frequency resolution, band bins and line-noise bins. */
HARNESS_CASE(window_and_bins)
{
    if (!fixture()) return;
    const bl_power_result *r = fx.r;
    check_true(r->fs == FS && r->window_samples == 1000 && r->nperseg == 500 && r->noverlap == 250 &&
                   r->n_segments == 3,
               "window 1000 samples, nperseg 500, noverlap 250, 3 segments");
    check_rel(r->df, 2.0, 0, "df = fs / nperseg = 2 Hz");
    check_true(r->bands[0].first_bin == 3 && r->bands[0].last_bin == 7 && r->bands[0].n_bins == 5,
               "alpha [6,14]: bins 3..7");
    /* line noise 50 Hz: bins within max(2 df, 2 Hz) = 4 Hz of 50 leave the band: 46..54 Hz = 5 bins of 11 */
    check_true(r->bands[1].n_bins == 6 && !r->bands[1].used[25] && !r->bands[1].used[23] && r->bands[1].used[22],
               "line band [40,60] keeps 6 of 11 bins (46-54 Hz left out)");
}

HARNESS_CASE(analytic_band_power)
{
    if (!fixture()) return;
    const bl_trials *t = fx.t;
    const bl_power_result *r = fx.r;
    /* analytic: gain 2, sine amplitude A behind 1-2 -> power (2A)^2/2 in the alpha band */
    double worst = 0;
    for (int p = 0; p < 2; p++)
        for (int k = 0; k < NTR; k++) {
            size_t i = (size_t)(p * NTR + k);
            if (t->excluded[i]) continue;
            double want = (2 * amp[p][k]) * (2 * amp[p][k]) / 2;
            double rel = fabs(r->band_power[i * 2] - want) / want;
            if (p == 0 || rel > worst) worst = fmax(worst, p == 0 ? rel : 0);
            if (p == 1)
                check_rel(r->band_power[i * 2], want, 2e-4, "r2 (24-bit PCM) trial %d: alpha = (gain A)^2/2", k + 1);
        }
    check_abs(worst, 0, 1e-9,
              "r1 (64-bit float): alpha band power = (gain A)^2/2 for every kept trial (worst relative)");
}

HARNESS_CASE(artifacts)
{
    if (!fixture()) return;
    const bl_trials *t = fx.t;
    const bl_power_result *r = fx.r;
    /* artifacts */
    check_true(t->excluded[3] && strcmp(t->excluded[3], "artifact: flat") == 0, "r1 trial 4 flat: %s",
               t->excluded[3] ? t->excluded[3] : "kept");
    check_true(t->excluded[4] && strcmp(t->excluded[4], "artifact: non-finite") == 0, "r1 trial 5 NaN: %s",
               t->excluded[4] ? t->excluded[4] : "kept");
    check_true(t->excluded[NTR + 3] && strcmp(t->excluded[NTR + 3], "artifact: clipping") == 0,
               "r2 trial 4 at full scale: %s", t->excluded[NTR + 3] ? t->excluded[NTR + 3] : "kept");
    check_true(t->excluded[NTR + 4] && strcmp(t->excluded[NTR + 4], "artifact: peak-to-peak") == 0,
               "r2 trial 5 step: %s", t->excluded[NTR + 4] ? t->excluded[NTR + 4] : "kept");
    check_true(r->n_artifacts == 4 && t->n_kept == 2 * NTR - 4, "4 artifacts, %d kept", 2 * NTR - 4);
    check_true(isnan(r->band_power[3 * 2]), "excluded trials have NAN band power");
    /* One cell ("all": no model splits trials) whose mean spectrum holds exactly the kept trials. */
    check_true(r->n_spectra == 1 && strcmp(r->spectra[0].condition, "all") == 0 && r->spectra[0].trials == t->n_kept &&
                   r->spectra[0].n[5] == t->n_kept,
               "one mean spectrum over the %zu kept trials", t->n_kept);
    if (r->n_spectra == 1) {
        /* Band sums are linear in the PSD: the band sum of the mean spectrum is the mean of the trials'
         * band powers (rectangle rule, shared signal conventions). */
        double from_mean = 0, mean_bp = 0;
        for (size_t j = 0; j < r->n_freqs; j++)
            if (r->bands[0].used[j]) from_mean += r->df * r->spectra[0].mean[j];
        for (size_t i = 0; i < t->n; i++)
            if (!t->excluded[i]) mean_bp += r->band_power[i * 2] / (double)t->n_kept;
        check_rel(from_mean, mean_bp, 1e-12, "alpha band sum of the mean spectrum = mean alpha band power");
    }
}

HARNESS_CASE(standardized_regressors)
{
    if (!fixture()) return;
    const bl_trials *t = fx.t;
    /* regressors: <band>_power raw, <band> = z-score of log10 within participant (sample SD) */
    int c_raw = bl_table_find(t->table, "alpha_power"), c_z = bl_table_find(t->table, "alpha");
    if (check_true(c_raw >= 0 && c_z >= 0, "alpha_power and alpha columns added")) {
        for (int p = 0; p < 2; p++) {
            double m = 0, ss = 0, zm = 0, zs = 0;
            int n = 0;
            for (int k = 0; k < NTR; k++) {
                size_t i = (size_t)(p * NTR + k);
                if (t->excluded[i]) continue;
                m += log10(t->table->cols[c_raw].num[i]);
                n++;
            }
            m /= n;
            for (int k = 0; k < NTR; k++) {
                size_t i = (size_t)(p * NTR + k);
                if (t->excluded[i]) continue;
                ss += pow(log10(t->table->cols[c_raw].num[i]) - m, 2);
            }
            double sd = sqrt(ss / (n - 1));
            double dev = 0;
            for (int k = 0; k < NTR; k++) {
                size_t i = (size_t)(p * NTR + k);
                if (t->excluded[i]) {
                    dev += !isnan(t->table->cols[c_z].num[i]);
                    continue;
                }
                double z = t->table->cols[c_z].num[i];
                dev += fabs(z - (log10(t->table->cols[c_raw].num[i]) - m) / sd) > 1e-12;
                zm += z;
                zs += z * z;
            }
            check_true(dev == 0, "participant %d: alpha = (log10 power - mean) / sample SD; NAN when excluded", p + 1);
            check_abs(zm / n, 0, 1e-12, "participant %d: z mean 0", p + 1);
            check_rel(zs / (n - 1), 1, 1e-12, "participant %d: z sample variance 1", p + 1);
        }
    }
}

/* Thread invariance: the same bytes with 2 threads. */
HARNESS_CASE(thread_invariance)
{
    if (!fixture()) return;
    bl_error err = {0};
    const bl_study *s = fx.s;
    const bl_trials *t = fx.t;
    const bl_power_result *r = fx.r;
    {
        bl_trials *t2 = NULL;
        bl_power_result *r2 = NULL;
        bl_trials_load(s, &t2, NULL, &err);
        check_true(bl_power_compute(s, t2, 2, &r2, NULL, &err) == BL_OK &&
                       memcmp(r->band_power, r2->band_power, t->n * r->n_bands * sizeof(double)) == 0 &&
                       r2->n_spectra == r->n_spectra &&
                       memcmp(r->spectra[0].mean, r2->spectra[0].mean, r->n_freqs * sizeof(double)) == 0 &&
                       memcmp(r->spectra[0].m2, r2->spectra[0].m2, r->n_freqs * sizeof(double)) == 0,
                   "2 threads give the same band power and mean spectrum bytes as 1");
        bl_power_result_destroy(r2);
        bl_trials_destroy(t2);
    }
}

HARNESS_CASE(power_csv_and_summary)
{
    if (!fixture()) return;
    bl_error err = {0};
    const bl_study *s = fx.s;
    const bl_trials *t = fx.t;
    const bl_power_result *r = fx.r;
    int c_raw = bl_table_find(t->table, "alpha_power");
    /* power.csv */
    char path[300];
    snprintf(path, sizeof path, "%s/power.csv", dir);
    if (check_true(bl_power_write_csv(s, t, r, path, &err) == BL_OK, "power.csv written: %s", err.message)) {
        bl_table *pc = NULL;
        check_true(bl_table_read(path, &pc, &err) == BL_OK, "power.csv reads back as a table");
        if (pc) {
            const char *want[] = {"participant", "trial",       "rat",   "ext",        "onset", "rt",
                                  "correct",     "alpha_power", "alpha", "line_power", "line",  "artifact"};
            int ok = pc->n_cols == 12 && pc->n_rows == 2 * NTR;
            for (size_t j = 0; ok && j < 12; j++) ok = strcmp(pc->cols[j].name, want[j]) == 0;
            check_true(ok, "power.csv columns: participant, trial, table columns, <band>_power, <band>, artifact");
            check_true(strcmp(pc->cols[1].text[13], "2") == 0 && strcmp(pc->cols[0].text[13], "r2") == 0,
                       "trial = row number within participant");
            check_true(pc->cols[7].num[0] == t->table->cols[c_raw].num[0], "band power written with %%.17g (exact)");
            check_true(pc->cols[8].text[3] == NULL && strcmp(pc->cols[11].text[3], "artifact: flat") == 0,
                       "excluded trial: NA regressor, reason in artifact");
            check_true(pc->cols[11].text[0] == NULL, "kept trial: empty artifact");
            /* Artifact-flagged trials keep their raw band power beside the flag; the regressor stays NA.
             * Flat trial (r1 trial 4): the bipolar signal is exactly 0, so its power is 0. Clipping trial
             * (r2 trial 4): the sine (power P = (gain A)^2/2, Parseval as above) plus an impulse of height
             * d <= 2 (1 + 0.4 + A) at one sample. sqrt(band power) is a norm of the windowed DFT bins
             * (mean detrending only touches bins 0 and 1 under a Hann window), so by Minkowski's
             * inequality sqrt(P_clip) lies within sqrt(P) +- sqrt(P_imp), where the impulse's band
             * power is at most 5 bins x df x 2 d^2 x (sum over <= 2 segments of w^2 <= 1) / (fs sum w^2 K),
             * with sum w^2 = 3/8 nperseg for the periodic Hann window. Non-finite: NA. */
            check_true(pc->cols[7].text[3] && pc->cols[7].num[3] == 0 && pc->cols[8].text[3] == NULL,
                       "flat trial: alpha_power 0 kept beside the flag, alpha NA (%s)",
                       pc->cols[7].text[3] ? pc->cols[7].text[3] : "NA");
            double a_clip = 2 * amp[1][3], d_max = 2 * (1 + 0.4 + amp[1][3]);
            double p_imp = 5 * 2.0 * 2 * d_max * d_max * 2 / (FS * (3.0 / 8 * 500) * 3);
            check_true(pc->cols[7].text[NTR + 3] != NULL && pc->cols[8].text[NTR + 3] == NULL &&
                           strcmp(pc->cols[11].text[NTR + 3], "artifact: clipping") == 0,
                       "clipping trial: raw alpha_power written, regressor NA");
            if (pc->cols[7].text[NTR + 3])
                check_abs(sqrt(pc->cols[7].num[NTR + 3]), a_clip / sqrt(2), sqrt(p_imp),
                          "clipping trial: sqrt(raw alpha_power) within sqrt((gain A)^2/2) +- sqrt(impulse bound)");
            check_true(pc->cols[7].text[NTR + 4] != NULL && pc->cols[9].text[NTR + 4] != NULL &&
                           pc->cols[10].text[NTR + 4] == NULL,
                       "peak-to-peak trial: raw power of both bands kept, regressors NA");
            check_true(pc->cols[7].text[4] == NULL && pc->cols[9].text[4] == NULL,
                       "non-finite trial: no band power (NA)");
            check_true(isnan(r->band_power[(NTR + 3) * 2]) && isfinite(r->artifact_power[(NTR + 3) * 2]) &&
                           isnan(r->artifact_power[0]),
                       "band_power stays NAN for flagged trials; artifact_power holds only theirs");
            bl_table_destroy(pc);
        }
    }
    int confound_warned = 0;
    for (size_t k = 0; k < fx.w.count; k++) confound_warned |= strstr(fx.w.items[k], "power.window") != NULL;
    check_true(!confound_warned && r->n_window_confounds == 0,
               "onset-aligned window ending at the onset: no RT-position warning");
    char *summary = NULL;
    check_true(bl_check_summary(s, t, r, &summary, &err) == BL_OK && strstr(summary, "artifact: flat") &&
                   strstr(summary, "alpha") && strstr(summary, "1000 Hz"),
               "check summary names exclusions, bands and rate");
    free(summary);
}

/* Errors naming participant, trial and file. */
HARNESS_CASE(errors)
{
    if (!fixture()) return;
    bl_error err = {0};
    bl_warnings w = {0};
    bl_study *s;
    bl_trials *t = NULL;
    bl_power_result *r = NULL;
    write_text("late.csv", "rat,ext,onset,rt,correct\nr1,w64,2.0004,0.5,1\nr1,w64,29.5,0.5,1\n");
    char js[2048];
    snprintf(js, sizeof js, "%s", study_json);
    char *pos = strstr(js, "trials.csv");
    memcpy(pos, "late.csv  ", 10);
    memmove(pos + 8, pos + 10, strlen(pos + 10) + 1);
    s = load_study(js);
    bl_trials_load(s, &t, NULL, &err);
    check_true(bl_power_compute(s, t, 1, &r, NULL, &err) == BL_OK, "window ending at the last sample is inside: %s",
               err.message);
    bl_power_result_destroy(r);
    bl_trials_destroy(t);
    bl_study_destroy(s);
    write_text("late.csv", "rat,ext,onset,rt,correct\nr1,w64,2.0004,0.5,1\nr1,w64,30.5,0.5,1\n");
    s = load_study(js);
    bl_trials_load(s, &t, NULL, &err);
    check_true(bl_power_compute(s, t, 1, &r, NULL, &err) == BL_ERR_INPUT && strstr(err.message, "participant r1") &&
                   strstr(err.message, "trial 2") && strstr(err.message, "r1.w64"),
               "window beyond the end: %s", err.message);
    bl_trials_destroy(t);
    write_text("late.csv", "rat,ext,onset,rt,correct\nr1,w64,2.0004,0.5,1\nr3,wav,3,0.5,1\n");
    bl_trials_load(s, &t, NULL, &err);
    check_true(bl_power_compute(s, t, 1, &r, NULL, &err) == BL_ERR_INPUT && strstr(err.message, "participant r3") &&
                   strstr(err.message, "r3.wav"),
               "missing recording: %s", err.message);
    bl_trials_destroy(t);
    write_text("late.csv", "rat,ext,onset,rt,correct\nr1,w64,soon,0.5,1\n");
    bl_trials_load(s, &t, NULL, &err);
    check_true(bl_power_compute(s, t, 1, &r, NULL, &err) == BL_ERR_INPUT && strstr(err.message, "late.csv:2") &&
                   strstr(err.message, "soon"),
               "non-numeric onset: %s", err.message);
    bl_trials_destroy(t);
    bl_study_destroy(s);
    /* a channel the file does not have */
    snprintf(js, sizeof js, "%s", study_json);
    pos = strstr(js, "\"1-2\"");
    pos[3] = '3';
    s = load_study(js);
    bl_trials_load(s, &t, NULL, &err);
    check_true(bl_power_compute(s, t, 1, &r, NULL, &err) == BL_ERR_INPUT && strstr(err.message, "channel 3") &&
                   strstr(err.message, "r1.w64") && strstr(err.message, "participant r1"),
               "missing channel: %s", err.message);
    bl_trials_destroy(t);
    bl_study_destroy(s);
    bl_warnings_clear(&w);
}

/* Windows whose position depends on the RT are reported (the share and count of such windows). */
HARNESS_CASE(window_confounds)
{
    if (!fixture()) return;
    /* Windows whose position depends on the RT: r1 only, RT 0.2 s on trials 1-3, 0.5 s on the rest.
     * Onset-aligned [-1, 0.3) s reaches past the response when rt < 0.3: trials 1-3, 3 of 12 = 25.0%.
     * Response-aligned [-0.4, 0) s begins before the onset when rt - 0.4 < 0: again trials 1-3.
     * Response-aligned [-0.1, 0) s never does. Counts by hand from the table. */
    {
        char tab[2048] = "rat,ext,onset,rt,correct\n";
        for (int k = 0; k < NTR; k++) {
            size_t l = strlen(tab);
            snprintf(tab + l, sizeof tab - l, "r1,w64,%.4f,%s,1\n", 2.0 * k + 2.0004, k < 3 ? "0.2" : "0.5");
        }
        write_text("conf.csv", tab);
        const char *windows[] = {"\"from\": -1.0, \"to\": 0.3", "\"align\": \"response\", \"from\": -0.4, \"to\": 0",
                                 "\"align\": \"response\", \"from\": -0.1, \"to\": 0"};
        const char *want[] = {"reaches past the response in 25.0% of windows (3 of 12",
                              "begins before the stimulus onset in 25.0% of windows (3 of 12", NULL};
        for (int c = 0; c < 3; c++) {
            char cj[2048];
            snprintf(cj, sizeof cj,
                     "{\"trials\": {\"file\": \"conf.csv\", \"participant\": \"rat\", \"rt\": \"rt\", \"response\": "
                     "\"correct\", \"upper\": [1]}, \"recordings\": {\"file\": \"{rat}.{ext}\", \"onset\": \"onset\", "
                     "\"channels\": [\"1-2\"]}, \"power\": {\"window\": {%s}, \"segment\": 0.1, "
                     "\"bands\": {\"alpha\": [6, 14]}, \"standardize\": \"none\"}}",
                     windows[c]);
            bl_warnings cw = {0};
            bl_study *s = load_study(cj);
            bl_trials *t = NULL;
            bl_power_result *r = NULL;
            bl_error err = {0};
            if (s && bl_trials_load(s, &t, &cw, &err) == BL_OK && bl_power_compute(s, t, 1, &r, &cw, &err) == BL_OK) {
                const char *hit = NULL;
                for (size_t k = 0; k < cw.count; k++)
                    if (strstr(cw.items[k], "power.window")) hit = cw.items[k];
                if (want[c])
                    check_true(hit && strstr(hit, want[c]) && strstr(hit, "docs/study-file.md") &&
                                   r->n_window_confounds == 3,
                               "window %d: warning with share and count: %s", c + 1, hit ? hit : "none");
                else check_true(!hit && r->n_window_confounds == 0, "window %d (within the RT): no warning", c + 1);
            } else {
                check_true(0, "window %d: power computed: %s", c + 1, err.message);
            }
            bl_power_result_destroy(r);
            bl_trials_destroy(t);
            bl_study_destroy(s);
            bl_warnings_clear(&cw);
        }
    }
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(window_and_bins),
        HARNESS_ENTRY(analytic_band_power),
        HARNESS_ENTRY(artifacts),
        HARNESS_ENTRY(standardized_regressors),
        HARNESS_ENTRY(thread_invariance),
        HARNESS_ENTRY(power_csv_and_summary),
        HARNESS_ENTRY(errors),
        HARNESS_ENTRY(window_confounds),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
