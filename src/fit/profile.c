/* Profile-likelihood intervals of single coefficients (see profile.h; docs/models.md section 5).
 *
 * Each end is the root of r(b) = sqrt(2 (LL_max - LL_p(b))) = z (z = 1.959964, z^2 the chi-square(1)
 * 95% point), LL_p(b) the log-likelihood maximised over the other coefficients with coefficient j held
 * at b. r is close to linear in b (|b - estimate| / SE for a quadratic log-likelihood), so the search
 * starts at the Wald end, extrapolates through the estimate (r = 0 there), and ends by the secant rule
 * inside a bracket (bisection where a point is infeasible). Each profile point starts from the linear
 * prediction of the others given b (-I_RR^-1 I_Rj per unit of b, I the observed information) and
 * takes Newton steps on I_RR with the analytic gradient, refreshing I_RR by central differences at the
 * point when the estimate's curvature is too far from the point's to converge in a few steps. */
#include "fit/profile.h"

#include <lapacke.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define PROFILE_Z 1.959963984540054 /* sqrt of the chi-square(1) 95% point 3.841459 */
#define PROFILE_R_TOL 1e-3          /* |r - z|: the deviance within 0.004 of its critical value */
#define PROFILE_DECREMENT2 1e-4     /* squared Newton decrement of a profile point: LL within ~5e-5, r within ~3e-5 */
#define PROFILE_MAX_ROOT_STEPS 40
#define PROFILE_MAX_NEWTON 40
#define PROFILE_REFRESH_AFTER 5 /* Newton steps on the estimate's information before refreshing it */

typedef struct {
    bl_profile_problem *p;
    size_t j, m;           /* the profiled coefficient; m = k - 1 others */
    size_t *idx;           /* the others' indices */
    double *base, *cur;    /* m x m Cholesky factors: I_RR at the estimate, and the one in use */
    double *slope;         /* m: the others' linear prediction per unit of b */
    double *c, *g, *ct, *gt; /* k: point, gradient, trial point, its gradient */
    double *rhs, *gp, *gm;   /* m, k, k */
    double se;               /* the coefficient's Wald SE from I (scale of the search) */
    double *last;            /* k: the last profile point found on this side (warm start) */
    int have_last;
} profile_ws;

static double loglik(profile_ws *w, double *c, double *g)
{
    w->p->evaluations++;
    double ll = w->p->loglik(w->p->user, c, g);
    return isfinite(ll) ? ll : -INFINITY;
}

/* Factor the others' block of the information (row-major m x m) held in f; 0 when not positive definite. */
static int factor(double *f, size_t m)
{
    if (m == 0) return 1;
    return LAPACKE_dpotrf(LAPACK_ROW_MAJOR, 'U', (lapack_int)m, f, (lapack_int)m) == 0;
}

static void solve(const double *f, size_t m, double *rhs)
{
    if (m) LAPACKE_dpotrs(LAPACK_ROW_MAJOR, 'U', (lapack_int)m, 1, f, (lapack_int)m, rhs, 1);
}

/* The others' block of minus the Hessian at w->c by central differences of the analytic gradient,
 * factored into w->cur. 0 when a step is infeasible or the block is not positive definite. */
static int refresh_curvature(profile_ws *w)
{
    size_t m = w->m;
    for (size_t a = 0; a < m; a++) {
        size_t ia = w->idx[a];
        double ca = w->c[ia], h = 1e-5 * fmax(fabs(ca), 1e-2);
        w->c[ia] = ca + h;
        double lp = loglik(w, w->c, w->gp);
        w->c[ia] = ca - h;
        double lm = loglik(w, w->c, w->gm);
        w->c[ia] = ca;
        if (!isfinite(lp) || !isfinite(lm)) return 0;
        for (size_t b = 0; b < m; b++) w->cur[b * m + a] = -(w->gp[w->idx[b]] - w->gm[w->idx[b]]) / (2 * h);
    }
    for (size_t a = 0; a < m; a++)
        for (size_t b = a + 1; b < m; b++)
            w->cur[a * m + b] = w->cur[b * m + a] = 0.5 * (w->cur[a * m + b] + w->cur[b * m + a]);
    return factor(w->cur, m);
}

/* LL maximised over the others with coefficient j at b (-INFINITY when no feasible point was found). */
static double profile_point(profile_ws *w, double b)
{
    size_t k = w->p->k, m = w->m;
    const double *est = w->p->estimate;
    double ll = -INFINITY;
    /* start: the linear prediction from the last point of this side (else from the estimate),
     * shortened toward that point while infeasible */
    const double *from = w->have_last ? w->last : est;
    static const double shrink[] = {1.0, 0.5, 0.25, 0.0};
    for (size_t s = 0; s < sizeof shrink / sizeof *shrink && !isfinite(ll); s++) {
        memcpy(w->c, from, k * sizeof *w->c);
        w->c[w->j] = b;
        for (size_t a = 0; a < m; a++) w->c[w->idx[a]] += shrink[s] * (b - from[w->j]) * w->slope[a];
        ll = loglik(w, w->c, w->g);
    }
    if (!isfinite(ll)) return -INFINITY;
    int refreshed = 0; /* w->cur: the curvature of the last point of this side, or the estimate's */
    for (int it = 0; it < PROFILE_MAX_NEWTON; it++) {
        if (it == PROFILE_REFRESH_AFTER && !refreshed) {
            refreshed = 1;
            if (!refresh_curvature(w)) memcpy(w->cur, w->base, m * m * sizeof *w->cur);
        }
        for (size_t a = 0; a < m; a++) w->rhs[a] = w->g[w->idx[a]];
        solve(w->cur, m, w->rhs);
        double dec2 = 0;
        for (size_t a = 0; a < m; a++) dec2 += w->g[w->idx[a]] * w->rhs[a];
        if (!(dec2 >= PROFILE_DECREMENT2)) break; /* converged (or nothing left to move) */
        int accepted = 0;
        for (double t = 1.0; t > 1e-3 && !accepted; t *= 0.5) {
            memcpy(w->ct, w->c, k * sizeof *w->ct);
            for (size_t a = 0; a < m; a++) w->ct[w->idx[a]] += t * w->rhs[a];
            double lt = loglik(w, w->ct, w->gt);
            if (lt > ll) {
                accepted = 1;
                ll = lt;
                memcpy(w->c, w->ct, k * sizeof *w->c);
                memcpy(w->g, w->gt, k * sizeof *w->g);
            }
        }
        if (!accepted) break;
    }
    memcpy(w->last, w->c, k * sizeof *w->last);
    w->have_last = 1;
    return ll;
}

static double signed_root(profile_ws *w, double ll)
{
    if (!isfinite(ll)) return INFINITY;
    return sqrt(2 * fmax(w->p->ll_max - ll, 0.0));
}

/* One end (side -1: lower, +1: upper). Returns the end or NAN. */
static double find_end(profile_ws *w, int side, double limit)
{
    double b0 = w->p->estimate[w->j], z = PROFILE_Z;
    if (side < 0 && b0 <= limit) return limit;
    w->have_last = 0;
    memcpy(w->cur, w->base, w->m * w->m * sizeof *w->cur);
    double in_b = b0, in_r = 0, out_b = NAN, out_r = INFINITY;
    double b = b0 + side * z * w->se, prev_b = b0, prev_r = 0;
    for (int step = 0; step < PROFILE_MAX_ROOT_STEPS; step++) {
        int at_limit = side < 0 && b <= limit;
        if (at_limit) b = limit;
        double r = signed_root(w, profile_point(w, b));
        if (at_limit && r <= z) return limit;
        if (fabs(r - z) < PROFILE_R_TOL) return b;
        double this_b = b, this_r = r;
        if (r < z) {
            in_b = b;
            in_r = r;
        } else {
            out_b = b;
            out_r = r;
        }
        double width = fabs(out_b - in_b);
        if (!isnan(out_b)) {
            if (width < 1e-10 * (fabs(b0) + w->se)) return 0.5 * (in_b + out_b);
            /* secant through the last two points when it lands inside the bracket (r is smooth and
             * nearly linear), else the secant of the bracket's ends; bisection beside an infeasible end */
            double next = NAN;
            if (isfinite(prev_r) && isfinite(r) && r != prev_r) next = b + (z - r) * (b - prev_b) / (r - prev_r);
            if (!(next > fmin(in_b, out_b) && next < fmax(in_b, out_b)))
                next = isfinite(out_r) ? in_b + (z - in_r) / (out_r - in_r) * (out_b - in_b) : 0.5 * (in_b + out_b);
            b = next;
        } else {
            /* extrapolate through the estimate (r = 0 there), a little beyond to form a bracket */
            double dist = fabs(in_b - b0);
            double next = in_r > 0.05 * z ? dist * z / in_r * 1.02 : 4 * dist;
            if (next > 1e4 * w->se + 1e4 * fabs(b0)) return NAN; /* flat: no end in reach */
            b = b0 + side * next;
        }
        prev_b = this_b;
        prev_r = this_r;
    }
    return NAN;
}

static void ws_free(profile_ws *w)
{
    free(w->idx);
    free(w->base);
    free(w->cur);
    free(w->slope);
    free(w->c);
    free(w->g);
    free(w->ct);
    free(w->gt);
    free(w->rhs);
    free(w->gp);
    free(w->gm);
    free(w->last);
}

bl_status bl_profile_interval(bl_profile_problem *p, size_t j, double lower_limit, double *low, double *high,
                              bl_error *err)
{
    *low = *high = NAN;
    size_t k = p->k, m = k - 1;
    size_t mm = m ? m : 1;
    profile_ws w = {p, j, m, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NAN, NULL, 0};
    w.idx = malloc(mm * sizeof *w.idx);
    w.base = malloc(mm * mm * sizeof *w.base);
    w.cur = malloc(mm * mm * sizeof *w.cur);
    w.slope = malloc(mm * sizeof *w.slope);
    w.rhs = malloc(mm * sizeof *w.rhs);
    double **kv[] = {&w.c, &w.g, &w.ct, &w.gt, &w.gp, &w.gm, &w.last};
    int ok = w.idx && w.base && w.cur && w.slope && w.rhs;
    for (size_t i = 0; i < sizeof kv / sizeof *kv; i++) ok &= (*kv[i] = malloc(k * sizeof **kv[i])) != NULL;
    if (!ok) {
        ws_free(&w);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory for a profile-likelihood interval");
    }
    for (size_t i = 0, a = 0; i < k; i++)
        if (i != j) w.idx[a++] = i;
    const double *inf = p->info;
    for (size_t a = 0; a < m; a++)
        for (size_t b = 0; b < m; b++) w.base[a * m + b] = inf[w.idx[a] * k + w.idx[b]];
    if (factor(w.base, m)) {
        /* slope = -I_RR^-1 I_Rj; the SE of b_j is 1 / sqrt(I_jj - I_jR I_RR^-1 I_Rj) */
        for (size_t a = 0; a < m; a++) w.slope[a] = -inf[w.idx[a] * k + j];
        solve(w.base, m, w.slope);
        double schur = inf[j * k + j];
        for (size_t a = 0; a < m; a++) schur += inf[j * k + w.idx[a]] * w.slope[a];
        if (schur > 0 && isfinite(schur)) {
            w.se = 1 / sqrt(schur);
            *low = find_end(&w, -1, lower_limit);
            *high = find_end(&w, +1, -INFINITY);
        }
    }
    ws_free(&w);
    return BL_OK;
}
