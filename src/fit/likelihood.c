/* Summed Wiener log-likelihood over trials with trial-wise parameters, and its analytic gradient by
 * the chain rule through the design (docs/models.md):
 *     d loglik / d b_j = sum_i (d log f_i / d theta_i) * (d theta_i / d eta_i) * x_ij,
 * with d theta / d eta = 1 (identity link) or theta (log link), and drift entering as sign_i * v_i
 * under stimulus coding. Trials are cut into fixed blocks whose partial sums are added in block
 * order, so the result does not depend on the number of OpenMP threads.
 */
#include "design/model_internal.h"
#include "core/clock.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#ifdef _OPENMP
#include <omp.h>
#endif

/* Trials per block: small enough to balance 2-8 threads on a few thousand trials, large enough
 * that the per-block gradient buffers stay cheap. Fixed, so sums never depend on threads. */
#define BL_LIK_BLOCK 64

struct bl_likelihood {
    const bl_model *m;
    size_t *subset; /* used-trial indices evaluated (one participant's); NULL: every trial */
    size_t n;       /* trials evaluated */
    int threads;
    size_t n_blocks;
    double *block_ll;   /* n_blocks */
    double *block_grad; /* n_blocks rows of `stride` doubles (n_coef used) */
    size_t stride;      /* n_coef rounded up to 64 bytes: blocks on different threads never share a
                             cache line, which would make every gradient update ping-pong */
    int *block_bad;     /* n_blocks */
    size_t evaluations;
    /* Parallel or serial, chosen by timing: the block sums are the same either way, so the choice
     * changes speed only. Probes alternate both for a few evaluations, then the faster one is used
     * until the next probe round (a busy machine can make fork-join slower than one thread). */
    double time_par, time_ser;
    int probes_par, probes_ser, use_par, warmed;
    size_t probe_interval; /* grows while one thread keeps winning: probing a losing mode costs */
    bl_parallel_mode parallel;
    size_t next_probe;
};

#define BL_LIK_PROBES 2 /* timed evaluations of each mode per probe round */
#define BL_LIK_REPROBE                                                                                                 \
    64 /* evaluations between probe rounds (load can change quickly); x4 after
                                  each round one thread wins, up to 4096 */

bl_status bl_likelihood_create(const bl_model *m, int threads, bl_likelihood **out, bl_error *err)
{
    *out = NULL;
    bl_likelihood *w = calloc(1, sizeof *w);
    if (!w) goto nomem;
    w->m = m;
    w->n = m->n;
    w->threads = threads;
    w->n_blocks = (m->n + BL_LIK_BLOCK - 1) / BL_LIK_BLOCK;
    w->use_par = 1;
    w->parallel = BL_PARALLEL_AUTO;
    w->probe_interval = BL_LIK_REPROBE;
    w->block_ll = malloc(w->n_blocks * sizeof *w->block_ll);
    w->stride = (m->n_coef + 7) / 8 * 8;
    w->block_grad = aligned_alloc(64, w->n_blocks * w->stride * sizeof *w->block_grad);
    w->block_bad = malloc(w->n_blocks * sizeof *w->block_bad);
    if (!w->block_ll || !w->block_grad || !w->block_bad) goto nomem;
    *out = w;
    return BL_OK;
nomem:
    bl_likelihood_destroy(w);
    return bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory for the likelihood workspace", m->name);
}

bl_status bl_likelihood_create_subset(const bl_model *m, const size_t *trials, size_t n, bl_likelihood **out,
                                      bl_error *err)
{
    bl_status st = bl_likelihood_create(m, 1, out, err);
    if (st) return st;
    bl_likelihood *w = *out;
    w->n = n;
    w->n_blocks = (n + BL_LIK_BLOCK - 1) / BL_LIK_BLOCK;
    w->parallel = BL_PARALLEL_UNSPLIT;
    w->subset = malloc((n ? n : 1) * sizeof *w->subset);
    if (!w->subset) {
        bl_likelihood_destroy(w);
        *out = NULL;
        return bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory for a participant's likelihood", m->name);
    }
    memcpy(w->subset, trials, n * sizeof *trials);
    return BL_OK;
}

void bl_likelihood_destroy(bl_likelihood *w)
{
    if (!w) return;
    free(w->subset);
    free(w->block_ll);
    free(w->block_grad);
    free(w->block_bad);
    free(w);
}

size_t bl_likelihood_evaluations(const bl_likelihood *w) { return w->evaluations; }

/* One block: trials [k0, k1) of the evaluated list (subset[] when given). Returns 0 when a trial
 * is infeasible. */
static int eval_block(const bl_model *m, const size_t *subset, const double *coef, size_t k0, size_t k1, double *ll_out,
                      double *g, double *trial_ll)
{
    double ll = 0;
    if (g) memset(g, 0, m->n_coef * sizeof *g);
    for (size_t kk = k0; kk < k1; kk++) {
        size_t k = subset ? subset[kk] : kk;
        bl_wiener_params p;
        double dtheta[BL_NPARAM];
        for (int q = 0; q < BL_NPARAM; q++) {
            const bl_param_design *d = &m->par[q];
            if (!d->is_free) {
                p.value[q] = d->fixed;
                dtheta[q] = 0;
                continue;
            }
            double eta = coef[d->first_coef + d->level[k]];
            for (size_t s = 0; s < d->n_slopes; s++) {
                const bl_slope_design *sl = &d->slopes[s];
                eta += coef[sl->first_coef + sl->level[k]] * sl->x[k];
            }
            if (d->link == BL_LINK_LOG) {
                p.value[q] = exp(eta);
                dtheta[q] = p.value[q];
            } else {
                p.value[q] = eta;
                dtheta[q] = 1.0;
            }
        }
        p.value[BL_DRIFT] *= m->sign[k];
        dtheta[BL_DRIFT] *= m->sign[k];
        p.contamination_lo = m->rt_lo;
        p.contamination_hi = m->rt_hi;
        if (!bl_model_params_valid(&p)) return 0;
        /* Always the gradient routine: its value is the one the optimiser's gradient belongs to
         * (the plain density truncates its series separately and can differ in the 11th digit). */
        double lf, gr[BL_NPARAM];
        if (bl_wiener_log_density_grad(&p, m->rt[k], m->upper[k], &lf, gr, NULL) != BL_OK) return 0;
        if (!isfinite(lf)) return 0;
        if (trial_ll) trial_ll[k] = lf;
        ll += lf;
        if (!g) continue;
        for (int q = 0; q < BL_NPARAM; q++) {
            const bl_param_design *d = &m->par[q];
            if (!d->is_free) continue;
            double gq = gr[q] * dtheta[q];
            if (!isfinite(gq)) return 0;
            g[d->first_coef + d->level[k]] += gq;
            for (size_t s = 0; s < d->n_slopes; s++) {
                const bl_slope_design *sl = &d->slopes[s];
                g[sl->first_coef + sl->level[k]] += gq * sl->x[k];
            }
        }
    }
    *ll_out = ll;
    return 1;
}

static double evaluate(bl_likelihood *w, const double *coef, double *grad, double *trial_ll)
{
    const bl_model *m = w->m;
    const size_t nb = w->n_blocks, nc = m->n_coef;
    w->evaluations++;
    for (size_t j = 0; j < nc; j++)
        if (!isfinite(coef[j])) goto infeasible;
    int par = 0, probing = 0;
#ifdef _OPENMP
    int nt = w->threads > 0 ? w->threads : omp_get_max_threads();
    if ((size_t)nt > nb) nt = (int)nb;
    if (nt < 1) nt = 1;
    /* Below ~1000 trials a parallel region costs more than it saves. */
    if (nt > 1 && w->parallel == BL_PARALLEL_SPLIT && !omp_in_parallel()) {
        par = 1;
    } else if (nt > 1 && nb >= 16 && w->parallel == BL_PARALLEL_AUTO && !omp_in_parallel()) {
        if (w->evaluations >= w->next_probe && (w->probes_par < BL_LIK_PROBES || w->probes_ser < BL_LIK_PROBES)) {
            probing = 1;
            par = w->probes_par <= w->probes_ser;
        } else {
            par = w->use_par;
        }
    }
#endif
    double t_start = probing ? bl_clock_seconds() : 0;
    if (par) {
#ifdef _OPENMP
        /* Dynamic scheduling keeps both threads busy when one is slowed by other load; the sums
         * stay in block order. */
#pragma omp parallel for schedule(dynamic, 1) num_threads(nt)
#endif
        for (size_t b = 0; b < nb; b++) {
            size_t k0 = b * BL_LIK_BLOCK, k1 = k0 + BL_LIK_BLOCK < w->n ? k0 + BL_LIK_BLOCK : w->n;
            w->block_bad[b] = !eval_block(m, w->subset, coef, k0, k1, &w->block_ll[b],
                                          grad ? w->block_grad + b * w->stride : NULL, trial_ll);
        }
    } else {
        for (size_t b = 0; b < nb; b++) {
            size_t k0 = b * BL_LIK_BLOCK, k1 = k0 + BL_LIK_BLOCK < w->n ? k0 + BL_LIK_BLOCK : w->n;
            w->block_bad[b] = !eval_block(m, w->subset, coef, k0, k1, &w->block_ll[b],
                                          grad ? w->block_grad + b * w->stride : NULL, trial_ll);
        }
    }
    if (probing && par && !w->warmed) {
        w->warmed = 1; /* the first parallel region also starts the thread pool: not timed */
    } else if (probing) {
        double dt = bl_clock_seconds() - t_start;
        if (par) {
            w->time_par += dt;
            w->probes_par++;
        } else {
            w->time_ser += dt;
            w->probes_ser++;
        }
        if (w->probes_par >= BL_LIK_PROBES && w->probes_ser >= BL_LIK_PROBES) {
            w->use_par = w->time_par < w->time_ser;
            if (w->use_par) w->probe_interval = BL_LIK_REPROBE;
            else if (w->probe_interval < 64 * BL_LIK_REPROBE) w->probe_interval *= 4;
            w->time_par = w->time_ser = 0;
            w->probes_par = w->probes_ser = 0;
            w->next_probe = w->evaluations + w->probe_interval;
        }
    }
    double ll = 0;
    for (size_t b = 0; b < nb; b++) {
        if (w->block_bad[b]) goto infeasible;
        ll += w->block_ll[b];
    }
    if (!isfinite(ll)) goto infeasible;
    if (grad) {
        memset(grad, 0, nc * sizeof *grad);
        for (size_t b = 0; b < nb; b++)
            for (size_t j = 0; j < nc; j++) grad[j] += w->block_grad[b * w->stride + j];
        for (size_t j = 0; j < nc; j++)
            if (!isfinite(grad[j])) goto infeasible;
    }
    return ll;
infeasible:
    if (grad) memset(grad, 0, nc * sizeof *grad);
    return -INFINITY;
}

void bl_likelihood_set_parallel(bl_likelihood *w, bl_parallel_mode mode) { w->parallel = mode; }

double bl_likelihood_eval(bl_likelihood *w, const double *coef, double *grad) { return evaluate(w, coef, grad, NULL); }

double bl_likelihood_trials(bl_likelihood *w, const double *coef, double *trial_ll)
{
    /* every evaluated entry starts as NAN: evaluation stops at the first infeasible trial */
    if (w->subset)
        for (size_t i = 0; i < w->n; i++) trial_ll[w->subset[i]] = NAN;
    else
        for (size_t k = 0; k < w->m->n; k++) trial_ll[k] = NAN;
    double ll = evaluate(w, coef, NULL, trial_ll);
    return ll;
}
