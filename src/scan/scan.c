/* The scan job and its outputs (scan.h). */
#include "scan/scan.h"
#include "scan/scan_power.h"
#include "core/output.h"
#include "core/strutil.h"
#include "core/textbuf.h"
#include "report/svg.h"
#include "fit/fit_internal.h"

#include <gsl/gsl_cdf.h>

#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

void bl_scan_result_destroy(bl_scan_result *r)
{
    if (!r) return;
    bl_scan_spec_destroy(r->spec);
    bl_scan_stats_destroy(r->stats);
    for (size_t t = 0; t < r->n_tests; t++) free(r->test_level ? r->test_level[t] : NULL);
    free(r->test_level);
    free(r->test_param);
    free(r->refits);
    free(r);
}

typedef struct {
    const bl_scan_options *opt;
} perm_ctx;

static void perm_progress(void *user, size_t done, size_t total)
{
    const perm_ctx *c = user;
    c->opt->progress(c->opt->progress_user, "scan: permutations", done, total);
}

static void say(const bl_scan_options *o, const char *what, size_t done, size_t total)
{
    if (o->progress) o->progress(o->progress_user, what, done, total);
}

static bl_status copy_tests(bl_scan_result *r, const bl_scan_null *nm)
{
    r->n_tests = bl_scan_null_n_tests(nm);
    r->test_param = malloc(r->n_tests * sizeof *r->test_param);
    r->test_level = calloc(r->n_tests, sizeof *r->test_level);
    if (!r->test_param || !r->test_level) return BL_ERR_NOMEM;
    for (size_t t = 0; t < r->n_tests; t++) {
        r->test_param[t] = bl_scan_null_test_param(nm, t);
        if (!(r->test_level[t] = bl_strdup(bl_scan_null_test_level(nm, t)))) return BL_ERR_NOMEM;
    }
    return BL_OK;
}

static bl_status refit_strongest(const bl_study *study, const bl_model_spec *null_spec, const bl_trials *trials,
                                 const bl_scan_options *opt, bl_scan_result *r, const double *x, const size_t *rows,
                                 size_t n, bl_warnings *warn, bl_error *err);

bl_status bl_scan_run(const bl_study *study, const bl_trials *trials, const bl_scan_options *opt, bl_scan_result **out,
                      bl_warnings *warn, bl_error *err)
{
    *out = NULL;
    bl_scan_null *nm = NULL;
    double *x = NULL;
    bl_scan_result *r = calloc(1, sizeof *r);
    if (!r) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    bl_status st = bl_scan_spec_parse(study, &r->spec, err);
    if (st) goto fail;
    const bl_scan_spec *sp = r->spec;
    const bl_model_spec *spec = NULL;
    for (size_t m = 0; m < study->n_models; m++)
        if (!strcmp(study->models[m].name, sp->null_model)) spec = &study->models[m];
    r->mode = bl_study_participants_mode(study, trials->n_participants);
    if (r->mode == BL_PARTICIPANTS_HIERARCHICAL) {
        /* the score test is derived for one likelihood (or one per participant); docs/scan.md */
        r->mode = BL_PARTICIPANTS_POOLED;
        bl_warnings_add(warn,
                        "scan: the null model '%s' is fitted with participants pooled (the scan's score tests do "
                        "not integrate participants' effects out); family-wise p-values come from permutations within "
                        "participant x condition cells and stay valid, per-cell p-values assume the pooled model",
                        sp->null_model);
    }
    if ((st = bl_scan_power_check(study, sp, trials, err))) goto fail;
    double t0 = now();
    say(opt, "scan: fitting the null model", 0, 0);
    if ((st = bl_scan_null_create(study, spec, trials, r->mode, sp->params, sp->n_params, opt->threads, opt->seed, &nm,
                                  warn, err)))
        goto fail;
    if (copy_tests(r, nm)) goto nomem;
    r->null_log_likelihood = bl_scan_null_log_likelihood(nm);
    r->n_trials = bl_scan_null_n_trials(nm);
    r->n_participants = trials->n_participants;
    double t1 = now();
    r->seconds_null = t1 - t0;
    size_t n = r->n_trials, nc = sp->n_freqs * sp->n_windows;
    say(opt, "scan: multitaper power of every cell", 0, 0);
    if (!(x = malloc(nc * (n ? n : 1) * sizeof *x))) goto nomem;
    const size_t *rows = bl_scan_null_rows(nm);
    if ((st = bl_scan_power(study, sp, trials, rows, n, opt->threads, x, &r->fs, err))) goto fail;
    if ((st = bl_scan_standardize(study, trials, rows, n, sp, x, err))) goto fail;
    double t2 = now();
    r->seconds_power = t2 - t1;
    size_t perms = opt->permutations == SIZE_MAX ? sp->permutations : opt->permutations;
    perm_ctx pc = {opt};
    say(opt, "scan: permutations", 0, perms);
    if ((st = bl_scan_grid(nm, x, sp->n_freqs, sp->n_windows, perms, sp->correction, sp->cluster_threshold, opt->seed,
                           opt->threads, opt->progress ? perm_progress : NULL, &pc, &r->stats, err)))
        goto fail;
    if ((st = refit_strongest(study, spec, trials, opt, r, x, rows, n, warn, err))) goto fail;
    r->seconds_stats = now() - t2;
    if (perms > 0 && perms < 1000)
        bl_warnings_add(warn, "scan: %zu permutations give family-wise p-values no finer than %.2g; use 1000 or more",
                        perms, 1.0 / (double)(perms + 1));
    free(x);
    bl_scan_null_destroy(nm);
    *out = r;
    return BL_OK;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory for the scan");
fail:
    free(x);
    bl_scan_null_destroy(nm);
    bl_scan_result_destroy(r);
    return st;
}

/* ---- outputs ---- */

static void put_num(FILE *f, double v)
{
    if (isfinite(v)) fprintf(f, "%.10g", v);
    else fputs("NA", f);
}

static void put_text(FILE *f, const char *s)
{
    if (!strpbrk(s, ",\"\r\n")) {
        fputs(s, f);
        return;
    }
    fputc('"', f);
    for (; *s; s++) {
        if (*s == '"') fputc('"', f);
        fputc(*s, f);
    }
    fputc('"', f);
}

bl_status bl_scan_write_csv(const bl_scan_result *r, const char *path, bl_error *err)
{
    bl_outfile *of = NULL;
    bl_status st = bl_outfile_open(path, &of, err);
    if (st) return st;
    FILE *f = bl_outfile_stream(of);
    const bl_scan_spec *sp = r->spec;
    const bl_scan_stats *s = r->stats;
    size_t nc = sp->n_freqs * sp->n_windows;
    fputs("frequency,bandwidth,window_from,window_to,parameter,level,statistic,estimate,z,p,p_familywise,cluster\n", f);
    for (size_t t = 0; t < r->n_tests; t++)
        for (size_t c = 0; c < nc; c++) {
            size_t fi = c / sp->n_windows, wi = c % sp->n_windows, i = t * nc + c;
            double fr = sp->freq[fi];
            fprintf(f, "%.10g,%.10g,%.10g,%.10g,%s,", fr, bl_scan_bandwidth(sp, fr), sp->window_from[wi],
                    sp->window_from[wi] + sp->length, bl_param_name(r->test_param[t]));
            put_text(f, r->test_level[t]);
            fputc(',', f);
            put_num(f, s->statistic[i]);
            fputc(',', f);
            put_num(f, s->estimate[i]);
            fputc(',', f);
            put_num(f, s->z[i]);
            fputc(',', f);
            put_num(f, s->p[i]);
            fputc(',', f);
            put_num(f, s->p_familywise[i]);
            fputc(',', f);
            if (s->cluster[i]) fprintf(f, "%ld\n", s->cluster[i]);
            else fputs("NA\n", f);
        }
    return bl_outfile_commit(of, err);
}

/* Diverging colours for the signed z (ColorBrewer RdBu, 7 classes; Brewer 2003). */
static const char *const z_colors[7] = {"#2166ac", "#67a9cf", "#d1e5f0", "#f7f7f7", "#fddbc7", "#ef8a62", "#b2182b"};
static const double z_edges[6] = {-3.0, -2.0, -1.0, 1.0, 2.0, 3.0};

static int z_class(double z)
{
    int k = 0;
    while (k < 6 && z >= z_edges[k]) k++;
    return k;
}

/* Edges of cell k of n centres c[] along one axis: midpoints (geometric on a log axis), mirrored at the ends. */
static void cell_edges(const double *c, size_t n, size_t k, double half, int geometric, double *lo, double *hi)
{
    if (n == 1) {
        *lo = geometric ? c[0] / (1 + half) : c[0] - half;
        *hi = geometric ? c[0] * (1 + half) : c[0] + half;
        return;
    }
    double prev = k > 0 ? c[k - 1] : geometric ? c[0] * c[0] / c[1] : 2 * c[0] - c[1];
    double next = k + 1 < n ? c[k + 1] : geometric ? c[n - 1] * c[n - 1] / c[n - 2] : 2 * c[n - 1] - c[n - 2];
    *lo = geometric ? sqrt(prev * c[k]) : (prev + c[k]) / 2;
    *hi = geometric ? sqrt(c[k] * next) : (c[k] + next) / 2;
}

static bl_status heat_map(const bl_scan_result *r, size_t t, const char *path, bl_error *err)
{
    const bl_scan_spec *sp = r->spec;
    const bl_scan_stats *s = r->stats;
    size_t nf = sp->n_freqs, nw = sp->n_windows, nc = nf * nw;
    int geometric = nf > 1 && sp->freq[1] - sp->freq[0] < 0.999 * (sp->freq[nf - 1] - sp->freq[nf - 2]);
    char title[256];
    snprintf(title, sizeof title, "Score statistic of a slope on %s%s%s per frequency and window",
             bl_param_name(r->test_param[t]), r->test_level[t][0] ? " in " : "", r->test_level[t]);
    bl_svg *fig = bl_svg_create("scan", title, 1, 1, 640, 440);
    double *centre = malloc(nw * sizeof *centre);
    double *xs = malloc(6 * nc * sizeof *xs), *lo = malloc(6 * nc * sizeof *lo), *hi = malloc(6 * nc * sizeof *hi);
    if (!fig || !centre || !xs || !lo || !hi) {
        bl_svg_destroy(fig);
        free(centre);
        free(xs);
        free(lo);
        free(hi);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory drawing the scan");
    }
    for (size_t w = 0; w < nw; w++) centre[w] = sp->window_from[w] + sp->length / 2;
    bl_svg_panel *p = bl_svg_panel_at(fig, 0);
    bl_svg_axis_label(p, BL_SVG_X, "window centre (s from the alignment point)");
    bl_svg_axis_label(p, BL_SVG_Y, "frequency (Hz)");
    if (geometric) bl_svg_axis_log(p, BL_SVG_Y);
    double x_lo, x_hi, y_lo, y_hi, dummy;
    cell_edges(centre, nw, 0, sp->length / 2, 0, &x_lo, &dummy);
    cell_edges(centre, nw, nw - 1, sp->length / 2, 0, &dummy, &x_hi);
    cell_edges(sp->freq, nf, 0, 0.05, geometric, &y_lo, &dummy);
    cell_edges(sp->freq, nf, nf - 1, 0.05, geometric, &dummy, &y_hi);
    if (y_lo > 0 || !geometric) bl_svg_axis_range(p, BL_SVG_Y, y_lo, y_hi);
    bl_svg_axis_range(p, BL_SVG_X, x_lo, x_hi);
    static const char *const names[7] = {"z < -3", "-3 to -2", "-2 to -1", "-1 to 1", "1 to 2", "2 to 3", "z > 3"};
    for (int k = 0; k < 7; k++) {
        size_t m = 0;
        for (size_t c = 0; c < nc; c++) {
            double z = s->z[t * nc + c];
            if (!isfinite(z) || z_class(z) != k) continue;
            double x0, x1, y0, y1;
            cell_edges(centre, nw, c % nw, sp->length / 2, 0, &x0, &x1);
            cell_edges(sp->freq, nf, c / nw, 0.05, geometric, &y0, &y1);
            xs[m] = x0, lo[m] = y0, hi[m++] = y1;
            xs[m] = x1, lo[m] = y0, hi[m++] = y1;
            xs[m] = NAN, lo[m] = NAN, hi[m++] = NAN; /* one rectangle per run */
        }
        bl_svg_style st = {z_colors[k], 1.0, 0, 0, BL_SVG_MARK_SQUARE, 0};
        if (m) bl_svg_ribbon(p, xs, lo, hi, m, st);
        bl_svg_legend(fig, names[k], BL_SVG_KEY_BOX, st);
    }
    /* outline every cell with family-wise p <= 0.05 */
    size_t m = 0;
    for (size_t c = 0; c < nc; c++) {
        if (!(s->p_familywise[t * nc + c] <= 0.05)) continue;
        double x0, x1, y0, y1;
        cell_edges(centre, nw, c % nw, sp->length / 2, 0, &x0, &x1);
        cell_edges(sp->freq, nf, c / nw, 0.05, geometric, &y0, &y1);
        double px[6] = {x0, x1, x1, x0, x0, NAN}, py[6] = {y0, y0, y1, y1, y0, NAN};
        for (int i = 0; i < 6; i++) {
            xs[m] = px[i];
            lo[m++] = py[i];
        }
    }
    bl_svg_style edge = {"#000000", 1.0, 1.5, 0, BL_SVG_MARK_SQUARE, 0};
    if (m) bl_svg_line(p, xs, lo, m, edge);
    bl_svg_legend(fig, "family-wise p <= 0.05", BL_SVG_KEY_LINE, edge);
    char *svg = NULL;
    size_t svg_size = 0;
    bl_status st = bl_svg_render(fig, &svg, &svg_size, err);
    if (!st) st = bl_write_file_atomic(path, svg, svg_size, err);
    free(svg);
    bl_svg_destroy(fig);
    free(centre);
    free(xs);
    free(lo);
    free(hi);
    return st;
}

bl_status bl_scan_write_figures(const bl_scan_result *r, const char *dir, bl_error *err)
{
    for (size_t t = 0; t < r->n_tests; t++) {
        char name[300];
        snprintf(name, sizeof name, "scan_%s%s%s.svg", bl_param_name(r->test_param[t]), r->test_level[t][0] ? "_" : "",
                 r->test_level[t]);
        for (char *q = name; *q; q++)
            if (*q == '/' || *q == ':' || *q == ' ' || *q == '\\') *q = '-';
        char *path = NULL;
        bl_status st = bl_path_join(dir, name, &path, err);
        if (st) return st;
        st = heat_map(r, t, path, err);
        free(path);
        if (st) return st;
    }
    return BL_OK;
}

char *bl_scan_summary(const bl_scan_result *r)
{
    const bl_scan_spec *sp = r->spec;
    const bl_scan_stats *s = r->stats;
    size_t nc = sp->n_freqs * sp->n_windows, total = nc * r->n_tests;
    bl_textbuf b = {0};
    bl_textbuf_printf(&b,
                      "scan: %zu frequencies (%.4g to %.4g Hz) x %zu windows of %.4g s (%.4g to %.4g s) x %zu tests "
                      "on %zu trials; null model '%s' (log-likelihood %.2f)\n",
                      sp->n_freqs, sp->freq[0], sp->freq[sp->n_freqs - 1], sp->n_windows, sp->length, sp->from, sp->to,
                      r->n_tests, r->n_trials, sp->null_model, r->null_log_likelihood);
    if (s->correction == BL_SCAN_CORRECTION_CLUSTER)
        bl_textbuf_printf(&b,
                          "family-wise error: cluster mass over %zu permutations; cluster-forming threshold p < %.3g "
                          "(statistic > %.4g), %zu clusters\n",
                          s->permutations, s->cluster_threshold, s->cluster_statistic, s->n_clusters);
    else
        bl_textbuf_printf(&b, "family-wise error: maximum statistic over the grid, %zu permutations\n",
                          s->permutations);
    /* the five strongest cells */
    size_t best[5], nb = 0;
    for (size_t i = 0; i < total; i++) {
        if (!isfinite(s->statistic[i])) continue;
        size_t k;
        if (nb < 5) k = nb++;
        else if (s->statistic[i] > s->statistic[best[4]]) k = 4;
        else continue;
        while (k > 0 && s->statistic[i] > s->statistic[best[k - 1]]) {
            best[k] = best[k - 1];
            k--;
        }
        best[k] = i;
    }
    bl_textbuf_printf(&b, "strongest cells:\n  %-18s %-10s %-16s %9s %9s %10s %12s\n", "parameter", "frequency",
                      "window (s)", "statistic", "estimate", "p", "p_familywise");
    for (size_t k = 0; k < nb; k++) {
        size_t i = best[k], t = i / nc, c = i % nc;
        char par[64], win[64], pf[32];
        snprintf(par, sizeof par, "%s%s%s", bl_param_name(r->test_param[t]), r->test_level[t][0] ? ":" : "",
                 r->test_level[t]);
        snprintf(win, sizeof win, "%.3g to %.3g", sp->window_from[c % sp->n_windows],
                 sp->window_from[c % sp->n_windows] + sp->length);
        if (isfinite(s->p_familywise[i])) snprintf(pf, sizeof pf, "%.4f", s->p_familywise[i]);
        else snprintf(pf, sizeof pf, "NA");
        bl_textbuf_printf(&b, "  %-18s %6.3g Hz  %-16s %9.3f %9.4f %10.3g %12s\n", par, sp->freq[c / sp->n_windows],
                          win, s->statistic[i], s->estimate[i], s->p[i], pf);
    }
    if (r->n_refits)
        bl_textbuf_printf(
            &b,
            "refitted with the slope (likelihood-ratio test against the null model):\n  %-18s %-10s %-16s "
            "%9s %9s %4s %10s %9s %8s\n",
            "parameter", "frequency", "window (s)", "score", "LR", "df", "p", "estimate", "SE");
    for (size_t k = 0; k < r->n_refits; k++) {
        const bl_scan_refit *q = &r->refits[k];
        char par[64], win[64];
        snprintf(par, sizeof par, "%s%s%s", bl_param_name(r->test_param[q->test]), r->test_level[q->test][0] ? ":" : "",
                 r->test_level[q->test]);
        snprintf(win, sizeof win, "%.3g to %.3g", sp->window_from[q->cell % sp->n_windows],
                 sp->window_from[q->cell % sp->n_windows] + sp->length);
        bl_textbuf_printf(&b, "  %-18s %6.3g Hz  %-16s %9.3f %9.3f %4.0f %10.3g %9.4f %8.4f%s\n", par,
                          sp->freq[q->cell / sp->n_windows], win, s->statistic[q->test * nc + q->cell], q->lr, q->df,
                          q->p, q->estimate, q->se, q->converged ? "" : "  (not converged)");
    }
    bl_textbuf_printf(&b, "time: null model %.2f s, power %.2f s, statistics %.2f s\n", r->seconds_null,
                      r->seconds_power, r->seconds_stats);
    return bl_textbuf_take(&b);
}

/* ---- refits of the strongest cells ---- */

#define BL_SCAN_REFIT_COLUMN "scan cell"

/* Is scan trial row `row` in the level of test t? The level text is the test's `by` columns joined by ':'. */
static int in_level(const bl_scan_spec *sp, const bl_trials *t, int param, const char *level, size_t row)
{
    const bl_scan_param *sc = NULL;
    for (size_t i = 0; i < sp->n_params; i++)
        if (sp->params[i].param == param) sc = &sp->params[i];
    if (!sc || sc->n_by == 0) return 1;
    const char *p = level;
    for (size_t b = 0; b < sc->n_by; b++) {
        const char *v = t->table->cols[bl_table_find(t->table, sc->by[b])].text[row];
        if (!v) v = "NA";
        size_t l = strlen(v);
        if (strncmp(p, v, l) != 0 || (p[l] != ':' && p[l] != '\0')) return 0;
        p += l + (p[l] == ':');
    }
    return *p == '\0';
}

/* One refit: the null model plus a slope on the cell's power (zero outside the test's level), on a shadow
 * trial table that adds the cell as a column (the analysis's own table is not touched). */
static bl_status refit_cell(const bl_study *study, const bl_model_spec *null_spec, const bl_trials *trials,
                            const bl_scan_options *opt, bl_scan_result *r, const double *xc, const size_t *rows,
                            size_t n, bl_scan_refit *out, bl_warnings *warn, bl_error *err)
{
    int param = r->test_param[out->test];
    bl_table shadow = *trials->table;
    bl_trials st_trials = *trials;
    bl_column *cols = malloc((shadow.n_cols + 1) * sizeof *cols);
    double *num = malloc((shadow.n_rows ? shadow.n_rows : 1) * sizeof *num);
    char **text = calloc(shadow.n_rows ? shadow.n_rows : 1, sizeof *text);
    bl_slope_spec *slopes = malloc((null_spec->param[param].n_slopes + 1) * sizeof *slopes);
    bl_status st = BL_OK;
    bl_unit_set units = {0};
    if (!cols || !num || !text || !slopes) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory refitting a scan cell");
        goto done;
    }
    memcpy(cols, shadow.cols, shadow.n_cols * sizeof *cols);
    for (size_t i = 0; i < shadow.n_rows; i++) num[i] = NAN;
    for (size_t j = 0; j < n; j++)
        num[rows[j]] = in_level(r->spec, trials, param, r->test_level[out->test], rows[j]) ? xc[j] : 0.0;
    cols[shadow.n_cols] = (bl_column){BL_SCAN_REFIT_COLUMN, 1, num, text};
    shadow.cols = cols;
    shadow.n_cols++;
    st_trials.table = &shadow;
    bl_model_spec alt = *null_spec;
    for (size_t k = 0; k < null_spec->param[param].n_slopes; k++) slopes[k] = null_spec->param[param].slopes[k];
    slopes[null_spec->param[param].n_slopes] = (bl_slope_spec){BL_SCAN_REFIT_COLUMN, NULL, 0};
    alt.param[param].slopes = slopes;
    alt.param[param].n_slopes++;
    bl_fit_options fo;
    bl_fit_options_default(&fo);
    fo.threads = opt->threads;
    fo.seed = opt->seed;
    if ((st = bl_build_units(&alt, &st_trials, r->mode, &fo, &units, NULL, warn, err))) goto done;
    double ll = 0;
    out->converged = 1;
    out->estimate = out->se = NAN;
    for (size_t u = 0; u < units.n_units && !st; u++) {
        bl_fit_result res;
        st = bl_fit_core(units.models[u], units.liks[u], &fo, bl_fit_default_starts(&fo), NULL, 1, &res, NULL, err);
        if (st) break;
        ll += res.log_likelihood;
        out->converged &= res.converged;
        for (size_t k = 0; units.n_units == 1 && k < res.n_coef; k++)
            if ((int)res.coef[k].param == (int)param && !strcmp(res.coef[k].term, BL_SCAN_REFIT_COLUMN)) {
                out->estimate = res.coef[k].estimate;
                out->se = res.coef[k].se;
            }
        bl_fit_result_clear(&res);
    }
    out->df = (double)units.n_units;
    out->lr = 2 * (ll - r->null_log_likelihood);
    out->p = isfinite(out->lr) ? gsl_cdf_chisq_Q(fmax(out->lr, 0), out->df) : NAN;
    (void)study;
done:
    bl_unit_set_free(&units);
    free(cols);
    free(num);
    free(text);
    free(slopes);
    return st;
}

/* The `refit` strongest cells (by score statistic over every test), refitted in order of strength. */
static bl_status refit_strongest(const bl_study *study, const bl_model_spec *null_spec, const bl_trials *trials,
                                 const bl_scan_options *opt, bl_scan_result *r, const double *x, const size_t *rows,
                                 size_t n, bl_warnings *warn, bl_error *err)
{
    const bl_scan_spec *sp = r->spec;
    size_t nc = sp->n_freqs * sp->n_windows, total = nc * r->n_tests, want = sp->refit;
    if (!want) return BL_OK;
    if (want > total) want = total;
    if (!(r->refits = calloc(want, sizeof *r->refits))) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    const double *stat = r->stats->statistic;
    for (size_t k = 0; k < want; k++) {
        size_t best = SIZE_MAX;
        for (size_t i = 0; i < total; i++) {
            int taken = 0;
            for (size_t q = 0; q < k; q++) taken |= r->refits[q].test * nc + r->refits[q].cell == i;
            if (!taken && isfinite(stat[i]) && (best == SIZE_MAX || stat[i] > stat[best])) best = i;
        }
        if (best == SIZE_MAX) break;
        r->refits[k].test = best / nc;
        r->refits[k].cell = best % nc;
        say(opt, "scan: refitting the strongest cells", k, want);
        bl_status st = refit_cell(study, null_spec, trials, opt, r, x + r->refits[k].cell * n, rows, n, &r->refits[k],
                                  warn, err);
        if (st) return st;
        r->n_refits = k + 1;
    }
    return BL_OK;
}

bl_status bl_scan_write_refits(const bl_scan_result *r, const char *path, bl_error *err)
{
    bl_outfile *of = NULL;
    bl_status st = bl_outfile_open(path, &of, err);
    if (st) return st;
    FILE *f = bl_outfile_stream(of);
    const bl_scan_spec *sp = r->spec;
    size_t nc = sp->n_freqs * sp->n_windows;
    fputs("frequency,window_from,window_to,parameter,level,statistic,lr_statistic,df,p_lr,estimate,se,converged\n", f);
    for (size_t k = 0; k < r->n_refits; k++) {
        const bl_scan_refit *q = &r->refits[k];
        size_t fi = q->cell / sp->n_windows, wi = q->cell % sp->n_windows;
        fprintf(f, "%.10g,%.10g,%.10g,%s,", sp->freq[fi], sp->window_from[wi], sp->window_from[wi] + sp->length,
                bl_param_name(r->test_param[q->test]));
        put_text(f, r->test_level[q->test]);
        double v[6] = {r->stats->statistic[q->test * nc + q->cell], q->lr, q->df, q->p, q->estimate, q->se};
        for (int i = 0; i < 6; i++) {
            fputc(',', f);
            put_num(f, v[i]);
        }
        fprintf(f, ",%d\n", q->converged);
    }
    return bl_outfile_commit(of, err);
}
