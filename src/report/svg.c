/* SVG plotting layer: figures of panels, data-space elements, nice ticks, deterministic output.
 *
 * Sources: Heckbert (1990) "Nice numbers for graph labels", Graphics Gems I (loose labelling with
 * 1-2-5 steps); Okabe & Ito (2008) "Color Universal Design" (palette); W3C SVG 1.1 and XML 1.0
 * (elements, escaping). Text widths are estimated as 0.6 x font size per character, the usual
 * average advance of sans-serif fonts, since no font metrics are available here.
 */
#define _GNU_SOURCE 1 /* fopencookie */
#include "report/svg.h"

#include "core/output.h"

#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <sys/types.h>
#include <stdlib.h>
#include <string.h>

#define FONT "DejaVu Sans, Helvetica, Arial, sans-serif"
enum { FS_TITLE = 15, FS_PANEL = 13, FS_LABEL = 12, FS_TICK = 11, FS_LEGEND = 12, FS_SPAN = 10 };
static const double TITLE_H = 34, LEGEND_ROW = 18;

typedef enum { EL_LINE, EL_POINTS, EL_ERRORBARS, EL_RIBBON, EL_VSPAN, EL_BARS, EL_REFLINE, EL_NOTE, EL_TEXT } el_kind;

typedef struct {
    el_kind kind;
    bl_svg_style style;
    char color[8];
    int axis; /* errorbars, refline */
    size_t n;
    double *x, *y, *lo, *hi;
    double a, b; /* vspan x0/x1, refline value, bar width */
    char *text;  /* vspan label, note */
} element;

typedef struct {
    int log, fixed, categorical;
    double lo, hi; /* fixed range */
    double *include;
    size_t n_include;
    char **cats;
    size_t n_cats;
    char *label;
} axis_t;

struct bl_svg_panel {
    bl_svg *fig;
    char *title;
    axis_t ax[2];
    element *el;
    size_t n_el, cap_el;
};

typedef struct {
    char *label;
    bl_svg_key key;
    bl_svg_style style;
    char color[8];
    int heading;
} legend_t;

struct bl_svg {
    char *id, *title;
    int rows, cols;
    double pw, ph;
    bl_svg_panel *panels;
    legend_t *legend;
    size_t n_legend, cap_legend;
    int nomem;
};

static const char *const palette[BL_SVG_NCOLORS] = {"#0072B2", "#D55E00", "#009E73", "#CC79A7",
                                                    "#E69F00", "#56B4E9", "#F0E442", "#000000"};

const char *bl_svg_color(int i)
{
    int k = i % BL_SVG_NCOLORS;
    return palette[k < 0 ? k + BL_SVG_NCOLORS : k];
}

static char *dup_str(bl_svg *fig, const char *s)
{
    if (!s) return NULL;
    size_t n = strlen(s);
    char *d = malloc(n + 1);
    if (!d) {
        fig->nomem = 1;
        return NULL;
    }
    memcpy(d, s, n + 1);
    return d;
}

static double *dup_arr(bl_svg *fig, const double *a, size_t n)
{
    if (!a || n == 0) return NULL;
    double *d = malloc(n * sizeof *d);
    if (!d) {
        fig->nomem = 1;
        return NULL;
    }
    memcpy(d, a, n * sizeof *d);
    return d;
}

/* Keep only a well-formed "#rrggbb" colour; anything else becomes black. */
static void set_color(char out[8], const char *c)
{
    int ok = c && c[0] == '#' && strlen(c) == 7;
    for (int i = 1; ok && i < 7; i++)
        ok = (c[i] >= '0' && c[i] <= '9') || (c[i] >= 'a' && c[i] <= 'f') || (c[i] >= 'A' && c[i] <= 'F');
    memcpy(out, ok ? c : "#000000", 8);
}

bl_svg *bl_svg_create(const char *id, const char *title, int rows, int cols, double panel_w, double panel_h)
{
    if (rows < 1 || cols < 1 || rows > 1000 || cols > 1000 || !(panel_w >= 100) || !(panel_h >= 100)) return NULL;
    bl_svg *fig = calloc(1, sizeof *fig);
    if (!fig) return NULL;
    fig->rows = rows;
    fig->cols = cols;
    fig->pw = panel_w;
    fig->ph = panel_h;
    /* Sanitise the id to [A-Za-z0-9-] so it is a valid XML id fragment. */
    const char *src = id && *id ? id : "fig";
    fig->id = dup_str(fig, src);
    fig->title = dup_str(fig, title ? title : "");
    fig->panels = calloc((size_t)rows * (size_t)cols, sizeof *fig->panels);
    if (!fig->id || !fig->title || !fig->panels) {
        bl_svg_destroy(fig);
        return NULL;
    }
    for (char *c = fig->id; *c; c++)
        if (!((*c >= 'a' && *c <= 'z') || (*c >= 'A' && *c <= 'Z') || (*c >= '0' && *c <= '9') || *c == '-')) *c = '-';
    for (int i = 0; i < rows * cols; i++) fig->panels[i].fig = fig;
    return fig;
}

static void free_axis(axis_t *a)
{
    free(a->include);
    for (size_t i = 0; i < a->n_cats; i++) free(a->cats[i]);
    free(a->cats);
    free(a->label);
}

void bl_svg_destroy(bl_svg *fig)
{
    if (!fig) return;
    if (fig->panels) {
        for (int i = 0; i < fig->rows * fig->cols; i++) {
            bl_svg_panel *p = &fig->panels[i];
            free(p->title);
            free_axis(&p->ax[0]);
            free_axis(&p->ax[1]);
            for (size_t k = 0; k < p->n_el; k++) {
                element *e = &p->el[k];
                free(e->x);
                free(e->y);
                free(e->lo);
                free(e->hi);
                free(e->text);
            }
            free(p->el);
        }
        free(fig->panels);
    }
    for (size_t i = 0; i < fig->n_legend; i++) free(fig->legend[i].label);
    free(fig->legend);
    free(fig->id);
    free(fig->title);
    free(fig);
}

bl_svg_panel *bl_svg_panel_at(bl_svg *fig, int index)
{
    if (!fig || index < 0 || index >= fig->rows * fig->cols) return NULL;
    return &fig->panels[index];
}

void bl_svg_panel_title(bl_svg_panel *p, const char *title)
{
    if (!p) return;
    free(p->title);
    p->title = dup_str(p->fig, title);
}

void bl_svg_axis_label(bl_svg_panel *p, int axis, const char *label)
{
    if (!p || (axis != BL_SVG_X && axis != BL_SVG_Y)) return;
    free(p->ax[axis].label);
    p->ax[axis].label = dup_str(p->fig, label);
}

void bl_svg_axis_log(bl_svg_panel *p, int axis)
{
    if (p && (axis == BL_SVG_X || axis == BL_SVG_Y)) p->ax[axis].log = 1;
}

void bl_svg_axis_range(bl_svg_panel *p, int axis, double lo, double hi)
{
    if (!p || (axis != BL_SVG_X && axis != BL_SVG_Y) || !isfinite(lo) || !isfinite(hi) || !(lo < hi)) return;
    p->ax[axis].fixed = 1;
    p->ax[axis].lo = lo;
    p->ax[axis].hi = hi;
}

void bl_svg_axis_include(bl_svg_panel *p, int axis, double value)
{
    if (!p || (axis != BL_SVG_X && axis != BL_SVG_Y) || !isfinite(value)) return;
    axis_t *a = &p->ax[axis];
    double *n = realloc(a->include, (a->n_include + 1) * sizeof *n);
    if (!n) {
        p->fig->nomem = 1;
        return;
    }
    a->include = n;
    a->include[a->n_include++] = value;
}

void bl_svg_axis_categories(bl_svg_panel *p, int axis, const char *const *labels, size_t n)
{
    if (!p || (axis != BL_SVG_X && axis != BL_SVG_Y)) return;
    axis_t *a = &p->ax[axis];
    for (size_t i = 0; i < a->n_cats; i++) free(a->cats[i]);
    free(a->cats);
    a->cats = NULL;
    a->n_cats = 0;
    a->categorical = 1;
    if (n == 0) return;
    a->cats = calloc(n, sizeof *a->cats);
    if (!a->cats) {
        p->fig->nomem = 1;
        return;
    }
    a->n_cats = n;
    for (size_t i = 0; i < n; i++) a->cats[i] = dup_str(p->fig, labels[i] ? labels[i] : "");
}

static element *add_el(bl_svg_panel *p, el_kind kind, bl_svg_style s)
{
    if (!p) return NULL;
    if (p->n_el == p->cap_el) {
        size_t cap = p->cap_el ? 2 * p->cap_el : 8;
        element *n = realloc(p->el, cap * sizeof *n);
        if (!n) {
            p->fig->nomem = 1;
            return NULL;
        }
        p->el = n;
        p->cap_el = cap;
    }
    element *e = &p->el[p->n_el++];
    memset(e, 0, sizeof *e);
    e->kind = kind;
    e->style = s;
    set_color(e->color, s.color);
    e->style.color = NULL; /* the copy in e->color is used */
    return e;
}

void bl_svg_line(bl_svg_panel *p, const double *x, const double *y, size_t n, bl_svg_style s)
{
    element *e = add_el(p, EL_LINE, s);
    if (!e) return;
    e->n = n;
    e->x = dup_arr(p->fig, x, n);
    e->y = dup_arr(p->fig, y, n);
    if (!e->x || !e->y) e->n = 0;
}

void bl_svg_points(bl_svg_panel *p, const double *x, const double *y, size_t n, bl_svg_style s)
{
    element *e = add_el(p, EL_POINTS, s);
    if (!e) return;
    e->n = n;
    e->x = dup_arr(p->fig, x, n);
    e->y = dup_arr(p->fig, y, n);
    if (!e->x || !e->y) e->n = 0;
}

void bl_svg_errorbars(bl_svg_panel *p, int axis, const double *x, const double *y, const double *lo, const double *hi,
                      size_t n, bl_svg_style s)
{
    element *e = add_el(p, EL_ERRORBARS, s);
    if (!e) return;
    e->axis = axis == BL_SVG_X ? BL_SVG_X : BL_SVG_Y;
    e->n = n;
    e->x = dup_arr(p->fig, x, n);
    e->y = dup_arr(p->fig, y, n);
    e->lo = dup_arr(p->fig, lo, n);
    e->hi = dup_arr(p->fig, hi, n);
    if (!e->x || !e->y || !e->lo || !e->hi) e->n = 0;
}

void bl_svg_ribbon(bl_svg_panel *p, const double *x, const double *lo, const double *hi, size_t n, bl_svg_style s)
{
    element *e = add_el(p, EL_RIBBON, s);
    if (!e) return;
    e->n = n;
    e->x = dup_arr(p->fig, x, n);
    e->lo = dup_arr(p->fig, lo, n);
    e->hi = dup_arr(p->fig, hi, n);
    if (!e->x || !e->lo || !e->hi) e->n = 0;
}

void bl_svg_vspan(bl_svg_panel *p, double x0, double x1, const char *label, bl_svg_style s)
{
    element *e = add_el(p, EL_VSPAN, s);
    if (!e) return;
    e->a = fmin(x0, x1);
    e->b = fmax(x0, x1);
    e->text = dup_str(p->fig, label);
}

void bl_svg_bars(bl_svg_panel *p, const double *x, const double *y, size_t n, double width, bl_svg_style s)
{
    element *e = add_el(p, EL_BARS, s);
    if (!e) return;
    e->n = n;
    e->x = dup_arr(p->fig, x, n);
    e->y = dup_arr(p->fig, y, n);
    if (!e->x || !e->y) e->n = 0;
    e->a = width > 0 ? width : 0.8;
}

void bl_svg_refline(bl_svg_panel *p, int axis, double value, bl_svg_style s)
{
    element *e = add_el(p, EL_REFLINE, s);
    if (!e) return;
    e->axis = axis == BL_SVG_X ? BL_SVG_X : BL_SVG_Y;
    e->a = value;
}

void bl_svg_text(bl_svg_panel *p, double x, double y, double dy, const char *text, bl_svg_style s)
{
    element *e = add_el(p, EL_TEXT, s);
    if (!e) return;
    e->a = x;
    e->b = y;
    e->n = 0;
    e->style.width = dy; /* reused: pixel offset */
    e->text = dup_str(p->fig, text ? text : "");
}

void bl_svg_note(bl_svg_panel *p, const char *text)
{
    element *e = add_el(p, EL_NOTE, (bl_svg_style){0});
    if (!e) return;
    e->text = dup_str(p->fig, text ? text : "");
}

static void add_legend(bl_svg *fig, const char *label, bl_svg_key key, bl_svg_style s, int heading)
{
    if (!fig) return;
    if (fig->n_legend == fig->cap_legend) {
        size_t cap = fig->cap_legend ? 2 * fig->cap_legend : 8;
        legend_t *n = realloc(fig->legend, cap * sizeof *n);
        if (!n) {
            fig->nomem = 1;
            return;
        }
        fig->legend = n;
        fig->cap_legend = cap;
    }
    legend_t *l = &fig->legend[fig->n_legend++];
    memset(l, 0, sizeof *l);
    l->label = dup_str(fig, label ? label : "");
    l->key = key;
    l->style = s;
    set_color(l->color, s.color);
    l->style.color = NULL;
    l->heading = heading;
}

void bl_svg_legend(bl_svg *fig, const char *label, bl_svg_key key, bl_svg_style s)
{
    add_legend(fig, label, key, s, 0);
}

void bl_svg_legend_heading(bl_svg *fig, const char *text)
{
    add_legend(fig, text, BL_SVG_KEY_LINE, (bl_svg_style){0}, 1);
}

/* ---- text ---- */

/* Length of a valid UTF-8 sequence starting at s (1..4), or 0 when invalid (RFC 3629). */
static int utf8_len(const unsigned char *s)
{
    unsigned c = s[0];
    if (c < 0x80) return 1;
    int n;
    uint32_t cp;
    if (c >= 0xC2 && c <= 0xDF) n = 2, cp = c & 0x1F;
    else if (c >= 0xE0 && c <= 0xEF) n = 3, cp = c & 0x0F;
    else if (c >= 0xF0 && c <= 0xF4) n = 4, cp = c & 0x07;
    else return 0;
    for (int i = 1; i < n; i++) {
        if ((s[i] & 0xC0) != 0x80) return 0;
        cp = (cp << 6) | (s[i] & 0x3F);
    }
    if ((n == 3 && cp < 0x800) || (n == 4 && (cp < 0x10000 || cp > 0x10FFFF)) || (cp >= 0xD800 && cp <= 0xDFFF))
        return 0;
    /* U+FFFE and U+FFFF are not XML characters. */
    if (cp == 0xFFFE || cp == 0xFFFF) return 0;
    return n;
}

void bl_svg_escape(FILE *f, const char *text)
{
    if (!text) return;
    const unsigned char *s = (const unsigned char *)text;
    while (*s) {
        int n = utf8_len(s);
        if (n == 0 || (*s < 0x20 && *s != '\t' && *s != '\n' && *s != '\r')) {
            fputs("\xEF\xBF\xBD", f);
            s++;
            continue;
        }
        switch (*s) {
        case '&': fputs("&amp;", f); break;
        case '<': fputs("&lt;", f); break;
        case '>': fputs("&gt;", f); break;
        case '"': fputs("&quot;", f); break;
        case '\'': fputs("&#39;", f); break;
        default: fwrite(s, 1, (size_t)n, f);
        }
        s += n;
    }
}

/* Display width estimate in pixels (code points x 0.6 x font size). */
static double text_width(const char *s, double fs)
{
    size_t n = 0;
    for (const unsigned char *c = (const unsigned char *)(s ? s : ""); *c; c++)
        if ((*c & 0xC0) != 0x80) n++;
    return 0.6 * fs * (double)n;
}

/* A coordinate with two decimals and no negative zero. */
static void num(FILE *f, double v)
{
    if (!isfinite(v)) v = 0;
    double r = round(v * 100) / 100;
    if (r == 0) r = 0;
    fprintf(f, "%.2f", r);
}

/* ---- ticks ---- */

static double nicenum(double x, int rnd)
{
    double e = floor(log10(x));
    double f = x / pow(10, e), nf;
    if (rnd) nf = f < 1.5 ? 1 : f < 3 ? 2 : f < 7 ? 5 : 10;
    else nf = f <= 1 ? 1 : f <= 2 ? 2 : f <= 5 ? 5 : 10;
    return nf * pow(10, e);
}

bl_status bl_svg_nice_ticks(double *lo, double *hi, int target, double *first, double *step, int *count, bl_error *err)
{
    if (!isfinite(*lo) || !isfinite(*hi) || *lo > *hi || target < 2)
        return bl_error_set(err, BL_ERR_RANGE, "svg: no ticks for the range [%g, %g] with %d ticks", *lo, *hi, target);
    if (*lo == *hi) {
        double w = *lo != 0 ? fabs(*lo) * 0.1 : 1;
        *lo -= w;
        *hi += w;
    }
    double range = nicenum(*hi - *lo, 0);
    double d = nicenum(range / (target - 1), 1);
    double k0 = floor(*lo / d + 1e-9), k1 = ceil(*hi / d - 1e-9);
    *first = k0 * d;
    *step = d;
    *count = (int)(k1 - k0) + 1;
    *lo = k0 * d;
    *hi = k1 * d;
    return BL_OK;
}

/* ---- layout and rendering ---- */

/* Ticks per axis; also the most categories an axis labels. */
enum { MAX_TICKS = 256 };

typedef struct {
    double lo, hi; /* in transformed units (log10 for log axes) */
    double ticks[MAX_TICKS];
    char labels[MAX_TICKS][32];
    int n_ticks;
    double px0, px1; /* pixel positions of lo and hi */
} scale_t;

static double tr(const axis_t *a, double v) { return a->log ? (v > 0 ? log10(v) : NAN) : v; }

static double map(const scale_t *s, double tv) { return s->px0 + (tv - s->lo) / (s->hi - s->lo) * (s->px1 - s->px0); }

static void extend(double *lo, double *hi, double v)
{
    if (!isfinite(v)) return;
    if (v < *lo) *lo = v;
    if (v > *hi) *hi = v;
}

/* Data extent of the panel along an axis, in transformed units. */
static void data_extent(const bl_svg_panel *p, int axis, double *lo, double *hi)
{
    const axis_t *a = &p->ax[axis];
    *lo = INFINITY;
    *hi = -INFINITY;
    for (size_t k = 0; k < p->n_el; k++) {
        const element *e = &p->el[k];
        const double *c = axis == BL_SVG_X ? e->x : e->y;
        switch (e->kind) {
        case EL_LINE:
        case EL_POINTS:
            for (size_t i = 0; c && i < e->n; i++) extend(lo, hi, tr(a, c[i]));
            break;
        case EL_ERRORBARS:
            for (size_t i = 0; c && i < e->n; i++) extend(lo, hi, tr(a, c[i]));
            if (axis == e->axis)
                for (size_t i = 0; e->lo && i < e->n; i++) {
                    extend(lo, hi, tr(a, e->lo[i]));
                    extend(lo, hi, tr(a, e->hi[i]));
                }
            break;
        case EL_RIBBON:
            for (size_t i = 0; e->x && i < e->n; i++) {
                if (axis == BL_SVG_X) extend(lo, hi, tr(a, e->x[i]));
                else {
                    extend(lo, hi, tr(a, e->lo[i]));
                    extend(lo, hi, tr(a, e->hi[i]));
                }
            }
            break;
        case EL_VSPAN:
            if (axis == BL_SVG_X) {
                extend(lo, hi, tr(a, e->a));
                extend(lo, hi, tr(a, e->b));
            }
            break;
        case EL_BARS:
            for (size_t i = 0; e->x && i < e->n; i++) {
                if (!isfinite(e->x[i]) || !isfinite(e->y[i])) continue;
                if (axis == BL_SVG_X) {
                    extend(lo, hi, tr(a, e->x[i] - e->a / 2));
                    extend(lo, hi, tr(a, e->x[i] + e->a / 2));
                } else {
                    extend(lo, hi, tr(a, e->y[i]));
                    if (!a->log) extend(lo, hi, 0);
                }
            }
            break;
        case EL_REFLINE:
            if (axis == e->axis) extend(lo, hi, tr(a, e->a));
            break;
        case EL_TEXT: extend(lo, hi, tr(a, axis == BL_SVG_X ? e->a : e->b)); break;
        case EL_NOTE: break;
        }
    }
    for (size_t i = 0; i < a->n_include; i++) extend(lo, hi, tr(a, a->include[i]));
}

static void fmt_tick(char *buf, size_t n, double v, double step)
{
    if (fabs(v) < step * 1e-6) v = 0;
    int dec = step >= 1 ? 0 : (int)ceil(-log10(step) - 1e-9);
    if (fabs(v) >= 1e6 || (v != 0 && fabs(v) < 1e-4)) snprintf(buf, n, "%.3g", v);
    else snprintf(buf, n, "%.*f", dec, v);
}

static void make_scale(const bl_svg_panel *p, int axis, scale_t *s)
{
    const axis_t *a = &p->ax[axis];
    s->n_ticks = 0;
    if (a->categorical) {
        size_t n = a->n_cats ? a->n_cats : 1;
        s->lo = -0.5;
        s->hi = (double)n - 0.5;
        for (size_t i = 0; i < a->n_cats && i < MAX_TICKS; i++) {
            s->ticks[s->n_ticks] = (double)i;
            snprintf(s->labels[s->n_ticks], sizeof s->labels[0], "%s", "");
            s->n_ticks++;
        }
        return;
    }
    double lo, hi;
    if (a->fixed) {
        lo = tr(a, a->lo);
        hi = tr(a, a->hi);
        if (!isfinite(lo) || !isfinite(hi)) lo = 0, hi = 1;
    } else {
        data_extent(p, axis, &lo, &hi);
        if (!(lo <= hi)) lo = 0, hi = 1;
    }
    if (a->log) {
        /* Decades, with 2 and 5 in between when the range is short (1-2-5 steps). */
        if (lo == hi) lo -= 0.5, hi += 0.5;
        double e0 = floor(lo + 1e-9), e1 = ceil(hi - 1e-9);
        int decades = (int)(e1 - e0);
        const double mant[3] = {1, 2, 5};
        int use_mant = decades <= 2;
        int every = decades > 7 ? (decades + 5) / 6 : 1;
        if (!a->fixed) {
            /* Widen to the nearest tick value below/above. */
            double nlo = e0, nhi = e1;
            if (use_mant) {
                for (int m = 2; m >= 0; m--)
                    if (e0 + log10(mant[m]) <= lo + 1e-9) {
                        nlo = e0 + log10(mant[m]);
                        break;
                    }
                for (int e = (int)e0; e <= (int)e1 && nhi == e1; e++)
                    for (int m = 0; m < 3; m++)
                        if (e + log10(mant[m]) >= hi - 1e-9) {
                            nhi = e + log10(mant[m]);
                            break;
                        }
            }
            lo = nlo;
            hi = nhi;
            if (lo == hi) hi = lo + 1;
        }
        for (int e = (int)e0; e <= (int)e1; e++) {
            if ((e - (int)e0) % every != 0) continue;
            for (int m = 0; m < (use_mant ? 3 : 1); m++) {
                double t = e + log10(mant[m]);
                if (t < lo - 1e-9 || t > hi + 1e-9 || s->n_ticks >= MAX_TICKS) continue;
                s->ticks[s->n_ticks] = t;
                snprintf(s->labels[s->n_ticks], sizeof s->labels[0], "%g", mant[m] * pow(10, e));
                s->n_ticks++;
            }
        }
    } else {
        double first, step;
        int count;
        double wlo = lo, whi = hi;
        if (bl_svg_nice_ticks(&wlo, &whi, 6, &first, &step, &count, NULL)) {
            wlo = 0, whi = 1, first = 0, step = 0.2, count = 6;
        }
        if (!a->fixed) lo = wlo, hi = whi;
        else if (lo == hi) lo = wlo, hi = whi;
        double k0 = round(first / step);
        for (int k = 0; k < count && s->n_ticks < MAX_TICKS; k++) {
            double t = (k0 + k) * step;
            if (t < lo - 1e-9 * step || t > hi + 1e-9 * step) continue;
            s->ticks[s->n_ticks] = t;
            fmt_tick(s->labels[s->n_ticks], sizeof s->labels[0], t, step);
            s->n_ticks++;
        }
    }
    s->lo = lo;
    s->hi = hi;
}

static int panel_has_axes(const bl_svg_panel *p)
{
    for (size_t k = 0; k < p->n_el; k++)
        if (p->el[k].kind != EL_NOTE) return 1;
    return p->ax[0].label || p->ax[1].label;
}

static void stroke_attrs(FILE *f, const element *e, double default_w)
{
    fprintf(f, " fill=\"none\" stroke=\"%s\" stroke-width=\"", e->color);
    num(f, e->style.width > 0 ? e->style.width : default_w);
    fputc('"', f);
    if (e->style.opacity > 0 && e->style.opacity < 1) {
        fputs(" stroke-opacity=\"", f);
        num(f, e->style.opacity);
        fputc('"', f);
    }
    if (e->style.dashed) fputs(" stroke-dasharray=\"6 3\"", f);
}

static void marker(FILE *f, bl_svg_marker m, double x, double y, double r)
{
    switch (m) {
    case BL_SVG_MARK_SQUARE:
        fputs("<rect x=\"", f), num(f, x - r), fputs("\" y=\"", f), num(f, y - r);
        fputs("\" width=\"", f), num(f, 2 * r), fputs("\" height=\"", f), num(f, 2 * r), fputs("\"/>", f);
        break;
    case BL_SVG_MARK_TRIANGLE:
        fputs("<path d=\"M", f), num(f, x), fputc(' ', f), num(f, y - 1.2 * r);
        fputs("L", f), num(f, x + 1.1 * r), fputc(' ', f), num(f, y + 0.8 * r);
        fputs("L", f), num(f, x - 1.1 * r), fputc(' ', f), num(f, y + 0.8 * r), fputs("Z\"/>", f);
        break;
    case BL_SVG_MARK_DIAMOND:
        fputs("<path d=\"M", f), num(f, x), fputc(' ', f), num(f, y - 1.3 * r);
        fputs("L", f), num(f, x + 1.3 * r), fputc(' ', f), num(f, y);
        fputs("L", f), num(f, x), fputc(' ', f), num(f, y + 1.3 * r);
        fputs("L", f), num(f, x - 1.3 * r), fputc(' ', f), num(f, y), fputs("Z\"/>", f);
        break;
    default:
        fputs("<circle cx=\"", f), num(f, x), fputs("\" cy=\"", f), num(f, y), fputs("\" r=\"", f), num(f, r);
        fputs("\"/>", f);
    }
}

static void text_el(FILE *f, double x, double y, int fs, const char *anchor, const char *extra, const char *s)
{
    fputs("<text x=\"", f), num(f, x), fputs("\" y=\"", f), num(f, y);
    fprintf(f, "\" font-size=\"%d\"", fs);
    if (anchor) fprintf(f, " text-anchor=\"%s\"", anchor);
    if (extra) fprintf(f, " %s", extra);
    fputc('>', f);
    bl_svg_escape(f, s);
    fputs("</text>\n", f);
}

typedef struct {
    double x0, y0, x1, y1; /* plot area in pixels */
} box_t;

/* Largest font size <= the axis-label size (and >= 8) at which `s` fits in `room` pixels. */
static int fit_font(const char *s, double room)
{
    int fs = FS_LABEL;
    while (fs > 8 && text_width(s, fs) > room) fs--;
    return fs;
}

/* What the element renderers share: the stream, the panel's axes and scales, and its plot box. */
typedef struct {
    FILE *f;
    const axis_t *ax, *ay;
    const scale_t *sx, *sy;
    box_t b;
} draw_ctx;

static double dx(const draw_ctx *c, double v) { return map(c->sx, tr(c->ax, v)); }
static double dy(const draw_ctx *c, double v) { return map(c->sy, tr(c->ay, v)); }

/* A polyline, broken at non-finite points. */
static void render_line(const draw_ctx *c, const element *e)
{
    FILE *f = c->f;
    fputs("<path d=\"", f);
    int pen = 0;
    for (size_t i = 0; i < e->n; i++) {
        double x = dx(c, e->x[i]), y = dy(c, e->y[i]);
        if (!isfinite(x) || !isfinite(y)) {
            pen = 0;
            continue;
        }
        fputc(pen ? 'L' : 'M', f);
        num(f, x), fputc(' ', f), num(f, y);
        pen = 1;
    }
    fputc('"', f);
    stroke_attrs(f, e, 1.5);
    fputs(" stroke-linejoin=\"round\"/>\n", f);
}

/* Markers at the finite points. */
static void render_points(const draw_ctx *c, const element *e)
{
    FILE *f = c->f;
    double r = e->style.size > 0 ? e->style.size : 3;
    fprintf(f, "<g fill=\"%s\"", e->color);
    if (e->style.opacity > 0 && e->style.opacity < 1)
        fputs(" fill-opacity=\"", f), num(f, e->style.opacity), fputc('"', f);
    fputs(">", f);
    for (size_t i = 0; i < e->n; i++) {
        double x = dx(c, e->x[i]), y = dy(c, e->y[i]);
        if (isfinite(x) && isfinite(y)) marker(f, e->style.marker, x, y, r);
    }
    fputs("</g>\n", f);
}

/* Error bars with small caps. */
static void render_errorbars(const draw_ctx *c, const element *e)
{
    FILE *f = c->f;
    fputs("<path d=\"", f);
    for (size_t i = 0; i < e->n; i++) {
        if (e->axis == BL_SVG_Y) {
            double x = dx(c, e->x[i]), y0 = dy(c, e->lo[i]), y1 = dy(c, e->hi[i]);
            if (!isfinite(x) || !isfinite(y0) || !isfinite(y1)) continue;
            fputc('M', f), num(f, x), fputc(' ', f), num(f, y0), fputc('V', f), num(f, y1);
            fputc('M', f), num(f, x - 3), fputc(' ', f), num(f, y0), fputc('H', f), num(f, x + 3);
            fputc('M', f), num(f, x - 3), fputc(' ', f), num(f, y1), fputc('H', f), num(f, x + 3);
        } else {
            double y = dy(c, e->y[i]), x0 = dx(c, e->lo[i]), x1 = dx(c, e->hi[i]);
            if (!isfinite(y) || !isfinite(x0) || !isfinite(x1)) continue;
            fputc('M', f), num(f, x0), fputc(' ', f), num(f, y), fputc('H', f), num(f, x1);
            fputc('M', f), num(f, x0), fputc(' ', f), num(f, y - 3), fputc('V', f), num(f, y + 3);
            fputc('M', f), num(f, x1), fputc(' ', f), num(f, y - 3), fputc('V', f), num(f, y + 3);
        }
    }
    fputc('"', f);
    stroke_attrs(f, e, 1.2);
    fputs("/>\n", f);
}

/* A shaded band: one closed polygon per run of finite values. */
static void render_ribbon(const draw_ctx *c, const element *e)
{
    FILE *f = c->f;
    size_t i = 0;
    while (i < e->n) {
        size_t j = i;
        while (j < e->n && isfinite(dx(c, e->x[j])) && isfinite(dy(c, e->lo[j])) && isfinite(dy(c, e->hi[j]))) j++;
        if (j > i + 1) {
            fprintf(f, "<path fill=\"%s\" fill-opacity=\"", e->color);
            num(f, e->style.opacity > 0 ? e->style.opacity : 0.2);
            fputs("\" stroke=\"none\" d=\"", f);
            for (size_t k = i; k < j; k++) {
                fputc(k == i ? 'M' : 'L', f);
                num(f, dx(c, e->x[k])), fputc(' ', f), num(f, dy(c, e->hi[k]));
            }
            for (size_t k = j; k-- > i;) {
                fputc('L', f);
                num(f, dx(c, e->x[k])), fputc(' ', f), num(f, dy(c, e->lo[k]));
            }
            fputs("Z\"/>\n", f);
        }
        i = j > i ? j : i + 1;
    }
}

/* A shaded vertical span over the plot box, with its label. */
static void render_vspan(const draw_ctx *c, const element *e)
{
    FILE *f = c->f;
    box_t b = c->b;
    double x0 = fmax(dx(c, e->a), b.x0), x1 = fmin(dx(c, e->b), b.x1);
    if (!isfinite(x0) || !isfinite(x1) || x1 <= x0) return;
    fprintf(f, "<rect fill=\"%s\" fill-opacity=\"", e->color);
    num(f, e->style.opacity > 0 ? e->style.opacity : 0.15);
    fputs("\" x=\"", f), num(f, x0), fputs("\" y=\"", f), num(f, b.y0);
    fputs("\" width=\"", f), num(f, x1 - x0), fputs("\" height=\"", f), num(f, b.y1 - b.y0), fputs("\"/>\n", f);
    if (e->text) text_el(f, (x0 + x1) / 2, b.y0 + 12, FS_SPAN, "middle", "fill=\"#333333\"", e->text);
}

/* Bars from the base line (0 when inside the range) to each value. */
static void render_bars(const draw_ctx *c, const element *e)
{
    FILE *f = c->f;
    const scale_t *sy = c->sy;
    const axis_t *ay = c->ay;
    double base = ay->log ? sy->lo : (sy->lo <= 0 && sy->hi >= 0 ? 0 : sy->lo);
    double yb = map(sy, base);
    fprintf(f, "<g fill=\"%s\"", e->color);
    if (e->style.opacity > 0 && e->style.opacity < 1)
        fputs(" fill-opacity=\"", f), num(f, e->style.opacity), fputc('"', f);
    fputs(">", f);
    for (size_t i = 0; i < e->n; i++) {
        double x0 = dx(c, e->x[i] - e->a / 2), x1 = dx(c, e->x[i] + e->a / 2), y = dy(c, e->y[i]);
        if (!isfinite(x0) || !isfinite(x1) || !isfinite(y)) continue;
        double top = fmin(y, yb), h = fabs(y - yb);
        fputs("<rect x=\"", f), num(f, fmin(x0, x1)), fputs("\" y=\"", f), num(f, top);
        fputs("\" width=\"", f), num(f, fabs(x1 - x0)), fputs("\" height=\"", f), num(f, h), fputs("\"/>", f);
    }
    fputs("</g>\n", f);
}

/* A reference line across the plot box. */
static void render_refline(const draw_ctx *c, const element *e)
{
    FILE *f = c->f;
    box_t b = c->b;
    double v = e->axis == BL_SVG_X ? dx(c, e->a) : dy(c, e->a);
    if (!isfinite(v)) return;
    fputs("<path d=\"", f);
    if (e->axis == BL_SVG_X) fputc('M', f), num(f, v), fputc(' ', f), num(f, b.y0), fputc('V', f), num(f, b.y1);
    else fputc('M', f), num(f, b.x0), fputc(' ', f), num(f, v), fputc('H', f), num(f, b.x1);
    fputc('"', f);
    stroke_attrs(f, e, 1);
    fputs("/>\n", f);
}

/* A label above a data point. */
static void render_text(const draw_ctx *c, const element *e)
{
    FILE *f = c->f;
    double x = dx(c, e->a), y = dy(c, e->b);
    if (!isfinite(x) || !isfinite(y)) return;
    char fill[32];
    snprintf(fill, sizeof fill, "fill=\"%s\"", e->color);
    text_el(f, x, y - e->style.width, FS_SPAN, "middle", fill, e->text);
}

static void render_element(FILE *f, const bl_svg_panel *p, const element *e, const scale_t *sx, const scale_t *sy,
                           box_t b)
{
    const draw_ctx c = {f, &p->ax[0], &p->ax[1], sx, sy, b};
    switch (e->kind) {
    case EL_LINE: render_line(&c, e); break;
    case EL_POINTS: render_points(&c, e); break;
    case EL_ERRORBARS: render_errorbars(&c, e); break;
    case EL_RIBBON: render_ribbon(&c, e); break;
    case EL_VSPAN: render_vspan(&c, e); break;
    case EL_BARS: render_bars(&c, e); break;
    case EL_REFLINE: render_refline(&c, e); break;
    case EL_NOTE:
        text_el(f, (b.x0 + b.x1) / 2, (b.y0 + b.y1) / 2, FS_LABEL, "middle", "fill=\"#555555\"", e->text);
        break;
    case EL_TEXT: render_text(&c, e); break;
    }
}

static void render_panel(FILE *f, const bl_svg *fig, int index, double ox, double oy)
{
    const bl_svg_panel *p = &fig->panels[index];
    double top = oy + (p->title ? 24 : 10);
    box_t b;
    if (!panel_has_axes(p)) {
        b = (box_t){ox + 10, top, ox + fig->pw - 10, oy + fig->ph - 10};
        if (p->title) text_el(f, (b.x0 + b.x1) / 2, oy + 16, FS_PANEL, "middle", "font-weight=\"bold\"", p->title);
        for (size_t k = 0; k < p->n_el; k++) render_element(f, p, &p->el[k], NULL, NULL, b);
        return;
    }
    scale_t sx, sy;
    make_scale(p, BL_SVG_X, &sx);
    make_scale(p, BL_SVG_Y, &sy);
    /* Left margin: widest y tick label + axis label; categories may need more. */
    double wl = 0;
    if (p->ax[1].categorical)
        for (size_t i = 0; i < p->ax[1].n_cats; i++) wl = fmax(wl, text_width(p->ax[1].cats[i], FS_TICK));
    else
        for (int i = 0; i < sy.n_ticks; i++) wl = fmax(wl, text_width(sy.labels[i], FS_TICK));
    wl = fmin(wl, fig->pw * 0.45);
    double left = ox + wl + 10 + (p->ax[1].label ? 22 : 4);
    double bottom = oy + fig->ph - (p->ax[0].label ? 42 : 24);
    if (p->ax[0].categorical) bottom -= 4;
    b = (box_t){left, top, ox + fig->pw - 14, bottom};
    if (b.x1 - b.x0 < 20) b.x0 = b.x1 - 20;
    if (b.y1 - b.y0 < 20) b.y0 = b.y1 - 20;
    sx.px0 = b.x0, sx.px1 = b.x1;
    if (p->ax[1].categorical)
        sy.px0 = b.y0, sy.px1 = b.y1, sy.lo = -0.5, sy.hi = (double)(p->ax[1].n_cats ? p->ax[1].n_cats : 1) - 0.5;
    else sy.px0 = b.y1, sy.px1 = b.y0;
    /* Categorical y: category 0 at the top means lo maps to y0. */

    fprintf(f, "<g id=\"%s-p%d\">\n", fig->id, index);
    if (p->title) text_el(f, (b.x0 + b.x1) / 2, oy + 16, FS_PANEL, "middle", "font-weight=\"bold\"", p->title);
    /* Grid lines at major ticks. */
    fputs("<path stroke=\"#e6e6e6\" stroke-width=\"1\" fill=\"none\" d=\"", f);
    for (int i = 0; i < sx.n_ticks; i++) {
        double x = map(&sx, sx.ticks[i]);
        fputc('M', f), num(f, x), fputc(' ', f), num(f, b.y0), fputc('V', f), num(f, b.y1);
    }
    for (int i = 0; i < sy.n_ticks; i++) {
        double y = map(&sy, sy.ticks[i]);
        fputc('M', f), num(f, b.x0), fputc(' ', f), num(f, y), fputc('H', f), num(f, b.x1);
    }
    fputs("\"/>\n", f);
    /* Data, clipped to the plot area. */
    /* The clip is a little larger than the frame so markers on the border stay whole. */
    fprintf(f, "<clipPath id=\"%s-c%d\"><rect x=\"", fig->id, index);
    num(f, b.x0 - 5), fputs("\" y=\"", f), num(f, b.y0 - 5), fputs("\" width=\"", f), num(f, b.x1 - b.x0 + 10);
    fputs("\" height=\"", f), num(f, b.y1 - b.y0 + 10), fputs("\"/></clipPath>\n", f);
    fprintf(f, "<g clip-path=\"url(#%s-c%d)\">\n", fig->id, index);
    for (size_t k = 0; k < p->n_el; k++) render_element(f, p, &p->el[k], &sx, &sy, b);
    fputs("</g>\n", f);
    /* Frame and ticks. */
    fputs("<rect fill=\"none\" stroke=\"#333333\" stroke-width=\"1\" x=\"", f);
    num(f, b.x0), fputs("\" y=\"", f), num(f, b.y0), fputs("\" width=\"", f), num(f, b.x1 - b.x0);
    fputs("\" height=\"", f), num(f, b.y1 - b.y0), fputs("\"/>\n", f);
    fputs("<path stroke=\"#333333\" stroke-width=\"1\" fill=\"none\" d=\"", f);
    for (int i = 0; i < sx.n_ticks; i++) {
        double x = map(&sx, sx.ticks[i]);
        fputc('M', f), num(f, x), fputc(' ', f), num(f, b.y1), fputc('v', f), num(f, 4);
    }
    for (int i = 0; i < sy.n_ticks; i++) {
        double y = map(&sy, sy.ticks[i]);
        fputc('M', f), num(f, b.x0), fputc(' ', f), num(f, y), fputc('h', f), num(f, -4);
    }
    fputs("\"/>\n", f);
    for (int i = 0; i < sx.n_ticks; i++) {
        const char *lab = p->ax[0].categorical ? p->ax[0].cats[i] : sx.labels[i];
        text_el(f, map(&sx, sx.ticks[i]), b.y1 + 16, FS_TICK, "middle", NULL, lab);
    }
    for (int i = 0; i < sy.n_ticks; i++) {
        const char *lab = p->ax[1].categorical ? p->ax[1].cats[i] : sy.labels[i];
        text_el(f, b.x0 - 6, map(&sy, sy.ticks[i]) + 4, FS_TICK, "end", NULL, lab);
    }
    if (p->ax[0].label) {
        int fs = fit_font(p->ax[0].label, fig->pw - 8);
        text_el(f, (b.x0 + b.x1) / 2, oy + fig->ph - 10, fs, "middle", NULL, p->ax[0].label);
    }
    if (p->ax[1].label) {
        double x = ox + 14, y = (b.y0 + b.y1) / 2;
        /* A long label along a short axis is set smaller rather than cut off. */
        int fs = fit_font(p->ax[1].label, fmax(b.y1 - b.y0 + 30, 40));
        fputs("<text transform=\"translate(", f), num(f, x), fputc(',', f), num(f, y);
        fprintf(f, ") rotate(-90)\" font-size=\"%d\" text-anchor=\"middle\">", fs);
        bl_svg_escape(f, p->ax[1].label);
        fputs("</text>\n", f);
    }
    fputs("</g>\n", f);
}

static void render_key(FILE *f, const legend_t *l, double x, double y)
{
    double r = l->style.size > 0 ? l->style.size : 3.5;
    switch (l->key) {
    case BL_SVG_KEY_BOX:
        fprintf(f, "<rect fill=\"%s\" fill-opacity=\"", l->color);
        num(f, l->style.opacity > 0 ? l->style.opacity : 0.5);
        fputs("\" x=\"", f), num(f, x), fputs("\" y=\"", f), num(f, y - 6),
            fputs("\" width=\"22\" height=\"12\"/>\n", f);
        break;
    case BL_SVG_KEY_POINT:
        fprintf(f, "<g fill=\"%s\">", l->color), marker(f, l->style.marker, x + 11, y, r), fputs("</g>\n", f);
        break;
    default:
        fputs("<path d=\"M", f), num(f, x), fputc(' ', f), num(f, y), fputs("h22\"", f);
        fprintf(f, " fill=\"none\" stroke=\"%s\" stroke-width=\"", l->color);
        num(f, l->style.width > 0 ? l->style.width : 2);
        fputc('"', f);
        if (l->style.dashed) fputs(" stroke-dasharray=\"6 3\"", f);
        fputs("/>\n", f);
        if (l->key == BL_SVG_KEY_LINE_POINT)
            fprintf(f, "<g fill=\"%s\">", l->color), marker(f, l->style.marker, x + 11, y, r), fputs("</g>\n", f);
    }
}

/* The legend column is at most LEGEND_TEXT_W pixels of text wide; longer labels wrap onto more rows
 * (never cut), preferring a break after ';', ',' or at a space. */
static const double LEGEND_TEXT_W = 320, LEGEND_KEY_W = 30;

static size_t legend_room_chars(const legend_t *l)
{
    double room = LEGEND_TEXT_W - (l->heading ? 0 : LEGEND_KEY_W);
    size_t n = (size_t)(room / text_width("x", FS_LEGEND));
    return n > 8 ? n : 8;
}

/* Bytes of the next line of `s` holding at most `max_chars` characters (whole UTF-8 sequences). */
static size_t legend_next_line(const char *s, size_t max_chars)
{
    size_t chars = 0, i = 0, brk = 0;
    while (s[i]) {
        size_t next = i + 1;
        while (((unsigned char)s[next] & 0xC0) == 0x80) next++;
        if (chars == max_chars) return brk ? brk : i;
        if (s[i] == ';' || s[i] == ',') brk = next;
        else if (s[i] == ' ' && i > 0) brk = i;
        chars++;
        i = next;
    }
    return i;
}

static size_t legend_rows(const legend_t *l)
{
    size_t rows = 0, max = legend_room_chars(l);
    const char *s = l->label ? l->label : "";
    do {
        s += legend_next_line(s, max);
        while (*s == ' ') s++;
        rows++;
    } while (*s);
    return rows;
}

static double legend_width(const bl_svg *fig)
{
    if (fig->n_legend == 0) return 0;
    double w = 0;
    for (size_t i = 0; i < fig->n_legend; i++) {
        const legend_t *l = &fig->legend[i];
        double key = l->heading ? 0 : LEGEND_KEY_W;
        w = fmax(w, fmin(text_width(l->label, FS_LEGEND), LEGEND_TEXT_W - key) + key);
    }
    return w + 24;
}

static size_t legend_total_rows(const bl_svg *fig)
{
    size_t n = 0;
    for (size_t i = 0; i < fig->n_legend; i++) n += legend_rows(&fig->legend[i]);
    return n;
}

/* One legend entry's text from (x, y), wrapped; returns the rows used. */
static size_t render_legend_text(FILE *f, const legend_t *l, double x, double y)
{
    size_t rows = 0, max = legend_room_chars(l);
    const char *s = l->label ? l->label : "";
    do {
        size_t len = legend_next_line(s, max);
        char *line = malloc(len + 1);
        if (line) {
            memcpy(line, s, len);
            line[len] = 0;
        }
        text_el(f, x, y + LEGEND_ROW * (double)rows + 4, FS_LEGEND, NULL, l->heading ? "font-weight=\"bold\"" : NULL,
                line ? line : "");
        free(line);
        s += len;
        while (*s == ' ') s++;
        rows++;
    } while (*s);
    return rows;
}

static void render_to(FILE *f, const bl_svg *fig)
{
    double lw = legend_width(fig);
    double width = fig->cols * fig->pw + lw;
    double height = TITLE_H + fig->rows * fig->ph;
    double lh = TITLE_H + 14 + LEGEND_ROW * (double)legend_total_rows(fig) + 10;
    if (lh > height) height = lh;
    fputs("<svg xmlns=\"http://www.w3.org/2000/svg\" version=\"1.1\" width=\"", f);
    num(f, width), fputs("\" height=\"", f), num(f, height), fputs("\" viewBox=\"0 0 ", f);
    num(f, width), fputc(' ', f), num(f, height);
    fprintf(f, "\" role=\"img\" aria-labelledby=\"%s-title\" font-family=\"%s\" fill=\"#222222\">\n", fig->id, FONT);
    fprintf(f, "<title id=\"%s-title\">", fig->id);
    bl_svg_escape(f, fig->title);
    fputs("</title>\n", f);
    fputs("<rect x=\"0\" y=\"0\" width=\"", f), num(f, width), fputs("\" height=\"", f), num(f, height);
    fputs("\" fill=\"#ffffff\"/>\n", f);
    /* Centred over the panels when it fits there, else left-aligned so it is never cut off. */
    if (text_width(fig->title, FS_TITLE) <= fig->cols * fig->pw - 16)
        text_el(f, (fig->cols * fig->pw) / 2, 22, FS_TITLE, "middle", "font-weight=\"bold\"", fig->title);
    else text_el(f, 10, 22, FS_TITLE, NULL, "font-weight=\"bold\"", fig->title);
    for (int r = 0; r < fig->rows; r++)
        for (int c = 0; c < fig->cols; c++) render_panel(f, fig, r * fig->cols + c, c * fig->pw, TITLE_H + r * fig->ph);
    if (fig->n_legend) {
        double x = fig->cols * fig->pw + 8, y = TITLE_H + 14;
        fprintf(f, "<g id=\"%s-legend\">\n", fig->id);
        for (size_t i = 0; i < fig->n_legend; i++) {
            const legend_t *l = &fig->legend[i];
            if (!l->heading && l->key != BL_SVG_KEY_NONE) render_key(f, l, x, y);
            y += LEGEND_ROW * (double)render_legend_text(f, l, l->heading ? x : x + LEGEND_KEY_W, y);
        }
        fputs("</g>\n", f);
    }
    fputs("</svg>\n", f);
}

/* A growing memory buffer behind a FILE (fopencookie). Unlike open_memstream, whose glibc version drops
 * text without setting the error flag when its buffer cannot grow, a failed growth is remembered here. */
typedef struct {
    char *buf;
    size_t len, cap;
    int failed;
} render_buffer;

static ssize_t render_buffer_write(void *cookie, const char *data, size_t n)
{
    render_buffer *b = cookie;
    if (b->failed) return -1;
    if (b->len + n + 1 > b->cap) {
        size_t cap = b->cap ? b->cap : 4096;
        while (cap < b->len + n + 1) cap *= 2;
        char *nb = realloc(b->buf, cap);
        if (!nb) {
            b->failed = 1;
            return -1;
        }
        b->buf = nb;
        b->cap = cap;
    }
    memcpy(b->buf + b->len, data, n);
    b->len += n;
    b->buf[b->len] = '\0';
    return (ssize_t)n;
}

bl_status bl_svg_render(const bl_svg *fig, char **out, size_t *size, bl_error *err)
{
    *out = NULL;
    *size = 0;
    if (!fig) return bl_error_set(err, BL_ERR_INTERNAL, "svg: no figure to render");
    if (fig->nomem) return bl_error_set(err, BL_ERR_NOMEM, "out of memory while drawing figure '%s'", fig->id);
    render_buffer b = {NULL, 0, 0, 0};
    cookie_io_functions_t io = {NULL, render_buffer_write, NULL, NULL};
    FILE *f = fopencookie(&b, "w", io);
    if (!f) return bl_error_set(err, BL_ERR_NOMEM, "out of memory rendering figure '%s'", fig->id);
    render_to(f, fig);
    int bad = ferror(f);
    if (fclose(f) != 0) bad = 1;
    if (bad || b.failed || !b.buf) {
        free(b.buf);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory rendering figure '%s'", fig->id);
    }
    *out = b.buf;
    *size = b.len;
    return BL_OK;
}
