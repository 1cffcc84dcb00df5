/* Goodness of fit: sample quantiles, mixture quantiles, choice shares, groups and the CSV.
 * Outside references: numpy.quantile (values below were produced by numpy 1.24.2, default method
 * "linear" = Hyndman & Fan 1996 definition 7); GSL adaptive quadrature (gsl_integration_qags) of
 * the Wiener densities; the closed-form absorption probability of a Wiener process with drift
 * (Cox & Miller 1965, "The Theory of Stochastic Processes", section 5.7):
 *   P(upper) = (1 - exp(-2 v a w)) / (1 - exp(-2 v a)), s = 1. */
#include "engine/wiener_sample.h"
#include "report/goodness.h"
#include "harness.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_integration.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <gsl/gsl_roots.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

static double p_upper_closed(double a, double v, double w)
{
    if (v == 0) return w;
    return -expm1(-2 * v * a * w) / -expm1(-2 * v * a);
}

typedef struct {
    const bl_wiener_params *p;
    int upper;
} dens_ctx;

static double dens(double t, void *vp)
{
    dens_ctx *c = vp;
    double ld;
    if (bl_wiener_log_density(c->p, t, c->upper, &ld, NULL) != BL_OK) return NAN;
    return exp(ld);
}

/* P(RT <= q, boundary) by GSL quadrature of the density. */
static double cdf_quad(const bl_wiener_params *p, int upper, double q)
{
    gsl_integration_workspace *ws = gsl_integration_workspace_alloc(2000);
    dens_ctx c = {p, upper};
    gsl_function F = {dens, &c};
    double r = NAN, e;
    double t0 = p->value[BL_NONDECISION] - p->value[BL_NONDECISION_RANGE] / 2;
    if (q > t0 && gsl_integration_qags(&F, t0, q, 1e-13, 1e-10, 2000, ws, &r, &e) != GSL_SUCCESS) r = NAN;
    if (q <= t0) r = 0;
    gsl_integration_workspace_free(ws);
    return r;
}

static bl_wiener_params mk(double a, double v, double t0, double w)
{
    bl_wiener_params p;
    bl_wiener_params_default(&p);
    p.value[BL_THRESHOLD] = a;
    p.value[BL_DRIFT] = v;
    p.value[BL_NONDECISION] = t0;
    p.value[BL_START] = w;
    return p;
}

HARNESS_CASE(sample_quantiles_numpy)
{
    /* numpy.quantile(x, p) for these 12 values (numpy 1.24.2, method "linear"). */
    double x[12] = {0.512, 0.387, 0.941, 0.455, 0.623, 0.701, 0.398, 1.204, 0.566, 0.489, 0.833, 0.4717};
    for (int i = 1; i < 12; i++)
        for (int j = i; j > 0 && x[j - 1] > x[j]; j--) {
            double t = x[j];
            x[j] = x[j - 1];
            x[j - 1] = t;
        }
    const double np_p[6] = {0.1, 0.3, 0.5, 0.7, 0.9, 0.25};
    const double np_q[6] = {0.4037, 0.47689, 0.5389999999999999, 0.6775999999999999, 0.9302, 0.467525};
    for (int i = 0; i < 6; i++)
        check_rel(bl_goodness_sample_quantile(x, 12, np_p[i]), np_q[i], 1e-14, "numpy.quantile at %g", np_p[i]);
    check_rel(bl_goodness_sample_quantile((double[]){0.7}, 1, 0.3), 0.7, 0, "numpy.quantile of one value");
    check_rel(bl_goodness_sample_quantile((double[]){0.3, 0.9}, 2, 0.1), 0.36, 1e-14, "numpy.quantile of two values");
    check_true(isnan(bl_goodness_sample_quantile(x, 0, 0.5)), "no values: NAN");
}

HARNESS_CASE(one_component_mixture)
{
    bl_error err = {0};
    /* A one-component mixture is the component itself: equals bl_wiener_quantile. */
    bl_wiener_params p1 = mk(1.37, 0.83, 0.291, 0.46);
    double q[BL_GOODNESS_NQ], share;
    for (int upper = 0; upper <= 1; upper++) {
        check_true(bl_goodness_mixture_quantiles(&p1, NULL, 1, upper, bl_goodness_probs, BL_GOODNESS_NQ, q, &share,
                                                 &err) == BL_OK,
                   "single mixture solves (%s)", err.message);
        for (int k = 0; k < BL_GOODNESS_NQ; k++) {
            double want;
            check_true(bl_wiener_quantile(&p1, bl_goodness_probs[k], upper, &want, &err) == BL_OK, "engine quantile");
            check_abs(q[k], want, 2e-8, "single-trial mixture quantile %g (%s) = bl_wiener_quantile",
                      bl_goodness_probs[k], upper ? "upper" : "lower");
        }
        double pu = p_upper_closed(1.37, 0.83, 0.46);
        check_rel(share, upper ? pu : 1 - pu, 1e-9, "share = closed-form absorption probability (%s)",
                  upper ? "upper" : "lower");
    }
}

HARNESS_CASE(two_component_mixture)
{
    bl_error err = {0};
    double q[BL_GOODNESS_NQ], share;
    /* Two components with weights 3:1; quantile q of the mixture must satisfy
     * sum w_i int_0^q f_i / sum w_i P_i = p, the integrals by GSL quadrature. */
    bl_wiener_params two[2] = {mk(0.94, 1.71, 0.215, 0.5), mk(1.83, -0.42, 0.377, 0.58)};
    double w2[2] = {3, 1};
    for (int upper = 0; upper <= 1; upper++) {
        check_true(bl_goodness_mixture_quantiles(two, w2, 2, upper, bl_goodness_probs, BL_GOODNESS_NQ, q, &share,
                                                 &err) == BL_OK,
                   "two-component mixture solves (%s)", err.message);
        double P[2] = {p_upper_closed(0.94, 1.71, 0.5), p_upper_closed(1.83, -0.42, 0.58)};
        if (!upper) P[0] = 1 - P[0], P[1] = 1 - P[1];
        double psum = w2[0] * P[0] + w2[1] * P[1];
        check_rel(share, psum / 4, 1e-9, "mixture share = weighted closed-form P (%s)", upper ? "upper" : "lower");
        for (int k = 0; k < BL_GOODNESS_NQ; k++) {
            double F = (w2[0] * cdf_quad(&two[0], upper, q[k]) + w2[1] * cdf_quad(&two[1], upper, q[k])) / psum;
            check_abs(F, bl_goodness_probs[k], 1e-7, "mixture CDF by quadrature at q%g (%s)",
                      bl_goodness_probs[k] * 100, upper ? "upper" : "lower");
        }
        for (int k = 1; k < BL_GOODNESS_NQ; k++) check_true(q[k] > q[k - 1], "quantiles increase");
    }
}

HARNESS_CASE(unreachable_boundary_and_bad_probability)
{
    bl_error err = {0};
    double q[BL_GOODNESS_NQ], share;
    bl_wiener_params p1 = mk(1.37, 0.83, 0.291, 0.46);
    /* A boundary that is practically never reached: share ~0, quantiles NAN, no error. */
    bl_wiener_params never = mk(3.0, 12.0, 0.2, 0.5); /* P(lower) = exp(-36) ~ 2e-16 */
    check_true(bl_goodness_mixture_quantiles(&never, NULL, 1, 0, bl_goodness_probs, BL_GOODNESS_NQ, q, &share, &err) ==
                       BL_OK &&
                   share < 1e-12 && isnan(q[2]),
               "unreachable boundary gives NAN quantiles");
    check_true(bl_goodness_mixture_quantiles(&p1, NULL, 1, 1, (double[]){1.5}, 1, q, NULL, &err) == BL_ERR_RANGE,
               "probability outside (0,1) refused");
}

/* Groups and rows on a simulated data set with known truth. */
HARNESS_CASE(groups_and_rows)
{
    bl_error err = {0};
    enum { N = 600 };
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 20261202);
    bl_table *tab = NULL;
    bl_table_create(N, &tab, NULL);
    const char *ctx[N], *anim[N];
    double theta[N];
    bl_trials tr = {0};
    tr.table = tab;
    tr.n = N;
    tr.rt = calloc(N, sizeof *tr.rt);
    tr.upper = calloc(N, sizeof *tr.upper);
    tr.excluded = calloc(N, sizeof *tr.excluded);
    bl_wiener_params *truth = calloc(N, sizeof *truth), *base = calloc(N, sizeof *base);
    int sample_fail = 0;
    unsigned char *used = calloc(N, 1);
    for (int i = 0; i < N; i++) {
        int rich = (i / 3) % 2 == 0;
        ctx[i] = rich ? "rich" : "lean";
        anim[i] = (i % 2) ? "r1" : "r2";
        theta[i] = gsl_ran_gaussian(rng, 1.0);
        truth[i] = mk(rich ? 1.3 + 0.25 * theta[i] : 1.1, 1.2, 0.25, 0.5);
        base[i] = mk(rich ? 1.3 : 1.1, 1.2, 0.25, 0.5);
        if (bl_wiener_sample(&truth[i], rng, &tr.upper[i], &tr.rt[i], &err) != BL_OK) sample_fail++;
        used[i] = 1;
    }
    check_true(sample_fail == 0, "engine sampler drew every trial");
    tr.excluded[7] = "rt_min";
    tr.excluded[100] = "artifact: flat";
    used[7] = used[100] = 0;
    tr.n_kept = N - 2;
    bl_table_add_text(tab, "context", ctx, &err);
    bl_table_add_text(tab, "animal", anim, &err);
    bl_table_add_numeric(tab, "theta", theta, &err);

    bl_study st = {0};
    st.trials.participant = "animal";
    char *per_ctx[2] = {"context", "animal"};
    char *by_ctx[1] = {"context"};
    bl_slope_spec slope = {"theta", by_ctx, 1};
    bl_model_spec specs[2] = {{0}};
    specs[0].name = "baseline";
    specs[0].param[BL_THRESHOLD].per = per_ctx;
    specs[0].param[BL_THRESHOLD].n_per = 2;
    specs[1].name = "theta-threshold";
    specs[1].param[BL_THRESHOLD].per = per_ctx;
    specs[1].param[BL_THRESHOLD].n_per = 1;
    specs[1].param[BL_THRESHOLD].slopes = &slope;
    specs[1].param[BL_THRESHOLD].n_slopes = 1;
    specs[0].param[BL_START].is_fixed = specs[1].param[BL_START].is_fixed = 1;
    st.models = specs;
    st.n_models = 2;

    bl_model_result mr[2] = {{0}};
    mr[0].name = "baseline";
    mr[1].name = "theta-threshold";
    mr[0].n_rows = mr[1].n_rows = N;
    mr[0].used = mr[1].used = used;
    mr[0].predicted = base;
    mr[1].predicted = truth;
    bl_fit_set set = {0};
    set.n_models = 2;
    set.models = mr;

    bl_goodness *g = NULL;
    check_true(bl_goodness_compute(&st, &tr, &set, 1, &g, &err) == BL_OK, "compute (%s)", err.message);
    if (g) {
        check_true(g->n_cells == 2, "two condition cells (participant column left out): %zu", g->n_cells);
        check_true(strcmp(g->groups[0].condition, "context=rich") == 0 &&
                       strcmp(g->groups[1].condition, "context=lean") == 0,
                   "cells in order of first appearance");
        check_true(g->n_groups == 2 + 10, "10 bins: theta quintiles within each context (%zu groups)", g->n_groups);
        check_true(g->n_rows == 2 * 12 * 2, "rows = models x groups x 2 boundaries");
        size_t ncell = g->groups[0].n + g->groups[1].n;
        check_true(ncell == N - 2, "excluded trials left out (%zu)", ncell);
        size_t total_bins = 0;
        for (size_t gi = 2; gi < g->n_groups; gi++) {
            const bl_goodness_group *gr = &g->groups[gi];
            const bl_goodness_group *cell = strcmp(gr->condition, "context=rich") == 0 ? &g->groups[0] : &g->groups[1];
            total_bins += gr->n;
            check_true(gr->n * 5 >= cell->n - 5 && gr->n * 5 <= cell->n + 5, "bin %s/%d holds a fifth (%zu of %zu)",
                       gr->condition, gr->bin, gr->n, cell->n);
            if (gr->bin > 1)
                check_true(gr->regressor_low >= g->groups[gi - 1].regressor_high, "bins ordered by regressor");
            int inside = 1;
            for (size_t i = 0; i < gr->n; i++)
                inside &= theta[gr->rows[i]] >= gr->regressor_low && theta[gr->rows[i]] <= gr->regressor_high;
            check_true(inside, "trials of bin %s/%d inside its regressor range", gr->condition, gr->bin);
        }
        check_true(total_bins == N - 2, "bins partition the kept trials");

        /* Counts recomputed here from the trials themselves. */
        size_t miscounted = 0;
        for (size_t r = 0; r < g->n_rows; r++) {
            const bl_goodness_row *row = &g->rows[r];
            const bl_goodness_group *gr = &g->groups[row->group];
            size_t nup = 0;
            for (size_t i = 0; i < gr->n; i++) nup += tr.upper[gr->rows[i]] != 0;
            size_t want = row->upper ? nup : gr->n - nup;
            miscounted += row->responses != want || row->trials != gr->n;
        }
        check_true(g->n_rows > 0 && miscounted == 0, "every row counts its trials and responses (%zu rows, %zu wrong)",
                   g->n_rows, miscounted);
        /* Baseline, cell rich: one parameter set -> predicted quantiles = engine quantiles, share = closed form. */
        const bl_goodness_row *b0 = &g->rows[0];
        check_true(b0->model == 0 && b0->group == 0 && b0->upper == 1, "first row: baseline, rich, upper");
        bl_wiener_params pr = mk(1.3, 1.2, 0.25, 0.5);
        for (int k = 0; k < BL_GOODNESS_NQ; k++) {
            double want;
            bl_wiener_quantile(&pr, bl_goodness_probs[k], 1, &want, &err);
            check_abs(b0->predicted_q[k], want, 2e-8, "baseline rich q%g = engine quantile",
                      bl_goodness_probs[k] * 100);
        }
        check_rel(b0->predicted_share, p_upper_closed(1.3, 1.2, 0.5), 1e-9, "baseline share = closed form");
        /* The data were drawn from the theta model: its predictions match the observed quantiles of
         * the rich bins within sampling error (about 120 trials per bin: SE of a median ~0.03 s). */
        int worst_ok = 1;
        for (size_t r = 0; r < g->n_rows; r++) {
            const bl_goodness_row *row = &g->rows[r];
            if (row->model != 1 || !row->upper || row->responses < 60) continue;
            if (fabs(row->observed_q[2] - row->predicted_q[2]) > 0.09) worst_ok = 0;
            if (fabs(row->observed_share - row->predicted_share) > 0.12) worst_ok = 0;
        }
        check_true(worst_ok, "true model: observed and predicted medians/shares agree within sampling error");
        /* Top theta bin in rich: higher threshold -> slower median than the bottom bin (truth). */
        const bl_goodness_row *lo_b = NULL, *hi_b = NULL;
        for (size_t r = 0; r < g->n_rows; r++) {
            const bl_goodness_row *row = &g->rows[r];
            const bl_goodness_group *gr = &g->groups[row->group];
            if (row->model == 1 && row->upper && gr->regressor && strcmp(gr->condition, "context=rich") == 0) {
                if (gr->bin == 1) lo_b = row;
                if (gr->bin == 5) hi_b = row;
            }
        }
        check_true(lo_b && hi_b && hi_b->predicted_q[2] > lo_b->predicted_q[2] + 0.05 &&
                       hi_b->observed_q[2] > lo_b->observed_q[2],
                   "theta bins show the slower RTs the slope implies");

        /* CSV: header, row count, deterministic across thread counts. */
        char dir[] = "/tmp/bl_test_goodness_XXXXXX";
        check_true(mkdtemp(dir) != NULL, "temp folder");
        char p1path[256], p2path[256];
        snprintf(p1path, sizeof p1path, "%s/a.csv", dir);
        snprintf(p2path, sizeof p2path, "%s/b.csv", dir);
        check_true(bl_goodness_write_csv(g, p1path, &err) == BL_OK, "write csv");
        bl_goodness *g2 = NULL;
        check_true(bl_goodness_compute(&st, &tr, &set, 2, &g2, &err) == BL_OK, "compute with 2 threads");
        if (g2) check_true(bl_goodness_write_csv(g2, p2path, &err) == BL_OK, "write csv (2 threads)");
        char *a = harness_read_file(p1path), *b = harness_read_file(p2path);
        check_true(a && b && strcmp(a, b) == 0, "same bytes for 1 and 2 threads");
        if (a) {
            const char
                *hdr = "model,condition,regressor,bin,regressor_low,regressor_high,regressor_mean,boundary,trials,"
                       "responses,observed_share,predicted_share,observed_q10,predicted_q10,observed_q30,"
                       "predicted_q30,observed_q50,predicted_q50,observed_q70,predicted_q70,observed_q90,"
                       "predicted_q90\n";
            check_true(strncmp(a, hdr, strlen(hdr)) == 0, "CSV header");
            size_t lines = 0;
            for (char *c = a; *c; c++) lines += *c == '\n';
            check_true(lines == 1 + g->n_rows, "one line per row (%zu)", lines);
            check_true(strstr(a, "\nbaseline,context=rich,NA,NA,NA,NA,NA,upper,") != NULL, "cell row format");
            check_true(strstr(a, "\ntheta-threshold,context=lean,theta,5,") != NULL, "bin row format");
        }
        free(a);
        free(b);
        unlink(p1path);
        unlink(p2path);
        rmdir(dir);
        bl_goodness_destroy(g2);
    }
    bl_goodness_destroy(g);
    bl_goodness_destroy(NULL);

    bl_table_destroy(tab);
    free(tr.rt);
    free(tr.upper);
    free(tr.excluded);
    free(truth);
    free(base);
    free(used);
    gsl_rng_free(rng);
}

/* ---- mixture quantiles against a direct root finder ----
 * Reference: GSL's Brent solver (gsl_root_fsolver_brent) on the mixture CDF itself,
 * F(t) = sum_i w_i bl_wiener_cdf_i(t) / sum_i w_i bl_wiener_p_boundary_i, to 1e-14 relative: a method
 * that shares nothing with the tabulated grid, the interpolation or the Newton steps. The stated
 * tolerance of bl_goodness_mixture_quantiles is 1e-10 relative (the brief of the method: 1e-9 s). */

typedef struct {
    const bl_wiener_params *p;
    const double *w;
    size_t n;
    int upper;
    double psum, prob;
} brent_ctx;

static double brent_fn(double t, void *vp)
{
    const brent_ctx *c = vp;
    double sum = 0;
    for (size_t i = 0; i < c->n; i++) {
        double v;
        if (bl_wiener_cdf(&c->p[i], t, c->upper, &v, NULL) != BL_OK) return NAN;
        sum += (c->w ? c->w[i] : 1.0) * v;
    }
    return sum / c->psum - c->prob;
}

/* The prob-quantile by Brent on [earliest RT, a doubled upper end]; NAN when it fails. */
static double brent_quantile(const bl_wiener_params *p, const double *w, size_t n, int upper, double prob)
{
    brent_ctx c = {p, w, n, upper, 0, prob};
    double lo = INFINITY;
    for (size_t i = 0; i < n; i++) {
        double P;
        if (bl_wiener_p_boundary(&p[i], upper, &P, NULL) != BL_OK) return NAN;
        c.psum += (w ? w[i] : 1.0) * P;
        double e = p[i].value[BL_NONDECISION] - p[i].value[BL_NONDECISION_RANGE] / 2;
        if (p[i].value[BL_CONTAMINATION] > 0 && p[i].contamination_lo < e) e = p[i].contamination_lo;
        lo = fmin(lo, e);
    }
    double hi = lo + 0.5;
    gsl_function F = {brent_fn, &c};
    for (int i = 0; i < 60 && brent_fn(hi, &c) < 0; i++) hi = lo + 2 * (hi - lo);
    gsl_root_fsolver *s = gsl_root_fsolver_alloc(gsl_root_fsolver_brent);
    double r = NAN;
    if (gsl_root_fsolver_set(s, &F, lo, hi) == GSL_SUCCESS)
        for (int it = 0; it < 300; it++) {
            if (gsl_root_fsolver_iterate(s) != GSL_SUCCESS) break;
            double a = gsl_root_fsolver_x_lower(s), b = gsl_root_fsolver_x_upper(s);
            if (gsl_root_test_interval(a, b, 0, 1e-14) == GSL_SUCCESS) {
                r = gsl_root_fsolver_root(s);
                break;
            }
        }
    gsl_root_fsolver_free(s);
    return r;
}

/* Both boundaries of a mixture against Brent; returns the largest relative difference. */
static double worst_vs_brent(const char *label, const bl_wiener_params *p, const double *w, size_t n)
{
    double worst = 0;
    for (int upper = 0; upper <= 1; upper++) {
        bl_error err = {0};
        double q[BL_GOODNESS_NQ], share;
        check_true(bl_goodness_mixture_quantiles(p, w, n, upper, bl_goodness_probs, BL_GOODNESS_NQ, q, &share, &err) ==
                       BL_OK,
                   "%s (%s): solves (%s)", label, upper ? "upper" : "lower", err.message);
        for (int k = 0; k < BL_GOODNESS_NQ; k++) {
            double ref = brent_quantile(p, w, n, upper, bl_goodness_probs[k]);
            check_rel(q[k], ref, 1e-10, "%s (%s) q%g = GSL Brent root of the mixture CDF", label,
                      upper ? "upper" : "lower", bl_goodness_probs[k] * 100);
            worst = fmax(worst, fabs(q[k] - ref) / ref);
        }
    }
    return worst;
}

HARNESS_CASE(mixture_quantiles_equal_brent)
{
    /* One trial. */
    bl_wiener_params one = mk(1.37, 0.83, 0.291, 0.46);
    worst_vs_brent("one trial", &one, NULL, 1);
    /* Mixed parameters and weights, nondecision times far apart (a bimodal mixture). */
    bl_wiener_params mixed[4] = {mk(0.94, 1.71, 0.215, 0.5), mk(1.83, -0.42, 0.377, 0.58), mk(2.6, 0.35, 0.52, 0.41),
                                 mk(1.2, 2.9, 0.95, 0.5)};
    double wm[4] = {3, 1, 2, 5};
    worst_vs_brent("four mixed trials", mixed, wm, 4);
    /* A boundary with tiny probability: P(lower) = exp(-2 v a w)-ish ~ 1e-8 (Cox & Miller 1965 closed
     * form above); still above the 1e-12 share where quantiles become NAN. */
    bl_wiener_params tiny[2] = {mk(3.07, 6.0, 0.3, 0.5), mk(2.9, 5.5, 0.33, 0.52)};
    double pl = 1 - p_upper_closed(3.07, 6.0, 0.5);
    check_true(pl > 1e-12 && pl < 1e-6, "tiny lower-boundary probability %g", pl);
    worst_vs_brent("tiny lower-boundary probability", tiny, NULL, 2);
    /* Across-trial variability: drift_sd and start_range on one trial, nondecision_range on another,
     * contamination on a third. */
    bl_wiener_params var[3] = {mk(1.5, 1.1, 0.3, 0.45), mk(1.1, 0.6, 0.35, 0.55), mk(1.3, 1.6, 0.28, 0.5)};
    var[0].value[BL_DRIFT_SD] = 0.9;
    var[0].value[BL_START_RANGE] = 0.2;
    var[1].value[BL_NONDECISION_RANGE] = 0.12;
    var[2].value[BL_CONTAMINATION] = 0.05;
    var[2].contamination_lo = 0.2;
    var[2].contamination_hi = 2.5;
    double worst = worst_vs_brent("drift_sd, start_range, nondecision_range, contamination", var, (double[]){2, 1, 1},
                                  3);
    check_true(worst < 1e-10, "largest relative difference %.2g < 1e-10", worst);
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(sample_quantiles_numpy), HARNESS_ENTRY(one_component_mixture),
        HARNESS_ENTRY(two_component_mixture),  HARNESS_ENTRY(unreachable_boundary_and_bad_probability),
        HARNESS_ENTRY(groups_and_rows),        HARNESS_ENTRY(mixture_quantiles_equal_brent),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
