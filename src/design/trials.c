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
    return bl_error_set(err, BL_ERR_INPUT, "%s:1: column \"%s\" (study key %s) is not in the table; its columns are: %s",
                        t->path, col, key, list);
}

void bl_trials_exclude(bl_trials *t, size_t i, const char *reason)
{
    if (!t || i >= t->n || t->excluded[i]) return;
    t->excluded[i] = reason;
    t->n_kept--;
}

size_t bl_trials_exclusion_counts(const bl_trials *t, bl_exclusion_count **out)
{
    *out = NULL;
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
                return BL_EXCLUSION_COUNTS_NOMEM;
            }
            c = nc;
            c[n].reason = r;
            c[n].count = 0;
            n++;
        }
        c[k].count++;
    }
    *out = c;
    return n;
}

/* qsort has no context argument in C11; loading is not done from several threads at once on one table,
 * but keep the pointer thread-local anyway */
static _Thread_local const bl_trials *sort_trials;

static int cmp_trial(const void *a, const void *b)
{
    size_t i = *(const size_t *)a, j = *(const size_t *)b;
    const bl_trials *t = sort_trials;
    if (t->participant[i] != t->participant[j]) return t->participant[i] < t->participant[j] ? -1 : 1;
    return strcmp(t->trial_label[i], t->trial_label[j]);
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
    bl_trials *t = calloc(1, sizeof *t);
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
    size_t *count = calloc(n, sizeof *count);
    if (!t->rt || !t->upper || !t->drift_sign || !t->participant || !t->participants || !t->trial_label ||
        !t->excluded || !count)
        goto nomem;

    int c_part, c_rt, c_resp, c_stim = -1, c_trial = -1, c_onset = -1, dummy;
    if ((st = need_column(tab, study->trials.participant, "trials.participant", &c_part, err))) goto fail;
    if ((st = need_column(tab, study->trials.rt, "trials.rt", &c_rt, err))) goto fail;
    if ((st = need_column(tab, study->trials.response, "trials.response", &c_resp, err))) goto fail;
    if (study->trials.stimulus &&
        (st = need_column(tab, study->trials.stimulus, "trials.stimulus", &c_stim, err)))
        goto fail;
    if (study->trials.trial_given) {
        if ((st = need_column(tab, study->trials.trial, "trials.trial", &c_trial, err))) goto fail;
    } else if (study->trials.trial) {
        c_trial = bl_table_find(tab, study->trials.trial);
    }
    if (study->has_recordings &&
        (st = need_column(tab, study->recordings.onset, "recordings.onset", &c_onset, err)))
        goto fail;
    for (size_t k = 0; k < study->power.n_condition; k++)
        if ((st = need_column(tab, study->power.condition[k], "power.condition", &dummy, err))) goto fail;
    if (study->has_power)
        for (size_t b = 0; b < study->power.n_bands; b++) {
            const char *bn = study->power.bands[b].name;
            char pn[300];
            snprintf(pn, sizeof pn, "%s_power", bn);
            if (bl_table_find(tab, bn) >= 0 || bl_table_find(tab, pn) >= 0) {
                st = bl_error_set(err, BL_ERR_INPUT,
                                  "%s:1: the table already has a column \"%s\" or \"%s\", which band \"%s\" "
                                  "(power.bands.%s) would write; rename the band or the column",
                                  file, bn, pn, bn, bn);
                goto fail;
            }
        }

    const bl_column *part = &tab->cols[c_part], *rtc = &tab->cols[c_rt], *resp = &tab->cols[c_resp];
    size_t n_upper_rows = 0;
    for (size_t i = 0; i < n; i++) {
        t->drift_sign[i] = 1;
        t->rt[i] = NAN;
        const char *p = part->text[i];
        if (!p) {
            st = bl_error_set(err, BL_ERR_INPUT, "%s:%zu: column \"%s\" (field %d, trials.participant) is missing",
                              file, tab->line[i], part->name, c_part + 1);
            goto fail;
        }
        size_t k = 0;
        while (k < t->n_participants && strcmp(t->participants[k], p) != 0) k++;
        if (k == t->n_participants) {
            if (!(t->participants[k] = bl_strdup(p))) goto nomem;
            t->n_participants++;
        }
        t->participant[i] = k;
        count[k]++;

        if (c_trial >= 0 && tab->cols[c_trial].text[i]) {
            t->trial_label[i] = bl_strdup(tab->cols[c_trial].text[i]);
        } else {
            char buf[32];
            snprintf(buf, sizeof buf, "%zu", count[k]);
            t->trial_label[i] = bl_strdup(buf);
        }
        if (!t->trial_label[i]) goto nomem;

        const char *r = rtc->text[i];
        if (!r) {
            bl_trials_exclude(t, i, "missing rt");
        } else {
            double x;
            if (!to_number(r, &x)) {
                st = bl_error_set(err, BL_ERR_INPUT, "%s:%zu: column \"%s\" (field %d, trials.rt): '%s' is not a number",
                                  file, tab->line[i], rtc->name, c_rt + 1, r);
                goto fail;
            }
            if (x < 0) {
                st = bl_error_set(err, BL_ERR_INPUT, "%s:%zu: column \"%s\" (field %d, trials.rt): negative response time %s",
                                  file, tab->line[i], rtc->name, c_rt + 1, r);
                goto fail;
            }
            t->rt[i] = study->trials.rt_in_ms ? x / 1000.0 : x;
        }
        const char *v = resp->text[i];
        if (!v) {
            bl_trials_exclude(t, i, "missing response");
        } else {
            t->upper[i] = value_in(v, study->trials.upper, study->trials.n_upper);
            n_upper_rows += (size_t)t->upper[i];
        }
        if (c_stim >= 0) {
            const char *s = tab->cols[c_stim].text[i];
            if (!s) bl_trials_exclude(t, i, "missing stimulus");
            else t->drift_sign[i] = value_in(s, study->trials.upper, study->trials.n_upper) ? 1 : -1;
        }
        if (!isnan(t->rt[i])) {
            if (!isnan(study->trials.rt_min) && t->rt[i] < study->trials.rt_min) bl_trials_exclude(t, i, "rt < keep.rt_min");
            if (!isnan(study->trials.rt_max) && t->rt[i] > study->trials.rt_max) bl_trials_exclude(t, i, "rt > keep.rt_max");
        }
        if (c_onset >= 0 && !tab->cols[c_onset].text[i]) bl_trials_exclude(t, i, "missing onset");
    }
    /* distinct response values: more than two usually means the wrong column or coding */
    {
        const char *seen[3];
        size_t n_seen = 0;
        for (size_t i = 0; i < n && n_seen < 3; i++) {
            const char *v = resp->text[i];
            if (!v) continue;
            size_t k = 0;
            while (k < n_seen && strcmp(seen[k], v) != 0) k++;
            if (k == n_seen) seen[n_seen++] = v;
        }
        if (n_seen > 2)
            bl_warnings_add(warn, "%s: column %s has more than two values (%s, %s, %s, ...); every value not listed in "
                            "trials.upper is coded as the lower boundary", file, resp->name, seen[0], seen[1], seen[2]);
    }
    /* the same trial label twice within a participant makes power.csv and trials.csv ambiguous */
    {
        size_t *idx = malloc(n * sizeof *idx);
        if (idx) {
            for (size_t i = 0; i < n; i++) idx[i] = i;
            sort_trials = t;
            qsort(idx, n, sizeof *idx, cmp_trial);
            size_t dup = 0;
            for (size_t k = 1; k < n; k++)
                if (cmp_trial(&idx[k - 1], &idx[k]) == 0 && dup++ == 0)
                    bl_warnings_add(warn, "%s: participant %s has trial %s twice (lines %zu and %zu)", file,
                                    t->participants[t->participant[idx[k]]], t->trial_label[idx[k]],
                                    tab->line[idx[k - 1] < idx[k] ? idx[k - 1] : idx[k]],
                                    tab->line[idx[k - 1] < idx[k] ? idx[k] : idx[k - 1]]);
            if (dup > 1) bl_warnings_add(warn, "%s: %zu more repeated trial labels", file, dup - 1);
            free(idx);
        }
    }
    if (n_upper_rows == 0)
        bl_warnings_add(warn, "%s: no trial has a %s value listed in trials.upper, so every response is coded as the "
                        "lower boundary", file, resp->name);
    if (t->n_kept == 0)
        bl_warnings_add(warn, "%s: every trial is excluded by the keep rules or missing values", file);
    free(count);
    *out = t;
    return BL_OK;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory loading trials");
fail:
    free(count);
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
