/* Goodness of fit: observed vs predicted RT quantiles and choice shares, per condition cell and per
 * regressor bin, for every fitted model; written as fit_quantiles.csv (docs/report.md).
 *
 * Groups of trials (the same for every model, so models can be compared row by row):
 *  - condition cells: level combinations of the columns that any fitted model uses in `per` or in a
 *    slope's `by` (the participant column left out; the stimulus column added with stimulus coding),
 *    in order of first appearance; one cell "all" when there are none;
 *  - regressor bins: for every distinct (slope regressor, `by` columns) of the fitted models, the
 *    trials of each level combination of the `by` columns split into 5 bins of equal count by rank
 *    of the regressor (quintiles; ties broken by table order).
 * A group holds the kept trials that every fitted model used.
 *
 * With stimulus coding the boundaries are response categories and a group usually mixes both
 * stimuli, so upper/lower shares say little (near 0.5); the rows are then correct and error
 * responses instead: a trial's predicted distribution is taken at the boundary its stimulus calls
 * for (the parameters mirrored when that is the lower one), and the correct row's share is accuracy.
 *
 * Observed quantiles: Hyndman & Fan (1996) definition 7 (linear interpolation between order
 * statistics; numpy.quantile's default). Predicted quantiles: the quantile of the mixture, over the
 * group's trials, of each trial's predicted RT distribution given the boundary: the mixture CDF
 * (bl_wiener_cdf) and density (bl_wiener_log_density) tabulated on a grid log-spaced in t minus the
 * earliest RT, each quantile started by cubic Hermite interpolation in its grid cell and finished by
 * Newton steps safeguarded by bisection. Predicted share: mean predicted probability of the boundary
 * over the group's trials.
 */
#ifndef BL_GOODNESS_H
#define BL_GOODNESS_H

#include "fit/fit.h"
#include "bandlink/status.h"
#include "design/study.h"
#include "design/trials.h"
#include "bandlink/wiener.h"

#include <stddef.h>

enum { BL_GOODNESS_NQ = 5, BL_GOODNESS_NBINS = 5 };
/* The quantile probabilities: 0.1 0.3 0.5 0.7 0.9. */
extern const double bl_goodness_probs[BL_GOODNESS_NQ];

typedef struct {
    char *condition; /* "context=rich;difficulty=easy", or "all" */
    char *regressor; /* NULL for a condition cell, else the binned regressor */
    int bin;         /* 0 for a condition cell, else 1..5 (low to high regressor) */
    double regressor_low, regressor_high, regressor_mean; /* over the bin (NAN for cells) */
    size_t binning; /* for bins: index into binnings (bins of one binning are contiguous); SIZE_MAX for the
                       per-participant groups (hierarchical and separate fits), which follow the bins */
    size_t n;       /* trials in the group */
    size_t *rows;   /* their table rows, in table order */
} bl_goodness_group;

typedef struct {
    size_t model;             /* index into the fit set's models */
    size_t group;             /* index into groups */
    int upper;                /* 1 upper boundary, 0 lower (accuracy: 1 correct, 0 error) */
    size_t trials, responses; /* trials in the group; of them, responses at this boundary */
    double observed_share, predicted_share;
    double observed_q[BL_GOODNESS_NQ];  /* seconds; NAN when responses == 0 */
    double predicted_q[BL_GOODNESS_NQ]; /* seconds; NAN when the predicted share is ~0 */
} bl_goodness_row;

typedef struct {
    const bl_fit_set *set; /* borrowed: must outlive this result */
    size_t n_groups;
    bl_goodness_group *groups;
    size_t n_cells; /* groups[0 .. n_cells-1] are condition cells, then regressor bins, then participants */
    size_t n_rows;
    bl_goodness_row *rows; /* model-major, then group, then upper before lower */
    size_t n_binnings;
    char **binnings; /* "regressor|by1,by2" per distinct slope binning */
    int accuracy;    /* 1 with stimulus coding: rows are correct and error responses instead of
                                 upper and lower boundary, so the share of the correct row is accuracy */
} bl_goodness;

/* The `boundary` value of fit_quantiles.csv: "upper"/"lower", or "correct"/"error" when g->accuracy. */
const char *bl_goodness_response_name(const bl_goodness *g, int upper);

/* Index of the binning used for a slope (its regressor and `by` columns), or -1. */
int bl_goodness_find_binning(const bl_goodness *g, const bl_slope_spec *slope);

/* Compute every row for every model of `set`. `threads` <= 0: OpenMP default; results do not
 * depend on it. Errors: BL_ERR_NUMERIC when a mixture quantile cannot be bracketed or solved
 * (message names model, group and boundary), BL_ERR_NOMEM. */
bl_status bl_goodness_compute(const bl_study *study, const bl_trials *trials, const bl_fit_set *set, int threads,
                              bl_goodness **out, bl_error *err);
void bl_goodness_destroy(bl_goodness *g);

/* fit_quantiles.csv, atomically. Columns (docs/report.md): model, condition, regressor, bin,
 * regressor_low, regressor_high, regressor_mean, boundary, trials, responses, observed_share,
 * predicted_share, observed_q10, predicted_q10, ... observed_q90, predicted_q90. Missing "NA";
 * numbers %.17g. */
bl_status bl_goodness_write_csv(const bl_goodness *g, const char *path, bl_error *err);

/* Building blocks (exposed for tests and figures). */

/* Quantile of sorted[0..n-1] at prob in [0, 1] by Hyndman & Fan definition 7. NAN when n == 0. */
double bl_goodness_sample_quantile(const double *sorted, size_t n, double prob);

/* Quantiles at probs[0..k-1] (increasing, in (0,1)) of the mixture of n parameter sets with
 * weights w (NULL = equal), each distribution conditional on the boundary `upper`:
 *   F(t) = sum_i w_i cdf_i(t, upper) / sum_i w_i P_i(upper).
 * Also returns the mixture's boundary probability sum_i w_i P_i / sum_i w_i in *share (may be NULL).
 * Quantiles are NAN when that share is below 1e-12. Solved to 1e-9 s (a Newton step below that);
 * equal to a direct root of the mixture CDF to 1e-10 relative (tests/test_goodness.c). */
bl_status bl_goodness_mixture_quantiles(const bl_wiener_params *params, const double *w, size_t n, int upper,
                                        const double *probs, size_t k, double *q, double *share, bl_error *err);

#endif
