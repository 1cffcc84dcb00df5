/* SVG plotting layer: nice ticks, palette, escaping, element counts, determinism.
 * Well-formedness against an XML 1.0 parser is checked by tests/report_xml_check.py (python). */
#include "report/svg.h"
#include "harness.h"

#include <stdlib.h>
#include <string.h>

static size_t count(const char *hay, const char *needle)
{
    size_t n = 0, k = strlen(needle);
    for (const char *p = strstr(hay, needle); p; p = strstr(p + k, needle)) n++;
    return n;
}

/* noinline: once inlined, GCC 12 takes buf (filled by open_memstream) for a dangling local (-Wdangling-pointer). */
__attribute__((noinline)) static char *escaped(const char *s)
{
    char *buf = NULL;
    size_t n = 0;
    FILE *f = open_memstream(&buf, &n);
    bl_svg_escape(f, s);
    fclose(f);
    return buf;
}

static char *sample(void)
{
    bl_svg *fig = bl_svg_create("t1", "A & B <test>", 1, 2, 300, 220);
    bl_svg_panel *p = bl_svg_panel_at(fig, 0);
    bl_svg_axis_label(p, BL_SVG_X, "frequency (Hz)");
    bl_svg_axis_label(p, BL_SVG_Y, "power (uV\xC2\xB2/Hz)");
    bl_svg_axis_log(p, BL_SVG_Y);
    double x[5] = {1, 2, 3, 4, 5}, y[5] = {10, 5, 2.5, NAN, 0.7}, lo[5], hi[5];
    for (int i = 0; i < 5; i++) lo[i] = y[i] * 0.8, hi[i] = y[i] * 1.2;
    bl_svg_vspan(p, 2, 3, "theta", (bl_svg_style){.color = bl_svg_color(4)});
    bl_svg_ribbon(p, x, lo, hi, 5, (bl_svg_style){.color = bl_svg_color(0)});
    bl_svg_line(p, x, y, 5, (bl_svg_style){.color = bl_svg_color(0)});
    bl_svg_points(p, x, y, 5, (bl_svg_style){.color = bl_svg_color(1)});
    bl_svg_panel *q = bl_svg_panel_at(fig, 1);
    const char *cats[3] = {"baseline", "theta-threshold", "b<eta>"};
    double cx[3] = {0, 1, 2}, cy[3] = {0, 12.5, 3};
    bl_svg_axis_categories(q, BL_SVG_X, cats, 3);
    bl_svg_axis_label(q, BL_SVG_Y, "delta AIC (2 x log-likelihood units)");
    bl_svg_bars(q, cx, cy, 3, 0.6, (bl_svg_style){.color = bl_svg_color(2)});
    bl_svg_refline(q, BL_SVG_Y, 0, (bl_svg_style){.color = "#000000"});
    bl_svg_text(q, 1, 12.5, 6, "top<1>", (bl_svg_style){.color = "#333333"});
    double ex[2] = {0, 1}, ey[2] = {1, 2}, elo[2] = {0.5, 1.5}, ehi[2] = {1.5, 2.5};
    bl_svg_errorbars(q, BL_SVG_Y, ex, ey, elo, ehi, 2, (bl_svg_style){0});
    bl_svg_legend_heading(fig, "condition");
    bl_svg_legend(fig, "rich", BL_SVG_KEY_LINE, (bl_svg_style){.color = bl_svg_color(0)});
    bl_svg_legend(fig, "lean & 'x'", BL_SVG_KEY_POINT, (bl_svg_style){.color = bl_svg_color(1)});
    char *out = NULL;
    size_t n = 0;
    bl_error err = {0};
    bl_status st = bl_svg_render(fig, &out, &n, &err);
    check_true(st == BL_OK && out && n == strlen(out), "render succeeds (%s)", err.message);
    bl_svg_destroy(fig);
    return out;
}

HARNESS_CASE(nice_ticks)
{
    /* Heckbert (1990), Graphics Gems I, "Nice numbers for graph labels": the worked example of
     * data from 105 to 543 with about 5 ticks gives 100..600 in steps of 100 (value from memory). */
    double lo = 105, hi = 543, first, step;
    int n;
    check_true(bl_svg_nice_ticks(&lo, &hi, 5, &first, &step, &n, NULL) == BL_OK, "nice ticks succeed");
    check_abs(lo, 100, 1e-12, "Heckbert example: lower tick");
    check_abs(hi, 600, 1e-12, "Heckbert example: upper tick");
    check_abs(step, 100, 1e-12, "Heckbert example: step");
    check_true(n == 6, "Heckbert example: 6 ticks (got %d)", n);
    /* Steps are always 1, 2 or 5 times a power of ten (the 1-2-5 rule of the same paper). */
    double ranges[][2] = {{0.013, 0.097}, {-3.7, 12.2}, {0, 1}, {1234, 98765}, {-0.5, -0.1}, {2.5, 2.5}};
    for (size_t i = 0; i < sizeof ranges / sizeof ranges[0]; i++) {
        double a = ranges[i][0], b = ranges[i][1];
        check_true(bl_svg_nice_ticks(&a, &b, 6, &first, &step, &n, NULL) == BL_OK, "ticks for [%g, %g]", ranges[i][0],
                   ranges[i][1]);
        double m = step / pow(10, floor(log10(step) + 1e-12));
        check_true(fabs(m - 1) < 1e-9 || fabs(m - 2) < 1e-9 || fabs(m - 5) < 1e-9, "step %g is 1/2/5 x 10^k", step);
        check_true(a <= ranges[i][0] && b >= ranges[i][1], "range [%g, %g] covers the data", a, b);
        check_true(n >= 2 && n <= 12, "tick count %d is readable", n);
    }
    bl_error tick_err = {0};
    check_true(bl_svg_nice_ticks(&(double){NAN}, &(double){1}, 5, &first, &step, &n, &tick_err) == BL_ERR_RANGE &&
                   strstr(tick_err.message, "nan") != NULL,
               "NaN range is refused with a message naming it (%s)", tick_err.message);
}

HARNESS_CASE(okabe_ito_palette)
{
    /* Okabe & Ito (2008) "Color Universal Design": published hex values of the palette. */
    const char *oi[] = {"#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000"};
    for (int i = 0; i < 8; i++) check_true(strcmp(bl_svg_color(i), oi[i]) == 0, "palette colour %d", i);
    check_true(strcmp(bl_svg_color(8), oi[0]) == 0 && strcmp(bl_svg_color(-1), oi[7]) == 0, "palette wraps");
}

HARNESS_CASE(xml_escaping)
{
    /* XML 1.0 section 2.4 (character data): markup characters are escaped; invalid UTF-8 and
     * control characters are not XML characters (section 2.2) and are replaced. */
    char *e = escaped("a<b>&\"c'");
    check_true(strcmp(e, "a&lt;b&gt;&amp;&quot;c&#39;") == 0, "markup escaped: %s", e);
    free(e);
    e = escaped("x\xC3\x28y\x01z\xC2\xB5");
    check_true(strcmp(e, "x\xEF\xBF\xBD(y\xEF\xBF\xBDz\xC2\xB5") == 0, "invalid UTF-8 and controls replaced");
    free(e);
    e = escaped("\xED\xA0\x80|\xF4\x90\x80\x80|\xE0\x80\xAF");
    check_true(count(e, "\xEF\xBF\xBD") >= 3 && strchr(e, '|'), "surrogates, >U+10FFFF, overlong refused");
    free(e);
}

HARNESS_CASE(sample_figure)
{
    char *a = sample(), *b = sample();
    check_true(a && b && strcmp(a, b) == 0, "same calls give the same bytes");
    if (a) {
        check_true(strncmp(a, "<svg xmlns=\"http://www.w3.org/2000/svg\"", 39) == 0, "root is an SVG element");
        check_true(strstr(a, "A &amp; B &lt;test&gt;") != NULL, "title escaped");
        check_true(strstr(a, ">frequency (Hz)<") && strstr(a, "power (uV\xC2\xB2/Hz)"), "axis labels with units");
        check_true(count(a, "<circle") == 4 + 1, "4 finite points + 1 legend key drawn as circles (NaN skipped): %zu",
                   count(a, "<circle"));
        check_true(strstr(a, ">theta<") != NULL, "span label");
        check_true(strstr(a, ">rich<") && strstr(a, ">lean &amp; &#39;x&#39;<"), "legend entries escaped");
        check_true(strstr(a, ">b&lt;eta&gt;<") != NULL, "category label escaped");
        check_true(strstr(a, "fill=\"#333333\">top&lt;1&gt;</text>") != NULL, "data-space text label");
        check_true(count(a, "clip-path=\"url(#t1-c") == 2, "one clip path per panel with a figure-unique id");
        /* Log axis from 0.56 to 12 -> ticks 0.5 .. 20 in 1-2-5 steps. */
        check_true(strstr(a, ">1<") && strstr(a, ">10<") && strstr(a, ">2<") && strstr(a, ">5<"),
                   "log axis labelled at 1-2-5 values");
        check_true(strstr(a, "-0.00") == NULL, "no negative zero");
        check_true(count(a, "<text") == count(a, "</text>"), "text elements balanced");
        check_true(count(a, "<g") == count(a, "</g>"), "groups balanced");
    }
    free(a);
    free(b);
}

/* Bad arguments and a note-only panel. */
HARNESS_CASE(bad_arguments_and_note)
{
    check_true(bl_svg_create("x", "t", 0, 1, 300, 200) == NULL, "zero rows refused");
    check_true(bl_svg_create("x", "t", 1, 1, 10, 200) == NULL, "tiny panel refused");
    bl_svg *fig = bl_svg_create("bad id!", "empty", 1, 1, 300, 200);
    bl_svg_note(bl_svg_panel_at(fig, 0), "no slopes in any model");
    check_true(bl_svg_panel_at(fig, 1) == NULL, "panel index out of range");
    char *out = NULL;
    size_t len = 0;
    bl_error err = {0};
    check_true(bl_svg_render(fig, &out, &len, &err) == BL_OK, "note-only figure renders");
    check_true(out && strstr(out, "no slopes in any model") && !strstr(out, "clipPath"), "note shown without axes");
    check_true(out && strstr(out, "id=\"bad-id--title\""), "id sanitised");
    free(out);
    bl_svg_destroy(fig);
    bl_svg_destroy(NULL);
}

int main(int argc, char **argv)
{
    static const harness_case cases[] = {
        HARNESS_ENTRY(nice_ticks),    HARNESS_ENTRY(okabe_ito_palette),      HARNESS_ENTRY(xml_escaping),
        HARNESS_ENTRY(sample_figure), HARNESS_ENTRY(bad_arguments_and_note),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
