/* Goodness of fit: observed vs predicted RT quantiles and choice shares by condition cell and by
 * regressor bin (fit_quantiles.csv).
 *
 * Sources: Hyndman & Fan (1996) "Sample quantiles in statistical packages", The American
 * Statistician 50(4) - definition 7 for observed quantiles;
 * Press, Teukolsky, Vetterling & Flannery (2007) "Numerical Recipes", 3rd ed., section 9.4 (Newton
 * steps safeguarded by bisection, "rtsafe") for the mixture quantiles, with the mixture density as
 * derivative, started from the cubic Hermite interpolant of a tabulated mixture CDF; 3-point
 * Gauss-Legendre (Abramowitz & Stegun 1964, 25.4.29) for the CDF after short steps; Markov's
 * inequality P(RT > t) <= E[RT]/t for a guaranteed upper bracket.
 */
#include "report/goodness.h"

#include "core/csvtext.h"
#include "core/groups.h"
#include "design/cells.h"
#include "core/output.h"
#include "core/strutil.h"

#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#ifdef _OPENMP
#include <omp.h>
#endif

const double bl_goodness_probs[BL_GOODNESS_NQ] = {0.1, 0.3, 0.5, 0.7, 0.9};

double bl_goodness_sample_quantile(const double *sorted, size_t n, double prob)
{
    if (n == 0 || !(prob >= 0 && prob <= 1)) return NAN;
    double h = (double)(n - 1) * prob;
    size_t lo = (size_t)floor(h);
    if (lo >= n - 1) return sorted[n - 1];
    return sorted[lo] + (h - (double)lo) * (sorted[lo + 1] - sorted[lo]);
}

/* ---- mixture quantiles ---- */

typedef struct {
    const bl_wiener_params *p;
    const double *w;
    size_t n;
    int upper;
    double target; /* prob x sum w_i P_i */
    bl_error *err;
    int quad_ok; /* no trial has nondecision_range (its density costs two CDFs): short steps may
                          take F by integrating the density (mix_step) */
} mix_ctx;

/* F = sum w_i cdf_i(t) and, when f != NULL, f = sum w_i density_i(t): trials in index order, so the
 * sums do not depend on threads. */
static bl_status mix_sums(const mix_ctx *c, double t, double *F, double *f)
{
    double sum = 0, dsum = 0;
    for (size_t i = 0; i < c->n; i++) {
        double wi = c->w ? c->w[i] : 1.0, v, ld;
        bl_status st = bl_wiener_cdf(&c->p[i], t, c->upper, &v, c->err);
        if (st != BL_OK) return st;
        sum += wi * v;
        if (f) {
            if ((st = bl_wiener_log_density(&c->p[i], t, c->upper, &ld, c->err)) != BL_OK) return st;
            dsum += wi * exp(ld);
        }
    }
    *F = sum;
    if (f) *f = dsum;
    return BL_OK;
}

static bl_status mix_density(const mix_ctx *c, double t, double *f)
{
    double dsum = 0;
    for (size_t i = 0; i < c->n; i++) {
        double ld;
        bl_status st = bl_wiener_log_density(&c->p[i], t, c->upper, &ld, c->err);
        if (st != BL_OK) return st;
        dsum += (c->w ? c->w[i] : 1.0) * exp(ld);
    }
    *f = dsum;
    return BL_OK;
}

static double earliest(const bl_wiener_params *p);

/* Distance from [x0, x1] to the nearest point where some trial's density is not analytic (its
 * earliest RT, the contaminant's edges); 0 when one lies inside. */
static double distance_to_kinks(const mix_ctx *c, double x0, double x1)
{
    double d = INFINITY;
    for (size_t i = 0; i < c->n; i++) {
        const bl_wiener_params *p = &c->p[i];
        double k[3] = {earliest(p), NAN, NAN};
        if (p->value[BL_CONTAMINATION] > 0) k[1] = p->contamination_lo, k[2] = p->contamination_hi;
        for (int j = 0; j < 3; j++) {
            if (isnan(k[j])) continue;
            double dj = k[j] < x0 ? x0 - k[j] : k[j] > x1 ? k[j] - x1 : 0;
            d = fmin(d, dj);
        }
    }
    return d;
}

/* Relative length (to the distance to the nearest kink) below which a step's F comes from quadrature. */
static const double QUAD_REL = 1e-2;

/* Sums at x after a step from xp, where the sum of CDFs Fp is known. A short step (|x - xp| below
 * QUAD_REL times the distance to every trial's kinks) integrates the mixture density over [xp, x]
 * with 3-point Gauss-Legendre: the density is analytic on a disc 100 times wider than the step, so
 * the rule's error, ~(step / distance)^6 relative to the increment, is far below the CDF's own
 * rounding; 4 densities cost less than one CDF sum plus a density (CDF ~5x a density). Otherwise
 * the CDFs are summed afresh. */
static bl_status mix_step(const mix_ctx *c, int have_prev, double xp, double Fp, double x, double *F, double *f)
{
    double lo = fmin(xp, x), hi = fmax(xp, x);
    if (!have_prev || !c->quad_ok || !(hi - lo <= QUAD_REL * distance_to_kinks(c, lo, hi))) return mix_sums(c, x, F, f);
    /* Gauss-Legendre, 3 nodes: 0, +-sqrt(3/5); weights 8/9, 5/9 (Abramowitz & Stegun 1964, 25.4.29). */
    static const double node = 0.77459666924148337704, w_out = 5.0 / 9.0, w_mid = 8.0 / 9.0;
    double mid = 0.5 * (xp + x), half = 0.5 * (x - xp), f1, f2, f3;
    bl_status st;
    if ((st = mix_density(c, mid - node * half, &f1)) != BL_OK) return st;
    if ((st = mix_density(c, mid, &f2)) != BL_OK) return st;
    if ((st = mix_density(c, mid + node * half, &f3)) != BL_OK) return st;
    *F = Fp + half * (w_out * f1 + w_mid * f2 + w_out * f3);
    return mix_density(c, x, f);
}

/* f(t) = sum w_i cdf_i(t) - target and, when df != NULL, f'(t) = sum w_i density_i(t). */
static bl_status mix_eval(const mix_ctx *c, double t, double *f, double *df)
{
    bl_status st = mix_sums(c, t, f, df);
    if (st == BL_OK) *f -= c->target;
    return st;
}

static double earliest(const bl_wiener_params *p)
{
    double t = p->value[BL_NONDECISION] - p->value[BL_NONDECISION_RANGE] / 2;
    if (p->value[BL_CONTAMINATION] > 0 && p->contamination_lo < t) t = p->contamination_lo;
    return t > 0 ? t : 0;
}

enum { MAX_STEPS = 200 };
static const double TOL = 1e-9; /* seconds */

/* Root of the increasing function f in [a, b] with f(a) <= 0 <= f(b): Newton steps on the mixture
 * density, kept inside the bracket, and bisection whenever a Newton step would leave the bracket or
 * does not halve the previous step (Press et al. 2007, Numerical Recipes 3rd ed., section 9.4,
 * "rtsafe"). x is the first point tried; after it, short steps take F by quadrature (mix_step). */
static bl_status solve(const mix_ctx *c, double a, double b, double x, double *root, bl_error *err)
{
    double dx_old = b - a, dx = dx_old, xp = x, Fp = 0;
    for (int it = 0; it < MAX_STEPS; it++) {
        double F, df;
        bl_status st = mix_step(c, it > 0, xp, Fp, x, &F, &df);
        if (st != BL_OK) return st;
        xp = x;
        Fp = F;
        double f = F - c->target;
        if (f == 0) {
            *root = x;
            return BL_OK;
        }
        if (f < 0) a = x;
        else b = x;
        /* Converged when the Newton step itself is below the tolerance. */
        if (df > 0 && fabs(f) < TOL * df) {
            *root = x - f / df;
            return BL_OK;
        }
        double xn = (df > 0 && isfinite(df)) ? x - f / df : NAN;
        if (!(xn > a && xn < b) || fabs(2 * f) > fabs(dx_old * df)) {
            dx_old = dx;
            xn = 0.5 * (a + b);
            dx = xn - x;
        } else {
            dx_old = dx;
            dx = xn - x;
        }
        if (fabs(dx) < TOL || b - a < TOL) {
            *root = xn;
            return BL_OK;
        }
        x = xn;
    }
    return bl_error_set(err, BL_ERR_NUMERIC, "mixture quantile: no convergence in %d steps (bracket [%.17g, %.17g] s)",
                        MAX_STEPS, a, b);
}

/* The tabulated mixture CDF. Nodes sit on the lattice t_i = lo + scale * 2^(i / GRID_PER_DOUBLING),
 * i = -GRID_DOWN*GRID_PER_DOUBLING .. GRID_UP*GRID_PER_DOUBLING, with lo the earliest possible RT
 * and scale the mixture's mean RT minus lo; only the stretch from the last node below the smallest
 * quantile's target to the first node above the largest is evaluated, walking out from the mean.
 * Why this grid: a first-passage-time CDF rises from 0 at lo like exp(-c / (t - lo)) and decays like
 * exp(-k t) at the right, so equal steps in log(t - lo) resolve both ends with the same relative
 * detail, whatever the time unit. Two nodes per doubling of t - lo (6 to 8 nodes from below the
 * 0.1 to above the 0.9 quantile) start Newton within about 1e-4 s of the root, so that one CDF sum
 * and one or two quadrature steps (mix_step) normally finish a quantile; 1, 3 or 4 nodes per
 * doubling cost as many or more evaluations in all (bench/bench_report.c, docs/report.md). */
enum { GRID_PER_DOUBLING = 2, GRID_DOWN = 30, GRID_UP = 40, GRID_MAX = (GRID_DOWN + GRID_UP) * GRID_PER_DOUBLING + 1 };

typedef struct {
    double t, F, f; /* time [s], sum w_i cdf_i, sum w_i density_i */
} grid_node;

typedef struct {
    grid_node node[GRID_MAX];
    int first, last; /* evaluated nodes: node[first .. last] */
} mix_grid;

static double grid_time(double lo, double scale, int i)
{
    return lo + scale * exp2((double)(i - GRID_DOWN * GRID_PER_DOUBLING) / GRID_PER_DOUBLING);
}

static bl_status grid_eval(const mix_ctx *c, mix_grid *g, int i, double lo, double scale)
{
    grid_node *nd = &g->node[i];
    nd->t = grid_time(lo, scale, i);
    return mix_sums(c, nd->t, &nd->F, &nd->f);
}

/* Nodes from below F_low to F_high or tmax (the Markov bound of the largest quantile). */
static bl_status grid_build(const mix_ctx *c, double lo, double scale, double F_low, double F_high, double tmax,
                            mix_grid *g)
{
    int mid = GRID_DOWN * GRID_PER_DOUBLING;
    bl_status st = grid_eval(c, g, mid, lo, scale);
    g->first = g->last = mid;
    while (st == BL_OK && g->node[g->first].F >= F_low && g->first > 0) st = grid_eval(c, g, --g->first, lo, scale);
    while (st == BL_OK && g->node[g->last].F < F_high && g->node[g->last].t < tmax && g->last < GRID_MAX - 1)
        st = grid_eval(c, g, ++g->last, lo, scale);
    return st;
}

/* The t in [x0, x1] where the cubic Hermite interpolant of the sums (values F, slopes f at both ends)
 * reaches target, F0 < target <= F1; Newton on the cubic safeguarded by bisection (no CDF calls). */
static double hermite_inverse(const grid_node *n0, const grid_node *n1, double target)
{
    double h = n1->t - n0->t, F0 = n0->F, F1 = n1->F, m0 = h * n0->f, m1 = h * n1->f;
    double sa = 0, sb = 1, s = (target - F0) / (F1 - F0);
    if (!(s > 0 && s < 1)) s = 0.5;
    for (int it = 0; it < 60; it++) {
        double s2 = s * s, s3 = s2 * s;
        double H = (2 * s3 - 3 * s2 + 1) * F0 + (s3 - 2 * s2 + s) * m0 + (-2 * s3 + 3 * s2) * F1 + (s3 - s2) * m1;
        double dH = (6 * s2 - 6 * s) * (F0 - F1) + (3 * s2 - 4 * s + 1) * m0 + (3 * s2 - 2 * s) * m1;
        if (H < target) sa = s;
        else sb = s;
        double sn = s - (H - target) / dH;
        if (!(sn > sa && sn < sb)) sn = 0.5 * (sa + sb);
        if (fabs(sn - s) < 1e-15 || sb - sa < 1e-15) {
            s = sn;
            break;
        }
        s = sn;
    }
    return n0->t + s * h;
}

/* One quantile from the grid: the cell holding the target gives the bracket and, by interpolation,
 * the start of the safeguarded Newton solve (normally two mixture evaluations to converge). Past the
 * last node the bracket is [last node, Markov bound], grown as long as the bound fails by rounding. */
static bl_status grid_quantile(const mix_ctx *c, const mix_grid *g, double lo, double markov, double prob, double *q,
                               bl_error *err)
{
    int k = g->first;
    while (k <= g->last && g->node[k].F < c->target) k++;
    if (k <= g->last) {
        if (k == g->first) /* the target lies below every node: bracket from the earliest RT */
            return solve(c, lo, g->node[k].t, 0.5 * (lo + g->node[k].t), q, err);
        const grid_node *n0 = &g->node[k - 1], *n1 = &g->node[k];
        return solve(c, n0->t, n1->t, hermite_inverse(n0, n1, c->target), q, err);
    }
    double a = g->node[g->last].t, b = fmax(markov, a + 4 * TOL);
    bl_status st = solve(c, a, b, a, q, err);
    for (int grow = 0; st == BL_OK && *q > b - 2 * TOL; grow++) {
        double fb;
        if ((st = mix_eval(c, b, &fb, NULL)) != BL_OK) break;
        if (fb >= 0) break;
        if (grow == 40)
            return bl_error_set(err, BL_ERR_NUMERIC, "mixture quantile %g: cannot bracket the root (F-p = %g at %g s)",
                                prob, fb, b);
        a = b;
        b = a + 2 * (b - lo);
        st = solve(c, a, b, a, q, err);
    }
    return st;
}

bl_status bl_goodness_mixture_quantiles(const bl_wiener_params *params, const double *w, size_t n, int upper,
                                        const double *probs, size_t k, double *q, double *share, bl_error *err)
{
    for (size_t j = 0; j < k; j++) q[j] = NAN;
    if (share) *share = NAN;
    if (n == 0) return BL_OK;
    double wsum = 0, psum = 0, lo = INFINITY, maxmean = 0, msum = 0, mw = 0;
    for (size_t i = 0; i < n; i++) {
        double wi = w ? w[i] : 1.0, pb, m;
        /* The boundary's own probability, not 1 - P(other): a tiny probability keeps its digits, so
         * the quantile targets prob x psum of a rare boundary are right to ~1e-15 relative. */
        bl_status st = bl_wiener_p_boundary(&params[i], upper, &pb, err);
        if (st != BL_OK) return st;
        wsum += wi;
        psum += wi * pb;
        double e = earliest(&params[i]);
        if (e < lo) lo = e;
        /* Largest conditional mean RT, for the Markov bracket below (components that never reach
         * this boundary do not count), and the mixture's mean RT, the grid's scale. */
        if (pb > 1e-300 && bl_wiener_mean_rt(&params[i], upper, &m, NULL) == BL_OK && isfinite(m)) {
            if (m > maxmean) maxmean = m;
            msum += wi * pb * m;
            mw += wi * pb;
        }
    }
    if (share) *share = psum / wsum;
    if (!(psum / wsum >= 1e-12)) return BL_OK;
    double pmin = 1, pmax = 0;
    for (size_t j = 0; j < k; j++) {
        if (!(probs[j] > 0 && probs[j] < 1))
            return bl_error_set(err, BL_ERR_RANGE, "quantile probability %g is outside (0, 1)", probs[j]);
        pmin = fmin(pmin, probs[j]);
        pmax = fmax(pmax, probs[j]);
    }
    if (k == 0) return BL_OK;

    mix_ctx c = {params, w, n, upper, 0, err, 1};
    for (size_t i = 0; i < n; i++)
        if (params[i].value[BL_NONDECISION_RANGE] > 0) c.quad_ok = 0;
    /* Scale: mixture mean minus the earliest RT (any positive value would do; this one puts the
     * mean on a node and the quantiles a few nodes away). */
    double scale = mw > 0 ? msum / mw - lo : 0;
    if (!(scale > 1e-6 && isfinite(scale))) scale = fmax(maxmean - lo, 1e-3);
    /* Markov's inequality: every conditional CDF is >= p at E[RT | boundary] / (1 - p). */
    double markov = maxmean / (1 - pmax);
    mix_grid g; /* on the stack (6.8 kB): no allocation per group */
    bl_status st = grid_build(&c, lo, scale, pmin * psum, pmax * psum, markov, &g);
    for (size_t j = 0; st == BL_OK && j < k; j++) {
        c.target = probs[j] * psum;
        st = grid_quantile(&c, &g, lo, maxmean / (1 - probs[j]), probs[j], &q[j], err);
    }
    return st;
}

/* ---- groups ---- */

typedef struct {
    char **names;
    size_t n, cap;
} strlist;

static int strlist_has(const strlist *l, const char *s)
{
    for (size_t i = 0; i < l->n; i++)
        if (strcmp(l->names[i], s) == 0) return 1;
    return 0;
}

/* Adds a borrowed pointer (no copy). */
static int strlist_add(strlist *l, const char *s)
{
    if (strlist_has(l, s)) return 1;
    if (l->n == l->cap) {
        size_t cap = l->cap ? 2 * l->cap : 8;
        char **n = realloc(l->names, cap * sizeof *n);
        if (!n) return 0;
        l->names = n;
        l->cap = cap;
    }
    l->names[l->n++] = (char *)s;
    return 1;
}

/* "col=value;col=value" for a row (missing values shown as NA), or "all" when ncols == 0. */
static char *level_label(const bl_trials *t, const int *cols, size_t ncols, size_t row)
{
    return bl_cell_label(t->table, cols, ncols, row);
}

static const bl_model_spec *find_spec(const bl_study *study, const char *name)
{
    for (size_t i = 0; i < study->n_models; i++)
        if (strcmp(study->models[i].name, name) == 0) return &study->models[i];
    return NULL;
}

static void free_groups(bl_goodness_group *g, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        free(g[i].condition);
        free(g[i].regressor);
        free(g[i].rows);
    }
    free(g);
}

typedef struct {
    bl_goodness_group *g;
    size_t n, cap;
} grouplist;

static bl_goodness_group *group_new(grouplist *l)
{
    if (l->n == l->cap) {
        size_t cap = l->cap ? 2 * l->cap : 16;
        bl_goodness_group *n = realloc(l->g, cap * sizeof *n);
        if (!n) return NULL;
        l->g = n;
        l->cap = cap;
    }
    bl_goodness_group *g = &l->g[l->n++];
    memset(g, 0, sizeof *g);
    g->regressor_low = g->regressor_high = g->regressor_mean = NAN;
    return g;
}

/* Split `rows` (n, table order) into groups by the level label of `cols`; appends groups to `out`
 * in order of first appearance, each holding its rows in table order. O(n log n) time (labels are
 * numbered by sorting) and O(n) memory (each group gets exactly its own rows). */
static bl_status split_by(const bl_trials *t, const int *cols, size_t ncols, const size_t *rows, size_t n,
                          grouplist *out, size_t *first_new, bl_error *err)
{
    *first_new = out->n;
    char **labels = calloc(n ? n : 1, sizeof *labels);
    size_t *id = malloc((n ? n : 1) * sizeof *id), n_ids = 0;
    size_t *count = NULL;
    bl_status st = BL_OK;
    if (!labels || !id) goto nomem;
    for (size_t i = 0; i < n; i++)
        if (!(labels[i] = level_label(t, cols, ncols, rows[i]))) goto nomem;
    if ((st = bl_group_strings((const char *const *)labels, n, id, &n_ids, "goodness-of-fit groups", err))) goto done;
    if (!(count = calloc(n_ids ? n_ids : 1, sizeof *count))) goto nomem;
    for (size_t i = 0; i < n; i++) count[id[i]]++;
    for (size_t i = 0; i < n; i++) {
        size_t gi = *first_new + id[i];
        if (gi == out->n) { /* ids are numbered by first appearance: a new id is always the next group */
            bl_goodness_group *g = group_new(out);
            if (!g || !(g->condition = bl_strdup(labels[i])) || !(g->rows = malloc(count[id[i]] * sizeof *g->rows)))
                goto nomem;
        }
        out->g[gi].rows[out->g[gi].n++] = rows[i];
    }
    goto done;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory grouping trials");
done:
    for (size_t i = 0; labels && i < n; i++) free(labels[i]);
    free(labels);
    free(id);
    free(count);
    return st;
}

typedef struct {
    const double *x;
    size_t row;
} rank_item;

static int rank_cmp(const void *a, const void *b)
{
    const rank_item *p = a, *q = b;
    double u = p->x[p->row], v = q->x[q->row];
    if (u < v) return -1;
    if (u > v) return 1;
    return p->row < q->row ? -1 : p->row > q->row;
}

static int cmp_row(const void *a, const void *b)
{
    size_t u = *(const size_t *)a, v = *(const size_t *)b;
    return (u > v) - (u < v);
}

/* "regressor|by1,by2": identifies a binning. Caller frees. */
static char *binning_key(const bl_slope_spec *sl)
{
    size_t len = strlen(sl->regressor) + 2;
    for (size_t i = 0; i < sl->n_by; i++) len += strlen(sl->by[i]) + 1;
    char *key = malloc(len);
    if (!key) return NULL;
    strcpy(key, sl->regressor);
    strcat(key, "|");
    for (size_t i = 0; i < sl->n_by; i++) {
        if (i) strcat(key, ",");
        strcat(key, sl->by[i]);
    }
    return key;
}

int bl_goodness_find_binning(const bl_goodness *g, const bl_slope_spec *slope)
{
    char *key = binning_key(slope);
    int found = -1;
    for (size_t i = 0; key && i < g->n_binnings; i++)
        if (strcmp(g->binnings[i], key) == 0) found = (int)i;
    free(key);
    return found;
}

static int find_col(const bl_trials *t, const char *name) { return bl_table_find(t->table, name); }

/* Build condition cells and regressor bins. */
static bl_status groups_out_of_memory(bl_error *err)
{
    return bl_error_set(err, BL_ERR_NOMEM, "out of memory building goodness-of-fit groups");
}

/* The trials used by every model (not excluded, finite RT), in table order; 0 when out of memory. */
static int common_rows(const bl_trials *t, const bl_fit_set *set, size_t **rows_out, size_t *nrows_out)
{
    size_t *rows = malloc((t->n ? t->n : 1) * sizeof *rows), nrows = 0;
    if (!rows) return 0;
    for (size_t r = 0; r < t->n; r++) {
        int ok = !t->excluded[r] && isfinite(t->rt[r]);
        for (size_t m = 0; ok && m < set->n_models; m++)
            ok = set->models[m].used && r < set->models[m].n_rows && set->models[m].used[r];
        if (ok) rows[nrows++] = r;
    }
    *rows_out = rows;
    *nrows_out = nrows;
    return 1;
}

/* The condition cells: `rows` split by the columns that define them (shared with the per-cell
 * spectra of band power), appended to gl. */
static bl_status cell_groups(const bl_study *study, const bl_trials *t, const bl_fit_set *set, const size_t *rows,
                             size_t nrows, grouplist *gl, bl_error *err)
{
    bl_status st = BL_OK;
    const char **cell_names = NULL;
    size_t n_cell = 0;
    int *cols = NULL;
    const char **names = malloc((set->n_models ? set->n_models : 1) * sizeof *names);
    if (!names) return groups_out_of_memory(err);
    for (size_t m = 0; m < set->n_models; m++) names[m] = set->models[m].name;
    if ((st = bl_cell_columns(study, names, set->n_models, &cell_names, &n_cell, err))) goto done;
    cols = malloc((n_cell + 1) * sizeof *cols);
    if (!cols) {
        st = groups_out_of_memory(err);
        goto done;
    }
    for (size_t i = 0; i < n_cell; i++) {
        cols[i] = find_col(t, cell_names[i]);
        if (cols[i] < 0) {
            st = bl_error_set(err, BL_ERR_INPUT, "%s: no column '%s' for the goodness-of-fit cells",
                              t->table->path ? t->table->path : "trials", cell_names[i]);
            goto done;
        }
    }
    size_t first;
    st = split_by(t, cols, n_cell, rows, nrows, gl, &first, err);
done:
    free((void *)cell_names);
    free((void *)names);
    free(cols);
    return st;
}

/* The bins of one level (the rows of lv) of regressor x: rank r of n goes to bin floor(5 r / n), and
 * each bin becomes a group of gl with its rows in table order. items has room for lv->n ranks.
 * Returns 0 when out of memory. */
static int add_level_bins(grouplist *gl, const bl_goodness_group *lv, const double *x, const char *regressor,
                          size_t binning, rank_item *items)
{
    for (size_t i = 0; i < lv->n; i++) items[i] = (rank_item){x, lv->rows[i]};
    qsort(items, lv->n, sizeof *items, rank_cmp);
    for (int b = 0; b < BL_GOODNESS_NBINS; b++) {
        size_t r0 = (lv->n * (size_t)b + BL_GOODNESS_NBINS - 1) / BL_GOODNESS_NBINS;
        size_t r1 = (lv->n * (size_t)(b + 1) + BL_GOODNESS_NBINS - 1) / BL_GOODNESS_NBINS;
        if (r1 <= r0) continue;
        bl_goodness_group *ng = group_new(gl);
        if (!ng || !(ng->condition = bl_strdup(lv->condition)) || !(ng->regressor = bl_strdup(regressor)) ||
            !(ng->rows = malloc((r1 - r0) * sizeof *ng->rows)))
            return 0;
        ng->bin = b + 1;
        ng->binning = binning;
        double sum = 0;
        for (size_t r = r0; r < r1; r++) {
            ng->rows[ng->n++] = items[r].row;
            sum += x[items[r].row];
        }
        ng->regressor_low = x[items[r0].row];
        ng->regressor_high = x[items[r1 - 1].row];
        ng->regressor_mean = sum / (double)(r1 - r0);
        /* Table order within the bin (rows are distinct: a total order). */
        qsort(ng->rows, ng->n, sizeof *ng->rows, cmp_row);
    }
    return 1;
}

/* The regressor bins of one slope: the rows with a finite regressor value split by its `by` columns
 * (the participant column aside), each level binned by add_level_bins into gl. */
static bl_status slope_bins(const bl_study *study, const bl_trials *t, const bl_slope_spec *sl, const size_t *rows,
                            size_t nrows, size_t binning, rank_item *items, grouplist *gl, bl_error *err)
{
    int rc = find_col(t, sl->regressor);
    if (rc < 0 || !t->table->cols[rc].numeric)
        return bl_error_set(err, BL_ERR_INPUT, "goodness of fit: regressor '%s' is not a numeric column",
                            sl->regressor);
    const double *x = t->table->cols[rc].num;
    int *bcols = malloc((sl->n_by + 1) * sizeof *bcols);
    if (!bcols) return groups_out_of_memory(err);
    size_t nb = 0;
    for (size_t i = 0; i < sl->n_by; i++) {
        if (strcmp(sl->by[i], study->trials.participant) == 0) continue;
        bcols[nb] = find_col(t, sl->by[i]);
        if (bcols[nb] < 0) {
            free(bcols);
            return bl_error_set(err, BL_ERR_INPUT, "goodness of fit: no column '%s'", sl->by[i]);
        }
        nb++;
    }
    size_t *rr = malloc((nrows ? nrows : 1) * sizeof *rr), nr = 0;
    if (!rr) {
        free(bcols);
        return groups_out_of_memory(err);
    }
    for (size_t i = 0; i < nrows; i++)
        if (isfinite(x[rows[i]])) rr[nr++] = rows[i];
    grouplist levels = {0};
    size_t first;
    bl_status st = split_by(t, bcols, nb, rr, nr, &levels, &first, err);
    free(bcols);
    free(rr);
    for (size_t L = 0; st == BL_OK && L < levels.n; L++)
        if (!add_level_bins(gl, &levels.g[L], x, sl->regressor, binning, items)) st = groups_out_of_memory(err);
    free_groups(levels.g, levels.n);
    return st;
}

static bl_status build_groups(const bl_study *study, const bl_trials *t, const bl_fit_set *set, bl_goodness *g,
                              bl_error *err)
{
    bl_status st = BL_OK;
    grouplist gl = {0};
    strlist seen_pairs = {0};
    size_t *rows = NULL, nrows = 0;
    rank_item *items = NULL;
    char **pair_keys = NULL;
    size_t n_pair_keys = 0;

    if (!common_rows(t, set, &rows, &nrows)) goto nomem;
    if ((st = cell_groups(study, t, set, rows, nrows, &gl, err)) != BL_OK) goto fail;
    g->n_cells = gl.n;

    /* Regressor bins per distinct (regressor, by columns). */
    items = malloc((nrows ? nrows : 1) * sizeof *items);
    if (!items) goto nomem;
    for (size_t m = 0; m < set->n_models; m++) {
        const bl_model_spec *sp = find_spec(study, set->models[m].name);
        if (!sp) continue;
        for (int p = 0; p < BL_NPARAM; p++) {
            const bl_param_spec *ps = &sp->param[p];
            if (ps->is_fixed) continue;
            for (size_t s = 0; s < ps->n_slopes; s++) {
                const bl_slope_spec *sl = &ps->slopes[s];
                char *key = binning_key(sl);
                if (!key) goto nomem;
                int dup = strlist_has(&seen_pairs, key);
                char **nk = dup ? pair_keys : realloc(pair_keys, (n_pair_keys + 1) * sizeof *nk);
                if (!nk || (!dup && !strlist_add(&seen_pairs, key))) {
                    free(key);
                    goto nomem;
                }
                if (dup) {
                    free(key);
                    continue;
                }
                pair_keys = nk;
                pair_keys[n_pair_keys++] = key;
                if ((st = slope_bins(study, t, sl, rows, nrows, n_pair_keys - 1, items, &gl, err))) goto fail;
            }
        }
    }
    /* Hierarchical and separate fits predict every participant from their own coefficients: one group
     * per participant too (after the bins, marked as belonging to no binning). */
    if (set->mode != BL_PARTICIPANTS_POOLED) {
        int pcol = find_col(t, study->trials.participant);
        size_t first;
        if (pcol >= 0) {
            if ((st = split_by(t, &pcol, 1, rows, nrows, &gl, &first, err))) goto fail;
            for (size_t i = first; i < gl.n; i++) gl.g[i].binning = SIZE_MAX;
        }
    }
    g->groups = gl.g;
    g->n_groups = gl.n;
    gl.g = NULL;
    g->binnings = pair_keys;
    g->n_binnings = n_pair_keys;
    pair_keys = NULL;
    n_pair_keys = 0;
    goto done;
nomem:
    st = groups_out_of_memory(err);
fail:
    free_groups(gl.g, gl.n);
done:
    free(seen_pairs.names);
    for (size_t i = 0; i < n_pair_keys; i++) free(pair_keys[i]);
    free(pair_keys);
    free(rows);
    free(items);
    return st;
}

/* ---- rows ---- */

static int cmp_double(const void *a, const void *b)
{
    double u = *(const double *)a, v = *(const double *)b;
    return (u > v) - (u < v);
}

static int cmp_params(const void *a, const void *b)
{
    const bl_wiener_params *p = a, *q = b;
    for (int i = 0; i < BL_NPARAM; i++)
        if (p->value[i] != q->value[i]) return p->value[i] < q->value[i] ? -1 : 1;
    if (p->contamination_lo != q->contamination_lo) return p->contamination_lo < q->contamination_lo ? -1 : 1;
    if (p->contamination_hi != q->contamination_hi) return p->contamination_hi < q->contamination_hi ? -1 : 1;
    return 0;
}

/* With stimulus coding, is trial `row`'s response the one its stimulus calls for? (Its drift sign
 * says which boundary that is.) */
static int answered_correctly(const bl_trials *t, size_t row)
{
    return (t->upper[row] != 0) == (t->drift_sign[row] > 0);
}

/* The same trial seen from its correct response: a trial whose stimulus points to the lower boundary
 * is mirrored (drift -> -drift, start -> 1 - start), so that its upper boundary is the correct one.
 * Mirror rule f_lower(t | v, w) = f_upper(t | -v, 1 - w) (Navarro & Fuss 2009, J. Math. Psych. 53; the contaminant
 * splits evenly between the boundaries, so it is unchanged). */
static void toward_correct(const bl_trials *t, const bl_goodness_group *gr, bl_wiener_params *par)
{
    for (size_t i = 0; i < gr->n; i++)
        if (t->drift_sign[gr->rows[i]] < 0) {
            par[i].value[BL_DRIFT] = -par[i].value[BL_DRIFT];
            par[i].value[BL_START] = 1 - par[i].value[BL_START];
        }
}

/* Fill the two rows (upper, lower; with `accuracy`: correct, error) of one model and group.
 * `par`/`w` are scratch of size group n. */
static bl_status fill_rows(const bl_trials *t, const bl_model_result *mr, const bl_goodness_group *gr, int accuracy,
                           bl_goodness_row *rows, bl_wiener_params *par, double *w, double *rts, bl_error *err)
{
    /* Distinct parameter sets with their counts: baseline-style models collapse to one per cell. */
    for (size_t i = 0; i < gr->n; i++) par[i] = mr->predicted[gr->rows[i]];
    if (accuracy) toward_correct(t, gr, par);
    qsort(par, gr->n, sizeof *par, cmp_params);
    size_t nu = 0;
    for (size_t i = 0; i < gr->n; i++) {
        if (nu > 0 && cmp_params(&par[nu - 1], &par[i]) == 0) {
            w[nu - 1] += 1;
            continue;
        }
        par[nu] = par[i];
        w[nu++] = 1;
    }
    for (int b = 0; b < 2; b++) {
        bl_goodness_row *row = &rows[b];
        int upper = b == 0;
        row->upper = upper;
        row->trials = gr->n;
        size_t nr = 0;
        for (size_t i = 0; i < gr->n; i++)
            if ((accuracy ? answered_correctly(t, gr->rows[i]) : t->upper[gr->rows[i]] != 0) == upper)
                rts[nr++] = t->rt[gr->rows[i]];
        qsort(rts, nr, sizeof *rts, cmp_double);
        row->responses = nr;
        row->observed_share = gr->n ? (double)nr / (double)gr->n : NAN;
        for (int k = 0; k < BL_GOODNESS_NQ; k++)
            row->observed_q[k] = bl_goodness_sample_quantile(rts, nr, bl_goodness_probs[k]);
        bl_status st = bl_goodness_mixture_quantiles(par, w, nu, upper, bl_goodness_probs, BL_GOODNESS_NQ,
                                                     row->predicted_q, &row->predicted_share, err);
        if (st != BL_OK) return st;
    }
    return BL_OK;
}

/* Fewest trials, summed over all (model, group) tasks, for which bl_goodness_compute starts a parallel
 * team. A trial costs about 8 us of mixture quantiles at most (both boundaries, plain parameters;
 * fewer when trials share parameters), starting a 2-thread team 0.05 ms idle and up to 7 ms on a loaded
 * 2-core machine: 1000 trials (~8 ms) is where 2 threads stopped losing to 1 there (docs/report.md). */
enum { PARALLEL_MIN_TRIALS = 1000 };

bl_status bl_goodness_compute(const bl_study *study, const bl_trials *trials, const bl_fit_set *set, int threads,
                              bl_goodness **out, bl_error *err)
{
    *out = NULL;
    bl_goodness *g = calloc(1, sizeof *g);
    if (!g) return bl_error_set(err, BL_ERR_NOMEM, "out of memory for goodness of fit");
    g->set = set;
    g->accuracy = study->trials.stimulus != NULL && trials->drift_sign != NULL;
    bl_status st = build_groups(study, trials, set, g, err);
    if (st != BL_OK) {
        free(g);
        return st;
    }
    size_t ntask = set->n_models * g->n_groups;
    g->n_rows = 2 * ntask;
    g->rows = calloc(g->n_rows ? g->n_rows : 1, sizeof *g->rows);
    bl_status *task_st = calloc(ntask ? ntask : 1, sizeof *task_st);
    bl_error *task_err = calloc(ntask ? ntask : 1, sizeof *task_err);
    size_t maxn = 1;
    for (size_t i = 0; i < g->n_groups; i++)
        if (g->groups[i].n > maxn) maxn = g->groups[i].n;
    if (!g->rows || !task_st || !task_err) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory for goodness of fit");
        goto done;
    }
    int nomem = 0;
    /* Start a team only when there are two tasks or more and enough trials over all tasks to pay for it
     * (PARALLEL_MIN_TRIALS); the rows do not depend on it. */
    size_t task_trials = 0;
    for (size_t i = 0; i < g->n_groups; i++) task_trials += g->groups[i].n;
    task_trials *= set->n_models;
    int parallel = ntask >= 2 && task_trials >= PARALLEL_MIN_TRIALS;
    (void)parallel;
#ifdef _OPENMP
    if (threads <= 0) threads = omp_get_max_threads();
#pragma omp parallel num_threads(threads) reduction(| : nomem) if (parallel)
#else
    (void)threads;
#endif
    {
        /* Per-thread scratch, reused across tasks. */
        bl_wiener_params *par = malloc(maxn * sizeof *par);
        double *w = malloc(maxn * sizeof *w), *rts = malloc(maxn * sizeof *rts);
        if (!par || !w || !rts) nomem = 1;
#ifdef _OPENMP
#pragma omp for schedule(dynamic, 1)
#endif
        for (size_t task = 0; task < ntask; task++) {
            if (!par || !w || !rts) continue;
            size_t m = task / g->n_groups, gi = task % g->n_groups;
            bl_goodness_row *rows = &g->rows[2 * task];
            rows[0].model = rows[1].model = m;
            rows[0].group = rows[1].group = gi;
            task_st[task] = fill_rows(trials, &set->models[m], &g->groups[gi], g->accuracy, rows, par, w, rts,
                                      &task_err[task]);
        }
        free(par);
        free(w);
        free(rts);
    }
    if (nomem) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory for goodness of fit");
        goto done;
    }
    /* Report the first failure in task order, whatever the thread count. */
    for (size_t task = 0; task < ntask; task++)
        if (task_st[task] != BL_OK) {
            size_t m = task / g->n_groups, gi = task % g->n_groups;
            const bl_goodness_group *gr = &g->groups[gi];
            st = bl_error_set(err, task_st[task], "goodness of fit, model '%s', %s%s%s%s: %s", set->models[m].name,
                              gr->condition, gr->regressor ? ", " : "", gr->regressor ? gr->regressor : "",
                              gr->regressor ? " bin" : "", task_err[task].message);
            break;
        }
done:
    free(task_st);
    free(task_err);
    if (st != BL_OK) {
        bl_goodness_destroy(g);
        return st;
    }
    *out = g;
    return BL_OK;
}

void bl_goodness_destroy(bl_goodness *g)
{
    if (!g) return;
    free_groups(g->groups, g->n_groups);
    free(g->rows);
    for (size_t i = 0; i < g->n_binnings; i++) free(g->binnings[i]);
    free(g->binnings);
    free(g);
}

/* ---- CSV ---- */

const char *bl_goodness_response_name(const bl_goodness *g, int upper)
{
    if (g && g->accuracy) return upper ? "correct" : "error";
    return upper ? "upper" : "lower";
}

static void csv_num(FILE *f, double v)
{
    if (isfinite(v)) fprintf(f, ",%.17g", v);
    else fputs(",NA", f);
}

/* A text field (core/csvtext.h: RFC 4180 quoting, formula starts neutralised). */
static void csv_text(FILE *f, const char *s, int lead_comma)
{
    if (lead_comma) fputc(',', f);
    bl_csv_text(f, s);
}

bl_status bl_goodness_write_csv(const bl_goodness *g, const char *path, bl_error *err)
{
    bl_outfile *o;
    bl_status st = bl_outfile_open(path, &o, err);
    if (st != BL_OK) return st;
    FILE *f = bl_outfile_stream(o);
    fputs("model,condition,regressor,bin,regressor_low,regressor_high,regressor_mean,boundary,trials,responses,"
          "observed_share,predicted_share",
          f);
    for (int k = 0; k < BL_GOODNESS_NQ; k++) {
        int pc = (int)lround(bl_goodness_probs[k] * 100);
        fprintf(f, ",observed_q%d,predicted_q%d", pc, pc);
    }
    fputc('\n', f);
    for (size_t i = 0; i < g->n_rows; i++) {
        const bl_goodness_row *r = &g->rows[i];
        const bl_goodness_group *gr = &g->groups[r->group];
        csv_text(f, g->set->models[r->model].name, 0);
        csv_text(f, gr->condition, 1);
        csv_text(f, gr->regressor, 1);
        if (gr->bin) fprintf(f, ",%d", gr->bin);
        else fputs(",NA", f);
        csv_num(f, gr->regressor_low);
        csv_num(f, gr->regressor_high);
        csv_num(f, gr->regressor_mean);
        fprintf(f, ",%s,%zu,%zu", bl_goodness_response_name(g, r->upper), r->trials, r->responses);
        csv_num(f, r->observed_share);
        csv_num(f, r->predicted_share);
        for (int k = 0; k < BL_GOODNESS_NQ; k++) {
            csv_num(f, r->observed_q[k]);
            csv_num(f, r->predicted_q[k]);
        }
        fputc('\n', f);
    }
    return bl_outfile_commit(o, err);
}
