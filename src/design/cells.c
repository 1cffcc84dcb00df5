/* Condition cells shared by goodness of fit and the per-cell spectra of band power. */
#include "design/cells.h"
#include "core/strutil.h"

#include <stdlib.h>
#include <string.h>

static int add_name(const char ***cols, size_t *n, size_t *cap, const char *s)
{
    for (size_t i = 0; i < *n; i++)
        if (strcmp((*cols)[i], s) == 0) return 1;
    if (*n == *cap) {
        size_t nc = *cap ? 2 * *cap : 8;
        const char **v = realloc((void *)*cols, nc * sizeof *v);
        if (!v) return 0;
        *cols = v;
        *cap = nc;
    }
    (*cols)[(*n)++] = s;
    return 1;
}

static int wanted(const bl_model_spec *sp, const char *const *names, size_t n_names)
{
    if (!names) return 1;
    for (size_t i = 0; i < n_names; i++)
        if (strcmp(names[i], sp->name) == 0) return 1;
    return 0;
}

bl_status bl_cell_columns(const bl_study *study, const char *const *names, size_t n_names, const char ***cols,
                          size_t *n_cols, bl_error *err)
{
    const char **v = NULL;
    size_t n = 0, cap = 0;
    const char *participant = study->trials.participant;
    /* Models in the order given (goodness walks the fitted models in their order). */
    size_t n_walk = names ? n_names : study->n_models;
    for (size_t w = 0; w < n_walk; w++) {
        const bl_model_spec *sp = NULL;
        if (names) {
            for (size_t i = 0; i < study->n_models && !sp; i++)
                if (wanted(&study->models[i], names + w, 1)) sp = &study->models[i];
        } else {
            sp = &study->models[w];
        }
        if (!sp) continue;
        for (int p = 0; p < BL_NPARAM; p++) {
            const bl_param_spec *ps = &sp->param[p];
            if (ps->is_fixed) continue;
            for (size_t i = 0; i < ps->n_per; i++)
                if (strcmp(ps->per[i], participant) != 0 && !add_name(&v, &n, &cap, ps->per[i])) goto nomem;
            for (size_t s = 0; s < ps->n_slopes; s++)
                for (size_t i = 0; i < ps->slopes[s].n_by; i++)
                    if (strcmp(ps->slopes[s].by[i], participant) != 0 && !add_name(&v, &n, &cap, ps->slopes[s].by[i]))
                        goto nomem;
        }
    }
    if (study->trials.stimulus && !add_name(&v, &n, &cap, study->trials.stimulus)) goto nomem;
    *cols = v;
    *n_cols = n;
    return BL_OK;
nomem:
    free((void *)v);
    return bl_error_set(err, BL_ERR_NOMEM, "out of memory listing the condition cells");
}

char *bl_cell_label(const bl_table *t, const int *cols, size_t ncols, size_t row)
{
    if (ncols == 0) return bl_strdup("all");
    size_t len = 1;
    for (size_t c = 0; c < ncols; c++) {
        const bl_column *col = &t->cols[cols[c]];
        const char *v = col->text[row] ? col->text[row] : "NA";
        len += strlen(col->name) + strlen(v) + 2;
    }
    char *s = malloc(len), *at = s;
    if (!s) return NULL;
    for (size_t c = 0; c < ncols; c++) {
        const bl_column *col = &t->cols[cols[c]];
        const char *v = col->text[row] ? col->text[row] : "NA";
        size_t ln = strlen(col->name), lv = strlen(v);
        if (c) *at++ = ';';
        memcpy(at, col->name, ln);
        at += ln;
        *at++ = '=';
        memcpy(at, v, lv);
        at += lv;
    }
    *at = '\0';
    return s;
}
