/* The five figures of a run (figures.h), drawn with the SVG layer (svg.h).
 *
 * Sources: standard error of a mean = SD / sqrt(n) (sample SD, n - 1); EZ-diffusion estimates of a
 * bin's drift, threshold and nondecision from its proportion correct and the mean and variance of
 * correct RTs: Wagenmakers, van der Maas & Grasman (2007), Psychonomic Bulletin & Review 14(1),
 * with their edge correction for a proportion correct of 1 (use 1 - 1/(2n));
 * quantile-probability plots: Ratcliff & McKoon (2008), Neural Computation 20(4).
 */
#include "report/figures.h"

#include "core/output.h"
#include "report/svg.h"
#include "core/strutil.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static const double PANEL_W = 380, PANEL_H = 280;

/* Set when a label or caption could not be allocated: the figure would silently lack it, so
 * bl_figures_make fails instead (per thread: figures are made on one thread at a time). */
static _Thread_local int figure_text_lost;

static char *xprintf(const char *fmt, ...) BL_PRINTF(1, 2);
static char *xprintf(const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    int n = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (n < 0) return NULL;
    char *s = malloc((size_t)n + 1);
    if (!s) {
        figure_text_lost = 1;
        return NULL;
    }
    va_start(ap, fmt);
    vsnprintf(s, (size_t)n + 1, fmt, ap);
    va_end(ap);
    return s;
}

int bl_figures_best_model(const bl_fit_set *set)
{
    int best = -1;
    for (size_t m = 0; set && m < set->n_models; m++)
        if (isfinite(set->models[m].aic) && (best < 0 || set->models[m].aic < set->models[best].aic)) best = (int)m;
    return best;
}

/* Axis text for a parameter, with its unit, e.g. "threshold (evidence units, s = 1)". */
static const char *bl_figures_param_unit(bl_param param)
{
    switch (param) {
    case BL_THRESHOLD: return "threshold (evidence units, s = 1)";
    case BL_DRIFT: return "drift (evidence units/s)";
    case BL_NONDECISION: return "nondecision (s)";
    case BL_START: return "start (fraction of threshold)";
    case BL_DRIFT_SD: return "drift_sd (evidence units/s)";
    case BL_START_RANGE: return "start_range (fraction of threshold)";
    case BL_NONDECISION_RANGE: return "nondecision_range (s)";
    case BL_CONTAMINATION: return "contamination (probability)";
    default: return "value";
    }
}

/* Short unit of a parameter for coefficient axes. */
static const char *param_short_unit(int param)
{
    switch (param) {
    case BL_THRESHOLD: return "evidence units";
    case BL_DRIFT:
    case BL_DRIFT_SD: return "evidence units/s";
    case BL_NONDECISION:
    case BL_NONDECISION_RANGE: return "s";
    case BL_START:
    case BL_START_RANGE: return "fraction of threshold";
    default: return "probability";
    }
}

static const bl_model_spec *find_spec(const bl_study *study, const char *name)
{
    for (size_t i = 0; i < study->n_models; i++)
        if (strcmp(study->models[i].name, name) == 0) return &study->models[i];
    return NULL;
}

/* Axis label of a regressor, with its unit: band regressors after the study's scale and
 * standardisation; other regressors are trial columns in their own units. */
static char *regressor_label(const bl_study *study, const char *name)
{
    const char *unit = study->recordings.unit ? study->recordings.unit : "unit";
    for (size_t b = 0; study->has_power && b < study->power.n_bands; b++) {
        if (strcmp(study->power.bands[b].name, name) != 0) continue;
        char scaled[128];
        switch (study->power.scale) {
        case BL_SCALE_LOG10: snprintf(scaled, sizeof scaled, "log10 %s\xC2\xB2", unit); break;
        case BL_SCALE_DB: snprintf(scaled, sizeof scaled, "dB re 1 %s\xC2\xB2", unit); break;
        default: snprintf(scaled, sizeof scaled, "%s\xC2\xB2", unit);
        }
        switch (study->power.standardize) {
        case BL_STANDARDIZE_PARTICIPANT: return xprintf("%s power (z-score of %s within participant)", name, scaled);
        case BL_STANDARDIZE_PARTICIPANT_CONDITION:
            return xprintf("%s power (z-score of %s within participant and condition)", name, scaled);
        default: return xprintf("%s power (%s)", name, scaled);
        }
    }
    return xprintf("%s (trial column, its own units)", name);
}

/* ---- figure list ---- */

static bl_status add_figure(bl_figure_set *fs, bl_svg *fig, const char *file, const char *title, char *caption,
                            bl_error *err)
{
    bl_figure *it = &fs->items[fs->n];
    memset(it, 0, sizeof *it);
    if (!fig || !caption) {
        free(caption);
        bl_svg_destroy(fig);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory drawing %s", file);
    }
    bl_status st = bl_svg_render(fig, &it->svg, &it->size, err);
    bl_svg_destroy(fig);
    if (st != BL_OK) {
        free(caption);
        return st;
    }
    it->caption = caption;
    if (!(it->file = bl_strdup(file)) || !(it->title = bl_strdup(title))) {
        free(it->file);
        free(it->title);
        free(it->svg);
        free(it->caption);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory drawing %s", file);
    }
    fs->n++;
    return BL_OK;
}

void bl_figure_set_destroy(bl_figure_set *figs)
{
    if (!figs) return;
    for (size_t i = 0; i < figs->n; i++) {
        free(figs->items[i].file);
        free(figs->items[i].title);
        free(figs->items[i].caption);
        free(figs->items[i].svg);
    }
    free(figs->items);
    free(figs);
}

/* ---- 1. power spectrum ---- */

static bl_svg *fig_spectrum(const bl_study *study, const bl_power_result *pr, const bl_goodness *g, char **caption)
{
    bl_svg *fig = bl_svg_create("psd", "Power spectral density by condition", 1, 1, 560, 340);
    if (!fig) return NULL;
    bl_svg_panel *p = bl_svg_panel_at(fig, 0);
    if (!pr || pr->n_freqs < 2) {
        bl_svg_note(p, "no recordings in this study: band power was not computed here");
        *caption = xprintf("No spectrum: the study has no recordings section.");
        return fig;
    }
    /* Show (0, fmax]: up to twice the highest band edge (at least 40 Hz), never beyond Nyquist. */
    double top = 0;
    for (size_t b = 0; b < pr->n_bands; b++) top = fmax(top, pr->bands[b].hi);
    double fhi = fmin(fmax(2 * top, 40), pr->freq[pr->n_freqs - 1]);
    size_t nf = 0;
    for (size_t j = 1; j < pr->n_freqs && pr->freq[j] <= fhi + 1e-9; j++) nf++;
    double *f = malloc((nf + 1) * sizeof *f), *mean = malloc((nf + 1) * sizeof *mean);
    double *lo = malloc((nf + 1) * sizeof *lo), *hi = malloc((nf + 1) * sizeof *hi);
    if (!f || !mean || !lo || !hi) {
        free(f), free(mean), free(lo), free(hi);
        bl_svg_destroy(fig);
        return NULL;
    }
    for (size_t j = 0; j < nf; j++) f[j] = pr->freq[j + 1];
    bl_svg_axis_log(p, BL_SVG_Y);
    const char *unit = pr->unit ? pr->unit : "unit";
    char *ylab = xprintf("PSD (%s\xC2\xB2/Hz)", unit);
    bl_svg_axis_label(p, BL_SVG_Y, ylab ? ylab : "PSD (unit\xC2\xB2/Hz)");
    free(ylab);
    bl_svg_axis_label(p, BL_SVG_X, "frequency (Hz)");
    bl_svg_axis_range(p, BL_SVG_X, 0, fhi);
    for (size_t b = 0; b < pr->n_bands; b++)
        bl_svg_vspan(p, pr->bands[b].lo, pr->bands[b].hi, pr->bands[b].name,
                     (bl_svg_style){.color = "#999999", .opacity = 0.15});
    bl_svg_legend_heading(fig, "condition (mean \xC2\xB1 SE)");
    size_t shown = 0;
    for (size_t c = 0; c < g->n_cells; c++) {
        const bl_goodness_group *cell = &g->groups[c];
        /* The cell's mean spectrum, accumulated while band power was computed (no per-trial PSDs kept). */
        const bl_power_spectrum *sp = NULL;
        for (size_t k = 0; k < pr->n_spectra && !sp; k++)
            if (strcmp(pr->spectra[k].condition, cell->condition) == 0) sp = &pr->spectra[k];
        for (size_t j = 0; j < nf; j++) {
            size_t n = sp ? sp->n[j + 1] : 0;
            double m = n ? sp->mean[j + 1] : NAN;
            double se = n > 1 ? sqrt(sp->m2[j + 1] / (double)(n - 1) / (double)n) : NAN;
            mean[j] = m;
            lo[j] = m - se;
            hi[j] = m + se;
        }
        bl_svg_style st = {.color = bl_svg_color((int)c)};
        bl_svg_ribbon(p, f, lo, hi, nf, (bl_svg_style){.color = st.color, .opacity = 0.25});
        bl_svg_line(p, f, mean, nf, st);
        char *lab = xprintf("%s (%zu trials)", cell->condition, cell->n);
        bl_svg_legend(fig, lab ? lab : cell->condition, BL_SVG_KEY_LINE, st);
        free(lab);
        shown++;
    }
    *caption = xprintf("Welch power spectral density of each trial's window, averaged over the kept trials of each "
                       "condition cell (line: mean; band: \xC2\xB1 1 standard error over trials). Shaded spans are "
                       "the frequency bands of the study (%zu). Frequency resolution %.3g Hz.",
                       pr->n_bands, pr->df);
    (void)study;
    (void)shown;
    free(f), free(mean), free(lo), free(hi);
    return fig;
}

/* ---- 2. predicted parameter vs regressor ---- */

typedef struct {
    bl_param param;
    const bl_slope_spec *slope;
} slope_ref;

static int is_correct(const bl_trials *t, size_t row)
{
    int toward_upper = t->drift_sign ? t->drift_sign[row] > 0 : 1;
    return (t->upper[row] != 0) == toward_upper;
}

/* EZ-diffusion estimate of one parameter from the trials of a bin; NAN when it has no solution. */
static double ez_estimate(const bl_trials *t, const bl_goodness_group *gr, int param)
{
    size_t n = 0, nc = 0;
    double s = 0, ss = 0;
    for (size_t i = 0; i < gr->n; i++) {
        size_t r = gr->rows[i];
        if (!isfinite(t->rt[r])) continue;
        n++;
        if (is_correct(t, r)) {
            nc++;
            s += t->rt[r];
        }
    }
    if (n == 0 || nc < 2) return NAN;
    double mrt = s / (double)nc;
    for (size_t i = 0; i < gr->n; i++) {
        size_t r = gr->rows[i];
        if (isfinite(t->rt[r]) && is_correct(t, r)) ss += (t->rt[r] - mrt) * (t->rt[r] - mrt);
    }
    double vrt = ss / (double)(nc - 1);
    double pc = (double)nc / (double)n;
    if (nc == n) pc = 1 - 1 / (2.0 * (double)n);
    double v, a, t0;
    if (bl_ez_diffusion(pc, vrt, mrt, &v, &a, &t0, NULL) != BL_OK) return NAN;
    return param == BL_THRESHOLD ? a : param == BL_DRIFT ? v : param == BL_NONDECISION ? t0 : NAN;
}

/* The stand-in figure when the best model has no slopes (or there is no fitted model). */
static bl_svg *fig_predicted_none(const bl_model_result *mr, char **caption)
{
    bl_svg *fig = bl_svg_create("pred", "Predicted parameter vs regressor", 1, 1, 560, 200);
    bl_svg_note(bl_svg_panel_at(fig, 0),
                mr ? "the best model has no slopes: every trial of a condition has the same parameters"
                   : "no fitted model");
    *caption = xprintf("No slopes in the model with the lowest AIC%s%s%s, so there is no parameter-regressor "
                       "relation to show.",
                       mr ? " (" : "", mr ? mr->name : "", mr ? ")" : "");
    return fig;
}

/* The conditions met so far, by colour (over all panels, in order of first use). */
typedef struct {
    char *labels[64];
    size_t n;
} condition_legend;

/* The colour index of a condition, added to the legend on first use. */
static size_t legend_index(condition_legend *leg, const char *condition)
{
    size_t ci;
    for (ci = 0; ci < leg->n; ci++)
        if (strcmp(leg->labels[ci], condition) == 0) break;
    if (ci == leg->n && leg->n < 64 && (leg->labels[leg->n] = xprintf("%s", condition))) leg->n++;
    return ci;
}

/* Axis labels and title of the panel of one slope. */
static void label_predicted_panel(const bl_study *study, bl_svg_panel *p, const slope_ref *r)
{
    char *xl = regressor_label(study, r->slope->regressor);
    bl_svg_axis_label(p, BL_SVG_X, xl ? xl : r->slope->regressor);
    free(xl);
    const char *yl = bl_figures_param_unit(r->param);
    char *yl2 = r->param == BL_DRIFT && study->trials.stimulus
                    ? xprintf("drift toward the correct response (evidence units/s)")
                    : NULL;
    bl_svg_axis_label(p, BL_SVG_Y, yl2 ? yl2 : yl);
    free(yl2);
    char *pt = xprintf("%s vs %s", bl_param_name(r->param), r->slope->regressor);
    bl_svg_panel_title(p, pt);
    free(pt);
}

/* One condition level in a slope's panel: the predicted parameter of every trial of its bins
 * groups[gi..gend) against the regressor xv, and the observed EZ estimate per bin at the bin's mean
 * regressor value. x and y have room for every trial. */
static void plot_condition_bins(bl_svg_panel *p, const bl_trials *t, const bl_model_result *mr, const slope_ref *r,
                                const bl_goodness *g, size_t gi, size_t gend, const double *xv, const char *color,
                                double *x, double *y)
{
    size_t n = 0;
    for (size_t b = gi; b < gend; b++)
        for (size_t i = 0; i < g->groups[b].n; i++) {
            size_t row = g->groups[b].rows[i];
            x[n] = xv[row];
            double v = mr->predicted[row].value[r->param];
            if (r->param == BL_DRIFT && t->drift_sign) v *= t->drift_sign[row];
            y[n++] = v;
        }
    bl_svg_points(p, x, y, n, (bl_svg_style){.color = color, .opacity = 0.3, .size = 1.6});
    if (r->param == BL_THRESHOLD || r->param == BL_DRIFT || r->param == BL_NONDECISION) {
        double bx[BL_GOODNESS_NBINS * 4], by[BL_GOODNESS_NBINS * 4];
        size_t nb = 0;
        for (size_t b = gi; b < gend && nb < BL_GOODNESS_NBINS * 4; b++) {
            bx[nb] = g->groups[b].regressor_mean;
            by[nb++] = ez_estimate(t, &g->groups[b], r->param);
        }
        bl_svg_line(p, bx, by, nb, (bl_svg_style){.color = color, .width = 1, .dashed = 1});
        bl_svg_points(p, bx, by, nb, (bl_svg_style){.color = color, .marker = BL_SVG_MARK_DIAMOND, .size = 4.5});
    }
}

/* The panel of one slope: each condition level of its binning, coloured by condition. Returns 0 when
 * the regressor column is missing from the trial table (the panel stays empty). */
static int plot_predicted_panel(const bl_study *study, const bl_trials *t, const bl_model_result *mr,
                                const bl_goodness *g, const slope_ref *r, bl_svg_panel *p, condition_legend *leg,
                                double *x, double *y)
{
    label_predicted_panel(study, p, r);
    int col = bl_table_find(t->table, r->slope->regressor);
    if (col < 0) return 0;
    const double *xv = t->table->cols[col].num;
    int binning = bl_goodness_find_binning(g, r->slope);
    for (size_t gi = g->n_cells; binning >= 0 && gi < g->n_groups;) {
        const bl_goodness_group *g0 = &g->groups[gi];
        if (g0->binning != (size_t)binning) {
            gi++;
            continue;
        }
        /* The bins of one condition level are contiguous. */
        size_t gend = gi;
        while (gend < g->n_groups && g->groups[gend].regressor && g->groups[gend].binning == (size_t)binning &&
               strcmp(g->groups[gend].condition, g0->condition) == 0)
            gend++;
        const char *color = bl_svg_color((int)legend_index(leg, g0->condition));
        plot_condition_bins(p, t, mr, r, g, gi, gend, xv, color, x, y);
        gi = gend;
    }
    return 1;
}

static bl_svg *fig_predicted(const bl_study *study, const bl_trials *t, const bl_fit_set *set, const bl_goodness *g,
                             char **caption)
{
    int best = bl_figures_best_model(set);
    const bl_model_result *mr = best >= 0 ? &set->models[best] : NULL;
    const bl_model_spec *sp = mr ? find_spec(study, mr->name) : NULL;
    slope_ref refs[64];
    size_t nref = 0;
    for (int p = 0; sp && p < BL_NPARAM; p++)
        for (size_t s = 0; !sp->param[p].is_fixed && s < sp->param[p].n_slopes && nref < 64; s++)
            refs[nref++] = (slope_ref){p, &sp->param[p].slopes[s]};
    if (nref == 0) return fig_predicted_none(mr, caption);
    int cols = nref < 2 ? 1 : 2, rows = (int)((nref + (size_t)cols - 1) / (size_t)cols);
    char *title = xprintf("Trial-wise predicted parameters of %s", mr->name);
    bl_svg *fig = bl_svg_create("pred", title ? title : "Trial-wise predicted parameters", rows, cols, PANEL_W + 40,
                                PANEL_H + 20);
    free(title);
    if (!fig) return NULL;
    double *x = malloc((t->n ? t->n : 1) * sizeof *x), *y = malloc((t->n ? t->n : 1) * sizeof *y);
    if (!x || !y) {
        free(x), free(y);
        bl_svg_destroy(fig);
        return NULL;
    }
    condition_legend leg = {.n = 0};
    int x_col_missing = 0;
    for (size_t k = 0; k < nref; k++)
        if (!plot_predicted_panel(study, t, mr, g, &refs[k], bl_svg_panel_at(fig, (int)k), &leg, x, y))
            x_col_missing = 1;
    bl_svg_legend_heading(fig, "condition");
    for (size_t i = 0; i < leg.n; i++) {
        bl_svg_legend(fig, leg.labels[i], BL_SVG_KEY_BOX,
                      (bl_svg_style){.color = bl_svg_color((int)i), .opacity = 0.8});
        free(leg.labels[i]);
    }
    bl_svg_legend_heading(fig, "marks");
    bl_svg_legend(fig, "predicted, one per trial", BL_SVG_KEY_POINT, (bl_svg_style){.color = "#666666", .size = 2});
    bl_svg_legend(
        fig, "observed, per regressor quintile", BL_SVG_KEY_LINE_POINT,
        (bl_svg_style){.color = "#666666", .marker = BL_SVG_MARK_DIAMOND, .size = 4.5, .dashed = 1, .width = 1});
    free(x), free(y);
    *caption = xprintf("Each small point is one trial's parameter as predicted by %s (the model with the lowest AIC), "
                       "against the regressor its slope multiplies, coloured by the condition the slope is "
                       "estimated in. Diamonds: the same parameter estimated from the observed choices and RTs of "
                       "each regressor quintile by EZ-diffusion (Wagenmakers et al. 2007; threshold, drift and "
                       "nondecision only), placed at the quintile's mean regressor value.%s",
                       mr->name, x_col_missing ? " A regressor column was missing from the trial table." : "");
    return fig;
}

/* ---- 3. quantile-probability ---- */

/* Cells numbered 1..n by the reference model's predicted share of the upper (or correct) response,
 * so numbers run left to right on the right half of every panel; rank[c] is cell c's number - 1. */
static void qp_cell_ranks(const bl_goodness *g, size_t ref_model, size_t *order, size_t *rank)
{
    const bl_goodness_row *rows0 = &g->rows[ref_model * 2 * g->n_groups];
    size_t nc = g->n_cells;
    for (size_t c = 0; c < nc; c++) order[c] = c;
    for (size_t i = 1; i < nc; i++) /* stable insertion by predicted share; NAN last */
        for (size_t j = i; j > 0; j--) {
            double a = rows0[2 * order[j - 1]].predicted_share, b = rows0[2 * order[j]].predicted_share;
            if (!(isnan(a) || a > b)) break;
            if (isnan(a) && isnan(b)) break;
            size_t tmp = order[j];
            order[j] = order[j - 1];
            order[j - 1] = tmp;
        }
    for (size_t k = 0; k < nc; k++) rank[order[k]] = k;
}

/* One model's panel: predicted lines (one per quantile, through the cells in order of predicted
 * probability), observed points, and each observed column's cell number above its 0.9 quantile. */
static void qp_panel(bl_svg_panel *p, const bl_goodness *g, size_t m, const size_t *rank, int numbered, double *px,
                     double *py, size_t *ord)
{
    size_t npts = 2 * g->n_cells;
    const bl_goodness_row *rows0 = &g->rows[m * 2 * g->n_groups];
    for (int k = 0; k < BL_GOODNESS_NQ; k++) {
        const char *color = bl_svg_color(k);
        size_t n = 0;
        for (size_t i = 0; i < npts; i++)
            if (isfinite(rows0[i].predicted_q[k]) && isfinite(rows0[i].predicted_share)) ord[n++] = i;
        for (size_t i = 1; i < n; i++)
            for (size_t j = i; j > 0 && rows0[ord[j - 1]].predicted_share > rows0[ord[j]].predicted_share; j--) {
                size_t tmp = ord[j];
                ord[j] = ord[j - 1];
                ord[j - 1] = tmp;
            }
        for (size_t i = 0; i < n; i++) {
            px[i] = rows0[ord[i]].predicted_share;
            py[i] = rows0[ord[i]].predicted_q[k];
        }
        bl_svg_line(p, px, py, n, (bl_svg_style){.color = color, .width = 1.5});
        n = 0;
        for (size_t i = 0; i < npts; i++)
            if (rows0[i].responses > 0) {
                px[n] = rows0[i].observed_share;
                py[n++] = rows0[i].observed_q[k];
            }
        bl_svg_points(p, px, py, n, (bl_svg_style){.color = color, .size = 3.2});
    }
    if (!numbered) return;
    for (size_t i = 0; i < npts; i++) {
        if (rows0[i].responses == 0) continue;
        char lab[32];
        size_t r = rank[i / 2];
        snprintf(lab, sizeof lab, "%zu", r + 1);
        /* neighbours in rank alternate between two heights so close columns stay legible */
        bl_svg_text(p, rows0[i].observed_share, rows0[i].observed_q[BL_GOODNESS_NQ - 1], r % 2 ? 18 : 8, lab,
                    (bl_svg_style){.color = "#444444"});
    }
}

static bl_svg *fig_qp(const bl_fit_set *set, const bl_goodness *g, char **caption)
{
    size_t nm = set->n_models;
    if (nm == 0) {
        bl_svg *fig = bl_svg_create("qp", "Quantile-probability plot", 1, 1, 560, 200);
        bl_svg_note(bl_svg_panel_at(fig, 0), "no fitted model");
        *caption = xprintf("No fitted model.");
        return fig;
    }
    /* Many cells: wider, taller panels and fewer per row, so the columns of points spread out. */
    size_t nc = g->n_cells;
    int many = nc >= 8;
    int cols = nm < (many ? 2u : 3u) ? (int)nm : (many ? 2 : 3), rows = (int)((nm + (size_t)cols - 1) / (size_t)cols);
    bl_svg *fig = bl_svg_create("qp", "Quantile-probability plot: observed vs predicted RT quantiles", rows, cols,
                                many ? 1.5 * PANEL_W : PANEL_W, many ? PANEL_H + 80 : PANEL_H + 20);
    if (!fig) return NULL;
    size_t npts = 2 * nc;
    double *px = malloc((npts + 1) * sizeof *px), *py = malloc((npts + 1) * sizeof *py);
    size_t *ord = malloc((npts + 1) * sizeof *ord), *cell_order = malloc((nc + 1) * sizeof *cell_order);
    size_t *rank = malloc((nc + 1) * sizeof *rank);
    if (!px || !py || !ord || !cell_order || !rank) {
        free(px), free(py), free(ord), free(cell_order), free(rank);
        bl_svg_destroy(fig);
        return NULL;
    }
    int best = bl_figures_best_model(set);
    qp_cell_ranks(g, best >= 0 ? (size_t)best : 0, cell_order, rank);
    int numbered = nc > 1;
    const char *xlab = g->accuracy ? "probability of a correct or error response (proportion of trials)"
                                   : "response probability (proportion of trials)";
    for (size_t m = 0; m < nm; m++) {
        bl_svg_panel *p = bl_svg_panel_at(fig, (int)m);
        bl_svg_panel_title(p, set->models[m].name);
        bl_svg_axis_label(p, BL_SVG_X, xlab);
        bl_svg_axis_label(p, BL_SVG_Y, "RT quantile (s)");
        bl_svg_axis_range(p, BL_SVG_X, 0, 1);
        if (g->accuracy) bl_svg_refline(p, BL_SVG_X, 0.5, (bl_svg_style){.color = "#bbbbbb", .width = 1, .dashed = 1});
        qp_panel(p, g, m, rank, numbered, px, py, ord);
    }
    bl_svg_legend_heading(fig, "RT quantile");
    for (int k = 0; k < BL_GOODNESS_NQ; k++) {
        char lab[32];
        snprintf(lab, sizeof lab, "%.1f", bl_goodness_probs[k]);
        bl_svg_legend(fig, lab, BL_SVG_KEY_LINE_POINT, (bl_svg_style){.color = bl_svg_color(k)});
    }
    bl_svg_legend_heading(fig, "marks");
    bl_svg_legend(fig, "observed", BL_SVG_KEY_POINT, (bl_svg_style){.color = "#666666"});
    bl_svg_legend(fig, "predicted", BL_SVG_KEY_LINE, (bl_svg_style){.color = "#666666"});
    if (numbered) {
        bl_svg_legend_heading(fig, g->accuracy ? "cells (numbered by predicted accuracy)"
                                               : "cells (numbered by predicted upper share)");
        for (size_t k = 0; k < nc; k++) {
            const bl_goodness_group *cell = &g->groups[cell_order[k]];
            char *lab = xprintf("%zu  %s (%zu trials)", k + 1, cell->condition, cell->n);
            bl_svg_legend(fig, lab ? lab : cell->condition, BL_SVG_KEY_NONE, (bl_svg_style){0});
            free(lab);
        }
    }
    free(px), free(py), free(ord), free(cell_order), free(rank);
    if (g->accuracy)
        *caption = xprintf("For each condition cell (%zu) and each response (correct and error: the study codes "
                           "responses by stimulus, so the boundaries are response categories), the 0.1, 0.3, 0.5, 0.7 "
                           "and 0.9 RT quantiles are plotted against the probability of that response: correct "
                           "responses right of 0.5, errors left. Points are observed, lines are the model's "
                           "predictions (quantiles of the mixture of the cell's trial-wise predicted distributions); "
                           "numbers name the cells (legend). Numbers in fit_quantiles.csv.",
                           nc);
    else
        *caption = xprintf("For each condition cell (%zu) and each response (upper and lower boundary), the 0.1, 0.3, "
                           "0.5, 0.7 and 0.9 RT quantiles are plotted against the probability of that response: points "
                           "are observed, lines are the model's predictions (quantiles of the mixture of the cell's "
                           "trial-wise predicted distributions)%s. Numbers in fit_quantiles.csv.",
                           nc, nc > 1 ? "; numbers name the cells (legend)" : "");
    return fig;
}

/* ---- 4. coefficients ---- */

static char *coef_label(const char *term, const char *level)
{
    if (level && *level) return xprintf("%s [%s]", term, level);
    return xprintf("%s", term);
}

static bl_svg *fig_coefficients(const bl_study *study, const bl_fit_set *set, char **caption)
{
    int best = bl_figures_best_model(set);
    if (best < 0 || set->models[best].fit.n_coef == 0) {
        bl_svg *fig = bl_svg_create("coef", "Coefficients", 1, 1, 560, 200);
        bl_svg_note(bl_svg_panel_at(fig, 0), "no fitted model with coefficients");
        *caption = xprintf("No fitted model with coefficients.");
        return fig;
    }
    const bl_model_result *mr = &set->models[best];
    const bl_fit_result *fr = &mr->fit;
    int separate = mr->mode == BL_PARTICIPANTS_SEPARATE && mr->n_participants > 0;
    /* One panel per parameter that has coefficients. */
    bl_param params[BL_NPARAM];
    int np = 0;
    for (bl_param p = 0; p < BL_NPARAM; p++)
        for (size_t j = 0; j < fr->n_coef; j++)
            if (fr->coef[j].param == p) {
                params[np++] = p;
                break;
            }
    int cols = np < 2 ? 1 : 2, rows = (np + cols - 1) / cols;
    size_t max_rows = 1;
    for (int i = 0; i < np; i++) {
        size_t c = 0;
        for (size_t j = 0; j < fr->n_coef; j++) c += fr->coef[j].param == params[i];
        if (c > max_rows) max_rows = c;
    }
    double ph = fmax(PANEL_H - 60, 90 + 26.0 * (double)max_rows * (separate ? 1.6 : 1.0));
    char *title = xprintf("Coefficients of %s with 95%% confidence intervals", mr->name);
    bl_svg *fig = bl_svg_create("coef", title ? title : "Coefficients", rows, cols, PANEL_W + 60, ph);
    free(title);
    if (!fig) return NULL;
    for (int i = 0; i < np; i++) {
        bl_param param = params[i];
        bl_svg_panel *p = bl_svg_panel_at(fig, i);
        size_t nc = 0;
        const char *labels[256];
        char *owned[256];
        size_t idx[256];
        for (size_t j = 0; j < fr->n_coef && nc < 256; j++)
            if (fr->coef[j].param == param) {
                owned[nc] = coef_label(fr->coef[j].term, fr->coef[j].level);
                labels[nc] = owned[nc] ? owned[nc] : fr->coef[j].term;
                idx[nc++] = j;
            }
        bl_svg_axis_categories(p, BL_SVG_Y, labels, nc);
        for (size_t j = 0; j < nc; j++) free(owned[j]);
        const bl_model_spec *sp = find_spec(study, mr->name);
        int log_link = sp && sp->param[param].link == BL_LINK_LOG;
        char *xl = xprintf("%s%s coefficient (%s%s; slopes per regressor unit)", log_link ? "log " : "",
                           bl_param_name(param), log_link ? "log " : "", param_short_unit(param));
        bl_svg_axis_label(p, BL_SVG_X, xl);
        free(xl);
        bl_svg_panel_title(p, bl_param_name(param));
        bl_svg_refline(p, BL_SVG_X, 0, (bl_svg_style){.color = "#888888", .dashed = 1, .width = 1});
        double ex[256], ey[256], elo[256], ehi[256];
        if (separate) {
            /* Participants: small grey marks spread within each coefficient's row. */
            size_t npart = mr->n_participants;
            for (size_t q = 0; q < npart; q++) {
                const bl_fit_result *pf = &mr->participants[q];
                size_t n = 0;
                for (size_t j = 0; j < nc; j++) {
                    const bl_coefficient *gc = &fr->coef[idx[j]];
                    for (size_t u = 0; u < pf->n_coef; u++) {
                        const bl_coefficient *c = &pf->coef[u];
                        if (c->param != gc->param || strcmp(c->term, gc->term) != 0 || strcmp(c->level, gc->level) != 0)
                            continue;
                        ey[n] = (double)j - 0.05 + 0.4 * ((double)q + 0.5) / (double)npart;
                        ex[n] = c->estimate;
                        elo[n] = c->ci_low;
                        ehi[n] = c->ci_high;
                        n++;
                    }
                }
                bl_svg_errorbars(p, BL_SVG_X, ex, ey, elo, ehi, n, (bl_svg_style){.color = "#999999", .width = 0.8});
                bl_svg_points(p, ex, ey, n, (bl_svg_style){.color = "#777777", .size = 2.2});
            }
        }
        size_t n = 0;
        for (size_t j = 0; j < nc; j++) {
            const bl_coefficient *c = &fr->coef[idx[j]];
            ey[n] = separate ? (double)j - 0.25 : (double)j;
            ex[n] = c->estimate;
            elo[n] = c->ci_low;
            ehi[n] = c->ci_high;
            n++;
        }
        const char *color = bl_svg_color(0);
        bl_svg_errorbars(p, BL_SVG_X, ex, ey, elo, ehi, n, (bl_svg_style){.color = color, .width = 1.6});
        bl_svg_points(p, ex, ey, n, (bl_svg_style){.color = color, .size = 4, .marker = BL_SVG_MARK_SQUARE});
    }
    bl_svg_legend(fig, separate ? "group (random-effects estimate)" : "estimate", BL_SVG_KEY_POINT,
                  (bl_svg_style){.color = bl_svg_color(0), .marker = BL_SVG_MARK_SQUARE, .size = 4});
    bl_svg_legend(fig, "95% Wald interval", BL_SVG_KEY_LINE, (bl_svg_style){.color = bl_svg_color(0)});
    if (separate) bl_svg_legend(fig, "participants", BL_SVG_KEY_POINT, (bl_svg_style){.color = "#777777", .size = 2.2});
    *caption = xprintf("Coefficients of %s (the model with the lowest AIC), one panel per decision-model parameter, "
                       "on the scale of its link: intercepts per condition level and slopes per unit of their "
                       "regressor. Bars are 95%% Wald intervals.%s",
                       mr->name,
                       separate ? " Participants were fitted separately: grey marks are their estimates, squares the "
                                  "DerSimonian-Laird random-effects summary."
                                : "");
    return fig;
}

/* ---- 4b. shrinkage (hierarchical fits) ---- */

/* Coefficients of a hierarchical model that vary by participant (their participants' estimates differ). */
static size_t varying_coefficients(const bl_model_result *mr, size_t *idx, size_t cap)
{
    size_t n = 0;
    for (size_t c = 0; c < mr->fit.n_coef && n < cap; c++) {
        int varies = 0;
        for (size_t j = 1; j < mr->n_participants && !varies; j++)
            varies = mr->participants[j].coef[c].estimate != mr->participants[0].coef[c].estimate;
        if (varies) idx[n++] = c;
    }
    return n;
}

/* Each participant's empirical-Bayes estimate beside their own separate fit, per coefficient that
 * varies, with the population estimate: how far the hierarchical fit pulls each participant toward
 * the population (more for participants with less information). */
static bl_svg *fig_shrinkage(const bl_fit_set *set, char **caption)
{
    int best = bl_figures_best_model(set);
    if (best < 0 || set->models[best].mode != BL_PARTICIPANTS_HIERARCHICAL) return NULL;
    const bl_model_result *mr = &set->models[best];
    size_t idx[12];
    size_t nv = varying_coefficients(mr, idx, 12), np = mr->n_participants;
    if (nv == 0 || np == 0 || np > 256) return NULL;
    int cols = nv < 2 ? 1 : 2, rows = (int)((nv + (size_t)cols - 1) / (size_t)cols);
    double ph = fmax(PANEL_H - 60, 90 + 20.0 * (double)np);
    char *title = xprintf("Participants' estimates of %s: hierarchical vs fitted alone", mr->name);
    bl_svg *fig = bl_svg_create("shrink", title ? title : "Shrinkage", rows, cols, PANEL_W + 60, ph);
    free(title);
    if (!fig) {
        figure_text_lost = 1; /* reported as out of memory with the other figures */
        return NULL;
    }
    const char *labels[256];
    for (size_t j = 0; j < np; j++) labels[j] = mr->participants[j].participant;
    double *x = malloc(2 * np * sizeof *x), *y = malloc(2 * np * sizeof *y);
    if (!x || !y) figure_text_lost = 1;
    for (size_t v = 0; x && y && v < nv; v++) {
        size_t c = idx[v];
        const bl_coefficient *pc = &mr->fit.coef[c];
        bl_svg_panel *p = bl_svg_panel_at(fig, (int)v);
        char *pt = pc->level[0] ? xprintf("%s: %s [%s]", pc->parameter, pc->term, pc->level)
                                : xprintf("%s: %s", pc->parameter, pc->term);
        bl_svg_panel_title(p, pt ? pt : pc->parameter);
        free(pt);
        bl_svg_axis_categories(p, BL_SVG_Y, labels, np);
        bl_svg_axis_label(p, BL_SVG_X, "coefficient (link scale)");
        bl_svg_refline(p, BL_SVG_X, pc->estimate, (bl_svg_style){.color = bl_svg_color(1), .width = 1.5});
        for (size_t j = 0; j < np; j++) { /* a segment from the separate fit to the hierarchical estimate */
            double sx[2] = {mr->separate_estimate ? mr->separate_estimate[j * mr->fit.n_coef + c] : NAN,
                            mr->participants[j].coef[c].estimate},
                   sy[2] = {(double)j, (double)j};
            bl_svg_line(p, sx, sy, 2, (bl_svg_style){.color = "#999999", .width = 1});
        }
        for (size_t j = 0; j < np; j++) {
            x[j] = mr->separate_estimate ? mr->separate_estimate[j * mr->fit.n_coef + c] : NAN;
            y[j] = (double)j;
            x[np + j] = mr->participants[j].coef[c].estimate;
            y[np + j] = (double)j;
        }
        bl_svg_points(p, x, y, np, (bl_svg_style){.color = "#777777", .size = 3, .marker = BL_SVG_MARK_DIAMOND});
        bl_svg_points(p, x + np, y + np, np, (bl_svg_style){.color = bl_svg_color(0), .size = 3.5});
    }
    free(x);
    free(y);
    bl_svg_legend(fig, "hierarchical (empirical Bayes)", BL_SVG_KEY_POINT,
                  (bl_svg_style){.color = bl_svg_color(0), .size = 3.5});
    bl_svg_legend(fig, "participant fitted alone", BL_SVG_KEY_POINT,
                  (bl_svg_style){.color = "#777777", .size = 3, .marker = BL_SVG_MARK_DIAMOND});
    bl_svg_legend(fig, "population estimate", BL_SVG_KEY_LINE, (bl_svg_style){.color = bl_svg_color(1)});
    *caption = xprintf("Shrinkage in %s (the model with the lowest AIC, fitted hierarchically): for every coefficient "
                       "that varies by participant, each participant's empirical-Bayes estimate (circle) and the "
                       "estimate from their trials alone (diamond), joined by a line; the vertical line is the "
                       "population estimate. Participants with fewer or noisier trials are pulled further toward "
                       "the population.%s",
                       mr->name,
                       mr->separate_estimate ? ""
                                             : " (Participants could not be fitted alone: only the hierarchical "
                                               "estimates are shown.)");
    return fig;
}

/* ---- 5. model comparison ---- */

static bl_svg *fig_comparison(const bl_fit_set *set, char **caption)
{
    size_t n = set->n_models;
    bl_svg *fig = bl_svg_create("cmp", "Model comparison", 1, 1, fmax(420, 120 + 90.0 * (double)n), 380);
    if (!fig) return NULL;
    bl_svg_panel *p = bl_svg_panel_at(fig, 0);
    if (n == 0 || !set->comparison) {
        bl_svg_note(p, "no fitted model");
        *caption = xprintf("No fitted model.");
        return fig;
    }
    const char *labels[256];
    double x1[256], x2[256], a[256], b[256];
    size_t k = n < 256 ? n : 256;
    for (size_t m = 0; m < k; m++) {
        labels[m] = set->comparison[m].name;
        x1[m] = (double)m - 0.2;
        x2[m] = (double)m + 0.2;
        a[m] = set->comparison[m].delta_aic;
        b[m] = set->comparison[m].delta_bic;
    }
    bl_svg_axis_categories(p, BL_SVG_X, labels, k);
    bl_svg_axis_label(p, BL_SVG_X, "model");
    bl_svg_axis_label(p, BL_SVG_Y,
                      "\xCE\x94"
                      "AIC, \xCE\x94"
                      "BIC (2 \xC3\x97 log-likelihood units)");
    bl_svg_axis_include(p, BL_SVG_Y, 0);
    bl_svg_axis_include(p, BL_SVG_Y, 2);
    bl_svg_bars(p, x1, a, k, 0.38, (bl_svg_style){.color = bl_svg_color(0)});
    bl_svg_bars(p, x2, b, k, 0.38, (bl_svg_style){.color = bl_svg_color(1)});
    bl_svg_refline(p, BL_SVG_Y, 0, (bl_svg_style){.color = "#333333", .width = 1});
    /* A best model has bars of height 0: say so where the bars would be. */
    for (size_t m = 0; m < k; m++) {
        int ba = a[m] == 0, bb = b[m] == 0;
        if (ba || bb)
            bl_svg_text(p, (double)m, 0, 6,
                        ba && bb ? "best by AIC and BIC"
                        : ba     ? "best by AIC"
                                 : "best by BIC",
                        (bl_svg_style){.color = "#333333"});
    }
    bl_svg_legend(fig,
                  "\xCE\x94"
                  "AIC",
                  BL_SVG_KEY_BOX, (bl_svg_style){.color = bl_svg_color(0), .opacity = 1});
    bl_svg_legend(fig,
                  "\xCE\x94"
                  "BIC",
                  BL_SVG_KEY_BOX, (bl_svg_style){.color = bl_svg_color(1), .opacity = 1});
    *caption = xprintf("AIC and BIC of each model minus the smallest value over the models (%zu); the best model "
                       "by each criterion has a bar of 0. Differences below about 2 are usually read as no clear "
                       "preference (a convention, Burnham & Anderson 2002).",
                       n);
    return fig;
}

bl_status bl_figures_make(const bl_study *study, const bl_trials *trials, const bl_power_result *power,
                          const bl_fit_set *set, const bl_goodness *g, bl_figure_set **out, bl_error *err)
{
    *out = NULL;
    bl_figure_set *fs = calloc(1, sizeof *fs);
    if (!fs || !(fs->items = calloc(6, sizeof *fs->items))) {
        free(fs);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory for figures");
    }
    bl_status st;
    char *cap = NULL;
    figure_text_lost = 0;
    bl_svg *f = fig_spectrum(study, power, g, &cap);
    if ((st = add_figure(fs, f, "power_spectrum.svg", "Power spectral density by condition", cap, err))) goto fail;
    cap = NULL;
    f = fig_predicted(study, trials, set, g, &cap);
    if ((st = add_figure(fs, f, "parameter_vs_regressor.svg", "Predicted parameters vs regressors", cap, err)))
        goto fail;
    cap = NULL;
    f = fig_qp(set, g, &cap);
    if ((st = add_figure(fs, f, "quantile_probability.svg", "Quantile-probability plot", cap, err))) goto fail;
    cap = NULL;
    f = fig_coefficients(study, set, &cap);
    if ((st = add_figure(fs, f, "coefficients.svg", "Coefficients", cap, err))) goto fail;
    cap = NULL;
    if ((f = fig_shrinkage(set, &cap)) &&
        (st = add_figure(fs, f, "shrinkage.svg", "Participants' estimates: hierarchical vs alone", cap, err)))
        goto fail;
    cap = NULL;
    f = fig_comparison(set, &cap);
    if ((st = add_figure(fs, f, "model_comparison.svg", "Model comparison", cap, err))) goto fail;
    if (figure_text_lost) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory writing the figures' labels");
        goto fail;
    }
    *out = fs;
    return BL_OK;
fail:
    bl_figure_set_destroy(fs);
    return st;
}

bl_status bl_figures_write(const bl_figure_set *figs, const char *dir, bl_error *err)
{
    bl_status st = bl_mkdir_p(dir, err);
    if (st != BL_OK) return st;
    static const char decl[] = "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n";
    for (size_t i = 0; i < figs->n; i++) {
        char *path = NULL;
        bl_path_join(dir, figs->items[i].file, &path, NULL);
        char *buf = malloc(sizeof decl - 1 + figs->items[i].size);
        if (!path || !buf) {
            free(path), free(buf);
            return bl_error_set(err, BL_ERR_NOMEM, "out of memory writing figures");
        }
        memcpy(buf, decl, sizeof decl - 1);
        memcpy(buf + sizeof decl - 1, figs->items[i].svg, figs->items[i].size);
        st = bl_write_file_atomic(path, buf, sizeof decl - 1 + figs->items[i].size, err);
        free(path);
        free(buf);
        if (st != BL_OK) return st;
    }
    return BL_OK;
}
