/* report.html: a self-contained page of the run's results (report.h).
 *
 * Sources: W3C HTML Living Standard (inline <svg> in HTML documents, <details>); numbers are
 * printed with fixed formats so that the same results give the same bytes.
 */
#include "report/report.h"
#include "core/clock.h"

#include "core/output.h"
#include "report/svg.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Set when a section could not get the memory it needs: the page would silently lack it, so
 * bl_report_write fails instead (per thread: a report is written on one thread). */
static _Thread_local int report_text_lost;
#include <time.h>

static const char CAUTION[] =
    "Research use only; not a medical device. bandlink analyses research data and its results must not be "
    "used to diagnose, treat or monitor any person or animal.";

const char *bl_report_caution(void) { return CAUTION; }

static void esc(FILE *f, const char *s) { bl_svg_escape(f, s ? s : ""); }

/* A number with 4 significant digits, or an en dash when missing. */
static void g4(FILE *f, double v)
{
    if (!isfinite(v)) {
        fputs("&#8211;", f);
        return;
    }
    if (v == 0) v = 0;
    char b[64];
    snprintf(b, sizeof b, "%.4g", v);
    if (strcmp(b, "-0") == 0) strcpy(b, "0");
    fputs(b, f);
}

/* Fixed decimals (log-likelihood, AIC). */
static void fixed(FILE *f, double v, int dec)
{
    if (!isfinite(v)) {
        fputs("&#8211;", f);
        return;
    }
    char b[64];
    snprintf(b, sizeof b, "%.*f", dec, v);
    if (b[0] == '-' && strspn(b + 1, "0.") == strlen(b + 1)) memmove(b, b + 1, strlen(b));
    fputs(b, f);
}

static void pval(FILE *f, double p)
{
    if (!isfinite(p)) fputs("&#8211;", f);
    else if (p < 0.001) fputs("&lt; 0.001", f);
    else fprintf(f, "%.3f", p);
}

static const char CSS[] =
    "body{font-family:\"DejaVu Sans\",Helvetica,Arial,sans-serif;color:#222;max-width:1200px;margin:0 auto;"
    "padding:1em 1.5em;line-height:1.45}"
    "h1{font-size:1.6em;margin-bottom:.2em}h2{font-size:1.25em;border-bottom:1px solid #ccc;margin-top:1.8em}"
    "h3{font-size:1.05em}"
    ".caution{background:#fff4e0;border-left:5px solid #E69F00;padding:.6em 1em;margin:1em 0}"
    "table{border-collapse:collapse;margin:.6em 0;font-size:.92em}"
    "th,td{border:1px solid #ccc;padding:.25em .6em;text-align:right}td{white-space:nowrap}"
    ".scroll{overflow-x:auto}"
    "th{background:#f2f2f2}td.t,th.t{text-align:left}"
    "tr.best td{background:#e6f1f8;font-weight:bold}"
    /* long model names wrap (at hyphens too) so the comparison table fits a 1300 px window */
    "table.cmp td.t{white-space:normal;overflow-wrap:anywhere;min-width:9em;max-width:16em}"
    "table.cmp td,table.cmp th{padding:.25em .45em}"
    "table.cmp th{font-size:.95em}"
    "dl.kv{display:grid;grid-template-columns:max-content auto;gap:.15em 1.2em}dl.kv dt{font-weight:bold}"
    "dl.kv dd{margin:0}"
    "figure{margin:1.2em 0;overflow-x:auto}figure svg{max-width:100%;height:auto}"
    "figcaption{font-size:.92em;color:#444;max-width:900px}"
    "ul.warn li{color:#8a4b00}.muted{color:#666}";

static void kv(FILE *f, const char *k, const char *v)
{
    fputs("<dt>", f);
    esc(f, k);
    fputs("</dt><dd>", f);
    esc(f, v);
    fputs("</dd>\n", f);
}

static void job_section(FILE *f, const bl_report_job *job, const bl_study *study, const bl_fit_set *set)
{
    fputs("<h2 id=\"job\">Job</h2>\n<dl class=\"kv\">\n", f);
    if (job && job->study_path) kv(f, "study file", job->study_path);
    else if (study && study->path) kv(f, "study file", study->path);
    if (job && job->version) kv(f, "bandlink version", job->version);
    if (job && job->started) kv(f, "started (UTC)", job->started);
    if (job && job->finished) kv(f, "finished (UTC)", job->finished);
    char b[128];
    if (job && job->has_seed) {
        snprintf(b, sizeof b, "%lu", job->seed);
        kv(f, "seed", b);
    }
    if (job && job->threads > 0) {
        snprintf(b, sizeof b, "%d", job->threads);
        kv(f, "threads", b);
    }
    if (job) {
        snprintf(b, sizeof b, "%zu per slope", job->permutations);
        kv(f, "permutation refits", job->permutations ? b : "none");
    }
    if (set) {
        kv(f, "participants fitted",
           set->mode == BL_PARTICIPANTS_SEPARATE ? "separately (plus a group summary)"
           : set->mode == BL_PARTICIPANTS_HIERARCHICAL
               ? "hierarchical (participants' effects integrated out; estimates speak for the population)"
               : "pooled (one likelihood)");
        snprintf(b, sizeof b, "%zu", set->n_models);
        kv(f, "models", b);
    }
    if (job && job->n_stages && job->stage_names && job->stage_seconds) {
        fputs("<dt>wall time per step (before the report)</dt><dd>", f);
        for (size_t i = 0; i < job->n_stages; i++) {
            if (i) fputs(", ", f);
            esc(f, job->stage_names[i]);
            fprintf(f, " %.2f s", job->stage_seconds[i]);
        }
        fputs("</dd>\n", f);
    }
    fputs("</dl>\n", f);
}

static void data_section(FILE *f, const bl_study *study, const bl_trials *t, const bl_power_result *pr,
                         const bl_warnings *w)
{
    fputs("<h2 id=\"data\">Data</h2>\n<dl class=\"kv\">\n", f);
    char b[256];
    if (study && study->trials.file) kv(f, "trial table", study->trials.file);
    if (t) {
        snprintf(b, sizeof b, "%zu", t->n_participants);
        fputs("<dt>participants</dt><dd>", f);
        esc(f, b);
        fputs(" (", f);
        for (size_t i = 0; i < t->n_participants; i++) {
            if (i) fputs(", ", f);
            esc(f, t->participants[i]);
        }
        fputs(")</dd>\n", f);
        snprintf(b, sizeof b, "%zu in the table, %zu kept, %zu excluded", t->n, t->n_kept, t->n - t->n_kept);
        kv(f, "trials", b);
        if (study) {
            if (study->trials.stimulus) {
                fputs("<dt>choice coding</dt><dd>stimulus coding: upper boundary = response in ", f);
                esc(f, study->trials.response);
                fputs(", drift sign from ", f);
                esc(f, study->trials.stimulus);
                fputs("</dd>\n", f);
            } else {
                fputs("<dt>choice coding</dt><dd>accuracy coding: upper boundary when ", f);
                esc(f, study->trials.response);
                fputs(" is ", f);
                for (size_t i = 0; i < study->trials.n_upper; i++) {
                    if (i) fputs(" or ", f);
                    esc(f, study->trials.upper[i]);
                }
                fputs("</dd>\n", f);
            }
        }
    }
    if (pr) {
        snprintf(b, sizeof b, "%zu file%s, %.6g Hz", pr->n_recordings, pr->n_recordings == 1 ? "" : "s", pr->fs);
        kv(f, "recordings", b);
        snprintf(b, sizeof b,
                 "%zu samples per window, segments of %zu with %zu overlap (%zu per window), "
                 "FFT length %zu, resolution %.4g Hz",
                 pr->window_samples, pr->nperseg, pr->noverlap, pr->n_segments, pr->nfft, pr->df);
        kv(f, "Welch settings", b);
        fputs("<dt>bands</dt><dd>", f);
        for (size_t i = 0; i < pr->n_bands; i++) {
            const bl_power_band *bd = &pr->bands[i];
            if (i) fputs("; ", f);
            esc(f, bd->name);
            fprintf(f, " %.4g&#8211;%.4g Hz: %zu bins", bd->lo, bd->hi, bd->n_bins);
            if (bd->n_bins && bd->first_bin <= bd->last_bin && bd->last_bin < pr->n_freqs)
                fprintf(f, " (%.4g&#8211;%.4g Hz)", pr->freq[bd->first_bin], pr->freq[bd->last_bin]);
        }
        fputs("</dd>\n", f);
    }
    fputs("</dl>\n", f);
    if (t) {
        bl_exclusion_count *ex = NULL;
        size_t nex = 0;
        if (bl_trials_exclusion_counts(t, &ex, &nex, NULL)) report_text_lost = 1;
        if (nex > 0 && ex) {
            fputs("<h3>Excluded trials by reason</h3>\n<div class=\"scroll\"><table><tr><th "
                  "class=\"t\">reason</th><th>trials</th></tr>\n",
                  f);
            for (size_t i = 0; i < nex; i++) {
                fputs("<tr><td class=\"t\">", f);
                esc(f, ex[i].reason);
                fprintf(f, "</td><td>%zu</td></tr>\n", ex[i].count);
            }
            fputs("</table></div>\n", f);
        } else {
            fputs("<p>No trial was excluded.</p>\n", f);
        }
        free(ex);
        /* Trials per participant: kept / total. */
        size_t *tot = calloc(t->n_participants + 1, sizeof *tot), *kept = calloc(t->n_participants + 1, sizeof *kept);
        if (!tot || !kept) report_text_lost = 1;
        if (tot && kept && t->participant) {
            for (size_t i = 0; i < t->n; i++) {
                if (t->participant[i] >= t->n_participants) continue;
                tot[t->participant[i]]++;
                kept[t->participant[i]] += t->excluded[i] == NULL;
            }
            fputs("<details><summary>Trials per participant</summary>\n<div class=\"scroll\"><table><tr><th "
                  "class=\"t\">participant</th>"
                  "<th>trials</th><th>kept</th></tr>\n",
                  f);
            for (size_t p = 0; p < t->n_participants; p++) {
                fputs("<tr><td class=\"t\">", f);
                esc(f, t->participants[p]);
                fprintf(f, "</td><td>%zu</td><td>%zu</td></tr>\n", tot[p], kept[p]);
            }
            fputs("</table></div></details>\n", f);
        }
        free(tot);
        free(kept);
    }
    fputs("<h3>Warnings</h3>\n", f);
    if (w && w->count) {
        fputs("<ul class=\"warn\">\n", f);
        for (size_t i = 0; i < w->count; i++) {
            fputs("<li>", f);
            esc(f, w->items[i]);
            fputs("</li>\n", f);
        }
        fputs("</ul>\n", f);
    } else {
        fputs("<p>None.</p>\n", f);
    }
}

static void comparison_section(FILE *f, const bl_fit_set *set)
{
    fputs("<h2 id=\"comparison\">Model comparison</h2>\n", f);
    if (!set || !set->n_models || !set->comparison) {
        fputs("<p>No model was fitted.</p>\n", f);
        return;
    }
    int best = bl_figures_best_model(set);
    fputs("<div class=\"scroll\"><table class=\"cmp\"><tr><th "
          "class=\"t\">model</th><th>parameters</th><th>trials</th><th>log-likelihood</th>"
          "<th>AIC</th><th>BIC</th><th>&#916;AIC</th><th>&#916;BIC</th><th>AIC weight</th>"
          "<th class=\"t\">LRT against</th><th>statistic</th><th>df</th><th>p</th><th>converged</th></tr>\n",
          f);
    for (size_t m = 0; m < set->n_models; m++) {
        const bl_comparison_row *c = &set->comparison[m];
        fprintf(f, "<tr%s><td class=\"t\">", (int)m == best ? " class=\"best\"" : "");
        esc(f, c->name);
        fprintf(f, "</td><td>%zu</td><td>%zu</td><td>", c->parameters, c->trials);
        fixed(f, c->log_likelihood, 2);
        fputs("</td><td>", f);
        fixed(f, c->aic, 2);
        fputs("</td><td>", f);
        fixed(f, c->bic, 2);
        fputs("</td><td>", f);
        fixed(f, c->delta_aic, 2);
        fputs("</td><td>", f);
        fixed(f, c->delta_bic, 2);
        fputs("</td><td>", f);
        fixed(f, c->aic_weight, 3);
        fputs("</td><td class=\"t\">", f);
        if (c->lrt_against) {
            esc(f, c->lrt_against);
            if (c->lrt_nested == 0) fputs(" (not nested)", f);
        } else {
            fputs("&#8211;", f);
        }
        fputs("</td><td>", f);
        fixed(f, c->lrt_statistic, 2);
        fputs("</td><td>", f);
        g4(f, c->lrt_df);
        fputs("</td><td>", f);
        pval(f, c->lrt_p);
        fprintf(f, "</td><td>%s</td></tr>\n", set->models[m].converged ? "yes" : "<strong>no</strong>");
    }
    fputs("</table></div>\n<p class=\"muted\">Highlighted: lowest AIC. &#916; = difference from the smallest value. "
          "LRT: likelihood-ratio test against the model it extends (chi-squared, df = difference in "
          "parameters).</p>\n",
          f);
}

static void coef_rows(FILE *f, const bl_coefficient *c, size_t n)
{
    int profiles = 0; /* a column of profile-likelihood intervals when any coefficient has one */
    for (size_t j = 0; j < n; j++) profiles |= c[j].profiled;
    fputs("<div class=\"scroll\"><table><tr><th class=\"t\">parameter</th><th class=\"t\">term</th><th "
          "class=\"t\">level</th>"
          "<th>estimate</th><th>SE</th><th>95% CI</th><th>z</th><th>p</th>",
          f);
    fputs(profiles ? "<th>95% profile CI</th></tr>\n" : "</tr>\n", f);
    for (size_t j = 0; j < n; j++) {
        fputs("<tr><td class=\"t\">", f);
        esc(f, c[j].parameter);
        fputs("</td><td class=\"t\">", f);
        esc(f, c[j].term);
        fputs("</td><td class=\"t\">", f);
        esc(f, c[j].level && *c[j].level ? c[j].level : "");
        fputs("</td><td>", f);
        g4(f, c[j].estimate);
        fputs("</td><td>", f);
        g4(f, c[j].se);
        fputs("</td><td>", f);
        g4(f, c[j].ci_low);
        fputs(" to ", f);
        g4(f, c[j].ci_high);
        fputs("</td><td>", f);
        fixed(f, c[j].z, 2);
        fputs("</td><td>", f);
        pval(f, c[j].p);
        if (profiles) {
            fputs("</td><td>", f);
            if (c[j].profiled) {
                g4(f, c[j].profile_low);
                fputs(" to ", f);
                g4(f, c[j].profile_high);
            }
        }
        fputs("</td></tr>\n", f);
    }
    fputs("</table></div>\n", f);
    if (profiles)
        fputs("<p class=\"muted\">95% profile CI: the values whose profile likelihood is within &#967;&#178;&#8321;(0.95)/2 "
              "of the maximum (nondecision and the variability parameters, whose Wald intervals are poor near the "
              "fastest RT or the edge of the range).</p>\n",
              f);
}

/* Hierarchical: the participant spread of each varying term, and the participants' own estimates. */
static void spread_rows(FILE *f, const bl_model_result *mr)
{
    fputs(
        "<h3>Participant spread</h3>\n<p class=\"muted\">SD of the participants' values of each term that varies "
        "(link scale), with its 95% profile-likelihood interval and the test of no spread (&#189;&#967;&#178;&#8320; + "
        "&#189;&#967;&#178;&#8321; reference). Population coefficients above speak for the population the participants "
        "were drawn from.</p>\n<div class=\"scroll\"><table><tr><th class=\"t\">parameter</th><th class=\"t\">term</th>"
        "<th>SD</th><th>95% CI</th><th>2&#916;LL</th><th>p</th></tr>\n",
        f);
    for (size_t k = 0; k < mr->n_variance; k++) {
        const bl_variance_component *v = &mr->variance[k];
        fputs("<tr><td class=\"t\">", f);
        esc(f, v->parameter);
        fputs("</td><td class=\"t\">", f);
        esc(f, v->term);
        fputs("</td><td>", f);
        g4(f, v->sd);
        fputs("</td><td>", f);
        g4(f, v->ci_low);
        fputs(" to ", f);
        g4(f, v->ci_high);
        fputs("</td><td>", f);
        g4(f, v->lrt_statistic);
        fputs("</td><td>", f);
        pval(f, v->lrt_p);
        fputs("</td></tr>\n", f);
    }
    fputs("</table></div>\n", f);
    for (size_t q = 0; q < mr->n_participants; q++) {
        const bl_fit_result *pf = &mr->participants[q];
        fputs("<h3>Participant ", f);
        esc(f, pf->participant);
        fprintf(f,
                " (empirical Bayes)</h3>\n<p class=\"muted\">log-likelihood of their %zu trials at these values %.2f; "
                "SEs are conditional on the population estimates</p>\n",
                pf->trials, pf->log_likelihood);
        coef_rows(f, pf->coef, pf->n_coef);
    }
}

static void coefficient_section(FILE *f, const bl_study *study, const bl_fit_set *set)
{
    fputs("<h2 id=\"coefficients\">Coefficients</h2>\n", f);
    if (!set || !set->n_models) {
        fputs("<p>No model was fitted.</p>\n", f);
        return;
    }
    int best = bl_figures_best_model(set);
    fputs("<p class=\"muted\">Estimates are on the scale of each parameter's link (log link: log of the "
          "parameter). Intercepts per condition level; slopes per unit of their regressor. Wald standard "
          "errors from the observed information.</p>\n",
          f);
    for (size_t m = 0; m < set->n_models; m++) {
        const bl_model_result *mr = &set->models[m];
        int open = (int)m == best;
        fprintf(f, "<details%s><summary><strong>", open ? " open" : "");
        esc(f, mr->name);
        fputs("</strong>", f);
        if (open) fputs(" (lowest AIC)", f);
        if (mr->extends) {
            fputs(", extends ", f);
            esc(f, mr->extends);
        }
        fputs("</summary>\n", f);
        if (mr->mode == BL_PARTICIPANTS_SEPARATE && mr->n_group) {
            fputs("<h3>Group summary (DerSimonian&#8211;Laird random effects)</h3>\n<div class=\"scroll\"><table><tr>"
                  "<th class=\"t\">parameter</th><th class=\"t\">term</th><th class=\"t\">level</th><th>n</th>"
                  "<th>estimate</th><th>SE</th><th>95% CI</th><th>p</th><th>&#964;&#178;</th>"
                  "<th>mean of participants</th><th>SD</th><th>t-test p</th></tr>\n",
                  f);
            for (size_t j = 0; j < mr->n_group; j++) {
                const bl_group_coefficient *c = &mr->group[j];
                fputs("<tr><td class=\"t\">", f);
                esc(f, c->parameter);
                fputs("</td><td class=\"t\">", f);
                esc(f, c->term);
                fputs("</td><td class=\"t\">", f);
                esc(f, c->level);
                fprintf(f, "</td><td>%zu</td><td>", c->n);
                g4(f, c->re_estimate);
                fputs("</td><td>", f);
                g4(f, c->re_se);
                fputs("</td><td>", f);
                g4(f, c->re_ci_low);
                fputs(" to ", f);
                g4(f, c->re_ci_high);
                fputs("</td><td>", f);
                pval(f, c->re_p);
                fputs("</td><td>", f);
                g4(f, c->tau2);
                fputs("</td><td>", f);
                g4(f, c->mean);
                fputs("</td><td>", f);
                g4(f, c->sd);
                fputs("</td><td>", f);
                pval(f, c->p_t);
                fputs("</td></tr>\n", f);
            }
            fputs("</table></div>\n", f);
            for (size_t q = 0; q < mr->n_participants; q++) {
                const bl_fit_result *pf = &mr->participants[q];
                fputs("<h3>Participant ", f);
                esc(f, pf->participant);
                fprintf(f, "</h3>\n<p class=\"muted\">log-likelihood %.2f, %zu trials%s</p>\n", pf->log_likelihood,
                        pf->trials, pf->converged ? "" : ", <strong>not converged</strong>");
                coef_rows(f, pf->coef, pf->n_coef);
            }
        } else {
            coef_rows(f, mr->fit.coef, mr->fit.n_coef);
            if (mr->mode == BL_PARTICIPANTS_HIERARCHICAL) spread_rows(f, mr);
        }
        if (mr->n_permutation) {
            fputs("<h3>Permutation tests</h3>\n<div class=\"scroll\"><table><tr><th class=\"t\">parameter</th><th "
                  "class=\"t\">regressor</th>"
                  "<th>statistic</th><th>refits</th><th>p</th></tr>\n",
                  f);
            for (size_t j = 0; j < mr->n_permutation; j++) {
                const bl_permutation_test *pt = &mr->permutation[j];
                fputs("<tr><td class=\"t\">", f);
                esc(f, pt->parameter);
                fputs("</td><td class=\"t\">", f);
                esc(f, pt->regressor);
                fputs("</td><td>", f);
                fixed(f, pt->statistic, 2);
                fprintf(f, "</td><td>%zu</td><td>", pt->permutations);
                g4(f, pt->p);
                fputs("</td></tr>\n", f);
            }
            fputs("</table></div>\n", f);
        }
        fputs("</details>\n", f);
    }
    (void)study;
}

static void goodness_section(FILE *f, const bl_fit_set *set, const bl_goodness *g)
{
    if (!set || !g) return;
    /* with stimulus coding the rows are correct and error responses, so the share is accuracy */
    const char *share = g->accuracy ? "accuracy" : "shares";
    fprintf(f,
            "<h2 id=\"goodness\">Goodness of fit</h2>\n<p>Distance between observed and predicted RT quantiles "
            "(0.1&#8211;0.9) and %s, averaged over groups weighted by their responses (quantiles) or "
            "trials (%s).%s All numbers per group are in <code>fit_quantiles.csv</code>.</p>\n"
            "<div class=\"scroll\"><table><tr><th class=\"t\">model</th><th>quantiles, condition cells (ms)</th>"
            "<th>quantiles, regressor bins (ms)</th><th>%s, condition cells (%% points)</th>"
            "<th>%s, regressor bins (%% points)</th></tr>\n",
            g->accuracy ? "accuracy (share of correct responses)" : "choice shares", share,
            g->accuracy ? " The study codes responses by stimulus, so quantiles are of correct and of error responses."
                        : "",
            share, share);
    for (size_t m = 0; m < set->n_models; m++) {
        double qs[2] = {0, 0}, qw[2] = {0, 0}, ss[2] = {0, 0}, sw[2] = {0, 0};
        for (size_t r = 0; r < g->n_rows; r++) {
            const bl_goodness_row *row = &g->rows[r];
            if (row->model != m) continue;
            int kind = g->groups[row->group].regressor != NULL;
            for (int k = 0; k < BL_GOODNESS_NQ; k++)
                if (row->responses && isfinite(row->observed_q[k]) && isfinite(row->predicted_q[k])) {
                    qs[kind] += (double)row->responses * fabs(row->observed_q[k] - row->predicted_q[k]);
                    qw[kind] += (double)row->responses;
                }
            if (row->upper && isfinite(row->observed_share) && isfinite(row->predicted_share)) {
                ss[kind] += (double)row->trials * fabs(row->observed_share - row->predicted_share);
                sw[kind] += (double)row->trials;
            }
        }
        fputs("<tr><td class=\"t\">", f);
        esc(f, set->models[m].name);
        fputs("</td>", f);
        for (int k = 0; k < 2; k++) {
            fputs("<td>", f);
            fixed(f, qw[k] > 0 ? 1000 * qs[k] / qw[k] : NAN, 1);
            fputs("</td>", f);
        }
        for (int k = 0; k < 2; k++) {
            fputs("<td>", f);
            fixed(f, sw[k] > 0 ? 100 * ss[k] / sw[k] : NAN, 2);
            fputs("</td>", f);
        }
        fputs("</tr>\n", f);
    }
    fputs("</table></div>\n", f);
}

static void figure_section(FILE *f, const bl_figure_set *figs)
{
    fputs("<h2 id=\"figures\">Figures</h2>\n", f);
    if (!figs || !figs->n) {
        fputs("<p>No figures.</p>\n", f);
        return;
    }
    for (size_t i = 0; i < figs->n; i++) {
        const bl_figure *fg = &figs->items[i];
        fputs("<figure>\n", f);
        fwrite(fg->svg, 1, fg->size, f);
        fputs("<figcaption><strong>", f);
        esc(f, fg->title);
        fputs(".</strong> ", f);
        esc(f, fg->caption);
        fputs(" <a href=\"figures/", f);
        esc(f, fg->file);
        fputs("\">figures/", f);
        esc(f, fg->file);
        fputs("</a></figcaption>\n</figure>\n", f);
    }
}

void bl_report_page_begin(FILE *f, const char *title, const char *subject)
{
    fputs("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
          "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
          "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; style-src 'unsafe-inline'; "
          "img-src data:\">\n<title>",
          f);
    esc(f, title);
    if (subject) {
        fputs(": ", f);
        esc(f, subject);
    }
    fprintf(f, "</title>\n<style>%s</style>\n</head>\n<body>\n<h1>", CSS);
    esc(f, title);
    fputs("</h1>\n<p class=\"caution\" id=\"caution\"><strong>", f);
    esc(f, CAUTION);
    fputs("</strong></p>\n", f);
}

void bl_report_page_end(FILE *f, const char *version, const char *files)
{
    fputs("<hr>\n<p class=\"muted\">Written by bandlink", f);
    if (version) {
        fputc(' ', f);
        esc(f, version);
    }
    fputs(". Files beside this page: ", f);
    esc(f, files);
    fputs(". ", f);
    esc(f, CAUTION);
    fputs("</p>\n</body>\n</html>\n", f);
}

bl_status bl_report_write(const char *path, const bl_report_job *job, const bl_study *study, const bl_trials *trials,
                          const bl_power_result *power, const bl_fit_set *set, const bl_goodness *g,
                          const bl_figure_set *figs, const bl_warnings *warnings, bl_error *err)
{
    if (warnings && warnings->lost)
        return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory: %zu warnings could not be recorded", path,
                            warnings->lost);
    bl_outfile *o;
    bl_status st = bl_outfile_open(path, &o, err);
    if (st != BL_OK) return st;
    FILE *f = bl_outfile_stream(o);
    report_text_lost = 0;
    const char *sp = job && job->study_path ? job->study_path : study ? study->path : NULL;
    bl_report_page_begin(f, "bandlink report", sp);
    fputs("<nav><a href=\"#job\">Job</a> &#183; <a href=\"#data\">Data</a> &#183; "
          "<a href=\"#comparison\">Model comparison</a> &#183; <a href=\"#coefficients\">Coefficients</a> &#183; "
          "<a href=\"#goodness\">Goodness of fit</a> &#183; <a href=\"#figures\">Figures</a></nav>\n",
          f);
    job_section(f, job, study, set);
    data_section(f, study, trials, power, warnings);
    comparison_section(f, set);
    coefficient_section(f, study, set);
    goodness_section(f, set, g);
    figure_section(f, figs);
    bl_report_page_end(f, job ? job->version : NULL,
                       "power.csv, fits.json, comparison.csv, trials.csv, fit_quantiles.csv, figures/");
    if (report_text_lost) {
        bl_outfile_abort(o);
        return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory writing the report", path);
    }
    return bl_outfile_commit(o, err);
}

bl_status bl_report_outputs_write(const char *dir, const bl_report_job *job, const bl_study *study,
                                  const bl_trials *trials, const bl_power_result *power, const bl_fit_set *set,
                                  const bl_warnings *warnings, int threads, double seconds[3], bl_error *err)
{
    bl_goodness *g = NULL;
    bl_figure_set *figs = NULL;
    char *path = NULL;
    bl_status st;
    double t = bl_clock_seconds();
    if (seconds) seconds[0] = seconds[1] = seconds[2] = 0;
    if ((st = bl_goodness_compute(study, trials, set, threads, &g, err))) goto done;
    if (bl_path_join(dir, "fit_quantiles.csv", &path, NULL)) goto nomem;
    if ((st = bl_goodness_write_csv(g, path, err))) goto done;
    free(path);
    path = NULL;
    if (seconds) seconds[0] = bl_clock_seconds() - t;
    t = bl_clock_seconds();
    if ((st = bl_figures_make(study, trials, power, set, g, &figs, err))) goto done;
    if (bl_path_join(dir, "figures", &path, NULL)) goto nomem;
    if ((st = bl_figures_write(figs, path, err))) goto done;
    free(path);
    path = NULL;
    if (seconds) seconds[1] = bl_clock_seconds() - t;
    t = bl_clock_seconds();
    if (bl_path_join(dir, "report.html", &path, NULL)) goto nomem;
    if ((st = bl_report_write(path, job, study, trials, power, set, g, figs, warnings, err))) goto done;
    if (seconds) seconds[2] = bl_clock_seconds() - t;
    goto done;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory writing the report outputs");
done:
    free(path);
    bl_figure_set_destroy(figs);
    bl_goodness_destroy(g);
    return st;
}
