/* The five figures of a run, as SVG (svg.h), kept in memory for the report and written into
 * figures/ (docs/report.md):
 *   power_spectrum.svg        PSD by condition cell: mean +- SE over trials, bands shaded, log axis
 *   parameter_vs_regressor.svg trial-wise predicted parameter vs regressor, per condition, with
 *                             observed estimates per regressor bin (EZ-diffusion of the bin's data)
 *   quantile_probability.svg  observed RT quantiles (points) vs the model's (lines) against the
 *                             response probability, one panel per model
 *   coefficients.svg          coefficients with 95% CIs (per participant and group when `separate`)
 *   model_comparison.svg      delta AIC and delta BIC bars
 * Figures about "the best model" use the model with the lowest AIC.
 */
#ifndef BL_FIGURES_H
#define BL_FIGURES_H

#include "fit/fit.h"
#include "report/goodness.h"
#include "signal/power.h"
#include "bandlink/status.h"
#include "design/study.h"
#include "design/trials.h"

#include <stddef.h>

typedef struct {
    char *file;    /* "power_spectrum.svg" (name inside figures/) */
    char *title;   /* short title */
    char *caption; /* one or two sentences for the report */
    char *svg;     /* the <svg> element (no XML declaration) */
    size_t size;   /* strlen(svg) */
} bl_figure;

typedef struct {
    size_t n;
    bl_figure *items;
} bl_figure_set;

/* Draw every figure. `power` may be NULL (no recordings: the spectrum figure then says so).
 * `g` is the goodness-of-fit result of the same trials and fit set. */
bl_status bl_figures_make(const bl_study *study, const bl_trials *trials, const bl_power_result *power,
                          const bl_fit_set *set, const bl_goodness *g, bl_figure_set **out, bl_error *err);
/* Write each figure as a standalone .svg file into folder `dir` (created if missing), atomically. */
bl_status bl_figures_write(const bl_figure_set *figs, const char *dir, bl_error *err);
void bl_figure_set_destroy(bl_figure_set *figs);

/* Index of the model with the lowest AIC (ties: the first), or -1 when none has a finite AIC. */
int bl_figures_best_model(const bl_fit_set *set);

#endif
