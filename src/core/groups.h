/* Private: numbering the distinct values of a column in order of first appearance, in O(n log n)
 * time and O(n) memory (a sort of (key, position) pairs; ties broken by position, so the order is
 * total and the numbering does not depend on the sort's stability). */
#ifndef BL_GROUPS_H
#define BL_GROUPS_H

#include "bandlink/status.h"

#include <stddef.h>

/* id[i] = number of the distinct string keys[i] (NULL is a value of its own), numbered 0, 1, ... in
 * order of first appearance; *n_groups = number of distinct values. `what` names the data in the
 * out-of-memory message. */
bl_status bl_group_strings(const char *const *keys, size_t n, size_t *id, size_t *n_groups, const char *what,
                           bl_error *err);

/* The same for pairs (a[i], b[i]). */
bl_status bl_group_pairs(const size_t *a, const size_t *b, size_t n, size_t *id, size_t *n_groups, const char *what,
                         bl_error *err);

#endif
