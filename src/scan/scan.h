/* `bandlink scan`: where in time and frequency does an oscillation shape the decision (docs/scan.md).
 * The job: the "scan" block → the null model fitted once (scan_stats.h) → multitaper power of every
 * cell for the null fit's trials (scan_power.h), standardised as the study says → score statistics and
 * permutation family-wise error → scan.csv, one heat map per parameter, a summary. */
#ifndef BL_SCAN_H
#define BL_SCAN_H

#include "bandlink/status.h"
#include "design/study.h"
#include "design/trials.h"
#include "scan/scan_spec.h"
#include "scan/scan_stats.h"

#include <stddef.h>

typedef struct {
    int threads; /* <= 0: OpenMP default; results do not depend on it */
    unsigned long seed;
    size_t permutations; /* SIZE_MAX: the scan block's */
    /* Called from the calling thread (may be NULL): what, done, total (0 = unknown). */
    void (*progress)(void *user, const char *detail, size_t done, size_t total);
    void *progress_user;
} bl_scan_options;

/* A cell refitted with the slope in the model: likelihood-ratio test against the null model. */
typedef struct {
    size_t test, cell;   /* cell = f * n_windows + w */
    double lr, df, p;    /* 2 (LL with the slope - LL of the null); df = fitted units (1 pooled) */
    double estimate, se; /* the refitted slope and its Wald SE (pooled only; NAN when separate) */
    int converged;
} bl_scan_refit;

typedef struct bl_scan_result {
    bl_scan_spec *spec;
    bl_scan_stats *stats;
    size_t n_tests;
    int *test_param;
    char **test_level;
    size_t n_trials, n_participants;
    bl_participants_mode mode;
    double null_log_likelihood;
    double fs;
    double seconds_null, seconds_power, seconds_stats;
    size_t n_refits;
    bl_scan_refit *refits;
} bl_scan_result;

bl_status bl_scan_run(const bl_study *study, const bl_trials *trials, const bl_scan_options *opt, bl_scan_result **out,
                      bl_warnings *warn, bl_error *err);
void bl_scan_result_destroy(bl_scan_result *r);

/* scan.csv: frequency, window_from, window_to, parameter, level, statistic, estimate, z, p, p_familywise,
 * cluster; NA for what could not be computed. Atomic. */
bl_status bl_scan_write_csv(const bl_scan_result *r, const char *path, bl_error *err);
/* scan_refits.csv (only when the block asks for refits): frequency, window_from, window_to, parameter, level,
 * statistic (score), lr_statistic, df, p_lr, estimate, se. Atomic. */
bl_status bl_scan_write_refits(const bl_scan_result *r, const char *path, bl_error *err);
/* One heat map per tested parameter (and level): scan_<parameter>[_<level>].svg in dir. */
bl_status bl_scan_write_figures(const bl_scan_result *r, const char *dir, bl_error *err);
/* scan_report.html in dir, beside the heat maps (written first by bl_scan_write_figures): the caution, the
 * summary, the cells significant after correction, the heat maps inline. */
bl_status bl_scan_write_report(const bl_scan_result *r, const char *study_path, const char *dir, bl_error *err);
/* The summary: grid, permutations, correction, the strongest cells. Caller frees; NULL when memory ran out. */
char *bl_scan_summary(const bl_scan_result *r);

#endif
