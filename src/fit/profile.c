/* Profile-likelihood intervals of single coefficients (see profile.h; docs/models.md section 5).
 *
 * Each end is the root of r(b) = sqrt(2 (LL_max - LL_p(b))) = z (z = 1.959964, z^2 the chi-square(1)
 * 95% point), LL_p(b) the log-likelihood maximised over the other coefficients with coefficient j held
 * at b. r is close to linear in b (|b - estimate| / SE for a quadratic log-likelihood), so the search
 * starts at the Wald end, extrapolates through the estimate (r = 0 there), and ends by the secant rule
 * inside a bracket (bisection where a point is infeasible). Each profile point starts from the linear
 * prediction of the others given b (-I_RR^-1 I_Rj per unit of b, I the observed information) and
 * takes Newton steps with the analytic gradient on a curvature carried from point to point, refreshed
 * by differences of the gradient when it stops serving; others with a lower bound (contamination >= 0)
 * stay on it while the likelihood falls into the interior there (projected Newton on the free ones). */
#include "fit/profile.h"

#include <lapacke.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define PROFILE_Z 1.959963984540054 /* sqrt of the chi-square(1) 95% point 3.841459 */
#define PROFILE_R_TOL 1e-3          /* |r - z|: the statistic within 0.004 of its critical value */
#define PROFILE_DECREMENT2 1e-4     /* squared Newton decrement at a point: LL within ~5e-5 of its maximum */
#define PROFILE_MAX_ROOT_STEPS 40
#define PROFILE_MAX_NEWTON 40
#define PROFILE_REFRESH_AFTER 3 /* Newton steps on a carried curvature before refreshing it at the point */

typedef struct {
    bl_profile_problem *p;
    size_t j, m;             /* the profiled coefficient; m = k - 1 others */
    size_t *idx;             /* the others' indices */
    double *base, *cur;      /* m x m: I_RR at the estimate, and the curvature in use (positive definite) */
    double *base_f;          /* m x m: the Cholesky factor of base */
    double *sub;             /* m x m: the free block of cur, factored */
    double *slope;           /* m: the others' linear prediction per unit of b */
    double *c, *g, *ct, *gt; /* k: point, gradient, trial point, its gradient */
    double *rhs, *gp;        /* m, k */
    unsigned char *active;   /* m: held on its lower bound in this step */
    size_t *free_idx;        /* m: the others not held, in this step */
    double *trial;           /* m x m: a shifted curvature being tried */
    double se;               /* the coefficient's Wald SE from I (scale of the search) */
    double *last;            /* k: the profile point just computed */
    double *near_in, *near_out; /* k: the latest points inside and outside the interval on this side */
    double b_in, b_out;         /* their values of coefficient j (NAN: none yet) */
} profile_ws;

static double loglik(profile_ws *w, double *c, double *g)
{
    w->p->evaluations++;
    double ll = w->p->loglik(w->p->user, c, g);
    return isfinite(ll) ? ll : -INFINITY;
}

static double lower_of(const profile_ws *w, size_t i) { return w->p->lower ? w->p->lower[i] : -INFINITY; }

/* Cholesky factor of the symmetric m x m matrix f in place; 0 when not positive definite. Column-major
 * 'L' is the same storage as row-major 'U' for a symmetric matrix, and LAPACKE then calls LAPACK
 * directly: no transposed copy, so no allocation that could fail and change the path. */
static int factor(double *f, size_t m)
{
    if (m == 0) return 1;
    return LAPACKE_dpotrf(LAPACK_COL_MAJOR, 'L', (lapack_int)m, f, (lapack_int)m) == 0;
}

static void solve(const double *f, size_t m, double *rhs)
{
    if (m) LAPACKE_dpotrs(LAPACK_COL_MAJOR, 'L', (lapack_int)m, 1, f, (lapack_int)m, rhs, (lapack_int)m);
}

/* Minus the Hessian of the others at w->c (gradient w->g there) by forward differences of the analytic
 * gradient (m evaluations; Newton needs the curvature only roughly; backward beside a feasibility edge)
 * into w->cur, its diagonal raised (Levenberg) until it is positive definite: away from the estimate the
 * profile may curve the other way in some direction. 0 (w->cur unchanged) when no difference can be
 * taken. */
static int refresh_curvature(profile_ws *w)
{
    size_t m = w->m;
    double *h2 = w->sub; /* scratch until the step factors into it */
    for (size_t a = 0; a < m; a++) {
        size_t ia = w->idx[a];
        double ca = w->c[ia], h = 1e-5 * fmax(fabs(ca), 1e-2), lp = -INFINITY;
        /* forward, or backward beside a feasibility edge (not below a lower bound) */
        for (int side = 0; side < 2 && !isfinite(lp); side++) {
            if (side) h = -h;
            if (ca + h < lower_of(w, ia)) continue;
            w->c[ia] = ca + h;
            h = w->c[ia] - ca; /* the step actually represented */
            lp = loglik(w, w->c, w->gp);
            w->c[ia] = ca;
        }
        if (!isfinite(lp)) return 0;
        for (size_t b = 0; b < m; b++) h2[b * m + a] = -(w->gp[w->idx[b]] - w->g[w->idx[b]]) / h;
    }
    double dmax = 0;
    for (size_t a = 0; a < m; a++) {
        dmax = fmax(dmax, fabs(h2[a * m + a]));
        for (size_t b = a + 1; b < m; b++) h2[a * m + b] = h2[b * m + a] = 0.5 * (h2[a * m + b] + h2[b * m + a]);
    }
    if (!(dmax > 0) || !isfinite(dmax)) return 0;
    double *trial = w->trial;
    int ok = 0;
    for (double shift = 0; shift <= dmax && !ok; shift = shift > 0 ? shift * 10 : 1e-8 * dmax) {
        memcpy(trial, h2, m * m * sizeof *trial);
        for (size_t a = 0; a < m; a++) trial[a * m + a] += shift;
        if (factor(trial, m)) {
            memcpy(w->cur, h2, m * m * sizeof *w->cur);
            for (size_t a = 0; a < m; a++) w->cur[a * m + a] += shift;
            ok = 1;
        }
    }
    return ok;
}

/* The Newton step over the free others (w->rhs, 0 on the active ones) and its squared decrement; an
 * other is active when it sits on its lower bound and the likelihood falls into the interior there.
 * -1 when the free block of the curvature is not positive definite. */
static double newton_step(profile_ws *w)
{
    size_t m = w->m, nf = 0, *free_ = w->free_idx;
    for (size_t a = 0; a < m; a++) {
        size_t ia = w->idx[a];
        w->active[a] = w->c[ia] <= lower_of(w, ia) && w->g[ia] <= 0;
        if (!w->active[a]) free_[nf++] = a;
    }
    for (size_t x = 0; x < nf; x++)
        for (size_t y = 0; y < nf; y++) w->sub[x * nf + y] = w->cur[free_[x] * m + free_[y]];
    double dec2 = -1;
    if (factor(w->sub, nf)) {
        double *r = w->gp; /* scratch (k >= nf) */
        for (size_t x = 0; x < nf; x++) r[x] = w->g[w->idx[free_[x]]];
        solve(w->sub, nf, r);
        dec2 = 0;
        for (size_t a = 0; a < m; a++) w->rhs[a] = 0;
        for (size_t x = 0; x < nf; x++) {
            w->rhs[free_[x]] = r[x];
            dec2 += w->g[w->idx[free_[x]]] * r[x];
        }
    }
    return dec2;
}

/* The squared decrement of the gradient of the free others in the estimate's information (its
 * Cholesky factor w->base_f; the held others' gradient left out). */
static double base_decrement2(profile_ws *w)
{
    size_t m = w->m;
    for (size_t a = 0; a < m; a++) w->gp[a] = w->active[a] ? 0 : w->g[w->idx[a]];
    solve(w->base_f, m, w->gp);
    double d2 = 0;
    for (size_t a = 0; a < m; a++) d2 += (w->active[a] ? 0 : w->g[w->idx[a]]) * w->gp[a];
    return d2;
}

/* Newton steps over the others from w->c (log-likelihood ll, gradient w->g) until the squared decrement
 * is below PROFILE_DECREMENT2, each step projected onto the lower bounds and shortened until the
 * likelihood rises. The curvature in use is refreshed at the point when `fresh` is set, every
 * PROFILE_REFRESH_AFTER steps, and when a step fails. Returns the final log-likelihood. */
static double maximise_others(profile_ws *w, double ll, int fresh)
{
    size_t k = w->p->k, m = w->m;
    int refreshed = 0, since = 0; /* steps since the curvature was last refreshed */
    for (int it = 0; it < PROFILE_MAX_NEWTON; it++, since++) {
        if ((fresh && it == 0) || since == PROFILE_REFRESH_AFTER) {
            refreshed = 1;
            since = 0;
            refresh_curvature(w);
        }
        double dec2 = newton_step(w);
        if (dec2 >= 0 && dec2 < PROFILE_DECREMENT2) {
            /* small in the curvature in use; a stale or heavily shifted one can say so far from the
             * maximum, so the gradient must be small in the estimate's standard-error units too */
            if (base_decrement2(w) < PROFILE_DECREMENT2) break;
            if (since == 0 && refreshed) memcpy(w->cur, w->base, m * m * sizeof *w->cur);
            else {
                refreshed = 1;
                since = -1;
                if (!refresh_curvature(w)) memcpy(w->cur, w->base, m * m * sizeof *w->cur);
            }
            dec2 = newton_step(w);
        }
        int accepted = 0;
        for (double t = 1.0; dec2 >= 0 && t > 1e-3 && !accepted; t *= 0.5) {
            memcpy(w->ct, w->c, k * sizeof *w->ct);
            for (size_t a = 0; a < m; a++) {
                size_t ia = w->idx[a];
                w->ct[ia] = fmax(w->ct[ia] + t * w->rhs[a], lower_of(w, ia));
            }
            double lt = loglik(w, w->ct, w->gt);
            if (lt > ll) {
                accepted = 1;
                ll = lt;
                memcpy(w->c, w->ct, k * sizeof *w->c);
                memcpy(w->g, w->gt, k * sizeof *w->g);
            }
        }
        if (accepted) continue;
        if (refreshed && since == 0) break; /* no rise even along the point's own curvature */
        refreshed = 1;
        since = -1;
        if (!refresh_curvature(w)) break;
    }
    return ll;
}

/* A start for the others at b: the linear prediction from `from`, on the lower bounds, shortened toward
 * `from` while infeasible. Returns its log-likelihood (gradient in w->g), -INFINITY when none is feasible. */
static double start_from(profile_ws *w, const double *from, double b)
{
    size_t k = w->p->k, m = w->m;
    static const double shrink[] = {1.0, 0.5, 0.25, 0.0};
    double ll = -INFINITY;
    for (size_t s = 0; s < sizeof shrink / sizeof *shrink && !isfinite(ll); s++) {
        memcpy(w->c, from, k * sizeof *w->c);
        w->c[w->j] = b;
        for (size_t a = 0; a < m; a++) {
            size_t ia = w->idx[a];
            w->c[ia] = fmax(w->c[ia] + shrink[s] * (b - from[w->j]) * w->slope[a], lower_of(w, ia));
        }
        ll = loglik(w, w->c, w->g);
    }
    return ll;
}

/* LL maximised over the others with coefficient j at b (-INFINITY when no feasible start was found).
 * Starts from the nearest of the side's latest inside and outside points (then the other, then the
 * estimate): a far point may lie where these values of the others are infeasible. */
static double profile_point(profile_ws *w, double b)
{
    const double *est = w->p->estimate;
    const double *cand[3];
    size_t nc = 0;
    double din = isnan(w->b_in) ? INFINITY : fabs(b - w->b_in), dout = isnan(w->b_out) ? INFINITY : fabs(b - w->b_out);
    if (din <= dout) {
        if (isfinite(din)) cand[nc++] = w->near_in;
        if (isfinite(dout)) cand[nc++] = w->near_out;
    } else {
        cand[nc++] = w->near_out;
        if (isfinite(din)) cand[nc++] = w->near_in;
    }
    cand[nc++] = est;
    double ll = -INFINITY;
    for (size_t i = 0; i < nc && !isfinite(ll); i++) ll = start_from(w, cand[i], b);
    if (!isfinite(ll)) return -INFINITY;
    ll = maximise_others(w, ll, 0);
    memcpy(w->last, w->c, w->p->k * sizeof *w->last);
    if (ll > w->p->ll_max + BL_PROFILE_BETTER) { /* the estimate is not the maximum: stop, report it */
        w->p->found_better = 1;
        w->p->better_ll = ll;
        if (w->p->better) memcpy(w->p->better, w->c, w->p->k * sizeof *w->p->better);
    }
    return ll;
}

/* The point just computed becomes the side's latest inside (r < z) or outside point. */
static void remember(profile_ws *w, double b, int inside)
{
    memcpy(inside ? w->near_in : w->near_out, w->last, w->p->k * sizeof *w->last);
    if (inside) w->b_in = b;
    else w->b_out = b;
}

/* An end candidate checked with the curvature of its own point (a carried one may be stale and stop
 * Newton early): further steps from w->last; returns the confirmed log-likelihood. */
static double confirm_point(profile_ws *w, double ll)
{
    size_t k = w->p->k;
    memcpy(w->c, w->last, k * sizeof *w->c);
    double l0 = loglik(w, w->c, w->g);
    if (!isfinite(l0)) return ll;
    double l1 = maximise_others(w, l0, 1);
    memcpy(w->last, w->c, k * sizeof *w->last);
    if (l1 > w->p->ll_max + BL_PROFILE_BETTER) {
        w->p->found_better = 1;
        w->p->better_ll = l1;
        if (w->p->better) memcpy(w->p->better, w->c, k * sizeof *w->p->better);
    }
    return fmax(l1, ll);
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
    w->b_in = w->b_out = NAN;
    memcpy(w->cur, w->base, w->m * w->m * sizeof *w->cur);
    double in_b = b0, in_r = 0, out_b = NAN, out_r = INFINITY;
    double b = b0 + side * z * w->se, prev_b = b0, prev_r = 0;
    int inside_run = 0, bisect_next = 0;
    for (int step = 0; step < PROFILE_MAX_ROOT_STEPS; step++) {
        int at_limit = side < 0 && b <= limit;
        if (at_limit) b = limit;
        double ll = profile_point(w, b), r = signed_root(w, ll);
        if (w->p->found_better) return NAN;
        if (at_limit && r <= z) return limit; /* more steps could only lower r */
        if (fabs(r - z) < PROFILE_R_TOL) {
            r = signed_root(w, confirm_point(w, ll));
            if (w->p->found_better) return NAN;
            if (fabs(r - z) < PROFILE_R_TOL) return b;
        }
        if (isfinite(r)) remember(w, b, r < z);
        double this_b = b, this_r = r;
        if (r < z) {
            in_b = b;
            in_r = r;
            /* Twice in a row the bracket shrank from inside only: the outer point may sit below the
             * profile (its maximisation, started further away, found a lower local maximum; a profile
             * value is a maximum, so any evaluation is a lower bound). Redo it from this nearby point. */
            if (!isnan(out_b) && ++inside_run >= 2) {
                inside_run = 0;
                double r2 = signed_root(w, profile_point(w, out_b));
                if (w->p->found_better) return NAN;
                if (r2 < out_r) out_r = r2;
                if (isfinite(r2)) remember(w, out_b, r2 < z);
                if (out_r < z) { /* inside after all: extrapolate again */
                    in_b = out_b;
                    in_r = out_r;
                    out_b = NAN;
                    out_r = INFINITY;
                } else
                    bisect_next = 1; /* still outside: halve the bracket rather than creep along it */
                this_b = in_b;
                this_r = in_r;
            }
        } else {
            out_b = b;
            out_r = r;
            inside_run = 0;
        }
        double width = fabs(out_b - in_b);
        if (!isnan(out_b)) {
            /* located to 1e-6 SE: a cliff (the profile jumps past z at a feasibility edge) ends here too */
            if (width < 1e-6 * w->se) return in_b;
            /* secant through the last two points when it lands inside the bracket (r is smooth and
             * nearly linear), else the secant of the bracket's ends; bisection beside an infeasible end */
            double next = NAN;
            if (isfinite(prev_r) && isfinite(r) && r != prev_r) next = b + (z - r) * (b - prev_b) / (r - prev_r);
            if (bisect_next) next = 0.5 * (in_b + out_b);
            bisect_next = 0;
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
    free(w->sub);
    free(w->active);
    free(w->free_idx);
    free(w->base_f);
    free(w->trial);
    free(w->slope);
    free(w->c);
    free(w->g);
    free(w->ct);
    free(w->gt);
    free(w->rhs);
    free(w->gp);
    free(w->last);
    free(w->near_in);
    free(w->near_out);
}

bl_status bl_profile_interval(bl_profile_problem *p, size_t j, double lower_limit, double *low, double *high,
                              bl_error *err)
{
    *low = *high = NAN;
    size_t k = p->k, m = k - 1;
    size_t mm = m ? m : 1;
    profile_ws w = {.p = p, .j = j, .m = m, .se = NAN, .b_in = NAN, .b_out = NAN};
    w.idx = malloc(mm * sizeof *w.idx);
    w.base = malloc(mm * mm * sizeof *w.base);
    w.cur = malloc(mm * mm * sizeof *w.cur);
    w.sub = malloc(mm * mm * sizeof *w.sub);
    w.active = malloc(mm);
    w.free_idx = malloc(mm * sizeof *w.free_idx);
    w.trial = malloc(mm * mm * sizeof *w.trial);
    w.base_f = malloc(mm * mm * sizeof *w.base_f);
    w.slope = malloc(mm * sizeof *w.slope);
    w.rhs = malloc(mm * sizeof *w.rhs);
    double **kv[] = {&w.c, &w.g, &w.ct, &w.gt, &w.gp, &w.last, &w.near_in, &w.near_out};
    int ok = w.idx && w.base && w.cur && w.sub && w.active && w.free_idx && w.trial && w.base_f && w.slope && w.rhs;
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
    memcpy(w.base_f, w.base, m * m * sizeof *w.base_f);
    if (factor(w.base_f, m)) {
        /* slope = -I_RR^-1 I_Rj; the SE of b_j is 1 / sqrt(I_jj - I_jR I_RR^-1 I_Rj) */
        for (size_t a = 0; a < m; a++) w.slope[a] = -inf[w.idx[a] * k + j];
        solve(w.base_f, m, w.slope);
        double schur = inf[j * k + j];
        for (size_t a = 0; a < m; a++) schur += inf[j * k + w.idx[a]] * w.slope[a];
        if (schur > 0 && isfinite(schur)) {
            w.se = 1 / sqrt(schur);
            *low = find_end(&w, -1, lower_limit);
            if (!p->found_better) *high = find_end(&w, +1, -INFINITY);
        }
    }
    ws_free(&w);
    return BL_OK;
}
