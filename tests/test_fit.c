/* Maximum-likelihood fitting:
 *  - parameter recovery from data drawn with the engine's exact sampler under a known regression
 *    (docs/models.md, inference): every true coefficient inside a 99.9% Wald interval;
 *  - the BFGS optimum equals an independent Nelder-Mead search (GSL nmsimplex2, Nelder & Mead 1965,
 *    run here directly on the likelihood) to 1e-6 in log-likelihood;
 *  - EZ-diffusion (Wagenmakers, van der Maas & Grasman 2007, Psychon. Bull. Rev. 14:3-22): the forward
 *    equations (their eqs. 1-4) inverted exactly; a no-slope fit on
 *    single-condition data agrees with the EZ estimates within sampling error;
 *  - separate mode: DerSimonian & Laird (1986, Controlled Clinical Trials 7:177-188) random-effects
 *    estimate recomputed here from the per-participant estimates; t-test p from gsl_cdf_tdist_Q. */
#include "fit/fit.h"
#include "fit_testutil.h"
#include "harness.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_multimin.h>
#include <math.h>

/* EZ forward model with s = 1 (Wagenmakers et al. 2007): proportion correct, MDT, VRT. */
static void ez_forward(double v, double a, double *pc, double *mdt, double *vrt)
{
    double y = -v * a;
    *pc = 1 / (1 + exp(y));
    *mdt = (a / (2 * v)) * (1 - exp(y)) / (1 + exp(y));
    *vrt = (a / (2 * v * v * v)) * (2 * y * exp(y) - exp(2 * y) + 1) / ((exp(y) + 1) * (exp(y) + 1));
}

typedef struct {
    bl_likelihood *w;
} nm_ctx;

static double nm_f(const gsl_vector *x, void *p)
{
    nm_ctx *c = p;
    double ll = bl_likelihood_eval(c->w, x->data, NULL);
    return isfinite(ll) ? -ll : 1e300;
}

/* bl_information_inverse as 1 positive definite, 0 not, -1 failed. */
static int inverse(const double *info, size_t k, double *cov, double *cond)
{
    int pd = 0;
    bl_error e = {0};
    return bl_information_inverse(info, k, cov, cond, &pd, &e) == BL_OK ? pd : -1;
}

/* Information matrix inverse: 2x2 closed form [[a, b], [b, d]]^-1 = [[d, -b], [-b, a]] / (ad - b^2). */
HARNESS_CASE(information_inverse)
{
    {
        const double info[4] = {4.0, 1.5, 1.5, 2.25};
        double cov[4], cond;
        check_true(inverse(info, 2, cov, &cond) == 1, "positive definite information inverts");
        double det = 4.0 * 2.25 - 1.5 * 1.5;
        check_rel(cov[0], 2.25 / det, 1e-14, "inverse [0][0]");
        check_rel(cov[1], -1.5 / det, 1e-14, "inverse [0][1]");
        check_rel(cov[2], -1.5 / det, 1e-14, "inverse [1][0] (symmetric)");
        check_rel(cov[3], 4.0 / det, 1e-14, "inverse [1][1]");
        /* Eigenvalues of the symmetric 2x2: (a+d)/2 +- sqrt(((a-d)/2)^2 + b^2). */
        double mid = (4.0 + 2.25) / 2, rad = sqrt(pow((4.0 - 2.25) / 2, 2) + 1.5 * 1.5);
        check_rel(cond, (mid + rad) / (mid - rad), 1e-12, "condition number = eigenvalue ratio");
        const double indef[4] = {1.0, 2.0, 2.0, 1.0}; /* eigenvalues 3 and -1 */
        check_true(inverse(indef, 2, cov, &cond) == 0 && isinf(cond),
                   "indefinite information: not inverted, infinite condition number");
        const double singular[4] = {1.0, 1.0, 1.0, 1.0};
        check_true(inverse(singular, 2, cov, &cond) == 0, "singular information: not inverted");
    }
}

/* EZ-diffusion inversion round trip. */
HARNESS_CASE(ez_round_trip)
{
    bl_error err = {0};
    const double ez_cases[3][3] = {{1.5, 1.2, 0.3}, {0.4, 2.0, 0.25}, {-0.8, 1.6, 0.4}};
    for (int i = 0; i < 3; i++) {
        double pc, mdt, vrt, v, a, t0;
        ez_forward(ez_cases[i][0], ez_cases[i][1], &pc, &mdt, &vrt);
        check_true(bl_ez_diffusion(pc, vrt, mdt + ez_cases[i][2], &v, &a, &t0, &err) == BL_OK, "EZ case %d solves", i);
        check_rel(v, ez_cases[i][0], 1e-9, "EZ case %d: drift recovered", i);
        check_rel(a, ez_cases[i][1], 1e-9, "EZ case %d: threshold recovered", i);
        check_rel(t0, ez_cases[i][2], 1e-9, "EZ case %d: nondecision recovered", i);
    }
    double dv, da, dt;
    check_true(bl_ez_diffusion(1.0, 0.1, 0.5, &dv, &da, &dt, &err) == BL_ERR_NUMERIC, "EZ rejects pc = 1");
    check_true(bl_ez_diffusion(0.5, 0.1, 0.5, &dv, &da, &dt, &err) == BL_ERR_NUMERIC, "EZ rejects pc = 0.5");
}

/* EZ agreement: one condition, no slopes. */
HARNESS_CASE(ez_agreement)
{
    bl_error err = {0};
    bl_warnings warn = {0};
    {
        sim_truth tr = {.n = 3000,
                        .n_participants = 1,
                        .a = {1.3, 1.3},
                        .a_slope = {0, 0},
                        .v = {1.4, 1.4, 1.4},
                        .v_slope = 0,
                        .t0 = 0.32};
        bl_trials *t = sim_trials(&tr, 21);
        bl_model_spec s;
        spec_default(&s, "single");
        bl_model *m = NULL;
        bl_model_build(&s, t, NULL, &m, &err);
        bl_fit_options opt;
        bl_fit_options_default(&opt);
        bl_fit_result r;
        check_true(bl_fit_model(m, &opt, NULL, &r, &warn, &err) == BL_OK, "single-condition fit runs");
        check_true(r.converged && r.diag.hessian_positive_definite, "single-condition fit converged");
        /* EZ from the sample moments of correct RTs (computed here). */
        double n_c = 0, sum = 0, sumsq = 0;
        for (size_t i = 0; i < t->n; i++)
            if (t->upper[i]) {
                n_c++;
                sum += t->rt[i];
                sumsq += t->rt[i] * t->rt[i];
            }
        double pc = n_c / (double)t->n, mrt = sum / n_c, vrt = (sumsq - n_c * mrt * mrt) / (n_c - 1);
        double L = log(pc / (1 - pc));
        double v_ez = pow(L * (pc * pc * L - pc * L + pc - 0.5) / vrt, 0.25);
        double a_ez = L / v_ez;
        double y = -v_ez * a_ez;
        double t_ez = mrt - (a_ez / (2 * v_ez)) * (1 - exp(y)) / (1 + exp(y));
        /* Both are consistent estimators of the same values; EZ is less efficient than the MLE, so
         * their difference is of the order of EZ's own sampling error (about 1-2 MLE SEs here).
         * 4 MLE SEs leaves room for that. */
        check_abs(r.coef[0].estimate, a_ez, 4 * r.coef[0].se, "threshold: MLE vs EZ (%.4f vs %.4f)", r.coef[0].estimate,
                  a_ez);
        check_abs(r.coef[1].estimate, v_ez, 4 * r.coef[1].se, "drift: MLE vs EZ (%.4f vs %.4f)", r.coef[1].estimate,
                  v_ez);
        check_abs(r.coef[2].estimate, t_ez, 4 * r.coef[2].se + 0.005, "nondecision: MLE vs EZ (%.4f vs %.4f)",
                  r.coef[2].estimate, t_ez);
        /* AIC/BIC definitions (Akaike 1974; Schwarz 1978). */
        check_rel(r.aic, 2 * 3 - 2 * r.log_likelihood, 1e-14, "AIC = 2k - 2LL");
        check_rel(r.bic, 3 * log(3000.0) - 2 * r.log_likelihood, 1e-14, "BIC = k ln n - 2LL");
        bl_fit_result_clear(&r);
        bl_model_destroy(m);
        bl_trials_destroy(t);
    }
    bl_warnings_clear(&warn);
}

/* Recovery of a regression: the trials, model and 2-thread, 3-start fit shared by the cases below,
 * computed once by the first case that asks. */
static struct {
    bl_trials *t;
    bl_model_spec s;
    bl_slope_spec slopes[2];
    bl_model *m;
    bl_fit_options opt;
    bl_fit_result r;
    int tried, fitted;
} reg;

static void regression_free(void)
{
    if (reg.fitted) bl_fit_result_clear(&reg.r);
    bl_model_destroy(reg.m);
    bl_trials_destroy(reg.t);
}

static bl_trials *regression_trials(void)
{
    if (!reg.t) {
        sim_truth tr = {.n = 4000,
                        .n_participants = 4,
                        .a = {1.5, 1.1},
                        .a_slope = {0.25, 0.0},
                        .v = {2.2, 1.3, 0.6},
                        .v_slope = -0.3,
                        .t0 = 0.28,
                        .stimulus = 1};
        reg.t = sim_trials(&tr, 77);
        atexit(regression_free);
    }
    return reg.t;
}

static int regression_fit(void)
{
    if (reg.tried) return reg.fitted;
    reg.tried = 1;
    bl_error err = {0};
    bl_warnings warn = {0};
    spec_regression(&reg.s, reg.slopes, "regression");
    if (!check_true(bl_model_build(&reg.s, regression_trials(), NULL, &reg.m, &err) == BL_OK,
                    "regression model builds"))
        return 0;
    bl_fit_options_default(&reg.opt);
    reg.opt.threads = 2;
    reg.opt.starts = 3;
    reg.fitted = bl_fit_model(reg.m, &reg.opt, NULL, &reg.r, &warn, &err) == BL_OK;
    check_true(reg.fitted, "regression fit runs (%s)", err.message);
    bl_warnings_clear(&warn);
    return reg.fitted;
}

HARNESS_CASE(regression_recovery)
{
    if (!regression_fit()) return;
    const bl_fit_result r = reg.r;
    check_true(r.converged, "converged (newton decrement %.3g, gradient %.3g)", r.diag.newton_decrement,
               r.diag.gradient_norm);
    check_true(r.diag.starts == 3 && r.diag.starts_agreed == 3, "all 3 starts agree (%d)", r.diag.starts_agreed);
    check_true(r.covariance != NULL && isfinite(r.diag.condition_number), "covariance available, condition %.3g",
               r.diag.condition_number);
    const double truth[9] = {1.5, 1.1, 0.25, 0.0, 2.2, 1.3, 0.6, -0.3, 0.28};
    for (int j = 0; j < 9; j++) {
        /* 99.9% Wald interval: z = 3.29; a fixed seed makes this deterministic. */
        check_abs(r.coef[j].estimate, truth[j], 3.29 * r.coef[j].se, "recovery: %s %s %s = %.4f (se %.4f), truth %.3f",
                  r.coef[j].parameter, r.coef[j].term, r.coef[j].level, r.coef[j].estimate, r.coef[j].se, truth[j]);
        check_rel(r.coef[j].ci_high - r.coef[j].ci_low, 2 * 1.959963984540054 * r.coef[j].se, 1e-12,
                  "95%% interval is +-1.96 se");
        check_rel(r.coef[j].p, 2 * gsl_cdf_ugaussian_Q(fabs(r.coef[j].estimate / r.coef[j].se)), 1e-12,
                  "Wald p from the normal upper tail");
    }
    check_true(r.coef[8].se < 0.01, "nondecision se is small (%.4g)", r.coef[8].se);
}

/* Independent optimiser: Nelder-Mead on the coefficients, started away from the optimum. */
HARNESS_CASE(nelder_mead_optimum)
{
    if (!regression_fit()) return;
    bl_error err = {0};
    bl_warnings warn = {0};
    bl_model *m = reg.m;
    const bl_fit_result r = reg.r;
    bl_likelihood *w = NULL;
    bl_likelihood_create(m, 2, &w, &err);
    nm_ctx c = {w};
    gsl_multimin_function fn = {nm_f, 9, &c};
    gsl_multimin_fminimizer *nm = gsl_multimin_fminimizer_alloc(gsl_multimin_fminimizer_nmsimplex2, 9);
    gsl_vector *x = gsl_vector_alloc(9), *step = gsl_vector_alloc(9);
    const double x0[9] = {1.3, 1.3, 0, 0, 1.5, 1.5, 1.0, 0, 0.2};
    for (int j = 0; j < 9; j++) gsl_vector_set(x, j, x0[j]);
    gsl_vector_set_all(step, 0.05);
    gsl_multimin_fminimizer_set(nm, &fn, x, step);
    double best = INFINITY;
    /* Restarts of the simplex avoid its known stalls on curved valleys (McKinnon 1998). */
    for (int round = 0; round < 6; round++) {
        for (int it = 0; it < 20000; it++) {
            if (gsl_multimin_fminimizer_iterate(nm)) break;
            if (gsl_multimin_test_size(gsl_multimin_fminimizer_size(nm), 1e-10) == GSL_SUCCESS) break;
        }
        if (!(best - nm->fval > 1e-10)) break;
        best = nm->fval;
        gsl_vector_memcpy(x, nm->x);
        gsl_vector_set_all(step, 0.01);
        gsl_multimin_fminimizer_set(nm, &fn, x, step);
    }
    best = fmin(best, nm->fval);
    check_abs(-best, r.log_likelihood, 1e-6, "BFGS optimum = Nelder-Mead optimum in log-likelihood");
    gsl_multimin_fminimizer_free(nm);

    /* bandlink's own derivative-free path (the fallback) alone reaches the same optimum. */
    bl_fit_options sopt = reg.opt;
    sopt.simplex_only = 1;
    sopt.starts = 1;
    bl_fit_result rs;
    check_true(bl_fit_model(m, &sopt, NULL, &rs, &warn, &err) == BL_OK && !strcmp(rs.diag.method, "nmsimplex2"),
               "nmsimplex2-only fit runs");
    check_abs(rs.log_likelihood, r.log_likelihood, 1e-6, "nmsimplex2 path = BFGS optimum in log-likelihood");
    bl_fit_result_clear(&rs);
    gsl_vector_free(x);
    gsl_vector_free(step);
    bl_likelihood_destroy(w);
    bl_warnings_clear(&warn);
}

/* Warm starts: the same optimum from an infeasible and from a poor start. */
HARNESS_CASE(warm_starts)
{
    if (!regression_fit()) return;
    bl_error err = {0};
    bl_warnings warn = {0};
    bl_model *m = reg.m;
    const bl_fit_result r = reg.r;
    bl_fit_options opt = reg.opt;
    /* Warm start far off (slope large, infeasible for some trials) still converges to the same point. */
    double far[9] = {1.5, 1.1, 3.0, 0.0, 2.2, 1.3, 0.6, -0.3, 0.28};
    bl_fit_result r2;
    opt.starts = 1;
    check_true(bl_fit_model(m, &opt, far, &r2, &warn, &err) == BL_OK, "fit from an infeasible start runs");
    check_abs(r2.log_likelihood, r.log_likelihood, 1e-6,
              "same optimum from the EZ start when the given one is infeasible");
    /* From a feasible but poor start. */
    double poor[9] = {1.0, 1.0, 0.0, 0.0, 0.5, 0.5, 0.5, 0.0, 0.1};
    bl_fit_result r3;
    check_true(bl_fit_model(m, &opt, poor, &r3, &warn, &err) == BL_OK, "fit from a poor start runs");
    check_abs(r3.log_likelihood, r.log_likelihood, 1e-6, "same optimum from a poor start");
    check_true(r3.converged, "converged from a poor start");
    bl_fit_result_clear(&r2);
    bl_fit_result_clear(&r3);
    bl_warnings_clear(&warn);
}

/* Thread-count invariance of the whole fit. */
HARNESS_CASE(thread_invariance)
{
    if (!regression_fit()) return;
    bl_error err = {0};
    bl_warnings warn = {0};
    const bl_fit_result r = reg.r;
    bl_fit_options opt = reg.opt;
    opt.threads = 1;
    opt.starts = 3;
    bl_fit_result r1;
    bl_fit_model(reg.m, &opt, NULL, &r1, &warn, &err);
    double dmax = 0;
    for (int j = 0; j < 9; j++) dmax = fmax(dmax, fabs(r1.coef[j].estimate - r.coef[j].estimate));
    check_abs(r1.log_likelihood, r.log_likelihood, 1e-12 * fabs(r.log_likelihood), "1 vs 2 threads: same optimum");
    check_abs(dmax, 0, 1e-12, "1 vs 2 threads: same estimates");
    bl_fit_result_clear(&r1);
    bl_warnings_clear(&warn);
}

/* The separate-mode study of the cases below: drift with a slope on beta, 2 starts. */
static bl_model_spec sep;
static bl_slope_spec sep_slope = {"beta", NULL, 0};

static bl_study separate_study(void)
{
    spec_default(&sep, "separate");
    sep.param[BL_DRIFT].slopes = &sep_slope;
    sep.param[BL_DRIFT].n_slopes = 1;
    bl_study study;
    memset(&study, 0, sizeof study);
    study.fit.participants = BL_PARTICIPANTS_SEPARATE;
    study.fit.starts = 2;
    study.models = &sep;
    study.n_models = 1;
    return study;
}

/* Separate mode through bl_fit_study: per-participant fits and the group summary. */
HARNESS_CASE(separate_mode)
{
    bl_error err = {0};
    bl_warnings warn = {0};
    bl_trials *t = regression_trials();
    bl_study study = separate_study();
    bl_fit_options opt;
    bl_fit_set *set = NULL;
    bl_fit_options_default(&opt);
    check_true(bl_fit_study(&study, t, &opt, &set, &warn, &err) == BL_OK, "separate-mode study fit (%s)", err.message);
    const bl_model_result *mr = &set->models[0];
    check_true(mr->n_participants == 4, "4 participants fitted separately");
    double llsum = 0;
    size_t ksum = 0;
    for (size_t i = 0; i < mr->n_participants; i++) {
        llsum += mr->participants[i].log_likelihood;
        ksum += mr->participants[i].parameters;
    }
    check_rel(mr->log_likelihood, llsum, 1e-14, "total log-likelihood = sum over participants");
    check_true(mr->parameters == ksum && ksum == 16, "parameters = sum over participants (%zu)", ksum);
    check_true(mr->n_group == 4, "group summary of 4 coefficients");
    for (size_t g = 0; g < mr->n_group; g++) {
        const bl_group_coefficient *gc = &mr->group[g];
        double y[4], v[4], sw = 0, sw2 = 0, swy = 0;
        for (int i = 0; i < 4; i++) {
            y[i] = mr->participants[i].coef[g].estimate;
            v[i] = mr->participants[i].coef[g].se * mr->participants[i].coef[g].se;
            sw += 1 / v[i];
            sw2 += 1 / (v[i] * v[i]);
            swy += y[i] / v[i];
        }
        double q = 0, mean = (y[0] + y[1] + y[2] + y[3]) / 4, ss = 0;
        for (int i = 0; i < 4; i++) {
            q += (y[i] - swy / sw) * (y[i] - swy / sw) / v[i];
            ss += (y[i] - mean) * (y[i] - mean);
        }
        double tau2 = fmax(0, (q - 3) / (sw - sw2 / sw)), ws = 0, wsy = 0;
        for (int i = 0; i < 4; i++) {
            ws += 1 / (v[i] + tau2);
            wsy += y[i] / (v[i] + tau2);
        }
        check_rel(gc->q, q, 1e-12, "%s %s: Cochran's Q", gc->parameter, gc->term);
        check_abs(gc->tau2, tau2, 1e-12 * fmax(1, tau2), "%s %s: DerSimonian-Laird tau^2", gc->parameter, gc->term);
        check_rel(gc->re_estimate, wsy / ws, 1e-12, "%s %s: random-effects estimate", gc->parameter, gc->term);
        check_rel(gc->re_se, sqrt(1 / ws), 1e-12, "%s %s: random-effects se", gc->parameter, gc->term);
        double sd = sqrt(ss / 3), tt = mean / (sd / 2);
        check_rel(gc->t, tt, 1e-12, "%s %s: one-sample t", gc->parameter, gc->term);
        check_rel(gc->p_t, 2 * gsl_cdf_tdist_Q(fabs(tt), 3), 1e-12, "%s %s: t-test p", gc->parameter, gc->term);
        check_rel(mr->fit.coef[g].estimate, gc->re_estimate, 0, "model-level coefficient is the RE estimate");
    }
    /* Predictions exist for every kept trial and come from that participant's own fit. */
    size_t used = 0;
    for (size_t i = 0; i < t->n; i++) used += mr->used[i];
    check_true(used == t->n, "every trial has predictions");
    check_rel(mr->predicted[0].value[BL_NONDECISION], mr->participants[0].coef[3].estimate, 1e-15,
              "trial 1 uses participant r1's nondecision");
    check_rel(mr->predicted[t->n - 1].value[BL_NONDECISION], mr->participants[3].coef[3].estimate, 1e-15,
              "the last trial uses participant r4's nondecision");
    check_true(mr->p_upper[0] > 0 && mr->p_upper[0] < 1 && mr->mean_rt[0] > mr->predicted[0].value[BL_NONDECISION],
               "p_upper in (0,1), mean RT above nondecision");
    bl_fit_set_destroy(set);
    bl_warnings_clear(&warn);
}

/* Participants that differ in drift (0.6 apart): tau^2 > 0. */
HARNESS_CASE(separate_heterogeneous)
{
    bl_error err = {0};
    bl_warnings warn = {0};
    bl_study study = separate_study();
    bl_fit_options opt;
    bl_fit_set *set = NULL;
    bl_fit_options_default(&opt);
    sim_truth tr2 = {.n = 2400,
                     .n_participants = 4,
                     .a = {1.2, 1.2},
                     .a_slope = {0, 0},
                     .v = {1.0, 1.0, 1.0},
                     .v_slope = -0.3,
                     .t0 = 0.3,
                     .v_step = 0.6};
    bl_trials *t = sim_trials(&tr2, 99);
    check_true(bl_fit_study(&study, t, &opt, &set, &warn, &err) == BL_OK, "separate fit, heterogeneous drift");
    const bl_model_result *mr = &set->models[0];
    check_true(mr->group[1].tau2 > 0.05,
               "drift intercept: between-participant variance found (tau^2 %.3g; truth "
               "var of 1.0, 1.6, 2.2, 2.8 = 0.6)",
               mr->group[1].tau2);
    check_abs(mr->group[1].mean, 1.9, 0.2, "drift intercept: mean across participants near 1.9");
    check_true(mr->group[2].tau2 < mr->group[1].tau2, "drift slope: less heterogeneity than the intercept");
    {
        double y[4], v[4], sw = 0, sw2 = 0, swy = 0, q = 0;
        for (int i = 0; i < 4; i++) {
            y[i] = mr->participants[i].coef[1].estimate;
            v[i] = mr->participants[i].coef[1].se * mr->participants[i].coef[1].se;
            sw += 1 / v[i];
            sw2 += 1 / (v[i] * v[i]);
            swy += y[i] / v[i];
        }
        for (int i = 0; i < 4; i++) q += (y[i] - swy / sw) * (y[i] - swy / sw) / v[i];
        double tau2 = fmax(0, (q - 3) / (sw - sw2 / sw)), ws = 0, wsy = 0;
        for (int i = 0; i < 4; i++) {
            ws += 1 / (v[i] + tau2);
            wsy += y[i] / (v[i] + tau2);
        }
        /* DerSimonian & Laird (1986) moment estimator, recomputed here. */
        check_rel(mr->group[1].tau2, tau2, 1e-12, "heterogeneous drift: DerSimonian-Laird tau^2");
        check_rel(mr->group[1].re_estimate, wsy / ws, 1e-12, "heterogeneous drift: random-effects estimate");
        check_rel(mr->group[1].re_se, sqrt(1 / ws), 1e-12, "heterogeneous drift: random-effects se");
    }
    bl_fit_set_destroy(set);
    bl_trials_destroy(t);
    bl_warnings_clear(&warn);
}

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    static const harness_case cases[] = {
        HARNESS_ENTRY(information_inverse), HARNESS_ENTRY(ez_round_trip),       HARNESS_ENTRY(ez_agreement),
        HARNESS_ENTRY(regression_recovery), HARNESS_ENTRY(nelder_mead_optimum), HARNESS_ENTRY(warm_starts),
        HARNESS_ENTRY(thread_invariance),   HARNESS_ENTRY(separate_mode),       HARNESS_ENTRY(separate_heterogeneous),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
