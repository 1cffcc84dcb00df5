/* Statistics of a scan (docs/scan.md): the null model fitted once, then for every cell x parameter x
 * level the Rao score statistic for a slope = 0 on the cell's power, and family-wise error by the maximum
 * statistic (or the largest cluster mass, Maris & Oostenveld 2007) over permutations of the regressor.
 *
 * Score test (Rao 1948; Cox & Hinkley 1974, section 9.3). The null model has linear predictors eta_q
 * with coefficients b (design rows Z_i). Adding gamma * x_i * [level_i = l] to eta_q gives, at the null
 * estimate b^,
 *     S = sum_i u_iq x_i [l]                       u_iq = d log f_i / d eta_q
 *     a_j = sum_i sum_p W_i,qp Z_i,pj x_i [l]       W_i = -d^2 log f_i / d eta d eta'
 *     I_gg = sum_i W_i,qq x_i^2 [l],   I_bb = sum_i Z_i' W_i Z_i
 *     efficient score S* = S - a' I_bb^-1 U_b (U_b, the null gradient, ~0 at the optimum)
 *     V = I_gg - a' I_bb^-1 a,   statistic = S*^2 / V ~ chi^2(1),   estimate = S* / V (one Newton step).
 * Observed information: the Hessian of log f in the Wiener parameters by central differences of the
 * analytic gradient, chained through the links. Separate participants: sums of S* and V over participants
 * (each with its own nuisance adjustment), testing one common slope.
 *
 * Permutations: the regressor is shuffled within participant x condition cells (the null model's per/by
 * columns and the scan's by columns); permutation p uses its own generator seeded from (seed, p), and
 * every sum runs in trial order, so any thread count gives the same numbers. Instead of moving x, the
 * per-trial weights are moved (sum_i w_i x_s(i) = sum_j w_s^-1(j) x_j), so the cells' power never moves. */
#ifndef BL_SCAN_STATS_H
#define BL_SCAN_STATS_H

#include "bandlink/status.h"
#include "design/study.h"
#include "design/trials.h"
#include "scan/scan_spec.h"

#include <stddef.h>

typedef struct bl_scan_null bl_scan_null;

/* Fit `null_spec` (pooled, or one fit per participant when mode is separate) and prepare the weights of
 * every test (parameter x level of its `by` columns). Errors: a tested parameter fixed in the null model,
 * an unknown `by` column (naming scan.parameters[i]), an information matrix that is not positive definite. */
bl_status bl_scan_null_create(const bl_study *study, const bl_model_spec *null_spec, const bl_trials *trials,
                              bl_participants_mode mode, const bl_scan_param *params, size_t n_params, int threads,
                              unsigned long seed, bl_scan_null **out, bl_warnings *warn, bl_error *err);
void bl_scan_null_destroy(bl_scan_null *nm);

size_t bl_scan_null_n_trials(const bl_scan_null *nm);    /* trials in the null fit */
const size_t *bl_scan_null_rows(const bl_scan_null *nm); /* their table rows, in scan order */
size_t bl_scan_null_n_tests(const bl_scan_null *nm);
int bl_scan_null_test_param(const bl_scan_null *nm, size_t t);
const char *bl_scan_null_test_level(const bl_scan_null *nm, size_t t); /* "" when the parameter has no `by` */
double bl_scan_null_log_likelihood(const bl_scan_null *nm);
/* The null estimates of unit 0 (pooled: the fit) and their count. */
const double *bl_scan_null_coef(const bl_scan_null *nm, size_t *n_coef);

/* Score S (not adjusted), efficient score S*, information I_gg and efficient variance V of every test
 * for one regressor x (n values in scan order); arrays of n_tests. Any output may be NULL. */
void bl_scan_null_score(const bl_scan_null *nm, const double *x, double *score, double *eff, double *igg, double *v);

typedef struct {
    size_t n_freqs, n_windows, n_tests;
    size_t permutations;
    bl_scan_correction correction;
    double cluster_threshold, cluster_statistic; /* p and the chi^2(1) value it corresponds to */
    /* [t * n_cells + c], c = f * n_windows + w */
    double *statistic, *z, *estimate, *p, *p_familywise;
    long *cluster; /* cluster id (1-based) or 0 */
    size_t n_clusters;
    double *cluster_mass, *cluster_p;
    double *null_max; /* per permutation: max statistic (max mode) or max cluster mass */
} bl_scan_stats;

/* The grid: x[c * n + j] standardised power of cell c and scan trial j. progress (may be NULL) is called
 * from the calling thread with permutations done. */
bl_status bl_scan_grid(const bl_scan_null *nm, const double *x, size_t n_freqs, size_t n_windows, size_t permutations,
                       bl_scan_correction correction, double cluster_threshold, unsigned long seed, int threads,
                       void (*progress)(void *, size_t, size_t), void *user, bl_scan_stats **out, bl_error *err);
void bl_scan_stats_destroy(bl_scan_stats *s);

#endif
