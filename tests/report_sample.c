/* Writes the report module's outputs for the invented fixture into a folder, for the outside checks
 * (python's XML parser, numpy quantiles, headless Chromium):
 *   report_sample DIR [separate]
 * DIR/fit_quantiles.csv, the SVG files in DIR/figures, DIR/report.html, and DIR/sample_trials.csv (row, rt,
 * upper, context, theta, used) so the observed columns can be recomputed independently. */
#include "report/figures.h"
#include "report/goodness.h"
#include "core/output.h"
#include "report/report.h"
#include "report_fixture.h"

#include <gsl/gsl_errno.h>
#include <stdio.h>

int main(int argc, char **argv)
{
    if (argc < 2) {
        fprintf(stderr, "usage: report_sample DIR [separate]\n");
        return 2;
    }
    gsl_set_error_handler_off();
    const char *dir = argv[1];
    int separate = argc > 2 && strcmp(argv[2], "separate") == 0;
    bl_error err = {0};
    fixture *fx = fixture_create(20261202, separate);
    bl_goodness *g = NULL;
    bl_figure_set *fs = NULL;
    char *p = NULL;
    int rc = 1;
    bl_warnings warn = {0};
    bl_warnings_add(&warn, "model 'theta-threshold': <an invented warning & its escaping>");
    if (bl_mkdir_p(dir, &err) || bl_goodness_compute(&fx->study, &fx->trials, &fx->set, 0, &g, &err)) goto done;
    if (bl_path_join(dir, "fit_quantiles.csv", &p, NULL) || bl_goodness_write_csv(g, p, &err)) goto done;
    free(p);
    if (bl_figures_make(&fx->study, &fx->trials, &fx->power, &fx->set, g, &fs, &err)) goto done;
    if (bl_path_join(dir, "figures", &p, NULL) || bl_figures_write(fs, p, &err)) goto done;
    free(p);
    const char *stages[3] = {"power", "fits", "goodness"};
    double secs[3] = {0.5, 2.25, 0.125};
    bl_report_job job = {
        "0.1.0", "fixture/study.json", "2026-12-02T00:00:00Z", "2026-12-02T00:00:03Z", 1, 7, 2, 0, 3, stages, secs};
    if (bl_path_join(dir, "report.html", &p, NULL) ||
        bl_report_write(p, &job, &fx->study, &fx->trials, &fx->power, &fx->set, g, fs, &warn, &err))
        goto done;
    free(p);
    if (bl_path_join(dir, "sample_trials.csv", &p, NULL)) goto done;
    FILE *f = fopen(p, "w");
    if (!f) goto done;
    fprintf(f, "row,rt,upper,context,theta,used\n");
    for (size_t i = 0; i < fx->trials.n; i++)
        fprintf(f, "%zu,%.17g,%d,%s,%.17g,%d\n", i, fx->trials.rt[i], fx->trials.upper[i],
                fx->trials.table->cols[bl_table_find(fx->trials.table, "context")].text[i], fx->theta[i], fx->used[i]);
    rc = fclose(f) != 0;
done:
    if (rc && err.message[0]) fprintf(stderr, "report_sample: %s\n", err.message);
    free(p);
    bl_figure_set_destroy(fs);
    bl_goodness_destroy(g);
    bl_warnings_clear(&warn);
    fixture_destroy(fx);
    return rc;
}
