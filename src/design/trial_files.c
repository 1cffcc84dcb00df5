/* One trial table from many files: {placeholder} patterns, BIDS file lists, "<name>.*" recordings. */
#include "design/trial_files.h"
#include "design/study.h"
#include "design/events_files.h"
#include "core/strutil.h"

#include <dirent.h>
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>

bl_trial_sources *bl_trial_sources_create(const char *const *keys, size_t n_keys)
{
    bl_trial_sources *s = calloc(1, sizeof *s);
    if (!s || (n_keys && !(s->key = calloc(n_keys, sizeof *s->key)))) {
        free(s);
        return NULL;
    }
    s->n_keys = n_keys;
    for (size_t k = 0; k < n_keys; k++)
        if (!(s->key[k] = bl_strdup(keys[k]))) {
            bl_trial_sources_destroy(s);
            return NULL;
        }
    return s;
}

int bl_trial_sources_add(bl_trial_sources *s, const char *path, const char *const *values)
{
    char **np = realloc(s->path, (s->n + 1) * sizeof *np);
    if (!np) return 0;
    s->path = np;
    s->path[s->n] = NULL;
    char **nv = realloc(s->value, (s->n + 1) * (s->n_keys ? s->n_keys : 1) * sizeof *nv);
    if (!nv) return 0;
    s->value = nv;
    for (size_t k = 0; k < s->n_keys; k++) s->value[s->n * s->n_keys + k] = NULL;
    s->n++;
    if (!(s->path[s->n - 1] = bl_strdup(path))) return 0;
    for (size_t k = 0; k < s->n_keys; k++)
        if (values[k] && !(s->value[(s->n - 1) * s->n_keys + k] = bl_strdup(values[k]))) return 0;
    return 1;
}

void bl_trial_sources_destroy(bl_trial_sources *s)
{
    if (!s) return;
    for (size_t i = 0; i < s->n; i++) {
        free(s->path[i]);
        for (size_t k = 0; k < s->n_keys; k++) free(s->value[i * s->n_keys + k]);
    }
    for (size_t k = 0; k < s->n_keys; k++) free(s->key[k]);
    free(s->path);
    free(s->value);
    free(s->first_row);
    free(s->key);
    free(s);
}

/* ---- glob with {placeholders} ---- */

typedef struct {
    bl_trial_sources *s;
    char **seg; /* pattern segments */
    size_t n_seg;
    char *vals[16]; /* current value of each key */
    int nomem;
} glob_state;

static int key_index(const bl_trial_sources *s, const char *name, size_t len)
{
    for (size_t k = 0; k < s->n_keys; k++)
        if (strlen(s->key[k]) == len && strncmp(s->key[k], name, len) == 0) return (int)k;
    return -1;
}

/* Match one segment template against a name, binding placeholders (backtracking). */
static int match(glob_state *g, const char *t, const char *n)
{
    if (!*t) return !*n;
    if (*t != '{') return *t == *n && match(g, t + 1, n + 1);
    const char *close = strchr(t, '}');
    int k = key_index(g->s, t + 1, (size_t)(close - t - 1));
    if (g->vals[k]) { /* bound earlier in the path: must repeat */
        size_t len = strlen(g->vals[k]);
        return strncmp(n, g->vals[k], len) == 0 && match(g, close + 1, n + len);
    }
    for (size_t len = strlen(n); len >= 1; len--) {
        char *v = malloc(len + 1);
        if (!v) {
            g->nomem = 1;
            return 0;
        }
        memcpy(v, n, len);
        v[len] = '\0';
        g->vals[k] = v;
        if (match(g, close + 1, n + len)) return 1;
        g->vals[k] = NULL;
        free(v);
    }
    return 0;
}

static int cmp_str(const void *a, const void *b) { return strcmp(*(char *const *)a, *(char *const *)b); }

static void walk(glob_state *g, const char *dir, size_t depth)
{
    if (g->nomem) return;
    if (depth == g->n_seg) {
        struct stat sb;
        if (stat(dir, &sb) == 0 && S_ISREG(sb.st_mode) &&
            !bl_trial_sources_add(g->s, dir, (const char *const *)g->vals))
            g->nomem = 1;
        return;
    }
    const char *seg = g->seg[depth];
    size_t dl = strlen(dir);
    if (!strchr(seg, '{')) {
        char *next = malloc(dl + strlen(seg) + 2);
        if (!next) {
            g->nomem = 1;
            return;
        }
        sprintf(next, "%s%s%s", dir, dl && dir[dl - 1] != '/' ? "/" : "", seg);
        walk(g, next, depth + 1);
        free(next);
        return;
    }
    DIR *d = opendir(dl ? dir : ".");
    if (!d) return;
    char **names = NULL;
    size_t n = 0;
    struct dirent *e;
    while ((e = readdir(d))) {
        if (e->d_name[0] == '.') continue;
        char **nn = realloc(names, (n + 1) * sizeof *nn);
        if (!nn || !(nn[n] = bl_strdup(e->d_name))) {
            if (nn) names = nn;
            g->nomem = 1;
            break;
        }
        names = nn;
        n++;
    }
    closedir(d);
    qsort(names, n, sizeof *names, cmp_str); /* deterministic order, whatever the file system's */
    for (size_t i = 0; i < n && !g->nomem; i++) {
        char *saved[16];
        memcpy(saved, g->vals, sizeof saved);
        if (match(g, seg, names[i])) {
            char *next = malloc(dl + strlen(names[i]) + 2);
            if (!next) g->nomem = 1;
            else {
                sprintf(next, "%s%s%s", dir, dl && dir[dl - 1] != '/' ? "/" : "", names[i]);
                walk(g, next, depth + 1);
                free(next);
            }
        }
        for (size_t k = 0; k < g->s->n_keys; k++)
            if (g->vals[k] != saved[k]) free(g->vals[k]);
        memcpy(g->vals, saved, sizeof saved);
    }
    for (size_t i = 0; i < n; i++) free(names[i]);
    free(names);
}

bl_status bl_trial_sources_glob(const char *pattern, bl_trial_sources **out, bl_error *err)
{
    *out = NULL;
    const char *keys[16];
    char names[16][64];
    size_t n_keys = 0;
    for (const char *p = strchr(pattern, '{'); p; p = strchr(p + 1, '{')) {
        const char *close = strchr(p, '}');
        size_t len = close ? (size_t)(close - p - 1) : 0;
        if (!close || len == 0 || len >= sizeof names[0] || memchr(p + 1, '/', len) || memchr(p + 1, '{', len))
            return bl_error_set(err, BL_ERR_INPUT, "key \"trials.file\": \"%s\" has a malformed {placeholder}",
                                pattern);
        if (close[1] == '{')
            return bl_error_set(err, BL_ERR_INPUT,
                                "key \"trials.file\": \"%s\": two placeholders side by side cannot be "
                                "told apart",
                                pattern);
        memcpy(names[n_keys], p + 1, len);
        names[n_keys][len] = '\0';
        int seen = 0;
        for (size_t k = 0; k < n_keys; k++) seen |= strcmp(keys[k], names[n_keys]) == 0;
        if (seen) continue;
        if (n_keys == 16)
            return bl_error_set(err, BL_ERR_INPUT, "key \"trials.file\": \"%s\" has more than 16 placeholders",
                                pattern);
        keys[n_keys] = names[n_keys];
        n_keys++;
    }
    glob_state g;
    memset(&g, 0, sizeof g);
    char *copy = bl_strdup(pattern);
    if (!copy || !(g.s = bl_trial_sources_create(keys, n_keys)) ||
        !(g.seg = calloc(strlen(pattern) + 1, sizeof *g.seg))) {
        free(copy);
        bl_trial_sources_destroy(g.s);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    char *save = NULL;
    for (char *t = strtok_r(copy, "/", &save); t; t = strtok_r(NULL, "/", &save)) g.seg[g.n_seg++] = t;
    walk(&g, pattern[0] == '/' ? "/" : "", 0);
    free(g.seg);
    free(copy);
    if (g.nomem) {
        bl_trial_sources_destroy(g.s);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory matching %s", pattern);
    }
    if (g.s->n == 0) {
        bl_trial_sources_destroy(g.s);
        return bl_error_set(err, BL_ERR_INPUT, "key \"trials.file\": no file matches \"%s\"", pattern);
    }
    *out = g.s;
    return BL_OK;
}

/* ---- stacking the files into one table ---- */

static void csv_field(FILE *m, const char *v)
{
    fputc('"', m);
    for (const char *p = v ? v : ""; *p; p++) {
        if (*p == '"') fputc('"', m);
        fputc(*p, m);
    }
    fputc('"', m);
}

const char *bl_trial_sources_file_of(const bl_trial_sources *s, size_t row)
{
    if (!s || !s->first_row) return NULL;
    for (size_t i = 0; i < s->n; i++)
        if (row < s->first_row[i + 1]) return s->path[i];
    return NULL;
}

bl_status bl_trial_sources_read(bl_trial_sources *s, const char *name, const char *const *required, bl_table **out,
                                bl_error *err)
{
    *out = NULL;
    bl_status st = BL_OK;
    bl_table **tabs = calloc(s->n ? s->n : 1, sizeof *tabs);
    char *text = NULL;
    size_t text_len = 0;
    FILE *m = NULL;
    if (!tabs) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    for (size_t i = 0; i < s->n && !st; i++) {
        if ((st = bl_events_file_kind(s->path[i]) ? bl_events_table_read(s->path[i], &tabs[i], err)
                                                  : bl_table_read(s->path[i], &tabs[i], err)))
            break;
        for (size_t r = 0; required && required[r] && !st; r++)
            if (bl_table_find(tabs[i], required[r]) < 0)
                st = bl_error_set(err, BL_ERR_INPUT, "%s: no column \"%s\" (every trial file needs it)", s->path[i],
                                  required[r]);
        const bl_table *first = tabs[0];
        for (size_t c = 0; c < first->n_cols && !st; c++) /* one set of columns across files */
            if (bl_table_find(tabs[i], first->cols[c].name) < 0)
                st = bl_error_set(err, BL_ERR_INPUT, "%s: no column \"%s\", which %s has", s->path[i],
                                  first->cols[c].name, s->path[0]);
        for (size_t c = 0; c < tabs[i]->n_cols && !st; c++)
            if (bl_table_find(first, tabs[i]->cols[c].name) < 0)
                st = bl_error_set(err, BL_ERR_INPUT,
                                  "%s: column \"%s\" is not in %s; every trial file needs the same "
                                  "columns",
                                  s->path[i], tabs[i]->cols[c].name, s->path[0]);
    }
    if (st) goto done;
    /* the stacked table goes through the CSV parser once, so numeric columns are detected as usual */
    if (!(m = open_memstream(&text, &text_len))) goto nomem;
    const bl_table *first = tabs[0];
    int *add_key = calloc(s->n_keys ? s->n_keys : 1, sizeof *add_key);
    if (!add_key) goto nomem;
    size_t n_rows = 0;
    for (size_t c = 0; c < first->n_cols; c++) {
        if (c) fputc(',', m);
        csv_field(m, first->cols[c].name);
    }
    for (size_t k = 0; k < s->n_keys; k++)
        if ((add_key[k] = bl_table_find(first, s->key[k]) < 0)) {
            fputc(',', m);
            csv_field(m, s->key[k]);
        }
    fputc('\n', m);
    for (size_t i = 0; i < s->n; i++) {
        const bl_table *t = tabs[i];
        for (size_t r = 0; r < t->n_rows; r++, n_rows++) {
            for (size_t c = 0; c < first->n_cols; c++) {
                if (c) fputc(',', m);
                csv_field(m, t->cols[bl_table_find(t, first->cols[c].name)].text[r]);
            }
            for (size_t k = 0; k < s->n_keys; k++)
                if (add_key[k]) {
                    fputc(',', m);
                    csv_field(m, s->value[i * s->n_keys + k]);
                }
            fputc('\n', m);
        }
    }
    free(add_key);
    if (fclose(m) != 0) {
        m = NULL;
        goto nomem;
    }
    m = NULL;
    if ((st = bl_table_parse(text, text_len, name, out, err))) goto done;
    /* rows keep their own file's line numbers */
    free(s->first_row);
    if (!(s->first_row = calloc(s->n + 1, sizeof *s->first_row))) goto nomem;
    for (size_t i = 0, row = 0; i < s->n; i++) {
        s->first_row[i] = row;
        for (size_t r = 0; r < tabs[i]->n_rows && row < (*out)->n_rows; r++) (*out)->line[row++] = tabs[i]->line[r];
        s->first_row[i + 1] = row;
    }
    (void)n_rows;
    goto done;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory stacking the trial files");
done:
    if (m) fclose(m);
    free(text);
    for (size_t i = 0; i < s->n; i++) bl_table_destroy(tabs[i]);
    free(tabs);
    return st;
}

/* Extensions that are parts of a recording read through another file, or sidecars. */
static int companion(const char *ext)
{
    static const char *const skip[] = {".vmrk", ".eeg", ".json", ".tsv", ".fdt", ".txt", NULL};
    for (size_t i = 0; skip[i]; i++)
        if (strcasecmp(ext, skip[i]) == 0) return 1;
    return 0;
}

bl_status bl_resolve_any_extension(const char *path, char **out, bl_error *err)
{
    *out = NULL;
    size_t len = strlen(path);
    const char *slash = strrchr(path, '/');
    size_t dir_len = slash ? (size_t)(slash - path) : 0;
    const char *stem = slash ? slash + 1 : path;
    size_t stem_len = strlen(stem) - 2; /* without ".*" */
    char *dir = malloc(dir_len + 2);
    if (!dir) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    if (slash) {
        memcpy(dir, path, dir_len);
        dir[dir_len] = '\0';
        if (!dir_len) strcpy(dir, "/");
    } else strcpy(dir, ".");
    DIR *d = opendir(dir);
    if (!d) {
        bl_status st = bl_error_set(err, BL_ERR_INPUT, "key \"recordings.file\": \"%s\": cannot open the folder %s: %s",
                                    path, dir, strerror(errno));
        free(dir);
        return st;
    }
    char found[2][256];
    size_t n = 0;
    struct dirent *e;
    while ((e = readdir(d))) {
        const char *nm = e->d_name;
        if (strncmp(nm, stem, stem_len) != 0 || nm[stem_len] != '.' || strchr(nm + stem_len + 1, '.') ||
            companion(nm + stem_len))
            continue;
        if (n < 2) snprintf(found[n], sizeof found[n], "%s", nm);
        n++;
    }
    closedir(d);
    free(dir);
    if (n != 1)
        return bl_error_set(err, BL_ERR_INPUT,
                            "key \"recordings.file\": \"%s\" matches %zu recordings%s%s%s%s; exactly "
                            "one is needed",
                            path, n, n ? " (" : "", n ? found[0] : "", n > 1 ? ", " : "", n > 1 ? found[1] : "");
    char *r = malloc(len + strlen(found[0]));
    if (!r) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    memcpy(r, path, len - strlen(stem));
    strcpy(r + len - strlen(stem), found[0]);
    *out = r;
    return BL_OK;
}

/* ---- BIDS ---- */

/* a + "/" + b into buf; 0 (buf emptied) when it does not fit */
static int join(char *buf, size_t size, const char *a, const char *b)
{
    int n = snprintf(buf, size, "%s/%s", a, b);
    if (n < 0 || (size_t)n >= size) {
        buf[0] = '\0';
        return 0;
    }
    return 1;
}

typedef struct {
    char *events, *sub, *ses, *run, *recording; /* recording: path relative to the root */
} bids_entry;

typedef struct {
    bids_entry *e;
    size_t n;
    const char *root, *task;
    int nomem;
    bl_status st;
    bl_error *err;
} bids_scan;

static char **sorted_entries(const char *dir, size_t *n, int *nomem)
{
    *n = 0;
    DIR *d = opendir(dir);
    if (!d) return NULL;
    char **names = NULL;
    struct dirent *e;
    while ((e = readdir(d))) {
        if (e->d_name[0] == '.') continue;
        char **nn = realloc(names, (*n + 1) * sizeof *nn);
        if (!nn || !(nn[*n] = bl_strdup(e->d_name))) {
            if (nn) names = nn;
            *nomem = 1;
            break;
        }
        names = nn;
        (*n)++;
    }
    closedir(d);
    if (names) qsort(names, *n, sizeof *names, cmp_str);
    return names;
}

/* The value of entity `key` ("ses", "run") in a BIDS file name, or NULL. */
static char *entity(const char *name, const char *key)
{
    size_t kl = strlen(key);
    for (const char *p = name; p && *p; p = strchr(p, '_'), p = p ? p + 1 : NULL)
        if (strncmp(p, key, kl) == 0 && p[kl] == '-') {
            const char *v = p + kl + 1;
            size_t len = strcspn(v, "_.");
            char *r = malloc(len + 1);
            if (r) {
                memcpy(r, v, len);
                r[len] = '\0';
            }
            return r;
        }
    return NULL;
}

/* One datatype folder (…/eeg or …/ieeg): its events files of the task and their recordings. */
static void scan_datatype(bids_scan *b, const char *rel, const char *datatype)
{
    char dir[4096], want[300];
    if (!join(dir, sizeof dir, b->root, rel)) return;
    snprintf(want, sizeof want, "_task-%s_", b->task);
    size_t n;
    char **names = sorted_entries(dir, &n, &b->nomem);
    for (size_t i = 0; i < n && !b->nomem && !b->st; i++) {
        const char *nm = names[i];
        size_t len = strlen(nm);
        if (strncmp(nm, "sub-", 4) != 0 || len < 12 || strcmp(nm + len - 11, "_events.tsv") != 0 || !strstr(nm, want))
            continue;
        char stem[4200], *recording = NULL;
        snprintf(stem, sizeof stem, "%s/%.*s_%s.*", dir, (int)(len - 11), nm, datatype);
        bl_error e = {0};
        if ((b->st = bl_resolve_any_extension(stem, &recording, &e))) {
            bl_error_set(b->err, b->st, "%s/%s: no single recording beside it (%s)", dir, nm, e.message);
            break;
        }
        bids_entry *ne = realloc(b->e, (b->n + 1) * sizeof *ne);
        if (!ne) {
            free(recording);
            b->nomem = 1;
            break;
        }
        b->e = ne;
        bids_entry *x = &b->e[b->n++];
        memset(x, 0, sizeof *x);
        x->events = malloc(strlen(dir) + len + 2);
        if (x->events) sprintf(x->events, "%s/%s", dir, nm);
        x->sub = entity(nm, "sub");
        x->ses = entity(nm, "ses");
        x->run = entity(nm, "run");
        x->recording = malloc(strlen(rel) + strlen(recording) + 2);
        const char *base = strrchr(recording, '/') ? strrchr(recording, '/') + 1 : recording;
        if (x->recording) sprintf(x->recording, "%s/%s", rel, base);
        free(recording);
        if (!x->events || !x->sub || !x->recording) b->nomem = 1;
    }
    for (size_t i = 0; i < n; i++) free(names[i]);
    free(names);
}

/* <root>/sub-<label>/[ses-<label>/]{eeg,ieeg}/ */
static void scan_subject(bids_scan *b, const char *rel)
{
    static const char *const types[] = {"eeg", "ieeg"};
    char path[4096];
    for (size_t t = 0; t < 2 && !b->st && !b->nomem; t++) {
        if (!join(path, sizeof path, rel, types[t])) return;
        scan_datatype(b, path, types[t]);
    }
    if (!join(path, sizeof path, b->root, rel)) return;
    size_t n;
    char **names = sorted_entries(path, &n, &b->nomem);
    for (size_t i = 0; i < n && !b->st && !b->nomem; i++)
        if (strncmp(names[i], "ses-", 4) == 0 && strchr(rel, '/') == NULL) {
            char sub[4096];
            if (join(sub, sizeof sub, rel, names[i])) scan_subject(b, sub);
        }
    for (size_t i = 0; i < n; i++) free(names[i]);
    free(names);
}

static void bids_free(bids_scan *b)
{
    for (size_t i = 0; i < b->n; i++) {
        free(b->e[i].events);
        free(b->e[i].sub);
        free(b->e[i].ses);
        free(b->e[i].run);
        free(b->e[i].recording);
    }
    free(b->e);
}

/* The scan's files with participant, session, run, bids_recording and participants.tsv's columns. */
static bl_status bids_sources(const bl_study *study, bl_trial_sources **out, bl_error *err)
{
    *out = NULL;
    bids_scan b = {NULL, 0, study->bids.root, study->bids.task, 0, BL_OK, err};
    bl_table *parts = NULL;
    bl_status st = BL_OK;
    size_t n;
    char **subs = sorted_entries(study->bids.root, &n, &b.nomem);
    if (!subs && !b.nomem)
        return bl_error_set(err, BL_ERR_INPUT, "key \"bids.root\": cannot open the folder %s", study->bids.root);
    for (size_t i = 0; i < n && !b.st && !b.nomem; i++)
        if (strncmp(subs[i], "sub-", 4) == 0) scan_subject(&b, subs[i]);
    for (size_t i = 0; i < n; i++) free(subs[i]);
    free(subs);
    if (b.nomem) st = bl_error_set(err, BL_ERR_NOMEM, "out of memory scanning %s", study->bids.root);
    else if (b.st) st = b.st;
    else if (b.n == 0)
        st = bl_error_set(err, BL_ERR_INPUT, "key \"bids\": no sub-*/[ses-*/]eeg|ieeg/*_task-%s_*events.tsv in %s",
                          study->bids.task, study->bids.root);
    char ppath[4096];
    join(ppath, sizeof ppath, study->bids.root, "participants.tsv");
    struct stat sb;
    int pid = -1;
    if (!st && stat(ppath, &sb) == 0) {
        if (!(st = bl_table_read(ppath, &parts, err)) && (pid = bl_table_find(parts, "participant_id")) < 0)
            st = bl_error_set(err, BL_ERR_INPUT, "%s: no column \"participant_id\"", ppath);
    }
    const char *keys[64];
    size_t nk = 0, has_ses = 0, has_run = 0;
    for (size_t i = 0; i < b.n; i++) has_ses |= b.e[i].ses != NULL, has_run |= b.e[i].run != NULL;
    keys[nk++] = "participant";
    keys[nk++] = "bids_recording";
    if (has_ses) keys[nk++] = "session";
    if (has_run) keys[nk++] = "run";
    size_t first_part = nk;
    for (size_t c = 0; parts && c < parts->n_cols && nk < 64; c++)
        if ((int)c != pid) keys[nk++] = parts->cols[c].name;
    bl_trial_sources *s = st ? NULL : bl_trial_sources_create(keys, nk);
    if (!st && !s) st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    for (size_t i = 0; !st && i < b.n; i++) {
        const char *vals[64] = {b.e[i].sub, b.e[i].recording};
        size_t k = 2;
        if (has_ses) vals[k++] = b.e[i].ses;
        if (has_run) vals[k++] = b.e[i].run;
        long row = -1;
        for (size_t r = 0; parts && r < parts->n_rows; r++) {
            const char *id = parts->cols[pid].text[r];
            if (id && (strcmp(id, b.e[i].sub) == 0 || (strncmp(id, "sub-", 4) == 0 && strcmp(id + 4, b.e[i].sub) == 0)))
                row = (long)r;
        }
        for (size_t c = 0, j = first_part; parts && c < parts->n_cols && j < nk; c++)
            if ((int)c != pid) vals[j++] = row >= 0 ? parts->cols[c].text[row] : NULL;
        if (!bl_trial_sources_add(s, b.e[i].events, vals)) st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    bl_table_destroy(parts);
    bids_free(&b);
    if (st) {
        bl_trial_sources_destroy(s);
        return st;
    }
    *out = s;
    return BL_OK;
}

/* trials.split: "left/easy" into the named columns. */
static bl_status split_columns(const bl_study *study, bl_table *t, const bl_trial_sources *files, bl_error *err)
{
    for (size_t i = 0; i < study->split.n; i++) {
        int c = bl_table_find(t, study->split.column[i]);
        if (c < 0)
            return bl_error_set(err, BL_ERR_INPUT, "key \"trials.split.%s\": no such column in %s",
                                study->split.column[i], t->path);
        size_t parts = study->split.n_into[i];
        char **cells = calloc(t->n_rows * parts + 1, sizeof *cells);
        if (!cells) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        bl_status st = BL_OK;
        for (size_t r = 0; r < t->n_rows && !st; r++) {
            const char *v = t->cols[c].text[r];
            size_t got = 0;
            for (const char *p = v; p && got < parts + 1; got++) {
                const char *slash = strchr(p, '/');
                size_t len = slash ? (size_t)(slash - p) : strlen(p);
                if (got < parts && !(cells[got * t->n_rows + r] = strndup(p, len)))
                    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
                p = slash ? slash + 1 : NULL;
            }
            if (!st && v && got != parts)
                st = bl_error_set(err, BL_ERR_INPUT,
                                  "%s:%zu: column \"%s\" value \"%s\" has %zu part%s separated by '/', "
                                  "but trials.split.%s names %zu",
                                  files ? bl_trial_sources_file_of(files, r) : t->path, t->line[r],
                                  study->split.column[i], v, got, got == 1 ? "" : "s", study->split.column[i], parts);
        }
        for (size_t k = 0; k < parts && !st; k++)
            st = bl_table_add_text(t, study->split.into[i][k], (const char *const *)cells + k * t->n_rows, err);
        for (size_t k = 0; k < t->n_rows * parts; k++) free(cells[k]);
        free(cells);
        if (st) return st;
    }
    return BL_OK;
}

bl_status bl_trial_table_load(const bl_study *study, bl_table **out, bl_trial_sources **files, bl_error *err)
{
    *out = NULL;
    *files = NULL;
    bl_status st;
    const char *file = study->trials.file;
    int bids = study->bids.root && strcmp(file, study->bids.root) == 0;
    if (!bids && !strchr(file, '{')) {
        if ((st = bl_events_file_kind(file) ? bl_events_table_read(file, out, err) : bl_table_read(file, out, err)))
            return st;
    } else {
        static const char *const need_onset[] = {"onset", NULL};
        if ((st = bids ? bids_sources(study, files, err) : bl_trial_sources_glob(file, files, err))) return st;
        if ((st = bl_trial_sources_read(*files, file, bids ? need_onset : NULL, out, err))) goto fail;
    }
    if ((st = split_columns(study, *out, *files, err))) goto fail;
    return BL_OK;
fail:
    bl_table_destroy(*out);
    *out = NULL;
    bl_trial_sources_destroy(*files);
    *files = NULL;
    return st;
}
