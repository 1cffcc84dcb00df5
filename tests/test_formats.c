/* Channels by name, unit conversion, an EDF file written here byte by byte, trial tables stacked from
 * {placeholder} patterns, "<name>.*" recordings and trials.split — checks that need no python.
 * Sources: EDF layout and physical value = (d - dmin)(pmax - pmin)/(dmax - dmin) + pmin from Kemp et al. 1992
 * ("A simple format for exchange of digitized polygraphic recordings"); SI prefixes (BIPM SI brochure,
 * 9th ed.: m = 1e-3, µ = 1e-6, n = 1e-9) for the unit factors. */
#include "signal/trace.h"
#include "signal/channels.h"
#include "design/trial_files.h"
#include "harness.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

static void write_text(const char *path, const char *text)
{
    FILE *f = fopen(path, "w");
    if (f) {
        fputs(text, f);
        fclose(f);
    }
}

/* 256-byte fields, space padded (Kemp 1992) */
static void field(FILE *f, const char *s, int width) { fprintf(f, "%-*s", width, s); }

/* Two signals "Fz" (uV) and "Cz" (mV), 4 samples per 1 s record, 3 records; digital d = 100 r + 10 c + k. */
static void write_edf(const char *path)
{
    FILE *f = fopen(path, "wb");
    if (!f) return;
    field(f, "0", 8), field(f, "x", 80), field(f, "x", 80), field(f, "01.01.01", 8), field(f, "00.00.00", 8);
    field(f, "768", 8), field(f, "", 44), field(f, "3", 8), field(f, "1", 8), field(f, "2", 4);
    field(f, "Fz", 16), field(f, "Cz", 16), field(f, "", 80), field(f, "", 80), field(f, "uV", 8), field(f, "mV", 8);
    field(f, "-100", 8), field(f, "-2", 8), field(f, "100", 8), field(f, "2", 8);         /* pmin, pmax */
    field(f, "-1000", 8), field(f, "-1000", 8), field(f, "1000", 8), field(f, "1000", 8); /* dmin, dmax */
    field(f, "", 80), field(f, "", 80), field(f, "4", 8), field(f, "4", 8), field(f, "", 32), field(f, "", 32);
    for (int r = 0; r < 3; r++)
        for (int c = 0; c < 2; c++)
            for (int k = 0; k < 4; k++) {
                int d = 100 * r + 10 * c + k;
                fputc(d & 0xff, f), fputc((d >> 8) & 0xff, f);
            }
    fclose(f);
}

int main(void)
{
    char dir[] = "/tmp/bl-test-formats-XXXXXX", path[512], p2[512];
    if (!mkdtemp(dir)) return 1;
    bl_error err = {0};
    bl_trace *t = NULL;

    /* SI prefixes */
    check_rel(bl_unit_volts("uV"), 1e-6, 0, "uV = 1e-6 V");
    check_rel(bl_unit_volts("\xc2\xb5V"), 1e-6, 0, "µV (UTF-8) = 1e-6 V");
    check_rel(bl_unit_volts("mV"), 1e-3, 0, "mV = 1e-3 V");
    check_rel(bl_unit_volts("volts"), 1, 0, "NWB's \"volts\" = 1 V");
    check_true(isnan(bl_unit_volts("degC")) && isnan(bl_unit_volts("au")), "degC and au are not voltages");

    /* EDF by hand: physical values and a window across records */
    snprintf(path, sizeof path, "%s/rec.edf", dir);
    write_edf(path);
    if (check_true(bl_trace_open(path, 0, &t, &err) == BL_OK, "hand-written EDF opens: %s", err.message)) {
        const bl_trace_info *info = bl_trace_get_info(t);
        check_true(info->channels == 2 && info->frames == 12 && info->rate == 4, "2 channels, 12 samples, 4 Hz");
        double buf[6 * 2];
        check_true(bl_trace_read(t, 3, 6, buf, &err) == BL_OK, "window of 6 samples from sample 3");
        /* sample 3 is record 0, k = 3: Fz d = 3 -> 3 * 200/2000 = 0.3 uV; Cz d = 13 -> 13 * 4/2000 mV */
        check_rel(buf[0], 0.3, 1e-15, "Fz sample 3 = 0.3 uV (Kemp 1992 scaling)");
        check_rel(buf[1], 0.026, 1e-15, "Cz sample 3 = 0.026 mV");
        /* sample 4 is record 1, k = 0: Fz d = 100 -> 10 uV */
        check_rel(buf[2], 10.0, 1e-15, "Fz sample 4 (next record) = 10 uV");
        check_true(strcmp(bl_trace_channel_name(t, 1), "Cz") == 0 && strcmp(bl_trace_channel_unit(t, 1), "mV") == 0,
                   "names and units from the header");
        /* "Fz-Cz" in uV: Fz x 1 - Cz x 1000 (each channel converted by its own unit) */
        const char *spec[] = {"Fz-Cz"};
        bl_montage *m = NULL, *r = NULL;
        if (bl_montage_parse(spec, 1, "recordings.channels", &m, &err) == BL_OK &&
            check_true(bl_montage_resolve(m, t, "recordings.channels", "uV", 2.0, &r, &err) == BL_OK,
                       "Fz-Cz resolves")) {
            double out;
            bl_montage_apply(r, buf, 1, 2, 1.0, &out);
            check_rel(out, 2.0 * (0.3 - 0.026 * 1000), 1e-14, "Fz-Cz in uV x gain 2 = 2 (0.3 - 26)");
        }
        bl_montage_destroy(r);
        bl_montage_destroy(m);
        const char *au[] = {"Fz", "Cz"};
        check_true(bl_montage_parse(au, 2, "recordings.channels", &m, &err) == BL_OK &&
                       bl_montage_resolve(m, t, "recordings.channels", "au", 1.0, &r, &err) == BL_ERR_INPUT &&
                       strstr(err.message, "\"mV\"") && strstr(err.message, "recordings.unit"),
                   "uV and mV channels together in \"au\" refused: %s", err.message);
        bl_montage_destroy(m);
        const char *unknown[] = {"Oz"};
        check_true(bl_montage_parse(unknown, 1, "recordings.channels", &m, &err) == BL_OK &&
                       bl_montage_resolve(m, t, "recordings.channels", "uV", 1.0, &r, &err) == BL_ERR_INPUT &&
                       strstr(err.message, "Fz, Cz") && strstr(err.message, "rec.edf"),
                   "unknown name lists the channels: %s", err.message);
        bl_montage_destroy(m);
        bl_trace_close(t);
    }

    /* CSV header names; a name with '-' in it is taken whole first */
    snprintf(path, sizeof path, "%s/rec.csv", dir);
    write_text(path, "EEG Fz-Ref,Cz,Pz\n1,2,4\n3,5,9\n");
    if (check_true(bl_trace_open(path, 100, &t, &err) == BL_OK, "CSV opens")) {
        const char *spec[] = {"EEG Fz-Ref", "Pz-Cz"};
        bl_montage *m = NULL, *r = NULL;
        double row[3] = {1, 2, 4}, out;
        if (bl_montage_parse(spec, 2, "recordings.channels", &m, &err) == BL_OK &&
            check_true(bl_montage_resolve(m, t, "recordings.channels", "uV", 1.0, &r, &err) == BL_OK,
                       "names resolve")) {
            bl_montage_apply(r, row, 1, 3, 1.0, &out);
            check_rel(out, (1 + (4 - 2)) / 2.0, 1e-15, "\"EEG Fz-Ref\" whole, \"Pz-Cz\" a pair, averaged");
        }
        bl_montage_destroy(r);
        bl_montage_destroy(m);
        bl_trace_close(t);
    }

    /* {placeholder} patterns: two files, values become columns; split of a combined column */
    snprintf(path, sizeof path, "%s/s1", dir), mkdir(path, 0700);
    snprintf(path, sizeof path, "%s/s2", dir), mkdir(path, 0700);
    snprintf(path, sizeof path, "%s/s1/d1_ev.csv", dir);
    write_text(path, "onset,kind\n1.5,left/easy\n2.5,right/hard\n");
    snprintf(path, sizeof path, "%s/s2/d7_ev.csv", dir);
    write_text(path, "onset,kind\n3.5,left/hard\n");
    snprintf(path, sizeof path, "%s/s{animal}/d{day}_ev.csv", dir);
    bl_trial_sources *src = NULL;
    bl_table *tab = NULL;
    if (check_true(bl_trial_sources_glob(path, &src, &err) == BL_OK && src->n == 2, "pattern matches 2 files") &&
        check_true(bl_trial_sources_read(src, path, NULL, &tab, &err) == BL_OK, "stacked: %s", err.message)) {
        int ca = bl_table_find(tab, "animal"), cd = bl_table_find(tab, "day"), co = bl_table_find(tab, "onset");
        check_true(tab->n_rows == 3 && ca >= 0 && cd >= 0 && strcmp(tab->cols[ca].text[2], "2") == 0 &&
                       strcmp(tab->cols[cd].text[0], "1") == 0 && tab->cols[co].numeric && tab->cols[co].num[2] == 3.5,
                   "3 rows; animal and day from the path; onset stays numeric");
        check_true(tab->line[2] == 2 && strstr(bl_trial_sources_file_of(src, 2), "s2/d7_ev.csv"),
                   "row 3 keeps its own file and line");
    }
    bl_table_destroy(tab);
    bl_trial_sources_destroy(src);
    snprintf(path, sizeof path, "%s/s2/d8_ev.csv", dir);
    write_text(path, "kind\nleft/easy\n");
    snprintf(p2, sizeof p2, "%s/s{animal}/d{day}_ev.csv", dir);
    if (bl_trial_sources_glob(p2, &src, &err) == BL_OK)
        check_true(bl_trial_sources_read(src, p2, NULL, &tab, &err) == BL_ERR_INPUT &&
                       strstr(err.message, "d8_ev.csv") && strstr(err.message, "\"onset\""),
                   "a file without a column the others have is named: %s", err.message);
    bl_trial_sources_destroy(src);
    snprintf(p2, sizeof p2, "%s/s{animal}/nothing_{x}.csv", dir);
    check_true(bl_trial_sources_glob(p2, &src, &err) == BL_ERR_INPUT && strstr(err.message, "no file matches"),
               "no match is an error: %s", err.message);

    /* "<name>.*": one recording among companions */
    snprintf(path, sizeof path, "%s/s1/rec.vhdr", dir), write_text(path, "x");
    snprintf(path, sizeof path, "%s/s1/rec.vmrk", dir), write_text(path, "x");
    snprintf(path, sizeof path, "%s/s1/rec.eeg", dir), write_text(path, "x");
    snprintf(path, sizeof path, "%s/s1/rec.json", dir), write_text(path, "x");
    snprintf(p2, sizeof p2, "%s/s1/rec.*", dir);
    char *found = NULL;
    check_true(bl_resolve_any_extension(p2, &found, &err) == BL_OK && found && strstr(found, "s1/rec.vhdr"),
               ".vhdr chosen over .vmrk/.eeg/.json: %s", found ? found : err.message);
    free(found);
    snprintf(path, sizeof path, "%s/s1/rec.edf", dir), write_text(path, "x");
    check_true(bl_resolve_any_extension(p2, &found, &err) == BL_ERR_INPUT && strstr(err.message, "matches 2"),
               "two recordings: %s", err.message);

    char cmd[600];
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    if (system(cmd) != 0) return 1;
    return harness_summary();
}
