/* Numbering distinct values in order of first appearance by sorting (key, position) pairs: O(n log n)
 * instead of comparing each row with every group found so far. */
#include "core/groups.h"

#include <stdlib.h>
#include <string.h>

typedef struct {
    const char *key;
    size_t pos;
} str_item;

typedef struct {
    size_t a, b, pos;
} pair_item;

static int str_cmp(const char *u, const char *v)
{
    if (!u || !v) return (u != NULL) - (v != NULL); /* NULL first */
    return strcmp(u, v);
}

static int str_item_cmp(const void *x, const void *y)
{
    const str_item *p = x, *q = y;
    int c = str_cmp(p->key, q->key);
    if (c) return c;
    return (p->pos > q->pos) - (p->pos < q->pos);
}

static int pair_item_cmp(const void *x, const void *y)
{
    const pair_item *p = x, *q = y;
    if (p->a != q->a) return p->a < q->a ? -1 : 1;
    if (p->b != q->b) return p->b < q->b ? -1 : 1;
    return (p->pos > q->pos) - (p->pos < q->pos);
}

/* Each run of equal keys starts at the key's first appearance (ties were broken by position);
 * number the runs in order of that position. */
static bl_status number_runs(const size_t *first_pos, size_t n_runs, size_t *run_id, const char *what, bl_error *err)
{
    pair_item *p = malloc((n_runs ? n_runs : 1) * sizeof *p);
    if (!p) return bl_error_set(err, BL_ERR_NOMEM, "out of memory numbering %s", what);
    for (size_t r = 0; r < n_runs; r++) p[r] = (pair_item){first_pos[r], 0, r};
    qsort(p, n_runs, sizeof *p, pair_item_cmp);
    for (size_t k = 0; k < n_runs; k++) run_id[p[k].pos] = k;
    free(p);
    return BL_OK;
}

bl_status bl_group_strings(const char *const *keys, size_t n, size_t *id, size_t *n_groups, const char *what,
                           bl_error *err)
{
    *n_groups = 0;
    str_item *it = malloc((n ? n : 1) * sizeof *it);
    size_t *first = calloc(n ? n : 1, sizeof *first), *run_id = malloc((n ? n : 1) * sizeof *run_id);
    size_t *run_of = malloc((n ? n : 1) * sizeof *run_of);
    bl_status st = BL_OK;
    if (!it || !first || !run_id || !run_of) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory numbering %s", what);
        goto done;
    }
    for (size_t i = 0; i < n; i++) it[i] = (str_item){keys[i], i};
    qsort(it, n, sizeof *it, str_item_cmp);
    size_t runs = 0;
    for (size_t k = 0; k < n; k++) {
        if (k == 0 || str_cmp(it[k - 1].key, it[k].key) != 0) first[runs++] = it[k].pos;
        run_of[k] = runs - 1;
    }
    if ((st = number_runs(first, runs, run_id, what, err))) goto done;
    for (size_t k = 0; k < n; k++) id[it[k].pos] = run_id[run_of[k]];
    *n_groups = runs;
done:
    free(it);
    free(first);
    free(run_id);
    free(run_of);
    return st;
}

bl_status bl_group_pairs(const size_t *a, const size_t *b, size_t n, size_t *id, size_t *n_groups, const char *what,
                         bl_error *err)
{
    *n_groups = 0;
    pair_item *it = malloc((n ? n : 1) * sizeof *it);
    size_t *first = calloc(n ? n : 1, sizeof *first), *run_id = malloc((n ? n : 1) * sizeof *run_id);
    size_t *run_of = malloc((n ? n : 1) * sizeof *run_of);
    bl_status st = BL_OK;
    if (!it || !first || !run_id || !run_of) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory numbering %s", what);
        goto done;
    }
    for (size_t i = 0; i < n; i++) it[i] = (pair_item){a[i], b[i], i};
    qsort(it, n, sizeof *it, pair_item_cmp);
    size_t runs = 0;
    for (size_t k = 0; k < n; k++) {
        if (k == 0 || it[k - 1].a != it[k].a || it[k - 1].b != it[k].b) first[runs++] = it[k].pos;
        run_of[k] = runs - 1;
    }
    if ((st = number_runs(first, runs, run_id, what, err))) goto done;
    for (size_t k = 0; k < n; k++) id[it[k].pos] = run_id[run_of[k]];
    *n_groups = runs;
done:
    free(it);
    free(first);
    free(run_id);
    free(run_of);
    return st;
}
