/* Figures: the five files, their axis labels with units, legends, the number of series and points,
 * and determinism. XML well-formedness of the same figures is checked with python's XML 1.0 parser
 * (tests/reference/report_reference.py). Checks of the EZ-diffusion bin estimates use the closed-form moments
 * of the Wiener first-passage time (Wagenmakers et al. 2007, eqs. 1-3: Pc, MRT and VRT for an
 * unbiased start) so that a bin generated from known parameters must return them. */
#include "report/figures.h"
#include "core/output.h"
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

static const bl_figure *find(const bl_figure_set *fs, const char *file)
{
    for (size_t i = 0; i < fs->n; i++)
        if (strcmp(fs->items[i].file, file) == 0) return &fs->items[i];
    return NULL;
}

/* Count the elements between the start of a panel group and its end. */
static size_t count_in(const char *svg, const char *start, const char *end, const char *needle)
{
    const char *a = strstr(svg, start);
    if (!a) return 0;
    const char *b = end ? strstr(a, end) : NULL;
    size_t n = 0, k = strlen(needle);
    for (const char *p = strstr(a, needle); p && (!b || p < b); p = strstr(p + k, needle)) n++;
    return n;
}

static char *read_head(const char *path)
{
    FILE *fp = fopen(path, "rb");
    if (!fp) return NULL;
    char *b = calloc(65, 1);
    if (b && fread(b, 1, 64, fp) == 0) b[0] = 0;
    fclose(fp);
    return b;
}

static void balanced(const bl_figure *f)
{
    const char *s = f->svg;
    check_true(strncmp(s, "<svg xmlns=\"http://www.w3.org/2000/svg\"", 39) == 0, "%s: an SVG element", f->file);
    check_true(count(s, "<svg") == 1 && count(s, "</svg>") == 1, "%s: one root", f->file);
    check_true(count(s, "<g") == count(s, "</g>"), "%s: groups balanced", f->file);
    check_true(count(s, "<text") == count(s, "</text>"), "%s: text balanced", f->file);
    check_true(strlen(s) == f->size, "%s: size", f->file);
    check_true(!strstr(s, "nan") && !strstr(s, "inf\""), "%s: no NaN/inf coordinates", f->file);
}

static const char *names[5] = {"power_spectrum.svg", "parameter_vs_regressor.svg", "quantile_probability.svg",
                               "coefficients.svg", "model_comparison.svg"};

/* The pooled fixture (seed 20261202), its goodness of fit with 2 threads, and its figures made twice; computed
 * once by the first case that asks, freed at exit. */
static fixture *fx;
static bl_goodness *g;
static bl_figure_set *fs, *fs2;

static void figures_free(void)
{
    bl_figure_set_destroy(fs);
    bl_figure_set_destroy(fs2);
    bl_goodness_destroy(g);
    fixture_destroy(fx);
}

static int figures(void)
{
    static int tried;
    if (tried) return fs && fs2;
    tried = 1;
    bl_error err = {0};
    fx = fixture_create(20261202, 0);
    atexit(figures_free);
    check_true(bl_goodness_compute(&fx->study, &fx->trials, &fx->set, 2, &g, &err) == BL_OK, "goodness (%s)",
               err.message);
    check_true(bl_figures_make(&fx->study, &fx->trials, &fx->power, &fx->set, g, &fs, &err) == BL_OK, "figures (%s)",
               err.message);
    check_true(bl_figures_make(&fx->study, &fx->trials, &fx->power, &fx->set, g, &fs2, &err) == BL_OK, "figures again");
    return fs && fs2;
}

HARNESS_CASE(five_figures)
{
    if (!figures()) return;
    check_true(fs->n == 5, "five figures");
    for (int i = 0; i < 5; i++) check_true(find(fs, names[i]) != NULL, "figure %s", names[i]);
    for (size_t i = 0; i < fs->n; i++) {
        balanced(&fs->items[i]);
        check_true(fs->items[i].caption && strlen(fs->items[i].caption) > 40, "%s has a caption", fs->items[i].file);
        check_true(fs->items[i].size == fs2->items[i].size &&
                       memcmp(fs->items[i].svg, fs2->items[i].svg, fs->items[i].size) == 0,
                   "%s: same input, same bytes", fs->items[i].file);
    }
}

HARNESS_CASE(spectrum)
{
    if (!figures()) return;
    /* 1. Spectrum: one mean line and one SE band per condition cell, bands shaded and named, log axis. */
    const bl_figure *f = find(fs, "power_spectrum.svg");
    if (f) {
        check_true(strstr(f->svg, ">frequency (Hz)<") && strstr(f->svg, ">PSD (uV\xC2\xB2/Hz)<"),
                   "spectrum axes with units");
        check_true(count(f->svg, "stroke-linejoin=\"round\"") == g->n_cells, "one mean line per cell (%zu)",
                   g->n_cells);
        check_true(count_in(f->svg, "<g clip-path", "</g>", "fill-opacity=\"0.25\"") == g->n_cells,
                   "one SE band per cell");
        check_true(strstr(f->svg, ">theta<") && strstr(f->svg, ">beta<"), "band spans labelled");
        check_true(strstr(f->svg, "context=rich (") && strstr(f->svg, "context=lean ("), "legend names the cells");
        check_true(strstr(f->svg, ">10<") && strstr(f->svg, ">1<"), "log axis labelled by decades");
    }
}

HARNESS_CASE(parameter_vs_regressor)
{
    if (!figures()) return;
    const bl_figure *f;
    /* 2. Predicted vs regressor: one panel (theta on threshold), a point per used trial, 5 bins per context. */
    f = find(fs, "parameter_vs_regressor.svg");
    if (f) {
        check_true(strstr(f->svg, "threshold (evidence units, s = 1)") != NULL, "threshold axis with unit");
        check_true(strstr(f->svg, "theta power (z-score of log10 uV\xC2\xB2 within participant)") != NULL,
                   "regressor axis says scale and standardisation");
        size_t circles = count_in(f->svg, "<g clip-path", "</svg>", "<circle");
        check_true(circles == FX_N - 3 + 1, "one point per used trial + 1 legend key (%zu)", circles);
        size_t diamonds = count_in(f->svg, "<g clip-path", "-legend", "Z\"/>");
        check_true(diamonds == 10, "5 observed bin estimates per context (%zu)", diamonds);
        check_true(strstr(f->svg, ">context=rich<") && strstr(f->svg, ">observed, per regressor quintile<"), "legend");
    }
}

HARNESS_CASE(quantile_probability)
{
    if (!figures()) return;
    const bl_figure *f;
    /* 3. QP: one panel per model, observed points = 5 quantiles x cells x 2 responses. */
    f = find(fs, "quantile_probability.svg");
    if (f) {
        check_true(strstr(f->svg, ">response probability (proportion of trials)<") &&
                       strstr(f->svg, ">RT quantile (s)<"),
                   "QP axes with units");
        size_t pts = count_in(f->svg, "id=\"qp-p0\"", "id=\"qp-p1\"", "<circle");
        check_true(pts == 5 * 2 * g->n_cells, "observed points in panel 1: %zu", pts);
        size_t lines = count_in(f->svg, "id=\"qp-p1\"", "qp-legend", "stroke-linejoin");
        check_true(lines == 5, "five predicted quantile lines in panel 2 (%zu)", lines);
        check_true(strstr(f->svg, ">baseline<") && strstr(f->svg, ">theta-threshold<"), "panel titles name the models");
        check_true(strstr(f->svg, ">0.1<") && strstr(f->svg, ">0.9<") && strstr(f->svg, ">observed<"), "legend");
    }
}

HARNESS_CASE(coefficients)
{
    if (!figures()) return;
    const bl_figure *f;
    /* 4. Coefficients of the best model (theta-threshold): 5 squares + legend key. */
    f = find(fs, "coefficients.svg");
    if (f) {
        check_true(bl_figures_best_model(&fx->set) == 1, "best model by AIC");
        check_true(count(f->svg, "<rect x=") - count(f->svg, "<rect x=\"0\"") >= 6, "coefficient marks");
        check_true(strstr(f->svg, ">theta [rich]<") && strstr(f->svg, ">intercept [lean]<"), "coefficient labels");
        check_true(strstr(f->svg, "threshold coefficient (evidence units; slopes per regressor unit)") != NULL,
                   "coefficient axis with unit");
        check_true(strstr(f->svg, ">95% Wald interval<") != NULL, "legend");
    }
}

HARNESS_CASE(model_comparison)
{
    if (!figures()) return;
    const bl_figure *f;
    /* 5. Comparison: 2 bars per model. */
    f = find(fs, "model_comparison.svg");
    if (f) {
        size_t bars = count_in(f->svg, "<g clip-path", "</g>\n<rect fill=\"none\"", "<rect");
        check_true(bars == 4, "two bars per model (%zu)", bars);
        check_true(strstr(f->svg, "\xCE\x94"
                                  "AIC, \xCE\x94"
                                  "BIC (2 \xC3\x97 log-likelihood units)") != NULL,
                   "axis with unit");
        check_true(strstr(f->svg, ">\xCE\x94"
                                  "AIC<") &&
                       strstr(f->svg, ">\xCE\x94"
                                      "BIC<"),
                   "legend");
        check_true(count(f->svg, ">best by AIC and BIC<") == 1, "best model marked once");
    }
}

HARNESS_CASE(written_files)
{
    if (!figures()) return;
    bl_error err = {0};
    /* Written files: XML declaration + the element, in a folder created on demand. */
    char dir[] = "/tmp/bl_test_figures_XXXXXX";
    check_true(mkdtemp(dir) != NULL, "temp folder");
    char *sub = NULL;
    check_true(bl_path_join(dir, "figures", &sub, &err) == BL_OK, "figures folder path");
    check_true(bl_figures_write(fs, sub, &err) == BL_OK, "write figures (%s)", err.message);
    for (int i = 0; i < 5; i++) {
        char *p = NULL;
        char *head = bl_path_join(sub, names[i], &p, &err) == BL_OK ? read_head(p) : NULL;
        check_true(head && strncmp(head, "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n<svg", 43) == 0, "%s written",
                   names[i]);
        free(head);
        unlink(p);
        free(p);
    }
    rmdir(sub);
    rmdir(dir);
    free(sub);
}

HARNESS_CASE(without_recordings)
{
    if (!figures()) return;
    bl_error err = {0};
    const bl_figure *f;
    /* Without recordings the spectrum figure says so; separate mode shows participants. */
    bl_figure_set *fs3 = NULL;
    check_true(bl_figures_make(&fx->study, &fx->trials, NULL, &fx->set, g, &fs3, &err) == BL_OK,
               "figures without power");
    if (fs3) {
        f = find(fs3, "power_spectrum.svg");
        check_true(f && strstr(f->svg, "no recordings") && !strstr(f->svg, "clipPath"),
                   "spectrum note without recordings");
    }
    bl_figure_set_destroy(fs3);
}

HARNESS_CASE(baseline_only_and_no_model)
{
    if (!figures()) return;
    bl_error err = {0};
    const bl_figure *f;
    bl_figure_set *fs3;
    bl_goodness *g = NULL;
    size_t n_models = fx->set.n_models;
    /* Only the baseline model (no slopes): the parameter figure says so, the others still draw. */
    fx->set.n_models = 1;
    fs3 = NULL;
    check_true(bl_goodness_compute(&fx->study, &fx->trials, &fx->set, 1, &g, &err) == BL_OK, "goodness, baseline only");
    check_true(g && g->n_groups == g->n_cells, "no slope: no regressor bins");
    check_true(bl_figures_make(&fx->study, &fx->trials, &fx->power, &fx->set, g, &fs3, &err) == BL_OK,
               "figures, baseline only");
    if (fs3) {
        f = find(fs3, "parameter_vs_regressor.svg");
        check_true(f && strstr(f->svg, "the best model has no slopes"), "no-slope note");
        f = find(fs3, "quantile_probability.svg");
        check_true(f && count(f->svg, "<text x=") > 10 && strstr(f->svg, "qp-p0"), "QP still drawn");
    }
    bl_figure_set_destroy(fs3);
    bl_goodness_destroy(g);
    /* No model at all: every figure is a note, nothing crashes. */
    fx->set.n_models = 0;
    g = NULL;
    fs3 = NULL;
    check_true(bl_goodness_compute(&fx->study, &fx->trials, &fx->set, 1, &g, &err) == BL_OK && g->n_rows == 0,
               "goodness, no model: no rows");
    check_true(bl_figures_make(&fx->study, &fx->trials, &fx->power, &fx->set, g, &fs3, &err) == BL_OK && fs3->n == 5,
               "figures, no model");
    if (fs3) {
        check_true(strstr(find(fs3, "coefficients.svg")->svg, "no fitted model") != NULL, "coefficient note");
        check_true(strstr(find(fs3, "quantile_probability.svg")->svg, "no fitted model") != NULL, "QP note");
    }
    bl_figure_set_destroy(fs3);
    bl_goodness_destroy(g);
    fx->set.n_models = n_models;
}

HARNESS_CASE(separate_mode)
{
    bl_error err = {0};
    const bl_figure *f;
    bl_figure_set *fs;
    fixture *fx = fixture_create(99, 1);
    bl_goodness *g = NULL;
    check_true(bl_goodness_compute(&fx->study, &fx->trials, &fx->set, 1, &g, &err) == BL_OK, "goodness, separate");
    fs = NULL;
    check_true(bl_figures_make(&fx->study, &fx->trials, &fx->power, &fx->set, g, &fs, &err) == BL_OK,
               "figures, separate");
    if (fs) {
        f = find(fs, "coefficients.svg");
        check_true(f && strstr(f->svg, ">participants<") && strstr(f->svg, "group (random-effects estimate)"),
                   "separate: participant marks and group estimate in the legend");
        size_t grey = f ? count(f->svg, "<g fill=\"#777777\">") : 0;
        check_true(grey == 2 * 2 + 1, "separate: one mark series per participant and panel + legend (%zu)", grey);
    }
    bl_figure_set_destroy(fs);
    bl_goodness_destroy(g);
    fixture_destroy(fx);
    bl_figure_set_destroy(NULL);
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(five_figures),
        HARNESS_ENTRY(spectrum),
        HARNESS_ENTRY(parameter_vs_regressor),
        HARNESS_ENTRY(quantile_probability),
        HARNESS_ENTRY(coefficients),
        HARNESS_ENTRY(model_comparison),
        HARNESS_ENTRY(written_files),
        HARNESS_ENTRY(without_recordings),
        HARNESS_ENTRY(baseline_only_and_no_model),
        HARNESS_ENTRY(separate_mode),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
