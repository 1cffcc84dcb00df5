/* Hierarchical fits: each participant's coefficients are the population's plus an offset for every
 * term that varies (`varies`), the offsets normal with a diagonal or unstructured covariance, and
 * the offsets integrated out of the likelihood (docs/methods.md, "Participants' spread").
 *
 * Parameterisation. Offsets u_j = L z_j with z_j standard normal; L is diagonal (the SDs, signed:
 * the likelihood is even in each, so the SD = 0 edge is an ordinary interior point) or
 * lower-triangular (correlated). Participant j's marginal likelihood is
 *     ln L_j = ln (2 pi)^(-q/2) Int exp(h_j(z)) dz,   h_j(z) = l_j(beta + Z L z) - z'z / 2,
 * with l_j the Wiener log-likelihood of j's trials. Laplace (Tierney & Kadane 1986): h_j(z^) - 1/2 ln
 * det H, H = -d2h/dz2 at the mode z^ (Newton; the Hessian of l_j along the effects by central
 * differences of the analytic gradient). Adaptive Gauss-Hermite (Pinheiro & Bates 1995; Liu &
 * Pierce 1994): nodes z^ + C y_k with C C' = H^-1; one node is the Laplace value.
 * The outer maximisation over (beta, L) runs BFGS on central differences of the summed marginal
 * log-likelihood, in units of the pooled fit's standard errors; participants are evaluated in
 * parallel and summed in participant order, so results do not depend on the thread count.
 */
#include "fit/hier.h"
#include "fit/fit_internal.h"
#include "design/model_internal.h"

#include "core/clock.h"
#include "core/strutil.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_integration.h>
#include <gsl/gsl_multimin.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#ifdef _OPENMP
#include <omp.h>
#endif

/* Central-difference step of the gradient along an effect (link scale). The gradient is accurate
 * to ~1e-12 relative, so the Hessian has ~1e-8 rounding and ~1e-8 truncation error. */
#define HIER_HESS_STEP 1e-4
/* A participant's mode is found when the squared Newton decrement is below this. */
#define HIER_MODE_TOL 1e-11
#define HIER_MODE_ITER 60
/* Outer finite-difference step, in pooled-SE units (x space). */
#define HIER_GRAD_STEP 1e-3
/* Second-difference step of the observed information, in x units. */
#define HIER_INFO_STEP 2e-2
#define HIER_OUTER_ITER 400
/* Marginal-likelihood evaluations one maximisation may spend (a fit that needs more is reported
 * not converged rather than running on). */
#define HIER_OUTER_BUDGET 5000
#define HIER_MAX_EFFECTS 12
#define Z975 1.959963984540054 /* standard normal 97.5% quantile */

typedef struct {
    bl_likelihood *lik;
    size_t n_trials;
    size_t *trials; /* used-trial indices of the model */
    double *z;      /* conditional mode of the standardised effects (warm start), q */
    double *theta, *grad, *gp, *gm, *tmp;
    double *terms; /* n_grid: the log terms of the quadrature sum */
    double *K;     /* q x p: the Hessian of l along each effect (participant_hessian) */
    double *th;    /* p: a differenced point (participant_gradient) */
    double G[HIER_MAX_EFFECTS * HIER_MAX_EFFECTS], H[HIER_MAX_EFFECTS * HIER_MAX_EFFECTS];
    double R[HIER_MAX_EFFECTS * HIER_MAX_EFFECTS]; /* Cholesky factor of H at the mode */
    double ll_cond;                                /* l_j at the mode */
    double m;                                      /* ln L_j */
} hier_part;

struct bl_hier {
    const bl_model *m;
    size_t p, q, n_lambda, J, d; /* d = p + n_lambda */
    bl_hier_effect *eff;
    int correlated;
    hier_part *part;
    char **names;
    size_t n_grid;
    double *grid_y, *grid_logw; /* nodes (n_grid x q, already scaled by sqrt 2) and log weights */
    int threads;
    size_t evaluations;
    /* outer state: psi = origin + scale .* x on the free components; the rest held at psi0 */
    double *psi0, *scale;
    size_t *free_idx, n_free;
    double *info_hat, *psi_hat; /* observed information (x units) at the estimate psi_hat, for profiles */
    double *psi_est;            /* the estimate, for refits (permutation tests) */
    double *pooled_coef;        /* the pooled fit's coefficients (feasible with no spread) */
    double *per_part;           /* J x d: each participant's gradient, summed in participant order */
    int nomem;                  /* an allocation failed on a path without a status: the fit reports it */
};

/* ---- small dense algebra (q <= HIER_MAX_EFFECTS) ---- */

/* Lower Cholesky factor of the q x q matrix a (row-major) into r; 0 when not positive definite. */
static int chol(const double *a, size_t q, double *r)
{
    for (size_t i = 0; i < q; i++)
        for (size_t j = 0; j <= i; j++) {
            double s = a[i * q + j];
            for (size_t k = 0; k < j; k++) s -= r[i * q + k] * r[j * q + k];
            if (i == j) {
                if (!(s > 0) || !isfinite(s)) return 0;
                r[i * q + i] = sqrt(s);
            } else {
                r[i * q + j] = s / r[j * q + j];
            }
        }
    for (size_t i = 0; i < q; i++)
        for (size_t j = i + 1; j < q; j++) r[i * q + j] = 0;
    return 1;
}

/* Solve (r r') x = b in place. */
static void chol_solve(const double *r, size_t q, double *b)
{
    for (size_t i = 0; i < q; i++) {
        for (size_t k = 0; k < i; k++) b[i] -= r[i * q + k] * b[k];
        b[i] /= r[i * q + i];
    }
    for (size_t i = q; i-- > 0;) {
        for (size_t k = i + 1; k < q; k++) b[i] -= r[k * q + i] * b[k];
        b[i] /= r[i * q + i];
    }
}

void bl_hier_lambda_to_l(const bl_hier *h, const double *lambda, double *L)
{
    size_t q = h->q;
    memset(L, 0, q * q * sizeof *L);
    if (!h->correlated) {
        for (size_t r = 0; r < q; r++) L[r * q + r] = lambda[r];
        return;
    }
    for (size_t r = 0, t = 0; r < q; r++)
        for (size_t c = 0; c <= r; c++) L[r * q + c] = lambda[t++];
}

/* ---- one participant ---- */

/* theta = beta + Z u with u = L z. */
static void participant_theta(const bl_hier *h, const double *beta, const double *L, const double *z, double *theta)
{
    memcpy(theta, beta, h->p * sizeof *theta);
    for (size_t r = 0; r < h->q; r++) {
        double u = 0;
        for (size_t c = 0; c < h->q; c++) u += L[r * h->q + c] * z[c];
        for (size_t i = 0; i < h->eff[r].n; i++) theta[h->eff[r].coef[i]] += u;
    }
}

/* h(z) and its gradient gz = L' Z' g - z; theta and grad left at z. */
static double participant_h(const bl_hier *h, hier_part *pp, const double *beta, const double *L, const double *z,
                            double *gz)
{
    participant_theta(h, beta, L, z, pp->theta);
    double ll = bl_likelihood_eval(pp->lik, pp->theta, gz ? pp->grad : NULL);
    if (!isfinite(ll)) return -INFINITY;
    double zz = 0;
    for (size_t c = 0; c < h->q; c++) zz += z[c] * z[c];
    if (gz) {
        double zg[HIER_MAX_EFFECTS];
        for (size_t r = 0; r < h->q; r++) {
            zg[r] = 0;
            for (size_t i = 0; i < h->eff[r].n; i++) zg[r] += pp->grad[h->eff[r].coef[i]];
        }
        for (size_t c = 0; c < h->q; c++) {
            gz[c] = -z[c];
            for (size_t r = 0; r < h->q; r++) gz[c] += L[r * h->q + c] * zg[r];
        }
    }
    pp->ll_cond = ll;
    return ll - 0.5 * zz;
}

/* K = (d2 l / dtheta2) Z (p x q, stored by effect: K[r * p + m]) at pp->theta by central differences
 * of the analytic gradient (one-sided, from pp->grad at theta, when a side is infeasible: the
 * nondecision time can sit within a step of the fastest RT); G = Z' K; H = I - L' G L. Returns 0 when
 * neither side is feasible. */
static int participant_hessian(const bl_hier *h, hier_part *pp, const double *L)
{
    size_t q = h->q, p = h->p;
    memcpy(pp->tmp, pp->theta, p * sizeof *pp->tmp);
    for (size_t r = 0; r < q; r++) {
        const bl_hier_effect *e = &h->eff[r];
        for (size_t i = 0; i < e->n; i++) pp->tmp[e->coef[i]] += HIER_HESS_STEP;
        double lp = bl_likelihood_eval(pp->lik, pp->tmp, pp->gp);
        for (size_t i = 0; i < e->n; i++) pp->tmp[e->coef[i]] -= 2 * HIER_HESS_STEP;
        double lm = bl_likelihood_eval(pp->lik, pp->tmp, pp->gm);
        for (size_t i = 0; i < e->n; i++) pp->tmp[e->coef[i]] = pp->theta[e->coef[i]];
        double *k = pp->K + r * p;
        if (isfinite(lp) && isfinite(lm))
            for (size_t m = 0; m < p; m++) k[m] = (pp->gp[m] - pp->gm[m]) / (2 * HIER_HESS_STEP);
        else if (isfinite(lp))
            for (size_t m = 0; m < p; m++) k[m] = (pp->gp[m] - pp->grad[m]) / HIER_HESS_STEP;
        else if (isfinite(lm))
            for (size_t m = 0; m < p; m++) k[m] = (pp->grad[m] - pp->gm[m]) / HIER_HESS_STEP;
        else return 0;
        for (size_t s = 0; s < q; s++) {
            double d = 0;
            for (size_t i = 0; i < h->eff[s].n; i++) d += k[h->eff[s].coef[i]];
            pp->G[s * q + r] = d;
        }
    }
    for (size_t r = 0; r < q; r++)
        for (size_t s = 0; s < r; s++)
            pp->G[r * q + s] = pp->G[s * q + r] = 0.5 * (pp->G[r * q + s] + pp->G[s * q + r]);
    for (size_t a = 0; a < q; a++)
        for (size_t b = 0; b < q; b++) {
            double v = a == b ? 1.0 : 0.0;
            for (size_t r = 0; r < q; r++)
                for (size_t s = 0; s < q; s++) v -= L[r * q + a] * pp->G[r * q + s] * L[s * q + b];
            pp->H[a * q + b] = v;
        }
    return 1;
}

static int participant_marginal_from(const bl_hier *h, hier_part *pp, const double *beta, const double *L);

/* The conditional mode z^ (Newton with step halving, from the warm start; once more from no offset
 * when that fails, so that a point's value does not depend on the path that led to it beside a
 * feasibility edge) and ln L_j. Returns 0 when no feasible mode is found. */
static int participant_marginal(const bl_hier *h, hier_part *pp, const double *beta, const double *L)
{
    if (participant_marginal_from(h, pp, beta, L)) return 1;
    int warm = 0;
    for (size_t c = 0; c < h->q; c++) warm = warm || pp->z[c] != 0;
    if (!warm) return 0;
    memset(pp->z, 0, h->q * sizeof *pp->z);
    return participant_marginal_from(h, pp, beta, L);
}

static int participant_marginal_from(const bl_hier *h, hier_part *pp, const double *beta, const double *L)
{
    size_t q = h->q;
    double *z = pp->z, gz[HIER_MAX_EFFECTS], step[HIER_MAX_EFFECTS], zn[HIER_MAX_EFFECTS];
    double f = participant_h(h, pp, beta, L, z, gz);
    if (!isfinite(f)) {
        /* The warm start left the feasible region (e.g. nondecision above this participant's fastest
         * RT): try no offset, then the warm start's direction further out (a participant whose mode
         * lies beyond the population value on the feasible side). */
        double warm[HIER_MAX_EFFECTS];
        memcpy(warm, z, q * sizeof *warm);
        static const double scale[] = {0, 1.5, 2, 3, 5, 8};
        for (size_t k = 0; k < sizeof scale / sizeof *scale && !isfinite(f); k++) {
            for (size_t c = 0; c < q; c++) z[c] = scale[k] * warm[c];
            f = participant_h(h, pp, beta, L, z, gz);
        }
        /* then each effect on its own, either way, a growing number of SDs (the population value can be
         * beyond this participant's edge, e.g. a nondecision time above their fastest RT) */
        static const double sds[] = {0.5, 1, 2, 4};
        for (size_t r = 0; r < q && !isfinite(f); r++)
            for (size_t k = 0; k < 2 * sizeof sds / sizeof *sds && !isfinite(f); k++) {
                memset(z, 0, q * sizeof *z);
                z[r] = (k % 2 ? 1 : -1) * sds[k / 2];
                f = participant_h(h, pp, beta, L, z, gz);
            }
        if (!isfinite(f)) return 0;
    }
    int found = 0;
    for (int it = 0; it < HIER_MODE_ITER && !found; it++) {
        if (!participant_hessian(h, pp, L)) return 0;
        double shift = 0;
        while (1) { /* Levenberg shift only while h is not concave here; the mode itself needs none */
            double a[HIER_MAX_EFFECTS * HIER_MAX_EFFECTS];
            memcpy(a, pp->H, q * q * sizeof *a);
            for (size_t c = 0; c < q; c++) a[c * q + c] += shift;
            if (chol(a, q, pp->R)) break;
            shift = shift > 0 ? 10 * shift : 1e-6;
            if (shift > 1e8) return 0;
        }
        memcpy(step, gz, q * sizeof *step);
        chol_solve(pp->R, q, step);
        double dec = 0;
        for (size_t c = 0; c < q; c++) dec += gz[c] * step[c];
        if (shift == 0 && dec < HIER_MODE_TOL) {
            found = 1;
            break;
        }
        double t = 1, fn = -INFINITY, gzn[HIER_MAX_EFFECTS];
        for (; t > 1e-10; t *= 0.5) {
            for (size_t c = 0; c < q; c++) zn[c] = z[c] + t * step[c];
            fn = participant_h(h, pp, beta, L, zn, gzn);
            if (isfinite(fn) && fn >= f - 1e-12) break;
        }
        if (!(t > 1e-10)) { /* no ascent left: the mode to working precision if H is positive definite */
            participant_h(h, pp, beta, L, z, gz);
            if (!participant_hessian(h, pp, L) || !chol(pp->H, q, pp->R)) return 0;
            found = 1;
            break;
        }
        memcpy(z, zn, q * sizeof *z);
        memcpy(gz, gzn, q * sizeof *gz);
        f = fn;
    }
    if (!found) return 0;
    double logdet_half = 0; /* ln det C = -ln det R */
    for (size_t c = 0; c < q; c++) logdet_half += log(pp->R[c * q + c]);
    if (h->n_grid <= 1) {
        pp->m = f - logdet_half;
        return 1;
    }
    /* Adaptive Gauss-Hermite: z_k = z^ + C y_k with C = R'^-1 (so C C' = H^-1). */
    double best = -INFINITY, *terms = pp->terms;
    for (size_t k = 0; k < h->n_grid; k++) {
        const double *y = h->grid_y + k * q;
        double c[HIER_MAX_EFFECTS];
        memcpy(c, y, q * sizeof *c);
        for (size_t i = q; i-- > 0;) { /* back-substitute R' c = y */
            for (size_t j = i + 1; j < q; j++) c[i] -= pp->R[j * q + i] * c[j];
            c[i] /= pp->R[i * q + i];
        }
        double yy = 0;
        for (size_t i = 0; i < q; i++) {
            zn[i] = z[i] + c[i];
            yy += y[i] * y[i];
        }
        double hk = participant_h(h, pp, beta, L, zn, NULL);
        terms[k] = h->grid_logw[k] + hk + 0.5 * yy;
        if (terms[k] > best) best = terms[k];
    }
    double s = 0;
    for (size_t k = 0; k < h->n_grid; k++) s += exp(terms[k] - best);
    participant_h(h, pp, beta, L, z, NULL); /* leave theta and ll_cond at the mode */
    pp->m = best + log(s) - logdet_half;
    return isfinite(pp->m);
}

/* Gradient of participant j's Laplace value ln L_j = h(z^) - 1/2 ln det H with respect to psi =
 * (beta, lambda), at the mode participant_marginal left (theta, grad, K, G, R there). With
 * A = L H^-1 L', s(theta) = tr(A Z' d2l Z) and c = ds/dtheta (third derivatives, as second
 * differences of the analytic gradient along the q columns w_k of Z L R'^-1):
 *   d/dbeta   = g + c/2 + K' A (Z'c) / 2
 *   d/dL_ab   = (Z'g)_a z_b + (G L H^-1)_ab + [ (Z'c)_a z_b + (Z'c)' L dz ] / 2,
 *               dz = H^-1 [ e_b (Z'g)_a + L' G e_a z_b ]
 * (docs/methods.md derives it). Returns 0 when a differenced point is infeasible. */
static int participant_gradient(const bl_hier *h, hier_part *pp, const double *L, double *out)
{
    size_t q = h->q, p = h->p;
    const double *g = pp->grad, *z = pp->z;
    double Zg[HIER_MAX_EFFECTS] = {0}, Zc[HIER_MAX_EFFECTS] = {0}, B[HIER_MAX_EFFECTS * HIER_MAX_EFFECTS];
    for (size_t a = 0; a < q; a++)
        for (size_t i = 0; i < h->eff[a].n; i++) Zg[a] += g[h->eff[a].coef[i]];
    for (size_t j = 0; j < q; j++) { /* row j of B = (R^-1 (row j of L)')' */
        double y[HIER_MAX_EFFECTS];
        for (size_t i = 0; i < q; i++) {
            y[i] = L[j * q + i];
            for (size_t k = 0; k < i; k++) y[i] -= pp->R[i * q + k] * y[k];
            y[i] /= pp->R[i * q + i];
        }
        memcpy(B + j * q, y, q * sizeof *y);
    }
    double *c = pp->tmp; /* p: reused, theta is kept in pp->theta */
    memset(c, 0, p * sizeof *c);
    double *th = pp->th;
    for (size_t k = 0; k < q; k++) {
        double wmax = 0;
        for (size_t r = 0; r < q; r++) wmax = fmax(wmax, fabs(B[r * q + k]));
        if (!(wmax > 0)) continue;
        double eps = 3e-4 / wmax; /* truncation (5th derivatives near the fastest RT) vs rounding / eps^2 */
        memcpy(th, pp->theta, p * sizeof *th);
        for (size_t r = 0; r < q; r++)
            for (size_t i = 0; i < h->eff[r].n; i++) th[h->eff[r].coef[i]] += eps * B[r * q + k];
        double lp = bl_likelihood_eval(pp->lik, th, pp->gp);
        memcpy(th, pp->theta, p * sizeof *th);
        for (size_t r = 0; r < q; r++)
            for (size_t i = 0; i < h->eff[r].n; i++) th[h->eff[r].coef[i]] -= eps * B[r * q + k];
        double lm = bl_likelihood_eval(pp->lik, th, pp->gm);
        if (isfinite(lp) && isfinite(lm)) {
            for (size_t m = 0; m < p; m++) c[m] += (pp->gp[m] - 2 * g[m] + pp->gm[m]) / (eps * eps);
            continue;
        }
        /* one side beyond a feasibility edge (nondecision at the fastest RT): the one-sided second
         * difference g(0) - 2 g(+-e) + g(+-2e), first order instead of second */
        double sgn = isfinite(lp) ? 1 : -1, *g1 = isfinite(lp) ? pp->gp : pp->gm;
        if (!isfinite(lp) && !isfinite(lm)) return 0;
        memcpy(th, pp->theta, p * sizeof *th);
        for (size_t r = 0; r < q; r++)
            for (size_t i = 0; i < h->eff[r].n; i++) th[h->eff[r].coef[i]] += 2 * sgn * eps * B[r * q + k];
        double *g2 = isfinite(lp) ? pp->gm : pp->gp; /* the infeasible side's buffer is free */
        if (!isfinite(bl_likelihood_eval(pp->lik, th, g2))) return 0;
        for (size_t m = 0; m < p; m++) c[m] += (g[m] - 2 * g1[m] + g2[m]) / (eps * eps);
    }
    for (size_t a = 0; a < q; a++)
        for (size_t i = 0; i < h->eff[a].n; i++) Zc[a] += c[h->eff[a].coef[i]];
    double A[HIER_MAX_EFFECTS * HIER_MAX_EFFECTS], v[HIER_MAX_EFFECTS];
    for (size_t a = 0; a < q; a++)
        for (size_t b = 0; b < q; b++) {
            double sum = 0;
            for (size_t k = 0; k < q; k++) sum += B[a * q + k] * B[b * q + k];
            A[a * q + b] = sum;
        }
    for (size_t a = 0; a < q; a++) {
        v[a] = 0;
        for (size_t b = 0; b < q; b++) v[a] += A[a * q + b] * Zc[b];
    }
    for (size_t m = 0; m < p; m++) {
        double kv = 0;
        for (size_t r = 0; r < q; r++) kv += pp->K[r * p + m] * v[r];
        out[m] = g[m] + 0.5 * c[m] + 0.5 * kv;
    }
    /* G L H^-1: row a solves H x = (G L)[a, :]' */
    double GLH[HIER_MAX_EFFECTS * HIER_MAX_EFFECTS];
    for (size_t a = 0; a < q; a++) {
        double row[HIER_MAX_EFFECTS];
        for (size_t b = 0; b < q; b++) {
            row[b] = 0;
            for (size_t k = 0; k < q; k++) row[b] += pp->G[a * q + k] * L[k * q + b];
        }
        chol_solve(pp->R, q, row);
        memcpy(GLH + a * q, row, q * sizeof *row);
    }
    for (size_t t = 0, a = 0; a < q; a++)
        for (size_t b = h->correlated ? 0 : a; b <= a; b++, t++) {
            double dz[HIER_MAX_EFFECTS];
            for (size_t i = 0; i < q; i++) { /* L' G e_a z_b + e_b (Z'g)_a */
                double sum = 0;
                for (size_t k = 0; k < q; k++) sum += L[k * q + i] * pp->G[k * q + a];
                dz[i] = sum * z[b] + (i == b ? Zg[a] : 0);
            }
            chol_solve(pp->R, q, dz);
            double cdt = Zc[a] * z[b];
            for (size_t r = 0; r < q; r++) {
                double Ldz = 0;
                for (size_t k = 0; k < q; k++) Ldz += L[r * q + k] * dz[k];
                cdt += Zc[r] * Ldz;
            }
            out[p + t] = Zg[a] * z[b] + GLH[a * q + b] + 0.5 * cdt;
        }
    return 1;
}

/* Summed marginal log-likelihood and its gradient (Laplace only; grad d values). Returns
 * -INFINITY when a participant has no mode, NAN when the gradient could not be formed (the caller
 * then differences the function). */
static double marginal_and_gradient(bl_hier *h, const double *psi, double *grad)
{
    double L[HIER_MAX_EFFECTS * HIER_MAX_EFFECTS];
    bl_hier_lambda_to_l(h, psi + h->p, L);
    h->evaluations++;
    int ok_all = 1, grad_all = 1;
    int nt = 1;
    double *per = h->per_part;
    if (!per) return NAN;
#ifdef _OPENMP
    nt = h->threads > 0 ? h->threads : omp_get_max_threads();
    if (nt < 1) nt = 1;
#pragma omp parallel for schedule(dynamic, 1) num_threads(nt) if (nt > 1 && h->J > 1) reduction(&& : ok_all, grad_all)
#endif
    for (size_t j = 0; j < h->J; j++) {
        hier_part *pp = &h->part[j];
        if (!participant_marginal(h, pp, psi, L)) {
            pp->m = -INFINITY;
            ok_all = 0;
        } else if (!participant_gradient(h, pp, L, per + j * h->d)) {
            grad_all = 0;
        }
    }
    (void)nt;
    double s = 0;
    if (ok_all) {
        for (size_t j = 0; j < h->J; j++) s += h->part[j].m;
        memset(grad, 0, h->d * sizeof *grad);
        for (size_t j = 0; j < h->J; j++)
            for (size_t c = 0; c < h->d; c++) grad[c] += per[j * h->d + c];
    }
    if (!ok_all || !isfinite(s)) return -INFINITY;
    if (!grad_all) return NAN;
    for (size_t c = 0; c < h->d; c++)
        if (!isfinite(grad[c])) return NAN;
    return s;
}

double bl_hier_marginal_gradient(bl_hier *h, const double *psi, double *grad)
{
    if (h->n_grid > 1) return NAN;
    return marginal_and_gradient(h, psi, grad);
}

/* Summed marginal log-likelihood at psi = (beta, lambda); -INFINITY when a participant has no mode. */
double bl_hier_marginal(bl_hier *h, const double *psi)
{
    double L[HIER_MAX_EFFECTS * HIER_MAX_EFFECTS];
    bl_hier_lambda_to_l(h, psi + h->p, L);
    h->evaluations++;
    int ok_all = 1;
    int nt = 1;
#ifdef _OPENMP
    nt = h->threads > 0 ? h->threads : omp_get_max_threads();
    if (nt < 1) nt = 1;
#pragma omp parallel for schedule(dynamic, 1) num_threads(nt) if (nt > 1 && h->J > 1) reduction(&& : ok_all)
#endif
    for (size_t j = 0; j < h->J; j++) {
        hier_part *pp = &h->part[j];
        if (!participant_marginal(h, pp, psi, L)) {
            pp->m = -INFINITY;
            ok_all = 0;
        }
    }
    (void)nt;
    if (!ok_all) return -INFINITY;
    double s = 0;
    for (size_t j = 0; j < h->J; j++) s += h->part[j].m;
    return isfinite(s) ? s : -INFINITY;
}

/* ---- setup ---- */

static bl_status add_effect(bl_hier *h, const bl_model_spec *spec, const bl_model *m, bl_param P, const char *entry,
                            unsigned char *taken, bl_error *err)
{
    const char *pname = bl_param_name(P);
    size_t len = strcspn(entry, ":");
    const char *level = entry[len] == ':' ? entry + len + 1 : NULL;
    int is_intercept = len == 9 && !strncmp(entry, "intercept", 9);
    bl_hier_effect *e = &h->eff[h->q];
    e->param = P;
    e->coef = calloc(bl_model_n_coef(m) ? bl_model_n_coef(m) : 1, sizeof *e->coef);
    e->label = bl_strdup(entry);
    if (!e->coef || !e->label) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    h->q++;
    char levels[400] = "";
    for (size_t j = 0; j < bl_model_n_coef(m); j++) {
        const bl_coef_info *ci = bl_model_coef(m, j);
        if (ci->param != P) continue;
        int term_ok = is_intercept ? ci->slope < 0
                                   : (ci->slope >= 0 && strlen(ci->term) == len && !strncmp(ci->term, entry, len));
        if (!term_ok) continue;
        size_t l = strlen(levels);
        snprintf(levels + l, sizeof levels - l, "%s'%s'", l ? ", " : "", ci->level);
        if (level && strcmp(ci->level, level)) continue;
        if (taken[j])
            return bl_error_set(err, BL_ERR_MODEL,
                                "model '%s': %s.varies: \"%s\" moves a coefficient (level '%s') that another entry "
                                "already lets vary",
                                spec->name, pname, entry, ci->level);
        taken[j] = 1;
        e->coef[e->n++] = j;
    }
    if (e->n) return BL_OK;
    if (level && levels[0])
        return bl_error_set(err, BL_ERR_MODEL, "model '%s': %s.varies: \"%s\": the term has no level '%s' (levels: %s)",
                            spec->name, pname, entry, level, levels);
    return bl_error_set(err, BL_ERR_MODEL, "model '%s': %s.varies: \"%s\" names no coefficient of the model",
                        spec->name, pname, entry);
}

static bl_status build_grid(bl_hier *h, int nodes, bl_error *err)
{
    size_t n = nodes > 1 ? (size_t)nodes : 1, total = 1;
    for (size_t r = 0; r < h->q; r++) total *= n;
    h->n_grid = n > 1 ? total : 1;
    h->grid_y = calloc(h->n_grid * (h->q ? h->q : 1), sizeof *h->grid_y);
    h->grid_logw = calloc(h->n_grid, sizeof *h->grid_logw);
    if (!h->grid_y || !h->grid_logw) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    if (n == 1) return BL_OK;
    /* Gauss-Hermite for the weight exp(-x^2) (GSL): y = sqrt(2) x, weights / sqrt(pi) for N(0,1). */
    gsl_integration_fixed_workspace *ws = gsl_integration_fixed_alloc(gsl_integration_fixed_hermite, n, 0.0, 1.0, 0.0,
                                                                      0.0);
    if (!ws) return bl_error_set(err, BL_ERR_NOMEM, "out of memory for the Gauss-Hermite nodes");
    const double *x = gsl_integration_fixed_nodes(ws), *w = gsl_integration_fixed_weights(ws);
    for (size_t k = 0; k < h->n_grid; k++) {
        size_t rest = k;
        double lw = 0;
        for (size_t r = 0; r < h->q; r++) {
            size_t i = rest % n;
            rest /= n;
            h->grid_y[k * h->q + r] = M_SQRT2 * x[i];
            lw += log(w[i]) - 0.5 * log(M_PI);
        }
        h->grid_logw[k] = lw;
    }
    gsl_integration_fixed_free(ws);
    return BL_OK;
}

static bl_status build_participants(bl_hier *h, const bl_model_spec *spec, const bl_trials *trials, bl_error *err)
{
    const bl_model *m = h->m;
    size_t np = trials->n_participants;
    size_t *count = calloc(np ? np : 1, sizeof *count);
    if (!count) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    for (size_t k = 0; k < m->n; k++) count[trials->participant[m->row[k]]]++;
    for (size_t i = 0; i < np; i++) h->J += count[i] > 0;
    bl_status st = BL_OK;
    if (h->J < 2) {
        st = bl_error_set(err, BL_ERR_MODEL,
                          "model '%s': fit.participants \"hierarchical\" needs trials from at least 2 participants "
                          "(this model has %zu); fit it \"pooled\"",
                          spec->name, h->J);
        goto done;
    }
    h->part = calloc(h->J, sizeof *h->part);
    h->names = calloc(h->J, sizeof *h->names);
    if (!h->part || !h->names) goto nomem;
    size_t p = h->p, q = h->q ? h->q : 1;
    for (size_t i = 0, j = 0; i < np; i++) {
        if (!count[i]) continue;
        hier_part *pp = &h->part[j];
        h->names[j++] = trials->participants[i];
        pp->trials = malloc(count[i] * sizeof *pp->trials);
        pp->z = calloc(q, sizeof *pp->z);
        pp->theta = malloc(p * sizeof(double));
        pp->grad = malloc(p * sizeof(double));
        pp->gp = malloc(p * sizeof(double));
        pp->gm = malloc(p * sizeof(double));
        pp->tmp = malloc(p * sizeof(double));
        pp->terms = malloc(h->n_grid * sizeof(double));
        pp->K = malloc(q * p * sizeof(double) + sizeof(double));
        pp->th = malloc(p * sizeof(double));
        if (!pp->trials || !pp->z || !pp->theta || !pp->grad || !pp->gp || !pp->gm || !pp->tmp || !pp->terms ||
            !pp->K || !pp->th)
            goto nomem;
        for (size_t k = 0; k < m->n; k++)
            if (trials->participant[m->row[k]] == i) pp->trials[pp->n_trials++] = k;
        if ((st = bl_likelihood_create_subset(m, pp->trials, pp->n_trials, &pp->lik, err))) goto done;
    }
    goto done;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
done:
    free(count);
    return st;
}

bl_status bl_hier_create(const bl_model_spec *spec, const bl_model *m, const bl_trials *trials, int quadrature,
                         int threads, bl_hier **out, bl_error *err)
{
    *out = NULL;
    bl_hier *h = calloc(1, sizeof *h);
    if (!h) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    h->m = m;
    h->p = bl_model_n_coef(m);
    h->threads = threads;
    h->correlated = spec->correlated;
    h->eff = calloc(HIER_MAX_EFFECTS, sizeof *h->eff);
    unsigned char *taken = calloc(h->p ? h->p : 1, 1);
    bl_status st = BL_OK;
    if (!h->eff || !taken) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto done;
    }
    static const char *const default_varies[] = {"intercept"};
    for (int P = 0; P < BL_NPARAM && !st; P++) {
        const bl_param_spec *ps = &spec->param[P];
        if (!bl_model_param_free(m, (bl_param)P)) continue;
        size_t n = ps->varies_given ? ps->n_varies : 1;
        for (size_t i = 0; i < n && !st; i++) {
            if (h->q == HIER_MAX_EFFECTS) {
                st = bl_error_set(err, BL_ERR_MODEL, "model '%s': more than %d terms vary by participant", spec->name,
                                  HIER_MAX_EFFECTS);
                break;
            }
            st = add_effect(h, spec, m, (bl_param)P, ps->varies_given ? ps->varies[i] : default_varies[0], taken, err);
        }
    }
    if (st) goto done;
    if (quadrature > 1 && h->q > 3) {
        st = bl_error_set(err, BL_ERR_MODEL,
                          "model '%s': fit.quadrature %d: Gauss-Hermite quadrature integrates at most 3 varying terms "
                          "(this model has %zu); use the Laplace approximation (quadrature 1) or fewer terms",
                          spec->name, quadrature, h->q);
        goto done;
    }
    h->n_lambda = h->correlated ? h->q * (h->q + 1) / 2 : h->q;
    h->d = h->p + h->n_lambda;
    if (!(h->per_part = malloc((h->d ? h->d : 1) * (trials->n_participants ? trials->n_participants : 1) *
                               sizeof *h->per_part))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto done;
    }
    if ((st = build_grid(h, quadrature, err))) goto done;
    st = build_participants(h, spec, trials, err);
done:
    free(taken);
    if (st) bl_hier_destroy(h);
    else *out = h;
    return st;
}

void bl_hier_destroy(bl_hier *h)
{
    if (!h) return;
    for (size_t r = 0; r < HIER_MAX_EFFECTS && h->eff; r++) {
        free(h->eff[r].coef);
        free(h->eff[r].label);
    }
    free(h->eff);
    for (size_t j = 0; h->part && j < h->J; j++) {
        hier_part *pp = &h->part[j];
        bl_likelihood_destroy(pp->lik);
        free(pp->trials);
        free(pp->z);
        free(pp->theta);
        free(pp->grad);
        free(pp->gp);
        free(pp->gm);
        free(pp->tmp);
        free(pp->terms);
        free(pp->K);
        free(pp->th);
    }
    free(h->part);
    free(h->names);
    free(h->grid_y);
    free(h->grid_logw);
    free(h->psi0);
    free(h->scale);
    free(h->free_idx);
    free(h->info_hat);
    free(h->psi_hat);
    free(h->psi_est);
    free(h->pooled_coef);
    free(h->per_part);
    free(h);
}

size_t bl_hier_effects(const bl_hier *h) { return h->q; }
int bl_hier_out_of_memory(const bl_hier *h) { return h->nomem; }
size_t bl_hier_participants(const bl_hier *h) { return h->J; }
size_t bl_hier_lambda_count(const bl_hier *h) { return h->n_lambda; }
bl_likelihood *bl_hier_participant_likelihood(const bl_hier *h, size_t j) { return h->part[j].lik; }
const char *bl_hier_effect_label(const bl_hier *h, size_t r, bl_param *param)
{
    *param = h->eff[r].param;
    return h->eff[r].label;
}
const size_t *bl_hier_participant_trials(const bl_hier *h, size_t j, size_t *n)
{
    *n = h->part[j].n_trials;
    return h->part[j].trials;
}

/* ---- outer maximisation: psi = psi0 + scale .* x on the free components ---- */

static void x_to_psi(const bl_hier *h, const gsl_vector *x, double *psi)
{
    memcpy(psi, h->psi0, h->d * sizeof *psi);
    for (size_t i = 0; i < h->n_free; i++) {
        size_t c = h->free_idx[i];
        psi[c] += h->scale[c] * gsl_vector_get(x, i);
    }
}

typedef struct {
    bl_hier *h;
    double *psi;
    double *grad_psi; /* d values (Laplace gradients), may be NULL */
    int differences;  /* 1: difference the value even where the analytic gradient exists */
} outer;

static double outer_f(const gsl_vector *x, void *params)
{
    outer *o = params;
    x_to_psi(o->h, x, o->psi);
    double mval = bl_hier_marginal(o->h, o->psi);
    return isfinite(mval) ? -mval : GSL_POSINF;
}

/* Central differences in x (one-sided where a side is infeasible). */
static void outer_df_differences(const gsl_vector *x, void *params, gsl_vector *g)
{
    outer *o = params;
    gsl_vector *xt = gsl_vector_alloc(x->size);
    if (!xt) {
        o->h->nomem = 1;
        gsl_vector_set_all(g, 0);
        return;
    }
    gsl_vector_memcpy(xt, x);
    double f0 = NAN;
    for (size_t i = 0; i < x->size; i++) {
        double xi = gsl_vector_get(x, i);
        gsl_vector_set(xt, i, xi + HIER_GRAD_STEP);
        double fp = outer_f(xt, o);
        gsl_vector_set(xt, i, xi - HIER_GRAD_STEP);
        double fm = outer_f(xt, o);
        gsl_vector_set(xt, i, xi);
        double gi;
        if (isfinite(fp) && isfinite(fm)) {
            gi = (fp - fm) / (2 * HIER_GRAD_STEP);
        } else {
            if (isnan(f0)) f0 = outer_f(x, o);
            gi = isfinite(fp) && isfinite(f0)   ? (fp - f0) / HIER_GRAD_STEP
                 : isfinite(fm) && isfinite(f0) ? (f0 - fm) / HIER_GRAD_STEP
                                                : 0;
        }
        gsl_vector_set(g, i, gi);
    }
    gsl_vector_free(xt);
}

/* -M and its gradient in x: the Laplace value's analytic gradient, else differences. */
static double outer_value_gradient(const gsl_vector *x, outer *o, gsl_vector *g)
{
    bl_hier *h = o->h;
    x_to_psi(h, x, o->psi);
    if (h->n_grid <= 1 && o->grad_psi && !o->differences) {
        double mval = marginal_and_gradient(h, o->psi, o->grad_psi);
        if (isfinite(mval)) {
            for (size_t i = 0; i < h->n_free; i++) {
                size_t c = h->free_idx[i];
                gsl_vector_set(g, i, -o->grad_psi[c] * h->scale[c]);
            }
            return -mval;
        }
        if (mval == -INFINITY) { /* infeasible: the line search backs off */
            gsl_vector_set_all(g, 0);
            return GSL_POSINF;
        }
    }
    outer_df_differences(x, o, g);
    return outer_f(x, o);
}

static void outer_df(const gsl_vector *x, void *params, gsl_vector *g) { outer_value_gradient(x, params, g); }

static void outer_fdf(const gsl_vector *x, void *params, double *f, gsl_vector *g)
{
    *f = outer_value_gradient(x, params, g);
}

/* Maximise over the free components from psi0 (BFGS, then Newton steps on the observed information
 * when info is given). *best receives the maximum, psi0 is moved to the optimum. Returns the number
 * of BFGS iterations; *gnorm the final max |gradient| in x units. */
static size_t outer_maximise(bl_hier *h, double tol, double *best, double *gnorm)
{
    size_t n = h->n_free;
    double *psi = malloc(h->d * sizeof *psi);
    *best = -INFINITY;
    *gnorm = NAN;
    double *grad_psi = malloc(h->d * sizeof *grad_psi);
    if (!psi || !grad_psi) {
        h->nomem = 1;
        free(psi);
        free(grad_psi);
        return 0;
    }
    outer o = {h, psi, grad_psi, 0};
    if (n == 0) {
        *best = bl_hier_marginal(h, h->psi0);
        *gnorm = 0;
        free(psi);
        free(grad_psi);
        return 0;
    }
    gsl_multimin_function_fdf fn = {outer_f, outer_df, outer_fdf, n, &o};
    gsl_vector *x = gsl_vector_calloc(n);
    gsl_multimin_fdfminimizer *s = gsl_multimin_fdfminimizer_alloc(gsl_multimin_fdfminimizer_vector_bfgs2, n);
    size_t it = 0, budget_end = h->evaluations + HIER_OUTER_BUDGET;
    if (!x || !s) {
        h->nomem = 1;
        goto done;
    }
    if (!isfinite(outer_f(x, &o))) goto done;
    /* Rounds: BFGS until the gradient test passes; a round that stalls (the line search finds no
     * descent, as beside a feasibility edge) is restarted from where it stopped, the second time with
     * differenced gradients; a round that gains nothing ends the search. */
    /* The best finite point seen is kept: a stalled line search can leave the minimiser on an infeasible
     * trial point. */
    double f_best = outer_f(x, &o), f_prev = f_best, gmax = NAN;
    gsl_vector *x_best = gsl_vector_alloc(n);
    if (!x_best) {
        h->nomem = 1;
        goto done;
    }
    gsl_vector_memcpy(x_best, x);
    for (int round = 0; round < 3; round++) {
        o.differences = round == 1;
        gsl_multimin_fdfminimizer_set(s, &fn, x, 0.5, 0.1);
        int passed = 0;
        for (; it < HIER_OUTER_ITER && h->evaluations < budget_end; it++) {
            int status = gsl_multimin_fdfminimizer_iterate(s);
            if (isfinite(s->f) && s->f <= f_best) {
                f_best = s->f;
                gsl_vector_memcpy(x_best, s->x);
                gmax = 0;
                for (size_t i = 0; i < n; i++) gmax = fmax(gmax, fabs(gsl_vector_get(s->gradient, i)));
            }
            if (status) break;
            if ((passed = gsl_multimin_test_gradient(s->gradient, tol) == GSL_SUCCESS)) break;
        }
        passed = passed || (isfinite(s->f) && gsl_multimin_test_gradient(s->gradient, tol) == GSL_SUCCESS);
        gsl_vector_memcpy(x, x_best);
        if (passed || (o.differences && !(f_best < f_prev - 1e-7)) || h->evaluations >= budget_end) break;
        f_prev = f_best;
    }
    x_to_psi(h, x_best, psi);
    *best = -f_best;
    if (isnan(gmax)) { /* no iteration improved on the start: its gradient */
        gsl_vector *gv = gsl_vector_alloc(n);
        if (gv) {
            outer_df(x_best, &o, gv);
            gmax = 0;
            for (size_t i = 0; i < n; i++) gmax = fmax(gmax, fabs(gsl_vector_get(gv, i)));
            gsl_vector_free(gv);
        } else {
            h->nomem = 1;
        }
    }
    *gnorm = gmax;
    memcpy(h->psi0, psi, h->d * sizeof *psi);
    gsl_vector_free(x_best);
done:
    if (s) gsl_multimin_fdfminimizer_free(s);
    if (x) gsl_vector_free(x);
    free(psi);
    free(grad_psi);
    return it;
}

/* The components the optimiser moves: all but those flagged in fixed (NULL: all). */
static void set_free(bl_hier *h, const unsigned char *fixed)
{
    h->n_free = 0;
    for (size_t c = 0; c < h->d; c++)
        if (!fixed || !fixed[c]) h->free_idx[h->n_free++] = c;
}

/* Observed information of the summed marginal log-likelihood in x units (second differences) at
 * psi0 over the free components: n x n into info. Returns 0 when a point is infeasible. */
static int outer_information_from_gradients(bl_hier *h, double *info, double e)
{
    size_t n = h->n_free, d = h->d;
    double *psi = malloc(d * sizeof *psi), *gp = malloc(d * sizeof *gp), *gm = malloc(d * sizeof *gm);
    double *g0 = malloc(d * sizeof *g0);
    int ok = psi && gp && gm && g0;
    if (!ok) h->nomem = 1;
    ok = ok && isfinite(marginal_and_gradient(h, h->psi0, g0));
    for (size_t i = 0; i < n && ok; i++) {
        size_t ci = h->free_idx[i];
        memcpy(psi, h->psi0, d * sizeof *psi);
        psi[ci] += e * h->scale[ci];
        int okp = isfinite(marginal_and_gradient(h, psi, gp));
        psi[ci] -= 2 * e * h->scale[ci];
        int okm = isfinite(marginal_and_gradient(h, psi, gm));
        /* beside a feasibility edge (a participant's nondecision at their fastest RT) one side may be
         * out of reach: a one-sided difference from the centre then */
        const double *hi = okp ? gp : g0, *lo = okm ? gm : g0;
        double span = (okp ? e : 0) + (okm ? e : 0);
        ok = okp || okm;
        for (size_t j = 0; j < n && ok; j++) {
            size_t cj = h->free_idx[j];
            info[j * n + i] = -(hi[cj] - lo[cj]) * h->scale[cj] / span;
        }
    }
    for (size_t i = 0; i < n && ok; i++)
        for (size_t j = 0; j < i; j++) info[i * n + j] = info[j * n + i] = 0.5 * (info[i * n + j] + info[j * n + i]);
    free(psi);
    free(gp);
    free(gm);
    free(g0);
    return ok;
}

static int outer_information(bl_hier *h, double *info)
{
    size_t n = h->n_free;
    /* Laplace: central differences of the analytic gradient (2n gradients instead of ~2n^2 values) */
    /* a smaller step when a point beside a feasibility edge cannot be evaluated */
    if (h->n_grid <= 1 && (outer_information_from_gradients(h, info, HIER_INFO_STEP) ||
                           outer_information_from_gradients(h, info, 0.1 * HIER_INFO_STEP))) {
        bl_hier_marginal(h, h->psi0); /* participants' modes back at psi0 */
        return 1;
    }
    double *psi = malloc(h->d * sizeof *psi);
    if (!psi) {
        h->nomem = 1;
        return 0;
    }
    const double e = HIER_INFO_STEP;
    double f0 = bl_hier_marginal(h, h->psi0);
    int ok = isfinite(f0);
    for (size_t i = 0; i < n && ok; i++) {
        size_t ci = h->free_idx[i];
        for (size_t j = 0; j <= i && ok; j++) {
            size_t cj = h->free_idx[j];
            double v;
            if (i == j) {
                memcpy(psi, h->psi0, h->d * sizeof *psi);
                psi[ci] += e * h->scale[ci];
                double fp = bl_hier_marginal(h, psi);
                psi[ci] -= 2 * e * h->scale[ci];
                double fm = bl_hier_marginal(h, psi);
                v = -(fp - 2 * f0 + fm) / (e * e);
            } else {
                double f[4];
                for (int k = 0; k < 4; k++) {
                    memcpy(psi, h->psi0, h->d * sizeof *psi);
                    psi[ci] += (k < 2 ? e : -e) * h->scale[ci];
                    psi[cj] += (k % 2 == 0 ? e : -e) * h->scale[cj];
                    f[k] = bl_hier_marginal(h, psi);
                }
                v = -(f[0] - f[1] - f[2] + f[3]) / (4 * e * e);
            }
            if (!isfinite(v)) ok = 0;
            info[i * n + j] = info[j * n + i] = v;
        }
    }
    bl_hier_marginal(h, h->psi0); /* participants' modes back at psi0 */
    free(psi);
    return ok;
}

/* ---- the fit ---- */

#define HIER_CHI2_95 3.841458820694124 /* chi-square(1) 95% quantile */

static double effect_sd(const bl_hier *h, const double *lambda, size_t r)
{
    if (!h->correlated) return fabs(lambda[r]);
    double s = 0;
    for (size_t c = 0; c <= r; c++) s += lambda[r * (r + 1) / 2 + c] * lambda[r * (r + 1) / 2 + c];
    return sqrt(s);
}

/* A feasible start for a constrained maximum when the estimate's neighbourhood is not (a participant
 * spread held at 0 makes every participant share a nondecision time, which must lie below all of their
 * fastest RTs): the pooled coefficients, which are feasible without spread, with the free spreads
 * scaled down until every participant has a mode. Fills trial; returns its value. */
static double feasible_start(bl_hier *h, const unsigned char *fixed, const double *psi, double *trial)
{
    static const double shrink[] = {1, 0.3, 0.1, 0.03};
    double v = -INFINITY;
    for (size_t k = 0; k < sizeof shrink / sizeof *shrink && !isfinite(v) && h->pooled_coef; k++) {
        memcpy(trial, psi, h->d * sizeof *trial);
        for (size_t c = 0; c < h->d; c++)
            if (!fixed[c]) trial[c] = c < h->p ? h->pooled_coef[c] : shrink[k] * psi[c];
        v = bl_hier_marginal(h, trial);
    }
    return v;
}

/* Maximum over the other components with the components flagged in `fixed` held at psi[...]; psi
 * (start and result) is updated to the maximiser. With the observed information at the estimate
 * (h->info_hat, all d components in x units), the other components start at their linear
 * prediction and take Newton steps on that fixed information (a few gradients instead of a BFGS
 * run); BFGS finishes when those steps stall. */
static double constrained_max(bl_hier *h, double *psi, const unsigned char *fixed, double tol)
{
    size_t d = h->d, nn = 0;
    double best = -INFINITY;
    if (h->info_hat) {
        size_t *idx = malloc(d * sizeof *idx);
        double *a = malloc(d * d * sizeof *a), *r = malloc(d * d * sizeof *r), *v = malloc(d * sizeof *v);
        double *trial = malloc(d * sizeof *trial);
        int ok = idx && a && r && v && trial;
        if (!ok) h->nomem = 1;
        for (size_t c = 0; ok && c < d; c++)
            if (!fixed[c]) idx[nn++] = c;
        for (size_t i = 0; ok && i < nn; i++)
            for (size_t j = 0; j < nn; j++) a[i * nn + j] = h->info_hat[idx[i] * d + idx[j]];
        ok = ok && nn > 0 && chol(a, nn, r);
        if (ok) { /* linear prediction: dx_N = -I_NN^-1 I_NF dx_F (x units, from the estimate) */
            for (size_t i = 0; i < nn; i++) {
                v[i] = 0;
                for (size_t c = 0; c < d; c++)
                    if (fixed[c]) v[i] -= h->info_hat[idx[i] * d + c] * (psi[c] - h->psi_hat[c]) / h->scale[c];
            }
            chol_solve(r, nn, v);
            for (size_t c = 0; c < d; c++) trial[c] = fixed[c] ? psi[c] : h->psi_hat[c];
            for (size_t i = 0; i < nn; i++) trial[idx[i]] += v[i] * h->scale[idx[i]];
            best = bl_hier_marginal(h, trial);
            if (!isfinite(best)) {
                memcpy(trial, psi, d * sizeof *trial);
                best = bl_hier_marginal(h, trial);
            }
            if (!isfinite(best)) best = feasible_start(h, fixed, psi, trial);
            memcpy(psi, trial, d * sizeof *psi);
        }
        double last_gain = INFINITY;
        for (int it = 0; ok && isfinite(best) && it < 6; it++) {
            /* gradient over the free components: analytic (Laplace) or central differences */
            double gm_val = h->n_grid <= 1 ? marginal_and_gradient(h, psi, trial) : NAN;
            if (isfinite(gm_val)) {
                for (size_t i = 0; i < nn; i++) v[i] = trial[idx[i]] * h->scale[idx[i]];
            }
            for (size_t i = 0; i < nn && !isfinite(gm_val); i++) {
                size_t c = idx[i];
                memcpy(trial, psi, d * sizeof *trial);
                trial[c] += HIER_GRAD_STEP * h->scale[c];
                double fp = bl_hier_marginal(h, trial);
                trial[c] -= 2 * HIER_GRAD_STEP * h->scale[c];
                double fm = bl_hier_marginal(h, trial);
                v[i] = isfinite(fp) && isfinite(fm) ? (fp - fm) / (2 * HIER_GRAD_STEP) : NAN;
            }
            int finite = 1;
            for (size_t i = 0; i < nn; i++) finite = finite && isfinite(v[i]);
            if (!finite) break;
            double g2 = 0, gmax = 0;
            for (size_t i = 0; i < nn; i++) gmax = fmax(gmax, fabs(v[i]));
            double *step = a; /* a is free now */
            memcpy(step, v, nn * sizeof *step);
            chol_solve(r, nn, step);
            for (size_t i = 0; i < nn; i++) g2 += v[i] * step[i];
            /* g' I^-1 g / 2 is the gain left: 5e-5 log-likelihood units is far below what an interval
             * end (1.92 units) or a test statistic needs */
            if (gmax < tol || g2 < 1e-4 || last_gain < 1e-4) {
                free(idx), free(a), free(r), free(v), free(trial);
                bl_hier_marginal(h, psi);
                return best;
            }
            int moved = 0;
            for (double t = 1; t > 0.05 && !moved; t *= 0.5) {
                memcpy(trial, psi, d * sizeof *trial);
                for (size_t i = 0; i < nn; i++) trial[idx[i]] += t * step[i] * h->scale[idx[i]];
                double mv = bl_hier_marginal(h, trial);
                if (isfinite(mv) && mv > best) {
                    memcpy(psi, trial, d * sizeof *psi);
                    last_gain = mv - best;
                    best = mv;
                    moved = 1;
                }
            }
            if (!moved) break;
        }
        free(idx), free(a), free(r), free(v), free(trial);
    }
    if (!isfinite(bl_hier_marginal(h, psi))) {
        double *trial = malloc(d * sizeof *trial);
        if (!trial) h->nomem = 1;
        if (trial && isfinite(feasible_start(h, fixed, psi, trial))) memcpy(psi, trial, d * sizeof *psi);
        free(trial);
    }
    memcpy(h->psi0, psi, d * sizeof *psi);
    set_free(h, fixed);
    double g;
    outer_maximise(h, tol, &best, &g);
    memcpy(psi, h->psi0, d * sizeof *psi);
    return best;
}

/* The participant-spread test of effect r: 2 (M - M with effect r's row of L at zero), referred to
 * the mixture 1/2 chi2(k-1) + 1/2 chi2(k), k = the covariance parameters removed (Self & Liang 1987;
 * Stram & Lee 1994): k = 1 for independent effects, q for correlated ones. */
static void spread_test(bl_hier *h, const double *psi_hat, double m_hat, size_t r, unsigned char *fixed, double *work,
                        bl_variance_component *vc)
{
    memcpy(work, psi_hat, h->d * sizeof *work);
    memset(fixed, 0, h->d);
    size_t k_removed = 1;
    if (h->correlated) {
        for (size_t c = 0; c <= r; c++) fixed[h->p + r * (r + 1) / 2 + c] = 1;
        k_removed = h->q;
    } else {
        fixed[h->p + r] = 1;
    }
    for (size_t c = 0; c < h->d; c++)
        if (fixed[c]) work[c] = 0;
    double m0 = constrained_max(h, work, fixed, 2e-3);
    double t = 2 * (m_hat - m0);
    if (!(t > 0)) t = 0; /* the constrained maximum cannot be higher; a tiny negative is rounding */
    vc->lrt_statistic = isfinite(m0) ? t : NAN;
    if (!isfinite(m0)) vc->lrt_p = NAN;
    else if (t == 0) vc->lrt_p = 1;
    else
        vc->lrt_p = 0.5 * (k_removed > 1 ? gsl_cdf_chisq_Q(t, (double)(k_removed - 1)) : 0) +
                    0.5 * gsl_cdf_chisq_Q(t, (double)k_removed);
}

/* One end of the 95% profile interval of an independent effect's SD: the root of
 * sqrt(2 (M - P(s))) = 1.96 between s_in (inside) and the first s found outside, by the secant rule
 * on that signed root (nearly linear in s). */
static double profile_end(bl_hier *h, const double *psi_hat, double m_hat, size_t comp, double s_hat, double step,
                          int upward, unsigned char *fixed, double *work)
{
    memset(fixed, 0, h->d);
    fixed[comp] = 1;
    memcpy(work, psi_hat, h->d * sizeof *work);
    const double target = sqrt(HIER_CHI2_95);
    double s_in = s_hat, r_in = 0, s_out = NAN, r_out = NAN;
    double s = upward ? s_hat + step : fmax(s_hat - step, 0.5 * s_hat);
    for (int k = 0; k < 14; k++) {
        work[comp] = s;
        double pm = constrained_max(h, work, fixed, 3e-3);
        double rr = isfinite(pm) ? sqrt(fmax(0, 2 * (m_hat - pm))) : INFINITY;
        if (rr >= target) {
            s_out = s;
            r_out = rr;
            break;
        }
        s_in = s;
        r_in = rr;
        s = upward ? s_hat + 2 * (s - s_hat) : 0.5 * s;
    }
    if (isnan(s_out)) return upward ? INFINITY : 0;
    for (int k = 0; k < 10; k++) {
        double t = isfinite(r_out) ? s_in + (target - r_in) * (s_out - s_in) / (r_out - r_in) : 0.5 * (s_in + s_out);
        if (!(t > fmin(s_in, s_out) && t < fmax(s_in, s_out))) t = 0.5 * (s_in + s_out);
        work[comp] = t;
        double pm = constrained_max(h, work, fixed, 3e-3);
        double rr = isfinite(pm) ? sqrt(fmax(0, 2 * (m_hat - pm))) : INFINITY;
        if (fabs(rr - target) < 5e-3 || fabs(s_out - s_in) < 1e-4 * fmax(s_hat, 1e-3)) return t;
        if (rr < target) {
            s_in = t;
            r_in = rr;
        } else {
            s_out = t;
            r_out = rr;
        }
    }
    return 0.5 * (s_in + s_out);
}

/* A threshold below this fraction of its intercept-only value, at a pooled estimate that did not
 * converge, marks the spike below. */
#define HIER_SPIKE_FRACTION 1e-3

/* The likelihood of a model whose threshold has an identity link and slopes has no maximum when a slope
 * can take one trial's threshold a to 0 while the nondecision time rises to that trial's RT t: the
 * first-passage density scales as f(t | v, a, w) = a^-2 exp(-v a w - v^2 t / 2) f(t / a^2 | 0, 1, w)
 * (Navarro & Fuss 2009, J Math Psych 53:222-230, eq. 2-4), so along t - t0 = a^2 it grows like
 * 1 / (t - t0) without bound. A pooled fit that ran onto such a spike stops unconverged there; for the
 * hierarchical fit no start near it is of use: each participant's h(z) is not concave in the threshold
 * and nondecision offsets (their 2 x 2 block of the Hessian has a negative determinant, so no Levenberg
 * shift or rescaling gives an ascent to a mode) and, started away from it, the maximisation climbs back
 * (the marginal likelihood with the spread to 0 is the pooled one). Returns the used trial (model
 * index) with the smallest ratio of threshold to its intercept-only value when that ratio is below
 * HIER_SPIKE_FRACTION, else m->n. */
static size_t spike_trial(const bl_hier *h, const double *coef)
{
    const bl_model *m = h->m;
    const bl_param_design *d = &m->par[BL_THRESHOLD];
    size_t worst = m->n;
    double ratio = INFINITY;
    if (!d->is_free || d->link == BL_LINK_LOG || d->n_slopes == 0) return m->n;
    for (size_t k = 0; k < m->n; k++) {
        double b = coef[d->first_coef + d->level[k]], a = b;
        for (size_t s = 0; s < d->n_slopes; s++)
            a += coef[d->slopes[s].first_coef + d->slopes[s].level[k]] * d->slopes[s].x[k];
        if (b > 0 && a / b < ratio) {
            ratio = a / b;
            worst = k;
        }
    }
    return ratio < HIER_SPIKE_FRACTION ? worst : m->n;
}

/* The error for a pooled estimate on the spike (spike_trial): names the trial, its participant, the
 * regressor whose slope moves its threshold most, and the remedies. */
static bl_status spike_error(const bl_hier *h, const char *model, const double *coef, size_t k, bl_error *err)
{
    const bl_model *m = h->m;
    const bl_param_design *d = &m->par[BL_THRESHOLD];
    const char *who = "?";
    for (size_t j = 0; j < h->J; j++)
        for (size_t i = 0; i < h->part[j].n_trials; i++)
            if (h->part[j].trials[i] == k) who = h->names[j];
    size_t top = 0;
    double top_move = 0;
    for (size_t s = 0; s < d->n_slopes; s++) {
        double mv = fabs(coef[d->slopes[s].first_coef + d->slopes[s].level[k]] * d->slopes[s].x[k]);
        if (mv > top_move) top_move = mv, top = s;
    }
    bl_wiener_params pv;
    bl_model_predict(m, coef, k, &pv);
    return bl_error_set(
        err, BL_ERR_NUMERIC,
        "model '%s': the likelihood has no maximum: the pooled fit (not converged) ran to trial table "
        "row %zu (participant '%s', %s %.4g) with threshold %.3g and nondecision %.3g s below its RT %.6g s, "
        "where the density grows without bound; give threshold \"link\": \"log\", or leave such "
        "regressor values out",
        model, m->row[k] + 1, who, d->slopes[top].regressor, d->slopes[top].x[k], pv.value[BL_THRESHOLD],
        m->rt[k] - pv.value[BL_NONDECISION], m->rt[k]);
}

/* Starting spread and the x-unit scale of every component (pooled SEs for the coefficients). */
static void starting_point(bl_hier *h, const bl_fit_result *pooled, const double *pooled_coef)
{
    memcpy(h->psi0, pooled_coef, h->p * sizeof *h->psi0);
    /* A pooled nondecision time often sits at the fastest RT, where the likelihood falls off a cliff and
     * the participants' Hessians are useless: start 2% below it (identity link; the optimiser moves it
     * back where the data want it). */
    for (size_t c = 0; c < h->p; c++) {
        const bl_coef_info *ci = bl_model_coef(h->m, c);
        if (ci->param == BL_NONDECISION && ci->slope < 0 && h->m->par[BL_NONDECISION].link != BL_LINK_LOG)
            h->psi0[c] *= 0.98;
    }
    for (size_t c = 0; c < h->p; c++) {
        double se = pooled && pooled->n_coef == h->p ? pooled->coef[c].se : NAN;
        h->scale[c] = isfinite(se) && se > 0 ? se : 0.05 * fmax(1, fabs(pooled_coef[c]));
    }
    for (size_t r = 0; r < h->q; r++) {
        const bl_hier_effect *e = &h->eff[r];
        double mean_abs = 0, mean_se = 0;
        for (size_t i = 0; i < e->n; i++) {
            mean_abs += fabs(pooled_coef[e->coef[i]]) / (double)e->n;
            mean_se += h->scale[e->coef[i]] / (double)e->n;
        }
        /* a tenth of the coefficient's size, at least a few of its pooled SEs: off the SD = 0 saddle */
        double sd0 = fmax(fmax(0.1 * mean_abs, 3 * mean_se), 1e-3);
        for (size_t c = 0; c <= (h->correlated ? r : 0); c++) {
            size_t idx = h->correlated ? r * (r + 1) / 2 + c : r;
            int diag = !h->correlated || c == r;
            h->psi0[h->p + idx] = diag ? sd0 : 0;
            h->scale[h->p + idx] = 0.3 * sd0;
        }
    }
}

/* Cholesky factor of info (n x n) over the components not flagged in edge (flagged rows and columns
 * are skipped: the factor is of the reduced matrix, stored at the full indices). 0 when not positive
 * definite. */
static int chol_reduced(const double *info, size_t n, const unsigned char *edge, double *f)
{
    for (size_t i = 0; i < n; i++) {
        if (edge[i]) continue;
        for (size_t j = 0; j <= i; j++) {
            if (edge[j]) continue;
            double s = info[i * n + j];
            for (size_t k = 0; k < j; k++)
                if (!edge[k]) s -= f[i * n + k] * f[j * n + k];
            if (i == j) {
                if (!(s > 0)) return 0;
                f[i * n + i] = sqrt(s);
            } else {
                f[i * n + j] = s / f[j * n + j];
            }
        }
    }
    return 1;
}

/* A spread at the edge (SD 0) can leave the information singular: the likelihood is even in the SD
 * and may be flat in SD^2 there. Flag spread components, flattest first, until the rest is positive
 * definite; the flagged ones are held at their value (reported as SD with a profile interval, not a
 * Wald SE). Returns 0 when no such set makes it positive definite. */
static int mark_edges(const bl_hier *h, const double *info, unsigned char *edge, double *f)
{
    size_t n = h->n_free;
    memset(edge, 0, n);
    for (size_t dropped = 0; dropped <= h->n_lambda; dropped++) {
        if (chol_reduced(info, n, edge, f)) return 1;
        size_t pick = n;
        for (size_t i = 0; i < n; i++)
            if (!edge[i] && h->free_idx[i] >= h->p && (pick == n || info[i * n + i] < info[pick * n + pick])) pick = i;
        if (pick == n) return 0;
        edge[pick] = 1;
    }
    return 0;
}

/* Newton steps on the observed information from the BFGS optimum; info (n x n) is left at the final
 * point and edge (n flags) marks spread components at the edge (see mark_edges). Returns the squared
 * Newton decrement there (NAN when the information failed). */
static double polish(bl_hier *h, double *m_hat, double *info, unsigned char *edge)
{
    size_t n = h->n_free;
    double *g = malloc(n * sizeof *g), *step = malloc(n * sizeof *step), *psi = malloc(h->d * sizeof *psi);
    double *chol_f = malloc(n * n * sizeof *chol_f);
    gsl_vector *x0 = gsl_vector_calloc(n), *gv = gsl_vector_alloc(n);
    double dec = NAN, *grad_psi = malloc(h->d * sizeof *grad_psi);
    if (!g || !step || !psi || !chol_f || !x0 || !gv || !grad_psi) {
        h->nomem = 1;
        goto done;
    }
    outer o = {h, psi, grad_psi, 0};
    for (int round = 0; round < 4; round++) {
        if (!outer_information(h, info)) {
            dec = NAN;
            break;
        }
        outer_df(x0, &o, gv);
        for (size_t i = 0; i < n; i++) g[i] = -gsl_vector_get(gv, i); /* gradient of M */
        if (!mark_edges(h, info, edge, chol_f)) {
            dec = NAN;
            break;
        }
        for (size_t i = 0; i < n; i++) step[i] = edge[i] ? 0 : g[i];
        for (size_t i = 0; i < n; i++) {
            if (edge[i]) continue;
            for (size_t k = 0; k < i; k++)
                if (!edge[k]) step[i] -= chol_f[i * n + k] * step[k];
            step[i] /= chol_f[i * n + i];
        }
        for (size_t i = n; i-- > 0;) {
            if (edge[i]) continue;
            for (size_t k = i + 1; k < n; k++)
                if (!edge[k]) step[i] -= chol_f[k * n + i] * step[k];
            step[i] /= chol_f[i * n + i];
        }
        dec = 0;
        for (size_t i = 0; i < n; i++) dec += g[i] * step[i];
        if (dec < 1e-6) break;
        int moved = 0;
        for (double t = 1; t > 1e-3 && !moved; t *= 0.5) {
            memcpy(psi, h->psi0, h->d * sizeof *psi);
            for (size_t i = 0; i < n; i++) psi[h->free_idx[i]] += t * step[i] * h->scale[h->free_idx[i]];
            double mv = bl_hier_marginal(h, psi);
            if (isfinite(mv) && mv > *m_hat) {
                memcpy(h->psi0, psi, h->d * sizeof *psi);
                *m_hat = mv;
                moved = 1;
            }
        }
        if (!moved) break;
    }
    bl_hier_marginal(h, h->psi0);
done:
    free(g);
    free(step);
    free(psi);
    free(grad_psi);
    free(chol_f);
    if (x0) gsl_vector_free(x0);
    if (gv) gsl_vector_free(gv);
    return dec;
}

/* Covariance (x units, d x d) from the information without the edge components (their rows and
 * columns NAN); the edge components' information is then replaced by a unit diagonal, a metric for
 * the profiles' Newton steps. */
static bl_status reduced_inverse(const bl_hier *h, double *info, const unsigned char *edge, double *cov, double *cond,
                                 int *pd, bl_error *err)
{
    size_t d = h->d, k = 0;
    size_t idx[512];
    if (d > 512) return bl_error_set(err, BL_ERR_MODEL, "hierarchical fit: more than 512 parameters");
    for (size_t i = 0; i < d; i++)
        if (!edge[i]) idx[k++] = i;
    double *sub = calloc(k ? k * k : 1, sizeof *sub), *sc = calloc(k ? k * k : 1, sizeof *sc);
    if (!sub || !sc) {
        free(sub);
        free(sc);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    for (size_t a = 0; a < k; a++)
        for (size_t b = 0; b < k; b++) sub[a * k + b] = info[idx[a] * d + idx[b]];
    bl_status st = bl_information_inverse(sub, k, sc, cond, pd, err);
    for (size_t i = 0; i < d * d; i++) cov[i] = NAN;
    if (!st && *pd)
        for (size_t a = 0; a < k; a++)
            for (size_t b = 0; b < k; b++) cov[idx[a] * d + idx[b]] = sc[a * k + b];
    for (size_t i = 0; i < d; i++)
        if (edge[i])
            for (size_t j = 0; j < d; j++) info[i * d + j] = info[j * d + i] = i == j ? 1.0 : 0.0;
    free(sub);
    free(sc);
    return st;
}

/* Population coefficients with Wald SEs; a coefficient that varies by participant gets the t
 * reference with participants - 1 degrees of freedom (its information comes from J participants'
 * offsets; docs/methods.md gives the coverage this was chosen on). */
static int fill_population(const bl_hier *h, const double *cov_psi, bl_fit_result *res)
{
    size_t p = h->p;
    res->coef = calloc(p ? p : 1, sizeof *res->coef);
    if (!res->coef) return 0;
    res->n_coef = p;
    for (size_t j = 0; j < p; j++) {
        bl_coefficient *c = &res->coef[j];
        const bl_coef_info *ci = bl_model_coef(h->m, j);
        c->param = ci->param;
        c->parameter = bl_param_name(ci->param);
        c->term = bl_strdup(ci->term);
        c->level = bl_strdup(ci->level);
        if (!c->term || !c->level) return 0;
        c->estimate = h->psi0[j];
        c->se = c->z = c->p = c->ci_low = c->ci_high = c->df = NAN;
        for (size_t r = 0; r < h->q; r++)
            for (size_t i = 0; i < h->eff[r].n; i++)
                if (h->eff[r].coef[i] == j) c->df = (double)(h->J - 1);
        if (!cov_psi || !(cov_psi[j * h->d + j] > 0)) continue;
        c->se = sqrt(cov_psi[j * h->d + j]);
        c->z = c->estimate / c->se;
        double crit = isfinite(c->df) ? gsl_cdf_tdist_Qinv(0.025, c->df) : gsl_cdf_ugaussian_Qinv(0.025);
        c->p = isfinite(c->df) ? 2 * gsl_cdf_tdist_Q(fabs(c->z), c->df) : 2 * gsl_cdf_ugaussian_Q(fabs(c->z));
        c->ci_low = c->estimate - crit * c->se;
        c->ci_high = c->estimate + crit * c->se;
    }
    if (cov_psi) {
        res->covariance = malloc(p * p * sizeof *res->covariance);
        if (!res->covariance) return 0;
        for (size_t a = 0; a < p; a++)
            for (size_t b = 0; b < p; b++) res->covariance[a * p + b] = cov_psi[a * h->d + b];
    }
    return 1;
}

/* Empirical-Bayes estimates at psi0 (the participants' modes are there): each participant's
 * coefficients beta + Z L z^ with conditional SEs from (L H^-1 L') (given beta and L). */
static int fill_participants(const bl_hier *h, const bl_fit_result *pop, bl_model_result *r, double *part_coef)
{
    double L[HIER_MAX_EFFECTS * HIER_MAX_EFFECTS];
    bl_hier_lambda_to_l(h, h->psi0 + h->p, L);
    size_t q = h->q, p = h->p;
    r->participants = calloc(h->J, sizeof *r->participants);
    if (!r->participants) return 0;
    r->n_participants = h->J;
    for (size_t j = 0; j < h->J; j++) {
        const hier_part *pp = &h->part[j];
        bl_fit_result *f = &r->participants[j];
        f->participant = bl_strdup(h->names[j]);
        f->coef = calloc(p ? p : 1, sizeof *f->coef);
        if (!f->participant || !f->coef) return 0;
        f->n_coef = p;
        f->log_likelihood = pp->ll_cond;
        f->trials = pp->n_trials;
        f->aic = f->bic = NAN;
        f->converged = 1;
        participant_theta(h, h->psi0, L, pp->z, part_coef + j * p);
        /* conditional covariance of u = L z: L H^-1 L', H = R R' */
        double var_u[HIER_MAX_EFFECTS];
        for (size_t a = 0; a < q; a++) {
            double col[HIER_MAX_EFFECTS]; /* H^-1 L' e_a */
            for (size_t c = 0; c < q; c++) col[c] = L[a * q + c];
            chol_solve(pp->R, q, col);
            var_u[a] = 0;
            for (size_t c = 0; c < q; c++) var_u[a] += L[a * q + c] * col[c];
        }
        for (size_t c = 0; c < p; c++) {
            bl_coefficient *co = &f->coef[c];
            *co = pop->coef[c];
            co->term = bl_strdup(pop->coef[c].term);
            co->level = bl_strdup(pop->coef[c].level);
            if (!co->term || !co->level) return 0;
            co->estimate = part_coef[j * p + c];
            co->z = co->p = co->df = NAN;
            for (size_t a = 0; a < q; a++)
                for (size_t i = 0; i < h->eff[a].n; i++)
                    if (h->eff[a].coef[i] == c) co->se = sqrt(fmax(var_u[a], 0));
            co->ci_low = co->estimate - Z975 * co->se;
            co->ci_high = co->estimate + Z975 * co->se;
        }
    }
    return 1;
}

/* Variance components: SD, spread test, 95% interval (profile likelihood for independent effects;
 * for correlated ones a Wald interval on ln SD, docs/methods.md). */
static bl_status fill_variance(bl_hier *h, double m_hat, const double *cov_psi, const double *info, bl_model_result *r,
                               bl_error *err)
{
    size_t d = h->d, q = h->q;
    double *psi_hat = malloc(d * sizeof *psi_hat), *work = malloc(d * sizeof *work);
    unsigned char *fixed = calloc(d, 1);
    r->variance = calloc(q ? q : 1, sizeof *r->variance);
    if (!psi_hat || !work || !fixed || !r->variance) {
        free(psi_hat);
        free(work);
        free(fixed);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    r->n_variance = q;
    /* independent effects: the SD's sign is free; report and profile the positive one */
    double sign[HIER_MAX_EFFECTS * (HIER_MAX_EFFECTS + 1) / 2];
    for (size_t a = 0; a < h->n_lambda; a++) sign[a] = 1;
    if (!h->correlated)
        for (size_t a = 0; a < q; a++) {
            sign[a] = h->psi0[h->p + a] < 0 ? -1 : 1;
            h->psi0[h->p + a] = fabs(h->psi0[h->p + a]);
        }
    memcpy(psi_hat, h->psi0, d * sizeof *psi_hat);
    if (info) { /* the sign flips above flip the SD's rows and columns of the information */
        h->info_hat = malloc(d * d * sizeof *h->info_hat);
        h->psi_hat = malloc(d * sizeof *h->psi_hat);
        if (h->info_hat && h->psi_hat) {
            memcpy(h->psi_hat, psi_hat, d * sizeof *psi_hat);
            for (size_t i = 0; i < d; i++)
                for (size_t j = 0; j < d; j++) {
                    double sgn = (i >= h->p && sign[i - h->p] < 0) != (j >= h->p && sign[j - h->p] < 0) ? -1 : 1;
                    h->info_hat[i * d + j] = sgn * info[i * d + j];
                }
        } else {
            h->nomem = 1;
            free(h->info_hat);
            h->info_hat = NULL;
        }
    }
    bl_status st = BL_OK;
    for (size_t a = 0; a < q; a++) {
        bl_variance_component *vc = &r->variance[a];
        vc->param = h->eff[a].param;
        vc->parameter = bl_param_name(vc->param);
        if (!(vc->term = bl_strdup(h->eff[a].label))) {
            st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
            break;
        }
        vc->sd = effect_sd(h, psi_hat + h->p, a);
        vc->ci_low = vc->ci_high = vc->lrt_statistic = vc->lrt_p = NAN;
        if (!info) continue; /* no maximum to test against or profile from (reported not converged) */
        spread_test(h, psi_hat, m_hat, a, fixed, work, vc);
        if (!h->correlated) {
            size_t comp = h->p + a;
            double se = cov_psi && cov_psi[comp * d + comp] > 0 ? sqrt(cov_psi[comp * d + comp]) : 0.3 * vc->sd + 0.01;
            vc->ci_high = profile_end(h, psi_hat, m_hat, comp, vc->sd, 2 * se, 1, fixed, work);
            vc->ci_low = !(vc->lrt_statistic > HIER_CHI2_95) || vc->sd == 0
                             ? 0
                             : profile_end(h, psi_hat, m_hat, comp, vc->sd, 2 * se, 0, fixed, work);
        } else if (cov_psi && vc->sd > 0) {
            /* d ln sd / d L_ac = L_ac / sd^2 */
            double var = 0;
            for (size_t c = 0; c <= a; c++)
                for (size_t e = 0; e <= a; e++) {
                    size_t ic = h->p + a * (a + 1) / 2 + c, ie = h->p + a * (a + 1) / 2 + e;
                    var += psi_hat[ic] * psi_hat[ie] * cov_psi[ic * d + ie];
                }
            double se_log = sqrt(var) / (vc->sd * vc->sd);
            if (isfinite(se_log)) {
                vc->ci_low = vc->sd * exp(-Z975 * se_log);
                vc->ci_high = vc->sd * exp(Z975 * se_log);
            }
        }
    }
    memcpy(h->psi0, psi_hat, d * sizeof *psi_hat);
    set_free(h, NULL);
    bl_hier_marginal(h, h->psi0); /* the participants' modes back at the estimate */
    if (!st && h->correlated && q > 0) {
        double L[HIER_MAX_EFFECTS * HIER_MAX_EFFECTS];
        bl_hier_lambda_to_l(h, psi_hat + h->p, L);
        if (!(r->correlation = malloc(q * q * sizeof *r->correlation)))
            st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        for (size_t a = 0; a < q && !st; a++)
            for (size_t b = 0; b < q; b++) {
                double s = 0;
                for (size_t c = 0; c < q; c++) s += L[a * q + c] * L[b * q + c];
                double sa = effect_sd(h, psi_hat + h->p, a), sb = effect_sd(h, psi_hat + h->p, b);
                r->correlation[a * q + b] = sa > 0 && sb > 0 ? s / (sa * sb) : NAN;
            }
    }
    free(psi_hat);
    free(work);
    free(fixed);
    return st;
}

static size_t likelihood_evaluations(const bl_hier *h)
{
    size_t n = 0;
    for (size_t j = 0; j < h->J; j++) n += bl_likelihood_evaluations(h->part[j].lik);
    return n;
}

bl_status bl_hier_fit(bl_hier *h, const bl_fit_options *opt, const bl_fit_result *pooled, const double *pooled_coef,
                      bl_model_result *r, double **part_coef, bl_warnings *warn, bl_error *err)
{
    double t_start = bl_clock_seconds();
    size_t d = h->d;
    *part_coef = NULL;
    h->threads = opt ? opt->threads : 0;
    h->psi0 = malloc(d * sizeof *h->psi0);
    h->scale = malloc(d * sizeof *h->scale);
    h->free_idx = malloc(d * sizeof *h->free_idx);
    double *info = malloc(d * d * sizeof *info), *cov_x = malloc(d * d * sizeof *cov_x);
    double *cov_psi = malloc(d * d * sizeof *cov_psi);
    *part_coef = malloc(h->J * (h->p ? h->p : 1) * sizeof **part_coef);
    bl_status st = BL_OK;
    if (!h->psi0 || !h->scale || !h->free_idx || !info || !cov_x || !cov_psi || !*part_coef) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory for the hierarchical fit of model '%s'", r->name);
        goto done;
    }
    /* a pooled estimate on the likelihood's spike: no maximum to find (spike_trial) */
    size_t spike = pooled && !pooled->converged ? spike_trial(h, pooled_coef) : h->m->n;
    if (spike < h->m->n) {
        st = spike_error(h, r->name, pooled_coef, spike, err);
        goto done;
    }
    starting_point(h, pooled, pooled_coef);
    if ((h->pooled_coef = malloc((h->p ? h->p : 1) * sizeof *h->pooled_coef)))
        memcpy(h->pooled_coef, h->psi0, h->p * sizeof *h->pooled_coef); /* the start, backed off the edge */
    else h->nomem = 1;
    set_free(h, NULL);
    /* Near an edge (nondecision at the fastest RT) the starting spread can leave a participant without
     * a mode: start with less spread then. */
    for (int shrink = 0; shrink < 3 && !isfinite(bl_hier_marginal(h, h->psi0)); shrink++)
        for (size_t c = h->p; c < d; c++) h->psi0[c] *= 0.1;
    double m_hat, gnorm;
    size_t iterations = outer_maximise(h, 1e-3, &m_hat, &gnorm);
    if (!isfinite(m_hat)) {
        st = bl_error_set(err, BL_ERR_NUMERIC,
                          "model '%s': the hierarchical fit found no point where every participant's likelihood has "
                          "a mode (start: the pooled estimates; a participant's trials may allow almost no spread in "
                          "some term): let fewer terms vary (\"varies\": []) or fit with \"participants\": \"pooled\"",
                          r->name);
        goto done;
    }
    unsigned char *edge_flags = calloc(d, 1);
    if (!edge_flags) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto done;
    }
    double dec = polish(h, &m_hat, info, edge_flags);
    double cond = NAN;
    int pd = 0;
    if (isfinite(dec)) st = reduced_inverse(h, info, edge_flags, cov_x, &cond, &pd, err);
    free(edge_flags);
    if (st) goto done;
    for (size_t a = 0; a < d; a++)
        for (size_t b = 0; b < d; b++) cov_psi[a * d + b] = pd ? cov_x[a * d + b] * h->scale[a] * h->scale[b] : NAN;
    /* fits.json's coefficient covariance: the coefficients' block (never an edge component) */
    bl_fit_result *f = &r->fit;
    if (!fill_population(h, pd ? cov_psi : NULL, f)) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto done;
    }
    f->log_likelihood = m_hat;
    f->parameters = d;
    f->trials = bl_model_n_trials(h->m);
    f->aic = 2.0 * (double)d - 2.0 * m_hat;
    f->bic = (double)d * log((double)f->trials) - 2.0 * m_hat;
    f->diag.method = h->n_grid > 1 ? "gauss-hermite+bfgs2" : "laplace+bfgs2";
    f->diag.hessian_positive_definite = pd;
    f->diag.condition_number = cond;
    f->diag.gradient_norm = gnorm;
    f->diag.newton_decrement = isfinite(dec) ? sqrt(fmax(dec, 0)) : NAN;
    f->diag.iterations = iterations;
    f->diag.starts = f->diag.starts_agreed = 1;
    f->converged = f->diag.converged = pd && f->diag.newton_decrement < 1e-2;
    r->quadrature = (int)(h->n_grid > 1 ? (size_t)llround(pow((double)h->n_grid, 1.0 / (double)(h->q ? h->q : 1))) : 1);
    if ((st = fill_variance(h, m_hat, pd ? cov_psi : NULL, pd ? info : NULL, r, err))) goto done;
    if (!fill_participants(h, f, r, *part_coef)) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto done;
    }
    if ((h->psi_est = malloc(d * sizeof *h->psi_est))) memcpy(h->psi_est, h->psi0, d * sizeof *h->psi_est);
    else h->nomem = 1;
    if (h->nomem) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory in the hierarchical fit of model '%s'", r->name);
        goto done;
    }
    f->diag.evaluations = likelihood_evaluations(h);
    f->diag.seconds = bl_clock_seconds() - t_start;
    if (!f->converged)
        bl_warnings_add(warn,
                        "model '%s' (hierarchical): not converged (distance to the optimum %.3g SE, information %s "
                        "positive definite)",
                        r->name, f->diag.newton_decrement, pd ? "is" : "is not");
done:
    free(info);
    free(cov_x);
    free(cov_psi);
    if (st) {
        free(*part_coef);
        *part_coef = NULL;
    }
    return st;
}

double bl_hier_refit(bl_hier *h, const unsigned char *coef_at_zero, double tol)
{
    if (!h->psi_est) return -INFINITY;
    unsigned char *fixed = calloc(h->d, 1);
    if (!fixed) {
        h->nomem = 1;
        return -INFINITY;
    }
    memcpy(h->psi0, h->psi_est, h->d * sizeof *h->psi0);
    for (size_t c = 0; coef_at_zero && c < h->p; c++)
        if (coef_at_zero[c]) {
            fixed[c] = 1;
            h->psi0[c] = 0;
        }
    /* an effect that moves only coefficients held at zero has no spread to estimate */
    for (size_t r = 0; coef_at_zero && r < h->q; r++) {
        int all = 1;
        for (size_t i = 0; i < h->eff[r].n; i++) all = all && coef_at_zero[h->eff[r].coef[i]];
        if (!all) continue;
        for (size_t c = 0; c <= (h->correlated ? r : 0); c++) {
            size_t idx = h->p + (h->correlated ? r * (r + 1) / 2 + c : r);
            fixed[idx] = 1;
            h->psi0[idx] = 0;
        }
    }
    set_free(h, fixed);
    double best, g;
    outer_maximise(h, tol, &best, &g);
    set_free(h, NULL);
    free(fixed);
    return best;
}
