/* Results folders written whole or not at all.
 *
 * Everything is written into a hidden temporary folder beside the target; only a complete folder is moved
 * into place. Replacing an existing folder uses renameat2(RENAME_EXCHANGE) (Linux >= 3.15) so the old folder
 * stays whole until the swap; elsewhere the old folder is renamed aside first and restored if the second
 * rename fails. A run killed part-way leaves only the hidden folder, which the next run removes once its
 * process is gone.
 *
 * Ownership: every folder bandlink writes carries a marker file (BL_RESULTS_MARKER) listing each entry it
 * wrote. --force replaces a folder only when it is empty or holds nothing but the entries of its marker
 * (a folder nested inside that is itself a marked results folder counts as bandlink's), so a thesis folder
 * given by mistake is never deleted.
 */
#define _GNU_SOURCE 1 /* renameat2, RENAME_EXCHANGE */
#include "core/output.h"
#include "core/strutil.h"

#include <dirent.h>
#include <errno.h>
#include <fcntl.h>
#include <ftw.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

/* A joined path, or NULL when memory ran out (the caller reports it where it checks). */
static char *joined(const char *dir, const char *name)
{
    char *p = NULL;
    return bl_path_join(dir, name, &p, NULL) == BL_OK ? p : NULL;
}

struct bl_results_folder {
    char *target;
    char *temp;
    char *command;
    int replace; /* the target existed */
};

static int remove_entry(const char *path, const struct stat *sb, int type, struct FTW *ftw)
{
    (void)sb;
    (void)ftw;
    return (type == FTW_DP ? rmdir(path) : unlink(path)) != 0 ? -1 : 0;
}

bl_status bl_remove_tree(const char *path, bl_error *err)
{
    struct stat sb;
    if (lstat(path, &sb) != 0)
        return errno == ENOENT ? BL_OK : bl_error_set(err, BL_ERR_IO, "%s: %s", path, strerror(errno));
    if (nftw(path, remove_entry, 16, FTW_DEPTH | FTW_PHYS) != 0)
        return bl_error_set(err, BL_ERR_IO, "%s: cannot remove: %s", path, strerror(errno));
    return BL_OK;
}

bl_status bl_path_inside(const char *path, const char *folder, int *inside, bl_error *err)
{
    *inside = 0;
    errno = 0;
    char *p = realpath(path, NULL);
    int nomem = !p && errno == ENOMEM;
    errno = 0;
    char *f = realpath(folder, NULL);
    nomem = nomem || (!f && errno == ENOMEM);
    if (p && f) {
        size_t n = strlen(f);
        *inside = strncmp(p, f, n) == 0 && (p[n] == '\0' || p[n] == '/' || (n == 1 && f[0] == '/'));
    }
    free(p);
    free(f);
    return nomem ? bl_error_set(err, BL_ERR_NOMEM, "out of memory resolving %s", path) : BL_OK;
}

/* Split "a/b/name" into a newly allocated parent ("a/b", or ".") and a pointer to the name. */
static char *parent_of(const char *path, const char **name)
{
    size_t n = strlen(path);
    while (n > 1 && path[n - 1] == '/') n--;
    size_t k = n;
    while (k > 0 && path[k - 1] != '/') k--;
    *name = path + k;
    if (k == 0) return bl_strdup(".");
    char *p = malloc(k + 1);
    if (!p) return NULL;
    memcpy(p, path, k);
    p[k] = '\0';
    if (k > 1) p[k - 1] = '\0'; /* drop the trailing slash, but keep "/" */
    return p;
}

/* Remove ".<name>.partial-<pid>-*" folders whose process no longer exists. */
static void remove_stale(const char *parent, const char *name)
{
    DIR *d = opendir(parent);
    if (!d) return;
    char prefix[512];
    int np = snprintf(prefix, sizeof prefix, ".%s.partial-", name);
    if (np < 0 || (size_t)np >= sizeof prefix) {
        closedir(d);
        return;
    }
    struct dirent *e;
    while ((e = readdir(d))) {
        if (strncmp(e->d_name, prefix, (size_t)np) != 0) continue;
        long pid = strtol(e->d_name + np, NULL, 10);
        if (pid <= 0 || pid == (long)getpid()) continue;
        if (kill((pid_t)pid, 0) == 0 || errno == EPERM) continue; /* still running */
        char *p = joined(parent, e->d_name);
        if (p) bl_remove_tree(p, NULL);
        free(p);
    }
    closedir(d);
}

/* ---- The marker: which entries bandlink wrote. ---- */

typedef struct {
    char **entry; /* relative paths; folders end in '/' */
    size_t n, cap;
} entry_list;

static void entries_free(entry_list *l)
{
    for (size_t i = 0; i < l->n; i++) free(l->entry[i]);
    free(l->entry);
    memset(l, 0, sizeof *l);
}

static int entries_add(entry_list *l, const char *rel)
{
    if (l->n == l->cap) {
        size_t cap = l->cap ? 2 * l->cap : 32;
        char **e = realloc(l->entry, cap * sizeof *e);
        if (!e) return -1;
        l->entry = e;
        l->cap = cap;
    }
    if (!(l->entry[l->n] = bl_strdup(rel))) return -1;
    l->n++;
    return 0;
}

static int entries_has(const entry_list *l, const char *rel)
{
    for (size_t i = 0; i < l->n; i++)
        if (strcmp(l->entry[i], rel) == 0) return 1;
    return 0;
}

/* Read the marker of `dir`: 1 and the list when present and well-formed, 0 when absent, -1 on NOMEM. */
static int marker_read(const char *dir, entry_list *l)
{
    char *path = joined(dir, BL_RESULTS_MARKER);
    if (!path) return -1;
    FILE *f = fopen(path, "r");
    free(path);
    if (!f) return errno == ENOMEM ? -1 : 0;
    char line[4096];
    int ok = 0, first = 1;
    while (fgets(line, sizeof line, f)) {
        size_t n = strcspn(line, "\r\n");
        line[n] = '\0';
        if (first) {
            ok = strncmp(line, "bandlink results folder", 23) == 0;
            first = 0;
            if (!ok) break;
            continue;
        }
        if (line[0] && entries_add(l, line) != 0) {
            fclose(f);
            return -1;
        }
    }
    fclose(f);
    return ok;
}

/* Walk `dir` (relative prefix `rel`); the first entry not in `l` goes into *foreign (caller frees).
 * A subfolder that is itself a marked results folder holding only its own entries is accepted whole. */
static int check_owned(const char *dir, const char *rel, const entry_list *l, char **foreign);

static int owned_folder(const char *dir, char **foreign)
{
    entry_list own = {0};
    int m = marker_read(dir, &own);
    if (m <= 0) {
        entries_free(&own);
        return m < 0 ? -1 : 0;
    }
    int r = check_owned(dir, "", &own, foreign);
    entries_free(&own);
    return r;
}

static int check_owned(const char *dir, const char *rel, const entry_list *l, char **foreign)
{
    DIR *d = opendir(dir);
    if (!d) return errno == ENOMEM ? -1 : 0;
    struct dirent *e;
    int result = 1;
    while (result == 1 && (e = readdir(d))) {
        if (!strcmp(e->d_name, ".") || !strcmp(e->d_name, "..")) continue;
        if (!rel[0] && !strcmp(e->d_name, BL_RESULTS_MARKER)) continue;
        size_t n = strlen(rel) + strlen(e->d_name) + 2;
        char *r = malloc(n), *full = joined(dir, e->d_name);
        struct stat sb;
        if (!r || !full) {
            result = -1;
        } else if (lstat(full, &sb) != 0) {
            result = errno == ENOENT ? 1 : 0;
        } else if (S_ISDIR(sb.st_mode)) {
            snprintf(r, n, "%s%s/", rel, e->d_name);
            if (entries_has(l, r)) result = check_owned(full, r, l, foreign);
            else if ((result = owned_folder(full, foreign)) == 0 && !*foreign) *foreign = bl_strdup(r);
        } else {
            snprintf(r, n, "%s%s", rel, e->d_name);
            if (!entries_has(l, r)) result = 0;
        }
        if (result == 0 && !*foreign && r) *foreign = bl_strdup(r);
        free(r);
        free(full);
    }
    closedir(d);
    return result;
}

/* Entries written into the staging folder, for the marker. */
static int list_written(const char *dir, const char *rel, entry_list *l)
{
    DIR *d = opendir(dir);
    if (!d) return -1;
    struct dirent *e;
    int rc = 0;
    while (rc == 0 && (e = readdir(d))) {
        if (!strcmp(e->d_name, ".") || !strcmp(e->d_name, "..")) continue;
        size_t n = strlen(rel) + strlen(e->d_name) + 2;
        char *r = malloc(n), *full = joined(dir, e->d_name);
        struct stat sb;
        if (!r || !full || lstat(full, &sb) != 0) {
            rc = -1;
        } else if (S_ISDIR(sb.st_mode)) {
            snprintf(r, n, "%s%s/", rel, e->d_name);
            rc = entries_add(l, r);
            /* A nested results folder keeps its own marker. */
            char *m = rc == 0 ? joined(full, BL_RESULTS_MARKER) : NULL;
            if (rc == 0 && !m) rc = -1;
            if (rc == 0 && access(m, F_OK) != 0) rc = list_written(full, r, l);
            free(m);
        } else {
            snprintf(r, n, "%s%s", rel, e->d_name);
            rc = entries_add(l, r);
        }
        free(r);
        free(full);
    }
    closedir(d);
    return rc;
}

static int cmp_str(const void *a, const void *b) { return strcmp(*(char *const *)a, *(char *const *)b); }

static bl_status marker_write(const char *dir, const char *command, bl_error *err)
{
    entry_list l = {0};
    bl_outfile *o = NULL;
    char *path = joined(dir, BL_RESULTS_MARKER);
    bl_status st;
    if (!path || list_written(dir, "", &l) != 0) {
        st = bl_error_set(err, BL_ERR_NOMEM, "%s: cannot list the results written", dir);
        goto done;
    }
    qsort(l.entry, l.n, sizeof *l.entry, cmp_str); /* same bytes for the same results */
    if ((st = bl_outfile_open(path, &o, err))) goto done;
    FILE *f = bl_outfile_stream(o);
    fprintf(f,
            "bandlink results folder, written by `bandlink %s`. `--force` replaces this folder only while it "
            "holds nothing but the entries below.\n",
            command);
    for (size_t i = 0; i < l.n; i++) fprintf(f, "%s\n", l.entry[i]);
    st = bl_outfile_commit(o, err);
    o = NULL;
done:
    bl_outfile_abort(o);
    entries_free(&l);
    free(path);
    return st;
}

/* ---- Checking the target before any work ---- */

/* The target itself: a name, not a link, and replaceable when it exists. */
static bl_status check_target(const char *target, const char *name, const char *parent, int force, char **foreign_out,
                              bl_error *err)
{
    char *foreign = NULL;
    struct stat sb;
    bl_status st = BL_OK;
    if (!name[0] || !strcmp(name, ".") || !strcmp(name, "..")) {
        st = bl_error_set(err, BL_ERR_USAGE, "'%s' cannot be used as an output folder; name a new folder", target);
    } else if (lstat(target, &sb) == 0 && S_ISLNK(sb.st_mode)) {
        st = bl_error_set(err, BL_ERR_USAGE,
                          "the output folder %s is a symbolic link; give the folder it points to, "
                          "or a new folder",
                          target);
    } else if (stat(target, &sb) == 0) {
        if (!S_ISDIR(sb.st_mode)) {
            st = bl_error_set(err, BL_ERR_EXISTS, "%s exists and is not a folder; choose another output", target);
        } else if (!force) {
            st = bl_error_set(err, BL_ERR_EXISTS,
                              "the output folder %s already exists; use --force to replace it "
                              "(it is replaced only once the new results are complete)",
                              target);
        } else {
            /* A marked folder holding only its entries, or a folder holding nothing but marked ones. */
            entry_list none = {0};
            int owned = owned_folder(target, &foreign);
            if (owned == 0 && !foreign) owned = check_owned(target, "", &none, &foreign);
            if (owned < 0) st = bl_error_set(err, BL_ERR_NOMEM, "out of memory checking %s", target);
            else if (owned == 0)
                st = bl_error_set(err, BL_ERR_EXISTS,
                                  "the output folder %s holds '%s', which bandlink did not "
                                  "write; it is not replaced even with --force: choose another folder",
                                  target, foreign ? foreign : "?");
        }
    } else if (errno != ENOENT) {
        st = bl_error_set(err, BL_ERR_IO, "%s: %s", target, strerror(errno));
    } else if (lstat(parent, &sb) == 0 && !S_ISDIR(sb.st_mode) && stat(parent, &sb) == 0 && !S_ISDIR(sb.st_mode)) {
        st = bl_error_set(err, BL_ERR_USAGE, "cannot create the output folder %s: %s is not a folder", target, parent);
    }
    *foreign_out = foreign;
    return st;
}

bl_status bl_results_folder_check(const char *target, int force, const char *const *inputs, size_t n_inputs,
                                  bl_error *err)
{
    const char *name;
    char *parent = parent_of(target, &name);
    char *foreign = NULL;
    bl_status st = BL_OK;
    if (!parent) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    /* Inputs first: the most useful thing to say about a folder that holds them. */
    for (size_t i = 0; st == BL_OK && i < n_inputs; i++) {
        int inside = 0;
        if (!inputs[i]) continue;
        if ((st = bl_path_inside(inputs[i], target, &inside, err))) break;
        if (inside)
            st = bl_error_set(err, BL_ERR_USAGE,
                              "the output folder %s holds an input (%s); choose another output "
                              "folder",
                              target, inputs[i]);
    }
    if (!st) st = check_target(target, name, parent, force, &foreign, err);
    free(foreign);
    free(parent);
    return st;
}

/* ---- Staging ---- */

mode_t bl_creation_mode(mode_t mode)
{
    /* umask can only be read by setting it; done once per folder, before any thread starts. */
    mode_t mask = umask(022);
    umask(mask);
    return mode & ~mask;
}

bl_status bl_results_folder_begin(const char *target_in, int force, const char *command, bl_results_folder **out,
                                  bl_error *err)
{
    *out = NULL;
    const char *name;
    char *parent = NULL;
    bl_results_folder *s = calloc(1, sizeof *s);
    bl_status st = BL_OK;
    if (!s || !(s->target = bl_strdup(target_in)) || !(s->command = bl_strdup(command))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto fail;
    }
    /* "results/" and "results" are the same folder. */
    for (size_t n = strlen(s->target); n > 1 && s->target[n - 1] == '/'; n--) s->target[n - 1] = '\0';
    if ((st = bl_results_folder_check(s->target, force, NULL, 0, err))) goto fail;
    struct stat sb;
    s->replace = stat(s->target, &sb) == 0;
    if (!(parent = parent_of(s->target, &name))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto fail;
    }
    if ((st = bl_mkdir_p(parent, err))) goto fail;
    remove_stale(parent, name);
    char buf[64];
    snprintf(buf, sizeof buf, ".partial-%ld-XXXXXX", (long)getpid());
    size_t n = strlen(parent) + strlen(name) + strlen(buf) + 4;
    if (!(s->temp = malloc(n))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto fail;
    }
    snprintf(s->temp, n, "%s/.%s%s", parent, name, buf);
    if (!mkdtemp(s->temp)) {
        st = bl_error_set(err, BL_ERR_IO, "%s: cannot create a temporary folder beside it: %s", s->target,
                          strerror(errno));
        free(s->temp);
        s->temp = NULL;
        goto fail;
    }
    chmod(s->temp, bl_creation_mode(0777)); /* mkdtemp makes 0700; the results follow the user's umask */
    free(parent);
    *out = s;
    return BL_OK;
fail:
    free(parent);
    bl_results_folder_abort(s);
    return st;
}

const char *bl_results_folder_dir(const bl_results_folder *s) { return s->temp; }

static int fsync_dir(const char *path)
{
    int fd = open(path, O_RDONLY | O_DIRECTORY);
    if (fd < 0) return -1;
    int rc = fsync(fd);
    close(fd);
    return rc;
}

/* The old folder aside, the new one in, the old one removed (restored if the second step fails). */
static bl_status swap_by_rename(bl_results_folder *s, bl_error *err)
{
    size_t n = strlen(s->temp) + 8;
    char *aside = malloc(n);
    bl_status st = BL_OK;
    if (!aside) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    snprintf(aside, n, "%s.old", s->temp);
    if (rename(s->target, aside) != 0) {
        st = bl_error_set(err, BL_ERR_IO, "%s: cannot move the old results aside: %s", s->target, strerror(errno));
    } else if (rename(s->temp, s->target) != 0) {
        st = bl_error_set(err, BL_ERR_IO, "%s: cannot move the new results into place: %s", s->target, strerror(errno));
        rename(aside, s->target);
    } else {
        s->temp[0] = '\0';
        bl_remove_tree(aside, NULL);
    }
    free(aside);
    return st;
}

bl_status bl_results_folder_commit(bl_results_folder *s, bl_error *err)
{
    const char *name;
    char *parent = parent_of(s->target, &name);
    bl_status st = marker_write(s->temp, s->command, err);
    if (st) goto done;
    if (fsync_dir(s->temp) != 0) {
        st = bl_error_set(err, BL_ERR_IO, "%s: cannot flush the finished results to disk: %s", s->target,
                          strerror(errno));
        goto done;
    }
    if (!s->replace) {
        if (rename(s->temp, s->target) != 0)
            st = bl_error_set(err, BL_ERR_IO, "%s: cannot move the finished results into place: %s", s->target,
                              strerror(errno));
        else s->temp[0] = '\0';
        goto done;
    }
#ifdef RENAME_EXCHANGE
    if (renameat2(AT_FDCWD, s->temp, AT_FDCWD, s->target, RENAME_EXCHANGE) == 0) goto done; /* temp: old results */
    if (errno != EINVAL && errno != ENOSYS && errno != ENOTSUP) {
        st = bl_error_set(err, BL_ERR_IO, "%s: cannot swap in the new results: %s", s->target, strerror(errno));
        goto done;
    }
#endif
    st = swap_by_rename(s, err);
done:
    /* After the swap the new results are in place; a failure to flush the parent folder then cannot undo it
     * and is not reported as if nothing had been written. */
    if (parent && st == BL_OK) (void)fsync_dir(parent);
    free(parent);
    bl_results_folder_abort(s);
    return st;
}

void bl_results_folder_abort(bl_results_folder *s)
{
    if (!s) return;
    if (s->temp && s->temp[0]) bl_remove_tree(s->temp, NULL);
    free(s->temp);
    free(s->target);
    free(s->command);
    free(s);
}
