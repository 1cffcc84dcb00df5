/* report.html: one self-contained page (inline CSS and SVG; no scripts, no network, no external
 * fonts) with the job summary, the data summary (participants, trials kept and excluded by reason,
 * recordings and Welch settings, warnings), the model comparison, the coefficients, a goodness-of-
 * fit summary, the figures with captions, and the research-use caution. docs/report.md.
 */
#ifndef BL_REPORT_H
#define BL_REPORT_H

#include "report/figures.h"
#include "fit/fit.h"
#include "report/goodness.h"
#include "signal/power.h"
#include "bandlink/status.h"
#include "design/study.h"
#include "design/trials.h"

#include <stddef.h>
#include <stdio.h>

/* What the job was; every field may be NULL / 0 and is then left out. */
typedef struct {
    const char *version;            /* bandlink version */
    const char *study_path;         /* the study file as given */
    const char *started, *finished; /* UTC times, ISO 8601 */
    int has_seed;
    unsigned long seed;
    int threads;
    size_t permutations;
    size_t n_stages; /* wall time per stage so far (e.g. power, fits, goodness, figures) */
    const char *const *stage_names;
    const double *stage_seconds;
} bl_report_job;

/* Write report.html atomically. `power` and `figs` may be NULL; `g` must be the goodness of fit of
 * `set` (may be NULL: the summary is then left out). Figures are inlined and also linked as
 * figures/<file>. */
bl_status bl_report_write(const char *path, const bl_report_job *job, const bl_study *study, const bl_trials *trials,
                          const bl_power_result *power, const bl_fit_set *set, const bl_goodness *g,
                          const bl_figure_set *figs, const bl_warnings *warnings, bl_error *err);

/* Everything of the report module in one call, into folder `dir` (which must exist):
 * fit_quantiles.csv, figures/ (five .svg files) and report.html. `power` may be NULL. `seconds`
 * (may be NULL) receives the wall time of the three stages: [0] goodness of fit, [1] figures,
 * [2] report. threads <= 0: OpenMP default (results do not depend on it). */
bl_status bl_report_outputs_write(const char *dir, const bl_report_job *job, const bl_study *study,
                                  const bl_trials *trials, const bl_power_result *power, const bl_fit_set *set,
                                  const bl_warnings *warnings, int threads, double seconds[3], bl_error *err);

/* The frame of every bandlink page (report.html, the scan's page): doctype, styles, a heading with `title`
 * (`subject`, e.g. the study file, may be NULL, and goes into the window title) and the research-use caution;
 * then the footer naming the version and the files beside the page. */
void bl_report_page_begin(FILE *f, const char *title, const char *subject);
void bl_report_page_end(FILE *f, const char *version, const char *files);

/* The research-use caution shown in the report (and available to other outputs). */
const char *bl_report_caution(void);

#endif
