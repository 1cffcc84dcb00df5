/* Screening of the kept trials before fitting (see screen.h and docs/degenerate-data.md). */
#include "fit/screen.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* Below this RT a response is faster than any plausible encoding + motor time (common practice puts the
 * cut-off at 0.1-0.15 s; docs/degenerate-data.md). */
#define BL_FASTEST_PLAUSIBLE_RT 0.1

typedef struct {
    const char *key; /* cell label, shared by the trials of a cell */
    size_t trial;
} cell_entry;

static int cell_entry_cmp(const void *a, const void *b)
{
    const cell_entry *x = a, *y = b;
    int c = strcmp(x->key, y->key);
    if (c) return c;
    return (x->trial > y->trial) - (x->trial < y->trial);
}

/* Append "name=value" of column `col` of trial i to buf. */
static void label_append(char *buf, size_t size, const bl_table *tab, int col, size_t i)
{
    size_t len = strlen(buf);
    const char *v = tab->cols[col].text[i] ? tab->cols[col].text[i] : "NA";
    snprintf(buf + len, size - len, "%s%s=%s", len ? ", " : "", tab->cols[col].name, v);
}

/* Trials built by hand (library users, tests) may carry no exclusion list. */
static int excluded(const bl_trials *t, size_t i) { return t->excluded && t->excluded[i]; }

static int already_warned(char **seen, size_t n_seen, const char *label)
{
    for (size_t k = 0; k < n_seen; k++)
        if (!strcmp(seen[k], label)) return 1;
    return 0;
}

bl_status bl_screen_trials(const bl_study *study, const bl_trials *t, const size_t *models, size_t n_models,
                           bl_warnings *warn, bl_error *err)
{
    bl_status st = BL_OK;
    size_t n = t->n;
    char **labels = calloc(n ? n : 1, sizeof *labels);
    cell_entry *cells = malloc((n ? n : 1) * sizeof *cells);
    char **seen = calloc(n ? n : 1, sizeof *seen);
    size_t n_seen = 0;
    if (!labels || !cells || !seen) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory screening the trials");
        goto done;
    }

    /* Fast RTs: nondecision cannot exceed the fastest kept RT, so they pull it toward 0. */
    size_t n_fast = 0;
    double fastest = INFINITY;
    for (size_t i = 0; i < n; i++) {
        if (excluded(t, i)) continue;
        if (t->rt[i] < BL_FASTEST_PLAUSIBLE_RT) n_fast++;
        if (t->rt[i] < fastest) fastest = t->rt[i];
    }
    if (n_fast)
        bl_warnings_add(
            warn,
            "%zu kept trials are faster than %g s (fastest %.4g s); nondecision cannot exceed the fastest RT, "
            "so they pull it toward 0 (consider trials.keep.rt_min)",
            n_fast, BL_FASTEST_PLAUSIBLE_RT, fastest);

    /* Separate fits with one participant: no between-participant summary is possible. */
    if (study->fit.participants == BL_PARTICIPANTS_SEPARATE) {
        size_t with_trials = 0;
        char *has = calloc(t->n_participants ? t->n_participants : 1, 1);
        if (!has) {
            st = bl_error_set(err, BL_ERR_NOMEM, "out of memory screening the trials");
            goto done;
        }
        for (size_t i = 0; i < n; i++)
            if (!excluded(t, i) && !has[t->participant[i]]) {
                has[t->participant[i]] = 1;
                with_trials++;
            }
        free(has);
        if (with_trials == 1)
            bl_warnings_add(warn, "fit.participants is separate but only one participant has kept trials: the group "
                                  "summary repeats that participant's estimates and has no between-participant test");
    }

    int participant_col = study->trials.participant ? bl_table_find(t->table, study->trials.participant) : -1;
    for (size_t q = 0; q < n_models; q++) {
        const bl_model_spec *m = &study->models[models[q]];
        /* Cells: every level combination of the threshold and drift intercept columns (and the participant
         * when participants are fitted separately). Unknown columns are model.c's to report. */
        int cols[64];
        size_t n_cols = 0;
        if (study->fit.participants == BL_PARTICIPANTS_SEPARATE && participant_col >= 0)
            cols[n_cols++] = participant_col;
        const bl_param_spec *ps[2] = {&m->param[BL_THRESHOLD], &m->param[BL_DRIFT]};
        for (int p = 0; p < 2; p++)
            for (size_t k = 0; k < ps[p]->n_per && n_cols < 64; k++) {
                int c = t->table ? bl_table_find(t->table, ps[p]->per[k]) : -1;
                int dup = c < 0;
                for (size_t j = 0; j < n_cols && !dup; j++) dup = cols[j] == c;
                if (!dup) cols[n_cols++] = c;
            }
        size_t n_kept = 0;
        for (size_t i = 0; i < n; i++) {
            if (excluded(t, i)) continue;
            char buf[1024] = "";
            for (size_t j = 0; j < n_cols; j++) label_append(buf, sizeof buf, t->table, cols[j], i);
            if (!buf[0]) snprintf(buf, sizeof buf, "all kept trials");
            free(labels[i]);
            if (!(labels[i] = malloc(strlen(buf) + 1))) {
                st = bl_error_set(err, BL_ERR_NOMEM, "out of memory screening the trials");
                goto done;
            }
            strcpy(labels[i], buf);
            cells[n_kept].key = labels[i];
            cells[n_kept++].trial = i;
        }
        qsort(cells, n_kept, sizeof *cells, cell_entry_cmp);
        for (size_t a = 0; a < n_kept;) {
            size_t b = a, n_upper = 0;
            double lo = INFINITY, hi = -INFINITY;
            while (b < n_kept && !strcmp(cells[b].key, cells[a].key)) {
                size_t i = cells[b].trial;
                n_upper += t->upper[i] != 0;
                if (t->rt[i] < lo) lo = t->rt[i];
                if (t->rt[i] > hi) hi = t->rt[i];
                b++;
            }
            size_t count = b - a;
            if (count >= 2 && lo == hi) {
                st = bl_error_set(
                    err, BL_ERR_MODEL,
                    "model '%s': all %zu RTs of cell %s are identical (%.6g s); threshold and drift cannot "
                    "be estimated from them (the likelihood grows without bound as the threshold shrinks)",
                    m->name, count, cells[a].key, lo);
                goto done;
            }
            if (count >= 2 && (n_upper == 0 || n_upper == count) && !already_warned(seen, n_seen, cells[a].key)) {
                bl_warnings_add(warn,
                                "cell %s: all %zu responses at the %s boundary; its drift is estimated from the "
                                "RT distribution alone",
                                cells[a].key, count, n_upper ? "upper" : "lower");
                if ((seen[n_seen] = malloc(strlen(cells[a].key) + 1))) strcpy(seen[n_seen++], cells[a].key);
            }
            a = b;
        }
    }
done:
    if (labels)
        for (size_t i = 0; i < n; i++) free(labels[i]);
    if (seen)
        for (size_t k = 0; k < n_seen; k++) free(seen[k]);
    free(labels);
    free(seen);
    free(cells);
    return st;
}
