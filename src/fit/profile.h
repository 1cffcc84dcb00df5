/* Profile-likelihood intervals of single coefficients (docs/models.md section 5).
 *
 * The 95% profile interval of coefficient j is the set of values b with
 * 2 (LL_max - max over the other coefficients of LL(b, others)) <= chi-square(1) 95% point. Unlike the
 * Wald interval it follows the likelihood's shape: one-sided near the fastest RT (nondecision) and
 * ending at 0 when a variability parameter's value 0 is not rejected. The search needs the estimate,
 * its log-likelihood, the observed information there, and the log-likelihood with its gradient. */
#ifndef BL_FIT_PROFILE_H
#define BL_FIT_PROFILE_H

#include "bandlink/status.h"
#include <stddef.h>

/* Log-likelihood at coef with its gradient into grad (never NULL); -INFINITY when infeasible. */
typedef double (*bl_profile_loglik)(void *user, double *coef, double *grad);

typedef struct {
    size_t k;               /* coefficients */
    const double *estimate; /* k: the maximum */
    double ll_max;          /* log-likelihood there */
    const double *info;     /* k x k observed information at the estimate (row-major) */
    const double *lower;    /* k lower bounds of the others while maximising over them (NULL: none; -INFINITY:
                               none for that coefficient) */
    bl_profile_loglik loglik;
    void *user;
    size_t evaluations; /* log-likelihood evaluations made (added to) */
    /* A profile point above ll_max + BL_PROFILE_BETTER shows that the estimate is not the maximum: the
     * search stops there, copies that point into `better` (k values, caller's buffer; NULL: not copied)
     * and sets found_better, so the caller can restart the fit from it. */
    double *better;
    double better_ll;
    int found_better;
} bl_profile_problem;

#define BL_PROFILE_BETTER 1e-3

/* The 95% profile interval of coefficient j. lower_limit is the smallest value the coefficient may take
 * (0 for a variability parameter, -INFINITY when none): when the profile there is still inside the
 * interval, *low = lower_limit. An end the search cannot find (a flat profile, every nearby point
 * infeasible) is NAN. Fails only when memory runs out. */
bl_status bl_profile_interval(bl_profile_problem *p, size_t j, double lower_limit, double *low, double *high,
                              bl_error *err);

#endif
