/* The scan's page (scan_report.html): the research-use caution, what was scanned and how the family-wise
 * error was controlled, the strongest cells, every heat map inline, and the cells significant after
 * correction. Written beside scan.csv and the heat maps, in the page frame of report.html. */
#include "scan/scan.h"
#include "scan/scan_stats.h"
#include "core/output.h"
#include "report/report.h"
#include "report/svg.h"
#include "bl_config.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

static void esc(FILE *f, const char *s) { bl_svg_escape(f, s ? s : ""); }

/* The heat map file of test t, as bl_scan_write_figures names it. */
static void heat_map_name(const bl_scan_result *r, size_t t, char *name, size_t size)
{
    snprintf(name, size, "scan_%s%s%s.svg", bl_param_name((bl_param)r->test_param[t]), r->test_level[t][0] ? "_" : "",
             r->test_level[t]);
    for (char *q = name; *q; q++)
        if (*q == '/' || *q == ':' || *q == ' ' || *q == '\\') *q = '-';
}

/* Copy a written heat map into the page (inline SVG: the page stays self-contained). */
static bl_status inline_file(FILE *f, const char *dir, const char *name, bl_error *err)
{
    char *path = NULL;
    bl_status st = bl_path_join(dir, name, &path, err);
    if (st) return st;
    FILE *in = fopen(path, "rb");
    if (!in) {
        st = bl_error_set(err, BL_ERR_IO, "%s: cannot read the heat map back: %s", path, strerror(errno));
        free(path);
        return st;
    }
    char buf[65536];
    size_t n;
    while ((n = fread(buf, 1, sizeof buf, in)) > 0) fwrite(buf, 1, n, f);
    fclose(in);
    free(path);
    return BL_OK;
}

static void significant_cells(FILE *f, const bl_scan_result *r)
{
    const bl_scan_stats *s = r->stats;
    size_t nc = s->n_freqs * s->n_windows, shown = 0;
    fputs("<h2 id=\"significant\">Cells significant after correction (family-wise p &#8804; 0.05)</h2>\n", f);
    fputs("<div class=\"scroll\"><table><tr><th class=\"t\">parameter</th><th>frequency (Hz)</th>"
          "<th>window (s)</th><th>statistic</th><th>estimate</th><th>p</th><th>family-wise p</th></tr>\n",
          f);
    for (size_t t = 0; t < r->n_tests; t++)
        for (size_t c = 0; c < nc && shown < 200; c++) {
            double pf = s->p_familywise[t * nc + c];
            if (!(pf <= 0.05)) continue;
            size_t fi = c / s->n_windows, wi = c % s->n_windows;
            fputs("<tr><td class=\"t\">", f);
            esc(f, bl_param_name((bl_param)r->test_param[t]));
            if (r->test_level[t][0]) {
                fputc(':', f);
                esc(f, r->test_level[t]);
            }
            fprintf(
                f, "</td><td>%.3g</td><td>%.3g to %.3g</td><td>%.3f</td><td>%.4g</td><td>%.3g</td><td>%.4f</td></tr>\n",
                r->spec->freq[fi], r->spec->window_from[wi], r->spec->window_from[wi] + r->spec->length,
                s->statistic[t * nc + c], s->estimate[t * nc + c], s->p[t * nc + c], pf);
            shown++;
        }
    fputs("</table></div>\n", f);
    if (shown == 0) fputs("<p>No cell is significant after correction.</p>\n", f);
    else if (shown == 200) fputs("<p class=\"muted\">The first 200 are shown; scan.csv has every cell.</p>\n", f);
}

bl_status bl_scan_write_report(const bl_scan_result *r, const char *study_path, const char *dir, bl_error *err)
{
    char *path = NULL, *summary = bl_scan_summary(r);
    bl_outfile *o = NULL;
    bl_status st = summary ? bl_path_join(dir, "scan_report.html", &path, err)
                           : bl_error_set(err, BL_ERR_NOMEM, "out of memory writing the scan report");
    if (!st) st = bl_outfile_open(path, &o, err);
    if (st) goto done;
    FILE *f = bl_outfile_stream(o);
    bl_report_page_begin(f, "bandlink scan", study_path);
    fputs("<h2 id=\"summary\">What was scanned</h2>\n<pre>", f);
    esc(f, summary);
    fputs("</pre>\n<p>Each cell's power is a regressor; its statistic is the score test of a slope on it in the null "
          "model, and the family-wise p comes from the same statistic recomputed with the power shuffled within "
          "participant &#215; condition cells (docs/scan.md). Outlined cells in the heat maps are significant after "
          "correction.</p>\n",
          f);
    fputs("<h2 id=\"maps\">Heat maps</h2>\n", f);
    for (size_t t = 0; t < r->n_tests && !st; t++) {
        char name[300];
        heat_map_name(r, t, name, sizeof name);
        fputs("<figure>\n", f);
        st = inline_file(f, dir, name, err);
        fputs("<figcaption>", f);
        esc(f, name);
        fputs("</figcaption>\n</figure>\n", f);
    }
    significant_cells(f, r);
    bl_report_page_end(f, BL_VERSION_STRING, "scan.csv, scan_*.svg, power.csv, provenance.json");
    if (st) goto done;
    st = bl_outfile_commit(o, err);
    o = NULL;
done:
    bl_outfile_abort(o);
    free(path);
    free(summary);
    return st;
}
