/* Maximum-likelihood fitting of one compiled model, and inference. The fits of a whole study are
 * ordered by fit_study.c; group summaries and permutation tests are in compare.c. This file calls
 * neither of them.
 *
 * Optimiser: damped Newton on the analytic gradient (Hessian by forward differences of it, eigenvalues
 * made positive, backtracking line search; Nocedal & Wright, Numerical Optimization, 2nd ed., 2006,
 * sec. 3.4), stopping at a Newton decrement (the gradient in standard-error units; Boyd & Vandenberghe,
 * Convex Optimization, 2004, sec. 9.5.1) of 1e-3, in an unconstrained parameterisation where one exists
 * (docs/models.md): intercept-only parameters on the identity link are optimised as log(threshold),
 * logit(start), |x| for drift_sd, start_range and nondecision_range (the likelihood is even in them),
 * nondecision = min RT of the cell * logistic(.), and so on; other coefficients are optimised directly
 * (slopes scaled by their regressor's root mean square), with infeasible points returning +inf so the
 * line search backs off. Starting values from EZ-diffusion per cell (Wagenmakers, van der Maas &
 * Grasman 2007, Psychon. Bull. Rev. 14:3-22), several starts; GSL's BFGS (vector_bfgs2: Fletcher,
 * Practical Methods of Optimization, 2nd ed., 1987) where Newton cannot finish and Nelder-Mead (GSL
 * nmsimplex2; Nelder & Mead 1965) where a start stalls far from a stationary point; then Newton polishing
 * with the observed information. docs/methods.md ("Optimiser").
 * Inference: observed information from central differences of the analytic gradient, symmetrised,
 * inverted by Cholesky (LAPACKE dpotrf/dpotri); Wald SE, z, p and 95% intervals.
 */
#include "fit/fit_internal.h"
#include "design/model_internal.h"

#include "fit/fit.h"
#include "fit/screen.h"
#include "fit/profile.h"
#include "core/strutil.h"
#include "core/gsl_guard.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_multimin.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <lapacke.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#ifdef _OPENMP
#include <omp.h>
#endif

#define Z975 1.959963984540054 /* standard normal 97.5% quantile */

/* Convergence: the remaining distance to the optimum, sqrt(g' I^-1 g), in standard-error units. */
#define BL_FIT_CONVERGED_DECREMENT 1e-2
/* Starts agree when their maxima are within this many log-likelihood units of the best. */
#define BL_FIT_AGREE 1e-2

static double now_seconds(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

void bl_fit_options_default(bl_fit_options *o)
{
    memset(o, 0, sizeof *o);
    o->threads = 0;
    o->seed = 1;
    o->profiles = 1;
}

/* ---- EZ-diffusion ---------------------------------------------------------------------------- */

bl_status bl_ez_diffusion(double pc, double vrt, double mrt, double *drift, double *threshold, double *nondecision,
                          bl_error *err)
{
    if (!(pc > 0 && pc < 1) || pc == 0.5 || !(vrt > 0) || !isfinite(mrt))
        return bl_error_set(err, BL_ERR_NUMERIC,
                            "EZ-diffusion needs 0 < proportion correct < 1, not 0.5, and a positive RT variance "
                            "(got %g, %g)",
                            pc, vrt);
    /* Wagenmakers et al. (2007), eqs. 5-9, with s = 1. */
    double L = log(pc / (1 - pc));
    double x = L * (pc * pc * L - pc * L + pc - 0.5) / vrt;
    double v = (pc > 0.5 ? 1.0 : -1.0) * pow(x, 0.25);
    double a = L / v;
    double y = -v * a;
    double mdt = (a / (2 * v)) * (-expm1(y)) / (1 + exp(y));
    if (!isfinite(v) || !isfinite(a) || !(a > 0) || !isfinite(mdt))
        return bl_error_set(err, BL_ERR_NUMERIC, "EZ-diffusion has no solution for pc %g, vrt %g", pc, vrt);
    *drift = v;
    *threshold = a;
    *nondecision = mrt - mdt;
    return BL_OK;
}

typedef struct {
    size_t n, n_correct;
    double sum, sumsq; /* of correct RTs */
    double min_rt;
} cell_stats;

static void cell_add(cell_stats *c, double rt, int correct)
{
    c->n++;
    if (rt < c->min_rt) c->min_rt = rt;
    if (correct) {
        c->n_correct++;
        c->sum += rt;
        c->sumsq += rt * rt;
    }
}

/* EZ values of a cell, with the usual edge correction for all-correct cells (half a trial);
 * 0 when it has no solution. */
static int cell_ez(const cell_stats *c, double *v, double *a, double *t0)
{
    if (c->n < 3 || c->n_correct < 2) return 0;
    double pc = (double)c->n_correct / (double)c->n;
    if (pc >= 1) pc = 1 - 0.5 / (double)c->n;
    if (pc == 0.5) pc = 0.5 + 0.5 / (double)c->n;
    double m = c->sum / (double)c->n_correct;
    double var = (c->sumsq - c->n_correct * m * m) / (double)(c->n_correct - 1);
    return bl_ez_diffusion(pc, var, m, v, a, t0, NULL) == BL_OK;
}

/* ---- parameterisation ------------------------------------------------------------------------ */

/* TR_EVEN: coef = |x|, for a variability parameter the density depends on evenly (drift_sd through
 * drift_sd^2; start_range and nondecision_range as the width of a window centred on start or
 * nondecision, whose average is an even function of the width): the log-likelihood is then a smooth
 * even function of x, a maximum at the edge (coef = 0) is an ordinary stationary point at x = 0, and
 * Newton converges there quadratically instead of creeping toward log(0) = -inf. */
/* TR_SQUARE: coef = x^2 / (1 + x^2), for contamination in [0, 1): a maximum at its edge (coef = 0, the
 * log-likelihood falling into the interior) is a stationary point at x = 0 with curvature 2 dLL/dcoef,
 * reached by Newton quadratically; such an estimate is then held at 0 for inference (see held_at_edge). */
enum { TR_RAW = 0, TR_EXP, TR_LOGISTIC, TR_EVEN, TR_SQUARE };

typedef struct {
    int type;
    double lo, hi; /* TR_LOGISTIC: coef = lo + (hi - lo) * logistic(x) */
    double scale;  /* TR_RAW: coef = x / scale */
} transform;

static double to_coef(const transform *t, double x)
{
    switch (t->type) {
    case TR_EXP: return exp(x);
    case TR_EVEN: return fabs(x);
    case TR_SQUARE: return x * x / (1 + x * x);
    case TR_LOGISTIC: return t->lo + (t->hi - t->lo) / (1 + exp(-x));
    default: return x / t->scale;
    }
}

static double dcoef_dx(const transform *t, double x)
{
    switch (t->type) {
    case TR_EXP: return exp(x);
    case TR_EVEN: return x < 0 ? -1.0 : 1.0;
    case TR_SQUARE: return 2 * x / ((1 + x * x) * (1 + x * x));
    case TR_LOGISTIC: {
        double s = 1 / (1 + exp(-x));
        return (t->hi - t->lo) * s * (1 - s);
    }
    default: return 1 / t->scale;
    }
}

static double to_x(const transform *t, double c)
{
    switch (t->type) {
    case TR_EXP: return c > 0 ? log(c) : -30;
    case TR_EVEN: return fabs(c);
    case TR_SQUARE: return c > 0 && c < 1 ? sqrt(c / (1 - c)) : c >= 1 ? 1e6 : 0;
    case TR_LOGISTIC: {
        double u = (c - t->lo) / (t->hi - t->lo);
        if (u < 1e-12) u = 1e-12;
        if (u > 1 - 1e-12) u = 1 - 1e-12;
        return log(u / (1 - u));
    }
    default: return c * t->scale;
    }
}

typedef struct {
    const bl_model *m;
    bl_likelihood *lik;
    size_t k;
    transform *tr;
    double *coef, *grad;
    double inv_n;
    /* The last point evaluated, with value and gradient: GSL's line search asks for f and then for
     * the gradient at the same point, and one likelihood pass gives both. */
    double *cache_x, *cache_g, cache_f;
    int cache_valid;
    int out_of_memory; /* an optimiser workspace could not be allocated: the fit must fail, not skip a start */
    double gtol;       /* BFGS stops at this per-trial gradient (loose when Newton steps follow) */
} objective;

static void evaluate_point(objective *o, const gsl_vector *x)
{
    int same = o->cache_valid;
    for (size_t j = 0; same && j < o->k; j++) same = o->cache_x[j] == gsl_vector_get(x, j);
    if (same) return;
    for (size_t j = 0; j < o->k; j++) {
        o->cache_x[j] = gsl_vector_get(x, j);
        o->coef[j] = to_coef(&o->tr[j], o->cache_x[j]);
    }
    double ll = bl_likelihood_eval(o->lik, o->coef, o->grad);
    o->cache_f = isfinite(ll) ? -ll * o->inv_n : GSL_POSINF;
    for (size_t j = 0; j < o->k; j++)
        o->cache_g[j] = isfinite(ll) ? -o->grad[j] * dcoef_dx(&o->tr[j], o->cache_x[j]) * o->inv_n : 0;
    o->cache_valid = 1;
}

static double obj_f(const gsl_vector *x, void *params)
{
    objective *o = params;
    evaluate_point(o, x);
    return o->cache_f;
}

static void obj_fdf(const gsl_vector *x, void *params, double *f, gsl_vector *g)
{
    objective *o = params;
    evaluate_point(o, x);
    *f = o->cache_f;
    for (size_t j = 0; j < o->k; j++) gsl_vector_set(g, j, o->cache_g[j]);
}

static void obj_df(const gsl_vector *x, void *params, gsl_vector *g)
{
    double f;
    obj_fdf(x, params, &f, g);
}

/* Nelder-Mead needs finite values to order its simplex. */
static double obj_f_finite(const gsl_vector *x, void *params)
{
    double f = obj_f(x, params);
    return isfinite(f) ? f : 1e300;
}

/* BFGS from x (updated in place). Returns the minimum found (+inf if the start is infeasible).
 * Stopping rule: the objective is the mean negative log-likelihood per trial, so a gradient of g per
 * trial is n*g in log-likelihood units; BFGS stops at |g| <= o->gtol per trial (1e-3 when Newton steps
 * with the observed information follow, else 1e-5), or when five iterations
 * together lower the objective by less than 1e-12 per trial (the line search is then working in
 * the quadrature's rounding), at most 500 iterations per restart. The last digits are left to the
 * Newton steps of bl_fit_core, which stop in standard-error units (the Newton decrement
 * sqrt(g' I^-1 g), I the observed information) and converge quadratically. */
static double run_bfgs(objective *o, gsl_vector *x, size_t *iterations)
{
    gsl_multimin_function_fdf fdf = {obj_f, obj_df, obj_fdf, o->k, o};
    gsl_multimin_fdfminimizer *s = gsl_multimin_fdfminimizer_alloc(gsl_multimin_fdfminimizer_vector_bfgs2, o->k);
    if (!s) {
        o->out_of_memory = 1;
        return GSL_POSINF;
    }
    double best = GSL_POSINF;
    /* Restarts reset the curvature estimate, which often gets a stalled line search moving again. */
    for (int restart = 0; restart < 3; restart++) {
        if (gsl_multimin_fdfminimizer_set(s, &fdf, x, 0.1, 0.1) != GSL_SUCCESS || !isfinite(s->f)) break;
        double f_before = s->f, hist[5];
        for (size_t it = 0; it < 500; it++) {
            (*iterations)++;
            hist[it % 5] = s->f;
            int st = gsl_multimin_fdfminimizer_iterate(s);
            if (st != GSL_SUCCESS) break;
            if (gsl_multimin_test_gradient(s->gradient, o->gtol) == GSL_SUCCESS) break;
            if (it >= 5 && hist[(it + 1) % 5] - s->f < 1e-12) break;
        }
        if (isfinite(s->f) && s->f <= best) {
            best = s->f;
            gsl_vector_memcpy(x, s->x);
        }
        if (gsl_multimin_test_gradient(s->gradient, o->gtol) == GSL_SUCCESS) break;
        if (!(f_before - s->f > 1e-12)) break;
    }
    gsl_multimin_fdfminimizer_free(s);
    return best;
}

static double run_simplex(objective *o, gsl_vector *x, size_t *iterations)
{
    gsl_multimin_function fn = {obj_f_finite, o->k, o};
    gsl_multimin_fminimizer *s = gsl_multimin_fminimizer_alloc(gsl_multimin_fminimizer_nmsimplex2, o->k);
    gsl_vector *step = gsl_vector_alloc(o->k);
    double best = GSL_POSINF;
    if (!s || !step) {
        o->out_of_memory = 1;
        goto done;
    }
    gsl_vector_set_all(step, 0.2);
    if (gsl_multimin_fminimizer_set(s, &fn, x, step) != GSL_SUCCESS) goto done;
    for (size_t it = 0; it < 500 * o->k + 1000; it++) {
        (*iterations)++;
        if (gsl_multimin_fminimizer_iterate(s) != GSL_SUCCESS) break;
        if (gsl_multimin_test_size(gsl_multimin_fminimizer_size(s), 1e-9) == GSL_SUCCESS) break;
    }
    if (s->fval < 1e300) {
        best = s->fval;
        gsl_vector_memcpy(x, s->x);
    }
done:
    gsl_multimin_fminimizer_free(s);
    gsl_vector_free(step);
    return best;
}

/* ---- Newton's method in the optimiser's parameterisation --------------------------------------- */

/* Stop when the Newton decrement in standard-error units, sqrt(n g' H^-1 g) with g and H the
 * gradient and Hessian of the per-trial objective, is below this (the log-likelihood is then within
 * about half its square, 5e-7, of the maximum). */
#define BL_NEWTON_DECREMENT 1e-3
#define BL_NEWTON_MAX_ITER 30

typedef struct {
    double *g, *H, *ev, *lam, *p, *xt, *gt, *gh;
} newton_ws;

/* f and g (per-trial objective) at x; 0 when x is infeasible. */
static int eval_x(objective *o, const double *x, double *f, double *g)
{
    gsl_vector_const_view v = gsl_vector_const_view_array(x, o->k);
    evaluate_point(o, &v.vector);
    *f = o->cache_f;
    memcpy(g, o->cache_g, o->k * sizeof *g);
    return isfinite(*f);
}

/* Hessian of the objective at x by forward differences of the analytic gradient g (k evaluations;
 * a backward step where the forward one is infeasible), symmetrised. Returns 0 when neither is
 * feasible for some coordinate. */
static int hessian_x(objective *o, double *x, const double *g, newton_ws *w)
{
    size_t k = o->k;
    for (size_t j = 0; j < k; j++) {
        double xj = x[j], h = 1e-5 * fmax(1.0, fabs(xj)), f;
        int ok = 0;
        for (int side = 0; side < 2 && !ok; side++) {
            double hs = side ? -h : h;
            x[j] = xj + hs;
            hs = x[j] - xj; /* the step actually represented */
            ok = eval_x(o, x, &f, w->gh);
            if (ok)
                for (size_t i = 0; i < k; i++) w->H[i * k + j] = (w->gh[i] - g[i]) / hs;
        }
        x[j] = xj;
        if (!ok) return 0;
    }
    for (size_t i = 0; i < k; i++)
        for (size_t j = i + 1; j < k; j++)
            w->H[i * k + j] = w->H[j * k + i] = 0.5 * (w->H[i * k + j] + w->H[j * k + i]);
    return 1;
}

/* Eigenvalues of the forward-difference Hessian below this fraction of the largest are not resolved
 * (its truncation error is ~1e-5 of the curvature scale, its rounding ~1e-10 / 1e-5 of the gradient
 * noise): they count as 0 -- a coefficient the likelihood does not depend on, or one at the edge of
 * its range through its logistic map -- and are floored there. */
#define BL_NEWTON_ZERO_EIGEN 1e-7

static int lapacke_out_of_memory(lapack_int info)
{
    return info == LAPACK_WORK_MEMORY_ERROR || info == LAPACK_TRANSPOSE_MEMORY_ERROR;
}

/* Eigen-decomposition of H (w->ev: eigenvectors in columns, w->lam: eigenvalues ascending); the
 * decrement sqrt(n g' H^-1 g) when H is positive semi-definite up to BL_NEWTON_ZERO_EIGEN (else
 * INFINITY), and the step p = -|H|^-1 g with eigenvalues replaced by their absolute values. Floored
 * eigenvalues add to the decrement only as far as the gradient points along them. */
static int newton_direction(objective *o, const double *g, newton_ws *w, double *decrement)
{
    size_t k = o->k;
    memcpy(w->ev, w->H, k * k * sizeof *w->ev);
    lapack_int info = LAPACKE_dsyev(LAPACK_ROW_MAJOR, 'V', 'U', (lapack_int)k, w->ev, (lapack_int)k, w->lam);
    if (lapacke_out_of_memory(info)) o->out_of_memory = 1; /* the fit must fail, not take another path */
    if (info != 0) return 0;
    double lmax = fmax(fabs(w->lam[0]), fabs(w->lam[k - 1]));
    if (!(lmax > 0) || !isfinite(lmax)) return 0;
    double floor_ = BL_NEWTON_ZERO_EIGEN * lmax, d2 = 0;
    for (size_t i = 0; i < k; i++) w->p[i] = 0;
    for (size_t e = 0; e < k; e++) {
        double vg = 0;
        for (size_t i = 0; i < k; i++) vg += w->ev[i * k + e] * g[i];
        double l = fmax(fabs(w->lam[e]), floor_);
        d2 += vg * vg / l;
        for (size_t i = 0; i < k; i++) w->p[i] -= w->ev[i * k + e] * vg / l;
    }
    *decrement = w->lam[0] >= -floor_ ? sqrt(fmax(d2, 0) / o->inv_n) : INFINITY;
    return 1;
}

/* The decrement at a new gradient with the previous Hessian's eigen-decomposition (no evaluation). */
static double decrement_with(const objective *o, const double *g, const newton_ws *w)
{
    size_t k = o->k;
    double floor_ = BL_NEWTON_ZERO_EIGEN * fmax(fabs(w->lam[0]), fabs(w->lam[k - 1]));
    if (!(w->lam[0] >= -floor_)) return INFINITY;
    double d2 = 0;
    for (size_t e = 0; e < k; e++) {
        double vg = 0;
        for (size_t i = 0; i < k; i++) vg += w->ev[i * k + e] * g[i];
        d2 += vg * vg / fmax(w->lam[e], floor_);
    }
    return sqrt(fmax(d2, 0) / o->inv_n);
}

/* Backtracking (Armijo) along w->p from x, steps no longer than radius in any coordinate. On success
 * x, *f and g move to the new point and the step length used is returned (*first: the first trial
 * step was taken); 0 when no step lowers f. */
static double line_search(objective *o, double *x, double *f, double *g, newton_ws *w, double radius, int *first)
{
    size_t k = o->k;
    double pmax = 0, slope = 0;
    for (size_t i = 0; i < k; i++) {
        pmax = fmax(pmax, fabs(w->p[i]));
        slope += g[i] * w->p[i];
    }
    if (!(slope < 0)) return 0;
    double t = pmax > radius ? radius / pmax : 1.0;
    for (int tries = 0; tries < 16; tries++, t *= 0.5) {
        for (size_t i = 0; i < k; i++) w->xt[i] = x[i] + t * w->p[i];
        double ft;
        if (eval_x(o, w->xt, &ft, w->gt) && ft <= *f + 1e-4 * t * slope) {
            memcpy(x, w->xt, k * sizeof *x);
            memcpy(g, w->gt, k * sizeof *g);
            *f = ft;
            *first = tries == 0;
            return t * pmax;
        }
    }
    return 0;
}

/* Damped Newton on the objective from x (updated in place): Hessian by forward differences of the
 * analytic gradient, eigenvalue-modified step, backtracking line search, step length limited by a
 * radius that doubles after full steps. Stops when the Newton decrement is below BL_NEWTON_DECREMENT
 * (checked with the last Hessian after each step, so a converged fit needs no further Hessian).
 * Returns the minimum found (+inf when x is infeasible); *converged says whether it stopped there.
 * A maximum of drift_sd, start_range or nondecision_range at 0 is an ordinary stationary point (TR_EVEN),
 * and so is one of contamination at 0 (TR_SQUARE). */
static double run_newton(objective *o, gsl_vector *xv, size_t *iterations, int *converged)
{
    size_t k = o->k;
    *converged = 0;
    double *buf = malloc((2 * k * k + 7 * k) * sizeof *buf);
    if (!buf) {
        o->out_of_memory = 1;
        return GSL_POSINF;
    }
    newton_ws w;
    double *next = buf;
    double **slots[] = {&w.g, &w.lam, &w.p, &w.xt, &w.gt, &w.gh};
    for (size_t i = 0; i < sizeof slots / sizeof *slots; i++, next += k) *slots[i] = next;
    w.H = next;
    w.ev = next + k * k;
    double *x = next + 2 * k * k;
    for (size_t j = 0; j < k; j++) x[j] = gsl_vector_get(xv, j);
    double f, radius = 2.0, dec = INFINITY;
    if (!eval_x(o, x, &f, w.g)) {
        free(buf);
        return GSL_POSINF;
    }
    for (int it = 0; it < BL_NEWTON_MAX_ITER; it++) {
        (*iterations)++;
        if (!hessian_x(o, x, w.g, &w) || !newton_direction(o, w.g, &w, &dec)) break;
        if (dec < BL_NEWTON_DECREMENT) {
            *converged = 1;
            break;
        }
        double f_before = f;
        int first = 0;
        double moved = line_search(o, x, &f, w.g, &w, radius, &first);
        if (!(moved > 0)) break;
        if (first && moved >= radius * 0.999) radius = fmin(2 * radius, 64.0); /* capped and accepted */
        else if (!first) radius = fmax(moved, 0.25);
        /* converged by the decrement with the last Hessian, or within 10x of it where the steps no
         * longer change the objective (log-likelihood gain below 1e-12 per trial: rounding) */
        if ((decrement_with(o, w.g, &w) < BL_NEWTON_DECREMENT && dec < 1) ||
            (dec < 10 * BL_NEWTON_DECREMENT && f_before - f < 1e-12)) {
            *converged = 1;
            break;
        }
    }
    for (size_t j = 0; j < k; j++) gsl_vector_set(xv, j, x[j]);
    free(buf);
    return f;
}

/* ---- inference ------------------------------------------------------------------------------- */

/* 1 when coefficient j is an intercept-only identity-link drift_sd, start_range or nondecision_range:
 * the likelihood is an even function of it (see TR_EVEN), and values below 0 are read as |value|. */
static int even_coef(const bl_model *m, size_t j)
{
    const bl_coef_info *ci = &m->coef[j];
    const bl_param_design *d = &m->par[ci->param];
    return ci->slope < 0 && !d->n_slopes && d->link == BL_LINK_IDENTITY &&
           (ci->param == BL_DRIFT_SD || ci->param == BL_START_RANGE || ci->param == BL_NONDECISION_RANGE);
}

/* Log-likelihood and gradient (g may be NULL) of the even extension at c: the even coefficients are
 * taken as |c_j| and their derivatives change sign with c_j, so central differences and Newton steps
 * work across 0 (an estimate at the edge). c is restored before returning. */
static double eval_even(bl_likelihood *lik, const bl_model *m, double *c, double *g)
{
    size_t flipped[BL_NPARAM], nf = 0; /* even coefficients are intercepts of one parameter each */
    for (size_t j = 0; j < m->n_coef && nf < BL_NPARAM; j++)
        if (c[j] < 0 && even_coef(m, j)) {
            c[j] = -c[j];
            flipped[nf++] = j;
        }
    double ll = bl_likelihood_eval(lik, c, g);
    for (size_t i = 0; i < nf; i++) {
        c[flipped[i]] = -c[flipped[i]];
        if (g) g[flipped[i]] = -g[flipped[i]];
    }
    return ll;
}

/* Observed information I = -H by central differences of the analytic gradient, symmetrised.
 * *found = 0 when a step leaves the feasible region even after shrinking. BL_ERR_NOMEM when memory
 * ran out: the caller fails the fit rather than report "not positive definite". */
static bl_status observed_information(bl_likelihood *lik, const bl_model *m, const double *coef,
                                      const unsigned char *held, double *info, int *found, bl_error *err)
{
    size_t k = m->n_coef;
    double *c = malloc(k * sizeof *c), *gp = malloc(k * sizeof *gp), *gm = malloc(k * sizeof *gm);
    if (!c || !gp || !gm) {
        free(c);
        free(gp);
        free(gm);
        *found = 0;
        return bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory for the observed information", m->name);
    }
    int ok = 1;
    memcpy(c, coef, k * sizeof *c);
    for (size_t j = 0; ok && j < k; j++) {
        if (held && held[j]) continue; /* its row and column are set below */
        double scale = 1.0;
        const bl_coef_info *ci = &m->coef[j];
        if (ci->slope >= 0) scale = 1.0 / m->par[ci->param].slopes[ci->slope].rms;
        double h = 1e-5 * fmax(fabs(coef[j]), scale);
        int done = 0;
        for (int shrink = 0; shrink < 6 && !done; shrink++, h /= 4) {
            c[j] = coef[j] + h;
            double lp = eval_even(lik, m, c, gp);
            c[j] = coef[j] - h;
            double lm = eval_even(lik, m, c, gm);
            c[j] = coef[j];
            if (isfinite(lp) && isfinite(lm)) {
                for (size_t i = 0; i < k; i++) info[i * k + j] = -(gp[i] - gm[i]) / (2 * h);
                done = 1;
            }
        }
        if (!done) ok = 0;
    }
    if (ok)
        for (size_t i = 0; i < k; i++)
            for (size_t j = i + 1; j < k; j++) {
                double a = 0.5 * (info[i * k + j] + info[j * k + i]);
                info[i * k + j] = info[j * k + i] = a;
            }
    /* a coefficient held at the edge of its range is fixed for inference: a unit row and column, so
     * the others' covariance is that of the model with it fixed there */
    for (size_t j = 0; ok && held && j < k; j++)
        if (held[j])
            for (size_t i = 0; i < k; i++) info[i * k + j] = info[j * k + i] = i == j ? 1.0 : 0.0;
    free(c);
    free(gp);
    free(gm);
    *found = ok;
    return BL_OK;
}

/* LAPACKE's own workspace or transposition buffer could not be allocated. */

/* Covariance = info^-1 by Cholesky (see fit.h). */
bl_status bl_information_inverse(const double *info, size_t k, double *cov, double *cond, int *positive_definite,
                                 bl_error *err)
{
    double *tmp = malloc(k * k * sizeof *tmp), *ev = malloc(k * sizeof *ev);
    *cond = NAN;
    *positive_definite = 0;
    if (!tmp || !ev) {
        free(tmp);
        free(ev);
        goto nomem;
    }
    memcpy(tmp, info, k * k * sizeof *tmp);
    lapack_int ie = LAPACKE_dsyev(LAPACK_ROW_MAJOR, 'N', 'U', (lapack_int)k, tmp, (lapack_int)k, ev);
    if (ie == 0) *cond = ev[0] > 0 ? ev[k - 1] / ev[0] : INFINITY;
    free(tmp);
    free(ev);
    if (lapacke_out_of_memory(ie)) goto nomem;
    memcpy(cov, info, k * k * sizeof *cov);
    lapack_int ic = LAPACKE_dpotrf(LAPACK_ROW_MAJOR, 'U', (lapack_int)k, cov, (lapack_int)k);
    if (ic == 0) ic = LAPACKE_dpotri(LAPACK_ROW_MAJOR, 'U', (lapack_int)k, cov, (lapack_int)k);
    if (lapacke_out_of_memory(ic)) goto nomem;
    if (ic != 0) return BL_OK;
    for (size_t i = 0; i < k; i++)
        for (size_t j = 0; j < i; j++) cov[i * k + j] = cov[j * k + i];
    for (size_t i = 0; i < k; i++)
        if (!(cov[i * k + i] > 0) || !isfinite(cov[i * k + i])) return BL_OK;
    *positive_definite = 1;
    return BL_OK;
nomem:
    return bl_error_set(err, BL_ERR_NOMEM, "out of memory inverting a %zu x %zu information matrix", k, k);
}

/* ---- one fit --------------------------------------------------------------------------------- */

unsigned long bl_fit_mix_seed(unsigned long seed, const char *text, unsigned long extra)
{
    /* FNV-1a over the text, folded with the seed: each model gets its own reproducible stream. */
    unsigned long long h = 1469598103934665603ULL ^ (unsigned long long)seed;
    for (const unsigned char *p = (const unsigned char *)text; p && *p; p++) h = (h ^ *p) * 1099511628211ULL;
    h = (h ^ extra) * 1099511628211ULL;
    return (unsigned long)(h ^ (h >> 29));
}

/* Starting values (coefficient scale) and parameterisation. */
static bl_status plan_fit(const bl_model *m, transform *tr, double *start, bl_error *err)
{
    size_t k = m->n_coef;
    cell_stats *cs = calloc(k, sizeof *cs);
    if (!cs) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    cell_stats all = {0, 0, 0, 0, INFINITY};
    for (size_t j = 0; j < k; j++) cs[j].min_rt = INFINITY;
    for (size_t t = 0; t < m->n; t++) {
        int correct = m->upper[t] == (m->sign[t] > 0);
        cell_add(&all, m->rt[t], correct);
        for (int p = 0; p < BL_NPARAM; p++)
            if (m->par[p].is_free) cell_add(&cs[bl_model_intercept_index(m, p, t)], m->rt[t], correct);
    }
    double v0 = 1.0, a0 = 1.5, t00 = 0.5 * all.min_rt;
    double ve, ae, te;
    if (cell_ez(&all, &ve, &ae, &te)) {
        v0 = ve;
        a0 = ae;
        t00 = te;
    }
    int st_free = m->par[BL_NONDECISION_RANGE].is_free || m->par[BL_NONDECISION_RANGE].fixed > 0;
    int p0_free = m->par[BL_CONTAMINATION].is_free || m->par[BL_CONTAMINATION].fixed > 0;
    for (size_t j = 0; j < k; j++) {
        const bl_coef_info *ci = &m->coef[j];
        const bl_param_design *d = &m->par[ci->param];
        int log_link = d->link == BL_LINK_LOG;
        tr[j].type = TR_RAW;
        tr[j].scale = 1.0;
        if (ci->slope >= 0) {
            tr[j].scale = d->slopes[ci->slope].rms;
            start[j] = 0;
            continue;
        }
        double v = v0, a = a0, t0 = t00;
        if (!cell_ez(&cs[j], &v, &a, &t0)) {
            v = v0;
            a = a0;
            t0 = t00;
        }
        double minrt = cs[j].min_rt;
        double value;
        switch (ci->param) {
        case BL_THRESHOLD: value = fmin(fmax(a, 0.3), 6.0); break;
        case BL_DRIFT: value = fmin(fmax(v, -6.0), 6.0); break;
        case BL_NONDECISION: value = fmin(fmax(t0, 0.2 * minrt), 0.8 * minrt); break;
        case BL_START: value = 0.5; break;
        case BL_DRIFT_SD: value = 0.5; break;
        case BL_START_RANGE: value = 0.1; break;
        case BL_NONDECISION_RANGE:
            value = 0.1 * minrt;
            /* a nondecision fixed at or above the fastest RT needs a window reaching below it */
            if (!m->par[BL_NONDECISION].is_free && m->par[BL_NONDECISION].fixed - 0.5 * value >= 0.99 * minrt)
                value = fmin(2 * (m->par[BL_NONDECISION].fixed - 0.95 * minrt), 2 * m->par[BL_NONDECISION].fixed);
            break;
        default: value = 0.02; break;
        }
        if (log_link) {
            if (ci->param == BL_DRIFT && value <= 0) value = 0.1;
            start[j] = log(value);
            continue;
        }
        start[j] = value;
        if (d->n_slopes) continue;
        /* Intercept-only parameters on the identity link: an exact unconstrained parameterisation. */
        switch (ci->param) {
        case BL_THRESHOLD: tr[j].type = TR_EXP; break;
        case BL_DRIFT_SD:
        case BL_START_RANGE:
        case BL_NONDECISION_RANGE: tr[j].type = TR_EVEN; break;
        case BL_CONTAMINATION: tr[j].type = TR_SQUARE; break;
        case BL_START:
            tr[j].type = TR_LOGISTIC;
            tr[j].lo = 0;
            tr[j].hi = 1;
            break;
        case BL_NONDECISION:
            if (!st_free && !p0_free) {
                tr[j].type = TR_LOGISTIC;
                tr[j].lo = 0;
                tr[j].hi = minrt;
            }
            break;
        default: break;
        }
    }
    free(cs);
    return BL_OK;
}

typedef struct {
    double ll;
    double *coef;
    size_t iterations;
    int used_simplex; /* the method: 0 Newton, 1 Newton after BFGS, 2 Nelder-Mead alone, 3 Nelder-Mead fallback */
} start_result;

/* The optimiser part: maximise from the given starts. best->coef must hold k values. */
static void optimise(objective *o, gsl_rng *rng, int n_starts, int simplex_only, const double *first,
                     start_result *best, int *agreed, double *lls)
{
    size_t k = o->k;
    gsl_vector *x0 = gsl_vector_alloc(k), *x = gsl_vector_alloc(k);
    best->ll = -INFINITY;
    best->iterations = 0;
    best->used_simplex = 0;
    if (!x0 || !x) {
        o->out_of_memory = 1;
        goto done;
    }
    for (size_t j = 0; j < k; j++) gsl_vector_set(x0, j, to_x(&o->tr[j], first[j]));
    int converged_any = 0; /* some start has reached a maximum by Newton's stopping rule */
    for (int s = 0; s < n_starts; s++) {
        gsl_vector_memcpy(x, x0);
        if (s > 0) {
            /* Perturbed starts on the optimiser's scale; shrink until feasible. */
            double spread = 0.5;
            for (int tries = 0; tries < 10; tries++, spread /= 2) {
                for (size_t j = 0; j < k; j++) {
                    double xj = gsl_vector_get(x0, j);
                    double sd = o->tr[j].type == TR_RAW && o->m->coef[j].slope < 0 ? spread * fmax(fabs(xj), 0.5)
                                : o->tr[j].type == TR_EVEN                         ? spread * fmax(fabs(xj), 0.05)
                                                                                   : spread * 0.5;
                    gsl_vector_set(x, j, xj + gsl_ran_gaussian(rng, sd));
                }
                if (isfinite(obj_f(x, o))) break;
                gsl_vector_memcpy(x, x0);
            }
        }
        size_t iters = 0;
        int simplex = 0;
        if (simplex_only) {
            double fs = run_simplex(o, x, &iters);
            /* Restarted simplex: a fresh simplex escapes the collapsed ones of curved valleys. */
            for (int round = 0; round < 5 && isfinite(fs); round++) {
                double f2 = run_simplex(o, x, &iters);
                if (!(fs - f2 > 1e-12)) break;
                fs = f2;
            }
            double ll = isfinite(fs) ? -fs / o->inv_n : -INFINITY;
            lls[s] = ll;
            if (ll > best->ll) {
                best->ll = ll;
                best->iterations = iters;
                best->used_simplex = 2;
                for (size_t j = 0; j < k; j++) best->coef[j] = to_coef(&o->tr[j], gsl_vector_get(x, j));
            }
            continue;
        }
        int newton_done = 0;
        double f = run_newton(o, x, &iters, &newton_done);
        /* A perturbed start that Newton could not finish, stuck below a maximum already found, has
         * shown what it can (a disagreeing start); the fallbacks are for starts that may lead higher. */
        int hopeless = s > 0 && converged_any && !(-f / o->inv_n > best->ll);
        if (!newton_done && !o->out_of_memory && !hopeless) {
            /* Newton stalled (a Hessian that cannot be evaluated, or no descent): BFGS from the
             * best point so far (the start when even that was infeasible), then Newton again */
            if (!isfinite(f)) gsl_vector_memcpy(x, x0);
            double fb = run_bfgs(o, x, &iters);
            if (isfinite(fb)) f = run_newton(o, x, &iters, &newton_done);
            if (!(f <= fb)) f = fb;
            simplex = 1; /* newton+bfgs2 */
        }
        /* Fallback: derivative-free search when BFGS could not start or stalled far from a
         * stationary point, then BFGS again from where it ended. */
        gsl_vector *g = gsl_vector_alloc(k);
        if (!g) o->out_of_memory = 1;
        int stalled = !newton_done && !hopeless;
        if (stalled && g && isfinite(f)) {
            double fv;
            obj_fdf(x, o, &fv, g);
            /* near a stationary point (per-trial gradient 1e-3, i.e. within Newton's reach) the
             * Newton steps of bl_fit_core finish the job; the simplex is for real stalls */
            stalled = gsl_multimin_test_gradient(g, 1e-3) != GSL_SUCCESS;
        }
        gsl_vector_free(g);
        if (stalled) {
            gsl_vector *xs = gsl_vector_alloc(k);
            if (!xs) o->out_of_memory = 1;
            if (xs) {
                gsl_vector_memcpy(xs, isfinite(f) ? x : x0);
                double fs = run_simplex(o, xs, &iters);
                if (isfinite(fs)) {
                    double fb = run_bfgs(o, xs, &iters);
                    if (fb < fs) fs = fb;
                }
                if (fs < f) {
                    f = fs;
                    gsl_vector_memcpy(x, xs);
                    simplex = 3;
                }
                gsl_vector_free(xs);
            }
        }
        double ll = isfinite(f) ? -f / o->inv_n : -INFINITY;
        lls[s] = ll;
        converged_any |= newton_done;
        if (ll > best->ll) {
            best->ll = ll;
            best->iterations = iters;
            best->used_simplex = simplex;
            for (size_t j = 0; j < k; j++) best->coef[j] = to_coef(&o->tr[j], gsl_vector_get(x, j));
        }
    }
    *agreed = 0;
    for (int s = 0; s < n_starts; s++)
        if (isfinite(lls[s]) && best->ll - lls[s] <= BL_FIT_AGREE) (*agreed)++;
done:
    gsl_vector_free(x0);
    gsl_vector_free(x);
}

void bl_fit_result_clear(bl_fit_result *res)
{
    if (!res) return;
    free(res->participant);
    for (size_t j = 0; j < res->n_coef; j++) {
        free(res->coef[j].term);
        free(res->coef[j].level);
    }
    free(res->coef);
    free(res->covariance);
    memset(res, 0, sizeof *res);
}

/* Fit with an existing likelihood workspace. With infer == 0 only the maximum is found (used by
 * permutation refits). */
/* The likelihood is zero at the start: name the first trial that makes it so, with its RT and the
 * parameter values predicted for it, so the user can find a fixed value out of range or an RT the
 * model cannot produce. */
static bl_status explain_zero_likelihood(const bl_model *m, bl_likelihood *lik, const double *coef, bl_error *err)
{
    double *tll = malloc((m->n ? m->n : 1) * sizeof *tll);
    if (!tll) return bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory", m->name);
    bl_likelihood_trials(lik, coef, tll);
    size_t k = 0;
    while (k < m->n && isfinite(tll[k])) k++;
    free(tll);
    if (k == m->n)
        return bl_error_set(err, BL_ERR_MODEL, "model '%s': the likelihood is zero at the starting values", m->name);
    bl_wiener_params p;
    int valid = bl_model_predict(m, coef, k, &p);
    bl_error why = {0};
    if (!valid && bl_wiener_check(&p, &why) != BL_OK)
        return bl_error_set(err, BL_ERR_MODEL, "model '%s': trial table row %zu: %s (check fixed values and links)",
                            m->name, m->row[k] + 1, why.message);
    return bl_error_set(err, BL_ERR_MODEL,
                        "model '%s': trial table row %zu: an RT of %.6g s cannot be produced with nondecision %.6g s "
                        "(and nondecision_range %.6g s); check fixed values, or leave such RTs out with trials.keep",
                        m->name, m->row[k] + 1, m->rt[k], p.value[BL_NONDECISION], p.value[BL_NONDECISION_RANGE]);
}

/* BFGS (o->gtol) from coef, updated in place when it improves. Returns 1 on allocation failure. */
static int refine_bfgs(objective *o, double *coef)
{
    gsl_vector *x = gsl_vector_alloc(o->k);
    if (!x) return 1;
    for (size_t j = 0; j < o->k; j++) gsl_vector_set(x, j, to_x(&o->tr[j], coef[j]));
    size_t it = 0;
    double f0 = obj_f(x, o);
    double f = run_bfgs(o, x, &it);
    if (f < f0)
        for (size_t j = 0; j < o->k; j++) coef[j] = to_coef(&o->tr[j], gsl_vector_get(x, j));
    gsl_vector_free(x);
    return o->out_of_memory;
}

/* The starting point: the planned (EZ) start, or `first` when it is feasible on these data (e.g. the
 * observed fit for a permutation refit); fails with the reason when the likelihood is zero there. */
static bl_status choose_start(const bl_model *m, bl_likelihood *lik, const double *first, transform *tr, double *start,
                              bl_error *err)
{
    bl_status st = plan_fit(m, tr, start, err);
    if (st) return st;
    if (first) {
        double ll = bl_likelihood_eval(lik, first, NULL);
        if (isfinite(ll)) memcpy(start, first, m->n_coef * sizeof *start);
    }
    if (!isfinite(bl_likelihood_eval(lik, start, NULL))) return explain_zero_likelihood(m, lik, start, err);
    return BL_OK;
}

/* What the optimiser reports into res: the log-likelihood at its optimum, sizes and diagnostics. */
static void record_optimum(const bl_model *m, const start_result *best, int n_starts, int agreed, double ll,
                           bl_fit_result *res)
{
    res->log_likelihood = ll;
    res->parameters = m->n_coef;
    res->trials = m->n;
    static const char *const names[] = {"newton", "newton+bfgs2", "nmsimplex2", "newton+bfgs2+nmsimplex2"};
    res->diag.method = names[best->used_simplex & 3];
    res->diag.iterations = best->iterations;
    res->diag.starts = n_starts;
    res->diag.starts_agreed = agreed;
    res->diag.newton_decrement = NAN;
    res->diag.condition_number = NAN;
}

/* The point being polished (coefficients, log-likelihood, gradient) and the observed information
 * with its inverse there; pd says whether the information was positive definite. */
typedef struct {
    double *coef, *grad, *info, *cov;
    double ll, cond;
    int pd;
    const unsigned char *held; /* coefficients held at the edge of their range (NULL: none) */
} newton_state;

/* Newton polishing with the observed information: each step is checked to raise the likelihood
 * (halved up to three times when it does not), so it can only help. The loop stops when the Newton
 * decrement -- the gradient in standard-error units -- is below 1e-4 (log-likelihood gap ~5e-9), at
 * most 8 steps. o->coef and o->grad are the trial point's workspace. */
static bl_status newton_polish(objective *o, newton_state *s, double *decrement, bl_error *err)
{
    size_t k = o->k;
    for (int polish = 0; polish < 8; polish++) {
        int oi = 0, inv = 0;
        bl_status st = observed_information(o->lik, o->m, s->coef, s->held, s->info, &oi, err);
        if (st) return st;
        if (oi && (st = bl_information_inverse(s->info, k, s->cov, &s->cond, &inv, err))) return st;
        s->pd = oi && inv;
        if (!s->pd) break;
        for (size_t i = 0; s->held && i < k; i++)
            if (s->held[i]) s->grad[i] = 0; /* held: no step, and no part of the decrement */
        double nd2 = 0;
        for (size_t i = 0; i < k; i++)
            for (size_t j = 0; j < k; j++) nd2 += s->grad[i] * s->cov[i * k + j] * s->grad[j];
        *decrement = sqrt(fmax(nd2, 0));
        if (*decrement < 2 * BL_NEWTON_DECREMENT || polish == 7) break;
        double ll2 = -INFINITY;
        for (int half = 0; half < 4 && !(ll2 > s->ll); half++) {
            double scale = ldexp(1.0, -half);
            for (size_t i = 0; i < k; i++) {
                double step = 0;
                for (size_t j = 0; j < k; j++) step += s->cov[i * k + j] * s->grad[j];
                o->coef[i] = s->coef[i] + scale * step;
            }
            ll2 = eval_even(o->lik, o->m, o->coef, o->grad);
        }
        if (!(ll2 > s->ll)) break;
        for (size_t i = 0; i < k; i++)
            if (o->coef[i] < 0 && even_coef(o->m, i)) { /* back to the reported |value| */
                o->coef[i] = -o->coef[i];
                o->grad[i] = -o->grad[i];
            }
        s->ll = ll2;
        memcpy(s->coef, o->coef, k * sizeof *s->coef);
        memcpy(s->grad, o->grad, k * sizeof *s->grad);
    }
    return BL_OK;
}

/* The inference step: Newton polishing, retried once after a tight BFGS when it cannot finish from
 * the loose BFGS point; records the polished log-likelihood and convergence in res. */
static bl_status polish_and_infer(objective *o, newton_state *s, bl_fit_result *res, bl_error *err)
{
    s->pd = 0;
    s->cond = NAN;
    int retried = 0;
    for (;;) {
        bl_status st = newton_polish(o, s, &res->diag.newton_decrement, err);
        if (st) return st;
        if (!((!s->pd || !(res->diag.newton_decrement <= BL_FIT_CONVERGED_DECREMENT)) && o->gtol > 1e-5 && !retried))
            break;
        /* Newton could not finish from the loose BFGS point: tight BFGS from here, then again */
        retried = 1;
        o->gtol = 1e-5;
        if (refine_bfgs(o, s->coef))
            return bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory while fitting", o->m->name);
        s->ll = bl_likelihood_eval(o->lik, s->coef, s->grad);
    }
    res->log_likelihood = s->ll;
    res->diag.hessian_positive_definite = s->pd;
    res->diag.condition_number = s->cond;
    res->converged = s->pd && res->diag.newton_decrement <= BL_FIT_CONVERGED_DECREMENT;
    return BL_OK;
}

/* Contamination (TR_SQUARE) estimated within 1e-4 of 0 where the log-likelihood falls into the interior
 * (dLL/dcoef <= 0 at 0: the condition for a maximum on the edge) is held at exactly 0 for inference: no
 * Wald SE (the likelihood has a slope there, not a peak), the others' information with it fixed, and a
 * profile interval from 0. Updates coef, grad and *ll; returns the number held. */
static size_t hold_edges(objective *o, double *coef, double *grad, double *ll, unsigned char *held)
{
    size_t n_held = 0;
    for (size_t j = 0; j < o->k; j++) {
        if (o->tr[j].type != TR_SQUARE || !(coef[j] < 1e-4)) continue;
        double keep = coef[j];
        coef[j] = 0;
        double l0 = bl_likelihood_eval(o->lik, coef, o->grad);
        if (isfinite(l0) && o->grad[j] <= 0 && l0 >= *ll - 1e-6) {
            held[j] = 1;
            n_held++;
            *ll = l0;
            memcpy(grad, o->grad, o->k * sizeof *grad);
        } else coef[j] = keep;
    }
    return n_held;
}

/* drift_sd, start_range or nondecision_range (TR_EVEN) estimated within 1e-4 of 0 when the observed
 * information is not positive definite: the likelihood is even in them, so at 0 their slope vanishes and
 * here their curvature does too (a maximum flat to second order); Wald has nothing to say. Held at
 * exactly 0 for inference (no SE; the others' information with it fixed -- by symmetry their cross
 * terms with it are 0 there anyway), their uncertainty is the profile interval [0, upper]. Updates coef,
 * grad and *ll; returns the number newly held. */
static size_t hold_flat_even(objective *o, double *coef, double *grad, double *ll, unsigned char *held)
{
    size_t n_held = 0;
    for (size_t j = 0; j < o->k; j++)
        if (o->tr[j].type == TR_EVEN && !held[j] && fabs(coef[j]) < 1e-4) {
            held[j] = 1;
            coef[j] = 0;
            n_held++;
        }
    if (n_held) *ll = bl_likelihood_eval(o->lik, coef, grad);
    return n_held;
}

/* The coefficient table of res: names and estimates, with Wald standard errors, z, p and 95%
 * intervals from cov when `wald`. Returns 0 when out of memory. */
static int fill_coefficients(const bl_model *m, const double *coef, const double *cov, const unsigned char *held,
                             int wald, bl_fit_result *res)
{
    size_t k = m->n_coef;
    res->coef = calloc(k, sizeof *res->coef);
    if (!res->coef) return 0;
    res->n_coef = k; /* only now: bl_fit_result_clear walks n_coef entries */
    for (size_t j = 0; j < k; j++) {
        bl_coefficient *c = &res->coef[j];
        const bl_coef_info *ci = &m->coef[j];
        c->param = ci->param;
        c->parameter = bl_param_name(ci->param);
        c->term = bl_strdup(ci->term);
        c->level = bl_strdup(ci->level);
        if (!c->term || !c->level) return 0;
        c->estimate = coef[j];
        c->se = c->z = c->p = c->ci_low = c->ci_high = c->df = c->profile_low = c->profile_high = NAN;
        if (wald && !held[j]) {
            c->se = sqrt(cov[j * k + j]);
            c->z = c->estimate / c->se;
            c->p = 2 * gsl_cdf_ugaussian_Q(fabs(c->z));
            c->ci_low = c->estimate - Z975 * c->se;
            c->ci_high = c->estimate + Z975 * c->se;
        }
    }
    return 1;
}

/* ---- profile-likelihood intervals ------------------------------------------------------------- */

/* Coefficients whose Wald interval is a poor guide: nondecision (the likelihood changes steeply toward
 * the fastest RT) and the variability parameters (their value 0 is the edge of the range). */
static int profiled_param(bl_param p)
{
    return p == BL_NONDECISION || p == BL_DRIFT_SD || p == BL_START_RANGE || p == BL_NONDECISION_RANGE ||
           p == BL_CONTAMINATION;
}

typedef struct {
    bl_likelihood *lik;
    const bl_model *m;
} profile_target;

static double profile_loglik(void *user, double *coef, double *grad)
{
    const profile_target *t = user;
    return eval_even(t->lik, t->m, coef, grad);
}

/* Profile intervals of the profiled parameters' coefficients of a converged fit at coef (information
 * info there). The smallest value of an intercept-only identity-link coefficient is 0. */
/* A profile point may rise above the estimate's log-likelihood (the optimiser stopped at a lower local
 * maximum, typically a variability parameter at 0): *better_found is then set and `better` holds that
 * point (|value| for the even coefficients), for bl_fit_core to restart from. */
static bl_status fill_profiles(const bl_model *m, bl_likelihood *lik, const double *coef, double *grad, double ll,
                               double *info, const unsigned char *held, bl_fit_result *res, double *better,
                               int *better_found, bl_error *err)
{
    profile_target t = {lik, m};
    size_t k = m->n_coef;
    /* a held coefficient: the scale of its search from the slope g at the edge (LL ~ LL_max + g b reaches
     * the critical drop at b = z^2 / (2|g|)), so the first point lands near the end */
    int any_held = 0;
    for (size_t j = 0; j < k; j++) any_held |= held[j];
    if (any_held) bl_likelihood_eval(lik, coef, grad);
    for (size_t j = 0; j < k; j++) {
        if (!held[j]) continue;
        if (even_coef(m, j)) {
            /* flat to second order at 0: the scale from the drop over a tenth of a typical value */
            static const double typical[BL_NPARAM] = {[BL_DRIFT_SD] = 1.0, [BL_START_RANGE] = 0.3,
                                                      [BL_NONDECISION_RANGE] = 0.1};
            double h = 0.1 * typical[m->coef[j].param], *c = grad; /* grad is scratch here */
            memcpy(c, coef, k * sizeof *c);
            c[j] = h;
            double drop = ll - bl_likelihood_eval(lik, c, NULL);
            info[j * k + j] = drop > 0 && isfinite(drop) ? 2 * drop / (h * h) : 1 / (h * h);
            bl_likelihood_eval(lik, coef, grad);
        } else
            info[j * k + j] = fmax(4 * grad[j] * grad[j] / (Z975 * Z975), 1e-12);
    }
    /* contamination cannot go below 0 while the others are maximised (the even variability
     * parameters need no bound: eval_even reads them as |value|) */
    double *lower = malloc(k * sizeof *lower);
    if (!lower) return bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory for profile intervals", m->name);
    for (size_t j = 0; j < k; j++) lower[j] = -INFINITY;
    for (size_t j = 0; j < k; j++) {
        const bl_coef_info *ci = &m->coef[j];
        const bl_param_design *d = &m->par[ci->param];
        if (ci->param == BL_CONTAMINATION && ci->slope < 0 && !d->n_slopes && d->link == BL_LINK_IDENTITY) lower[j] = 0;
    }
    bl_profile_problem p = {.k = k, .estimate = coef, .ll_max = ll, .info = info, .lower = lower,
                            .loglik = profile_loglik, .user = &t, .better = better};
    *better_found = 0;
    for (size_t j = 0; j < m->n_coef && !p.found_better; j++) {
        const bl_coef_info *ci = &m->coef[j];
        const bl_param_design *d = &m->par[ci->param];
        if (!profiled_param(ci->param)) continue;
        int bounded = ci->slope < 0 && !d->n_slopes && d->link == BL_LINK_IDENTITY;
        bl_coefficient *c = &res->coef[j];
        bl_status st = bl_profile_interval(&p, j, bounded ? 0.0 : -INFINITY, &c->profile_low, &c->profile_high, err);
        if (st) {
            free(lower);
            return st;
        }
        c->profiled = 1;
    }
    free(lower);
    if (p.found_better) {
        *better_found = 1;
        for (size_t j = 0; j < k; j++)
            if (even_coef(m, j)) better[j] = fabs(better[j]);
    }
    return BL_OK;
}

bl_status bl_fit_core(const bl_model *m, bl_likelihood *lik, const bl_fit_options *opt, int n_starts,
                      const double *first, int infer, bl_fit_result *res, double *coef_out, bl_error *err)
{
    double t_start = now_seconds();
    size_t k = m->n_coef;
    size_t evals0 = bl_likelihood_evaluations(lik);
    bl_status st = BL_ERR_NOMEM;
    transform *tr = calloc(k, sizeof *tr);
    double *start = malloc(k * sizeof *start), *coef = malloc(k * sizeof *coef), *grad = malloc(k * sizeof *grad);
    double *info = NULL, *cov = NULL, *lls = calloc((size_t)n_starts + 1, sizeof *lls);
    double *wcoef = malloc(k * sizeof *wcoef), *wgrad = malloc(k * sizeof *wgrad);
    double *cache_x = malloc(k * sizeof *cache_x), *cache_g = malloc(k * sizeof *cache_g);
    unsigned char *held = calloc(k ? k : 1, 1);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    memset(res, 0, sizeof *res);
    if (!tr || !start || !coef || !grad || !lls || !wcoef || !wgrad || !cache_x || !cache_g || !held || !rng)
        goto nomem;
    gsl_rng_set(rng, bl_fit_mix_seed(opt ? opt->seed : 1, m->name, 0x5EED));
    if ((st = choose_start(m, lik, first, tr, start, err))) goto fail;
    objective o = {m, lik, k, tr, wcoef, wgrad, 1.0 / (double)m->n, cache_x, cache_g, 0, 0, 0, infer ? 1e-3 : 1e-5};
    start_result best = {0, coef, 0, 0};
    int agreed = 0, restarts = 0;
again:
    if (restarts) {
        /* a profile point beat the maximum: one more start, from there (no start of the first round
         * reached this maximum) */
        optimise(&o, rng, 1, opt ? opt->simplex_only : 0, start, &best, &agreed, lls);
        agreed = 0;
        memset(held, 0, k);
        free(info);
        free(cov);
        info = cov = NULL;
    } else
        optimise(&o, rng, n_starts, opt ? opt->simplex_only : 0, start, &best, &agreed, lls);
    if (o.out_of_memory) {
        st = bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory in the optimiser", m->name);
        goto fail;
    }
    if (!isfinite(best.ll)) {
        st = bl_error_set(err, BL_ERR_NUMERIC, "model '%s': the optimiser found no finite log-likelihood", m->name);
        goto fail;
    }
    double ll = bl_likelihood_eval(lik, coef, grad);
    record_optimum(m, &best, n_starts, agreed, ll, res);
    res->diag.profile_restarts = restarts;
    size_t n_held = hold_edges(&o, coef, grad, &ll, held);
    if (infer) {
        info = malloc(k * k * sizeof *info);
        cov = malloc(k * k * sizeof *cov);
        if (!info || !cov) goto nomem;
        newton_state s = {coef, grad, info, cov, ll, NAN, 0, n_held ? held : NULL};
        if ((st = polish_and_infer(&o, &s, res, err))) goto fail;
        if (!s.pd && hold_flat_even(&o, coef, grad, &s.ll, held)) {
            /* an even parameter at 0 whose curvature there vanishes: held at 0 like contamination */
            s.held = held;
            if ((st = polish_and_infer(&o, &s, res, err))) goto fail;
        }
        ll = s.ll;
    }
    double gmax = 0; /* a held coefficient's derivative is the slope at the edge, not a distance to go */
    for (size_t j = 0; j < k; j++)
        if (!held[j]) gmax = fmax(gmax, fabs(grad[j]));
    if (!infer) res->converged = gmax < 1e-3 * (double)m->n;
    res->diag.gradient_norm = gmax;
    res->diag.converged = res->converged;
    res->aic = 2.0 * (double)k - 2.0 * ll;
    res->bic = (double)k * log((double)m->n) - 2.0 * ll;
    if (!fill_coefficients(m, coef, cov, held, infer && res->diag.hessian_positive_definite, res)) goto nomem;
    if (infer && res->diag.hessian_positive_definite) {
        for (size_t j = 0; j < k; j++) /* a held coefficient is known: no variance, no covariance */
            for (size_t i = 0; held[j] && i < k; i++) cov[i * k + j] = cov[j * k + i] = 0;
    }
    if (infer >= 2 && res->converged) {
        int better_found = 0;
        if ((st = fill_profiles(m, lik, coef, grad, ll, info, held, res, start, &better_found, err))) goto fail;
        if (better_found && restarts < 2) {
            restarts++;
            bl_fit_result_clear(res);
            goto again;
        }
    }
    if (infer && res->diag.hessian_positive_definite) {
        res->covariance = cov;
        cov = NULL;
    }
    if (coef_out) memcpy(coef_out, coef, k * sizeof *coef_out);
    res->diag.evaluations = bl_likelihood_evaluations(lik) - evals0;
    res->diag.seconds = now_seconds() - t_start;
    st = BL_OK;
    goto done;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory while fitting", m->name);
fail:
    bl_fit_result_clear(res);
done:
    free(tr);
    free(start);
    free(coef);
    free(grad);
    free(info);
    free(cov);
    free(lls);
    free(wcoef);
    free(wgrad);
    free(cache_x);
    free(cache_g);
    free(held);
    gsl_rng_free(rng);
    return st;
}

int bl_fit_default_starts(const bl_fit_options *opt) { return opt && opt->starts > 0 ? opt->starts : 3; }

/* Estimates of intercept-only identity-link parameters within 1e-3 of the edge of their range
 * (drift_sd, start_range, nondecision_range, contamination at 0; start at 0 or 1), listed into buf. */
static int edge_estimates(const bl_model *m, const bl_fit_result *r, char *buf, size_t n)
{
    int found = 0;
    buf[0] = '\0';
    for (size_t j = 0; j < r->n_coef; j++) {
        const bl_coef_info *ci = &m->coef[j];
        const bl_param_design *d = &m->par[ci->param];
        if (ci->slope >= 0 || d->n_slopes || d->link != BL_LINK_IDENTITY) continue;
        double b = r->coef[j].estimate;
        int edge = 0;
        switch (ci->param) {
        case BL_DRIFT_SD:
        case BL_START_RANGE:
        case BL_NONDECISION_RANGE:
        case BL_CONTAMINATION: edge = b < 1e-3; break;
        case BL_START: edge = b < 1e-3 || b > 1 - 1e-3; break;
        default: break;
        }
        if (!edge) continue;
        size_t len = strlen(buf);
        snprintf(buf + len, n - len, "%s%s%s%s (%.3g)", found ? ", " : "", bl_param_name(ci->param),
                 ci->level[0] ? " " : "", ci->level, b);
        found = 1;
    }
    return found;
}

/* Intercept-only identity-link range parameters (drift_sd, start_range, nondecision_range,
 * contamination) whose 95% Wald interval reaches below 0, listed into buf: the estimate is near the
 * boundary of the parameter space, where the normal approximation behind the interval fails. */
static int wald_below_zero(const bl_model *m, const bl_fit_result *r, char *buf, size_t n)
{
    int found = 0;
    buf[0] = '\0';
    for (size_t j = 0; j < r->n_coef; j++) {
        const bl_coef_info *ci = &m->coef[j];
        const bl_param_design *d = &m->par[ci->param];
        if (ci->slope >= 0 || d->n_slopes || d->link != BL_LINK_IDENTITY) continue;
        if (ci->param != BL_DRIFT_SD && ci->param != BL_START_RANGE && ci->param != BL_NONDECISION_RANGE &&
            ci->param != BL_CONTAMINATION)
            continue;
        const bl_coefficient *c = &r->coef[j];
        if (!(c->ci_low < 0) || c->estimate < 1e-3) continue; /* at the edge: edge_estimates reports it */
        size_t len = strlen(buf);
        if (c->profiled)
            snprintf(buf + len, n - len, "%s%s%s%s (%.3g, Wald %.3g to %.3g, profile %.3g to %.3g)", found ? ", " : "",
                     bl_param_name(ci->param), ci->level[0] ? " " : "", ci->level, c->estimate, c->ci_low,
                     c->ci_high, c->profile_low, c->profile_high);
        else
            snprintf(buf + len, n - len, "%s%s%s%s (%.3g, interval %.3g to %.3g)", found ? ", " : "",
                     bl_param_name(ci->param), ci->level[0] ? " " : "", ci->level, c->estimate, c->ci_low,
                     c->ci_high);
        found = 1;
    }
    return found;
}

void bl_fit_warn(const bl_model *m, const char *participant, const bl_fit_result *r, bl_warnings *warn)
{
    char who[512], edge[512];
    if (participant) snprintf(who, sizeof who, "model '%s', participant '%s'", m->name, participant);
    else snprintf(who, sizeof who, "model '%s'", m->name);
    int at_edge = edge_estimates(m, r, edge, sizeof edge);
    if (!r->diag.hessian_positive_definite)
        bl_warnings_add(warn,
                        "%s: the observed information is not positive definite at the optimum; standard errors, "
                        "z, p and intervals are not reported%s%s",
                        who, at_edge ? "; at the edge of their range: " : "", at_edge ? edge : "");
    else if (!r->converged)
        bl_warnings_add(warn, "%s: did not converge (distance to the optimum %.3g standard errors, gradient %.3g)%s%s",
                        who, r->diag.newton_decrement, r->diag.gradient_norm,
                        at_edge ? "; the maximum lies on the edge of the range of: " : "", at_edge ? edge : "");
    else if (at_edge)
        bl_warnings_add(warn,
                        "%s: estimates at the edge of their range (Wald intervals unreliable there; the "
                        "profile-likelihood intervals in fits.json hold): %s",
                        who, edge);
    char wald[512];
    if (r->diag.hessian_positive_definite && wald_below_zero(m, r, wald, sizeof wald))
        bl_warnings_add(warn,
                        "%s: boundary estimates, Wald intervals reach below 0 (impossible values; the Wald "
                        "interval is not reliable near the edge of the range, the profile-likelihood one is): %s",
                        who, wald);
    if (r->diag.profile_restarts)
        bl_warnings_add(warn,
                        "%s: a profile-likelihood search found a higher likelihood than the optimiser's maximum "
                        "(a local maximum); the fit was restarted from there (%d time%s) and reports the higher one",
                        who, r->diag.profile_restarts, r->diag.profile_restarts == 1 ? "" : "s");
    else if (r->diag.starts_agreed < r->diag.starts)
        bl_warnings_add(warn, "%s: only %d of %d optimiser starts reached the best log-likelihood", who,
                        r->diag.starts_agreed, r->diag.starts);
}

bl_status bl_fit_model(const bl_model *m, const bl_fit_options *opt, const double *start, bl_fit_result *res,
                       bl_warnings *warn, bl_error *err)
{
    bl_gsl_guard();
    bl_likelihood *lik = NULL;
    bl_status st = bl_likelihood_create(m, opt ? opt->threads : 0, &lik, err);
    if (st) return st;
    if (opt) bl_likelihood_set_parallel(lik, opt->parallel_trials);
    st = bl_fit_core(m, lik, opt, bl_fit_default_starts(opt), start, opt && !opt->profiles ? 1 : 2, res, NULL, err);
    if (!st) bl_fit_warn(m, NULL, res, warn);
    bl_likelihood_destroy(lik);
    return st;
}

void bl_unit_set_free(bl_unit_set *u)
{
    for (size_t i = 0; i < u->n_units; i++) {
        bl_likelihood_destroy(u->liks ? u->liks[i] : NULL);
        bl_model_destroy(u->models ? u->models[i] : NULL);
        free(u->coef ? u->coef[i] : NULL);
    }
    free(u->models);
    free(u->liks);
    free(u->coef);
    memset(u, 0, sizeof *u);
}

/* Build one model for every unit (pooled: one unit; separate: one per participant with trials). */
bl_status bl_build_units(const bl_model_spec *spec, const bl_trials *trials, bl_participants_mode mode,
                         const bl_fit_options *opt, bl_unit_set *u, char ***unit_names, bl_warnings *warn,
                         bl_error *err)
{
    memset(u, 0, sizeof *u);
    size_t n_units = mode == BL_PARTICIPANTS_SEPARATE ? trials->n_participants : 1;
    u->models = calloc(n_units ? n_units : 1, sizeof *u->models);
    u->liks = calloc(n_units ? n_units : 1, sizeof *u->liks);
    u->coef = calloc(n_units ? n_units : 1, sizeof *u->coef);
    unsigned char *use = mode == BL_PARTICIPANTS_SEPARATE ? malloc(trials->n ? trials->n : 1) : NULL;
    if (unit_names) *unit_names = calloc(n_units ? n_units : 1, sizeof **unit_names);
    bl_status st = BL_OK;
    if (!u->models || !u->liks || !u->coef || (mode == BL_PARTICIPANTS_SEPARATE && !use) ||
        (unit_names && !*unit_names)) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto done;
    }
    for (size_t p = 0; p < n_units; p++) {
        if (use) {
            size_t n_kept = 0;
            for (size_t i = 0; i < trials->n; i++) {
                use[i] = trials->participant[i] == p;
                if (use[i] && !(trials->excluded && trials->excluded[i])) n_kept++;
            }
            if (n_kept == 0) {
                bl_warnings_add(warn, "model '%s': participant '%s' has no kept trials and is not fitted", spec->name,
                                trials->participants[p]);
                continue;
            }
        }
        bl_model *m = NULL;
        st = bl_model_build(spec, trials, use, &m, err);
        if (st) {
            if (use) {
                char msg[BL_ERROR_MESSAGE_MAX];
                snprintf(msg, sizeof msg, "%s", err ? err->message : "");
                bl_error_set(err, st, "participant '%s' (fitted separately): %s", trials->participants[p], msg);
            }
            goto done;
        }
        size_t i = u->n_units++;
        u->models[i] = m;
        if ((st = bl_likelihood_create(m, opt->threads, &u->liks[i], err))) goto done;
        bl_likelihood_set_parallel(u->liks[i], opt->parallel_trials);
        u->coef[i] = calloc(m->n_coef, sizeof(double));
        if (!u->coef[i]) {
            st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
            goto done;
        }
        if (unit_names && use) (*unit_names)[i] = trials->participants[p];
    }
    if (u->n_units == 0) st = bl_error_set(err, BL_ERR_MODEL, "model '%s': no trials to fit", spec->name);
done:
    free(use);
    if (st) {
        bl_unit_set_free(u);
        if (unit_names) {
            free(*unit_names);
            *unit_names = NULL;
        }
    }
    return st;
}
