/* Recordings: libsndfile round trips (WAV float / 16 / 24-bit, FLAC 16 / 24-bit), windows read by seeking,
 * CSV traces, montages (bipolar, averaged), {column} patterns, and bad-input errors. */
#include "signal/trace.h"
#include "harness.h"

#include <sndfile.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

enum { FRAMES = 20000, CH = 3 };
static double data[FRAMES * CH];

static int write_sound(const char *path, int format, int rate)
{
    SF_INFO si = {0};
    si.samplerate = rate;
    si.channels = CH;
    si.format = format;
    SNDFILE *f = sf_open(path, SFM_WRITE, &si);
    if (!f) return 0;
    /* libsndfile scales doubles in [-1, 1) to integer PCM by 2^(bits-1) - 1 on write (libsndfile docs,
     * "Note 2": SFC_SET_NORM_DOUBLE); clipping guard off so values stay as given */
    sf_count_t w = sf_writef_double(f, data, FRAMES);
    sf_close(f);
    return w == FRAMES;
}

/* bits = 0 for float formats. Integer PCM: libsndfile writes doubles as lrint(x * (2^(b-1) - 1)) and
 * reads counts back as c / 2^(b-1) (libsndfile 1.2 API docs, "SFC_SET_NORM_DOUBLE"; the asymmetry is noted in
 * the shared signal notes), so the value read is within half a quantisation step of that model. */
static void round_trip(const char *dir, const char *name, int format, int bits)
{
    double step = bits ? ldexp(1.0, -(bits - 1)) : 6e-8 /* float32 rounding of values below 1 */;
    char path[512];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    if (!check_true(write_sound(path, format, 2000), "%s written with libsndfile", name)) return;
    bl_trace *t = NULL;
    bl_error err = {0};
    if (!check_true(bl_trace_open(path, NAN, &t, &err) == BL_OK, "%s opens: %s", name, err.message)) return;
    const bl_trace_info *info = bl_trace_get_info(t);
    check_true(info->rate == 2000 && info->channels == CH && info->frames == FRAMES,
               "%s: 2000 Hz, 3 channels, %d frames", name, FRAMES);
    static double buf[5000 * CH];
    double worst = 0;
    int64_t starts[3] = {0, 7777, FRAMES - 5000};
    for (int k = 0; k < 3; k++) {
        if (bl_trace_read(t, starts[k], 5000, buf, &err)) {
            check_true(0, "%s read at %lld: %s", name, (long long)starts[k], err.message);
            continue;
        }
        for (size_t i = 0; i < 5000 * CH; i++) {
            double x = data[(size_t)starts[k] * CH + i];
            double want = bits ? x * (ldexp(1.0, bits - 1) - 1) / ldexp(1.0, bits - 1) : x;
            worst = fmax(worst, fabs(buf[i] - want));
        }
    }
    /* quantisation: one step of the format's integer grid (2^-(bits-1) normalised), 0 for float */
    check_true(worst <= (bits ? 0.5 * step * (1 + 1e-9) : step),
               "%s: windows at 3 offsets read back within %s quantisation step %.3g (worst %.3g)", name,
               bits ? "half a" : "one", step, worst);
    check_true(bl_trace_read(t, FRAMES - 10, 11, buf, &err) == BL_ERR_INPUT && strstr(err.message, name),
               "%s: a window past the end is an error naming the file: %s", name, err.message);
    check_true(bl_trace_read(t, -1, 10, buf, &err) == BL_ERR_INPUT, "%s: a window before the start is an error", name);
    if (info->integer_pcm)
        check_true(info->clip_lo == -1.0 && info->clip_hi < 1.0 && info->clip_hi > 0.99, "%s: full-scale limits known",
                   name);
    bl_trace_close(t);
}

/* A scratch folder for the cases, made on first use and removed at exit. */
static char dir[] = "/tmp/bl_test_trace_XXXXXX";

static void scratch_free(void)
{
    char cmd[600];
    snprintf(cmd, sizeof cmd, "rm -rf %s", dir);
    if (system(cmd) != 0) printf("note: could not remove %s\n", dir);
}

static int scratch(void)
{
    static int state;
    if (!state) {
        state = mkdtemp(dir) ? 1 : -1;
        if (state > 0) atexit(scratch_free);
        check_true(state > 0, "temporary folder %s", dir);
    }
    return state > 0;
}

/* The five sound files (written and read back, with their checks) once. */
static int round_trip_files(void)
{
    static int done;
    if (!scratch()) return 0;
    if (done) return 1;
    done = 1;
    /* three channels: a 10 Hz sine, a 37 Hz cosine, and noise-like values, inside +-0.9 */
    for (size_t i = 0; i < FRAMES; i++) {
        double t = (double)i / 2000.0;
        data[i * CH + 0] = 0.5 * sin(2 * M_PI * 10 * t);
        data[i * CH + 1] = 0.4 * cos(2 * M_PI * 37 * t) + 0.1;
        data[i * CH + 2] = 0.8 * sin(1234.567 * (double)i * (double)i);
    }
    round_trip(dir, "float.wav", SF_FORMAT_WAV | SF_FORMAT_FLOAT, 0);
    round_trip(dir, "pcm16.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16, 16);
    round_trip(dir, "pcm24.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_24, 24);
    round_trip(dir, "pcm16.flac", SF_FORMAT_FLAC | SF_FORMAT_PCM_16, 16);
    round_trip(dir, "pcm24.flac", SF_FORMAT_FLAC | SF_FORMAT_PCM_24, 24);
    return 1;
}

HARNESS_CASE(round_trips) { round_trip_files(); }

/* Missing, unreadable and truncated files. */
HARNESS_CASE(bad_files)
{
    if (!round_trip_files()) return;
    bl_error err = {0};
    bl_trace *t = NULL;
    char path[512];
    /* missing and unreadable files */
    snprintf(path, sizeof path, "%s/none.flac", dir);
    check_true(bl_trace_open(path, NAN, &t, &err) == BL_ERR_INPUT && strstr(err.message, "none.flac"),
               "missing file names the file: %s", err.message);
    snprintf(path, sizeof path, "%s/junk.wav", dir);
    FILE *f = fopen(path, "w");
    fputs("this is not a sound file\n", f);
    fclose(f);
    check_true(bl_trace_open(path, NAN, &t, &err) == BL_ERR_INPUT && strstr(err.message, "junk.wav"),
               "unreadable file names the file: %s", err.message);
    /* truncated 16-bit WAV: the header promises FRAMES frames, the data stops halfway */
    snprintf(path, sizeof path, "%s/pcm16.wav", dir);
    char cut[600];
    snprintf(cut, sizeof cut, "%s/cut.wav", dir);
    {
        FILE *in = fopen(path, "rb"), *out = fopen(cut, "wb");
        static char b[FRAMES * CH];
        size_t got = fread(b, 1, sizeof b, in);
        fwrite(b, 1, got, out);
        fclose(in);
        fclose(out);
    }
    if (bl_trace_open(cut, NAN, &t, &err) == BL_OK) {
        static double buf[1000 * CH];
        bl_status st = bl_trace_read(t, FRAMES - 1000, 1000, buf, &err);
        check_true(st != BL_OK && strstr(err.message, "cut.wav"),
                   "truncated WAV: a window in the missing part fails: %s", err.message);
        bl_trace_close(t);
    } else {
        check_true(strstr(err.message, "cut.wav") != NULL, "truncated WAV refused at open: %s", err.message);
    }
}

HARNESS_CASE(montage)
{
    bl_error err = {0};
    /* bipolar montage removes an injected common-mode signal exactly (difference of identical doubles) */
    {
        static double x[1000 * 2], out[1000];
        for (size_t i = 0; i < 1000; i++) {
            double common = 5.0 * sin(0.37 * (double)i) + 3.0;
            x[2 * i] = common + 0.25 * cos(0.1 * (double)i);
            x[2 * i + 1] = common;
        }
        bl_montage *m = NULL;
        const char *spec[] = {"1-2"};
        check_true(bl_montage_parse(spec, 1, "recordings.channels", &m, &err) == BL_OK, "\"1-2\" parses");
        bl_montage_apply(m, x, 1000, 2, 2.0, out);
        double worst = 0;
        for (size_t i = 0; i < 1000; i++) worst = fmax(worst, fabs(out[i] - 2.0 * 0.25 * cos(0.1 * (double)i)));
        check_abs(worst, 0, 1e-14, "bipolar 1-2 with gain 2 leaves only 2 x the differential signal");
        bl_montage_destroy(m);
        const char *avg[] = {"1", "3-2"};
        double row[3] = {1.0, 4.0, 10.0}, o;
        check_true(bl_montage_parse(avg, 2, "recordings.channels", &m, &err) == BL_OK, "[\"1\", \"3-2\"] parses");
        bl_montage_apply(m, row, 1, 3, 1.0, &o);
        check_rel(o, (1.0 + (10.0 - 4.0)) / 2, 1e-15, "several entries are averaged: (ch1 + (ch3 - ch2)) / 2");
        check_true(bl_montage_max_channel(m) == 3, "largest channel used is 3");
        bl_montage_destroy(m);
        const char *named[] = {"Cz", "Cz-Pz"};
        check_true(bl_montage_parse(named, 2, "recordings.channels", &m, &err) == BL_OK && m->name && m->pos[0] == -1,
                   "names parse, to be looked up in each recording");
        bl_montage_destroy(m);
        const char *bad[] = {"0", "1-1", "1-", "-2", "1-2-3", ""};
        for (size_t k = 0; k < sizeof bad / sizeof bad[0]; k++)
            check_true(bl_montage_parse(&bad[k], 1, "recordings.channels", &m, &err) == BL_ERR_INPUT &&
                           strstr(err.message, "recordings.channels[0]"),
                       "channel \"%s\" rejected: %s", bad[k], err.message);
    }
}

/* CSV trace: header row, one column per channel, rate from the study. */
HARNESS_CASE(csv_trace)
{
    if (!scratch()) return;
    bl_error err = {0};
    bl_trace *t = NULL;
    char path[512];
    FILE *f;
    {
        snprintf(path, sizeof path, "%s/trace.csv", dir);
        f = fopen(path, "w");
        fputs("\xef\xbb\xbf"
              "a,b\r\n",
              f);
        for (int i = 0; i < 100; i++) fprintf(f, "%d,%.17g\r\n", i, -0.5 * i);
        fclose(f);
        check_true(bl_trace_open(path, NAN, &t, &err) == BL_ERR_INPUT && strstr(err.message, "rate"),
                   "CSV trace without a rate: %s", err.message);
        if (check_true(bl_trace_open(path, 250, &t, &err) == BL_OK, "CSV trace opens: %s", err.message)) {
            const bl_trace_info *info = bl_trace_get_info(t);
            double buf[20];
            check_true(info->frames == 100 && info->channels == 2 && info->rate == 250 && isnan(info->clip_hi),
                       "CSV trace: 100 samples, 2 channels, 250 Hz");
            check_true(bl_trace_read(t, 40, 10, buf, &err) == BL_OK && buf[0] == 40 && buf[1] == -20 && buf[18] == 49,
                       "CSV window read");
            bl_trace_close(t);
        }
        snprintf(path, sizeof path, "%s/bad.tsv", dir);
        f = fopen(path, "w");
        fputs("a\tb\n1\t2\n3\tx\n", f);
        fclose(f);
        check_true(bl_trace_open(path, 100, &t, &err) == BL_ERR_INPUT && strstr(err.message, "bad.tsv:3:3"),
                   "non-numeric CSV sample names file:line:column: %s", err.message);
    }
}

/* {column} patterns. */
HARNESS_CASE(file_patterns)
{
    bl_error err = {0};
    {
        bl_table *tab = NULL;
        check_true(bl_table_create(2, &tab, &err) == BL_OK, "empty table of 2 rows");
        const char *animal[] = {"r1", NULL}, *sess[] = {"2", "3"};
        bl_table_add_text(tab, "animal", animal, &err);
        bl_table_add_text(tab, "session", sess, &err);
        char *p = NULL;
        check_true(bl_pattern_expand("rec/{animal}_s{session}.flac", tab, 0, &p, &err) == BL_OK &&
                       strcmp(p, "rec/r1_s2.flac") == 0,
                   "pattern filled: %s", p ? p : "-");
        free(p);
        check_true(bl_pattern_expand("rec/{animal}.flac", tab, 1, &p, &err) == BL_ERR_INPUT &&
                       strstr(err.message, "animal"),
                   "missing value: %s", err.message);
        check_true(bl_pattern_expand("rec/{rat}.flac", tab, 0, &p, &err) == BL_ERR_INPUT &&
                       strstr(err.message, "{rat}"),
                   "unknown column: %s", err.message);
        check_true(bl_pattern_expand("rec/{animal.flac", tab, 0, &p, &err) == BL_ERR_INPUT, "unclosed brace: %s",
                   err.message);
        bl_table_destroy(tab);
    }
}

HARNESS_CASE(unknown_length_flac)
{
    if (!scratch()) return;
    bl_error err = {0};
    {
        /* A FLAC stream whose STREAMINFO gives 0 total samples, which the FLAC format specification
         * (xiph.org, "STREAMINFO": 0 means the total is unknown) allows; libsndfile then reports
         * SF_COUNT_MAX frames. Found by fuzzing (tests/fuzz/regressions/trace/): windows cannot be
         * checked against such a length, so the file must be refused, not read. */
        static const unsigned char unknown_length[] = {0x66, 0x4c, 0x61, 0x43, 0x00, 0x00, 0x00, 0x22, 0x10, 0x00, 0x10,
                                                       0x00, 0x00, 0x02, 0x32, 0x00, 0x02, 0x34, 0x00, 0x3e, 0x83, 0x70,
                                                       0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x22,
                                                       0x10, 0x00, 0x10, 0x00, 0x20, 0x00, 0x00, 0x00, 0x98};
        char path[600];
        snprintf(path, sizeof path, "%s/unknown_length.wav", dir); /* the name the fuzz target used */
        FILE *f = fopen(path, "wb");
        int wrote = f && fwrite(unknown_length, 1, sizeof unknown_length, f) == sizeof unknown_length;
        if (f) fclose(f);
        bl_trace *t = NULL;
        check_true(wrote && bl_trace_open(path, 0, &t, &err) == BL_ERR_INPUT && t == NULL &&
                       strstr(err.message, "no usable length"),
                   "a recording without a usable length is refused: %s", err.message);
        bl_trace_close(t);
    }
}

int main(int argc, char **argv)
{
    static const harness_case cases[] = {
        HARNESS_ENTRY(round_trips), HARNESS_ENTRY(bad_files),     HARNESS_ENTRY(montage),
        HARNESS_ENTRY(csv_trace),   HARNESS_ENTRY(file_patterns), HARNESS_ENTRY(unknown_length_flac),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
