/* Study file: every section parsed, defaults filled, extends resolved, and each bad input an error naming
 * the key path and value (contract: docs/study-file.md; JSON syntax per RFC 8259). */
#include "design/study.h"
#include "harness.h"

#include <stdlib.h>
#include <string.h>

#define TRIALS                                                                                                         \
    "\"trials\": {\"file\": \"t.csv\", \"participant\": \"rat\", \"rt\": \"rt\", \"response\": \"correct\", "          \
    "\"upper\": [\"1\"]}"
#define REC "\"recordings\": {\"file\": \"rec/{rat}.flac\", \"onset\": \"onset\"}"
#define POW "\"power\": {\"window\": {\"from\": -0.5, \"to\": 0}, \"bands\": {\"theta\": [4, 8]}}"

static bl_study *parse(const char *json, bl_error *err)
{
    bl_study *s = NULL;
    if (bl_study_parse(json, "/data/exp/study.json", &s, err)) return NULL;
    return s;
}

static void expect_error(const char *json, const char *want1, const char *want2)
{
    bl_error err = {0};
    bl_study *s = parse(json, &err);
    check_true(!s && err.status == BL_ERR_INPUT && strstr(err.message, want1) && (!want2 || strstr(err.message, want2)),
               "rejected naming '%s'%s%s: %s", want1, want2 ? " and '" : "", want2 ? want2 : "", err.message);
    bl_study_destroy(s);
}

/* The full example of the vocabulary contract. */
HARNESS_CASE(full_example)
{
    bl_error err = {0};
    const char *full =
        "{\n"
        "  \"trials\": {\"file\": \"trials.csv\", \"participant\": \"animal\", \"rt\": \"rt\", \"rt_unit\": \"ms\",\n"
        "    \"response\": \"correct\", \"upper\": [\"1\", 2], \"stimulus\": null, \"keep\": {\"rt_min\": 0.15, "
        "\"rt_max\": 3.0}},\n"
        "  \"recordings\": {\"file\": \"recordings/{animal}.flac\", \"onset\": \"onset\", \"gain\": 1000, \"unit\": "
        "\"uV\",\n"
        "    \"channels\": [\"1-2\", 3]},\n"
        "  \"power\": {\"window\": {\"align\": \"response\", \"from\": -0.5, \"to\": 0.0}, \"segment\": 0.25, "
        "\"overlap\": 0.5,\n"
        "    \"taper\": \"hann\", \"detrend\": \"linear\", \"bands\": {\"theta\": [4, 10], \"beta\": [15, 30]},\n"
        "    \"scale\": \"db\", \"standardize\": \"participant_condition\", \"condition\": [\"context\"], "
        "\"line_noise\": 50,\n"
        "    \"artifacts\": {\"peak_to_peak\": 500, \"flat\": 1, \"clipping\": true}, \"average\": \"median\"},\n"
        "  \"fit\": {\"participants\": \"separate\", \"starts\": 4},\n"
        "  \"models\": [\n"
        "    {\"name\": \"baseline\", \"threshold\": {\"per\": [\"context\"]}, \"drift\": {\"per\": "
        "[\"difficulty\"]}},\n"
        "    {\"name\": \"theta-threshold\", \"extends\": \"baseline\",\n"
        "     \"threshold\": {\"per\": [\"context\"], \"slopes\": {\"theta\": [\"context\"]}, \"link\": \"log\"},\n"
        "     \"start\": {}, \"drift_sd\": {\"fixed\": 0.3}}\n"
        "  ],\n"
        "  \"output\": \"/abs/results\"\n"
        "}\n";
    bl_study *s = parse(full, &err);
    if (check_true(s != NULL, "the contract example parses: %s", err.message)) {
        check_true(strcmp(s->trials.file, "/data/exp/trials.csv") == 0,
                   "relative trial file resolved against the study folder");
        check_true(strcmp(s->recordings.file, "/data/exp/recordings/{animal}.flac") == 0,
                   "recordings pattern resolved");
        check_true(strcmp(s->output, "/abs/results") == 0, "absolute output kept");
        check_true(s->trials.rt_in_ms && s->trials.n_upper == 2 && strcmp(s->trials.upper[1], "2") == 0,
                   "rt_unit ms, upper [\"1\", 2]");
        check_true(!s->trials.stimulus && s->trials.rt_min == 0.15 && s->trials.rt_max == 3.0, "keep rules");
        check_true(s->recordings.gain == 1000 && strcmp(s->recordings.unit, "uV") == 0 &&
                       s->recordings.n_channels == 2 && strcmp(s->recordings.channels[1], "3") == 0,
                   "gain, unit, channels");
        check_true(s->power.align == BL_ALIGN_RESPONSE && s->power.from == -0.5 && s->power.to == 0 &&
                       s->power.segment == 0.25 && s->power.overlap == 0.5 && s->power.detrend == BL_DETREND_LINEAR &&
                       s->power.median,
                   "window and Welch settings");
        check_true(s->power.n_bands == 2 && strcmp(s->power.bands[1].name, "beta") == 0 && s->power.bands[1].lo == 15 &&
                       s->power.bands[1].hi == 30,
                   "bands in file order");
        check_true(s->power.scale == BL_SCALE_DB && s->power.standardize == BL_STANDARDIZE_PARTICIPANT_CONDITION &&
                       s->power.n_condition == 1 && s->power.line_noise == 50,
                   "scale, standardize, condition, line_noise");
        check_true(s->power.peak_to_peak == 500 && s->power.flat == 1 && s->power.clipping, "artifact limits");
        check_true(s->fit.participants == BL_PARTICIPANTS_SEPARATE && s->fit.starts == 4, "fit section");
        check_true(s->n_models == 2, "two models");
        const bl_model_spec *b = &s->models[0], *m = &s->models[1];
        check_true(b->param[BL_THRESHOLD].named && b->param[BL_THRESHOLD].n_per == 1 &&
                       !b->param[BL_NONDECISION].named && !b->param[BL_NONDECISION].is_fixed &&
                       b->param[BL_NONDECISION].n_per == 0,
                   "baseline: threshold per context; nondecision unnamed = one free value");
        check_true(b->param[BL_START].is_fixed && b->param[BL_START].fixed == 0.5 && b->param[BL_DRIFT_SD].is_fixed &&
                       b->param[BL_DRIFT_SD].fixed == 0 && b->param[BL_CONTAMINATION].is_fixed,
                   "defaults: start 0.5, variabilities 0");
        check_true(m->extends && strcmp(m->extends, "baseline") == 0, "extends recorded");
        check_true(m->param[BL_DRIFT].named && m->param[BL_DRIFT].n_per == 1 &&
                       strcmp(m->param[BL_DRIFT].per[0], "difficulty") == 0,
                   "extends copies drift per difficulty from the base");
        check_true(m->param[BL_THRESHOLD].n_slopes == 1 &&
                       strcmp(m->param[BL_THRESHOLD].slopes[0].regressor, "theta") == 0 &&
                       m->param[BL_THRESHOLD].slopes[0].n_by == 1 && m->param[BL_THRESHOLD].link == BL_LINK_LOG,
                   "override: theta slope per context, log link");
        check_true(m->param[BL_START].named && !m->param[BL_START].is_fixed, "start: {} makes it free");
        check_true(m->param[BL_DRIFT_SD].is_fixed && m->param[BL_DRIFT_SD].fixed == 0.3, "drift_sd fixed 0.3");
        check_true(b->param[BL_THRESHOLD].n_slopes == 0, "the base model is unchanged");
        char *json = NULL;
        bl_study *again = NULL;
        check_true(bl_study_to_json(s, &json, &err) == BL_OK &&
                       bl_study_parse(json, "/data/exp/study.json", &again, &err) == BL_OK,
                   "the provenance JSON parses again as a study: %s", err.message);
        if (again) {
            check_true(again->n_models == 2 && again->models[1].param[BL_THRESHOLD].n_slopes == 1 &&
                           again->power.median && again->fit.starts == 4,
                       "round trip keeps models and settings");
            char *json2 = NULL;
            check_true(bl_study_to_json(again, &json2, &err) == BL_OK && strcmp(json, json2) == 0,
                       "provenance JSON is a fixed point");
            free(json2);
        }
        bl_study_destroy(again);
        free(json);
        bl_study_destroy(s);
    }
}

/* Defaults of a minimal study. */
HARNESS_CASE(minimal_defaults)
{
    bl_error err = {0};
    bl_study *s = parse("{" TRIALS "," REC "," POW "}", &err);
    if (check_true(s != NULL, "minimal study parses: %s", err.message)) {
        check_true(s->power.segment == 0.5 && s->power.overlap == 0.5 && s->power.detrend == BL_DETREND_MEAN &&
                       s->power.scale == BL_SCALE_LOG10 && s->power.standardize == BL_STANDARDIZE_PARTICIPANT &&
                       s->recordings.gain == 1 && strcmp(s->recordings.unit, "au") == 0 &&
                       s->recordings.n_channels == 1 && strcmp(s->recordings.channels[0], "1") == 0 &&
                       s->fit.participants == BL_PARTICIPANTS_POOLED && s->fit.starts == 3 && s->n_models == 0 &&
                       strcmp(s->output, "/data/exp/results") == 0 && strcmp(s->trials.trial, "trial") == 0 &&
                       !s->trials.trial_given && isnan(s->trials.rt_min),
                   "documented defaults filled in");
        bl_study_destroy(s);
    }
}

/* Syntax errors: line and column. */
HARNESS_CASE(syntax_errors)
{
    expect_error("{\n  \"trials\": {\"file\": 1,}\n}", "study.json:2:", "JSON syntax error");
    expect_error("{\"trials\": ", "study.json:1:", "end of file");
    expect_error("[1, 2]", "must be a JSON object", NULL);
}

/* Structure errors in models and fit: key path and value. */
HARNESS_CASE(model_errors)
{
    expect_error("{" TRIALS ", \"model\": []}", "unknown key \"model\"", NULL);
    expect_error("{" TRIALS ", \"models\": [{\"name\": \"a\", \"threshold\": {\"slope\": {}}}]}",
                 "unknown key \"models[0].threshold.slope\"", "slopes");
    expect_error("{" TRIALS ", \"models\": [{\"name\": \"a\", \"treshold\": {}}]}", "models[0].treshold", NULL);
    expect_error("{" TRIALS ", \"models\": [{\"name\": \"a\"}, {\"name\": \"b\", \"extends\": \"c\"}]}",
                 "models[1].extends", "\"c\"");
    expect_error("{" TRIALS
                 ", \"models\": [{\"name\": \"a\", \"extends\": \"b\"}, {\"name\": \"b\", \"extends\": \"a\"}]}",
                 "cycle", NULL);
    expect_error("{" TRIALS ", \"models\": [{\"name\": \"a\"}, {\"name\": \"a\"}]}", "models[1].name", NULL);
    expect_error("{" TRIALS ", \"models\": [{\"name\": \"a\", \"start\": {\"fixed\": 1.5}}]}", "models[0].start.fixed",
                 "1.5");
    expect_error("{" TRIALS ", \"models\": [{\"name\": \"a\", \"threshold\": {\"fixed\": 1, \"per\": [\"x\"]}}]}",
                 "models[0].threshold.fixed", NULL);
    expect_error("{" TRIALS ", \"models\": [{\"name\": \"a\", \"drift\": {\"link\": \"logit\"}}]}",
                 "models[0].drift.link", "logit");
    expect_error("{" TRIALS ", \"models\": [{\"name\": \"a\", \"drift\": {\"slopes\": {\"theta\": \"ctx\"}}}]}",
                 "models[0].drift.slopes.theta", "\"ctx\"");
    expect_error("{" TRIALS ", \"fit\": {\"participants\": \"pool\"}}", "fit.participants", "\"pool\"");
    expect_error("{" TRIALS ", \"fit\": {\"starts\": 0}}", "fit.starts", NULL);
}

/* Structure errors in trials: key path and value. */
HARNESS_CASE(trials_errors)
{
    expect_error("{\"trials\": {\"file\": \"t.csv\", \"participant\": \"rat\", \"rt\": \"rt\", \"response\": \"c\"}}",
                 "trials.upper", "required");
    expect_error(
        "{\"trials\": {\"file\": \"t.csv\", \"participant\": \"rat\", \"rt\": 3, \"response\": \"c\", \"upper\": [1]}}",
        "trials.rt", "3");
    expect_error("{\"trials\": {\"file\": \"t.csv\", \"participant\": \"rat\", \"rt\": \"rt\", \"rt_unit\": \"sec\", "
                 "\"response\": \"c\", \"upper\": [1]}}",
                 "trials.rt_unit", "\"sec\"");
    expect_error("{\"trials\": {\"file\": \"t.csv\", \"participant\": \"rat\", \"rt\": \"rt\", \"response\": \"c\", "
                 "\"upper\": [1], \"keep\": {\"rt_min\": 2, \"rt_max\": 1}}}",
                 "trials.keep.rt_max", NULL);
}

/* Structure errors in recordings and power: key path and value. */
HARNESS_CASE(recordings_and_power_errors)
{
    expect_error("{" TRIALS "," REC "}", "\"power\"", "required");
    expect_error("{" TRIALS "," POW "}", "\"recordings\"", "required");
    expect_error("{" TRIALS ", \"recordings\": {\"file\": \"x.flac\", \"onset\": \"onset\", \"unit\": \"volts\"}," POW
                 "}",
                 "recordings.unit", "\"volts\"");
    expect_error("{" TRIALS ", \"recordings\": {\"file\": \"x.csv\", \"onset\": \"onset\"}," POW "}", "recordings.rate",
                 "CSV");
    expect_error("{" TRIALS
                 ", \"recordings\": {\"file\": \"x.flac\", \"onset\": \"onset\", \"channels\": [\"1-x\"]}," POW "}",
                 "recordings.channels[0]", "1-x");
    expect_error("{" TRIALS ", \"recordings\": {\"file\": \"x.flac\", \"onset\": \"onset\", \"gain\": -2}," POW "}",
                 "recordings.gain", "-2");
    expect_error("{" TRIALS "," REC
                 ", \"power\": {\"window\": {\"from\": 0, \"to\": -0.5}, \"bands\": {\"theta\": [4, 8]}}}",
                 "power.window.to", "-0.5");
    expect_error("{" TRIALS "," REC
                 ", \"power\": {\"window\": {\"from\": -1, \"to\": 0}, \"bands\": {\"theta\": [8, 4]}}}",
                 "power.bands.theta", "[8,4]");
    expect_error("{" TRIALS ", \"recordings\": {\"file\": \"x.csv\", \"onset\": \"onset\", \"rate\": 100}, \"power\": "
                            "{\"window\": {\"from\": -1, \"to\": 0}, \"bands\": {\"gamma\": [30, 80]}}}",
                 "power.bands.gamma", "Nyquist");
    expect_error(
        "{" TRIALS "," REC
        ", \"power\": {\"window\": {\"from\": -1, \"to\": 0}, \"segment\": 2, \"bands\": {\"theta\": [4, 8]}}}",
        "power.segment", "2");
    expect_error(
        "{" TRIALS "," REC
        ", \"power\": {\"window\": {\"from\": -1, \"to\": 0}, \"overlap\": 1, \"bands\": {\"theta\": [4, 8]}}}",
        "power.overlap", "1");
    expect_error(
        "{" TRIALS "," REC
        ", \"power\": {\"window\": {\"from\": -1, \"to\": 0}, \"taper\": \"hamming\", \"bands\": {\"theta\": [4, 8]}}}",
        "power.taper", "hamming");
    expect_error("{" TRIALS "," REC ", \"power\": {\"window\": {\"from\": -1, \"to\": 0}, \"standardize\": "
                                    "\"participant_condition\", \"bands\": {\"theta\": [4, 8]}}}",
                 "power.condition", "required");
    expect_error(
        "{" TRIALS "," REC
        ", \"power\": {\"window\": {\"from\": -1, \"to\": 0}, \"line_noise\": 55, \"bands\": {\"theta\": [4, 8]}}}",
        "power.line_noise", "55");
    expect_error("{" TRIALS "," REC ", \"power\": {\"window\": {\"from\": -1, \"to\": 0}, \"artifacts\": "
                                    "{\"peak_to_peak\": 100, \"clip\": true}, \"bands\": {\"theta\": [4, 8]}}}",
                 "power.artifacts.clip", NULL);
    expect_error("{" TRIALS "," REC
                 ", \"power\": {\"window\": {\"from\": -1, \"to\": 0}, \"bands\": {\"the ta\": [4, 8]}}}",
                 "power.bands.the ta", NULL);
}

/* A key given twice, a study file that does not exist. */
HARNESS_CASE(duplicate_key_and_missing_file)
{
    bl_error err = {0};
    expect_error("{" TRIALS ", \"trials\": {}}", "appears twice", NULL);
    bl_study *x = NULL;
    check_true(bl_study_load("/nonexistent/study.json", &x, &err) == BL_ERR_INPUT &&
                   strstr(err.message, "/nonexistent/study.json"),
               "missing study file named: %s", err.message);
}

int main(int argc, char **argv)
{
    static const harness_case cases[] = {
        HARNESS_ENTRY(full_example),
        HARNESS_ENTRY(minimal_defaults),
        HARNESS_ENTRY(syntax_errors),
        HARNESS_ENTRY(model_errors),
        HARNESS_ENTRY(trials_errors),
        HARNESS_ENTRY(recordings_and_power_errors),
        HARNESS_ENTRY(duplicate_key_and_missing_file),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
