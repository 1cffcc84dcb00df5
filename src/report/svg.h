/* A small plotting layer that writes SVG 1.1 directly: a figure holds a grid of panels (axes),
 * each panel collects data-space elements (lines, points, error bars, ribbons, vertical spans,
 * bars, reference lines), and rendering maps them to pixels with "nice" 1-2-5 ticks.
 *
 * Output is deterministic: every coordinate is printed with two decimals, so the same calls give
 * the same bytes. Text is escaped for XML (and invalid UTF-8 replaced), so any label is safe.
 * Colours are the Okabe-Ito palette, safe for the common colour-vision deficiencies
 * (Okabe & Ito 2008, "Color Universal Design"). Tick placement follows Heckbert (1990),
 * "Nice numbers for graph labels", Graphics Gems I.
 *
 * Ownership: a figure owns its panels and copies every array and string it is given.
 * Allocation failures are sticky: drawing calls return nothing, and bl_svg_render()
 * report BL_ERR_NOMEM, so callers need not check each call.
 */
#ifndef BL_SVG_H
#define BL_SVG_H

#include "bandlink/status.h"

#include <stddef.h>
#include <stdio.h>

typedef struct bl_svg bl_svg;
typedef struct bl_svg_panel bl_svg_panel;

enum { BL_SVG_X = 0, BL_SVG_Y = 1 };

/* Number of colours in the palette; bl_svg_color(i) wraps around. */
enum { BL_SVG_NCOLORS = 8 };
/* Okabe-Ito colour i as "#rrggbb" (order: blue, vermillion, bluish green, reddish purple, orange,
 * sky blue, yellow, black; yellow late because it is faint on white). */
const char *bl_svg_color(int i);

typedef enum { BL_SVG_MARK_CIRCLE = 0, BL_SVG_MARK_SQUARE, BL_SVG_MARK_TRIANGLE, BL_SVG_MARK_DIAMOND } bl_svg_marker;

typedef struct {
    const char *color;    /* "#rrggbb"; NULL = black */
    double opacity;       /* 0..1; 0 means the default for the element (1, or 0.2 for fills) */
    double width;         /* stroke width [px]; 0 = default 1.5 */
    int dashed;           /* lines: 1 = dashed */
    bl_svg_marker marker; /* points */
    double size;          /* marker radius [px]; 0 = default 3 */
} bl_svg_style;

/* A figure of rows x cols panels, each panel_w x panel_h pixels (including its margins), with a
 * title on top and, when legend entries are added, a legend column on the right.
 * `id` (letters, digits, '-') keeps clip-path ids unique when several figures share one HTML page.
 * NULL on allocation failure or bad arguments (rows, cols >= 1; sizes >= 100 px). */
bl_svg *bl_svg_create(const char *id, const char *title, int rows, int cols, double panel_w, double panel_h);
void bl_svg_destroy(bl_svg *fig);

/* Panel i (row-major, 0-based), owned by the figure; NULL when out of range. */
bl_svg_panel *bl_svg_panel_at(bl_svg *fig, int index);
/* A subtitle above the panel. */
void bl_svg_panel_title(bl_svg_panel *p, const char *title);
/* Axis label, with units, e.g. "regressor (z-score)". */
void bl_svg_axis_label(bl_svg_panel *p, int axis, const char *label);
/* Logarithmic (base 10) axis; values <= 0 are not drawn on it. */
void bl_svg_axis_log(bl_svg_panel *p, int axis);
/* Fix the axis range (lo < hi, finite; > 0 on a log axis); otherwise it spans the data, widened
 * to nice tick values. */
void bl_svg_axis_range(bl_svg_panel *p, int axis, double lo, double hi);
/* Make sure an automatic range includes `value` (e.g. 0 for bars). */
void bl_svg_axis_include(bl_svg_panel *p, int axis, double value);
/* A categorical axis: data coordinate k (0-based) is category k, shown with labels[k] (the first
 * 256 are labelled). On the Y axis category 0 is at the top. */
void bl_svg_axis_categories(bl_svg_panel *p, int axis, const char *const *labels, size_t n);

/* Data elements, drawn in the order added. Arrays are copied. NAN values break a line / ribbon
 * and skip a point or bar. */
void bl_svg_line(bl_svg_panel *p, const double *x, const double *y, size_t n, bl_svg_style s);
void bl_svg_points(bl_svg_panel *p, const double *x, const double *y, size_t n, bl_svg_style s);
/* Error bars along `axis` (BL_SVG_Y: vertical from lo to hi at x[i]; BL_SVG_X: horizontal from
 * lo to hi at y[i]), with small caps. */
void bl_svg_errorbars(bl_svg_panel *p, int axis, const double *x, const double *y, const double *lo, const double *hi,
                      size_t n, bl_svg_style s);
/* A shaded band between lo[i] and hi[i] over x[i] (x increasing). */
void bl_svg_ribbon(bl_svg_panel *p, const double *x, const double *lo, const double *hi, size_t n, bl_svg_style s);
/* A shaded vertical span x0..x1 over the full height, labelled at the top (label may be NULL). */
void bl_svg_vspan(bl_svg_panel *p, double x0, double x1, const char *label, bl_svg_style s);
/* Bars: bar i spans x[i] +- width/2 (data units) from 0 to y[i]. */
void bl_svg_bars(bl_svg_panel *p, const double *x, const double *y, size_t n, double width, bl_svg_style s);
/* A reference line across the panel at `value` of `axis` (BL_SVG_X: vertical line). */
void bl_svg_refline(bl_svg_panel *p, int axis, double value, bl_svg_style s);
/* A short label at data point (x, y), centred, `dy` pixels above it (negative: below). */
void bl_svg_text(bl_svg_panel *p, double x, double y, double dy, const char *text, bl_svg_style s);
/* A centred message in the panel (e.g. "no slopes in any model"); a panel with only a note has no
 * axes. */
void bl_svg_note(bl_svg_panel *p, const char *text);

typedef enum {
    BL_SVG_KEY_LINE = 0,
    BL_SVG_KEY_POINT,
    BL_SVG_KEY_LINE_POINT,
    BL_SVG_KEY_BOX,
    BL_SVG_KEY_NONE
} bl_svg_key;
/* A legend entry (shown in the legend column, in the order added; BL_SVG_KEY_NONE: text only,
 * aligned with the other entries). Labels wider than the legend column (320 px of text) wrap onto
 * more rows, breaking after ';' or ',' or at a space when they can; nothing is cut. */
void bl_svg_legend(bl_svg *fig, const char *label, bl_svg_key key, bl_svg_style s);
/* A legend heading (bold, no key). */
void bl_svg_legend_heading(bl_svg *fig, const char *text);

/* Render as one <svg> element (no XML declaration, so it can be inlined in HTML). Caller frees
 * *out. BL_ERR_NOMEM when any earlier call ran out of memory. */
bl_status bl_svg_render(const bl_svg *fig, char **out, size_t *size, bl_error *err);

/* Append `text` to `f` with XML escaping (&, <, >, ", ') and invalid UTF-8 or control characters
 * replaced by U+FFFD. Shared with the HTML report. */
void bl_svg_escape(FILE *f, const char *text);

/* Nice ticks for [lo, hi] (Heckbert 1990): about `target` ticks at steps 1, 2 or 5 x 10^k.
 * Fills *first, *step and *count (ticks first + k*step, k < count), and widens *lo and *hi to tick
 * values. BL_ERR_RANGE on bad input (non-finite, lo > hi, target < 2). */
bl_status bl_svg_nice_ticks(double *lo, double *hi, int target, double *first, double *step, int *count, bl_error *err);

#endif
