/* Condition cells: the level combinations of the columns that a study's models are split by
 * (`per` and slope `by` columns, and trials.stimulus; never the participant column). Goodness of fit
 * groups trials by them, and band power keeps one mean spectrum per cell for the spectrum figure. */
#ifndef BL_CELLS_H
#define BL_CELLS_H

#include "bandlink/status.h"
#include "design/study.h"
#include "design/table.h"

#include <stddef.h>

/* The distinct cell columns of the named models (all of the study's models when names == NULL), in
 * order of first mention. *cols holds borrowed pointers into the study; caller frees the array. */
bl_status bl_cell_columns(const bl_study *study, const char *const *names, size_t n_names, const char ***cols,
                          size_t *n_cols, bl_error *err);

/* "col=value;col=value" for one row (a missing value shown as NA), or "all" when ncols == 0.
 * Caller frees; NULL when out of memory. */
char *bl_cell_label(const bl_table *t, const int *cols, size_t ncols, size_t row);

#endif
