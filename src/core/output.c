/* Atomic output files (temp file + fsync + rename) and small path helpers. */
#include "core/output.h"

#include <errno.h>
#include <fcntl.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

struct bl_outfile {
    FILE *stream;
    char *target;
    char *temp;
};

bl_status bl_path_join(const char *dir, const char *name, char **out, bl_error *err)
{
    size_t nd = strlen(dir), nn = strlen(name);
    int slash = nd > 0 && dir[nd - 1] != '/';
    char *p = malloc(nd + nn + 2);
    *out = p;
    if (!p) return bl_error_set(err, BL_ERR_NOMEM, "out of memory joining %s and %s", dir, name);
    memcpy(p, dir, nd);
    if (slash) p[nd++] = '/';
    memcpy(p + nd, name, nn + 1);
    return BL_OK;
}

bl_status bl_outfile_open(const char *path, bl_outfile **out, bl_error *err)
{
    *out = NULL;
    bl_outfile *f = calloc(1, sizeof *f);
    size_t n = strlen(path);
    if (!f || !(f->target = malloc(n + 1)) || !(f->temp = malloc(n + 16))) {
        bl_outfile_abort(f);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory opening %s", path);
    }
    memcpy(f->target, path, n + 1);
    snprintf(f->temp, n + 16, "%s.tmp.XXXXXX", path);
    int fd = mkstemp(f->temp);
    if (fd < 0) {
        int e = errno;
        free(f->temp);
        f->temp = NULL;
        bl_outfile_abort(f);
        return bl_error_set(err, BL_ERR_IO, "%s: cannot create a temporary file: %s", path, strerror(e));
    }
    fchmod(fd, bl_creation_mode(0666)); /* mkstemp makes 0600; follow the umask */
    f->stream = fdopen(fd, "w");
    if (!f->stream) {
        int e = errno;
        close(fd);
        bl_outfile_abort(f);
        return bl_error_set(err, BL_ERR_IO, "%s: cannot open for writing: %s", path, strerror(e));
    }
    *out = f;
    return BL_OK;
}

FILE *bl_outfile_stream(bl_outfile *f) { return f->stream; }

bl_status bl_outfile_commit(bl_outfile *f, bl_error *err)
{
    bl_status st = BL_OK;
    int e = 0;
    if (fflush(f->stream) != 0 || ferror(f->stream)) e = errno ? errno : EIO;
    else if (fsync(fileno(f->stream)) != 0) e = errno;
    if (fclose(f->stream) != 0 && !e) e = errno ? errno : EIO;
    f->stream = NULL;
    if (e) {
        st = bl_error_set(err, BL_ERR_IO, "%s: write failed: %s", f->target, strerror(e));
    } else if (rename(f->temp, f->target) != 0) {
        st = bl_error_set(err, BL_ERR_IO, "%s: cannot rename the finished file into place: %s", f->target,
                          strerror(errno));
    } else {
        free(f->temp);
        f->temp = NULL; /* renamed: nothing to remove */
    }
    bl_outfile_abort(f);
    return st;
}

void bl_outfile_abort(bl_outfile *f)
{
    if (!f) return;
    if (f->stream) fclose(f->stream);
    if (f->temp) unlink(f->temp);
    free(f->temp);
    free(f->target);
    free(f);
}

bl_status bl_write_file_atomic(const char *path, const void *data, size_t size, bl_error *err)
{
    bl_outfile *f;
    bl_status st = bl_outfile_open(path, &f, err);
    if (st) return st;
    if (size && fwrite(data, 1, size, f->stream) != size) {
        int e = errno;
        bl_outfile_abort(f);
        return bl_error_set(err, BL_ERR_IO, "%s: write failed: %s", path, strerror(e));
    }
    return bl_outfile_commit(f, err);
}

bl_status bl_mkdir_p(const char *path, bl_error *err)
{
    size_t n = strlen(path);
    char *p = malloc(n + 1);
    if (!p) return bl_error_set(err, BL_ERR_NOMEM, "out of memory creating %s", path);
    memcpy(p, path, n + 1);
    for (size_t i = 1; i <= n; i++) {
        if (p[i] != '/' && p[i] != '\0') continue;
        char c = p[i];
        p[i] = '\0';
        if (mkdir(p, 0777) != 0 && errno != EEXIST) {
            int e = errno;
            bl_error_set(err, BL_ERR_IO, "%s: cannot create folder: %s", p, strerror(e));
            free(p);
            return BL_ERR_IO;
        }
        p[i] = c;
    }
    struct stat sb;
    int ok = stat(path, &sb) == 0 && S_ISDIR(sb.st_mode);
    free(p);
    if (!ok) return bl_error_set(err, BL_ERR_IO, "%s: exists and is not a folder", path);
    return BL_OK;
}
