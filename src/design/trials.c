/* The trial table coded for analysis: RT in seconds, upper/lower boundary, drift sign, participant,
 * trial label, and exclusion reasons (rows are never dropped, so every output keeps one row per trial).
 *
 * Coding (docs/study-file.md): the boundary is "upper" when the `response` cell equals one of the
 * `upper` values (text match, or numeric match when both parse as numbers: "1" == "1.0"). With
 * `stimulus` set (stimulus coding), the same `upper` list names the stimulus values for which the
 * drift is positive; other stimulus values flip the drift's sign.
 */
#include "design/trials.h"
#include "design/study.h"
#include "core/groups.h"
#include "design/trial_files.h"
#include "core/strutil.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int to_number(const char *s, double *x)
{
    char *end;
    while (*s == ' ') s++;
    if (!*s) return 0;
    *x = strtod(s, &end);
    while (*end == ' ') end++;
    if (*end || !isfinite(*x)) return 0;
    for (const char *p = s; p < end; p++)
        if (*p == 'x' || *p == 'X' || *p == 'n' || *p == 'N' || *p == 'i' || *p == 'I') return 0;
    return 1;
}

static int value_in(const char *v, char *const *list, size_t n)
{
    double x, y;
    int xnum = to_number(v, &x);
    for (size_t i = 0; i < n; i++) {
        if (strcmp(v, list[i]) == 0) return 1;
        if (xnum && to_number(list[i], &y) && x == y) return 1;
    }
    return 0;
}

static bl_status need_column(const bl_table *t, const char *col, const char *key, int *index, bl_error *err)
{
    *index = bl_table_find(t, col);
    if (*index >= 0) return BL_OK;
    char list[600] = "";
    for (size_t j = 0; j < t->n_cols; j++) {
        size_t l = strlen(list);
        if (l > sizeof list - 80) {
            snprintf(list + l, sizeof list - l, ", ...");
            break;
        }
        snprintf(list + l, sizeof list - l, "%s%s", j ? ", " : "", t->cols[j].name);
    }
    return bl_error_set(err, BL_ERR_INPUT,
                        "%s:1: column \"%s\" (study key %s) is not in the table; its columns are: %s", t->path, col,
                        key, list);
}

void bl_trials_exclude(bl_trials *t, size_t i, const char *reason)
{
    if (!t || i >= t->n || t->excluded[i]) return;
    t->excluded[i] = reason;
    t->n_kept--;
}

bl_status bl_trials_exclusion_counts(const bl_trials *t, bl_exclusion_count **out, size_t *n_out, bl_error *err)
{
    *out = NULL;
    *n_out = 0;
    size_t n = 0;
    bl_exclusion_count *c = NULL;
    for (size_t i = 0; i < t->n; i++) {
        const char *r = t->excluded[i];
        if (!r) continue;
        size_t k = 0;
        while (k < n && strcmp(c[k].reason, r) != 0) k++;
        if (k == n) {
            bl_exclusion_count *nc = realloc(c, (n + 1) * sizeof *nc);
            if (!nc) {
                free(c);
                return bl_error_set(err, BL_ERR_NOMEM, "out of memory counting exclusion reasons");
            }
            c = nc;
            c[n].reason = r;
            c[n].count = 0;
            n++;
        }
        c[k].count++;
    }
    *out = c;
    *n_out = n;
    return BL_OK;
}

/* qsort has no context argument in C11; loading is not done from several threads at once on one table,
 * but keep the pointer thread-local anyway */
/* power.csv holds participant, trial, the table's columns, <band>_power and <band> per band, and
 * artifact: refuse, before any work, a name that two of these would share. */
static bl_status check_power_columns(const struct bl_study *study, const bl_table *tab, bl_error *err)
{
    size_t nb = study->power.n_bands, n = 0;
    char(*name)[300] = malloc((3 + 2 * nb) * sizeof *name);
    char(*what)[340] = malloc((3 + 2 * nb) * sizeof *what);
    bl_status st = BL_OK;
    if (!name || !what) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory checking the power.csv columns");
        goto done;
    }
    snprintf(name[n], sizeof name[n], "participant"),
        snprintf(what[n++], sizeof what[0], "power.csv's participant column");
    snprintf(name[n], sizeof name[n], "trial"), snprintf(what[n++], sizeof what[0], "power.csv's trial column");
    snprintf(name[n], sizeof name[n], "artifact"), snprintf(what[n++], sizeof what[0], "power.csv's artifact column");
    for (size_t b = 0; b < nb; b++) {
        const char *bn = study->power.bands[b].name;
        snprintf(name[n], sizeof name[n], "%s_power", bn);
        snprintf(what[n++], sizeof what[0], "the raw power of band \"%s\" (power.bands.%s)", bn, bn);
        snprintf(name[n], sizeof name[n], "%s", bn);
        snprintf(what[n++], sizeof what[0], "the regressor of band \"%s\" (power.bands.%s)", bn, bn);
    }
    for (size_t i = 0; i < n && !st; i++)
        for (size_t k = i + 1; k < n && !st; k++)
            if (strcmp(name[i], name[k]) == 0)
                st = bl_error_set(err, BL_ERR_INPUT,
                                  "%s: %s and %s would both be the power.csv column \"%s\"; rename "
                                  "the band",
                                  study->path, what[i], what[k], name[i]);
    for (size_t j = 0; j < tab->n_cols && !st; j++) {
        const char *cn = tab->cols[j].name;
        /* the table's own participant and trial columns are written once, as the leading columns */
        if (strcmp(cn, "participant") == 0 && strcmp(study->trials.participant, "participant") == 0) continue;
        if (strcmp(cn, "trial") == 0 && study->trials.trial && strcmp(study->trials.trial, "trial") == 0) continue;
        for (size_t i = 0; i < n && !st; i++)
            if (strcmp(cn, name[i]) == 0)
                st = bl_error_set(err, BL_ERR_INPUT,
                                  "%s:1: column \"%s\" of the trial table and %s would both be the "
                                  "power.csv column \"%s\"; rename the column",
                                  tab->path, cn, what[i], cn);
    }
done:
    free(name);
    free(what);
    return st;
}

/* Up to six distinct values of a column, quoted, into list. */
static void list_values(const bl_table *tab, const bl_column *col, char *list, size_t size)
{
    const char *seen[6];
    size_t n_seen = 0;
    int more = 0;
    list[0] = '\0';
    for (size_t i = 0; i < tab->n_rows && !more; i++) {
        const char *v = col->text[i];
        if (!v) continue;
        size_t k = 0;
        while (k < n_seen && strcmp(seen[k], v) != 0) k++;
        if (k < n_seen) continue;
        if (n_seen < 6) seen[n_seen++] = v;
        else more = 1;
    }
    for (size_t k = 0; k < n_seen; k++)
        snprintf(list + strlen(list), size - strlen(list), "%s\"%.60s\"", k ? ", " : "", seen[k]);
    if (!n_seen) snprintf(list, size, "none");
    if (more) snprintf(list + strlen(list), size - strlen(list), ", ...");
}

/* Some row of col holds v (as text, or as the same number: value_in's rule). */
static int column_has(const bl_table *tab, const bl_column *col, const char *v)
{
    char *const one[1] = {(char *)v};
    for (size_t i = 0; i < tab->n_rows; i++)
        if (col->text[i] && value_in(col->text[i], one, 1)) return 1;
    return 0;
}

/* trials.upper values must occur: ["Right"] against a column holding "right" would otherwise code every
 * response as the lower boundary without a word. Each value must be in the response column (or, with
 * stimulus coding, in the stimulus column), and each coded column must hold at least one of them. */
static bl_status check_upper_values(const struct bl_study *study, const bl_table *tab, const bl_column *resp,
                                    const bl_column *stim, const char *file, bl_error *err)
{
    char list[400], list2[400];
    const bl_column *cols[2] = {resp, stim};
    const char *keys[2] = {"trials.response", "trials.stimulus"};
    for (size_t u = 0; u < study->trials.n_upper; u++) {
        const char *want = study->trials.upper[u];
        if (column_has(tab, resp, want) || (stim && column_has(tab, stim, want))) continue;
        list_values(tab, resp, list, sizeof list);
        if (stim) list_values(tab, stim, list2, sizeof list2);
        return bl_error_set(err, BL_ERR_INPUT,
                            "%s: trials.upper value \"%s\" matches no row of column \"%s\"%s%s%s; values present: "
                            "%s%s%s (compared as text, case included, or as numbers)",
                            file, want, resp->name, stim ? " or \"" : "", stim ? stim->name : "", stim ? "\"" : "",
                            list, stim ? "; in the stimulus column: " : "", stim ? list2 : "");
    }
    for (int c = 0; c < 2; c++) {
        if (!cols[c]) continue;
        int any = 0;
        for (size_t u = 0; u < study->trials.n_upper && !any; u++)
            any = column_has(tab, cols[c], study->trials.upper[u]);
        if (any) continue;
        list_values(tab, cols[c], list, sizeof list);
        return bl_error_set(err, BL_ERR_INPUT,
                            "%s: no row of column \"%s\" (%s) holds a trials.upper value; values present: %s "
                            "(compared as text, case included, or as numbers)",
                            file, cols[c]->name, keys[c], list);
    }
    return BL_OK;
}

static int cmp_double(const void *a, const void *b)
{
    double u = *(const double *)a, v = *(const double *)b;
    return (u > v) - (u < v);
}

/* RTs in milliseconds read as seconds (or the reverse) still fit, to absurd parameters: warn when the
 * median kept RT is outside 0.05-20 s (human and animal choice RTs lie well inside). */
static void warn_rt_scale(const struct bl_study *study, const bl_trials *t, const char *file, const char *col,
                          bl_warnings *warn)
{
    double *rt = malloc((t->n ? t->n : 1) * sizeof *rt);
    size_t m = 0;
    if (!rt) { /* a check that could not run is a lost warning: the writers then refuse (out of memory) */
        if (warn) warn->lost++;
        return;
    }
    for (size_t i = 0; i < t->n; i++)
        if (!t->excluded[i] && isfinite(t->rt[i])) rt[m++] = t->rt[i];
    if (m) {
        qsort(rt, m, sizeof *rt, cmp_double);
        double med = m % 2 ? rt[m / 2] : 0.5 * (rt[m / 2 - 1] + rt[m / 2]);
        if (med > 20 || med < 0.05)
            bl_warnings_add(warn,
                            "%s: the median response time in column %s is %.6g s (trials.rt_unit \"%s\"); RTs "
                            "are usually 0.05-20 s: is trials.rt_unit right?",
                            file, col, med, study->trials.rt_in_ms ? "ms" : "s");
    }
    free(rt);
}

static _Thread_local const bl_trials *sort_trials;

static int cmp_trial(const void *a, const void *b)
{
    size_t i = *(const size_t *)a, j = *(const size_t *)b;
    const bl_trials *t = sort_trials;
    if (t->participant[i] != t->participant[j]) return t->participant[i] < t->participant[j] ? -1 : 1;
    return strcmp(t->trial_label[i], t->trial_label[j]);
}

/* Column indices of the trial table that the study names (-1: not used). */
typedef struct {
    int part, rt, resp, stim, trial, onset;
} trial_columns;

/* Every column the study names must exist, and no band may write over a column of the table. */
static bl_status find_columns(const struct bl_study *study, const bl_table *tab, trial_columns *c, bl_error *err)
{
    bl_status st;
    int dummy;
    c->stim = c->trial = c->onset = -1;
    if ((st = need_column(tab, study->trials.participant, "trials.participant", &c->part, err))) return st;
    if ((st = need_column(tab, study->trials.rt, "trials.rt", &c->rt, err))) return st;
    if ((st = need_column(tab, study->trials.response, "trials.response", &c->resp, err))) return st;
    if (study->trials.stimulus && (st = need_column(tab, study->trials.stimulus, "trials.stimulus", &c->stim, err)))
        return st;
    if (study->trials.trial_given) {
        if ((st = need_column(tab, study->trials.trial, "trials.trial", &c->trial, err))) return st;
    } else if (study->trials.trial) {
        c->trial = bl_table_find(tab, study->trials.trial);
    }
    if (study->has_recordings && (st = need_column(tab, study->recordings.onset, "recordings.onset", &c->onset, err)))
        return st;
    for (size_t k = 0; k < study->power.n_condition; k++)
        if ((st = need_column(tab, study->power.condition[k], "power.condition", &dummy, err))) return st;
    for (size_t b = 0; study->has_power && b < study->power.n_bands; b++) {
        const char *bn = study->power.bands[b].name;
        char pn[300];
        snprintf(pn, sizeof pn, "%s_power", bn);
        if (bl_table_find(tab, bn) >= 0 || bl_table_find(tab, pn) >= 0)
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s:1: the table already has a column \"%s\" or \"%s\", which band \"%s\" "
                                "(power.bands.%s) would write; rename the band or the column",
                                tab->path, bn, pn, bn, bn);
    }
    return BL_OK;
}

/* Participant index and trial label of row i (count[k]: rows of participant k so far; part_id[i]: the
 * participant's number by first appearance, from bl_group_strings). */
static bl_status code_participant(bl_trials *t, const trial_columns *c, size_t i, const size_t *part_id, size_t *count,
                                  bl_error *err)
{
    const bl_table *tab = t->table;
    const bl_column *part = &tab->cols[c->part];
    const char *p = part->text[i];
    if (!p)
        return bl_error_set(err, BL_ERR_INPUT, "%s:%zu: column \"%s\" (field %d, trials.participant) is missing",
                            tab->path, tab->line[i], part->name, c->part + 1);
    size_t k = part_id[i]; /* numbered by first appearance: a new participant is the next number */
    if (k == t->n_participants) {
        if (!(t->participants[k] = bl_strdup(p)))
            return bl_error_set(err, BL_ERR_NOMEM, "out of memory loading trials");
        t->n_participants++;
    }
    t->participant[i] = k;
    count[k]++;
    if (c->trial >= 0 && tab->cols[c->trial].text[i]) {
        t->trial_label[i] = bl_strdup(tab->cols[c->trial].text[i]);
    } else {
        char buf[32];
        snprintf(buf, sizeof buf, "%zu", count[k]);
        t->trial_label[i] = bl_strdup(buf);
    }
    if (!t->trial_label[i]) return bl_error_set(err, BL_ERR_NOMEM, "out of memory loading trials");
    return BL_OK;
}

/* RT (seconds), choice, stimulus sign and exclusion reasons of row i. */
static bl_status code_response(const struct bl_study *study, bl_trials *t, const trial_columns *c, size_t i,
                               size_t *n_upper_rows, bl_error *err)
{
    const bl_table *tab = t->table;
    const bl_column *rtc = &tab->cols[c->rt], *resp = &tab->cols[c->resp];
    t->drift_sign[i] = 1;
    t->rt[i] = NAN;
    const char *r = rtc->text[i];
    if (!r) {
        bl_trials_exclude(t, i, "missing rt");
    } else {
        double x;
        if (!to_number(r, &x))
            return bl_error_set(err, BL_ERR_INPUT, "%s:%zu: column \"%s\" (field %d, trials.rt): '%s' is not a number",
                                tab->path, tab->line[i], rtc->name, c->rt + 1, r);
        if (x < 0)
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s:%zu: column \"%s\" (field %d, trials.rt): negative response time %s", tab->path,
                                tab->line[i], rtc->name, c->rt + 1, r);
        t->rt[i] = study->trials.rt_in_ms ? x / 1000.0 : x;
    }
    const char *v = resp->text[i];
    if (!v) {
        bl_trials_exclude(t, i, "missing response");
    } else {
        t->upper[i] = value_in(v, study->trials.upper, study->trials.n_upper);
        *n_upper_rows += (size_t)t->upper[i];
    }
    if (c->stim >= 0) {
        const char *s = tab->cols[c->stim].text[i];
        if (!s) bl_trials_exclude(t, i, "missing stimulus");
        else t->drift_sign[i] = value_in(s, study->trials.upper, study->trials.n_upper) ? 1 : -1;
    }
    if (!isnan(t->rt[i])) {
        if (!isnan(study->trials.rt_min) && t->rt[i] < study->trials.rt_min)
            bl_trials_exclude(t, i, "rt < keep.rt_min");
        if (!isnan(study->trials.rt_max) && t->rt[i] > study->trials.rt_max)
            bl_trials_exclude(t, i, "rt > keep.rt_max");
    }
    if (c->onset >= 0 && !tab->cols[c->onset].text[i]) bl_trials_exclude(t, i, "missing onset");
    return BL_OK;
}

/* More than two distinct response values usually means the wrong column or coding. */
static void warn_response_values(const bl_table *tab, const bl_column *resp, bl_warnings *warn)
{
    const char *seen[3];
    size_t n_seen = 0;
    for (size_t i = 0; i < tab->n_rows && n_seen < 3; i++) {
        const char *v = resp->text[i];
        if (!v) continue;
        size_t k = 0;
        while (k < n_seen && strcmp(seen[k], v) != 0) k++;
        if (k == n_seen) seen[n_seen++] = v;
    }
    if (n_seen > 2)
        bl_warnings_add(warn,
                        "%s: column %s has more than two values (%s, %s, %s, ...); every value not listed in "
                        "trials.upper is coded as the lower boundary",
                        tab->path, resp->name, seen[0], seen[1], seen[2]);
}

/* The same trial label twice within a participant makes power.csv and trials.csv ambiguous. */
static void warn_repeated_labels(const bl_trials *t, bl_warnings *warn)
{
    const bl_table *tab = t->table;
    size_t n = t->n;
    size_t *idx = malloc(n * sizeof *idx);
    if (!idx) { /* a check that could not run is a lost warning: the writers then refuse (out of memory) */
        if (warn) warn->lost++;
        return;
    }
    for (size_t i = 0; i < n; i++) idx[i] = i;
    sort_trials = t;
    qsort(idx, n, sizeof *idx, cmp_trial);
    size_t dup = 0;
    for (size_t k = 1; k < n; k++)
        if (cmp_trial(&idx[k - 1], &idx[k]) == 0 && dup++ == 0)
            bl_warnings_add(warn, "%s: participant %s has trial %s twice (lines %zu and %zu)", tab->path,
                            t->participants[t->participant[idx[k]]], t->trial_label[idx[k]],
                            tab->line[idx[k - 1] < idx[k] ? idx[k - 1] : idx[k]],
                            tab->line[idx[k - 1] < idx[k] ? idx[k] : idx[k - 1]]);
    if (dup > 1) bl_warnings_add(warn, "%s: %zu more repeated trial labels", tab->path, dup - 1);
    free(idx);
}

/* The trials around a read table (which they own from then on, even on failure), arrays allocated. */
/* Takes ownership of tab and files (freed on failure too). */
static bl_status trials_alloc(bl_table *tab, bl_trial_sources *files, bl_trials **out, bl_error *err)
{
    size_t n = tab->n_rows;
    bl_trials *t = calloc(1, sizeof *t);
    *out = t;
    if (!t) {
        bl_table_destroy(tab);
        bl_trial_sources_destroy(files);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory loading trials");
    }
    t->table = tab;
    t->files = files;
    t->n = t->n_kept = n;
    t->rt = malloc(n * sizeof *t->rt);
    t->upper = calloc(n, sizeof *t->upper);
    t->drift_sign = malloc(n * sizeof *t->drift_sign);
    t->participant = calloc(n, sizeof *t->participant);
    t->participants = calloc(n, sizeof *t->participants);
    t->trial_label = calloc(n, sizeof *t->trial_label);
    t->excluded = calloc(n, sizeof *t->excluded);
    if (!t->rt || !t->upper || !t->drift_sign || !t->participant || !t->participants || !t->trial_label || !t->excluded)
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory loading trials");
    return BL_OK;
}

bl_status bl_trials_load(const struct bl_study *study, bl_trials **out, bl_warnings *warn, bl_error *err)
{
    *out = NULL;
    bl_table *tab = NULL;
    bl_trial_sources *files = NULL;
    bl_status st = bl_trial_table_load(study, &tab, &files, err); /* one file, a pattern, or a BIDS tree */
    if (st) return st;
    const char *file = tab->path;
    if (tab->n_rows == 0) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: the trial table is empty (a header row but no trials)", file);
        bl_table_destroy(tab);
        bl_trial_sources_destroy(files);
        return st;
    }
    size_t n = tab->n_rows;
    bl_trials *t = NULL;
    size_t *count = NULL, *part_id = NULL, n_part_ids = 0;
    trial_columns c;
    if ((st = trials_alloc(tab, files, &t, err))) goto fail;
    if (!(count = calloc(n, sizeof *count)) || !(part_id = malloc(n * sizeof *part_id))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory loading trials");
        goto fail;
    }
    if ((st = find_columns(study, tab, &c, err))) goto fail;
    if (study->has_power && (st = check_power_columns(study, tab, err))) goto fail;
    if ((st = bl_group_strings((const char *const *)tab->cols[c.part].text, n, part_id, &n_part_ids, "participants",
                               err)))
        goto fail;
    size_t n_upper_rows = 0;
    for (size_t i = 0; i < n; i++)
        if ((st = code_participant(t, &c, i, part_id, count, err)) ||
            (st = code_response(study, t, &c, i, &n_upper_rows, err)))
            goto fail;
    const bl_column *resp = &tab->cols[c.resp];
    warn_response_values(tab, resp, warn);
    warn_repeated_labels(t, warn);
    if ((st = check_upper_values(study, tab, resp, c.stim >= 0 ? &tab->cols[c.stim] : NULL, file, err))) goto fail;
    warn_rt_scale(study, t, file, tab->cols[c.rt].name, warn);
    if (t->n_kept == 0) bl_warnings_add(warn, "%s: every trial is excluded by the keep rules or missing values", file);
    free(count);
    free(part_id);
    *out = t;
    return BL_OK;
fail:
    free(count);
    free(part_id);
    bl_trials_destroy(t);
    return st;
}

void bl_trials_destroy(bl_trials *t)
{
    if (!t) return;
    bl_trial_sources_destroy(t->files);
    if (t->trial_label)
        for (size_t i = 0; i < t->n; i++) free(t->trial_label[i]);
    if (t->participants)
        for (size_t i = 0; i < t->n_participants; i++) free(t->participants[i]);
    free(t->trial_label);
    free(t->participants);
    free(t->rt);
    free(t->upper);
    free(t->drift_sign);
    free(t->participant);
    free((void *)t->excluded);
    bl_table_destroy(t->table);
    free(t);
}
