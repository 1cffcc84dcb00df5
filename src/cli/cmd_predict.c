/* bandlink predict: choice probabilities, mean RTs, RT quantiles and densities of the Wiener diffusion
 * model for given parameter values (noise s = 1). Output: a small table, or one JSON object (--json)
 * with the keys listed in docs/cli.md. */
#include "bandlink/wiener.h"
#include "cli_common.h"
#include "commands.h"

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
            "                        [--contamination P --contamination-range LO,HI] [--rt R1,R2,..] [--json]\n\n"
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
            "  --json                  print one JSON object instead of a table\n");
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
            cli_usage_error(CMD, "option %s: '%.*s' in '%s' is not a number", opt, (int)(len < 64 ? len : 64), s, value);
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
    double p[2];        /* [lower, upper] */
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

int cmd_predict(int argc, char **argv)
{
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
    bl_wiener_params par;
    bl_wiener_params_default(&par);
    int seen[NPOPT] = {0}, json = 0, have_range = 0;
    double *rt = NULL;
    size_t nrt = 0;
    int code = CLI_EXIT_USAGE;
    prediction pr = {0};

    for (int i = 1; i < argc; i++) {
        const char *a = argv[i];
        if (!strcmp(a, "--help") || !strcmp(a, "-h")) {
            usage(stdout);
            code = CLI_EXIT_OK;
            goto done;
        }
        if (!strcmp(a, "--json")) {
            json = 1;
            continue;
        }
        if (!strcmp(a, "--quiet")) continue;
        int missing = 0, matched = 0;
        for (int k = 0; k < NPOPT && !matched; k++) {
            const char *v = cli_option_value(argc, argv, &i, popts[k].opt, &missing);
            if (missing) {
                cli_usage_error(CMD, "option %s needs a value", popts[k].opt);
                goto done;
            }
            if (!v) continue;
            matched = 1;
            if (seen[k]) {
                cli_usage_error(CMD, "option %s given twice", popts[k].opt);
                goto done;
            }
            seen[k] = 1;
            if (!cli_parse_double(CMD, popts[k].opt, v, &par.value[popts[k].index])) goto done;
        }
        if (matched) continue;
        const char *v = cli_option_value(argc, argv, &i, "--rt", &missing);
        if (missing) {
            cli_usage_error(CMD, "option --rt needs a value");
            goto done;
        }
        if (v) {
            if (rt) {
                cli_usage_error(CMD, "option --rt given twice");
                goto done;
            }
            if (!parse_list("--rt", v, &rt, &nrt)) goto done;
            for (size_t k = 0; k < nrt; k++)
                if (rt[k] < 0) {
                    cli_usage_error(CMD, "option --rt: '%g' is not a response time (must be >= 0 s)", rt[k]);
                    goto done;
                }
            continue;
        }
        v = cli_option_value(argc, argv, &i, "--contamination-range", &missing);
        if (missing) {
            cli_usage_error(CMD, "option --contamination-range needs a value");
            goto done;
        }
        if (v) {
            double *r2 = NULL;
            size_t n2 = 0;
            if (!parse_list("--contamination-range", v, &r2, &n2)) goto done;
            if (n2 != 2) {
                cli_usage_error(CMD, "option --contamination-range: '%s' must be two times LO,HI", v);
                free(r2);
                goto done;
            }
            par.contamination_lo = r2[0];
            par.contamination_hi = r2[1];
            have_range = 1;
            free(r2);
            continue;
        }
        cli_usage_error(CMD, "unknown option '%s'", a);
        goto done;
    }
    for (int k = 0; k < 3; k++)
        if (!seen[k]) {
            cli_usage_error(CMD, "option %s is required", popts[k].opt);
            goto done;
        }
    if (par.value[BL_CONTAMINATION] > 0 && !have_range) {
        cli_usage_error(CMD, "option --contamination %g needs --contamination-range LO,HI", par.value[BL_CONTAMINATION]);
        goto done;
    }
    bl_error err = {0};
    if (bl_wiener_check(&par, &err)) {
        code = cli_fail(&err);
        goto done;
    }
    for (int b = 0; b < 2; b++) {
        pr.dens[b] = calloc(nrt ? nrt : 1, sizeof(double));
        if (!pr.dens[b]) {
            bl_error_set(&err, BL_ERR_NOMEM, "out of memory for %zu response times", nrt);
            code = cli_fail(&err);
            goto done;
        }
    }
    if (!compute(&par, rt, nrt, &pr, &err)) {
        code = cli_fail(&err);
        goto done;
    }
    if (json) {
        if (!print_json(&pr, rt, nrt)) {
            bl_error_set(&err, BL_ERR_NOMEM, "cannot build the JSON output");
            code = cli_fail(&err);
            goto done;
        }
    } else {
        print_table(&par, &pr, rt, nrt);
    }
    if (fflush(stdout) != 0 || ferror(stdout)) {
        bl_error_set(&err, BL_ERR_IO, "writing output failed: %s", strerror(errno));
        code = cli_fail(&err);
        goto done;
    }
    code = CLI_EXIT_OK;
done:
    free(rt);
    free(pr.dens[0]);
    free(pr.dens[1]);
    return code;
}
