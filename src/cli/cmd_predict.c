/* bandlink predict: choice probabilities, mean RTs, RT quantiles and densities of the Wiener diffusion
 * model for given parameter values (noise s = 1), or (--from fits.json) the predictions of a fitted
 * model at chosen regressor values and condition levels with delta-method 95% intervals
 * (report/prediction.h). Output: a small table, or one JSON object (--json) with the keys listed in
 * docs/cli.md. */
#include "bandlink/wiener.h"
#include "cli_common.h"
#include "commands.h"
#include "bandlink/prediction.h"

#include <cJSON.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char *const CMD = "predict";
static const double QUANTILE_PROBS[5] = {0.1, 0.3, 0.5, 0.7, 0.9};
enum { MAX_RT = 100000 };

static void usage(FILE *out)
{
    fprintf(out,
            "usage: bandlink predict --threshold A --drift V --nondecision T [--start W] [--drift-sd SV]\n"
            "                        [--start-range SZ] [--nondecision-range ST]\n"
            "                        [--contamination P --contamination-range LO,HI] [--rt R1,R2,..] [--json]\n"
            "       bandlink predict --from FITS.json --model NAME [--at NAME=VALUE,..] [--participant P]\n"
            "                        [--contamination-range LO,HI] [--json]\n\n"
            "Choice probabilities, mean response times, RT quantiles (0.1 0.3 0.5 0.7 0.9) per boundary and\n"
            "densities at the given response times, for the Wiener diffusion model with noise scale s = 1\n"
            "(multiply threshold, drift and drift-sd from the s = 0.1 convention by 10).\n\n"
            "  --threshold A           boundary separation, > 0\n"
            "  --drift V               drift rate toward the upper boundary\n"
            "  --nondecision T         non-decision time [s], >= 0\n"
            "  --start W               relative starting point in (0, 1); default 0.5\n"
            "  --drift-sd SV           across-trial SD of the drift, >= 0; default 0\n"
            "  --start-range SZ        across-trial width of the start (relative), default 0\n"
            "  --nondecision-range ST  across-trial width of the non-decision time [s], default 0\n"
            "  --contamination P       share of uniform contaminant responses in [0, 1); default 0\n"
            "  --contamination-range LO,HI  RT range [s] of the contaminants (required with P > 0)\n"
            "  --rt R1,R2,..           response times [s] at which to print the densities [1/s]\n"
            "  --json                  print one JSON object instead of a table\n\n"
            "Predictions of a fitted model (fits.json of `bandlink run` or `bandlink fit`):\n"
            "  --from FITS.json        read the model's coefficients and their covariance from this file\n"
            "  --model NAME            the model to predict from\n"
            "  --at NAME=VALUE,..      a value for every regressor the model uses, on the regressor's scale as\n"
            "                          written in power.csv / trials.csv (standardised units when the study\n"
            "                          standardises), and a level for every condition column it uses\n"
            "                          (context=rich); the stimulus column (stimulus coding) is optional.\n"
            "                          May be given several times\n"
            "  --participant P         a participant's own fit (separate) or empirical-Bayes values (hierarchical)\n"
            "  --contamination-range LO,HI  contaminant RT range [s], needed when the model predicts\n"
            "                          contamination > 0\n"
            "  --json                  print one JSON object instead of a table\n"
            "Parameters, P(upper), P(lower) and mean RTs get delta-method 95%% intervals (numerical gradient of\n"
            "the engine for the derived quantities); --rt and the parameter options do not apply.\n");
}

/* Parse "x,y,..." into a new array; on error print a usage message naming --rt and the item. */
static int parse_list(const char *opt, const char *value, double **out, size_t *n)
{
    size_t cap = 8, k = 0;
    double *xs = malloc(cap * sizeof *xs);
    if (!xs) return 0;
    const char *s = value;
    for (;;) {
        const char *comma = strchr(s, ',');
        size_t len = comma ? (size_t)(comma - s) : strlen(s);
        char item[128];
        if (len == 0 || len >= sizeof item) {
            cli_usage_error(CMD, "option %s: '%.*s' in '%s' is not a number", opt, (int)(len < 64 ? len : 64), s,
                            value);
            free(xs);
            return 0;
        }
        memcpy(item, s, len);
        item[len] = '\0';
        double x;
        if (!cli_parse_double(CMD, opt, item, &x)) {
            free(xs);
            return 0;
        }
        if (k == cap) {
            if (cap >= MAX_RT) {
                cli_usage_error(CMD, "option %s: more than %d values", opt, MAX_RT);
                free(xs);
                return 0;
            }
            double *nx = realloc(xs, 2 * cap * sizeof *xs);
            if (!nx) {
                free(xs);
                return 0;
            }
            xs = nx;
            cap *= 2;
        }
        xs[k++] = x;
        if (!comma) break;
        s = comma + 1;
    }
    *out = xs;
    *n = k;
    return 1;
}

typedef struct {
    double p[2]; /* [lower, upper] */
    double mean[2];
    int mean_ok[2];
    double q[2][5];
    int q_ok[2][5];
    double *dens[2];
} prediction;

static int compute(const bl_wiener_params *par, const double *rt, size_t nrt, prediction *out, bl_error *err)
{
    for (int b = 0; b < 2; b++)
        if (bl_wiener_p_boundary(par, b, &out->p[b], err)) return 0;
    for (int b = 0; b < 2; b++) {
        out->mean_ok[b] = out->p[b] > 0 && bl_wiener_mean_rt(par, b, &out->mean[b], err) == BL_OK;
        for (int k = 0; k < 5; k++) {
            bl_error qe = {0};
            bl_status s = bl_wiener_quantile(par, QUANTILE_PROBS[k], b, &out->q[b][k], &qe);
            out->q_ok[b][k] = s == BL_OK;
            /* A boundary that is never reached has no quantiles (printed as null / "-"); anything
             * else is a failure. */
            if (s && !(s == BL_ERR_NUMERIC && out->p[b] < 1e-250)) {
                *err = qe;
                return 0;
            }
        }
        for (size_t i = 0; i < nrt; i++) {
            double l;
            if (bl_wiener_log_density(par, rt[i], b, &l, err)) return 0;
            out->dens[b][i] = exp(l);
        }
    }
    return 1;
}

static int print_json(const prediction *pr, const double *rt, size_t nrt)
{
    cJSON *o = cJSON_CreateObject();
    if (!o) return 0;
    int ok = 1;
    ok &= cJSON_AddNumberToObject(o, "p_upper", pr->p[1]) != NULL;
    ok &= cJSON_AddNumberToObject(o, "p_lower", pr->p[0]) != NULL;
    if (pr->mean_ok[1]) ok &= cJSON_AddNumberToObject(o, "mean_rt_upper", pr->mean[1]) != NULL;
    else ok &= cJSON_AddNullToObject(o, "mean_rt_upper") != NULL;
    if (pr->mean_ok[0]) ok &= cJSON_AddNumberToObject(o, "mean_rt_lower", pr->mean[0]) != NULL;
    else ok &= cJSON_AddNullToObject(o, "mean_rt_lower") != NULL;
    cJSON *q = cJSON_AddObjectToObject(o, "quantiles");
    if (q) {
        cJSON *probs = cJSON_CreateDoubleArray(QUANTILE_PROBS, 5);
        ok &= probs && cJSON_AddItemToObject(q, "probabilities", probs);
        static const char *const names[2] = {"lower", "upper"};
        for (int b = 1; b >= 0; b--) {
            cJSON *arr = cJSON_AddArrayToObject(q, names[b]);
            for (int k = 0; arr && k < 5; k++) {
                cJSON *item = pr->q_ok[b][k] ? cJSON_CreateNumber(pr->q[b][k]) : cJSON_CreateNull();
                ok &= item && cJSON_AddItemToArray(arr, item);
            }
            ok &= arr != NULL;
        }
    } else {
        ok = 0;
    }
    cJSON *d = cJSON_AddArrayToObject(o, "density");
    for (size_t i = 0; d && i < nrt; i++) {
        cJSON *e = cJSON_CreateObject();
        ok &= e && cJSON_AddItemToArray(d, e);
        if (!e) break;
        ok &= cJSON_AddNumberToObject(e, "rt", rt[i]) != NULL;
        ok &= cJSON_AddNumberToObject(e, "upper", pr->dens[1][i]) != NULL;
        ok &= cJSON_AddNumberToObject(e, "lower", pr->dens[0][i]) != NULL;
    }
    ok &= d != NULL;
    char *text = ok ? cJSON_Print(o) : NULL;
    cJSON_Delete(o);
    if (!text) return 0;
    int w = printf("%s\n", text) >= 0;
    cJSON_free(text);
    return w;
}

static void print_table(const bl_wiener_params *par, const prediction *pr, const double *rt, size_t nrt)
{
    const double *x = par->value;
    printf("Wiener diffusion model (noise s = 1): threshold %g, drift %g, nondecision %g s, start %g", x[BL_THRESHOLD],
           x[BL_DRIFT], x[BL_NONDECISION], x[BL_START]);
    if (x[BL_DRIFT_SD] > 0) printf(", drift_sd %g", x[BL_DRIFT_SD]);
    if (x[BL_START_RANGE] > 0) printf(", start_range %g", x[BL_START_RANGE]);
    if (x[BL_NONDECISION_RANGE] > 0) printf(", nondecision_range %g s", x[BL_NONDECISION_RANGE]);
    if (x[BL_CONTAMINATION] > 0)
        printf(", contamination %g on [%g, %g] s", x[BL_CONTAMINATION], par->contamination_lo, par->contamination_hi);
    printf("\n\n%-9s %11s %12s", "boundary", "probability", "mean RT [s]");
    for (int k = 0; k < 5; k++) printf("   q%.1f [s]", QUANTILE_PROBS[k]);
    printf("\n");
    for (int b = 1; b >= 0; b--) {
        printf("%-9s %11.6g", b ? "upper" : "lower", pr->p[b]);
        if (pr->mean_ok[b]) printf(" %12.5g", pr->mean[b]);
        else printf(" %12s", "-");
        for (int k = 0; k < 5; k++) {
            if (pr->q_ok[b][k]) printf(" %10.5g", pr->q[b][k]);
            else printf(" %10s", "-");
        }
        printf("\n");
    }
    if (nrt) {
        printf("\n%-12s %14s %16s\n", "rt [s]", "upper [1/s]", "lower [1/s]");
        for (size_t i = 0; i < nrt; i++) printf("%-12.10g %14.8g %16.8g\n", rt[i], pr->dens[1][i], pr->dens[0][i]);
    }
}

/* ---- predictions of a fitted model (--from) -------------------------------------------------- */

typedef struct {
    const char *from, *model, *participant;
    int json;
    bl_prediction_setting *at;
    size_t n_at;
    char **at_text; /* the --at values, split in place */
    size_t n_text;
    int has_range;
    double range[2];
} from_options;

/* Split "a=1,b=x" (one --at value) into settings. */
static int add_settings(from_options *o, char *value)
{
    char *copy = strdup(value);
    char **nt = copy ? realloc(o->at_text, (o->n_text + 1) * sizeof *nt) : NULL;
    if (!nt) {
        free(copy);
        fprintf(stderr, "bandlink: error: out of memory\n");
        return 0;
    }
    o->at_text = nt;
    o->at_text[o->n_text++] = copy;
    for (char *item = copy; item;) {
        char *comma = strchr(item, ',');
        if (comma) *comma = '\0';
        char *eq = strchr(item, '=');
        if (!eq || eq == item || !eq[1]) {
            cli_usage_error(CMD, "option --at: '%s' in '%s' is not NAME=VALUE", item, value);
            return 0;
        }
        *eq = '\0';
        bl_prediction_setting *na = realloc(o->at, (o->n_at + 1) * sizeof *na);
        if (!na) {
            fprintf(stderr, "bandlink: error: out of memory\n");
            return 0;
        }
        o->at = na;
        o->at[o->n_at++] = (bl_prediction_setting){item, eq + 1};
        item = comma ? comma + 1 : NULL;
    }
    return 1;
}

static void from_options_free(from_options *o)
{
    for (size_t i = 0; i < o->n_text; i++) free(o->at_text[i]);
    free(o->at_text);
    free(o->at);
}

/* Options of the --from mode; 1 ok, 0 usage error printed, -1 --help printed. */
static int parse_from(int argc, char **argv, from_options *o)
{
    static const char *const raw[] = {"--threshold", "--drift",       "--nondecision",       "--start",
                                      "--drift-sd",  "--start-range", "--nondecision-range", "--contamination",
                                      "--rt"};
    for (int i = 1; i < argc; i++) {
        const char *a = argv[i];
        if (!strcmp(a, "--help") || !strcmp(a, "-h")) {
            usage(stdout);
            return -1;
        }
        if (!strcmp(a, "--json")) {
            o->json = 1;
            continue;
        }
        if (!strcmp(a, "--quiet")) continue;
        static const char *const names[] = {"--from", "--model", "--participant", "--at", "--contamination-range"};
        const char **slot[] = {&o->from, &o->model, &o->participant, NULL, NULL};
        int matched = 0;
        for (int k = 0; k < 5 && !matched; k++) {
            int missing = 0;
            const char *v = cli_option_value(argc, argv, &i, names[k], &missing);
            if (missing) {
                cli_usage_error(CMD, "option %s needs a value", names[k]);
                return 0;
            }
            if (!v) continue;
            matched = 1;
            if (k == 3) {
                if (!add_settings(o, (char *)v)) return 0;
            } else if (k == 4) {
                double *r = NULL;
                size_t n = 0;
                if (!parse_list(names[k], v, &r, &n)) return 0;
                if (n != 2) {
                    cli_usage_error(CMD, "option --contamination-range: '%s' must be two times LO,HI", v);
                    free(r);
                    return 0;
                }
                o->range[0] = r[0];
                o->range[1] = r[1];
                o->has_range = 1;
                free(r);
            } else if (*slot[k]) {
                cli_usage_error(CMD, "option %s given twice", names[k]);
                return 0;
            } else {
                *slot[k] = v;
            }
        }
        if (matched) continue;
        for (size_t k = 0; k < sizeof raw / sizeof raw[0]; k++) {
            size_t n = strlen(raw[k]);
            if (!strncmp(a, raw[k], n) && (a[n] == '\0' || a[n] == '=')) {
                cli_usage_error(CMD, "option %s cannot be used with --from (the fitted model gives the parameters)",
                                raw[k]);
                return 0;
            }
        }
        cli_usage_error(CMD, "unknown option '%s'", a);
        return 0;
    }
    return 1;
}

static cJSON *predicted_json(const bl_predicted *p)
{
    cJSON *o = cJSON_CreateObject();
    if (!o) return NULL;
    const double v[4] = {p->value, p->se, p->ci_low, p->ci_high};
    static const char *const keys[4] = {"value", "se", "ci_low", "ci_high"};
    for (int i = 0; i < 4; i++) {
        cJSON *x = isfinite(v[i]) ? cJSON_CreateNumber(v[i]) : cJSON_CreateNull();
        if (!x || !cJSON_AddItemToObject(o, keys[i], x)) {
            cJSON_Delete(x);
            cJSON_Delete(o);
            return NULL;
        }
    }
    return o;
}

static int add_item(cJSON *o, const char *key, cJSON *item)
{
    if (!item) return 0;
    if (!cJSON_AddItemToObject(o, key, item)) {
        cJSON_Delete(item);
        return 0;
    }
    return 1;
}

static int from_json(const from_options *o, const bl_prediction *pr)
{
    static const char *const links[] = {"fixed", "identity", "log"};
    cJSON *root = cJSON_CreateObject(), *at = NULL, *pars = NULL;
    int ok = root && add_item(root, "model", cJSON_CreateString(o->model)) &&
             add_item(root, "participant", o->participant ? cJSON_CreateString(o->participant) : cJSON_CreateNull()) &&
             (at = cJSON_AddObjectToObject(root, "at")) != NULL;
    for (size_t i = 0; ok && i < o->n_at; i++) ok = add_item(at, o->at[i].name, cJSON_CreateString(o->at[i].value));
    ok = ok && (pars = cJSON_AddObjectToObject(root, "parameters")) != NULL;
    for (int p = 0; ok && p < BL_NPARAM; p++) {
        cJSON *e = predicted_json(&pr->param[p]);
        ok = add_item(pars, bl_param_name(p), e) && add_item(e, "link", cJSON_CreateString(links[pr->link[p]]));
    }
    const bl_predicted *d[] = {&pr->p_upper, &pr->p_lower, &pr->mean_rt_upper, &pr->mean_rt_lower, &pr->mean_rt};
    static const char *const dk[] = {"p_upper", "p_lower", "mean_rt_upper", "mean_rt_lower", "mean_rt"};
    for (int i = 0; ok && i < 5; i++) ok = add_item(root, dk[i], predicted_json(d[i]));
    cJSON *q = ok ? cJSON_CreateObject() : NULL;
    ok = ok && add_item(root, "quantiles", q) &&
         add_item(q, "probabilities", cJSON_CreateDoubleArray(bl_prediction_quantile_probs, BL_PREDICTION_NQ));
    for (int b = 1; ok && b >= 0; b--) {
        cJSON *arr = cJSON_CreateArray();
        ok = add_item(q, b ? "upper" : "lower", arr);
        for (int k = 0; ok && k < BL_PREDICTION_NQ; k++) {
            double x = pr->quantile[b][k];
            cJSON *it = isfinite(x) ? cJSON_CreateNumber(x) : cJSON_CreateNull();
            ok = it && cJSON_AddItemToArray(arr, it);
            if (!ok) cJSON_Delete(it);
        }
    }
    char *text = ok ? cJSON_Print(root) : NULL;
    cJSON_Delete(root);
    if (!text) return 0;
    int w = printf("%s\n", text) >= 0;
    cJSON_free(text);
    return w;
}

static void print_interval(const bl_predicted *p, const char *fmt)
{
    char buf[96] = "-";
    if (isfinite(p->se)) {
        snprintf(buf, sizeof buf, fmt, p->ci_low, p->ci_high);
    }
    printf(" %-26s", buf);
}

static void from_table(const from_options *o, const bl_prediction *pr)
{
    printf("model '%s'%s%s%s from %s at", o->model, o->participant ? " (participant '" : "",
           o->participant ? o->participant : "", o->participant ? "')" : "", o->from);
    for (size_t i = 0; i < o->n_at; i++) printf("%s %s = %s", i ? "," : "", o->at[i].name, o->at[i].value);
    if (!o->n_at) printf(" every trial (the model uses no regressor or condition)");
    printf("\nnoise s = 1; 95%% intervals by the delta method%s\n\n",
           pr->has_covariance  ? ""
           : pr->group_summary ? " (not available for the group summary of a separate fit: use --participant)"
                               : " (not available: fits.json has no covariance for this fit; a hierarchical fit's "
                                 "participants have conditional SEs only)");
    printf("%-18s %12s %12s %-26s %s\n", "parameter", "value", "se", "95% interval", "link");
    for (int p = 0; p < BL_NPARAM; p++) {
        const bl_predicted *x = &pr->param[p];
        if (pr->link[p] == BL_PREDICTION_LINK_FIXED && x->value == 0 && p >= BL_DRIFT_SD) continue; /* fixed at 0 */
        printf("%-18s %12.6g", bl_param_name(p), x->value);
        if (pr->link[p] == BL_PREDICTION_LINK_FIXED) {
            printf(" %12s %-26s fixed\n", "-", "-");
            continue;
        }
        if (isfinite(x->se)) printf(" %12.4g", x->se);
        else printf(" %12s", "-");
        print_interval(x, "[%.6g, %.6g]");
        printf(" %s\n", pr->link[p] == BL_PREDICTION_LINK_LOG ? "log" : "identity");
    }
    printf("\n%-9s %11s %-24s %12s %-26s", "boundary", "probability", "95% interval", "mean RT [s]", "95% interval");
    for (int k = 0; k < BL_PREDICTION_NQ; k++) printf("   q%.1f [s]", bl_prediction_quantile_probs[k]);
    printf("\n");
    for (int b = 1; b >= 0; b--) {
        const bl_predicted *p = b ? &pr->p_upper : &pr->p_lower, *m = b ? &pr->mean_rt_upper : &pr->mean_rt_lower;
        printf("%-9s %11.6g", b ? "upper" : "lower", p->value);
        char buf[96] = "-";
        if (isfinite(p->se)) snprintf(buf, sizeof buf, "[%.6g, %.6g]", p->ci_low, p->ci_high);
        printf(" %-24s", buf);
        if (isfinite(m->value)) printf(" %12.5g", m->value);
        else printf(" %12s", "-");
        print_interval(m, "[%.5g, %.5g]");
        for (int k = 0; k < BL_PREDICTION_NQ; k++) {
            if (isfinite(pr->quantile[b][k])) printf(" %10.5g", pr->quantile[b][k]);
            else printf(" %10s", "-");
        }
        printf("\n");
    }
    printf("\nmean RT over both responses: %.5g s", pr->mean_rt.value);
    if (isfinite(pr->mean_rt.se)) printf(", 95%% interval [%.5g, %.5g] s", pr->mean_rt.ci_low, pr->mean_rt.ci_high);
    printf("\n");
}

static int predict_from(int argc, char **argv)
{
    from_options o = {0};
    bl_fitted_models *fm = NULL;
    bl_warnings warn = {0};
    bl_error err = {0};
    int code = CLI_EXIT_USAGE;
    int r = parse_from(argc, argv, &o);
    if (r <= 0) {
        code = r < 0 ? CLI_EXIT_OK : CLI_EXIT_USAGE;
        goto done;
    }
    if (!o.from) {
        cli_usage_error(CMD, "option --from needs a value");
        goto done;
    }
    if (bl_fitted_models_load(o.from, &fm, &err)) {
        code = cli_fail(&err);
        goto done;
    }
    if (!o.model) {
        char list[512] = "";
        size_t len = 0;
        for (size_t i = 0; i < bl_fitted_models_count(fm) && len < sizeof list; i++)
            len += (size_t)snprintf(list + len, sizeof list - len, "%s%s", i ? ", " : "", bl_fitted_models_name(fm, i));
        cli_usage_error(CMD, "option --model is required with --from (models in %s: %s)", o.from, list);
        goto done;
    }
    bl_prediction_request req = {o.model, o.participant, o.at, o.n_at, o.has_range, o.range[0], o.range[1]};
    bl_prediction pr;
    bl_status st = bl_prediction_compute(fm, &req, &pr, &warn, &err);
    cli_print_warnings(&warn);
    if (st) {
        code = cli_fail(&err);
        goto done;
    }
    if (o.json) {
        if (!from_json(&o, &pr)) {
            bl_error_set(&err, BL_ERR_NOMEM, "cannot build the JSON output");
            code = cli_fail(&err);
            goto done;
        }
    } else {
        from_table(&o, &pr);
    }
    if (fflush(stdout) != 0 || ferror(stdout)) {
        bl_error_set(&err, BL_ERR_IO, "writing output failed: %s", strerror(errno));
        code = cli_fail(&err);
        goto done;
    }
    code = CLI_EXIT_OK;
done:
    bl_warnings_clear(&warn);
    bl_fitted_models_destroy(fm);
    from_options_free(&o);
    return code;
}

/* The parameter options of the direct form and the slot of bl_wiener_params each one sets. */
static const struct {
    const char *opt;
    int index;
} popts[] = {{"--threshold", BL_THRESHOLD},
             {"--drift", BL_DRIFT},
             {"--nondecision", BL_NONDECISION},
             {"--start", BL_START},
             {"--drift-sd", BL_DRIFT_SD},
             {"--start-range", BL_START_RANGE},
             {"--nondecision-range", BL_NONDECISION_RANGE},
             {"--contamination", BL_CONTAMINATION}};
enum { NPOPT = sizeof popts / sizeof popts[0] };

/* The options of the direct form (parameter values given on the command line). */
typedef struct {
    bl_wiener_params par;
    int seen[NPOPT], json, have_range, help;
    double *rt;
    size_t nrt;
} direct_options;

/* One parameter option at argv[*i]: -1 on a usage error, 0 when argv[*i] is none of them, 1 when taken. */
static int parse_param_option(int argc, char **argv, int *i, direct_options *o)
{
    int missing = 0;
    for (int k = 0; k < NPOPT; k++) {
        const char *v = cli_option_value(argc, argv, i, popts[k].opt, &missing);
        if (missing) {
            cli_usage_error(CMD, "option %s needs a value", popts[k].opt);
            return -1;
        }
        if (!v) continue;
        if (o->seen[k]) {
            cli_usage_error(CMD, "option %s given twice", popts[k].opt);
            return -1;
        }
        o->seen[k] = 1;
        if (!cli_parse_double(CMD, popts[k].opt, v, &o->par.value[popts[k].index])) return -1;
        return 1;
    }
    return 0;
}

/* --rt or --contamination-range at argv[*i]: -1 on a usage error, 0 when neither, 1 when taken. */
static int parse_list_option(int argc, char **argv, int *i, direct_options *o)
{
    int missing = 0;
    const char *v = cli_option_value(argc, argv, i, "--rt", &missing);
    if (missing) {
        cli_usage_error(CMD, "option --rt needs a value");
        return -1;
    }
    if (v) {
        if (o->rt) {
            cli_usage_error(CMD, "option --rt given twice");
            return -1;
        }
        if (!parse_list("--rt", v, &o->rt, &o->nrt)) return -1;
        for (size_t k = 0; k < o->nrt; k++)
            if (o->rt[k] < 0) {
                cli_usage_error(CMD, "option --rt: '%g' is not a response time (must be >= 0 s)", o->rt[k]);
                return -1;
            }
        return 1;
    }
    v = cli_option_value(argc, argv, i, "--contamination-range", &missing);
    if (missing) {
        cli_usage_error(CMD, "option --contamination-range needs a value");
        return -1;
    }
    if (!v) return 0;
    double *r2 = NULL;
    size_t n2 = 0;
    if (!parse_list("--contamination-range", v, &r2, &n2)) return -1;
    if (n2 != 2) {
        cli_usage_error(CMD, "option --contamination-range: '%s' must be two times LO,HI", v);
        free(r2);
        return -1;
    }
    o->par.contamination_lo = r2[0];
    o->par.contamination_hi = r2[1];
    o->have_range = 1;
    free(r2);
    return 1;
}

/* The command line of the direct form into o; 0 on a usage error (reported), 1 otherwise (o->help set
 * when --help was asked for, and then the rest is not read). */
static int parse_direct(int argc, char **argv, direct_options *o)
{
    for (int i = 1; i < argc; i++) {
        const char *a = argv[i];
        if (!strcmp(a, "--help") || !strcmp(a, "-h")) {
            o->help = 1;
            return 1;
        }
        if (!strcmp(a, "--json")) {
            o->json = 1;
            continue;
        }
        if (!strcmp(a, "--quiet")) continue;
        int taken = parse_param_option(argc, argv, &i, o);
        if (taken == 0) taken = parse_list_option(argc, argv, &i, o);
        if (taken < 0) return 0;
        if (taken > 0) continue;
        cli_usage_error(CMD, "unknown option '%s'", a);
        return 0;
    }
    for (int k = 0; k < 3; k++)
        if (!o->seen[k]) {
            cli_usage_error(CMD, "option %s is required", popts[k].opt);
            return 0;
        }
    if (o->par.value[BL_CONTAMINATION] > 0 && !o->have_range) {
        cli_usage_error(CMD, "option --contamination %g needs --contamination-range LO,HI",
                        o->par.value[BL_CONTAMINATION]);
        return 0;
    }
    return 1;
}

/* Checks the parameters, computes the predictions and prints them; returns the exit code. */
static int predict_direct(const direct_options *o, prediction *pr)
{
    bl_error err = {0};
    if (bl_wiener_check(&o->par, &err)) return cli_fail(&err);
    for (int b = 0; b < 2; b++) {
        pr->dens[b] = calloc(o->nrt ? o->nrt : 1, sizeof(double));
        if (!pr->dens[b]) {
            bl_error_set(&err, BL_ERR_NOMEM, "out of memory for %zu response times", o->nrt);
            return cli_fail(&err);
        }
    }
    if (!compute(&o->par, o->rt, o->nrt, pr, &err)) return cli_fail(&err);
    if (o->json) {
        if (!print_json(pr, o->rt, o->nrt)) {
            bl_error_set(&err, BL_ERR_NOMEM, "cannot build the JSON output");
            return cli_fail(&err);
        }
    } else {
        print_table(&o->par, pr, o->rt, o->nrt);
    }
    if (fflush(stdout) != 0 || ferror(stdout)) {
        bl_error_set(&err, BL_ERR_IO, "writing output failed: %s", strerror(errno));
        return cli_fail(&err);
    }
    return CLI_EXIT_OK;
}

int cmd_predict(int argc, char **argv)
{
    for (int i = 1; i < argc; i++)
        if (!strcmp(argv[i], "--from") || !strncmp(argv[i], "--from=", 7)) return predict_from(argc, argv);
    direct_options o = {0};
    bl_wiener_params_default(&o.par);
    prediction pr = {0};
    int code = CLI_EXIT_USAGE;
    if (parse_direct(argc, argv, &o)) {
        if (o.help) {
            usage(stdout);
            code = CLI_EXIT_OK;
        } else {
            code = predict_direct(&o, &pr);
        }
    }
    free(o.rt);
    free(pr.dens[0]);
    free(pr.dens[1]);
    return code;
}
