/* The whole job (`bandlink run`) and the staging folder it (and `bandlink simulate`) writes through.
 *
 * Staging: everything is written into a hidden temporary folder beside the target; only a complete
 * folder is moved into place. Replacing an existing folder uses renameat2(RENAME_EXCHANGE) (Linux >= 3.15)
 * so the old folder stays whole until the swap; elsewhere the old folder is renamed aside first and
 * restored if the second rename fails. A run killed part-way leaves only the hidden folder, which the
 * next run removes once its process is gone.
 */
#define _GNU_SOURCE 1
#include "bandlink/pipeline.h"

#include "bandlink/output.h"

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

struct bl_stage {
    char *target;
    char *temp;
    int replace;     /* the target existed */
};

static char *dupstr(const char *s)
{
    size_t n = strlen(s) + 1;
    char *p = malloc(n);
    if (p) memcpy(p, s, n);
    return p;
}

static int remove_entry(const char *path, const struct stat *sb, int type, struct FTW *ftw)
{
    (void)sb;
    (void)ftw;
    return (type == FTW_DP ? rmdir(path) : unlink(path)) != 0 ? -1 : 0;
}

bl_status bl_remove_tree(const char *path, bl_error *err)
{
    struct stat sb;
    if (lstat(path, &sb) != 0) return errno == ENOENT ? BL_OK : bl_error_set(err, BL_ERR_IO, "%s: %s", path, strerror(errno));
    if (nftw(path, remove_entry, 16, FTW_DEPTH | FTW_PHYS) != 0)
        return bl_error_set(err, BL_ERR_IO, "%s: cannot remove: %s", path, strerror(errno));
    return BL_OK;
}

/* Split "a/b/name" into a newly allocated parent ("a/b", or "." ) and a pointer to the name. */
static char *parent_of(const char *path, const char **name)
{
    size_t n = strlen(path);
    while (n > 1 && path[n - 1] == '/') n--;
    size_t k = n;
    while (k > 0 && path[k - 1] != '/') k--;
    *name = path + k;
    if (k == 0) return dupstr(".");
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
        char *p = bl_path_join(parent, e->d_name);
        if (p) bl_remove_tree(p, NULL);
        free(p);
    }
    closedir(d);
}

bl_status bl_stage_begin(const char *target, int force, bl_stage **out, bl_error *err)
{
    *out = NULL;
    const char *name;
    char *parent = parent_of(target, &name);
    bl_stage *s = calloc(1, sizeof *s);
    bl_status st = BL_OK;
    if (!parent || !s || !(s->target = dupstr(target))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto fail;
    }
    if (!name[0] || strcmp(name, ".") == 0 || strcmp(name, "..") == 0) {
        st = bl_error_set(err, BL_ERR_USAGE, "'%s' cannot be used as an output folder; name a folder", target);
        goto fail;
    }
    struct stat sb;
    if (stat(target, &sb) == 0) {
        if (!S_ISDIR(sb.st_mode)) {
            st = bl_error_set(err, BL_ERR_EXISTS, "%s exists and is not a folder; choose another output", target);
            goto fail;
        }
        if (!force) {
            st = bl_error_set(err, BL_ERR_EXISTS, "the output folder %s already exists; use --force to replace it "
                              "(it is replaced only once the new results are complete)", target);
            goto fail;
        }
        s->replace = 1;
    } else if (errno != ENOENT) {
        st = bl_error_set(err, BL_ERR_IO, "%s: %s", target, strerror(errno));
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
        st = bl_error_set(err, BL_ERR_IO, "%s: cannot create a temporary folder beside it: %s", target, strerror(errno));
        free(s->temp);
        s->temp = NULL;
        goto fail;
    }
    chmod(s->temp, 0755);
    free(parent);
    *out = s;
    return BL_OK;
fail:
    free(parent);
    bl_stage_abort(s);
    return st;
}

const char *bl_stage_dir(const bl_stage *s) { return s->temp; }

static void fsync_dir(const char *path)
{
    int fd = open(path, O_RDONLY | O_DIRECTORY);
    if (fd >= 0) {
        fsync(fd);
        close(fd);
    }
}

bl_status bl_stage_commit(bl_stage *s, bl_error *err)
{
    bl_status st = BL_OK;
    const char *name;
    char *parent = parent_of(s->target, &name);
    fsync_dir(s->temp);
    if (!s->replace) {
        if (rename(s->temp, s->target) != 0)
            st = bl_error_set(err, BL_ERR_IO, "%s: cannot move the finished results into place: %s", s->target,
                              strerror(errno));
        else s->temp[0] = '\0';
    } else {
#ifdef RENAME_EXCHANGE
        if (renameat2(AT_FDCWD, s->temp, AT_FDCWD, s->target, RENAME_EXCHANGE) == 0) {
            /* s->temp now holds the old results: removed below. */
            if (parent) fsync_dir(parent);
            free(parent);
            bl_stage_abort(s);
            return BL_OK;
        }
        if (errno != EINVAL && errno != ENOSYS && errno != ENOTSUP) {
            st = bl_error_set(err, BL_ERR_IO, "%s: cannot swap in the new results: %s", s->target, strerror(errno));
            goto done;
        }
#endif
        /* Fallback: old aside, new in, old removed (restored if the second step fails). */
        size_t n = strlen(s->temp) + 8;
        char *aside = malloc(n);
        if (!aside) {
            st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
            goto done;
        }
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
    }
done:
    if (parent && st == BL_OK) fsync_dir(parent);
    free(parent);
    bl_stage_abort(s);
    return st;
}

void bl_stage_abort(bl_stage *s)
{
    if (!s) return;
    if (s->temp && s->temp[0]) bl_remove_tree(s->temp, NULL);
    free(s->temp);
    free(s->target);
    free(s);
}
