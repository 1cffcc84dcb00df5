/* Column-oriented trial tables: building, lookup, destruction. (CSV/TSV reading: bl_table_read/parse.) */
#include "bandlink/table.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static char *dup_string(const char *s)
{
    if (!s) return NULL;
    size_t n = strlen(s);
    char *d = malloc(n + 1);
    if (d) memcpy(d, s, n + 1);
    return d;
}

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
    bl_column c = {dup_string(name), 1, malloc(n * sizeof(double)), calloc(n, sizeof(char *))};
    if (!c.name || !c.num || !c.text) goto nomem;
    for (size_t i = 0; i < t->n_rows; i++) {
        c.num[i] = values[i];
        if (isnan(values[i])) continue;
        char buf[40];
        snprintf(buf, sizeof buf, "%.17g", values[i]);
        if (!(c.text[i] = dup_string(buf))) goto nomem;
    }
    return table_put(t, &c, err);
nomem:
    column_free(&c, t->n_rows);
    return bl_error_set(err, BL_ERR_NOMEM, "out of memory adding column %s", name);
}

bl_status bl_table_add_text(bl_table *t, const char *name, const char *const *values, bl_error *err)
{
    size_t n = t->n_rows ? t->n_rows : 1;
    bl_column c = {dup_string(name), 0, malloc(n * sizeof(double)), calloc(n, sizeof(char *))};
    if (!c.name || !c.num || !c.text) goto nomem;
    for (size_t i = 0; i < t->n_rows; i++) {
        c.num[i] = NAN;
        if (values[i] && !(c.text[i] = dup_string(values[i]))) goto nomem;
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
