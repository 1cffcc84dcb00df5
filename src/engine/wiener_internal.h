/* Internal pieces of the Wiener engine shared by src/wiener*.c (not installed, not public).
 * All functions work on the lower boundary with unit noise; the upper boundary follows from the
 * mirror rule f_up(t | v, a, w) = f_lo(t | -v, a, 1 - w) (docs/methods.md). */
#ifndef BL_WIENER_INTERNAL_H
#define BL_WIENER_INTERNAL_H

#include "bandlink/wiener.h"

#define BLW_PI 3.14159265358979323846
#define BLW_SQRT1_2 0.70710678118654752440

/* sin(pi x) and cos(pi x) for x in [0, 0.5]: Taylor polynomials on |pi y| <= pi/4 (terms to z^17
 * and z^16, truncation < 1e-18) after the reflection x -> 0.5 - x, which is exact for x >= 0.25.
 * About twice as fast as libm's sincos on this range; error a few ulp (tests/test_wiener.c). */
static inline void blw_sincospi(double x, double *s, double *c)
{
    int swap = x > 0.25;
    double y = swap ? 0.5 - x : x;
    double z = BLW_PI * y, z2 = z * z;
    double sp = z * (1 + z2 * (-1.0 / 6 +
                               z2 * (1.0 / 120 +
                                     z2 * (-1.0 / 5040 + z2 * (1.0 / 362880 +
                                                               z2 * (-1.0 / 39916800 +
                                                                     z2 * (1.0 / 6227020800.0 +
                                                                           z2 * (-1.0 / 1307674368000.0 +
                                                                                 z2 * (1.0 / 355687428096000.0)))))))));
    double cp = 1 +
                z2 * (-1.0 / 2 +
                      z2 * (1.0 / 24 + z2 * (-1.0 / 720 +
                                             z2 * (1.0 / 40320 + z2 * (-1.0 / 3628800 +
                                                                       z2 * (1.0 / 479001600.0 +
                                                                             z2 * (-1.0 / 87178291200.0 +
                                                                                   z2 * (1.0 / 20922789888000.0))))))));
    *s = swap ? cp : sp;
    *c = swap ? sp : cp;
}

/* Series switch on u = t / a^2 for the density (numerics.md, section 1.3). */
#define BLW_U_SWITCH 0.25

/* log f_lo(t | v, a, w, sv) for decision time t > 0 (closed form in sv). When g != NULL it receives
 * the partial derivatives of log f_lo with respect to a, v, w, t, sv (in that order). */
enum { BLW_GA = 0, BLW_GV, BLW_GW, BLW_GT, BLW_GSV, BLW_NG };
double blw_log_dens_lo(double t, double v, double a, double w, double sv, double *g);

/* Same for a boundary (upper != 0: upper), derivatives mirrored back. */
double blw_log_dens(double t, double v, double a, double w, double sv, int upper, double *g);

/* Tensor Gauss sums of the density over decision times and starts by the large-time series (t/a^2 >= 0.25,
 * or down to BLW_TENSOR_U_MIN with more terms); see wiener_series.c. Node counts at most 66 (times) and
 * 40 (starts); NAN beyond, or when the series cannot be trusted at the earliest node. */
enum { BLW_GRID_NG = 7, BLW_GRID_NK = 16 };
/* Lowest u = t/a^2 at which window integrals use the tensor sums (more series terms below u = 1/4). */
#define BLW_TENSOR_U_MIN 0.1
double blw_grid_large(double v, double a, double w, double sv, double sz, int upper, int nt, const double *tt,
                      const double *twt, const double *tx, int nw, const double *dz, const double *wwt,
                      double g[BLW_GRID_NG]);
/* Log-sum state: sum S of exp(E) R relative to exp(mx), and (grad) the sums of the same terms times
 * d log f / d(a, v, w, sv, sz, t) and (d log f / dt) tx. Start with {-INFINITY, 0, {0}, grad}. */
typedef struct {
    double mx, S, G[BLW_GRID_NG];
    int grad;
} blw_acc;
void blw_point_sum(double v, double a, double w, double sv, double sz, int upper, int n, const double *t,
                   const double *dz, const double *wt, const double *tx, blw_acc *acc);

/* The density at decision time t (t/a^2 < 0.25) averaged over start_range in closed form, merged into acc
 * as one point of weight wt (tx: multiplies the t-derivative into G[6]). Returns 0 when not applicable
 * (a range end within 1e-3 of a boundary): the caller sums start nodes instead. */
int blw_start_window_small(double t, double v, double a, double w, double sv, double sz, int upper, double wt,
                           double tx, blw_acc *acc);

/* log P(lower) and log P(boundary) without variability; stable for any v*a. */
double blw_log_p_lo(double v, double a, double w);
double blw_log_p(double v, double a, double w, int upper);

/* P(boundary) averaged over drift_sd and start_range (quadrature; exact closed form without them). */
double blw_p_var(double v, double a, double w, double sv, double sz, int upper);
/* Boundary probability and mean decision time of p's boundary, integrated over drift_sd and start_range. */
void blw_variability_moments(const bl_wiener_params *p, int upper, double *prob, double *mean_t);

/* Mean decision time conditional on the lower boundary (closed form, no variability). */
double blw_mean_t_lo(double v, double a, double w);
double blw_mean_t(double v, double a, double w, int upper);

/* Defective CDF of the decision time at the lower boundary, no variability, in logs:
 * *log_cdf = log P(T <= t, lower), *log_surv = log P(T > t, lower) (may be NULL).
 * Returns BL_OK or BL_ERR_NUMERIC when a series fails to converge. */
bl_status blw_log_cdf_lo(double t, double v, double a, double w, double *log_cdf, double *log_surv);
bl_status blw_log_cdf(double t, double v, double a, double w, int upper, double *log_cdf, double *log_surv);

/* Small-time CDF series with the relative derivatives d log F / d(a, v, w) in dl[0..2]. */
bl_status blw_log_cdf_grad(double t, double v, double a, double w, int upper, double *log_cdf, double dl[3]);

/* Quadrature rules, built once (thread-safe) and never freed.
 * Gauss-Legendre on [-1, 1] with weights summing to 1 (so sums are averages), n in 1..BLW_GL_MAX;
 * Gauss-Hermite for the standard normal (weights sum to 1), n one of the sizes below. */
#define BLW_GL_MAX 64
void blw_gauss_legendre(int n, const double **x, const double **wt);
int blw_gauss_hermite(int n, const double **x, const double **wt); /* returns the n actually used */
/* Gauss-Laguerre rule for weight e^{-y} on [0, inf) with BLW_GLAG_N nodes (8 when small != 0);
 * weights given as logs; returns the node count. */
#define BLW_GLAG_N 16
int blw_gauss_laguerre(int small, const double **y, const double **log_wt);
/* 1 when the tables were built (0 only after an allocation failure). */
int blw_tables_ok(void);

/* Node counts chosen from the parameters (docs/methods.md explains how they were verified). */
/* Gauss-Legendre nodes over start_range sz at u = t/a^2, with e_z = (sz/2) |d/dw' of the density's
 * exponential factor| (the variation of exp(-v a w' + ...) across the range); capped at BLW_GL_MAX. */
int blw_gl_nodes_start_range(double sz, double u, double e_z);
int blw_gh_nodes_drift_sd(double sv, double a, double t);

/* log(exp(x) + exp(y)) and log(exp(x) - exp(y)) for x >= y. */
double blw_logaddexp(double x, double y);
double blw_logsubexp(double x, double y);

/* Full log-density (every parameter) and, when grad != NULL, its gradient; parameters already checked. */
bl_status blw_log_density_full(const bl_wiener_params *p, double rt, int upper, double *ld, double *grad,
                               bl_error *err);

/* log survival S(t) = P(T > t, boundary) directly from the large-time series (drift_sd closed form), with
 * dl the gradient in (v, a, w, sv); for the far tail, where 1 - CDF would cancel. */
bl_status blw_surv_direct(double t, double v, double a, double w, double sv, int upper, double *lS, double dl[4]);

#endif
