/* Plain-text summaries printed by the commands (summary.c). */
#ifndef BL_ANALYSIS_SUMMARY_H
#define BL_ANALYSIS_SUMMARY_H

#include "fit/fit.h"

/* The model comparison with likelihood-ratio tests; the slopes of the best model by AIC with 95% CIs and
 * p-values; the competing model's slopes when BIC prefers another model or another model is within 2 AIC
 * units; permutation tests. Caller frees; NULL when memory ran out. */
char *bl_summary_fits(const bl_fit_set *set);
/* Wall time per step and its share of the total. Caller frees. */
char *bl_summary_timings(const double *seconds, const char *const *names, int n, double total);

#endif
