/* Channel selections resolved per recording: names from the header, bipolar pairs of names, units. */
#include "signal/channels.h"
#include "core/strutil.h"
#include "design/table.h"

#include <sys/stat.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

double bl_unit_volts(const char *u)
{
    if (!u) return NAN;
    while (*u == ' ') u++;
    size_t n = strlen(u);
    while (n > 0 && u[n - 1] == ' ') n--;
    char s[16];
    if (n == 0 || n >= sizeof s) return NAN;
    memcpy(s, u, n);
    s[n] = '\0';
    if (strcmp(s, "V") == 0 || strcasecmp(s, "volt") == 0 || strcasecmp(s, "volts") == 0) return 1.0;
    if (strcmp(s, "mV") == 0) return 1e-3;
    if (strcmp(s, "nV") == 0) return 1e-9;
    if (strcmp(s, "uV") == 0 || strcmp(s, "\xc2\xb5V") == 0 || strcmp(s, "\xce\xbcV") == 0 || strcmp(s, "\xb5V") == 0)
        return 1e-6;
    return NAN;
}

/* 0-based index of a channel given by name or 1-based number, or -1. */
static int lookup(const bl_trace *t, const char *s, size_t len)
{
    size_t channels = bl_trace_get_info(t)->channels;
    for (size_t c = 0; c < channels; c++) {
        const char *name = bl_trace_channel_name(t, c);
        if (name && strlen(name) == len && strncmp(name, s, len) == 0) return (int)c;
    }
    if (len == 0 || len > 6 || strspn(s, "0123456789") < len) return -1;
    long v = strtol(s, NULL, 10);
    return v >= 1 && (size_t)v <= channels ? (int)v - 1 : -1;
}

static bl_status unknown(const bl_trace *t, const char *key, size_t i, const char *spec, bl_error *err)
{
    const bl_trace_info *info = bl_trace_get_info(t);
    char list[400];
    size_t len = 0;
    list[0] = '\0';
    for (size_t c = 0; c < info->channels && len + 40 < sizeof list; c++) {
        const char *name = bl_trace_channel_name(t, c);
        len += (size_t)snprintf(list + len, sizeof list - len, "%s%s", c ? ", " : "", name ? name : "(unnamed)");
        if (c + 1 < info->channels && len + 40 >= sizeof list) snprintf(list + len, sizeof list - len, ", ...");
    }
    if (!bl_trace_channel_name(t, 0))
        return bl_error_set(err, BL_ERR_INPUT,
                            "key \"%s[%zu]\": \"%s\": %s names no channels (%s); use numbers 1 to %zu", key, i, spec,
                            bl_trace_path(t), info->format, info->channels);
    return bl_error_set(err, BL_ERR_INPUT, "key \"%s[%zu]\": no channel \"%s\" in %s; its channels are: %s", key, i,
                        spec, bl_trace_path(t), list);
}

/* Multiplier taking channel c into `unit`; *first_unit remembers the first channel's unit for "au". */
static bl_status channel_factor(const bl_trace *t, int c, const char *key, size_t i, const char *unit, double gain,
                                const char **first_unit, double *w, bl_error *err)
{
    const char *cu = bl_trace_channel_unit(t, (size_t)c);
    *w = gain;
    if (!cu) return BL_OK;
    const char *name = bl_trace_channel_name(t, (size_t)c);
    double target = bl_unit_volts(unit), have = bl_unit_volts(cu);
    if (isnan(target)) { /* "au": values in the file's own unit, which must be the same for every channel */
        if (*first_unit && strcmp(*first_unit, cu) != 0)
            return bl_error_set(err, BL_ERR_INPUT,
                                "key \"%s[%zu]\": channel %s of %s is in \"%s\" but another selected "
                                "channel is in \"%s\"; set recordings.unit (e.g. \"uV\") to convert both",
                                key, i, name ? name : "?", bl_trace_path(t), cu, *first_unit);
        *first_unit = cu;
        return BL_OK;
    }
    if (isnan(have))
        return bl_error_set(err, BL_ERR_INPUT,
                            "key \"%s[%zu]\": channel %s of %s is in \"%s\", which cannot be converted to "
                            "recordings.unit \"%s\"; use \"au\" to keep the file's values",
                            key, i, name ? name : "?", bl_trace_path(t), cu, unit);
    *w = gain * have / target;
    return BL_OK;
}

/* Entry i: whole name, else "<a>-<b>" split at the one '-' where both sides are channels. */
static bl_status resolve_entry(const bl_montage *m, const bl_trace *t, const char *key, size_t i, int *pos, int *neg,
                               bl_error *err)
{
    if (!m->name || !m->name[i]) {
        *pos = m->pos[i];
        *neg = m->neg[i];
        size_t channels = bl_trace_get_info(t)->channels;
        if ((size_t)(*pos + 1) > channels || (size_t)(*neg + 1) > channels)
            return bl_error_set(err, BL_ERR_INPUT,
                                "key \"%s[%zu]\": %s has %zu channel%s, so channel %d does not exist", key, i,
                                bl_trace_path(t), channels, channels == 1 ? "" : "s",
                                (size_t)(*pos + 1) > channels ? *pos + 1 : *neg + 1);
        return BL_OK;
    }
    const char *s = m->name[i];
    size_t len = strlen(s);
    if ((*pos = lookup(t, s, len)) >= 0) {
        *neg = -1;
        return BL_OK;
    }
    int found = 0;
    for (const char *d = strchr(s, '-'); d; d = strchr(d + 1, '-')) {
        int a = lookup(t, s, (size_t)(d - s)), b = lookup(t, d + 1, strlen(d + 1));
        if (a >= 0 && b >= 0) {
            if (found++) {
                return bl_error_set(err, BL_ERR_INPUT,
                                    "key \"%s[%zu]\": \"%s\" splits into two channel pairs in %s; "
                                    "rename the channels or use numbers",
                                    key, i, s, bl_trace_path(t));
            }
            *pos = a;
            *neg = b;
        }
    }
    if (!found) return unknown(t, key, i, s, err);
    if (*pos == *neg)
        return bl_error_set(err, BL_ERR_INPUT, "key \"%s[%zu]\": \"%s\" subtracts a channel from itself", key, i, s);
    return BL_OK;
}

/* BIDS: "<stem>_eeg.edf" has "<stem>_channels.tsv" beside it; a channel named in the study and marked
 * status "bad" there is refused (a numbered channel is the user's explicit choice and passes). */
static bl_status refuse_bad(const bl_montage *m, const bl_montage *r, const bl_trace *t, const char *key, bl_error *err)
{
    if (!m->name) return BL_OK;
    const char *path = bl_trace_path(t), *slash = strrchr(path, '/'), *base = slash ? slash + 1 : path;
    const char *us = strrchr(base, '_');
    if (!us) return BL_OK;
    size_t keep = (size_t)(us - path);
    char *sidecar = malloc(keep + 16);
    if (!sidecar) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    memcpy(sidecar, path, keep);
    strcpy(sidecar + keep, "_channels.tsv");
    struct stat sb;
    bl_table *tab = NULL;
    bl_status st = BL_OK;
    if (stat(sidecar, &sb) != 0 || (st = bl_table_read(sidecar, &tab, err))) goto done;
    int cn = bl_table_find(tab, "name"), cs = bl_table_find(tab, "status"),
        cd = bl_table_find(tab, "status_description");
    if (cn < 0) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: no column \"name\" (BIDS channels.tsv)", sidecar);
        goto done;
    }
    for (size_t i = 0; i < m->n && cs >= 0 && !st; i++) {
        if (!m->name[i]) continue;
        int chans[2] = {r->pos[i], r->neg[i]};
        for (int k = 0; k < 2 && !st; k++) {
            const char *name = chans[k] >= 0 ? bl_trace_channel_name(t, (size_t)chans[k]) : NULL;
            for (size_t row = 0; name && row < tab->n_rows && !st; row++) {
                const char *nm = tab->cols[cn].text[row], *status = tab->cols[cs].text[row];
                if (nm && status && strcmp(nm, name) == 0 && strcmp(status, "bad") == 0)
                    st = bl_error_set(err, BL_ERR_INPUT,
                                      "key \"%s[%zu]\": channel \"%s\" is marked bad in %s:%zu%s%s%s", key, i, name,
                                      sidecar, tab->line[row], cd >= 0 && tab->cols[cd].text[row] ? " (" : "",
                                      cd >= 0 && tab->cols[cd].text[row] ? tab->cols[cd].text[row] : "",
                                      cd >= 0 && tab->cols[cd].text[row] ? ")" : "");
            }
        }
    }
done:
    bl_table_destroy(tab);
    free(sidecar);
    return st;
}

bl_status bl_montage_resolve(const bl_montage *m, const bl_trace *t, const char *key, const char *unit, double gain,
                             bl_montage **out, bl_error *err)
{
    *out = NULL;
    bl_montage *r = calloc(1, sizeof *r);
    size_t n = m->n;
    if (!r || !(r->pos = malloc(n * sizeof *r->pos)) || !(r->neg = malloc(n * sizeof *r->neg)) ||
        !(r->wpos = malloc(n * sizeof *r->wpos)) || !(r->wneg = malloc(n * sizeof *r->wneg))) {
        bl_montage_destroy(r);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    r->n = n;
    const char *first_unit = NULL;
    bl_status st = BL_OK;
    for (size_t i = 0; i < n && !st; i++) {
        if ((st = resolve_entry(m, t, key, i, &r->pos[i], &r->neg[i], err))) break;
        st = channel_factor(t, r->pos[i], key, i, unit, gain, &first_unit, &r->wpos[i], err);
        r->wneg[i] = 0;
        if (!st && r->neg[i] >= 0) st = channel_factor(t, r->neg[i], key, i, unit, gain, &first_unit, &r->wneg[i], err);
    }
    if (!st) st = refuse_bad(m, r, t, key, err);
    if (st) {
        bl_montage_destroy(r);
        return st;
    }
    *out = r;
    return BL_OK;
}

void bl_montage_apply_entry(const bl_montage *m, size_t k, const double *x, size_t frames, size_t channels, double *out)
{
    double wp = m->wpos ? m->wpos[k] : 1.0, wn = m->wneg ? m->wneg[k] : 1.0;
    const double *p = x + m->pos[k];
    if (m->neg[k] < 0) {
        for (size_t f = 0; f < frames; f++) out[f] = wp * p[f * channels];
        return;
    }
    const double *q = x + m->neg[k];
    for (size_t f = 0; f < frames; f++) out[f] = wp * p[f * channels] - wn * q[f * channels];
}
