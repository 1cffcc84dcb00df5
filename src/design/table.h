/* A column-oriented table of trials, as read from a CSV/TSV file and extended by later stages
 * (band-power regressors). Every column keeps its raw text; a column is numeric when every
 * non-missing cell parses as a finite number. Missing cells ("", "NA", "n/a") are NAN / NULL text.
 */
#ifndef BL_TABLE_H
#define BL_TABLE_H

#include "bandlink/status.h"

#include <stddef.h>

typedef struct {
    char *name;
    int numeric; /* 1 when every non-missing cell is a finite number */
    double *num; /* n_rows numbers (NAN for missing or non-numeric); always allocated */
    char **text; /* n_rows strings (NULL for missing); always allocated */
} bl_column;

typedef struct {
    char *path; /* file it was read from, for messages; may be NULL for built tables */
    size_t n_rows, n_cols;
    bl_column *cols;
    size_t *line; /* 1-based source line of each row (0 for built tables) */
} bl_table;

/* Read a CSV or TSV file (delimiter detected from the header: tab if present, else comma).
 * Handles quoted fields, doubled quotes, CRLF, a UTF-8 BOM, and BIDS "n/a". Errors name file:line:column. */
bl_status bl_table_read(const char *path, bl_table **out, bl_error *err);
/* Parse from memory (the same rules; `name` is used in messages). */
bl_status bl_table_parse(const char *data, size_t size, const char *name, bl_table **out, bl_error *err);
/* An empty table with n_rows rows and no columns (BL_ERR_NOMEM when memory ran out, *out NULL). */
bl_status bl_table_create(size_t n_rows, bl_table **out, bl_error *err);
/* Column index by name, or -1. */
int bl_table_find(const bl_table *t, const char *name);
/* Append a numeric column (values copied; text made with %.17g, NULL for NAN). Replaces a column
 * of the same name. */
bl_status bl_table_add_numeric(bl_table *t, const char *name, const double *values, bl_error *err);
/* Append a text column (strings copied; NULL = missing). */
bl_status bl_table_add_text(bl_table *t, const char *name, const char *const *values, bl_error *err);
void bl_table_destroy(bl_table *t);

#endif
