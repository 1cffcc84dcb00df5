/* Quadrature rules for the Wiener engine's across-trial variability, and log-sum helpers.
 *
 * Gauss-Legendre nodes come from GSL (gsl_integration_glfixed_table_alloc), Gauss-Hermite nodes from
 * GSL's fixed-order rules (gsl_integration_fixed_hermite, Golub-Welsch). Both are built once under
 * pthread_once and kept for the life of the process, so the density code never allocates.
 * Node-count rules: docs/methods.md ("Node counts") and tests/test_wiener_variability.c.
 */
#include "engine/wiener_internal.h"
#include "core/gsl_guard.h"

#include <gsl/gsl_integration.h>
#include <math.h>
#include <pthread.h>

static double gl_x[BLW_GL_MAX + 1][BLW_GL_MAX], gl_w[BLW_GL_MAX + 1][BLW_GL_MAX];

static const int gh_sizes[] = {12, 20, 32, 48, 64, 96};
#define GH_COUNT ((int)(sizeof gh_sizes / sizeof gh_sizes[0]))
static double gh_x[GH_COUNT][96], gh_w[GH_COUNT][96];
static int tables_ok;
/* Gauss-Laguerre (weight e^{-y} on [0, inf)), BLW_GLAG_N nodes, weights as logs */
static double glag_y[BLW_GLAG_N], glag_lw[BLW_GLAG_N], glag8_y[8], glag8_lw[8];

static pthread_once_t once = PTHREAD_ONCE_INIT;

static void build_tables(void)
{
    bl_gsl_guard(); /* GSL's allocators call its error handler on failure: returned statuses, never abort() */
    int ok = 1;
    gl_x[1][0] = 0;
    gl_w[1][0] = 1;
    for (int n = 2; n <= BLW_GL_MAX; n++) {
        gsl_integration_glfixed_table *t = gsl_integration_glfixed_table_alloc((size_t)n);
        if (!t) {
            ok = 0;
            continue;
        }
        for (int i = 0; i < n; i++) {
            double xi, wi;
            if (gsl_integration_glfixed_point(-1, 1, (size_t)i, &xi, &wi, t) != 0) ok = 0;
            gl_x[n][i] = xi;
            gl_w[n][i] = 0.5 * wi; /* weights sum to 1: the sum is an average over [-1, 1] */
        }
        gsl_integration_glfixed_table_free(t);
    }
    for (int j = 0; j < GH_COUNT; j++) {
        int n = gh_sizes[j];
        /* weight exp(-b (x - a)^2) with a = 0, b = 1/2: the standard normal kernel */
        gsl_integration_fixed_workspace *ws = gsl_integration_fixed_alloc(gsl_integration_fixed_hermite, (size_t)n, 0.0,
                                                                          0.5, 0.0, 0.0);
        if (!ws) {
            ok = 0;
            continue;
        }
        const double *xs = gsl_integration_fixed_nodes(ws), *ws_ = gsl_integration_fixed_weights(ws);
        double sum = 0;
        for (int i = 0; i < n; i++) sum += ws_[i];
        for (int i = 0; i < n; i++) {
            gh_x[j][i] = xs[i];
            gh_w[j][i] = ws_[i] / sum;
        }
        gsl_integration_fixed_free(ws);
    }
    for (int r = 0; r < 2; r++) {
        int nl = r ? 8 : BLW_GLAG_N;
        double *ly = r ? glag8_y : glag_y, *llw = r ? glag8_lw : glag_lw;
        gsl_integration_fixed_workspace *lg = gsl_integration_fixed_alloc(gsl_integration_fixed_laguerre, (size_t)nl,
                                                                          0.0, 1.0, 0.0, 0.0);
        if (!lg) {
            ok = 0;
            continue;
        }
        const double *xs = gsl_integration_fixed_nodes(lg), *ws_ = gsl_integration_fixed_weights(lg);
        for (int i = 0; i < nl; i++) {
            ly[i] = xs[i];
            llw[i] = log(ws_[i]);
        }
        gsl_integration_fixed_free(lg);
    }
    tables_ok = ok;
}

int blw_gauss_laguerre(int small, const double **y, const double **log_wt)
{
    pthread_once(&once, build_tables);
    *y = small ? glag8_y : glag_y;
    *log_wt = small ? glag8_lw : glag_lw;
    return small ? 8 : BLW_GLAG_N;
}

void blw_gauss_legendre(int n, const double **x, const double **wt)
{
    pthread_once(&once, build_tables);
    if (n < 1) n = 1;
    if (n > BLW_GL_MAX) n = BLW_GL_MAX;
    *x = gl_x[n];
    *wt = gl_w[n];
}

int blw_gauss_hermite(int n, const double **x, const double **wt)
{
    pthread_once(&once, build_tables);
    int j = 0;
    while (j < GH_COUNT - 1 && gh_sizes[j] < n) j++;
    *x = gh_x[j];
    *wt = gh_w[j];
    return gh_sizes[j];
}

int blw_tables_ok(void)
{
    pthread_once(&once, build_tables);
    return tables_ok;
}

int blw_gl_nodes_start_range(double sz, double u, double e_z)
{
    /* Fitted to the minimum node counts for 1e-9 relative error over a grid (docs/methods.md):
     * about 3 + 4.5 sz at large u, growing like sqrt(sz/u) and then sz/u as u -> 0, plus a term for
     * the exponential factor exp(-v a w') across the range (a |v| sz = 27 needs ~20 more nodes). */
    double r = sz / u;
    double n = fmax(3 + 4.5 * sz, 4 + 1.1 * sqrt(r) + 0.03 * r) + 0.5 + 0.5 * sqrt(e_z) + 0.5 * e_z;
    return n >= BLW_GL_MAX ? BLW_GL_MAX : (int)ceil(n);
}

int blw_gh_nodes_drift_sd(double sv, double a, double t)
{
    double s = sv * fmax(a, sqrt(t));
    return s <= 0.5 ? 12 : s <= 1.5 ? 20 : s <= 3 ? 32 : s <= 6 ? 48 : 64;
}

double blw_logaddexp(double x, double y)
{
    if (x < y) {
        double t = x;
        x = y;
        y = t;
    }
    if (y == -INFINITY) return x;
    return x + log1p(exp(y - x));
}

double blw_logsubexp(double x, double y)
{
    if (y == -INFINITY) return x;
    if (!(y < x)) return -INFINITY;
    return x + log(-expm1(y - x));
}
