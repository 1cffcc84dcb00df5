/* Column-oriented trial tables: building, lookup, destruction. (CSV/TSV reading: bl_table_read/parse.) */
#include "design/table.h"
#include "core/strutil.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

bl_status bl_table_create(size_t n_rows, bl_table **out, bl_error *err)
{
    bl_table *t = calloc(1, sizeof *t);
    if (t) t->line = calloc(n_rows ? n_rows : 1, sizeof *t->line);
    if (!t || !t->line) {
        free(t);
        *out = NULL;
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory for a table of %zu rows", n_rows);
    }
    t->n_rows = n_rows;
    *out = t;
    return BL_OK;
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
    size_t *col; /* 1-based character column where each cell starts */
} row_buf;

static int is_missing(const char *s) { return s[0] == '\0' || strcmp(s, "NA") == 0 || strcmp(s, "n/a") == 0; }

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

/* The state of one table being read: the input, the record being read, and the cells read so far
 * (row-major, moved into columns at the end). */
typedef struct {
    const char *data, *name;
    size_t size, pos, line;
    char delim;
    row_buf r;
    char *scratch; /* a quoted field as unquoted */
    size_t scratch_cap;
    char **names; /* header */
    size_t n_cols;
    char **cells;
    size_t n_rows, cap_rows;
    size_t *lines; /* source line of each row */
} table_reader;

static bl_status reader_nomem(const table_reader *tr, bl_error *err)
{
    return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory reading the table", tr->name);
}

static void reader_free(table_reader *tr)
{
    row_clear(&tr->r);
    free(tr->r.cells);
    free(tr->r.col);
    free(tr->scratch);
    if (tr->names)
        for (size_t j = 0; j < tr->n_cols; j++) free(tr->names[j]);
    free(tr->names);
    if (tr->cells)
        for (size_t k = 0; k < tr->n_rows * tr->n_cols; k++) free(tr->cells[k]);
    free(tr->cells);
    free(tr->lines);
}

/* One quoted field starting at the quote at *p, unquoted into the scratch buffer and pushed. */
static bl_status read_quoted(table_reader *tr, size_t *p, size_t *line_start, size_t col, bl_error *err)
{
    const char *d = tr->data;
    size_t size = tr->size, qline = tr->line, len = 0;
    (*p)++;
    for (;;) {
        if (*p >= size)
            return bl_error_set(err, BL_ERR_INPUT, "%s:%zu:%zu: quoted field is never closed", tr->name, qline, col);
        char ch = d[*p];
        if (ch == '"') {
            if (*p + 1 < size && d[*p + 1] == '"') {
                *p += 2;
            } else {
                (*p)++;
                break;
            }
        } else {
            if (ch == '\n') {
                tr->line++;
                *line_start = *p + 1;
            }
            (*p)++;
        }
        if (len + 1 >= tr->scratch_cap) {
            size_t cap = tr->scratch_cap ? 2 * tr->scratch_cap : 256;
            char *s = realloc(tr->scratch, cap);
            if (!s) return reader_nomem(tr, err);
            tr->scratch = s;
            tr->scratch_cap = cap;
        }
        tr->scratch[len++] = ch;
    }
    if (*p < size && d[*p] != tr->delim && d[*p] != '\n' && d[*p] != '\r')
        return bl_error_set(err, BL_ERR_INPUT, "%s:%zu:%zu: unexpected text after a closing quote", tr->name, tr->line,
                            *p - *line_start + 1);
    if (!row_push(&tr->r, tr->scratch, len, col)) return reader_nomem(tr, err);
    return BL_OK;
}

/* Read one record at tr->pos into tr->r: *got = 1 with a record, 0 at the end of the data. */
static bl_status read_record(table_reader *tr, int *got, bl_error *err)
{
    const char *d = tr->data;
    size_t size = tr->size, p = tr->pos;
    *got = 0;
    if (p >= size) return BL_OK;
    size_t line_start = p;
    for (;;) {
        size_t col = p - line_start + 1;
        if (p < size && d[p] == '"') {
            bl_status st = read_quoted(tr, &p, &line_start, col, err);
            if (st) return st;
        } else {
            size_t start = p;
            while (p < size && d[p] != tr->delim && d[p] != '\n' && d[p] != '\r') p++;
            if (!row_push(&tr->r, d + start, p - start, col)) return reader_nomem(tr, err);
        }
        if (p < size && d[p] == tr->delim) {
            p++;
            continue;
        }
        if (p < size && d[p] == '\r') p++;
        if (p < size && d[p] == '\n') p++;
        tr->line++;
        break;
    }
    tr->pos = p;
    *got = 1;
    return BL_OK;
}

static void skip_blank_lines(table_reader *tr)
{
    while (tr->pos < tr->size && (tr->data[tr->pos] == '\n' || tr->data[tr->pos] == '\r')) {
        if (tr->data[tr->pos] == '\n') tr->line++;
        tr->pos++;
    }
}

/* The header: named, distinct columns (trailing spaces dropped). The delimiter is a tab when the
 * header line has one, else a comma. */
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
        } else return i;
        if (i + need >= size) return i; /* the sequence is cut off by the end of the file */
        if (d[i + 1] < lo || d[i + 1] > hi) return i;
        for (size_t k = 2; k <= need; k++)
            if ((d[i + k] & 0xC0) != 0x80) return i;
        i += need + 1;
    }
    return size;
}

/* Levels and IDs are copied into JSON and CSV outputs: refuse bytes that are not UTF-8 here, where the file
 * and position are known. */
static bl_status check_utf8(const table_reader *tr, bl_error *err)
{
    size_t bad = utf8_invalid_at((const unsigned char *)tr->data, tr->size);
    if (bad >= tr->size) return BL_OK;
    size_t bl = 1, bc = 1;
    for (size_t k = 0; k < bad; k++) {
        if (tr->data[k] == '\n') {
            bl++;
            bc = 1;
        } else {
            bc++;
        }
    }
    return bl_error_set(err, BL_ERR_INPUT,
                        "%s:%zu:%zu: byte \\x%02X is not UTF-8 text; save the table as UTF-8 "
                        "(docs/study-file.md)",
                        tr->name, bl, bc, (unsigned)(unsigned char)tr->data[bad]);
}

static bl_status read_header(table_reader *tr, bl_error *err)
{
    if (tr->size >= 3 && (unsigned char)tr->data[0] == 0xEF && (unsigned char)tr->data[1] == 0xBB &&
        (unsigned char)tr->data[2] == 0xBF)
        tr->pos = 3;
    if (memchr(tr->data, '\0', tr->size))
        return bl_error_set(err, BL_ERR_INPUT, "%s: not a text table (contains a NUL byte)", tr->name);
    bl_status st = check_utf8(tr, err);
    if (st) return st;
    skip_blank_lines(tr);
    if (tr->pos >= tr->size) return bl_error_set(err, BL_ERR_INPUT, "%s: the table is empty (no header row)", tr->name);
    tr->delim = ',';
    for (size_t p = tr->pos; p < tr->size && tr->data[p] != '\n'; p++)
        if (tr->data[p] == '\t') {
            tr->delim = '\t';
            break;
        }
    size_t header_line = tr->line;
    int got = 0;
    st = read_record(tr, &got, err);
    if (st) return st;
    row_buf *r = &tr->r;
    for (size_t j = 0; j < r->n; j++) {
        char *c = r->cells[j];
        size_t l = strlen(c);
        while (l && (c[l - 1] == ' ')) c[--l] = '\0';
        if (!c[0])
            return bl_error_set(err, BL_ERR_INPUT, "%s:%zu:%zu: header column %zu has no name", tr->name, header_line,
                                r->col[j], j + 1);
        for (size_t k = 0; k < j; k++)
            if (strcmp(r->cells[k], c) == 0)
                return bl_error_set(err, BL_ERR_INPUT, "%s:%zu:%zu: column name \"%s\" appears twice in the header",
                                    tr->name, header_line, r->col[j], c);
    }
    tr->n_cols = r->n;
    tr->names = r->cells;
    r->cells = NULL;
    free(r->col);
    r->col = NULL;
    r->n = r->cap = 0;
    return BL_OK;
}

/* Every record after the header, as many fields as the header; missing cells become NULL. */
static bl_status read_rows(table_reader *tr, bl_error *err)
{
    size_t n_cols = tr->n_cols;
    for (;;) {
        skip_blank_lines(tr);
        size_t rec_line = tr->line;
        int got = 0;
        bl_status st = read_record(tr, &got, err);
        if (st) return st;
        if (!got) return BL_OK;
        if (tr->r.n != n_cols)
            return bl_error_set(err, BL_ERR_INPUT, "%s:%zu: expected %zu fields (as in the header), found %zu",
                                tr->name, rec_line, n_cols, tr->r.n);
        if (tr->n_rows == tr->cap_rows) {
            size_t cap = tr->cap_rows ? 2 * tr->cap_rows : 256;
            char **nc = realloc(tr->cells, cap * n_cols * sizeof *nc);
            if (!nc) return reader_nomem(tr, err);
            tr->cells = nc;
            size_t *nl = realloc(tr->lines, cap * sizeof *nl);
            if (!nl) return reader_nomem(tr, err);
            tr->lines = nl;
            tr->cap_rows = cap;
        }
        for (size_t j = 0; j < n_cols; j++) {
            char *c = tr->r.cells[j];
            if (is_missing(c)) {
                free(c);
                c = NULL;
            }
            tr->cells[tr->n_rows * n_cols + j] = c;
        }
        tr->lines[tr->n_rows++] = rec_line;
        tr->r.n = 0;
    }
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

/* The cells read, moved into columns; a column is numeric when every present cell is a number. */
static bl_status make_columns(table_reader *tr, bl_table **out, bl_error *err)
{
    size_t n_rows = tr->n_rows, n_cols = tr->n_cols;
    bl_table *t = NULL;
    if (bl_table_create(n_rows, &t, NULL) || !(t->path = bl_strdup(tr->name)) ||
        !(t->cols = calloc(n_cols ? n_cols : 1, sizeof *t->cols)))
        goto nomem;
    for (size_t i = 0; i < n_rows; i++) t->line[i] = tr->lines[i];
    for (size_t j = 0; j < n_cols; j++) {
        bl_column *c = &t->cols[j];
        t->n_cols = j + 1;
        c->name = tr->names[j];
        tr->names[j] = NULL;
        c->num = malloc((n_rows ? n_rows : 1) * sizeof *c->num);
        c->text = calloc(n_rows ? n_rows : 1, sizeof *c->text);
        if (!c->num || !c->text) goto nomem;
        c->numeric = 1;
        size_t present = 0;
        for (size_t i = 0; i < n_rows; i++) {
            c->text[i] = tr->cells[i * n_cols + j];
            tr->cells[i * n_cols + j] = NULL;
            c->num[i] = NAN;
            if (!c->text[i]) continue;
            present++;
            if (!parse_number(c->text[i], &c->num[i])) c->numeric = 0;
        }
        if (!c->numeric)
            for (size_t i = 0; i < n_rows; i++) c->num[i] = NAN;
        if (present == 0) c->numeric = 0;
    }
    *out = t;
    return BL_OK;
nomem:
    bl_table_destroy(t);
    return reader_nomem(tr, err);
}

bl_status bl_table_parse(const char *data, size_t size, const char *name, bl_table **out, bl_error *err)
{
    *out = NULL;
    table_reader tr = {.data = data, .name = name, .size = size, .line = 1};
    bl_status st = read_header(&tr, err);
    if (!st) st = read_rows(&tr, err);
    if (!st) st = make_columns(&tr, out, err);
    reader_free(&tr);
    return st;
}

bl_status bl_table_read(const char *path, bl_table **out, bl_error *err)
{
    *out = NULL;
    FILE *f = fopen(path, "rb");
    if (!f)
        return bl_error_set(err, bl_status_from_errno(errno), "%s: cannot open the table: %s", path, strerror(errno));
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
