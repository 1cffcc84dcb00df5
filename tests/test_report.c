/* report.html: self-contained (no scripts, no external resources), every section present, the
 * numbers of the comparison and coefficient tables, escaping, the caution, determinism.
 * Rendering in a real browser engine is checked by tests/cli/report_chromium.sh; HTML structure by
 * python's html.parser in tests/reference/report_reference.py. */
#include "report/report.h"
#include "harness.h"
#include "report_fixture.h"

#include <gsl/gsl_errno.h>
#include <unistd.h>

static size_t count(const char *hay, const char *needle)
{
    size_t n = 0, k = strlen(needle);
    for (const char *p = strstr(hay, needle); p; p = strstr(p + k, needle)) n++;
    return n;
}

static char *make(fixture *fx, const char *path, int with_power, const bl_warnings *w)
{
    bl_error err = {0};
    bl_goodness *g = NULL;
    bl_figure_set *fs = NULL;
    char *out = NULL;
    if (bl_goodness_compute(&fx->study, &fx->trials, &fx->set, 1, &g, &err) != BL_OK) goto done;
    if (bl_figures_make(&fx->study, &fx->trials, with_power ? &fx->power : NULL, &fx->set, g, &fs, &err) != BL_OK)
        goto done;
    const char *stages[2] = {"power", "fits"};
    double secs[2] = {0.25, 1.5};
    bl_report_job job = {
        "0.1.0", "demo/study.json", "2026-12-02T00:00:00Z", "2026-12-02T00:00:09Z", 1, 42, 2, 0, 2, stages, secs};
    if (bl_report_write(path, &job, &fx->study, &fx->trials, with_power ? &fx->power : NULL, &fx->set, g, fs, w,
                        &err) == BL_OK)
        out = harness_read_file(path);
done:
    check_true(out != NULL, "report written (%s)", err.message);
    bl_figure_set_destroy(fs);
    bl_goodness_destroy(g);
    return out;
}

/* The scratch folder (report.html and again.html in it), made on first use and removed at exit. */
static char dir[] = "/tmp/bl_test_report_XXXXXX";
static char path[256], path2[256];

static void scratch_free(void)
{
    char cmd[300];
    snprintf(cmd, sizeof cmd, "rm -rf %s", dir);
    if (system(cmd) != 0) printf("note: could not remove %s\n", dir);
}

static int scratch(void)
{
    static int state;
    if (!state) {
        state = mkdtemp(dir) ? 1 : -1;
        if (state > 0) atexit(scratch_free);
        check_true(state > 0, "temp folder");
        snprintf(path, sizeof path, "%s/report.html", dir);
        snprintf(path2, sizeof path2, "%s/again.html", dir);
    }
    return state > 0;
}

HARNESS_CASE(full_report)
{
    if (!scratch()) return;
    fixture *fx = fixture_create(20261202, 0);
    bl_warnings w = {0};
    bl_warnings_add(&w, "participant r2: 41%% of trials excluded <check> & \"fix\"");
    char *a = make(fx, path, 1, &w), *b = make(fx, path2, 1, &w);
    check_true(a && b && strcmp(a, b) == 0, "same inputs, same bytes");
    if (a) {
        check_true(strncmp(a, "<!DOCTYPE html>\n<html lang=\"en\">", 31) == 0, "HTML5 document");
        check_true(strstr(a, "<meta charset=\"utf-8\">") != NULL, "declares UTF-8");
        /* Self-contained: nothing fetched. The only URL is the SVG namespace, which is a name. */
        check_true(!strstr(a, "<script") && !strstr(a, "<link") && !strstr(a, "<img") && !strstr(a, "@import") &&
                       !strstr(a, "<iframe"),
                   "no scripts, links, images, imports or frames");
        check_true(count(a, "://") == count(a, "xmlns=\"http://www.w3.org/2000/svg\""), "no URL but the SVG namespace");
        check_true(count(a, "url(") == count(a, "url(#"), "only in-page url(#...) references");
        check_true(strstr(a, "Research use only; not a medical device.") != NULL, "research-use caution");
        check_true(count(a, "not a medical device") >= 2, "caution at the top and the bottom");
        /* Sections. */
        const char *ids[] = {"id=\"job\"",          "id=\"data\"",     "id=\"comparison\"",
                             "id=\"coefficients\"", "id=\"goodness\"", "id=\"figures\""};
        for (int i = 0; i < 6; i++) check_true(strstr(a, ids[i]) != NULL, "section %s", ids[i]);
        /* Job and data summary. */
        check_true(strstr(a, "<dt>seed</dt><dd>42</dd>") && strstr(a, "<dt>threads</dt><dd>2</dd>"),
                   "seed and threads");
        check_true(strstr(a, "power 0.25 s, fits 1.50 s") != NULL, "stage times");
        check_true(strstr(a, "600 in the table, 597 kept, 3 excluded") != NULL, "trial counts");
        check_true(strstr(a, "<td class=\"t\">rt_min</td><td>1</td>") &&
                       strstr(a, "<td class=\"t\">artifact: flat</td><td>2</td>"),
                   "exclusions by reason with counts");
        check_true(strstr(a, "2 (r1, r2)") != NULL, "participants listed");
        check_true(strstr(a, "theta 4&#8211;10 Hz: 4 bins") != NULL, "band bins");
        check_true(strstr(a, "41% of trials excluded &lt;check&gt; &amp; &quot;fix&quot;") != NULL, "warning escaped");
        /* Comparison: AIC = 2k - 2LL (Akaike 1974) -> baseline 2*4 + 825.5 = 833.50, theta 10 + 796.25 = 806.25. */
        check_true(strstr(a, "<td>833.50</td>") && strstr(a, "<td>806.25</td>"), "AIC values");
        check_true(strstr(a, "<td>27.25</td>") != NULL, "delta AIC of baseline = 27.25");
        check_true(strstr(a, "<tr class=\"best\"><td class=\"t\">theta-threshold</td>") != NULL,
                   "best model highlighted");
        /* LRT statistic 2 (LL1 - LL0) = 29.25, df 1. */
        check_true(strstr(a, "<td>29.25</td><td>1</td><td>&lt; 0.001</td>") != NULL, "likelihood-ratio test");
        /* Coefficients: 0.24 +- 1.96 x 0.05 = 0.142 to 0.338. */
        check_true(strstr(a, "<td>0.24</td><td>0.05</td><td>0.142 to 0.338</td><td>4.80</td>") != NULL, "slope row");
        check_true(strstr(a, "<details open><summary><strong>theta-threshold</strong> (lowest AIC)") != NULL,
                   "best model's coefficients open");
        /* Figures inline and linked. */
        check_true(count(a, "<figure>") == 5 && count(a, "<svg xmlns") == 5, "five inline figures");
        check_true(strstr(a, "<a href=\"figures/power_spectrum.svg\">") != NULL, "figures linked");
        check_true(!strstr(a, "<?xml"), "no XML declaration inside HTML");
        check_true(count(a, "<table") == count(a, "</table>") && count(a, "<details") == count(a, "</details>"),
                   "tables and details balanced");
        check_true(strstr(a, "&#8211;") != NULL, "missing numbers shown as a dash, not nan");
        check_true(!strstr(a, "nan") && !strstr(a, ">inf"), "no nan/inf printed");
    }
    free(a);
    free(b);
    bl_warnings_clear(&w);
    fixture_destroy(fx);
}

/* No warnings, no recordings. */
HARNESS_CASE(no_warnings_no_recordings)
{
    if (!scratch()) return;
    fixture *fx = fixture_create(20261202, 0);
    char *a = make(fx, path, 0, NULL);
    if (a) {
        check_true(strstr(a, "<h3>Warnings</h3>\n<p>None.</p>") != NULL, "no warnings said so");
        check_true(!strstr(a, "Welch settings"), "no Welch settings without recordings");
    }
    free(a);
    fixture_destroy(fx);
}

/* Separate mode: group table and per-participant tables. */
HARNESS_CASE(separate_mode)
{
    if (!scratch()) return;
    fixture *fx = fixture_create(5, 1);
    char *a = make(fx, path, 1, NULL);
    if (a) {
        check_true(strstr(a, "Group summary (DerSimonian&#8211;Laird random effects)") != NULL, "group table");
        check_true(strstr(a, "<h3>Participant r1</h3>") && strstr(a, "<h3>Participant r2</h3>"), "participant tables");
        check_true(strstr(a, "separately (plus a group summary)") != NULL, "mode stated");
    }
    free(a);
    fixture_destroy(fx);
}

/* The one-call entry point writes all three outputs. */
HARNESS_CASE(outputs_write)
{
    if (!scratch()) return;
    fixture *fx = fixture_create(11, 0);
    bl_error e1 = {0};
    double secs[3] = {-1, -1, -1};
    check_true(bl_report_outputs_write(dir, NULL, &fx->study, &fx->trials, &fx->power, &fx->set, NULL, 2, secs, &e1) ==
                   BL_OK,
               "bl_report_outputs_write (%s)", e1.message);
    const char *files[] = {"fit_quantiles.csv",
                           "report.html",
                           "figures/power_spectrum.svg",
                           "figures/parameter_vs_regressor.svg",
                           "figures/quantile_probability.svg",
                           "figures/coefficients.svg",
                           "figures/model_comparison.svg"};
    for (int i = 0; i < 7; i++) {
        char p[512];
        snprintf(p, sizeof p, "%s/%s", dir, files[i]);
        check_true(access(p, R_OK) == 0, "wrote %s", files[i]);
        unlink(p);
    }
    check_true(secs[0] >= 0 && secs[1] >= 0 && secs[2] >= 0, "stage times reported");
    char figdir[300];
    snprintf(figdir, sizeof figdir, "%s/figures", dir);
    rmdir(figdir);
    fixture_destroy(fx);
}

HARNESS_CASE(unwritable_path_and_caution)
{
    /* A folder that does not exist: an error naming the path, nothing written. */
    bl_error err = {0};
    check_true(bl_report_write("/nonexistent-dir-bl/report.html", NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL,
                               &err) == BL_ERR_IO &&
                   strstr(err.message, "/nonexistent-dir-bl/report.html"),
               "unwritable path: I/O error naming it (%s)", err.message);
    check_true(strstr(bl_report_caution(), "not a medical device") != NULL, "caution text");
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(full_report),   HARNESS_ENTRY(no_warnings_no_recordings),   HARNESS_ENTRY(separate_mode),
        HARNESS_ENTRY(outputs_write), HARNESS_ENTRY(unwritable_path_and_caution),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
