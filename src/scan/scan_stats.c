/* Score statistics and permutation family-wise error for the scan (scan_stats.h). */
#include "scan/scan_stats.h"
#include "design/model_internal.h"
#include "fit/fit_internal.h"
#include "core/strutil.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#ifdef _OPENMP
#include <omp.h>
#endif

#define BL_SCAN_SQRT2 1.41421356237309504880

struct bl_scan_null {
    size_t n, n_units, n_tests, kmax, R1;
    size_t *unit_start;  /* n_units + 1 */
    size_t *rows;        /* n */
    size_t n_cells;      /* permutation cells */
    size_t *cell_start;  /* n_cells + 1 */
    size_t *cell_member; /* n scan indices grouped by cell, in scan order inside a cell */
    int *test_param;
    char **test_level;
    size_t *k;          /* coefficients per unit */
    double **cov, **ub; /* per unit: I_bb^-1 (k x k) and the null gradient U_b */
    double *coef0;      /* unit 0's estimates */
    double *wt;         /* n x R1: per test, score weight then kmax cross weights */
    double *vt;         /* n x n_tests: information weight (multiplies x^2) */
    double loglik;
};

size_t bl_scan_null_n_trials(const bl_scan_null *nm) { return nm->n; }
const size_t *bl_scan_null_rows(const bl_scan_null *nm) { return nm->rows; }
size_t bl_scan_null_n_tests(const bl_scan_null *nm) { return nm->n_tests; }
int bl_scan_null_test_param(const bl_scan_null *nm, size_t t) { return nm->test_param[t]; }
const char *bl_scan_null_test_level(const bl_scan_null *nm, size_t t) { return nm->test_level[t]; }
double bl_scan_null_log_likelihood(const bl_scan_null *nm) { return nm->loglik; }
const double *bl_scan_null_coef(const bl_scan_null *nm, size_t *n_coef)
{
    *n_coef = nm->k[0];
    return nm->coef0;
}

void bl_scan_null_destroy(bl_scan_null *nm)
{
    if (!nm) return;
    for (size_t u = 0; u < nm->n_units; u++) {
        free(nm->cov ? nm->cov[u] : NULL);
        free(nm->ub ? nm->ub[u] : NULL);
    }
    for (size_t t = 0; t < nm->n_tests; t++) free(nm->test_level ? nm->test_level[t] : NULL);
    free(nm->unit_start);
    free(nm->rows);
    free(nm->cell_start);
    free(nm->cell_member);
    free(nm->test_param);
    free(nm->test_level);
    free(nm->k);
    free(nm->cov);
    free(nm->ub);
    free(nm->coef0);
    free(nm->wt);
    free(nm->vt);
    free(nm);
}

/* Score u = d log f / d eta and W = -d^2 log f / d eta d eta' of used trial k (free parameters only).
 * The Hessian in the Wiener parameters is a central difference of the analytic gradient (one-sided at a
 * range edge). Returns 0 when the trial's density is not finite. */
static int trial_derivatives(const bl_model *m, const double *coef, size_t k, double *u, double W[BL_NPARAM][BL_NPARAM])
{
    bl_wiener_params p;
    if (!bl_model_predict(m, coef, k, &p)) return 0;
    double lf, g0[BL_NPARAM], d1[BL_NPARAM], d2[BL_NPARAM], H[BL_NPARAM][BL_NPARAM];
    if (bl_wiener_log_density_grad(&p, m->rt[k], m->upper[k], &lf, g0, NULL) != BL_OK || !isfinite(lf)) return 0;
    for (int q = 0; q < BL_NPARAM; q++) {
        int lg = m->par[q].is_free && m->par[q].link == BL_LINK_LOG;
        d1[q] = lg ? p.value[q] : q == BL_DRIFT ? (double)m->sign[k] : 1.0;
        d2[q] = lg ? p.value[q] : 0.0;
    }
    for (int b = 0; b < BL_NPARAM; b++) {
        if (!m->par[b].is_free) continue;
        double h = 1e-4 * fmax(fabs(p.value[b]), 0.05), gp[BL_NPARAM], gm[BL_NPARAM], l1, l2;
        bl_wiener_params pp = p, pm = p;
        pp.value[b] += h;
        pm.value[b] -= h;
        int okp = bl_model_params_valid(&pp) &&
                  !bl_wiener_log_density_grad(&pp, m->rt[k], m->upper[k], &l1, gp, NULL) && isfinite(l1);
        int okm = bl_model_params_valid(&pm) &&
                  !bl_wiener_log_density_grad(&pm, m->rt[k], m->upper[k], &l2, gm, NULL) && isfinite(l2);
        for (int q = 0; q < BL_NPARAM; q++) {
            if (okp && okm) H[q][b] = (gp[q] - gm[q]) / (2 * h);
            else if (okp) H[q][b] = (gp[q] - g0[q]) / h;
            else if (okm) H[q][b] = (g0[q] - gm[q]) / h;
            else return 0;
        }
    }
    for (int q = 0; q < BL_NPARAM; q++) {
        u[q] = m->par[q].is_free ? g0[q] * d1[q] : 0;
        for (int b = 0; b < BL_NPARAM; b++) {
            if (!m->par[q].is_free || !m->par[b].is_free) {
                W[q][b] = 0;
                continue;
            }
            double hs = 0.5 * (H[q][b] + H[b][q]);
            W[q][b] = -(hs * d1[q] * d1[b] + (q == b ? g0[q] * d2[q] : 0));
        }
    }
    return 1;
}

/* Nonzero design entries of parameter q at used trial k: coefficient indices and values. */
static size_t design_row(const bl_model *m, int q, size_t k, size_t *idx, double *val)
{
    const bl_param_design *d = &m->par[q];
    size_t n = 0;
    idx[n] = d->first_coef + d->level[k];
    val[n++] = 1.0;
    for (size_t s = 0; s < d->n_slopes; s++) {
        idx[n] = d->slopes[s].first_coef + d->slopes[s].level[k];
        val[n++] = d->slopes[s].x[k];
    }
    return n;
}

#define BL_SCAN_MAX_ENTRIES 64

/* Weights of every test for the trials of one unit (scan indices j0..), its information and gradient. */
static bl_status unit_weights(bl_scan_null *nm, size_t u, const bl_model *m, const double *coef, size_t j0,
                              const unsigned char *level, bl_error *err)
{
    size_t K = m->n_coef, T = nm->n_tests, R1 = nm->R1;
    double *info = calloc(K * K, sizeof *info), *cross = malloc(BL_NPARAM * K * sizeof *cross);
    nm->cov[u] = malloc(K * K * sizeof *nm->cov[u]);
    nm->ub[u] = calloc(K, sizeof *nm->ub[u]);
    bl_status st = BL_OK;
    if (!info || !cross || !nm->cov[u] || !nm->ub[u]) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory for the scan's null model");
        goto done;
    }
    for (size_t k = 0; k < m->n; k++) {
        double uq[BL_NPARAM], W[BL_NPARAM][BL_NPARAM];
        if (!trial_derivatives(m, coef, k, uq, W)) {
            st = bl_error_set(err, BL_ERR_NUMERIC,
                              "scan: the null model '%s' gives trial %zu (row %zu) no finite density "
                              "at its estimates",
                              m->name, k + 1, m->row[k] + 1);
            goto done;
        }
        /* cross[q][j] = sum_p W_qp Z_pj; info += Z' W Z; U_b += Z' u */
        memset(cross, 0, BL_NPARAM * K * sizeof *cross);
        for (int p = 0; p < BL_NPARAM; p++) {
            if (!m->par[p].is_free) continue;
            size_t idx[BL_SCAN_MAX_ENTRIES];
            double val[BL_SCAN_MAX_ENTRIES];
            size_t ne = design_row(m, p, k, idx, val);
            for (size_t e = 0; e < ne; e++) {
                nm->ub[u][idx[e]] += uq[p] * val[e];
                for (int q = 0; q < BL_NPARAM; q++) cross[q * K + idx[e]] += W[q][p] * val[e];
            }
        }
        for (int p = 0; p < BL_NPARAM; p++) {
            if (!m->par[p].is_free) continue;
            size_t idx[BL_SCAN_MAX_ENTRIES];
            double val[BL_SCAN_MAX_ENTRIES];
            size_t ne = design_row(m, p, k, idx, val);
            for (size_t e = 0; e < ne; e++)
                for (size_t j = 0; j < K; j++) info[idx[e] * K + j] += val[e] * cross[p * K + j];
        }
        size_t j = j0 + k;
        for (size_t t = 0; t < T; t++) {
            int q = nm->test_param[t];
            int in = level[t * nm->n + j];
            double *w = nm->wt + j * R1 + t * (1 + nm->kmax);
            w[0] = in ? uq[q] : 0;
            for (size_t c = 0; c < K; c++) w[1 + c] = in ? cross[q * K + c] : 0;
            nm->vt[j * T + t] = in ? W[q][q] : 0;
        }
    }
    double cond;
    int pd = 0;
    if ((st = bl_information_inverse(info, K, nm->cov[u], &cond, &pd, err))) goto done;
    if (pd == 0)
        st = bl_error_set(err, BL_ERR_NUMERIC,
                          "scan: the observed information of the null model '%s' is not positive "
                          "definite; the score test needs a null model with a clear optimum",
                          m->name);
done:
    free(info);
    free(cross);
    return st;
}

/* Level of every scan parameter per scan trial: level[t * n + j] = 1 when trial j belongs to test t. */
static bl_status make_tests(bl_scan_null *nm, const char *study_path, const bl_trials *tr, const bl_scan_param *params,
                            size_t n_params, unsigned char **level_out, bl_error *err)
{
    size_t n = nm->n, cap = 0;
    char **text = calloc(n ? n : 1, sizeof *text);
    unsigned char *level = NULL;
    bl_status st = BL_OK;
    if (!text) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    for (size_t i = 0; i < n_params && !st; i++) {
        for (size_t b = 0; b < params[i].n_by; b++)
            if (bl_table_find(tr->table, params[i].by[b]) < 0) {
                st = bl_error_set(err, BL_ERR_INPUT,
                                  "%s: key \"scan.parameters[%zu].by\": column \"%s\" is not in the "
                                  "trial table %s",
                                  study_path, i, params[i].by[b], tr->table->path ? tr->table->path : "");
                goto done;
            }
        size_t first_test = nm->n_tests;
        for (size_t j = 0; j < n; j++) {
            size_t len = 1;
            for (size_t b = 0; b < params[i].n_by; b++) {
                const char *v = tr->table->cols[bl_table_find(tr->table, params[i].by[b])].text[nm->rows[j]];
                len += strlen(v ? v : "NA") + 1;
            }
            free(text[j]);
            if (!(text[j] = calloc(len, 1))) goto nomem;
            for (size_t b = 0; b < params[i].n_by; b++) {
                const char *v = tr->table->cols[bl_table_find(tr->table, params[i].by[b])].text[nm->rows[j]];
                if (b) strcat(text[j], ":");
                strcat(text[j], v ? v : "NA");
            }
            size_t t = first_test;
            while (t < nm->n_tests && strcmp(nm->test_level[t], text[j])) t++;
            if (t == nm->n_tests) {
                if (nm->n_tests == cap) {
                    cap = cap ? 2 * cap : 8;
                    int *tp = realloc(nm->test_param, cap * sizeof *tp);
                    if (tp) nm->test_param = tp;
                    char **tl = realloc(nm->test_level, cap * sizeof *tl);
                    if (tl) nm->test_level = tl;
                    unsigned char *lv = realloc(level, cap * n);
                    if (lv) level = lv;
                    if (!tp || !tl || !lv) goto nomem;
                }
                nm->test_param[t] = params[i].param;
                if (!(nm->test_level[t] = bl_strdup(text[j]))) goto nomem;
                memset(level + t * n, 0, n);
                nm->n_tests++;
            }
            level[t * n + j] = 1;
        }
    }
    goto done;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
done:
    for (size_t j = 0; j < n; j++) free(text[j]);
    free(text);
    if (st) free(level);
    else *level_out = level;
    return st;
}

/* Permutation cells: participant x the null model's per/by columns x the scan's by columns (by text). */
static bl_status make_cells(bl_scan_null *nm, const bl_model_spec *spec, const bl_trials *tr,
                            const bl_scan_param *params, size_t n_params, bl_error *err)
{
    size_t n = nm->n, n_cols = 0;
    int cols[256];
    for (int q = 0; q < BL_NPARAM; q++) {
        const bl_param_spec *ps = &spec->param[q];
        for (size_t i = 0; i < ps->n_per && n_cols < 256; i++) cols[n_cols++] = bl_table_find(tr->table, ps->per[i]);
        for (size_t s = 0; s < ps->n_slopes; s++)
            for (size_t i = 0; i < ps->slopes[s].n_by && n_cols < 256; i++)
                cols[n_cols++] = bl_table_find(tr->table, ps->slopes[s].by[i]);
    }
    for (size_t i = 0; i < n_params; i++)
        for (size_t b = 0; b < params[i].n_by && n_cols < 256; b++)
            cols[n_cols++] = bl_table_find(tr->table, params[i].by[b]);
    size_t *cell = malloc((n ? n : 1) * sizeof *cell), *first = malloc((n ? n : 1) * sizeof *first);
    nm->cell_member = malloc((n ? n : 1) * sizeof *nm->cell_member);
    if (!cell || !first || !nm->cell_member) {
        free(cell);
        free(first);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    size_t nc = 0;
    for (size_t j = 0; j < n; j++) {
        size_t c = 0, r = nm->rows[j];
        for (c = 0; c < nc; c++) {
            size_t q = nm->rows[first[c]];
            int same = tr->participant[q] == tr->participant[r];
            for (size_t k = 0; same && k < n_cols; k++) {
                if (cols[k] < 0) continue;
                const char *a = tr->table->cols[cols[k]].text[r], *b = tr->table->cols[cols[k]].text[q];
                same = (!a && !b) || (a && b && !strcmp(a, b));
            }
            if (same) break;
        }
        if (c == nc) first[nc++] = j;
        cell[j] = c;
    }
    nm->n_cells = nc;
    nm->cell_start = calloc(nc + 1, sizeof *nm->cell_start);
    if (!nm->cell_start) {
        free(cell);
        free(first);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    for (size_t j = 0; j < n; j++) nm->cell_start[cell[j] + 1]++;
    for (size_t c = 0; c < nc; c++) nm->cell_start[c + 1] += nm->cell_start[c];
    memset(first, 0, nc * sizeof *first);
    for (size_t j = 0; j < n; j++) nm->cell_member[nm->cell_start[cell[j]] + first[cell[j]]++] = j;
    free(cell);
    free(first);
    return BL_OK;
}

static bl_status fit_units(const bl_model_spec *spec, const bl_trials *trials, bl_participants_mode mode,
                           const bl_fit_options *fo, bl_unit_set *units, double *loglik, bl_warnings *warn,
                           bl_error *err)
{
    bl_status st = bl_build_units(spec, trials, mode, fo, units, NULL, warn, err);
    *loglik = 0;
    for (size_t u = 0; !st && u < units->n_units; u++) {
        bl_fit_result res;
        st = bl_fit_core(units->models[u], units->liks[u], fo, bl_fit_default_starts(fo), NULL, 1, &res, units->coef[u],
                         err);
        if (st) break;
        if (!res.converged)
            bl_warnings_add(warn,
                            "scan: the null model '%s'%s did not converge clearly (gradient %.3g); the score "
                            "statistics assume its optimum",
                            spec->name, units->n_units > 1 ? " (one participant)" : "", res.diag.gradient_norm);
        *loglik += res.log_likelihood;
        bl_fit_result_clear(&res);
    }
    return st;
}

bl_status bl_scan_null_create(const bl_study *study, const bl_model_spec *spec, const bl_trials *trials,
                              bl_participants_mode mode, const bl_scan_param *params, size_t n_params, int threads,
                              unsigned long seed, bl_scan_null **out, bl_warnings *warn, bl_error *err)
{
    *out = NULL;
    bl_fit_options fo;
    bl_fit_options_default(&fo);
    fo.threads = threads;
    fo.seed = seed;
    bl_unit_set units;
    unsigned char *level = NULL;
    bl_scan_null *nm = calloc(1, sizeof *nm);
    if (!nm) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    bl_status st = fit_units(spec, trials, mode, &fo, &units, &nm->loglik, warn, err);
    if (st) goto fail_nounits;
    for (size_t i = 0; i < n_params; i++)
        if (!units.models[0]->par[params[i].param].is_free) {
            st = bl_error_set(err, BL_ERR_INPUT,
                              "%s: key \"scan.parameters[%zu]\": %s is fixed in the null model '%s'; "
                              "a slope can only be tested on a parameter the null model estimates",
                              study->path, i, bl_param_name(params[i].param), spec->name);
            goto fail;
        }
    nm->n_units = units.n_units;
    nm->unit_start = calloc(units.n_units + 1, sizeof *nm->unit_start);
    nm->k = calloc(units.n_units, sizeof *nm->k);
    nm->cov = calloc(units.n_units, sizeof *nm->cov);
    nm->ub = calloc(units.n_units, sizeof *nm->ub);
    if (!nm->unit_start || !nm->k || !nm->cov || !nm->ub) goto nomem;
    for (size_t u = 0; u < units.n_units; u++) {
        nm->k[u] = units.models[u]->n_coef;
        nm->kmax = nm->k[u] > nm->kmax ? nm->k[u] : nm->kmax;
        nm->unit_start[u + 1] = nm->unit_start[u] + units.models[u]->n;
    }
    nm->n = nm->unit_start[units.n_units];
    if (!(nm->rows = malloc(nm->n * sizeof *nm->rows)) || !(nm->coef0 = malloc(nm->k[0] * sizeof *nm->coef0)))
        goto nomem;
    memcpy(nm->coef0, units.coef[0], nm->k[0] * sizeof *nm->coef0);
    for (size_t u = 0; u < units.n_units; u++)
        for (size_t k = 0; k < units.models[u]->n; k++) nm->rows[nm->unit_start[u] + k] = units.models[u]->row[k];
    if ((st = make_tests(nm, study->path, trials, params, n_params, &level, err))) goto fail;
    if ((st = make_cells(nm, spec, trials, params, n_params, err))) goto fail;
    nm->R1 = nm->n_tests * (1 + nm->kmax);
    if (!(nm->wt = calloc(nm->n * nm->R1, sizeof *nm->wt)) || !(nm->vt = calloc(nm->n * nm->n_tests, sizeof *nm->vt)))
        goto nomem;
    for (size_t u = 0; u < units.n_units && !st; u++)
        st = unit_weights(nm, u, units.models[u], units.coef[u], nm->unit_start[u], level, err);
    goto fail;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory for the scan's null model");
fail:
    free(level);
    bl_unit_set_free(&units);
    if (st) {
        bl_scan_null_destroy(nm);
        return st;
    }
    *out = nm;
    return BL_OK;
fail_nounits:
    bl_scan_null_destroy(nm);
    return st;
}

/* ---- statistics of one regressor ---- */

typedef struct {
    double *acc, *acc2, *ca; /* R1, n_tests, kmax */
} cell_work;

/* Efficient score and variance of every test for regressor x, with weights wt/vt (maybe permuted).
 * Sums run over trials in order, unit by unit. score/igg (may be NULL) receive the unadjusted parts. */
static void cell_tests(const bl_scan_null *nm, const double *wt, const double *vt, const double *x, cell_work *cw,
                       double *eff, double *v, double *score, double *igg)
{
    size_t T = nm->n_tests, R1 = nm->R1, KM = nm->kmax;
    for (size_t t = 0; t < T; t++) {
        eff[t] = v[t] = 0;
        if (score) score[t] = 0;
        if (igg) igg[t] = 0;
    }
    for (size_t u = 0; u < nm->n_units; u++) {
        double *acc = cw->acc, *acc2 = cw->acc2;
        memset(acc, 0, R1 * sizeof *acc);
        memset(acc2, 0, T * sizeof *acc2);
        for (size_t j = nm->unit_start[u]; j < nm->unit_start[u + 1]; j++) {
            double xj = x[j], x2 = xj * xj;
            const double *w = wt + j * R1, *vv = vt + j * T;
            for (size_t r = 0; r < R1; r++) acc[r] += xj * w[r];
            for (size_t t = 0; t < T; t++) acc2[t] += x2 * vv[t];
        }
        size_t K = nm->k[u];
        const double *cov = nm->cov[u], *ub = nm->ub[u];
        for (size_t t = 0; t < T; t++) {
            const double *a = acc + t * (1 + KM) + 1;
            double s = acc[t * (1 + KM)], quad = 0, adj = 0;
            for (size_t i = 0; i < K; i++) {
                double c = 0;
                for (size_t j = 0; j < K; j++) c += cov[i * K + j] * a[j];
                quad += a[i] * c;
                adj += c * ub[i];
            }
            eff[t] += s - adj;
            v[t] += acc2[t] - quad;
            if (score) score[t] += s;
            if (igg) igg[t] += acc2[t];
        }
    }
}

static int cell_work_init(const bl_scan_null *nm, cell_work *cw)
{
    cw->acc = malloc((nm->R1 + 1) * sizeof *cw->acc);
    cw->acc2 = malloc((nm->n_tests + 1) * sizeof *cw->acc2);
    cw->ca = malloc((nm->kmax + 1) * sizeof *cw->ca);
    return cw->acc && cw->acc2 && cw->ca;
}

static void cell_work_free(cell_work *cw)
{
    free(cw->acc);
    free(cw->acc2);
    free(cw->ca);
}

void bl_scan_null_score(const bl_scan_null *nm, const double *x, double *score, double *eff, double *igg, double *v)
{
    cell_work cw;
    size_t T = nm->n_tests;
    double *e = malloc(T * sizeof *e), *vv = malloc(T * sizeof *vv);
    if (!cell_work_init(nm, &cw) || !e || !vv) {
        for (size_t t = 0; t < T; t++) {
            if (score) score[t] = NAN;
            if (eff) eff[t] = NAN;
            if (igg) igg[t] = NAN;
            if (v) v[t] = NAN;
        }
    } else {
        cell_tests(nm, nm->wt, nm->vt, x, &cw, e, vv, score, igg);
        for (size_t t = 0; t < T; t++) {
            if (eff) eff[t] = e[t];
            if (v) v[t] = vv[t];
        }
    }
    free(e);
    free(vv);
    cell_work_free(&cw);
}

/* ---- clusters (Maris & Oostenveld 2007): 4-neighbour cells on the frequency x window grid whose
 * statistic passes the threshold with the same sign ---- */

static size_t label_clusters(const double *stat, const double *z, size_t nf, size_t nw, double thr, long *label,
                             double *mass, size_t *stack)
{
    size_t nc = nf * nw, n_clusters = 0;
    for (size_t c = 0; c < nc; c++) label[c] = 0;
    for (size_t c0 = 0; c0 < nc; c0++) {
        if (label[c0] || !(stat[c0] > thr)) continue;
        long id = (long)++n_clusters;
        double m = 0;
        size_t top = 0;
        stack[top++] = c0;
        label[c0] = id;
        while (top) {
            size_t c = stack[--top], f = c / nw, w = c % nw;
            m += stat[c];
            size_t nb[4];
            int nn = 0;
            if (f > 0) nb[nn++] = c - nw;
            if (f + 1 < nf) nb[nn++] = c + nw;
            if (w > 0) nb[nn++] = c - 1;
            if (w + 1 < nw) nb[nn++] = c + 1;
            for (int i = 0; i < nn; i++) {
                size_t d = nb[i];
                if (!label[d] && stat[d] > thr && (z[d] > 0) == (z[c0] > 0)) {
                    label[d] = id;
                    stack[top++] = d;
                }
            }
        }
        mass[n_clusters - 1] = m;
    }
    return n_clusters;
}

void bl_scan_stats_destroy(bl_scan_stats *s)
{
    if (!s) return;
    free(s->statistic);
    free(s->z);
    free(s->estimate);
    free(s->p);
    free(s->p_familywise);
    free(s->cluster);
    free(s->cluster_mass);
    free(s->cluster_p);
    free(s->null_max);
    free(s);
}

/* Statistics of every cell and test for weights wt/vt: stat and z laid out [t * n_cells + c]. Returns
 * the largest statistic, or the largest cluster mass when clusters are asked for. */
static double grid_pass(const bl_scan_null *nm, const double *wt, const double *vt, const double *x, size_t nf,
                        size_t nw, double thr_cluster, cell_work *cw, double *eff, double *v, double *stat, double *z,
                        double *est, long *label, double *mass, size_t *stack)
{
    size_t T = nm->n_tests, nc = nf * nw, n = nm->n;
    double best = 0;
    for (size_t c = 0; c < nc; c++) {
        cell_tests(nm, wt, vt, x + c * n, cw, eff, v, NULL, NULL);
        for (size_t t = 0; t < T; t++) {
            double s2 = v[t] > 0 ? eff[t] * eff[t] / v[t] : NAN;
            stat[t * nc + c] = s2;
            z[t * nc + c] = v[t] > 0 ? eff[t] / sqrt(v[t]) : NAN;
            if (est) est[t * nc + c] = v[t] > 0 ? eff[t] / v[t] : NAN;
            if (!label && s2 > best) best = s2;
        }
    }
    if (label)
        for (size_t t = 0; t < T; t++) {
            size_t k = label_clusters(stat + t * nc, z + t * nc, nf, nw, thr_cluster, label + t * nc, mass, stack);
            for (size_t i = 0; i < k; i++) best = mass[i] > best ? mass[i] : best;
        }
    return best;
}

/* Permutation p: weights moved within the permutation cells by a Fisher-Yates shuffle of their own
 * generator, seeded from (seed, p). */
static void permute_weights(const bl_scan_null *nm, gsl_rng *rng, unsigned long seed, size_t p, size_t *idx, double *wt,
                            double *vt)
{
    gsl_rng_set(rng, bl_fit_mix_seed(seed, "scan permutation", (unsigned long)p));
    size_t R1 = nm->R1, T = nm->n_tests;
    for (size_t c = 0; c < nm->n_cells; c++) {
        size_t a = nm->cell_start[c], b = nm->cell_start[c + 1], m = b - a;
        for (size_t i = 0; i < m; i++) idx[i] = nm->cell_member[a + i];
        for (size_t i = m; i > 1; i--) {
            size_t r = (size_t)gsl_rng_uniform_int(rng, (unsigned long)i);
            size_t tmp = idx[i - 1];
            idx[i - 1] = idx[r];
            idx[r] = tmp;
        }
        for (size_t i = 0; i < m; i++) {
            size_t to = nm->cell_member[a + i], from = idx[i];
            memcpy(wt + to * R1, nm->wt + from * R1, R1 * sizeof *wt);
            memcpy(vt + to * T, nm->vt + from * T, T * sizeof *vt);
        }
    }
}

static bl_status permutations_run(const bl_scan_null *nm, const double *x, size_t nf, size_t nw, bl_scan_stats *s,
                                  unsigned long seed, int threads, void (*progress)(void *, size_t, size_t), void *user)
{
    size_t P = s->permutations, T = nm->n_tests, nc = nf * nw, n = nm->n;
    int cluster = s->correction == BL_SCAN_CORRECTION_CLUSTER;
    int failed = 0;
    size_t done = 0;
    int nt = threads > 0 ? threads : 1;
#ifdef _OPENMP
    if (threads <= 0) nt = omp_get_max_threads();
#pragma omp parallel num_threads(nt)
#endif
    {
        cell_work cw;
        int ok = cell_work_init(nm, &cw);
        double *wt = malloc(n * nm->R1 * sizeof *wt), *vt = malloc(n * T * sizeof *vt);
        double *eff = malloc(T * sizeof *eff), *v = malloc(T * sizeof *v);
        double *stat = malloc(T * nc * sizeof *stat), *z = malloc(T * nc * sizeof *z);
        long *label = cluster ? malloc(T * nc * sizeof *label) : NULL;
        double *mass = cluster ? malloc(nc * sizeof *mass) : NULL;
        size_t *stack = cluster ? malloc(nc * sizeof *stack) : NULL, *idx = malloc((n ? n : 1) * sizeof *idx);
        gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
        ok = ok && wt && vt && eff && v && stat && z && idx && rng && (!cluster || (label && mass && stack));
        if (!ok) {
#ifdef _OPENMP
#pragma omp atomic write
#endif
            failed = 1;
        }
#ifdef _OPENMP
#pragma omp for schedule(dynamic, 1)
#endif
        for (size_t p = 0; p < P; p++) {
            if (!ok) continue;
            permute_weights(nm, rng, seed, p, idx, wt, vt);
            s->null_max[p] = grid_pass(nm, wt, vt, x, nf, nw, s->cluster_statistic, &cw, eff, v, stat, z, NULL, label,
                                       mass, stack);
            size_t d;
#ifdef _OPENMP
#pragma omp atomic capture
#endif
            d = ++done;
#ifdef _OPENMP
            if (omp_get_thread_num() == 0)
#endif
                if (progress && (d % 10 == 0 || d == P)) progress(user, d, P);
        }
        cell_work_free(&cw);
        free(wt);
        free(vt);
        free(eff);
        free(v);
        free(stat);
        free(z);
        free(label);
        free(mass);
        free(stack);
        free(idx);
        gsl_rng_free(rng);
    }
    (void)nt;
    return failed ? BL_ERR_NOMEM : BL_OK;
}

static size_t count_at_least(const double *v, size_t n, double x)
{
    size_t k = 0;
    for (size_t i = 0; i < n; i++) k += v[i] >= x * (1 - 1e-12);
    return k;
}

bl_status bl_scan_grid(const bl_scan_null *nm, const double *x, size_t nf, size_t nw, size_t permutations,
                       bl_scan_correction correction, double cluster_threshold, unsigned long seed, int threads,
                       void (*progress)(void *, size_t, size_t), void *user, bl_scan_stats **out, bl_error *err)
{
    *out = NULL;
    size_t T = nm->n_tests, nc = nf * nw;
    bl_scan_stats *s = calloc(1, sizeof *s);
    cell_work cw = {0};
    double *eff = malloc(T * sizeof *eff), *v = malloc(T * sizeof *v);
    size_t *stack = malloc(nc * sizeof *stack);
    if (!s || !eff || !v || !stack || !cell_work_init(nm, &cw)) goto nomem;
    s->n_freqs = nf;
    s->n_windows = nw;
    s->n_tests = T;
    s->permutations = permutations;
    s->correction = correction;
    s->cluster_threshold = cluster_threshold;
    s->cluster_statistic = gsl_cdf_chisq_Qinv(cluster_threshold, 1.0);
    int cl = correction == BL_SCAN_CORRECTION_CLUSTER;
    if (!(s->statistic = malloc(T * nc * sizeof *s->statistic)) || !(s->z = malloc(T * nc * sizeof *s->z)) ||
        !(s->estimate = malloc(T * nc * sizeof *s->estimate)) || !(s->p = malloc(T * nc * sizeof *s->p)) ||
        !(s->p_familywise = malloc(T * nc * sizeof *s->p_familywise)) ||
        !(s->cluster = calloc(T * nc, sizeof *s->cluster)) ||
        !(s->cluster_mass = malloc(T * nc * sizeof *s->cluster_mass)) ||
        !(s->cluster_p = malloc(T * nc * sizeof *s->cluster_p)) ||
        !(s->null_max = malloc((permutations ? permutations : 1) * sizeof *s->null_max)))
        goto nomem;
    grid_pass(nm, nm->wt, nm->vt, x, nf, nw, s->cluster_statistic, &cw, eff, v, s->statistic, s->z, s->estimate, NULL,
              NULL, NULL);
    /* clusters of the observed grid, numbered across tests */
    for (size_t t = 0; t < T; t++) {
        size_t k = label_clusters(s->statistic + t * nc, s->z + t * nc, nf, nw, s->cluster_statistic,
                                  s->cluster + t * nc, s->cluster_mass + s->n_clusters, stack);
        for (size_t c = 0; c < nc; c++)
            if (s->cluster[t * nc + c]) s->cluster[t * nc + c] += (long)s->n_clusters;
        s->n_clusters += k;
    }
    for (size_t i = 0; i < T * nc; i++) s->p[i] = isfinite(s->z[i]) ? erfc(fabs(s->z[i]) / BL_SCAN_SQRT2) : NAN;
    bl_status st = permutations ? permutations_run(nm, x, nf, nw, s, seed, threads, progress, user) : BL_OK;
    if (st) goto nomem;
    double denom = 1.0 + (double)permutations;
    for (size_t k = 0; k < s->n_clusters; k++)
        s->cluster_p[k] = cl && permutations
                              ? (1.0 + (double)count_at_least(s->null_max, permutations, s->cluster_mass[k])) / denom
                              : NAN;
    for (size_t i = 0; i < T * nc; i++) {
        if (!permutations || !isfinite(s->statistic[i])) s->p_familywise[i] = NAN;
        else if (cl) s->p_familywise[i] = s->cluster[i] ? s->cluster_p[s->cluster[i] - 1] : NAN;
        else s->p_familywise[i] = (1.0 + (double)count_at_least(s->null_max, permutations, s->statistic[i])) / denom;
    }
    free(eff);
    free(v);
    free(stack);
    cell_work_free(&cw);
    *out = s;
    return BL_OK;
nomem:
    free(eff);
    free(v);
    free(stack);
    cell_work_free(&cw);
    bl_scan_stats_destroy(s);
    return bl_error_set(err, BL_ERR_NOMEM, "out of memory for the scan statistics");
}
