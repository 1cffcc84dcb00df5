/* Goodness of fit under stimulus coding, and the quantile-probability figure with many cells.
 *
 * With stimulus coding the rows of fit_quantiles.csv are correct and error responses, so the share of
 * the correct row is accuracy. Outside references:
 *  - the closed-form absorption probability of a Wiener process with drift, s = 1 (Cox & Miller 1965,
 *    "The Theory of Stochastic Processes", section 5.7): P(upper) = (1 - exp(-2 v a w)) / (1 - exp(-2 v a));
 *  - GSL adaptive quadrature (gsl_integration_qags) of each trial's own first-passage density at the
 *    boundary its stimulus calls for, with its own (unmirrored) parameters: the mixture CDF at the
 *    predicted quantile q_p of the correct (error) row must equal p;
 *  - counts of correct responses recomputed here from each trial's response and stimulus sign.
 * The data are invented (engine sampler, fixed seed); only the checks above decide pass or fail. */
#include "engine/wiener_sample.h"
#include "report/figures.h"
#include "report/goodness.h"
#include "harness.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_integration.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
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

/* P(RT <= q, boundary) by GSL quadrature of the density (no variability: t0 is the earliest RT). */
static double cdf_quad(gsl_integration_workspace *ws, const bl_wiener_params *p, int upper, double q)
{
    dens_ctx c = {p, upper};
    gsl_function F = {dens, &c};
    double r = NAN, e, t0 = p->value[BL_NONDECISION];
    if (q <= t0) return 0;
    if (gsl_integration_qags(&F, t0, q, 1e-13, 1e-10, 2000, ws, &r, &e) != GSL_SUCCESS) r = NAN;
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

static size_t count(const char *s, const char *needle)
{
    size_t n = 0;
    for (const char *p = s; p && (p = strstr(p, needle)); p += strlen(needle)) n++;
    return n;
}

enum { N = 800 };

int main(void)
{
    gsl_set_error_handler_off();
    bl_error err = {0};
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 777);

    /* Trials: tone higher/lower (drift sign +1/-1), difficulty easy/hard, context rich/lean, theta
     * raising the threshold; start 0.42 (biased toward the lower boundary) so that mirroring the start
     * matters. 2 x 2 x 2 = 8 condition cells. */
    bl_table *tab = NULL;
    bl_table_create(N, &tab, NULL);
    const char *tone[N], *diff[N], *ctx[N];
    double theta[N];
    bl_trials tr = {0};
    tr.table = tab;
    tr.n = N;
    tr.rt = calloc(N, sizeof *tr.rt);
    tr.upper = calloc(N, sizeof *tr.upper);
    tr.drift_sign = calloc(N, sizeof *tr.drift_sign);
    tr.excluded = calloc(N, sizeof *tr.excluded);
    bl_wiener_params *pred = calloc(N, sizeof *pred);
    unsigned char *used = calloc(N, 1);
    int sample_fail = 0;
    for (int i = 0; i < N; i++) {
        int hi = i % 2, easy = (i / 2) % 2, rich = (i / 4) % 2;
        tone[i] = hi ? "higher" : "lower";
        diff[i] = easy ? "easy" : "hard";
        ctx[i] = rich ? "rich" : "lean";
        theta[i] = gsl_ran_gaussian(rng, 1.0);
        tr.drift_sign[i] = hi ? 1 : -1;
        /* drift toward the upper boundary, stimulus sign applied, as the fit stores it */
        pred[i] = mk(1.4 + 0.2 * theta[i], tr.drift_sign[i] * (easy ? 1.9 : 0.8), 0.28, 0.42);
        if (bl_wiener_sample(&pred[i], rng, &tr.upper[i], &tr.rt[i], &err) != BL_OK) sample_fail++;
        used[i] = 1;
    }
    check_true(sample_fail == 0, "engine sampler drew every trial");
    tr.n_kept = N;
    bl_table_add_text(tab, "tone", tone, &err);
    bl_table_add_text(tab, "difficulty", diff, &err);
    bl_table_add_text(tab, "context", ctx, &err);
    bl_table_add_numeric(tab, "theta", theta, &err);

    bl_study st = {0};
    st.trials.participant = "animal";
    st.trials.stimulus = "tone";
    char *per_d[1] = {"difficulty"}, *per_c[1] = {"context"};
    bl_slope_spec slope = {"theta", NULL, 0}; /* one shared slope: its bins mix both tones */
    bl_model_spec spec = {0};
    spec.name = "theta-threshold";
    spec.param[BL_DRIFT].per = per_d;
    spec.param[BL_DRIFT].n_per = 1;
    spec.param[BL_THRESHOLD].per = per_c;
    spec.param[BL_THRESHOLD].n_per = 1;
    spec.param[BL_THRESHOLD].slopes = &slope;
    spec.param[BL_THRESHOLD].n_slopes = 1;
    spec.param[BL_START].is_fixed = 1;
    st.models = &spec;
    st.n_models = 1;

    bl_model_result mr = {0};
    mr.name = "theta-threshold";
    mr.n_rows = N;
    mr.used = used;
    mr.predicted = pred;
    mr.aic = 100;
    bl_fit_set set = {0};
    set.n_models = 1;
    set.models = &mr;

    bl_goodness *g = NULL;
    if (!check_true(bl_goodness_compute(&st, &tr, &set, 1, &g, &err) == BL_OK, "compute (%s)", err.message)) return 1;
    check_true(g->accuracy == 1, "stimulus coding: rows are correct and error responses");
    check_true(g->n_cells == 8, "8 condition cells (context x difficulty x tone): %zu", g->n_cells);
    check_true(strcmp(bl_goodness_response_name(g, 1), "correct") == 0 &&
                   strcmp(bl_goodness_response_name(g, 0), "error") == 0,
               "response names correct / error");

    /* Counts: a trial is correct when its response boundary is the one its stimulus calls for. */
    size_t wrong = 0, mixed_bins = 0;
    double worst_share = 0, worst_acc_gap = 0, max_upper_dev = 0, min_bin_acc = 1;
    for (size_t r = 0; r < g->n_rows; r++) {
        const bl_goodness_row *row = &g->rows[r];
        const bl_goodness_group *gr = &g->groups[row->group];
        size_t ncorrect = 0, nup = 0, nhi = 0;
        double pc = 0;
        for (size_t i = 0; i < gr->n; i++) {
            size_t k = gr->rows[i];
            int correct = (tr.upper[k] != 0) == (tr.drift_sign[k] > 0);
            ncorrect += (size_t)correct;
            nup += tr.upper[k] != 0;
            nhi += tr.drift_sign[k] > 0;
            const bl_wiener_params *p = &pred[k];
            double pu = p_upper_closed(p->value[BL_THRESHOLD], p->value[BL_DRIFT], p->value[BL_START]);
            pc += tr.drift_sign[k] > 0 ? pu : 1 - pu;
        }
        pc /= (double)gr->n;
        size_t want = row->upper ? ncorrect : gr->n - ncorrect;
        wrong += row->responses != want;
        double want_share = row->upper ? pc : 1 - pc;
        worst_share = fmax(worst_share, fabs(row->predicted_share - want_share) / want_share);
        if (row->upper && gr->regressor) {
            mixed_bins += nhi > 0 && nhi < gr->n;
            /* the old upper share would be near 0.5 here; accuracy is not */
            max_upper_dev = fmax(max_upper_dev, fabs((double)nup / (double)gr->n - 0.5));
            min_bin_acc = fmin(min_bin_acc, row->observed_share);
            worst_acc_gap = fmax(worst_acc_gap, fabs(row->observed_share - row->predicted_share));
        }
    }
    check_true(g->n_rows > 0 && wrong == 0, "every row counts correct / error responses (%zu rows, %zu wrong)",
               g->n_rows, wrong);
    check_abs(worst_share, 0, 1e-9, "predicted share = mean closed-form P(correct) / P(error) (worst relative)");
    check_true(mixed_bins == 5, "the 5 theta bins mix both tones (%zu)", mixed_bins);
    check_true(min_bin_acc > 0.7 && max_upper_dev < 0.1,
               "in the bins accuracy is informative (lowest %.3f) where the upper share is not (|share - 0.5| <= %.3f)",
               min_bin_acc, max_upper_dev);
    /* about 160 trials per bin: SE of a share <= 0.04, so 4 SE */
    check_true(worst_acc_gap < 0.16, "observed accuracy within sampling error of predicted (worst gap %.3f)",
               worst_acc_gap);

    /* Predicted quantiles of a bin that mixes tones, checked against quadrature of each trial's own
     * density at its correct (or error) boundary. */
    gsl_integration_workspace *ws = gsl_integration_workspace_alloc(2000);
    const bl_goodness_row *rc = NULL, *re = NULL;
    for (size_t r = 0; r < g->n_rows; r++) {
        const bl_goodness_group *gr = &g->groups[g->rows[r].group];
        if (gr->regressor && gr->bin == 3) {
            if (g->rows[r].upper) rc = &g->rows[r];
            else re = &g->rows[r];
        }
    }
    if (check_true(rc && re, "bin 3 has a correct and an error row")) {
        const bl_goodness_group *gr = &g->groups[rc->group];
        for (int which = 0; which < 2; which++) {
            const bl_goodness_row *row = which ? re : rc;
            double worst = 0;
            for (int k = 0; k < BL_GOODNESS_NQ; k++) {
                double num = 0, den = 0;
                for (size_t i = 0; i < gr->n; i++) {
                    size_t t = gr->rows[i];
                    int correct_upper = tr.drift_sign[t] > 0;
                    int boundary = which ? !correct_upper : correct_upper;
                    double pu = p_upper_closed(pred[t].value[BL_THRESHOLD], pred[t].value[BL_DRIFT],
                                               pred[t].value[BL_START]);
                    num += cdf_quad(ws, &pred[t], boundary, row->predicted_q[k]);
                    den += boundary ? pu : 1 - pu;
                }
                worst = fmax(worst, fabs(num / den - bl_goodness_probs[k]));
            }
            check_abs(worst, 0, 1e-7, "bin 3 %s: mixture CDF by quadrature at each predicted quantile = p (worst)",
                      which ? "error" : "correct");
        }
    }
    gsl_integration_workspace_free(ws);

    /* CSV: boundary column says correct / error. */
    char dir[] = "/tmp/bl_test_goodness_acc_XXXXXX";
    check_true(mkdtemp(dir) != NULL, "temp folder");
    char path[256];
    snprintf(path, sizeof path, "%s/fit_quantiles.csv", dir);
    check_true(bl_goodness_write_csv(g, path, &err) == BL_OK, "write csv (%s)", err.message);
    char *csv = harness_read_file(path);
    check_true(csv && count(csv, ",correct,") == g->n_rows / 2 && count(csv, ",error,") == g->n_rows / 2 &&
                   !strstr(csv, ",upper,") && !strstr(csv, ",lower,"),
               "fit_quantiles.csv: %zu correct and error rows, no upper/lower", g->n_rows / 2);
    free(csv);
    unlink(path);
    rmdir(dir);

    /* The quantile-probability figure: accuracy axis, 8 numbered cells, a legend that lists them whole. */
    bl_figure_set *figs = NULL;
    if (check_true(bl_figures_make(&st, &tr, NULL, &set, g, &figs, &err) == BL_OK, "figures (%s)", err.message)) {
        const bl_figure *qp = NULL;
        for (size_t i = 0; i < figs->n; i++)
            if (strcmp(figs->items[i].file, "quantile_probability.svg") == 0) qp = &figs->items[i];
        if (check_true(qp != NULL, "quantile_probability.svg made")) {
            check_true(strstr(qp->svg, "probability of a correct or error response") != NULL,
                       "x axis names correct and error responses");
            check_true(strstr(qp->svg, "cells (numbered by predicted accuracy)") != NULL, "cell legend heading");
            check_true(strstr(qp->caption, "correct and error") != NULL, "caption says correct and error");
            /* every cell's condition appears in the legend, possibly wrapped after a ';' */
            size_t whole = 0;
            for (size_t c = 0; c < g->n_cells; c++) {
                const char *cond = g->groups[c].condition, *semi = strrchr(cond, ';');
                char head[256];
                snprintf(head, sizeof head, "%.*s", (int)(semi ? semi - cond + 1 : (ptrdiff_t)strlen(cond)), cond);
                whole += strstr(qp->svg, head) != NULL && strstr(qp->svg, semi ? semi + 1 : cond) != NULL;
            }
            check_true(whole == g->n_cells, "all %zu cells listed in the legend (%zu found)", g->n_cells, whole);
            /* one number label per observed column: 8 cells x 2 responses (every column has responses) */
            size_t labels = 0;
            for (int k = 1; k <= 8; k++) {
                char lab[64];
                snprintf(lab, sizeof lab, "text-anchor=\"middle\" fill=\"#444444\">%d</text>", k);
                labels += count(qp->svg, lab);
            }
            check_true(labels == 16, "16 numbered observed columns (%zu)", labels);
        }
        bl_figure_set_destroy(figs);
    }
    bl_goodness_destroy(g);

    bl_table_destroy(tab);
    free(tr.rt);
    free(tr.upper);
    free(tr.drift_sign);
    free(tr.excluded);
    free(pred);
    free(used);
    gsl_rng_free(rng);
    return harness_summary();
}
