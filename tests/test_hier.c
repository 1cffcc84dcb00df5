/* Hierarchical fits, the numerical core (src/fit/hier.c):
 *  - the Laplace value's analytic gradient (envelope term plus the log-determinant's third-derivative
 *    term, docs/methods.md) equals central differences of the value itself, for independent and
 *    correlated effects;
 *  - adaptive Gauss-Hermite quadrature converges (15 vs 20 nodes) and 1 node is the Laplace value
 *    (Liu & Pierce 1994; Pinheiro & Bates 1995: one node is the Laplace approximation);
 *  - with no spread (all SDs 0) the marginal likelihood is the pooled likelihood at the same
 *    coefficients (the integral over a point mass).
 * Data: invented, drawn with the engine's exact sampler from tests/fit_testutil.h. */
#include "fit/hier.h"
#include "fit_testutil.h"
#include "harness.h"

#include <math.h>

static const double a_off[4] = {0.15, -0.1, 0.05, -0.12}, v_off[4] = {0.3, -0.25, 0.1, -0.2},
                    t_off[4] = {0.02, -0.01, 0.015, -0.02};

static bl_trials *four_participants(size_t n, unsigned long seed)
{
    sim_truth tr = {.n = n, .n_participants = 4, .a = {1.4, 1.1}, .v = {2.0, 1.2, 0.5}, .t0 = 0.3};
    tr.a_offset = a_off;
    tr.v_offset = v_off;
    tr.t0_offset = t_off;
    return sim_trials(&tr, seed);
}

/* The pooled design of the default model (threshold per context, drift per difficulty, nondecision)
 * and its hierarchical workspace. */
typedef struct {
    bl_model_spec spec;
    bl_model *m;
    bl_hier *h;
    bl_trials *t;
} setup;

/* only_param >= 0: only that parameter's intercept varies */
static void setup_make(setup *s, int correlated, int quadrature, int only_param)
{
    s->t = four_participants(480, 7);
    spec_default(&s->spec, "m");
    s->spec.param[BL_THRESHOLD].per = col_context;
    s->spec.param[BL_THRESHOLD].n_per = 1;
    s->spec.param[BL_DRIFT].per = col_difficulty;
    s->spec.param[BL_DRIFT].n_per = 1;
    static char *intercept[] = {"intercept"};
    if (only_param >= 0) {
        s->spec.param[BL_THRESHOLD].varies_given = 1;
        s->spec.param[BL_DRIFT].varies_given = 1;
        s->spec.param[BL_NONDECISION].varies_given = 1;
        s->spec.param[only_param].varies = intercept;
        s->spec.param[only_param].n_varies = 1;
    }
    s->spec.correlated = correlated;
    bl_error err = {0};
    check_true(bl_model_build(&s->spec, s->t, NULL, &s->m, &err) == BL_OK, "model built (%s)", err.message);
    check_true(bl_hier_create(&s->spec, s->m, s->t, quadrature, 1, &s->h, &err) == BL_OK, "hierarchical set-up (%s)",
               err.message);
}

static void setup_free(setup *s)
{
    bl_hier_destroy(s->h);
    bl_model_destroy(s->m);
    bl_trials_destroy(s->t);
}

/* psi near the truth: coefficients, then spread parameters */
static void psi_near_truth(const setup *s, double *psi)
{
    size_t p = bl_model_n_coef(s->m), nl = bl_hier_lambda_count(s->h);
    for (size_t j = 0; j < p; j++) {
        const bl_coef_info *ci = bl_model_coef(s->m, j);
        psi[j] = ci->param == BL_THRESHOLD ? 1.3 : ci->param == BL_DRIFT ? 1.2 : 0.28;
    }
    for (size_t c = 0; c < nl; c++) psi[p + c] = 0.05 + 0.04 * (double)c;
}

static void gradient_matches_differences(int correlated)
{
    setup s;
    setup_make(&s, correlated, 1, -1);
    size_t d = bl_model_n_coef(s.m) + bl_hier_lambda_count(s.h);
    double psi[32], g[32], tmp[32];
    psi_near_truth(&s, psi);
    double m0 = bl_hier_marginal_gradient(s.h, psi, g);
    check_true(isfinite(m0), "the Laplace value and gradient exist (%g)", m0);
    double worst = 0;
    for (size_t c = 0; c < d; c++) {
        /* five-point central differences (truncation O(e^4)); the value is smooth to ~1e-7, so e = 1e-3 */
        const double e = 4e-3;
        double f[4], off[4] = {-2, -1, 1, 2};
        for (int k = 0; k < 4; k++) {
            memcpy(tmp, psi, d * sizeof *tmp);
            tmp[c] += off[k] * e;
            f[k] = bl_hier_marginal(s.h, tmp);
        }
        double fd = (f[0] - 8 * f[1] + 8 * f[2] - f[3]) / (12 * e);
        double rel = fabs(fd - g[c]) / fmax(1.0, fabs(fd));
        if (getenv("HIER_TEST_VERBOSE")) printf("  component %zu: analytic %.9g differences %.9g\n", c, g[c], fd);
        if (rel > worst) worst = rel;
    }
    /* the differences carry ~1e-7/1e-3 of the value's own roughness (inner Hessians by differences) */
    check_true(worst < 5e-4,
               "%s effects: analytic gradient = central differences (worst relative %.2e over %zu components)",
               correlated ? "correlated" : "independent", worst, d);
    setup_free(&s);
}

HARNESS_CASE(gradient_independent) { gradient_matches_differences(0); }
HARNESS_CASE(gradient_correlated) { gradient_matches_differences(1); }

static void marginal_by_nodes(int param, const int *nodes, double *v, size_t n)
{
    for (size_t k = 0; k < n; k++) {
        setup s;
        setup_make(&s, 0, nodes[k], param);
        double psi[32];
        psi_near_truth(&s, psi);
        psi[bl_model_n_coef(s.m)] = 0.2; /* a sizeable spread: the integrand is far from a point mass */
        v[k] = bl_hier_marginal(s.h, psi);
        setup_free(&s);
    }
}

HARNESS_CASE(quadrature_converges)
{
    int nodes[3] = {1, 15, 20};
    double v[3];
    marginal_by_nodes(BL_THRESHOLD, nodes, v, 3);
    check_true(fabs(v[1] - v[2]) < 1e-7, "threshold offsets: Gauss-Hermite 15 vs 20 nodes agree (%.3e)",
               fabs(v[1] - v[2]));
    /* Laplace error O(1/n_j) per participant (120 trials each); not zero: the log density is not
     * quadratic in the threshold */
    check_true(fabs(v[0] - v[2]) < 0.02 && fabs(v[0] - v[2]) > 1e-9,
               "threshold offsets: Laplace within 0.02 of the quadrature value, and not equal (%.3e)",
               fabs(v[0] - v[2]));
}

/* ln f(t | v, a, w) = -v a w - v^2 t / 2 + ln f(t | 0, a, w) (Navarro & Fuss 2009, eq. 4's
 * factor): quadratic in the drift, so every participant's integrand over a drift offset is Gaussian
 * and the Laplace value is exact. */
HARNESS_CASE(laplace_exact_for_drift)
{
    int nodes[2] = {1, 10};
    double v[2];
    marginal_by_nodes(BL_DRIFT, nodes, v, 2);
    check_rel(v[0], v[1], 1e-12, "drift offsets: Laplace = 10-node Gauss-Hermite (the integrand is Gaussian)");
}

HARNESS_CASE(no_spread_is_pooled)
{
    setup s;
    setup_make(&s, 0, 1, -1);
    size_t p = bl_model_n_coef(s.m), nl = bl_hier_lambda_count(s.h);
    double psi[32];
    psi_near_truth(&s, psi);
    for (size_t c = 0; c < nl; c++) psi[p + c] = 0;
    bl_likelihood *lik;
    bl_error err = {0};
    check_true(bl_likelihood_create(s.m, 1, &lik, &err) == BL_OK, "likelihood");
    double pooled = bl_likelihood_eval(lik, psi, NULL);
    double marginal = bl_hier_marginal(s.h, psi);
    check_rel(marginal, pooled, 1e-12, "no spread: marginal = pooled log-likelihood");
    bl_likelihood_destroy(lik);
    setup_free(&s);
}

int main(int argc, char **argv)
{
    static const harness_case cases[] = {HARNESS_ENTRY(gradient_independent), HARNESS_ENTRY(gradient_correlated),
                                         HARNESS_ENTRY(quadrature_converges), HARNESS_ENTRY(laplace_exact_for_drift),
                                         HARNESS_ENTRY(no_spread_is_pooled)};
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
