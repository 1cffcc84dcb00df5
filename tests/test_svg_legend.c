/* Legends are never cut: a label wider than the legend column wraps onto more rows (after ';' or ',',
 * at a space, or inside a long word), every row fits inside the figure's width, and the rows together
 * hold the whole label. Widths use the layer's own text estimate (0.6 em per character, the average
 * advance of DejaVu Sans, from its metrics as commonly quoted); the checks parse the rendered SVG. */
#include "report/svg.h"
#include "harness.h"

#include <stdlib.h>
#include <string.h>

typedef struct {
    double x;
    char text[512];
} line_t;

/* The <text> elements of the figure's legend group, in order. */
static size_t legend_lines(const char *svg, const char *id, line_t *out, size_t max)
{
    char open[64];
    snprintf(open, sizeof open, "<g id=\"%s-legend\">", id);
    /* the legend group is the last element of the figure (keys hold inner <g> groups) */
    const char *p = strstr(svg, open), *end = p ? strstr(p, "</svg>") : NULL;
    size_t n = 0;
    while (p && end && n < max && (p = strstr(p, "<text x=\"")) && p < end) {
        out[n].x = strtod(p + 9, NULL);
        const char *gt = strchr(p, '>'), *close = gt ? strstr(gt, "</text>") : NULL;
        if (!close) break;
        snprintf(out[n].text, sizeof out[n].text, "%.*s", (int)(close - gt - 1), gt + 1);
        n++;
        p = close;
    }
    return n;
}

static double svg_width(const char *svg)
{
    const char *w = strstr(svg, "width=\"");
    return w ? strtod(w + 7, NULL) : 0;
}

static size_t chars(const char *s)
{
    size_t n = 0;
    for (const unsigned char *c = (const unsigned char *)s; *c; c++) n += (*c & 0xC0) != 0x80;
    return n;
}

/* The label again from its rows: rows broken at a space lost that space. */
static int rows_hold(const line_t *l, size_t from, size_t to, const char *label)
{
    char joined[2048] = "", want[2048] = "";
    for (size_t i = from; i < to; i++) strncat(joined, l[i].text, sizeof joined - strlen(joined) - 1);
    size_t k = 0;
    for (const char *c = label; *c && k + 1 < sizeof want; c++)
        if (*c != ' ') want[k++] = *c;
    want[k] = 0;
    k = 0;
    for (char *c = joined; *c; c++)
        if (*c != ' ') joined[k++] = *c;
    joined[k] = 0;
    return strcmp(joined, want) == 0;
}

int main(void)
{
    bl_error err = {0};
    const char *cell = "context=rich;difficulty=hard;stimulus=right;session=late;block=3 (212 trials)";
    char word[121];
    memset(word, 'w', 120);
    word[120] = 0;
    bl_svg *fig = bl_svg_create("leg", "legend wrap", 1, 1, 300, 200);
    bl_svg_panel *p = bl_svg_panel_at(fig, 0);
    bl_svg_line(p, (double[]){0, 1}, (double[]){0, 1}, 2, (bl_svg_style){0});
    bl_svg_legend_heading(fig, "cells (numbered by predicted accuracy)");
    bl_svg_legend(fig, "short", BL_SVG_KEY_LINE, (bl_svg_style){.color = bl_svg_color(0)});
    bl_svg_legend(fig, cell, BL_SVG_KEY_NONE, (bl_svg_style){0});
    bl_svg_legend(fig, word, BL_SVG_KEY_POINT, (bl_svg_style){.color = bl_svg_color(1)});
    char *svg = NULL;
    size_t size = 0;
    if (!check_true(bl_svg_render(fig, &svg, &size, &err) == BL_OK, "render (%s)", err.message)) return 1;
    line_t l[64];
    size_t n = legend_lines(svg, "leg", l, 64);
    double width = svg_width(svg);
    /* heading 1 row, "short" 1 row; a row holds (320 - 30 px key) / 7.2 px = 40 characters: the
     * 76-character cell label takes 3 rows when broken only after ';' or at a space (29 + 35 + 12
     * characters), the 120-character word exactly 3 */
    check_true(n == 1 + 1 + 3 + 3, "legend rows: 1 + 1 + 3 + 3 (%zu)", n);
    if (n == 8) {
        check_true(strcmp(l[0].text, "cells (numbered by predicted accuracy)") == 0 && strcmp(l[1].text, "short") == 0,
                   "short labels stay on one row");
        check_true(rows_hold(l, 2, 5, cell), "the cell label's rows hold all of it: '%s' + '%s' + '%s'", l[2].text,
                   l[3].text, l[4].text);
        check_true(l[2].text[strlen(l[2].text) - 1] == ';' && strcmp(l[4].text, "(212 trials)") == 0,
                   "wrapped after a ';' and at a space (%s | %s)", l[2].text, l[4].text);
        check_true(rows_hold(l, 5, 8, word) && chars(l[5].text) == 40,
                   "a long word is split in rows of 40, nothing lost");
        check_true(l[2].x == l[3].x && l[3].x == l[4].x && l[5].x == l[6].x && l[1].x == l[2].x,
                   "continuation rows align with their first row, keyless entries with keyed ones");
        for (size_t i = 0; i < 8; i++)
            check_true(chars(l[i].text) <= 44, "row %zu fits the 320 px column (%zu characters)", i, chars(l[i].text));
    }
    double worst = 0;
    for (size_t i = 0; i < n; i++) worst = fmax(worst, l[i].x + 0.6 * 12 * (double)chars(l[i].text) - width);
    check_true(n > 0 && worst <= 0, "every legend row ends inside the figure (worst overhang %.1f px of %.0f)", worst,
               width);
    /* rows below each other: the figure is tall enough for all of them */
    const char *h = strstr(svg, "height=\"");
    double height = h ? strtod(h + 8, NULL) : 0;
    const char *last = strstr(svg, "<g id=\"leg-legend\">");
    double last_y = 0;
    for (const char *q = last; q && (q = strstr(q, "<text x=\"")); q++) {
        const char *y = strstr(q, "y=\"");
        if (y) last_y = strtod(y + 3, NULL);
    }
    check_true(last_y > 0 && last_y < height, "the last legend row (y %.0f) is inside the height %.0f", last_y, height);
    free(svg);
    bl_svg_destroy(fig);
    return harness_summary();
}
