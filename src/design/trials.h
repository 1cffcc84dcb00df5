/* The trial table coded for analysis: RT in seconds, choice as upper/lower boundary,
 * stimulus sign, participant index, and the exclusion reason of each trial. */
#ifndef BL_TRIALS_H
#define BL_TRIALS_H

#include "bandlink/status.h"
#include "design/table.h"

struct bl_study;
struct bl_trial_sources;

typedef struct bl_trials {
    bl_table *table;     /* every column of the trial file, plus regressors added later */
    size_t n;            /* = table->n_rows */
    double *rt;          /* seconds (NAN when the row is excluded for a missing RT) */
    int *upper;          /* 1 = upper boundary, 0 = lower */
    int *drift_sign;     /* +1/-1 with stimulus coding, +1 with accuracy coding */
    size_t *participant; /* index into participants[] */
    char **participants; /* participant labels in order of first appearance */
    size_t n_participants;
    char **trial_label;    /* the table's own `trial` value, or the 1-based row number within participant */
    const char **excluded; /* NULL = kept, else a static reason string ("rt_min", "artifact: flat", ...) */
    size_t n_kept;
    struct bl_trial_sources *files; /* the files a pattern or a BIDS tree gave (design/trial_files.h), or NULL */
} bl_trials;

/* Read and code the trial table of a study. Exclusions (keep rules) are applied as reasons, never
 * by dropping rows. */
bl_status bl_trials_load(const struct bl_study *study, bl_trials **out, bl_warnings *warn, bl_error *err);
/* Mark trial i as excluded with a reason (a string that outlives the trials, e.g. a literal).
 * Keeps n_kept up to date; the first reason wins. */
void bl_trials_exclude(bl_trials *t, size_t i, const char *reason);
void bl_trials_destroy(bl_trials *t);

/* Exclusion reasons with their counts, in order of first appearance: *n distinct reasons in *out
 * (caller frees the array; the reason strings belong to the trials). BL_ERR_NOMEM (*out NULL, *n 0)
 * when memory ran out. */
typedef struct {
    const char *reason;
    size_t count;
} bl_exclusion_count;
bl_status bl_trials_exclusion_counts(const bl_trials *t, bl_exclusion_count **out, size_t *n, bl_error *err);

#endif
