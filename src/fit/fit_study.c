/* The fits of a study: every selected model, pooled or one fit per participant, in the order this
 * file owns: designs (checked before anything is fitted), the fits, per-model totals and
 * predictions, group summaries and permutation tests (compare.c), nesting, and the comparison.
 *
 * Layering: this file calls fit.c (one design fitted) and compare.c (summaries of fitted models);
 * compare.c calls fit.c for its refits; fit.c calls neither, so the three have no cycle.
 */
#include "fit/fit_internal.h"
#include "fit/hier.h"
#include "design/model_internal.h"

#include "fit/fit.h"
#include "fit/screen.h"
#include "core/strutil.h"
#include "core/gsl_guard.h"

#include <gsl/gsl_cdf.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#ifdef _OPENMP
#include <omp.h>
#endif

/* Everything one bl_fit_study call builds on the way to its bl_fit_set. */
typedef struct {
    const bl_study *study;
    const bl_trials *trials;
    bl_fit_options opt;
    size_t *sel; /* study model index of each selected model */
    size_t n_sel;
    bl_unit_set *units; /* per selected model: its compiled designs, workspaces, estimates */
    bl_hier **hier;     /* hierarchical mode, per selected model: participants' effects and workspaces */
    double **part_coef; /* hierarchical mode, per selected model: each participant's coefficients */
    char ***unit_names; /* per selected model: participant label of each unit (separate mode) */
    bl_fit_set *set;
} study_fit;

/* Predictions of the used trials (those listed in subset when given: one participant's, with their
 * own coefficients) from coef. */
static bl_status fill_predictions(bl_model_result *r, const bl_model *m, const double *coef, bl_likelihood *lik,
                                  const size_t *subset, size_t n_subset, bl_error *err)
{
    double *tll = malloc((m->n ? m->n : 1) * sizeof *tll);
    if (!tll)
        return bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory for the trial-wise predictions", m->name);
    bl_likelihood_trials(lik, coef, tll);
    size_t n_k = subset ? n_subset : m->n;
    for (size_t kk = 0; kk < n_k; kk++) {
        size_t k = subset ? subset[kk] : kk;
        size_t row = m->row[k];
        bl_wiener_params p;
        bl_model_predict(m, coef, k, &p);
        r->used[row] = 1;
        r->predicted[row] = p;
        double pu = NAN, mu = NAN, ml = NAN;
        if (bl_wiener_p_upper(&p, &pu, NULL) != BL_OK) pu = NAN;
        double mean = NAN;
        if (isfinite(pu)) {
            int ok_u = pu > 1e-12 ? bl_wiener_mean_rt(&p, 1, &mu, NULL) == BL_OK : 1;
            int ok_l = pu < 1 - 1e-12 ? bl_wiener_mean_rt(&p, 0, &ml, NULL) == BL_OK : 1;
            if (ok_u && ok_l) mean = (pu > 1e-12 ? pu * mu : 0) + (pu < 1 - 1e-12 ? (1 - pu) * ml : 0);
        }
        r->p_upper[row] = pu;
        r->mean_rt[row] = mean;
        r->trial_log_likelihood[row] = tll[k];
    }
    free(tll);
    return BL_OK;
}

static void model_result_free(bl_model_result *r)
{
    free(r->name);
    free(r->extends);
    bl_fit_result_clear(&r->fit);
    for (size_t i = 0; i < r->n_participants; i++) bl_fit_result_clear(&r->participants[i]);
    free(r->participants);
    for (size_t i = 0; i < r->n_variance; i++) free(r->variance[i].term);
    free(r->variance);
    free(r->correlation);
    free(r->separate_estimate);
    for (size_t i = 0; i < r->n_group; i++) {
        free(r->group[i].term);
        free(r->group[i].level);
    }
    free(r->group);
    for (size_t i = 0; i < r->n_permutation; i++) {
        free(r->permutation[i].regressor);
        free(r->permutation[i].level);
    }
    free(r->permutation);
    free(r->used);
    free(r->predicted);
    free(r->p_upper);
    free(r->mean_rt);
    free(r->trial_log_likelihood);
}

void bl_fit_set_destroy(bl_fit_set *set)
{
    if (!set) return;
    for (size_t i = 0; i < set->n_models; i++) model_result_free(&set->models[i]);
    free(set->models);
    if (set->comparison)
        for (size_t i = 0; i < set->n_models; i++) {
            free(set->comparison[i].name);
            free(set->comparison[i].lrt_against);
        }
    free(set->comparison);
    free(set);
}

/* Every name given with options->models must be a model of the study. */
static bl_status check_model_names(const bl_study *study, const bl_fit_options *opt, bl_error *err)
{
    for (size_t i = 0; i < opt->n_models; i++) {
        size_t j;
        for (j = 0; j < study->n_models; j++)
            if (!strcmp(study->models[j].name, opt->models[i])) break;
        if (j < study->n_models) continue;
        char names[512] = "";
        for (size_t q = 0; q < study->n_models; q++) {
            size_t len = strlen(names);
            snprintf(names + len, sizeof names - len, "%s'%s'", q ? ", " : "", study->models[q].name);
        }
        return bl_error_set(err, BL_ERR_USAGE, "--model: the study has no model '%s' (it has %s)", opt->models[i],
                            names);
    }
    return BL_OK;
}

static void study_fit_free(study_fit *sf)
{
    for (size_t q = 0; q < sf->n_sel; q++) {
        if (sf->units) bl_unit_set_free(&sf->units[q]);
        if (sf->unit_names) free(sf->unit_names[q]);
        if (sf->hier) bl_hier_destroy(sf->hier[q]);
        if (sf->part_coef) free(sf->part_coef[q]);
    }
    free(sf->hier);
    free(sf->part_coef);
    sf->hier = NULL;
    sf->part_coef = NULL;
    free(sf->units);
    free(sf->unit_names);
    free(sf->sel);
    sf->units = NULL;
    sf->unit_names = NULL;
    sf->sel = NULL;
}

typedef struct {
    double rt;
    size_t participant;
} rt_entry;

static int rt_entry_cmp(const void *a, const void *b)
{
    double x = ((const rt_entry *)a)->rt, y = ((const rt_entry *)b)->rt;
    return (x > y) - (x < y);
}

/* Pooled fits of several participants: a quick check that they differ (Kruskal & Wallis 1952 test of
 * the kept RTs across participants, average ranks for ties), warned about at p < 0.001 with the way to
 * fit them hierarchically. */
static bl_status warn_if_participants_differ(const bl_trials *t, bl_warnings *warn, bl_error *err)
{
    if (t->n_participants < 2) return BL_OK;
    rt_entry *e = malloc((t->n ? t->n : 1) * sizeof *e);
    double *rank_sum = calloc(t->n_participants, sizeof *rank_sum);
    size_t *count = calloc(t->n_participants, sizeof *count);
    if (!e || !rank_sum || !count) {
        free(e), free(rank_sum), free(count);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    size_t n = 0;
    for (size_t i = 0; i < t->n; i++)
        if (!(t->excluded && t->excluded[i]) && isfinite(t->rt[i])) e[n++] = (rt_entry){t->rt[i], t->participant[i]};
    qsort(e, n, sizeof *e, rt_entry_cmp);
    for (size_t i = 0; i < n;) {
        size_t j = i;
        while (j < n && e[j].rt == e[i].rt) j++;
        double rank = 0.5 * (double)(i + 1 + j); /* average of ranks i+1 .. j */
        for (size_t k = i; k < j; k++) {
            rank_sum[e[k].participant] += rank;
            count[e[k].participant]++;
        }
        i = j;
    }
    double h = 0;
    size_t groups = 0;
    for (size_t g = 0; g < t->n_participants; g++)
        if (count[g]) {
            h += rank_sum[g] * rank_sum[g] / (double)count[g];
            groups++;
        }
    double N = (double)n;
    h = 12.0 / (N * (N + 1)) * h - 3 * (N + 1);
    if (groups >= 2 && n > groups) {
        double p = gsl_cdf_chisq_Q(h, (double)(groups - 1));
        if (p < 1e-3)
            bl_warnings_add(warn,
                            "participants pooled, but their RTs differ (Kruskal-Wallis H = %.1f, df = %zu, p = %.2g): "
                            "pooled intervals are too narrow for a claim about the population; set fit.participants "
                            "to \"hierarchical\" (docs/models.md section 8)",
                            h, groups - 1, p);
    }
    free(e), free(rank_sum), free(count);
    return BL_OK;
}

/* A key that asks for participants' effects in a study of one participant (the mode was not named). */
static bl_status implied_mode_error(const bl_study *study, size_t n, bl_error *err)
{
    char key[128] = "fit.quadrature";
    for (size_t m = 0; m < study->n_models; m++) {
        if (study->models[m].correlated) snprintf(key, sizeof key, "models[%zu].correlated", m);
        for (int p = 0; p < BL_NPARAM; p++)
            if (study->models[m].param[p].varies_given)
                snprintf(key, sizeof key, "models[%zu].%s.varies", m, bl_param_name(p));
    }
    return bl_error_set(err, BL_ERR_MODEL,
                        "%s: %s asks for participants' effects (a hierarchical fit), which needs at least 2 "
                        "participants; the study has %zu (remove the key, or set fit.participants to \"pooled\")",
                        study->path ? study->path : "study", key, n);
}

/* The selected models in study order, and the empty result set. */
static bl_status study_fit_init(study_fit *sf, const bl_study *study, const bl_trials *trials,
                                const bl_fit_options *opt_in, bl_warnings *warn, bl_error *err)
{
    memset(sf, 0, sizeof *sf);
    sf->study = study;
    sf->trials = trials;
    if (opt_in) sf->opt = *opt_in;
    else bl_fit_options_default(&sf->opt);
    if (sf->opt.starts <= 0) sf->opt.starts = study->fit.starts > 0 ? study->fit.starts : 3;
    size_t n_alloc = study->n_models ? study->n_models : 1;
    sf->sel = calloc(n_alloc, sizeof *sf->sel);
    sf->units = calloc(n_alloc, sizeof *sf->units);
    sf->unit_names = calloc(n_alloc, sizeof *sf->unit_names);
    sf->hier = calloc(n_alloc, sizeof *sf->hier);
    sf->part_coef = calloc(n_alloc, sizeof *sf->part_coef);
    sf->set = calloc(1, sizeof *sf->set);
    if (!sf->sel || !sf->units || !sf->unit_names || !sf->hier || !sf->part_coef || !sf->set)
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    for (size_t j = 0; j < study->n_models; j++) {
        int want = sf->opt.n_models == 0;
        for (size_t i = 0; i < sf->opt.n_models; i++)
            if (!strcmp(study->models[j].name, sf->opt.models[i])) want = 1;
        if (want) sf->sel[sf->n_sel++] = j;
    }
    bl_fit_set *set = sf->set;
    set->mode = bl_study_participants_mode(study, trials->n_participants);
    if (set->mode == BL_PARTICIPANTS_HIERARCHICAL && !study->fit.participants_given && trials->n_participants < 2)
        return implied_mode_error(study, trials->n_participants, err);
    if (set->mode == BL_PARTICIPANTS_POOLED) {
        bl_status st = warn_if_participants_differ(trials, warn, err);
        if (st) return st;
    }
    set->permutations = sf->opt.permutations;
    set->seed = sf->opt.seed;
    set->threads = sf->opt.threads;
    set->models = calloc(sf->n_sel ? sf->n_sel : 1, sizeof *set->models);
    if (!set->models) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    set->n_models = sf->n_sel;
    return BL_OK;
}

/* A model result with its name and trial-wise arrays (predictions NAN until fitted). */
static bl_status model_result_init(bl_model_result *r, const bl_model_spec *spec, bl_participants_mode mode,
                                   size_t n_rows, bl_error *err)
{
    size_t n = n_rows ? n_rows : 1;
    r->mode = mode;
    r->nested = -1;
    r->n_rows = n_rows;
    r->name = bl_strdup(spec->name);
    r->extends = spec->extends ? bl_strdup(spec->extends) : NULL;
    r->used = calloc(n, 1);
    r->predicted = calloc(n, sizeof *r->predicted);
    r->p_upper = malloc(n * sizeof(double));
    r->mean_rt = malloc(n * sizeof(double));
    r->trial_log_likelihood = malloc(n * sizeof(double));
    if (!r->name || (spec->extends && !r->extends) || !r->used || !r->predicted || !r->p_upper || !r->mean_rt ||
        !r->trial_log_likelihood)
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    for (size_t i = 0; i < n_rows; i++) {
        r->p_upper[i] = r->mean_rt[i] = r->trial_log_likelihood[i] = NAN;
        for (int p = 0; p < BL_NPARAM; p++) r->predicted[i].value[p] = NAN;
        r->predicted[i].contamination_lo = r->predicted[i].contamination_hi = NAN;
    }
    return BL_OK;
}

/* Step 1: the designs of every model (and participant), compiled and checked before any fit. */
static bl_status build_designs(study_fit *sf, bl_warnings *warn, bl_error *err)
{
    bl_fit_set *set = sf->set;
    for (size_t q = 0; q < sf->n_sel; q++) {
        const bl_model_spec *spec = &sf->study->models[sf->sel[q]];
        bl_model_result *r = &set->models[q];
        bl_status st = model_result_init(r, spec, set->mode, sf->trials->n, err);
        /* hierarchical: one pooled design (its fit is the start), and the participants' effects on it */
        bl_participants_mode unit_mode = set->mode == BL_PARTICIPANTS_HIERARCHICAL ? BL_PARTICIPANTS_POOLED : set->mode;
        if (!st)
            st = bl_build_units(spec, sf->trials, unit_mode, &sf->opt, &sf->units[q], &sf->unit_names[q], warn, err);
        if (!st && set->mode == BL_PARTICIPANTS_HIERARCHICAL)
            st = bl_hier_create(spec, sf->units[q].models[0], sf->trials, sf->study->fit.quadrature, sf->opt.threads,
                                &sf->hier[q], err);
        if (st) return st;
        if (set->mode != BL_PARTICIPANTS_SEPARATE) continue;
        r->participants = calloc(sf->units[q].n_units, sizeof *r->participants);
        if (!r->participants) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        r->n_participants = sf->units[q].n_units;
        for (size_t i = 0; i < sf->units[q].n_units; i++)
            if (!(r->participants[i].participant = bl_strdup(sf->unit_names[q][i])))
                return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    return BL_OK;
}

/* Step 2: the fits. Several fits (models, participants) run side by side, each on one thread, with
 * the same results as one after the other; a single fit spreads its trials over the threads. The
 * first failure in job order is reported, whatever order the threads finished in. */
static bl_status run_fits(study_fit *sf, bl_error *err)
{
    bl_fit_set *set = sf->set;
    const bl_fit_options *opt = &sf->opt;
    size_t n_jobs = 0;
    for (size_t q = 0; q < sf->n_sel; q++) n_jobs += sf->units[q].n_units;
    size_t n_alloc = n_jobs ? n_jobs : 1;
    size_t *job_q = malloc(n_alloc * sizeof *job_q), *job_i = malloc(n_alloc * sizeof *job_i);
    bl_status *job_st = calloc(n_alloc, sizeof *job_st);
    bl_error *job_err = calloc(n_alloc, sizeof *job_err);
    bl_status st = BL_OK;
    if (!job_q || !job_i || !job_st || !job_err) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto done;
    }
    for (size_t q = 0, j = 0; q < sf->n_sel; q++)
        for (size_t i = 0; i < sf->units[q].n_units; i++, j++) {
            job_q[j] = q;
            job_i[j] = i;
        }
    size_t jobs_done = 0;
    int nt = 1;
#ifdef _OPENMP
    nt = opt->threads > 0 ? opt->threads : omp_get_max_threads();
    if (nt < 1) nt = 1;
#pragma omp parallel for schedule(dynamic, 1) num_threads(nt) if (n_jobs > 1 && nt > 1)
#endif
    for (size_t j = 0; j < n_jobs; j++) {
        size_t q = job_q[j], i = job_i[j];
        bl_unit_set *u = &sf->units[q];
        bl_model_result *r = &set->models[q];
        bl_fit_result *fr = set->mode == BL_PARTICIPANTS_SEPARATE ? &r->participants[i] : &r->fit;
        char *keep = fr->participant; /* fit_core clears the result; the label is set again below */
        fr->participant = NULL;
        /* hierarchical: this pooled fit is the start of the marginal maximisation; no profiles */
        int infer = set->mode == BL_PARTICIPANTS_HIERARCHICAL || !opt->profiles ? 1 : 2;
        job_st[j] = bl_fit_core(u->models[i], u->liks[i], opt, opt->starts, NULL, infer, fr, u->coef[i], &job_err[j]);
        fr->participant = keep;
        if (opt->progress) {
#ifdef _OPENMP
#pragma omp critical(bl_fit_progress)
#endif
            {
                jobs_done++;
                opt->progress(opt->progress_user, r->name, jobs_done, n_jobs);
            }
        }
    }
    (void)nt;
    for (size_t j = 0; j < n_jobs && !st; j++)
        if (job_st[j]) {
            st = job_st[j];
            if (err) *err = job_err[j];
        }
done:
    free(job_q);
    free(job_i);
    free(job_st);
    free(job_err);
    return st;
}

/* Hierarchical model q: each participant's own fit of the model (what the shrinkage figure compares
 * the empirical-Bayes estimates with). A participant whose design cannot be fitted alone (a level
 * missing, a constant regressor) leaves the whole comparison out: it is a figure, not an estimate. */
static bl_status separate_for_shrinkage(study_fit *sf, size_t q, bl_error *err)
{
    bl_model_result *r = &sf->set->models[q];
    const bl_model_spec *spec = &sf->study->models[sf->sel[q]];
    bl_unit_set u;
    bl_error ignored = {0};
    if (bl_build_units(spec, sf->trials, BL_PARTICIPANTS_SEPARATE, &sf->opt, &u, NULL, NULL, &ignored)) return BL_OK;
    bl_status st = BL_OK;
    size_t k = r->fit.n_coef;
    if (u.n_units != r->n_participants) goto done;
    if (!(r->separate_estimate = malloc(u.n_units * (k ? k : 1) * sizeof(double)))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto done;
    }
    bl_fit_options one = sf->opt;
    one.progress = NULL;
    one.starts = 1;
#ifdef _OPENMP
    int nt = one.threads > 0 ? one.threads : omp_get_max_threads();
#pragma omp parallel for schedule(dynamic, 1) num_threads(nt > 0 ? nt : 1) if (u.n_units > 1)
#endif
    for (size_t i = 0; i < u.n_units; i++) {
        bl_fit_result fr;
        bl_error e = {0};
        double *row = r->separate_estimate + i * k;
        for (size_t c = 0; c < k; c++) row[c] = NAN;
        if (bl_fit_core(u.models[i], u.liks[i], &one, 1, NULL, 0, &fr, u.coef[i], &e)) continue;
        for (size_t c = 0; c < k; c++) {
            const bl_coefficient *pc = &r->fit.coef[c];
            for (size_t j = 0; j < bl_model_n_coef(u.models[i]); j++) {
                const bl_coef_info *ci = bl_model_coef(u.models[i], j);
                if (ci->param == pc->param && !strcmp(ci->term, pc->term) && !strcmp(ci->level, pc->level))
                    row[c] = u.coef[i][j];
            }
        }
        bl_fit_result_clear(&fr);
    }
done:
    bl_unit_set_free(&u);
    return st;
}

/* Step 2b, hierarchical mode: from each model's pooled fit, the fit with participants' effects
 * integrated out (the pooled fit is the starting point and is then discarded). */
static bl_status run_hierarchical_fits(study_fit *sf, bl_warnings *warn, bl_error *err)
{
    bl_fit_set *set = sf->set;
    if (set->mode != BL_PARTICIPANTS_HIERARCHICAL) return BL_OK;
    for (size_t q = 0; q < sf->n_sel; q++) {
        bl_model_result *r = &set->models[q];
        bl_fit_result pooled = r->fit;
        memset(&r->fit, 0, sizeof r->fit);
        bl_status st = bl_hier_fit(sf->hier[q], &sf->opt, &pooled, sf->units[q].coef[0], r, &sf->part_coef[q], warn,
                                   err);
        bl_fit_result_clear(&pooled);
        if (!st) st = separate_for_shrinkage(sf, q, err);
        if (st) return st;
        if (sf->opt.progress) sf->opt.progress(sf->opt.progress_user, r->name, q + 1, sf->n_sel);
    }
    return BL_OK;
}

/* Separate mode: the model's own fit record holds the totals over its participants. */
static void separate_totals(bl_model_result *r)
{
    bl_fit_result *f = &r->fit;
    f->log_likelihood = r->log_likelihood;
    f->parameters = r->parameters;
    f->trials = r->trials;
    f->aic = r->aic;
    f->bic = r->bic;
    f->converged = r->converged;
    f->diag.method = r->participants[0].diag.method;
    f->diag.converged = r->converged;
    f->diag.newton_decrement = f->diag.condition_number = f->diag.gradient_norm = NAN;
    f->diag.hessian_positive_definite = 1;
    for (size_t i = 0; i < r->n_participants; i++) {
        const bl_fit_diagnostics *d = &r->participants[i].diag;
        f->diag.evaluations += d->evaluations;
        f->diag.iterations += d->iterations;
        f->diag.seconds += d->seconds;
        f->diag.starts += d->starts;
        f->diag.starts_agreed += d->starts_agreed;
        f->diag.hessian_positive_definite &= d->hessian_positive_definite;
    }
}

/* Step 3, hierarchical model q: warnings, totals from the marginal likelihood, each participant's
 * trials predicted from their empirical-Bayes coefficients. */
static bl_status summarise_hierarchical(study_fit *sf, size_t q, int *nondecision_note, bl_warnings *warn,
                                        bl_error *err)
{
    bl_model_result *r = &sf->set->models[q];
    const bl_model *m = sf->units[q].models[0];
    bl_fit_warn(m, NULL, &r->fit, warn);
    r->log_likelihood = r->fit.log_likelihood;
    r->parameters = r->fit.parameters;
    r->trials = r->fit.trials;
    r->converged = r->fit.converged;
    r->aic = r->fit.aic;
    r->bic = r->fit.bic;
    size_t n_coef = bl_model_n_coef(m);
    for (size_t j = 0; j < bl_hier_participants(sf->hier[q]); j++) {
        size_t n;
        const size_t *trials = bl_hier_participant_trials(sf->hier[q], j, &n);
        bl_status st = fill_predictions(r, m, sf->part_coef[q] + j * n_coef,
                                        bl_hier_participant_likelihood(sf->hier[q], j), trials, n, err);
        if (st) return st;
    }
    if (bl_model_param_free(m, BL_NONDECISION) && !bl_model_param_free(m, BL_NONDECISION_RANGE)) *nondecision_note |= 1;
    return bl_hier_permutation_tests(sf->hier[q], sf->units[q].models[0], &sf->study->models[sf->sel[q]], sf->trials,
                                     &sf->opt, r, err);
}

/* Step 3, for model q: warnings, predictions, totals, group summary, permutation tests. */
static bl_status summarise_model(study_fit *sf, size_t q, int *nondecision_note, bl_warnings *warn, bl_error *err)
{
    bl_fit_set *set = sf->set;
    bl_model_result *r = &set->models[q];
    bl_unit_set *u = &sf->units[q];
    r->converged = 1;
    if (set->mode == BL_PARTICIPANTS_HIERARCHICAL) return summarise_hierarchical(sf, q, nondecision_note, warn, err);
    for (size_t i = 0; i < u->n_units; i++) {
        bl_fit_result *fr = set->mode == BL_PARTICIPANTS_SEPARATE ? &r->participants[i] : &r->fit;
        bl_fit_warn(u->models[i], fr->participant, fr, warn);
        r->log_likelihood += fr->log_likelihood;
        r->parameters += fr->parameters;
        r->trials += fr->trials;
        r->converged = r->converged && fr->converged;
        bl_status st = fill_predictions(r, u->models[i], u->coef[i], u->liks[i], NULL, 0, err);
        if (st) return st;
    }
    if (bl_model_param_free(u->models[0], BL_NONDECISION) && !bl_model_param_free(u->models[0], BL_NONDECISION_RANGE))
        *nondecision_note |= 2; /* with a profile interval */
    r->aic = 2.0 * (double)r->parameters - 2.0 * r->log_likelihood;
    r->bic = (double)r->parameters * log((double)r->trials) - 2.0 * r->log_likelihood;
    bl_status st = BL_OK;
    if (set->mode == BL_PARTICIPANTS_SEPARATE) {
        separate_totals(r);
        if ((st = bl_group_summary(r, err))) return st;
    }
    return bl_permutation_tests(sf->study, &sf->study->models[sf->sel[q]], sf->trials, &sf->opt, u, r, err);
}

/* Hierarchical: every term that varies in the base model varies in the extended one too. */
static int effects_nested(const bl_hier *base, const bl_hier *ext)
{
    for (size_t a = 0; a < bl_hier_effects(base); a++) {
        bl_param pa, pb;
        const char *la = bl_hier_effect_label(base, a, &pa);
        int found = 0;
        for (size_t b = 0; b < bl_hier_effects(ext) && !found; b++) {
            const char *lb = bl_hier_effect_label(ext, b, &pb);
            found = pa == pb && !strcmp(la, lb);
        }
        if (!found) return 0;
    }
    return 1;
}

/* Step 4: nesting for the likelihood-ratio test. The base model must be fitted, and nested unit by unit. */
static bl_status mark_nesting(study_fit *sf, bl_error *err)
{
    bl_fit_set *set = sf->set;
    for (size_t q = 0; q < sf->n_sel; q++) {
        bl_model_result *r = &set->models[q];
        if (!r->extends) continue;
        size_t b;
        for (b = 0; b < sf->n_sel; b++)
            if (!strcmp(set->models[b].name, r->extends)) break;
        if (b == sf->n_sel) continue;
        int nested = sf->units[q].n_units == sf->units[b].n_units;
        for (size_t i = 0; nested && i < sf->units[q].n_units; i++) {
            bl_status st = bl_model_nested_in(sf->units[b].models[i], sf->units[q].models[i], &nested, err);
            if (st) return st;
        }
        if (nested && set->mode == BL_PARTICIPANTS_HIERARCHICAL) nested = effects_nested(sf->hier[b], sf->hier[q]);
        r->nested = nested && set->models[b].parameters < r->parameters;
    }
    return BL_OK;
}

bl_status bl_fit_study(const bl_study *study, const bl_trials *trials, const bl_fit_options *opt, bl_fit_set **out,
                       bl_warnings *warn, bl_error *err)
{
    bl_gsl_guard();
    *out = NULL;
    bl_status st = opt ? check_model_names(study, opt, err) : BL_OK;
    if (st) return st;
    study_fit sf;
    int nondecision_note = 0;
    if ((st = study_fit_init(&sf, study, trials, opt, warn, err))) goto fail;
    /* Data the model cannot use (identical RTs) stop here; data that weaken estimates get warnings. */
    if ((st = bl_screen_trials(study, trials, sf.sel, sf.n_sel, warn, err))) goto fail;
    if ((st = build_designs(&sf, warn, err))) goto fail;
    if ((st = run_fits(&sf, err))) goto fail;
    if ((st = run_hierarchical_fits(&sf, warn, err))) goto fail;
    for (size_t q = 0; q < sf.n_sel; q++)
        if ((st = summarise_model(&sf, q, &nondecision_note, warn, err))) goto fail;
    if (nondecision_note & 1)
        bl_warnings_add(warn,
                        "Wald standard errors of nondecision are approximate: the likelihood changes steeply near "
                        "the fastest RT (see docs/models.md)");
    else if (nondecision_note & 2)
        bl_warnings_add(warn,
                        "Wald intervals of nondecision are approximate (the likelihood changes steeply near the "
                        "fastest RT): report its profile-likelihood interval (fits.json profile_ci_low/high, "
                        "docs/models.md)");
    if ((st = mark_nesting(&sf, err))) goto fail;
    if ((st = bl_compare_models(sf.set, err))) goto fail;
    *out = sf.set;
    sf.set = NULL;
fail:
    study_fit_free(&sf);
    bl_fit_set_destroy(sf.set);
    return st;
}
