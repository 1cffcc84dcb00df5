/* The central (1 - alpha) range [lo, hi] of Binomial(n, p) that the slow coverage and error-rate tests hold
 * their counts to: lo the smallest count with P(X <= lo) >= alpha/2, hi the largest with P(X >= hi) >= alpha/2
 * (GSL gsl_cdf_binomial_P / _Q). */
#ifndef BL_TEST_BINOMIAL_RANGE_H
#define BL_TEST_BINOMIAL_RANGE_H

#include <gsl/gsl_cdf.h>

static inline void binom_range(unsigned n, double p, double alpha, unsigned *lo, unsigned *hi)
{
    *lo = 0;
    while (*lo < n && gsl_cdf_binomial_P(*lo, p, n) < alpha / 2) (*lo)++;
    *hi = n;
    while (*hi > 0 && gsl_cdf_binomial_Q(*hi - 1, p, n) < alpha / 2) (*hi)--;
}

#endif
