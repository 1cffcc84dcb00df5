/* Column-oriented trial tables: building, lookup, destruction. (CSV/TSV reading: bl_table_read/parse.) */
#include "design/table.h"
#include "core/strutil.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

bl_table *bl_table_create(size_t n_rows)
{
    bl_table *t = calloc(1, sizeof *t);
    if (!t) return NULL;
    t->n_rows = n_rows;
    t->line = calloc(n_rows ? n_rows : 1, sizeof *t->line);
    if (!t->line) {
        free(t);
        return NULL;
    }
    return t;
}

int bl_table_find(const bl_table *t, const char *name)
{
    for (size_t j = 0; j < t->n_cols; j++)
        if (strcmp(t->cols[j].name, name) == 0) return (int)j;
    return -1;
}

static void column_free(bl_column *c, size_t n_rows)
{
    if (c->text)
        for (size_t i = 0; i < n_rows; i++) free(c->text[i]);
    free(c->text);
    free(c->num);
    free(c->name);
    memset(c, 0, sizeof *c);
}

/* Put a filled column into the table, replacing one of the same name. Takes ownership of `c`. */
static bl_status table_put(bl_table *t, bl_column *c, bl_error *err)
{
    int j = bl_table_find(t, c->name);
    if (j >= 0) {
        column_free(&t->cols[j], t->n_rows);
        t->cols[j] = *c;
        return BL_OK;
    }
    bl_column *cols = realloc(t->cols, (t->n_cols + 1) * sizeof *cols);
    if (!cols) {
        column_free(c, t->n_rows);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory adding a table column");
    }
    t->cols = cols;
    t->cols[t->n_cols++] = *c;
    return BL_OK;
}

bl_status bl_table_add_numeric(bl_table *t, const char *name, const double *values, bl_error *err)
{
    size_t n = t->n_rows ? t->n_rows : 1;
    bl_column c = {bl_strdup(name), 1, malloc(n * sizeof(double)), calloc(n, sizeof(char *))};
    if (!c.name || !c.num || !c.text) goto nomem;
    for (size_t i = 0; i < t->n_rows; i++) {
        c.num[i] = values[i];
        if (isnan(values[i])) continue;
        char buf[40];
        snprintf(buf, sizeof buf, "%.17g", values[i]);
        if (!(c.text[i] = bl_strdup(buf))) goto nomem;
    }
    return table_put(t, &c, err);
nomem:
    column_free(&c, t->n_rows);
    return bl_error_set(err, BL_ERR_NOMEM, "out of memory adding column %s", name);
}

bl_status bl_table_add_text(bl_table *t, const char *name, const char *const *values, bl_error *err)
{
    size_t n = t->n_rows ? t->n_rows : 1;
    bl_column c = {bl_strdup(name), 0, malloc(n * sizeof(double)), calloc(n, sizeof(char *))};
    if (!c.name || !c.num || !c.text) goto nomem;
    for (size_t i = 0; i < t->n_rows; i++) {
        c.num[i] = NAN;
        if (values[i] && !(c.text[i] = bl_strdup(values[i]))) goto nomem;
    }
    return table_put(t, &c, err);
nomem:
    column_free(&c, t->n_rows);
    return bl_error_set(err, BL_ERR_NOMEM, "out of memory adding column %s", name);
}

void bl_table_destroy(bl_table *t)
{
    if (!t) return;
    for (size_t j = 0; j < t->n_cols; j++) column_free(&t->cols[j], t->n_rows);
    free(t->cols);
    free(t->line);
    free(t->path);
    free(t);
}

/* ---- CSV/TSV reading ----
 * RFC 4180 quoting (a quoted field may hold the delimiter, doubled quotes and line breaks), LF or
 * CRLF line ends, an optional UTF-8 byte-order mark, tab or comma chosen from the header line.
 * Missing cells: empty, "NA" and the BIDS "n/a" (BIDS specification, Common principles: tabular files). */

typedef struct {
    char **cells;
    size_t n, cap;
    size_t *col;   /* 1-based character column where each cell starts */
} row_buf;

static int is_missing(const char *s)
{
    return s[0] == '\0' || strcmp(s, "NA") == 0 || strcmp(s, "n/a") == 0;
}

static int row_push(row_buf *r, const char *s, size_t len, size_t col)
{
    if (r->n == r->cap) {
        size_t cap = r->cap ? 2 * r->cap : 16;
        char **c = realloc(r->cells, cap * sizeof *c);
        if (!c) return 0;
        r->cells = c;
        size_t *cc = realloc(r->col, cap * sizeof *cc);
        if (!cc) return 0;
        r->col = cc;
        r->cap = cap;
    }
    char *d = malloc(len + 1);
    if (!d) return 0;
    if (len) memcpy(d, s, len); /* s may be NULL for an empty quoted field */
    d[len] = '\0';
    r->col[r->n] = col;
    r->cells[r->n++] = d;
    return 1;
}

static void row_clear(row_buf *r)
{
    for (size_t i = 0; i < r->n; i++) free(r->cells[i]);
    r->n = 0;
}

/* Read one record starting at *pos. Returns 1 with a record, 0 at end of data, -1 on error. */
static int read_record(const char *d, size_t size, size_t *pos, size_t *line, char delim, row_buf *r,
                       char **scratch, size_t *scratch_cap, const char *name, bl_error *err, int *nomem)
{
    size_t p = *pos;
    if (p >= size) return 0;
    size_t line_start = p;
    size_t rec_line = *line;
    for (;;) {
        size_t len = 0;
        size_t col = p - line_start + 1;
        if (p < size && d[p] == '"') {
            size_t qline = *line, qcol = col;
            p++;
            for (;;) {
                if (p >= size) {
                    bl_error_set(err, BL_ERR_INPUT, "%s:%zu:%zu: quoted field is never closed", name, qline, qcol);
                    return -1;
                }
                char ch = d[p];
                if (ch == '"') {
                    if (p + 1 < size && d[p + 1] == '"') {
                        p += 2;
                        ch = '"';
                    } else {
                        p++;
                        break;
                    }
                } else {
                    if (ch == '\n') {
                        (*line)++;
                        line_start = p + 1;
                    }
                    p++;
                }
                if (len + 1 >= *scratch_cap) {
                    size_t cap = *scratch_cap ? 2 * *scratch_cap : 256;
                    char *s = realloc(*scratch, cap);
                    if (!s) {
                        *nomem = 1;
                        return -1;
                    }
                    *scratch = s;
                    *scratch_cap = cap;
                }
                (*scratch)[len++] = ch;
            }
            if (p < size && d[p] != delim && d[p] != '\n' && d[p] != '\r') {
                bl_error_set(err, BL_ERR_INPUT, "%s:%zu:%zu: unexpected text after a closing quote", name, *line,
                             p - line_start + 1);
                return -1;
            }
            if (!row_push(r, *scratch, len, qcol)) {
                *nomem = 1;
                return -1;
            }
        } else {
            size_t start = p;
            while (p < size && d[p] != delim && d[p] != '\n' && d[p] != '\r') p++;
            if (!row_push(r, d + start, p - start, col)) {
                *nomem = 1;
                return -1;
            }
        }
        if (p < size && d[p] == delim) {
            p++;
            continue;
        }
        if (p < size && d[p] == '\r') p++;
        if (p < size && d[p] == '\n') p++;
        (*line)++;
        break;
    }
    (void)rec_line;
    *pos = p;
    return 1;
}

static int parse_number(const char *s, double *out)
{
    while (*s == ' ') s++;
    if (!*s) return 0;
    char *end;
    double x = strtod(s, &end);
    while (*end == ' ') end++;
    if (*end != '\0' || !isfinite(x)) return 0;
    /* strtod accepts "nan", "inf", hex: only plain decimals count as numbers here */
    for (const char *p = s; p < end; p++)
        if (*p == 'x' || *p == 'X' || *p == 'n' || *p == 'N' || *p == 'i' || *p == 'I') return 0;
    *out = x;
    return 1;
}

/* Offset of the first byte that does not start a well-formed UTF-8 sequence (RFC 3629 section 4:
 * no overlong forms, no surrogates, nothing above U+10FFFF), or size when the text is valid. */
static size_t utf8_invalid_at(const unsigned char *d, size_t size)
{
    size_t i = 0;
    while (i < size) {
        unsigned char c = d[i];
        if (c < 0x80) {
            i++;
            continue;
        }
        size_t need;
        unsigned char lo = 0x80, hi = 0xBF; /* allowed range of the second byte */
        if (c >= 0xC2 && c <= 0xDF) need = 1;
        else if (c >= 0xE0 && c <= 0xEF) {
            need = 2;
            if (c == 0xE0) lo = 0xA0;
            if (c == 0xED) hi = 0x9F;
        } else if (c >= 0xF0 && c <= 0xF4) {
            need = 3;
            if (c == 0xF0) lo = 0x90;
            if (c == 0xF4) hi = 0x8F;
        } else
            return i;
        if (i + need >= size) return i; /* the sequence is cut off by the end of the file */
        if (d[i + 1] < lo || d[i + 1] > hi) return i;
        for (size_t k = 2; k <= need; k++)
            if ((d[i + k] & 0xC0) != 0x80) return i;
        i += need + 1;
    }
    return size;
}

bl_status bl_table_parse(const char *data, size_t size, const char *name, bl_table **out, bl_error *err)
{
    *out = NULL;
    size_t pos = 0, line = 1;
    if (size >= 3 && (unsigned char)data[0] == 0xEF && (unsigned char)data[1] == 0xBB &&
        (unsigned char)data[2] == 0xBF)
        pos = 3;
    if (memchr(data, '\0', size))
        return bl_error_set(err, BL_ERR_INPUT, "%s: not a text table (contains a NUL byte)", name);
    /* Levels and IDs are copied into JSON and CSV outputs: refuse bytes that are not UTF-8 here, where
     * the file and position are known. */
    size_t bad = utf8_invalid_at((const unsigned char *)data, size);
    if (bad < size) {
        size_t bl = 1, bc = 1;
        for (size_t k = 0; k < bad; k++) {
            if (data[k] == '\n') {
                bl++;
                bc = 1;
            } else {
                bc++;
            }
        }
        return bl_error_set(err, BL_ERR_INPUT,
                            "%s:%zu:%zu: byte \\x%02X is not UTF-8 text; save the table as UTF-8 (docs/study-file.md)",
                            name, bl, bc, (unsigned)(unsigned char)data[bad]);
    }
    /* skip blank lines before the header */
    while (pos < size && (data[pos] == '\n' || data[pos] == '\r')) {
        if (data[pos] == '\n') line++;
        pos++;
    }
    if (pos >= size) return bl_error_set(err, BL_ERR_INPUT, "%s: the table is empty (no header row)", name);
    char delim = ',';
    for (size_t p = pos; p < size && data[p] != '\n'; p++)
        if (data[p] == '\t') {
            delim = '\t';
            break;
        }

    bl_status st = BL_OK;
    row_buf r = {0};
    char *scratch = NULL;
    size_t scratch_cap = 0;
    int nomem = 0;
    bl_table *t = NULL;
    char **names = NULL;
    size_t n_cols = 0;
    /* cells stored row-major while reading, then moved into columns */
    char **cells = NULL;
    size_t n_rows = 0, cap_rows = 0;
    size_t *lines = NULL;

    size_t header_line = line;
    if (read_record(data, size, &pos, &line, delim, &r, &scratch, &scratch_cap, name, err, &nomem) < 0) goto fail;
    n_cols = r.n;
    for (size_t j = 0; j < n_cols; j++) {
        char *c = r.cells[j];
        size_t l = strlen(c);
        while (l && (c[l - 1] == ' ')) c[--l] = '\0';
        if (!c[0]) {
            st = bl_error_set(err, BL_ERR_INPUT, "%s:%zu:%zu: header column %zu has no name", name, header_line,
                              r.col[j], j + 1);
            goto fail_set;
        }
        for (size_t k = 0; k < j; k++)
            if (strcmp(r.cells[k], c) == 0) {
                st = bl_error_set(err, BL_ERR_INPUT, "%s:%zu:%zu: column name \"%s\" appears twice in the header",
                                  name, header_line, r.col[j], c);
                goto fail_set;
            }
    }
    names = r.cells;
    r.cells = NULL;
    free(r.col);
    r.col = NULL;
    r.n = r.cap = 0;

    for (;;) {
        /* skip blank lines */
        while (pos < size && (data[pos] == '\n' || data[pos] == '\r')) {
            if (data[pos] == '\n') line++;
            pos++;
        }
        size_t rec_line = line;
        int got = read_record(data, size, &pos, &line, delim, &r, &scratch, &scratch_cap, name, err, &nomem);
        if (got < 0) goto fail;
        if (got == 0) break;
        if (r.n != n_cols) {
            st = bl_error_set(err, BL_ERR_INPUT, "%s:%zu: expected %zu fields (as in the header), found %zu", name,
                              rec_line, n_cols, r.n);
            goto fail_set;
        }
        if (n_rows == cap_rows) {
            cap_rows = cap_rows ? 2 * cap_rows : 256;
            char **nc = realloc(cells, cap_rows * n_cols * sizeof *nc);
            size_t *nl = nc ? realloc(lines, cap_rows * sizeof *nl) : NULL;
            if (nc) cells = nc;
            if (!nc || !nl) {
                nomem = 1;
                goto fail;
            }
            lines = nl;
        }
        for (size_t j = 0; j < n_cols; j++) {
            char *c = r.cells[j];
            if (is_missing(c)) {
                free(c);
                c = NULL;
            }
            cells[n_rows * n_cols + j] = c;
        }
        lines[n_rows++] = rec_line;
        r.n = 0;
    }

    if (!(t = bl_table_create(n_rows))) {
        nomem = 1;
        goto fail;
    }
    if (!(t->path = bl_strdup(name)) || !(t->cols = calloc(n_cols ? n_cols : 1, sizeof *t->cols))) {
        nomem = 1;
        goto fail;
    }
    for (size_t i = 0; i < n_rows; i++) t->line[i] = lines[i];
    for (size_t j = 0; j < n_cols; j++) {
        bl_column *c = &t->cols[j];
        t->n_cols = j + 1;
        c->name = names[j];
        names[j] = NULL;
        c->num = malloc((n_rows ? n_rows : 1) * sizeof *c->num);
        c->text = calloc(n_rows ? n_rows : 1, sizeof *c->text);
        if (!c->num || !c->text) {
            nomem = 1;
            goto fail;
        }
        c->numeric = 1;
        size_t present = 0;
        for (size_t i = 0; i < n_rows; i++) {
            c->text[i] = cells[i * n_cols + j];
            cells[i * n_cols + j] = NULL;
            c->num[i] = NAN;
            if (!c->text[i]) continue;
            present++;
            if (!parse_number(c->text[i], &c->num[i])) c->numeric = 0;
        }
        if (!c->numeric)
            for (size_t i = 0; i < n_rows; i++) c->num[i] = NAN;
        if (present == 0) c->numeric = 0;
    }
    free(names);
    free(cells);
    free(lines);
    free(scratch);
    free(r.cells);
    free(r.col);
    *out = t;
    return BL_OK;

fail:
    if (nomem) st = bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory reading the table", name);
    else st = err ? err->status : BL_ERR_INPUT;
fail_set:
    row_clear(&r);
    free(r.cells);
    free(r.col);
    free(scratch);
    if (names)
        for (size_t j = 0; j < n_cols; j++) free(names[j]);
    free(names);
    if (cells)
        for (size_t k = 0; k < n_rows * n_cols; k++) free(cells[k]);
    free(cells);
    free(lines);
    bl_table_destroy(t);
    return st ? st : BL_ERR_INPUT;
}

bl_status bl_table_read(const char *path, bl_table **out, bl_error *err)
{
    *out = NULL;
    FILE *f = fopen(path, "rb");
    if (!f) return bl_error_set(err, bl_status_from_errno(errno), "%s: cannot open the table: %s", path, strerror(errno));
    char *buf = NULL;
    size_t len = 0, cap = 0;
    for (;;) {
        if (len + 65536 > cap) {
            cap = cap ? 2 * cap : 131072;
            char *nb = realloc(buf, cap);
            if (!nb) {
                free(buf);
                fclose(f);
                return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory reading the table", path);
            }
            buf = nb;
        }
        size_t got = fread(buf + len, 1, 65536, f);
        len += got;
        if (got < 65536) break;
    }
    int rerr = ferror(f), rerrno = errno;
    fclose(f);
    if (rerr) {
        free(buf);
        return bl_error_set(err, bl_status_from_errno(rerrno), "%s: cannot read the table: %s", path,
                            rerrno == EISDIR ? "it is a folder" : strerror(rerrno));
    }
    bl_status st = bl_table_parse(buf ? buf : "", len, path, out, err);
    free(buf);
    return st;
}
