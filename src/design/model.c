/* Model designs: per-parameter intercepts per level combination, slopes per regressor (shared or per
 * level combination), fixed values and links, compiled once against the trials that are fitted.
 * Rank deficiency is found from the singular values of the column-normalised design of each parameter
 * (LAPACKE dgesvd); the right singular vector of the smallest singular value names the coefficients
 * involved (Golub & Van Loan, Matrix Computations, 4th ed., 2013, sections 2.4 and 5.5).
 */
#include "design/model_internal.h"
#include "core/groups.h"
#include "core/strutil.h"

#include <lapacke.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* A design whose normalised columns have condition number above this is treated as rank-deficient:
 * exact collinearity gives ~1e15-1e16, while real designs with centred or standardised regressors
 * stay far below. */
#define BL_MODEL_MAX_CONDITION 1e9

static void free_strv(char **v, size_t n)
{
    if (!v) return;
    for (size_t i = 0; i < n; i++) free(v[i]);
    free(v);
}

static char **dup_strv(char *const *v, size_t n)
{
    char **c = calloc(n ? n : 1, sizeof *c);
    if (!c) return NULL;
    for (size_t i = 0; i < n; i++)
        if (!(c[i] = bl_strdup(v[i]))) {
            free_strv(c, n);
            return NULL;
        }
    return c;
}

int bl_model_params_valid(const bl_wiener_params *p)
{
    const double *v = p->value;
    for (int i = 0; i < BL_NPARAM; i++)
        if (!isfinite(v[i])) return 0;
    if (!(v[BL_THRESHOLD] > 0)) return 0;
    if (!(v[BL_START] > 0 && v[BL_START] < 1)) return 0;
    if (!(v[BL_NONDECISION] >= 0)) return 0;
    if (!(v[BL_DRIFT_SD] >= 0)) return 0;
    if (!(v[BL_START_RANGE] >= 0 && v[BL_START_RANGE] < 1)) return 0;
    if (v[BL_START_RANGE] > 0 && !(v[BL_START] - v[BL_START_RANGE] / 2 > 0 && v[BL_START] + v[BL_START_RANGE] / 2 < 1))
        return 0;
    if (!(v[BL_NONDECISION_RANGE] >= 0)) return 0;
    if (!(v[BL_NONDECISION] - v[BL_NONDECISION_RANGE] / 2 >= 0)) return 0;
    if (!(v[BL_CONTAMINATION] >= 0 && v[BL_CONTAMINATION] < 1)) return 0;
    return 1;
}

static void param_design_free(bl_param_design *d)
{
    free_strv(d->per, d->n_per);
    free(d->level);
    for (size_t s = 0; s < d->n_slopes; s++) {
        bl_slope_design *sl = &d->slopes[s];
        free(sl->regressor);
        free_strv(sl->by, sl->n_by);
        free(sl->level);
        free(sl->x);
        free(sl->x_orig);
    }
    free(d->slopes);
    memset(d, 0, sizeof *d);
}

void bl_model_destroy(bl_model *m)
{
    if (!m) return;
    free(m->name);
    free(m->row);
    free(m->rt);
    free(m->upper);
    free(m->sign);
    free(m->participant);
    for (int p = 0; p < BL_NPARAM; p++) param_design_free(&m->par[p]);
    free_strv(m->level_text, m->n_coef);
    free(m->coef);
    free(m);
}

/* Level combinations of `cols` over the used trials: level index per trial, and the names
 * ("v1:v2") in order of first appearance. On error names model, parameter and column. */
static bl_status make_levels(const bl_model *m, const bl_trials *trials, char *const *cols, size_t n_cols,
                             const char *param, size_t **level_out, char ***names_out, size_t *n_out, bl_error *err)
{
    const bl_table *t = trials->table;
    int *ci = calloc(n_cols ? n_cols : 1, sizeof *ci);
    size_t *level = calloc(m->n ? m->n : 1, sizeof *level);
    char **keys = calloc(m->n ? m->n : 1, sizeof *keys);
    char **names = NULL;
    size_t n_names = 0;
    bl_status st = BL_ERR_NOMEM;
    if (!ci || !level || !keys) goto fail;
    for (size_t c = 0; c < n_cols; c++) {
        ci[c] = bl_table_find(t, cols[c]);
        if (ci[c] < 0) {
            st = bl_error_set(err, BL_ERR_MODEL, "model '%s': parameter '%s': unknown column '%s' in the trial table",
                              m->name, param, cols[c]);
            goto fail;
        }
    }
    for (size_t k = 0; k < m->n; k++) {
        size_t row = m->row[k], len = 1;
        for (size_t c = 0; c < n_cols; c++) {
            const char *v = t->cols[ci[c]].text[row];
            if (!v) {
                st = bl_error_set(err, BL_ERR_MODEL,
                                  "model '%s': parameter '%s': column '%s' is missing on trial %s of participant '%s'",
                                  m->name, param, cols[c], trials->trial_label ? trials->trial_label[row] : "?",
                                  trials->participants ? trials->participants[trials->participant[row]] : "?");
                goto fail;
            }
            len += strlen(v) + 1;
        }
        if (!(keys[k] = malloc(len))) goto fail;
        keys[k][0] = '\0';
        for (size_t c = 0, at = 0; c < n_cols; c++) {
            const char *v = t->cols[ci[c]].text[row];
            size_t vl = strlen(v);
            if (c) keys[k][at++] = ':';
            memcpy(keys[k] + at, v, vl + 1);
            at += vl;
        }
    }
    /* Numbered by sorting, not by comparing each trial with every level found so far. */
    bl_status gs = bl_group_strings((const char *const *)keys, m->n, level, &n_names, "levels", err);
    if (gs) {
        n_names = 0;
        st = gs;
        goto fail;
    }
    if (!(names = calloc(n_names ? n_names : 1, sizeof *names))) {
        n_names = 0;
        goto fail;
    }
    for (size_t k = 0; k < m->n; k++)
        if (!names[level[k]]) { /* hand the key of the first appearance over to names */
            names[level[k]] = keys[k];
            keys[k] = NULL;
        }
    free_strv(keys, m->n);
    free(ci);
    *level_out = level;
    *names_out = names;
    *n_out = n_names;
    return BL_OK;
fail:
    if (st == BL_ERR_NOMEM) bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory building the design", m->name);
    free(ci);
    free_strv(keys, keys ? m->n : 0);
    free(level);
    free_strv(names, n_names);
    return st;
}

/* Dense design of one free parameter (n x k, row-major). Caller frees. */
static double *param_matrix(const bl_model *m, bl_param p, size_t *k_out)
{
    const bl_param_design *d = &m->par[p];
    size_t k = d->n_levels;
    for (size_t s = 0; s < d->n_slopes; s++) k += d->slopes[s].n_levels;
    double *X = calloc((m->n * k) > 0 ? m->n * k : 1, sizeof *X);
    if (!X) return NULL;
    for (size_t i = 0; i < m->n; i++) {
        X[i * k + d->level[i]] = 1.0;
        size_t off = d->n_levels;
        for (size_t s = 0; s < d->n_slopes; s++) {
            const bl_slope_design *sl = &d->slopes[s];
            X[i * k + off + sl->level[i]] = sl->x_orig[i];
            off += sl->n_levels;
        }
    }
    *k_out = k;
    return X;
}

static void coef_label(const bl_model *m, size_t j, char *buf, size_t n)
{
    const bl_coef_info *c = &m->coef[j];
    if (c->slope < 0)
        snprintf(buf, n, "intercept%s%s%s", c->level[0] ? " at level '" : "", c->level, c->level[0] ? "'" : "");
    else
        snprintf(buf, n, "slope '%s'%s%s%s", c->term, c->level[0] ? " at level '" : "", c->level,
                 c->level[0] ? "'" : "");
}

/* A rank-deficient design of parameter p: name the coefficients involved. The shortest leading set
 * of columns that is already deficient (eigenvalues of its Gram matrix) has a null vector naming
 * exactly them, and the last of them adds nothing to the ones before it; without it, the null
 * vector of the whole design (last row of vt, k x k) is used. */
static bl_status report_collinearity(const bl_model *m, bl_param p, size_t k, const double *vt, double cond,
                                     bl_error *err)
{
    const bl_param_design *d = &m->par[p];
    double *G = calloc(k * k, sizeof *G), *Gj = malloc(k * k * sizeof *Gj), *ev = malloc(k * sizeof *ev);
    const double *v = vt + (k - 1) * k;
    size_t nv = k;
    double *vbuf = malloc(k * sizeof *vbuf);
    if (G && Gj && ev && vbuf) {
        /* X was overwritten by dgesvd: rebuild the normalised design. */
        size_t k2;
        double *X2 = param_matrix(m, p, &k2);
        if (X2) {
            for (size_t j = 0; j < k; j++) {
                double ss = 0;
                for (size_t i = 0; i < m->n; i++) ss += X2[i * k + j] * X2[i * k + j];
                for (size_t i = 0; i < m->n; i++) X2[i * k + j] /= sqrt(ss);
            }
            for (size_t i = 0; i < m->n; i++)
                for (size_t a = 0; a < k; a++) {
                    double xa = X2[i * k + a];
                    if (xa == 0) continue;
                    for (size_t b = 0; b < k; b++) G[a * k + b] += xa * X2[i * k + b];
                }
            free(X2);
            for (size_t j = 2; j <= k; j++) {
                for (size_t a = 0; a < j; a++)
                    for (size_t b = 0; b < j; b++) Gj[a * j + b] = G[a * k + b];
                if (LAPACKE_dsyev(LAPACK_ROW_MAJOR, 'V', 'U', (lapack_int)j, Gj, (lapack_int)j, ev) != 0) break;
                if (ev[0] <= 1e-10 * ev[j - 1]) {
                    for (size_t a = 0; a < j; a++) vbuf[a] = Gj[a * j + 0];
                    v = vbuf;
                    nv = j;
                    break;
                }
            }
        }
    }
    double vmax = 0;
    for (size_t j = 0; j < nv; j++) vmax = fmax(vmax, fabs(v[j]));
    size_t last = 0;
    for (size_t j = 0; j < nv; j++)
        if (fabs(v[j]) > 1e-3 * vmax) last = j;
    char lab[512], others[600] = "";
    coef_label(m, d->first_coef + last, lab, sizeof lab);
    size_t shown = 0;
    for (size_t j = 0; j < nv && shown < 3; j++) {
        if (j == last || !(fabs(v[j]) > 1e-3 * vmax)) continue;
        char l2[256];
        coef_label(m, d->first_coef + j, l2, sizeof l2);
        size_t len = strlen(others);
        snprintf(others + len, sizeof others - len, "%s%s", shown ? ", " : "", l2);
        shown++;
    }
    free(G);
    free(Gj);
    free(ev);
    bl_status st = bl_error_set(err, BL_ERR_MODEL,
                                "model '%s': parameter '%s': rank-deficient design: %s is collinear with %s "
                                "(condition number %.3g; e.g. a regressor constant within a level)",
                                m->name, bl_param_name(p), lab, shown ? others : "the other coefficients", cond);
    free(vbuf); /* v may point into it until the message is made */
    return st;
}

/* Full column rank check of one parameter's design. */
static bl_status check_rank(const bl_model *m, bl_param p, bl_error *err)
{
    const bl_param_design *d = &m->par[p];
    const char *pname = bl_param_name(p);
    size_t k;
    double *X = param_matrix(m, p, &k);
    double *s = NULL, *vt = NULL, *superb = NULL;
    bl_status st = BL_OK;
    if (!X) return bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory checking the design", m->name);
    /* Zero columns first: the clearest message. */
    for (size_t j = 0; j < k; j++) {
        double ss = 0;
        for (size_t i = 0; i < m->n; i++) ss += X[i * k + j] * X[i * k + j];
        if (!(ss > 0)) {
            char lab[512];
            coef_label(m, d->first_coef + j, lab, sizeof lab);
            st = bl_error_set(err, BL_ERR_MODEL,
                              "model '%s': parameter '%s': %s cannot be estimated: its regressor is 0 on every "
                              "trial there (rank-deficient design)",
                              m->name, pname, lab);
            goto done;
        }
        double inv = 1.0 / sqrt(ss);
        for (size_t i = 0; i < m->n; i++) X[i * k + j] *= inv;
    }
    if (m->n < k) {
        st = bl_error_set(err, BL_ERR_MODEL, "model '%s': parameter '%s': %zu coefficients but only %zu trials",
                          m->name, pname, k, m->n);
        goto done;
    }
    s = malloc(k * sizeof *s);
    vt = malloc(k * k * sizeof *vt);
    superb = malloc((k > 1 ? k : 2) * sizeof *superb);
    if (!s || !vt || !superb) {
        st = bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory checking the design", m->name);
        goto done;
    }
    lapack_int info = LAPACKE_dgesvd(LAPACK_ROW_MAJOR, 'N', 'A', (lapack_int)m->n, (lapack_int)k, X, (lapack_int)k, s,
                                     NULL, 1, vt, (lapack_int)k, superb);
    if (info == LAPACK_WORK_MEMORY_ERROR || info == LAPACK_TRANSPOSE_MEMORY_ERROR) {
        st = bl_error_set(err, BL_ERR_NOMEM,
                          "model '%s': parameter '%s': out of memory checking the rank of the design", m->name, pname);
        goto done;
    }
    if (info != 0) {
        st = bl_error_set(err, BL_ERR_NUMERIC, "model '%s': parameter '%s': SVD of the design failed (LAPACK info %d)",
                          m->name, pname, (int)info);
        goto done;
    }
    if (s[k - 1] <= s[0] / BL_MODEL_MAX_CONDITION)
        st = report_collinearity(m, p, k, vt, s[k - 1] > 0 ? s[0] / s[k - 1] : INFINITY, err);
done:
    free(X);
    free(s);
    free(vt);
    free(superb);
    return st;
}

static bl_status design_nomem(const bl_model *m, bl_error *err)
{
    return bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory building the design", m->name);
}

/* The trials the model fits (kept, and selected by `use`): rows, RTs, choices, signs, participants,
 * and the observed RT range. Every fitted trial must have a valid RT. */
static bl_status select_trials(bl_model *m, const bl_trials *trials, const unsigned char *use, bl_error *err)
{
    const size_t nrow = trials->n;
    size_t n = 0;
    for (size_t i = 0; i < nrow; i++)
        if (!(trials->excluded && trials->excluded[i]) && (!use || use[i])) n++;
    if (n == 0) return bl_error_set(err, BL_ERR_MODEL, "model '%s': no trials to fit", m->name);
    m->n = n;
    m->row = malloc(n * sizeof *m->row);
    m->rt = malloc(n * sizeof *m->rt);
    m->upper = malloc(n * sizeof *m->upper);
    m->sign = malloc(n * sizeof *m->sign);
    m->participant = malloc(n * sizeof *m->participant);
    if (!m->row || !m->rt || !m->upper || !m->sign || !m->participant) return design_nomem(m, err);
    m->rt_lo = INFINITY;
    m->rt_hi = -INFINITY;
    for (size_t i = 0, k = 0; i < nrow; i++) {
        if ((trials->excluded && trials->excluded[i]) || (use && !use[i])) continue;
        double rt = trials->rt[i];
        if (!isfinite(rt) || rt <= 0)
            return bl_error_set(err, BL_ERR_INPUT, "model '%s': trial %s of participant '%s' has no valid RT (%g)",
                                m->name, trials->trial_label ? trials->trial_label[i] : "?",
                                trials->participants[trials->participant[i]], rt);
        m->row[k] = i;
        m->rt[k] = rt;
        m->upper[k] = trials->upper[i] ? 1 : 0;
        m->sign[k] = trials->drift_sign ? (trials->drift_sign[i] < 0 ? -1 : 1) : 1;
        m->participant[k] = trials->participant[i];
        m->rt_lo = fmin(m->rt_lo, rt);
        m->rt_hi = fmax(m->rt_hi, rt);
        k++;
    }
    if (!(m->rt_hi > m->rt_lo)) m->rt_hi = m->rt_lo + 1.0;
    return BL_OK;
}

/* Level names of each design part (a parameter's intercepts, then each of its slopes), kept until the
 * coefficient table takes them over. */
typedef struct {
    char ***names;
    size_t *counts;
    size_t n;
} level_sets;

static void level_sets_free(level_sets *ls)
{
    if (ls->names)
        for (size_t i = 0; i < ls->n; i++) free_strv(ls->names[i], ls->counts[i]);
    free(ls->names);
    free(ls->counts);
    memset(ls, 0, sizeof *ls);
}

/* The values of one slope's regressor on the fitted trials (a finite number on every one), and
 * their root mean square for the optimiser's scaling. */
static bl_status slope_values(bl_model *m, const bl_trials *trials, const bl_slope_spec *ss, const char *pname,
                              bl_slope_design *sl, bl_error *err)
{
    int c = bl_table_find(trials->table, ss->regressor);
    if (c < 0)
        return bl_error_set(err, BL_ERR_MODEL,
                            "model '%s': parameter '%s': unknown regressor '%s' (neither a band nor a column of "
                            "the trial table)",
                            m->name, pname, ss->regressor);
    const bl_column *col = &trials->table->cols[c];
    size_t n = m->n;
    sl->x = malloc(n * sizeof *sl->x);
    sl->x_orig = malloc(n * sizeof *sl->x_orig);
    if (!sl->x || !sl->x_orig) return design_nomem(m, err);
    double ss2 = 0;
    for (size_t k = 0; k < n; k++) {
        double x = col->num[m->row[k]];
        if (!isfinite(x)) {
            const char *txt = col->text[m->row[k]];
            return bl_error_set(err, BL_ERR_MODEL,
                                "model '%s': parameter '%s': regressor '%s' is %s on trial %s of participant "
                                "'%s' (it must be a finite number on every fitted trial)",
                                m->name, pname, ss->regressor, txt ? "not numeric" : "missing",
                                trials->trial_label ? trials->trial_label[m->row[k]] : "?",
                                trials->participants[trials->participant[m->row[k]]]);
        }
        sl->x[k] = sl->x_orig[k] = x;
        ss2 += x * x;
    }
    sl->rms = sqrt(ss2 / (double)n);
    if (!(sl->rms > 0)) sl->rms = 1.0;
    return BL_OK;
}

/* The design of parameter p: fixed, or free with its intercept levels and its slopes. Coefficients
 * are numbered from *n_coef on, which is advanced past them. */
static bl_status param_design(bl_model *m, const bl_trials *trials, const bl_param_spec *ps, bl_param p, level_sets *ls,
                              size_t *n_coef, bl_error *err)
{
    bl_param_design *d = &m->par[p];
    const char *pname = bl_param_name(p);
    d->link = ps->link == BL_LINK_LOG ? BL_LINK_LOG : BL_LINK_IDENTITY;
    if (ps->is_fixed) {
        d->is_free = 0;
        d->fixed = ps->fixed;
        if (ps->n_slopes)
            return bl_error_set(err, BL_ERR_MODEL, "model '%s': parameter '%s': a fixed parameter cannot have slopes",
                                m->name, pname);
        return BL_OK;
    }
    d->is_free = 1;
    d->n_per = ps->n_per;
    if (!(d->per = dup_strv(ps->per, ps->n_per))) return design_nomem(m, err);
    d->first_coef = *n_coef;
    bl_status st = make_levels(m, trials, ps->per, ps->n_per, pname, &d->level, &ls->names[ls->n], &d->n_levels, err);
    if (st) return st;
    ls->counts[ls->n++] = d->n_levels;
    *n_coef += d->n_levels;
    d->slopes = calloc(ps->n_slopes ? ps->n_slopes : 1, sizeof *d->slopes);
    if (!d->slopes) return design_nomem(m, err);
    d->n_slopes = ps->n_slopes; /* only now: param_design_free walks n_slopes entries */
    for (size_t s = 0; s < ps->n_slopes; s++) {
        const bl_slope_spec *ss = &ps->slopes[s];
        bl_slope_design *sl = &d->slopes[s];
        if (!(sl->regressor = bl_strdup(ss->regressor)) || !(sl->by = dup_strv(ss->by, ss->n_by)))
            return design_nomem(m, err);
        sl->n_by = ss->n_by;
        for (size_t s2 = 0; s2 < s; s2++)
            if (strcmp(d->slopes[s2].regressor, ss->regressor) == 0)
                return bl_error_set(err, BL_ERR_MODEL, "model '%s': parameter '%s': regressor '%s' has two slopes",
                                    m->name, pname, ss->regressor);
        if ((st = slope_values(m, trials, ss, pname, sl, err))) return st;
        sl->first_coef = *n_coef;
        st = make_levels(m, trials, ss->by, ss->n_by, pname, &sl->level, &ls->names[ls->n], &sl->n_levels, err);
        if (st) return st;
        ls->counts[ls->n++] = sl->n_levels;
        *n_coef += sl->n_levels;
    }
    return BL_OK;
}

/* One coefficient's entry in the table; its level text is taken over from the level set. */
static void coef_entry(bl_model *m, size_t j, bl_param p, int slope, const char *term, char **level)
{
    m->coef[j].param = p;
    m->coef[j].slope = slope;
    m->coef[j].term = term;
    m->level_text[j] = *level;
    *level = NULL;
    m->coef[j].level = m->level_text[j];
}

/* The coefficient table (numbering: see model.h), in the order the level sets were made. */
static bl_status coef_table(bl_model *m, size_t n_coef, level_sets *ls, bl_error *err)
{
    m->n_coef = n_coef;
    m->coef = calloc(n_coef, sizeof *m->coef);
    m->level_text = calloc(n_coef, sizeof *m->level_text);
    if (!m->coef || !m->level_text) return design_nomem(m, err);
    size_t set = 0;
    for (bl_param p = 0; p < BL_NPARAM; p++) {
        bl_param_design *d = &m->par[p];
        if (!d->is_free) continue;
        for (size_t l = 0; l < d->n_levels; l++)
            coef_entry(m, d->first_coef + l, p, -1, "intercept", &ls->names[set][l]);
        set++;
        for (size_t s = 0; s < d->n_slopes; s++, set++) {
            bl_slope_design *sl = &d->slopes[s];
            for (size_t l = 0; l < sl->n_levels; l++)
                coef_entry(m, sl->first_coef + l, p, (int)s, sl->regressor, &ls->names[set][l]);
        }
    }
    return BL_OK;
}

bl_status bl_model_build(const bl_model_spec *spec, const bl_trials *trials, const unsigned char *use, bl_model **out,
                         bl_error *err)
{
    *out = NULL;
    const char *mname = spec->name ? spec->name : "(unnamed)";
    level_sets ls = {0};
    bl_model *m = calloc(1, sizeof *m);
    bl_status st = BL_OK;
    if (!m || !(m->name = bl_strdup(mname))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory building the design", mname);
        goto fail;
    }
    if ((st = select_trials(m, trials, use, err))) goto fail;
    size_t max_sets = BL_NPARAM;
    for (int p = 0; p < BL_NPARAM; p++) max_sets += spec->param[p].n_slopes;
    ls.names = calloc(max_sets, sizeof *ls.names);
    ls.counts = calloc(max_sets, sizeof *ls.counts);
    if (!ls.names || !ls.counts) {
        st = design_nomem(m, err);
        goto fail;
    }
    size_t n_coef = 0;
    for (bl_param p = 0; p < BL_NPARAM; p++)
        if ((st = param_design(m, trials, &spec->param[p], p, &ls, &n_coef, err))) goto fail;
    if (n_coef == 0) {
        st = bl_error_set(err, BL_ERR_MODEL, "model '%s': every parameter is fixed; nothing to fit", mname);
        goto fail;
    }
    if ((st = coef_table(m, n_coef, &ls, err))) goto fail;
    level_sets_free(&ls);
    for (bl_param p = 0; p < BL_NPARAM; p++)
        if (m->par[p].is_free && (st = check_rank(m, p, err))) goto fail;
    *out = m;
    return BL_OK;
fail:
    level_sets_free(&ls);
    bl_model_destroy(m);
    return st;
}

static void *dup_mem(const void *p, size_t n)
{
    void *c = malloc(n ? n : 1);
    if (c && n) memcpy(c, p, n);
    return c;
}

bl_status bl_model_copy(const bl_model *m, bl_model **out, bl_error *err)
{
    *out = NULL;
    bl_model *c = calloc(1, sizeof *c);
    if (!c) goto fail;
    size_t n = m->n;
    c->n = n;
    c->rt_lo = m->rt_lo;
    c->rt_hi = m->rt_hi;
    c->n_coef = m->n_coef;
    c->name = bl_strdup(m->name);
    c->row = dup_mem(m->row, n * sizeof *m->row);
    c->rt = dup_mem(m->rt, n * sizeof *m->rt);
    c->upper = dup_mem(m->upper, n * sizeof *m->upper);
    c->sign = dup_mem(m->sign, n * sizeof *m->sign);
    c->participant = dup_mem(m->participant, n * sizeof *m->participant);
    c->coef = dup_mem(m->coef, m->n_coef * sizeof *m->coef);
    c->level_text = dup_strv(m->level_text, m->n_coef);
    if (!c->name || !c->row || !c->rt || !c->upper || !c->sign || !c->participant || !c->coef || !c->level_text)
        goto fail;
    for (size_t j = 0; j < m->n_coef; j++) c->coef[j].level = c->level_text[j];
    for (int p = 0; p < BL_NPARAM; p++) {
        const bl_param_design *d = &m->par[p];
        bl_param_design *e = &c->par[p];
        *e = *d;
        e->per = NULL;
        e->level = NULL;
        e->slopes = NULL;
        e->n_per = 0;
        e->n_slopes = 0;
        if (!d->is_free) continue;
        if (!(e->per = dup_strv(d->per, d->n_per))) goto fail;
        e->n_per = d->n_per;
        if (!(e->level = dup_mem(d->level, n * sizeof *d->level))) goto fail;
        if (!(e->slopes = calloc(d->n_slopes ? d->n_slopes : 1, sizeof *e->slopes))) goto fail;
        e->n_slopes = d->n_slopes;
        for (size_t s = 0; s < d->n_slopes; s++) {
            const bl_slope_design *a = &d->slopes[s];
            bl_slope_design *b = &e->slopes[s];
            *b = *a;
            b->regressor = bl_strdup(a->regressor);
            b->by = dup_strv(a->by, a->n_by);
            b->level = dup_mem(a->level, n * sizeof *a->level);
            b->x = dup_mem(a->x, n * sizeof *a->x);
            b->x_orig = dup_mem(a->x_orig, n * sizeof *a->x_orig);
            if (!b->regressor || !b->by || !b->level || !b->x || !b->x_orig) goto fail;
        }
    }
    /* Coefficient terms point at the copy's own regressor names. */
    for (size_t j = 0; j < c->n_coef; j++)
        if (c->coef[j].slope >= 0) c->coef[j].term = c->par[c->coef[j].param].slopes[c->coef[j].slope].regressor;
    *out = c;
    return BL_OK;
fail:
    bl_model_destroy(c);
    return bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory copying the design", m->name);
}

size_t bl_model_n_coef(const bl_model *m) { return m->n_coef; }
const bl_coef_info *bl_model_coef(const bl_model *m, size_t j) { return j < m->n_coef ? &m->coef[j] : NULL; }
size_t bl_model_n_trials(const bl_model *m) { return m->n; }
size_t bl_model_row(const bl_model *m, size_t k) { return m->row[k]; }
int bl_model_param_free(const bl_model *m, bl_param param) { return m->par[param].is_free; }
size_t bl_model_intercept_index(const bl_model *m, bl_param param, size_t k)
{
    return m->par[param].first_coef + m->par[param].level[k];
}

int bl_model_predict(const bl_model *m, const double *coef, size_t k, bl_wiener_params *p)
{
    for (int q = 0; q < BL_NPARAM; q++) {
        const bl_param_design *d = &m->par[q];
        if (!d->is_free) {
            p->value[q] = d->fixed;
            continue;
        }
        double eta = coef[d->first_coef + d->level[k]];
        for (size_t s = 0; s < d->n_slopes; s++) {
            const bl_slope_design *sl = &d->slopes[s];
            eta += coef[sl->first_coef + sl->level[k]] * sl->x[k];
        }
        p->value[q] = d->link == BL_LINK_LOG ? exp(eta) : eta;
    }
    p->value[BL_DRIFT] *= m->sign[k];
    p->contamination_lo = m->rt_lo;
    p->contamination_hi = m->rt_hi;
    return bl_model_params_valid(p);
}

bl_status bl_model_permute_slope(bl_model *m, bl_param param, size_t s, const size_t *cell, long level, gsl_rng *rng,
                                 bl_error *err)
{
    if ((unsigned)param >= BL_NPARAM || s >= m->par[param].n_slopes)
        return bl_error_set(err, BL_ERR_INTERNAL, "model '%s': no slope %zu on parameter %d", m->name, s, param);
    bl_slope_design *sl = &m->par[param].slopes[s];
    size_t n = m->n, n_cells = 0;
    for (size_t k = 0; k < n; k++) n_cells = cell[k] + 1 > n_cells ? cell[k] + 1 : n_cells;
    /* Trials grouped by cell (counting sort keeps table order inside a cell). */
    size_t *start = calloc(n_cells + 1, sizeof *start), *idx = malloc(n * sizeof *idx);
    if (!start || !idx) {
        free(start);
        free(idx);
        return bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory permuting", m->name);
    }
    /* A trial takes part when its level is the one tested (or every trial when level < 0). */
#define BL_TAKES_PART(k) (level < 0 || sl->level[k] == (size_t)level)
    for (size_t k = 0; k < n; k++)
        if (BL_TAKES_PART(k)) start[cell[k] + 1]++;
    for (size_t c = 0; c < n_cells; c++) start[c + 1] += start[c];
    size_t *fill = malloc((n_cells + 1) * sizeof *fill);
    if (!fill) {
        free(start);
        free(idx);
        return bl_error_set(err, BL_ERR_NOMEM, "model '%s': out of memory permuting", m->name);
    }
    memcpy(fill, start, (n_cells + 1) * sizeof *fill);
    for (size_t k = 0; k < n; k++)
        if (BL_TAKES_PART(k)) idx[fill[cell[k]]++] = k;
#undef BL_TAKES_PART
    for (size_t k = 0; k < n; k++) sl->x[k] = sl->x_orig[k];
    /* Fisher-Yates within each cell (Knuth, TAOCP vol. 2, Algorithm 3.4.2 P). */
    for (size_t c = 0; c < n_cells; c++) {
        size_t a = start[c], len = start[c + 1] - start[c];
        for (size_t i = len; i > 1; i--) {
            size_t j = (size_t)gsl_rng_uniform_int(rng, (unsigned long)i);
            double t = sl->x[idx[a + i - 1]];
            sl->x[idx[a + i - 1]] = sl->x[idx[a + j]];
            sl->x[idx[a + j]] = t;
        }
    }
    free(start);
    free(idx);
    free(fill);
    return BL_OK;
}

size_t bl_model_slope_levels(const bl_model *m, bl_param param, size_t s)
{
    return (unsigned)param < BL_NPARAM && s < m->par[param].n_slopes ? m->par[param].slopes[s].n_levels : 0;
}

void bl_model_drop_slope_level(bl_model *m, bl_param param, size_t s, size_t level)
{
    if ((unsigned)param >= BL_NPARAM || s >= m->par[param].n_slopes) return;
    bl_slope_design *sl = &m->par[param].slopes[s];
    for (size_t k = 0; k < m->n; k++)
        if (sl->level[k] == level) sl->x[k] = sl->x_orig[k] = 0;
}

void bl_model_restore_slopes(bl_model *m)
{
    for (int p = 0; p < BL_NPARAM; p++)
        for (size_t s = 0; s < m->par[p].n_slopes; s++)
            memcpy(m->par[p].slopes[s].x, m->par[p].slopes[s].x_orig, m->n * sizeof(double));
}

/* Column space of a's design for parameter p inside b's? Least squares residual of every column of
 * X_a on X_b (LAPACKE dgels). *inside: 1 yes, 0 no. BL_ERR_NOMEM when memory ran out. */
static bl_status columns_inside(const bl_model *a, const bl_model *b, bl_param p, int *inside, bl_error *err)
{
    size_t ka, kb;
    double *Xa = param_matrix(a, p, &ka), *Xb = param_matrix(b, p, &kb), *B = NULL;
    bl_status st = BL_OK;
    *inside = 0;
    if (!Xa || !Xb) goto nomem;
    if (a->n != b->n || a->n < kb) goto done;
    if (!(B = malloc(a->n * ka * sizeof *B))) goto nomem;
    memcpy(B, Xa, a->n * ka * sizeof *B);
    lapack_int info = LAPACKE_dgels(LAPACK_ROW_MAJOR, 'N', (lapack_int)a->n, (lapack_int)kb, (lapack_int)ka, Xb,
                                    (lapack_int)kb, B, (lapack_int)ka);
    if (info == LAPACK_WORK_MEMORY_ERROR || info == LAPACK_TRANSPOSE_MEMORY_ERROR) goto nomem;
    if (info == 0) {
        *inside = 1;
        for (size_t j = 0; j < ka; j++) {
            double rss = 0, tss = 0;
            for (size_t i = kb; i < a->n; i++) rss += B[i * ka + j] * B[i * ka + j];
            for (size_t i = 0; i < a->n; i++) tss += Xa[i * ka + j] * Xa[i * ka + j];
            if (rss > 1e-16 * tss) *inside = 0;
        }
    }
    goto done;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory checking whether model '%s' is nested in '%s' (%s)", a->name,
                      b->name, bl_param_name(p));
done:
    free(B);
    free(Xa);
    free(Xb);
    return st;
}

bl_status bl_model_nested_in(const bl_model *a, const bl_model *b, int *nested, bl_error *err)
{
    *nested = 0;
    if (a->n != b->n) return BL_OK;
    for (size_t k = 0; k < a->n; k++)
        if (a->row[k] != b->row[k]) return BL_OK;
    for (int p = 0; p < BL_NPARAM; p++) {
        const bl_param_design *da = &a->par[p], *db = &b->par[p];
        if (!da->is_free && !db->is_free) {
            if (da->fixed != db->fixed) return BL_OK;
        } else if (da->is_free && !db->is_free) {
            return BL_OK;
        } else if (!da->is_free && db->is_free) {
            /* A fixed value is a constant on the link scale, which b's intercepts can take. */
            if (db->link == BL_LINK_LOG && !(da->fixed > 0)) return BL_OK;
        } else {
            if (da->link != db->link) return BL_OK;
            int inside = 0;
            bl_status st = columns_inside(a, b, p, &inside, err);
            if (st || !inside) return st;
        }
    }
    *nested = 1;
    return BL_OK;
}

bl_status bl_model_condition_cells(const bl_model *m, const bl_trials *trials, size_t **cell, size_t *n_cells,
                                   bl_error *err)
{
    size_t cap = 1;
    for (int p = 0; p < BL_NPARAM; p++) {
        cap += m->par[p].n_per;
        for (size_t s = 0; s < m->par[p].n_slopes; s++) cap += m->par[p].slopes[s].n_by;
    }
    char **cols = calloc(cap, sizeof *cols);
    if (!cols) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    size_t nc = 0;
#define ADD_COL(name)                                                                                                  \
    do {                                                                                                               \
        int dup_ = 0;                                                                                                  \
        for (size_t q_ = 0; q_ < nc; q_++)                                                                             \
            if (strcmp(cols[q_], (name)) == 0) dup_ = 1;                                                               \
        if (!dup_) cols[nc++] = (name);                                                                                \
    } while (0)
    for (int p = 0; p < BL_NPARAM; p++) {
        for (size_t i = 0; i < m->par[p].n_per; i++) ADD_COL(m->par[p].per[i]);
        for (size_t s = 0; s < m->par[p].n_slopes; s++)
            for (size_t i = 0; i < m->par[p].slopes[s].n_by; i++) ADD_COL(m->par[p].slopes[s].by[i]);
    }
#undef ADD_COL
    size_t *lev = NULL, n_lev = 0;
    char **names = NULL;
    bl_status st = make_levels(m, trials, cols, nc, "(permutation cells)", &lev, &names, &n_lev, err);
    free(cols);
    if (st) return st;
    free_strv(names, n_lev);
    /* Combine with the participant: cells are the (level, participant) pairs numbered by first appearance
     * (by sorting: a levels x participants map would grow with their product). */
    size_t *pair = malloc((m->n ? m->n : 1) * sizeof *pair), next = 0;
    if (!pair) {
        free(lev);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    st = bl_group_pairs(lev, m->participant, m->n, pair, &next, "permutation cells", err);
    free(lev);
    if (st) {
        free(pair);
        return st;
    }
    *cell = pair;
    *n_cells = next;
    return BL_OK;
}
