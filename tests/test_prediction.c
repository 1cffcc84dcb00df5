/* Predictions of a fitted model (report/prediction.h): links and the delta method against closed
 * forms, and a whole prediction from a small fits.json document against the closed-form choice
 * probability and mean decision time of the Wiener model with an unbiased start.
 * Sources named beside each check. The fits.json below is invented (coefficients and covariance
 * chosen by hand); every expected value is computed here from the closed forms. */
#include "harness.h"
#include "bandlink/prediction.h"

#include <math.h>
#include <string.h>

/* g' S g for a 2-vector, written out (the closed form of the quadratic form). */
static double quad2(const double g[2], const double S[4])
{
    return g[0] * g[0] * S[0] + 2 * g[0] * g[1] * S[1] + g[1] * g[1] * S[3];
}

static void check_linear(void)
{
    const double b[2] = {0.4, 0.15}, S[4] = {0.010, -0.002, -0.002, 0.004};
    const double x = 1.7, g[2] = {1, x};
    bl_predicted p;
    /* Identity link: value = b0 + b1 x, se = sqrt(g' S g) (delta method with h' = 1). */
    bl_prediction_linear(BL_PREDICTION_LINK_IDENTITY, b, S, 2, g, 1.0, &p);
    check_rel(p.value, 0.4 + 0.15 * x, 1e-15, "identity link: value = b0 + b1 x");
    check_rel(p.se, sqrt(quad2(g, S)), 1e-14, "identity link: se = sqrt(g'Sg)");
    check_rel(p.ci_high - p.ci_low, 2 * 1.959963984540054 * sqrt(quad2(g, S)), 1e-13,
              "95%% interval width = 2 z_.975 se (z from the normal quantile, e.g. scipy.stats.norm.ppf(0.975))");
    /* Log link: value = exp(eta), se = exp(eta) sqrt(g' S g) (delta method, h' = exp). */
    bl_prediction_linear(BL_PREDICTION_LINK_LOG, b, S, 2, g, 1.0, &p);
    double eta = 0.4 + 0.15 * x;
    check_rel(p.value, exp(eta), 1e-15, "log link: value = exp(b0 + b1 x)");
    check_rel(p.se, exp(eta) * sqrt(quad2(g, S)), 1e-14, "log link: se = exp(eta) sqrt(g'Sg)");
    check_rel(p.ci_low, exp(eta - 1.959963984540054 * sqrt(quad2(g, S))), 1e-14,
              "log link: interval low = exp(eta - z se_eta) (the link-scale Wald interval transformed)");
    check_true(p.ci_low > 0, "log link: the interval stays positive");
    /* Sign -1 (drift of a lower-category stimulus): value flips, se does not. */
    bl_prediction_linear(BL_PREDICTION_LINK_IDENTITY, b, S, 2, g, -1.0, &p);
    check_rel(p.value, -(0.4 + 0.15 * x), 1e-15, "sign -1 flips the value");
    check_rel(p.se, sqrt(quad2(g, S)), 1e-14, "sign -1 keeps the se");
    /* No covariance: se and interval NAN. */
    bl_prediction_linear(BL_PREDICTION_LINK_IDENTITY, b, NULL, 2, g, 1.0, &p);
    check_true(isnan(p.se) && isnan(p.ci_low) && isnan(p.ci_high), "no covariance: se and interval are NAN");
    const double Snan[4] = {NAN, 0, 0, 1};
    check_true(isnan(bl_prediction_delta_se(g, Snan, 2)), "a NAN covariance entry gives a NAN se");
    /* 3 x 3: sqrt(j'Sj) against the sum written out. */
    const double j3[3] = {0.3, -1.2, 2.0};
    const double S3[9] = {2, 0.5, 0.1, 0.5, 1, -0.3, 0.1, -0.3, 0.7};
    double want = 0;
    for (int a = 0; a < 3; a++)
        for (int c = 0; c < 3; c++) want += j3[a] * S3[a * 3 + c] * j3[c];
    check_rel(bl_prediction_delta_se(j3, S3, 3), sqrt(want), 1e-15, "delta se: sqrt(j'Sj), 3 coefficients");
}

/* A pooled fit: threshold per context; drift = b0 + b1 theta; nondecision one value; start fixed 0.5.
 * Coefficient order: threshold rich, threshold lean, drift intercept, drift theta, nondecision. */
static const char *FITS =
    "{\"mode\": \"pooled\", \"models\": [{\"name\": \"m\", \"mode\": \"pooled\", \"coefficients\": ["
    "{\"parameter\": \"threshold\", \"term\": \"intercept\", \"level\": \"rich\", \"estimate\": 1.4},"
    "{\"parameter\": \"threshold\", \"term\": \"intercept\", \"level\": \"lean\", \"estimate\": 1.1},"
    "{\"parameter\": \"drift\", \"term\": \"intercept\", \"level\": \"\", \"estimate\": 0.9},"
    "{\"parameter\": \"drift\", \"term\": \"theta\", \"level\": \"\", \"estimate\": -0.3},"
    "{\"parameter\": \"nondecision\", \"term\": \"intercept\", \"level\": \"\", \"estimate\": 0.28}],"
    "\"covariance\": [[0.004, 0.001, 0.0005, 0.0001, 0.0002], [0.001, 0.003, 0.0002, 0, 0.0001],"
    "[0.0005, 0.0002, 0.01, 0.002, -0.0003], [0.0001, 0, 0.002, 0.006, 0], [0.0002, 0.0001, -0.0003, 0, 0.00004]]}],"
    "\"warnings\": [], \"provenance\": {\"study\": {"
    "\"trials\": {\"file\": \"t.csv\", \"participant\": \"animal\", \"rt\": \"rt\", \"response\": \"choice\","
    " \"upper\": [\"high\"], \"stimulus\": \"tone\"},"
    "\"models\": [{\"name\": \"m\", \"threshold\": {\"per\": [\"context\"]},"
    " \"drift\": {\"slopes\": {\"theta\": []}}}]}}}";

static double COV[25];

static void fill_cov(void)
{
    const double c[25] = {0.004,  0.001,  0.0005, 0.0001, 0.0002,  0.001,   0.003,  0.0002, 0,
                          0.0001, 0.0005, 0.0002, 0.01,   0.002,   -0.0003, 0.0001, 0,      0.002,
                          0.006,  0,      0.0002, 0.0001, -0.0003, 0,       0.00004};
    memcpy(COV, c, sizeof c);
}

static double se_of(const double j[5]) { return bl_prediction_delta_se(j, COV, 5); }

static void check_whole(void)
{
    fill_cov();
    bl_fitted_models *fm = NULL;
    bl_error err = {0};
    bl_warnings warn = {0};
    if (!check_true(bl_fitted_models_parse(FITS, "fits.json", &fm, &err) == BL_OK, "parse a fits.json (%s)",
                    err.message))
        return;
    const double theta = 0.8;
    bl_prediction_setting at[] = {{"theta", "0.8"}, {"context", "rich"}};
    bl_prediction_request req = {"m", NULL, at, 2, 0, 0, 0};
    bl_prediction pr;
    if (!check_true(bl_prediction_compute(fm, &req, &pr, &warn, &err) == BL_OK, "predict (%s)", err.message)) {
        bl_fitted_models_destroy(fm);
        return;
    }
    double a = 1.4, v = 0.9 - 0.3 * theta, t0 = 0.28;
    check_rel(pr.param[BL_THRESHOLD].value, a, 1e-15, "threshold at context rich");
    check_rel(pr.param[BL_DRIFT].value, v, 1e-15, "drift = b0 + b1 theta");
    /* se of drift: g = (0, 0, 1, theta, 0): sqrt(S22 + 2 theta S23 + theta^2 S33) (closed form). */
    check_rel(pr.param[BL_DRIFT].se, sqrt(0.01 + 2 * theta * 0.002 + theta * theta * 0.006), 1e-14,
              "drift se = sqrt(S_vv + 2x S_vb + x^2 S_bb)");
    check_rel(pr.param[BL_THRESHOLD].se, sqrt(0.004), 1e-14, "threshold se = sqrt(S_rich,rich)");
    check_true(pr.link[BL_START] == BL_PREDICTION_LINK_FIXED && pr.param[BL_START].value == 0.5 &&
                   pr.param[BL_START].se == 0,
               "start is fixed at 0.5 with se 0");
    /* P(upper) at w = 1/2 is 1 / (1 + exp(-v a)) (Wagenmakers, van der Maas & Grasman 2007, EZ eq. for
     * Pc with s = 1); dP/da = v P(1-P), dP/dv = a P(1-P). */
    double P = 1 / (1 + exp(-v * a));
    check_rel(pr.p_upper.value, P, 1e-13, "P(upper) = logistic(v a)");
    double dPa = v * P * (1 - P), dPv = a * P * (1 - P);
    double jp[5] = {dPa, 0, dPv, dPv * theta, 0};
    check_rel(pr.p_upper.se, se_of(jp), 1e-6, "P(upper) se: numerical gradient vs analytic delta method");
    check_rel(pr.p_lower.se, se_of(jp), 1e-6, "P(lower) se equals P(upper) se");
    /* Mean RT (both boundaries alike at w = 1/2): t0 + a/(2v) tanh(va/2) (same source), with
     * d/da = tanh(u)/(2v) + a sech^2(u)/4 and d/dv = -a tanh(u)/(2v^2) + a^2 sech^2(u)/(4v), u = va/2. */
    double u = v * a / 2, th = tanh(u), sech2 = 1 - th * th;
    check_rel(pr.mean_rt.value, t0 + a / (2 * v) * th, 1e-10, "mean RT = t0 + a/(2v) tanh(va/2)");
    check_rel(pr.mean_rt_upper.value, t0 + a / (2 * v) * th, 1e-10, "mean RT upper");
    double dMa = th / (2 * v) + a * sech2 / 4, dMv = -a * th / (2 * v * v) + a * a * sech2 / (4 * v);
    double jm[5] = {dMa, 0, dMv, dMv * theta, 1};
    check_rel(pr.mean_rt.se, se_of(jm), 1e-6, "mean RT se: numerical gradient vs analytic delta method");
    check_rel(pr.mean_rt_lower.se, se_of(jm), 1e-6, "mean RT lower se");
    /* The quantiles are those of the engine at the predicted parameters. */
    double q;
    bl_wiener_quantile(&pr.params, 0.5, 1, &q, NULL);
    check_rel(pr.quantile[1][2], q, 0, "median of the upper boundary from the engine");

    /* Stimulus coding: a stimulus not in `upper` flips the drift (trials.c convention). */
    bl_prediction_setting at2[] = {{"theta", "0.8"}, {"context", "lean"}, {"tone", "low"}};
    bl_prediction_request req2 = {"m", NULL, at2, 3, 0, 0, 0};
    check_true(bl_prediction_compute(fm, &req2, &pr, &warn, &err) == BL_OK && pr.drift_sign == -1 &&
                   pr.param[BL_DRIFT].value == -v && pr.param[BL_THRESHOLD].value == 1.1,
               "stimulus of the lower category: drift -v, threshold at context lean");
    check_rel(pr.p_upper.value, 1 / (1 + exp(v * 1.1)), 1e-13, "P(upper) = logistic(-v a) for the flipped drift");

    /* Errors. */
    bl_prediction_request bad = req;
    bad.model = "nosuch";
    check_true(bl_prediction_compute(fm, &bad, &pr, &warn, &err) == BL_ERR_USAGE && strstr(err.message, "'nosuch'") &&
                   strstr(err.message, "models: m"),
               "unknown model names it and lists the models (%s)", err.message);
    bad = req;
    bad.n_at = 1;
    check_true(bl_prediction_compute(fm, &bad, &pr, &warn, &err) == BL_ERR_USAGE && strstr(err.message, "'context'"),
               "a missing condition is named (%s)", err.message);
    bad = req;
    bad.participant = "rat1";
    check_true(bl_prediction_compute(fm, &bad, &pr, &warn, &err) == BL_ERR_USAGE && strstr(err.message, "pooled"),
               "a participant of a pooled fit (%s)", err.message);
    bl_prediction_setting at3[] = {{"theta", "1e999"}, {"context", "rich"}};
    bad = req;
    bad.at = at3;
    check_true(bl_prediction_compute(fm, &bad, &pr, &warn, &err) == BL_ERR_INPUT && strstr(err.message, "1e999"),
               "a regressor value that is not finite (%s)", err.message);
    bl_fitted_models_destroy(fm);

    /* A covariance of the wrong shape is an error naming the key. */
    char *broken = malloc(strlen(FITS) + 1);
    strcpy(broken, FITS);
    const char *last = "[0.0002, 0.0001, -0.0003, 0, 0.00004]", *shorter = "[0.0002, 0.0001, -0.0003, 0]";
    char *row = strstr(broken, last);
    memset(row, ' ', strlen(last));
    memcpy(row, shorter, strlen(shorter));
    check_true(bl_fitted_models_parse(broken, "f.json", &fm, &err) == BL_ERR_INPUT && strstr(err.message, "f.json") &&
                   strstr(err.message, "models[0].covariance[4]"),
               "covariance row of the wrong length names file and key (%s)", err.message);
    free(broken);
    bl_warnings_clear(&warn);
}

/* A separate fit: participants' own coefficients and covariance; the model level has none. The
 * model frees the contamination, whose RT range fits.json does not keep. */
static const char *SEPARATE =
    "{\"mode\": \"separate\", \"models\": [{\"name\": \"c\", \"mode\": \"separate\", \"coefficients\": ["
    "{\"parameter\": \"threshold\", \"term\": \"intercept\", \"level\": \"\", \"estimate\": 0.2},"
    "{\"parameter\": \"drift\", \"term\": \"intercept\", \"level\": \"\", \"estimate\": 1.0},"
    "{\"parameter\": \"nondecision\", \"term\": \"intercept\", \"level\": \"\", \"estimate\": 0.3},"
    "{\"parameter\": \"contamination\", \"term\": \"intercept\", \"level\": \"\", \"estimate\": 0.02}],"
    "\"covariance\": null, \"participants\": [{\"participant\": \"p1\", \"coefficients\": ["
    "{\"parameter\": \"threshold\", \"term\": \"intercept\", \"level\": \"\", \"estimate\": 0.25},"
    "{\"parameter\": \"drift\", \"term\": \"intercept\", \"level\": \"\", \"estimate\": 1.2},"
    "{\"parameter\": \"nondecision\", \"term\": \"intercept\", \"level\": \"\", \"estimate\": 0.31},"
    "{\"parameter\": \"contamination\", \"term\": \"intercept\", \"level\": \"\", \"estimate\": 0.03}],"
    "\"covariance\": [[0.01, 0, 0, 0], [0, 0.02, 0, 0], [0, 0, 0.0001, 0], [0, 0, 0, 0.0004]]}]}],"
    "\"provenance\": {\"study\": {\"trials\": {\"file\": \"t.csv\", \"participant\": \"animal\", \"rt\": \"rt\","
    " \"response\": \"correct\", \"upper\": [\"1\"]}, \"fit\": {\"participants\": \"separate\"},"
    "\"models\": [{\"name\": \"c\", \"threshold\": {\"link\": \"log\"}, \"contamination\": {}}]}}}";

static void check_separate(void)
{
    bl_fitted_models *fm = NULL;
    bl_error err = {0};
    bl_warnings warn = {0};
    if (!check_true(bl_fitted_models_parse(SEPARATE, "sep.json", &fm, &err) == BL_OK, "parse a separate fit (%s)",
                    err.message))
        return;
    bl_prediction_request req = {"c", "p1", NULL, 0, 0, 0, 0};
    bl_prediction pr;
    check_true(bl_prediction_compute(fm, &req, &pr, &warn, &err) == BL_ERR_USAGE &&
                   strstr(err.message, "contamination"),
               "contamination > 0 without its RT range is named (%s)", err.message);
    req.has_contamination_range = 1;
    req.contamination_lo = 0.2;
    req.contamination_hi = 3.0;
    err = (bl_error){0};
    if (check_true(bl_prediction_compute(fm, &req, &pr, &warn, &err) == BL_OK, "participant p1 (%s)", err.message)) {
        /* Log link: threshold = exp(0.25), se = exp(0.25) sqrt(0.01) (closed form of the delta method). */
        check_rel(pr.param[BL_THRESHOLD].value, exp(0.25), 1e-15, "participant's own log-link threshold");
        check_rel(pr.param[BL_THRESHOLD].se, exp(0.25) * 0.1, 1e-14, "its se = exp(eta) sqrt(S_aa)");
        check_rel(pr.param[BL_CONTAMINATION].se, 0.02, 1e-14, "contamination se = sqrt(S_pp)");
        /* Contaminants answer either way with probability 1/2 (Ratcliff & Tuerlinckx 2002):
         * P(upper) = (1 - p0) / (1 + exp(-v a)) + p0 / 2 at start 1/2, so dP/dp0 = 1/2 - 1/(1 + exp(-v a)). */
        double a = exp(0.25), v = 1.2, p0 = 0.03, L = 1 / (1 + exp(-v * a));
        check_rel(pr.p_upper.value, (1 - p0) * L + p0 / 2, 1e-13, "P(upper) with contamination");
        double dLa = v * L * (1 - L), dLv = a * L * (1 - L);
        double j[4] = {(1 - p0) * dLa * a, (1 - p0) * dLv, 0, 0.5 - L};
        const double S[16] = {0.01, 0, 0, 0, 0, 0.02, 0, 0, 0, 0, 0.0001, 0, 0, 0, 0, 0.0004};
        check_rel(pr.p_upper.se, bl_prediction_delta_se(j, S, 4), 1e-6,
                  "P(upper) se through a log link and the contamination (analytic chain rule)");
    }
    req.participant = NULL;
    check_true(bl_prediction_compute(fm, &req, &pr, &warn, &err) == BL_OK && pr.group_summary && !pr.has_covariance &&
                   isnan(pr.p_upper.se) && pr.param[BL_DRIFT].value == 1.0,
               "model level of a separate fit: group coefficients, no intervals");
    req.participant = "p9";
    check_true(bl_prediction_compute(fm, &req, &pr, &warn, &err) == BL_ERR_USAGE && strstr(err.message, "'p9'") &&
                   strstr(err.message, "participants: p1"),
               "unknown participant lists the participants (%s)", err.message);
    bl_fitted_models_destroy(fm);
    bl_warnings_clear(&warn);
}

int main(void)
{
    check_linear();
    check_whole();
    check_separate();
    return harness_summary();
}
