/* Trial coding: RT units, accuracy and stimulus coding, keep rules as counted exclusion reasons, trial labels,
 * and bad-input errors naming file, line and column (contract: docs/study-file.md, "trials"). */
#include "design/study.h"
#include "design/trials.h"
#include "harness.h"

#include <stdlib.h>
#include <string.h>

static char dir[] = "/tmp/bl_test_trials_XXXXXX";

static void write_file(const char *name, const char *text)
{
    char p[256];
    snprintf(p, sizeof p, "%s/%s", dir, name);
    FILE *f = fopen(p, "w");
    fputs(text, f);
    fclose(f);
}

static bl_status load(const char *study_json, bl_trials **t, bl_warnings *w, bl_error *err)
{
    char p[256];
    snprintf(p, sizeof p, "%s/study.json", dir);
    bl_study *s = NULL;
    *t = NULL;
    bl_status st = bl_study_parse(study_json, p, &s, err);
    if (!st) st = bl_trials_load(s, t, w, err);
    bl_study_destroy(s);
    return st;
}

static void scratch_free(void)
{
    char cmd[300];
    snprintf(cmd, sizeof cmd, "rm -rf %s", dir);
    if (system(cmd) != 0) printf("note: could not remove %s\n", dir);
}

/* The scratch folder of the trial tables, made on first use and removed at exit. */
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

static void write_acc_csv(void)
{
    write_file("acc.csv", "rat,trial,rt,correct\nr1,10,0.5,1.0\nr1,11,0.6,0\nr2,10,0.7,1\n");
}

HARNESS_CASE(bids_events_stimulus_coding)
{
    if (!scratch()) return;
    bl_error err = {0};
    bl_warnings w = {0};
    bl_trials *t = NULL;
    /* BIDS-style events table (BIDS 1.9 task events: onset, duration, trial_type, response_time; n/a) */
    write_file("events.tsv", "onset\tduration\ttrial_type\tresponse_time\tsubject\tchoice\tstim\n"
                             "1.0\t0.5\thigh\t512\tsub-01\thigh\thigh\n"
                             "3.0\t0.5\tlow\t430\tsub-01\thigh\tlow\n"
                             "5.0\t0.5\tlow\tn/a\tsub-01\tn/a\tlow\n"
                             "1.5\t0.5\thigh\t95\tsub-02\tlow\thigh\n"
                             "3.5\t0.5\thigh\t2600\tsub-02\thigh\thigh\n"
                             "5.5\t0.5\tlow\t700\tsub-02\tlow\tlow\n");
    const char
        *stim_study = "{\"trials\": {\"file\": \"events.tsv\", \"participant\": \"subject\", \"rt\": \"response_time\","
                      " \"rt_unit\": \"ms\", \"response\": \"choice\", \"upper\": [\"high\"], \"stimulus\": \"stim\","
                      " \"keep\": {\"rt_min\": 0.15, \"rt_max\": 2.5}}}";
    if (check_true(load(stim_study, &t, &w, &err) == BL_OK, "BIDS events.tsv with stimulus coding loads: %s",
                   err.message)) {
        check_true(t->n == 6 && t->n_participants == 2 && strcmp(t->participants[1], "sub-02") == 0,
                   "6 trials, 2 participants in order of appearance");
        check_rel(t->rt[0], 0.512, 1e-15, "rt_unit ms: 512 ms = 0.512 s");
        check_true(t->upper[0] == 1 && t->upper[1] == 1 && t->upper[3] == 0, "response \"high\" = upper boundary");
        check_true(t->drift_sign[0] == 1 && t->drift_sign[1] == -1 && t->drift_sign[3] == 1,
                   "stimulus coding: the upper list names the stimulus with positive drift");
        check_true(t->excluded[2] && strcmp(t->excluded[2], "missing rt") == 0, "n/a RT excluded as missing rt");
        check_true(t->excluded[3] && strcmp(t->excluded[3], "rt < keep.rt_min") == 0, "95 ms below rt_min");
        check_true(t->excluded[4] && strcmp(t->excluded[4], "rt > keep.rt_max") == 0, "2600 ms above rt_max");
        check_true(t->n_kept == 3, "3 trials kept");
        check_true(strcmp(t->trial_label[0], "1") == 0 && strcmp(t->trial_label[3], "1") == 0 &&
                       strcmp(t->trial_label[5], "3") == 0,
                   "no trial column: labels are row numbers within participant");
        bl_exclusion_count *c = NULL;
        size_t n = 0;
        check_true(bl_trials_exclusion_counts(t, &c, &n, &err) == BL_OK && n == 3 && c[0].count == 1 &&
                       strcmp(c[1].reason, "rt < keep.rt_min") == 0,
                   "3 reasons counted");
        free(c);
        bl_trials_exclude(t, 0, "artifact: flat");
        bl_trials_exclude(t, 0, "artifact: clipping");
        check_true(t->n_kept == 2 && strcmp(t->excluded[0], "artifact: flat") == 0,
                   "first reason wins, n_kept updated");
        bl_trials_destroy(t);
    }
    bl_warnings_clear(&w);
}

HARNESS_CASE(accuracy_coding)
{
    if (!scratch()) return;
    bl_error err = {0};
    bl_warnings w = {0};
    bl_trials *t = NULL;
    /* accuracy coding with numeric values, own trial column, CSV */
    write_acc_csv();
    const char *acc = "{\"trials\": {\"file\": \"acc.csv\", \"participant\": \"rat\", \"rt\": \"rt\", \"response\": "
                      "\"correct\", \"upper\": [1]}}";
    if (check_true(load(acc, &t, &w, &err) == BL_OK, "accuracy-coded CSV loads: %s", err.message)) {
        check_true(t->upper[0] == 1 && t->upper[1] == 0 && t->upper[2] == 1, "\"1.0\" matches upper [1] numerically");
        check_true(t->drift_sign[0] == 1 && t->drift_sign[1] == 1, "accuracy coding: drift sign +1");
        check_true(strcmp(t->trial_label[1], "11") == 0, "the table's own trial column is the label");
        bl_trials_destroy(t);
    }
    bl_warnings_clear(&w);
}

HARNESS_CASE(warnings)
{
    if (!scratch()) return;
    bl_error err = {0};
    bl_warnings w = {0};
    bl_trials *t = NULL;
    /* warnings: repeated trial labels, more than two response values */
    write_file("dup.csv", "rat,trial,rt,correct\nr1,1,0.5,1\nr1,1,0.6,2\nr1,2,0.5,3\nr2,1,0.5,1\n");
    const char *dup = "{\"trials\": {\"file\": \"dup.csv\", \"participant\": \"rat\", \"rt\": \"rt\", \"response\": "
                      "\"correct\", \"upper\": [1]}}";
    bl_warnings_clear(&w);
    if (check_true(load(dup, &t, &w, &err) == BL_OK, "table with repeated labels loads")) {
        int saw_dup = 0, saw_vals = 0;
        for (size_t k = 0; k < w.count; k++) {
            saw_dup += strstr(w.items[k], "participant r1 has trial 1 twice (lines 2 and 3)") != NULL;
            saw_vals += strstr(w.items[k], "more than two values") != NULL;
        }
        check_true(saw_dup == 1 && saw_vals == 1 && w.count == 2,
                   "warned about the repeated label and the third value");
        bl_trials_destroy(t);
    }
    bl_warnings_clear(&w);
}

HARNESS_CASE(errors_name_the_culprit)
{
    if (!scratch()) return;
    bl_error err = {0};
    bl_warnings w = {0};
    bl_trials *t = NULL;
    /* errors naming the culprit */
    struct {
        const char *table, *want1, *want2;
    } bad[] = {
        {"rat,rt,correct\nr1,0.5,1\nr1,fast,1\n", "bad.csv:3", "'fast' is not a number"},
        {"rat,rt,correct\nr1,-0.5,1\n", "bad.csv:2", "negative"},
        {"rat,time,correct\nr1,0.5,1\n", "column \"rt\"", "trials.rt"},
        {"rat,rt,correct\n", "bad.csv", "empty"},
        {"rat,rt,correct\n,0.5,1\n", "bad.csv:2", "trials.participant"},
    };
    const char *bs = "{\"trials\": {\"file\": \"bad.csv\", \"participant\": \"rat\", \"rt\": \"rt\", \"response\": "
                     "\"correct\", \"upper\": [1]}}";
    for (size_t k = 0; k < sizeof bad / sizeof bad[0]; k++) {
        write_file("bad.csv", bad[k].table);
        err.message[0] = '\0';
        check_true(load(bs, &t, &w, &err) == BL_ERR_INPUT && strstr(err.message, bad[k].want1) &&
                       strstr(err.message, bad[k].want2),
                   "bad trial table %zu: %s", k, err.message);
        bl_trials_destroy(t);
    }
    bl_warnings_clear(&w);
}

HARNESS_CASE(band_and_onset_columns)
{
    if (!scratch()) return;
    bl_error err = {0};
    bl_warnings w = {0};
    bl_trials *t = NULL;
    write_acc_csv();
    /* a band whose name is already a column */
    write_file("bad.csv", "rat,rt,correct,onset,theta\nr1,0.5,1,1,3\n");
    const char *clash = "{\"trials\": {\"file\": \"bad.csv\", \"participant\": \"rat\", \"rt\": \"rt\", \"response\": "
                        "\"correct\", \"upper\": [1]},"
                        " \"recordings\": {\"file\": \"x.flac\", \"onset\": \"onset\"},"
                        " \"power\": {\"window\": {\"from\": -1, \"to\": 0}, \"bands\": {\"theta\": [4, 8]}}}";
    check_true(load(clash, &t, &w, &err) == BL_ERR_INPUT && strstr(err.message, "theta"),
               "band name clashes with a column: %s", err.message);
    const char *noonset = "{\"trials\": {\"file\": \"acc.csv\", \"participant\": \"rat\", \"rt\": \"rt\", "
                          "\"response\": \"correct\", \"upper\": [1]},"
                          " \"recordings\": {\"file\": \"x.flac\", \"onset\": \"onset\"},"
                          " \"power\": {\"window\": {\"from\": -1, \"to\": 0}, \"bands\": {\"theta\": [4, 8]}}}";
    check_true(load(noonset, &t, &w, &err) == BL_ERR_INPUT && strstr(err.message, "recordings.onset"),
               "missing onset column: %s", err.message);
    bl_warnings_clear(&w);
}

int main(int argc, char **argv)
{
    static const harness_case cases[] = {
        HARNESS_ENTRY(bids_events_stimulus_coding), HARNESS_ENTRY(accuracy_coding),        HARNESS_ENTRY(warnings),
        HARNESS_ENTRY(errors_name_the_culprit),     HARNESS_ENTRY(band_and_onset_columns),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
