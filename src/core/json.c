/* JSON through cJSON with allocation failures made visible (see json.h). cJSON's allocator hooks
 * (cJSON_InitHooks, process-wide) are pointed once, at start-up, at a malloc wrapper that counts
 * failures. */
#include "core/json.h"

#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static unsigned long json_failures; /* updated atomically */

static void *json_malloc(size_t n)
{
    void *p = malloc(n);
    if (!p) __atomic_add_fetch(&json_failures, 1, __ATOMIC_RELAXED);
    return p;
}

/* Before main: every cJSON document of the process is built with the counting allocator. */
__attribute__((constructor)) static void json_install_hooks(void)
{
    cJSON_Hooks hooks = {json_malloc, free};
    cJSON_InitHooks(&hooks);
}

unsigned long bl_json_alloc_failures(void) { return __atomic_load_n(&json_failures, __ATOMIC_RELAXED); }

static void line_col(const char *text, const char *at, size_t *line, size_t *col)
{
    *line = 1;
    *col = 1;
    for (const char *p = text; p < at && *p; p++) {
        if (*p == '\n') {
            (*line)++;
            *col = 1;
        } else {
            (*col)++;
        }
    }
}

bl_status bl_json_parse(const char *text, const char *name, cJSON **out, bl_error *err)
{
    unsigned long failures_before = bl_json_alloc_failures();
    size_t len = strlen(text);
    const char *end = NULL;
    /* The length counts the NUL that require_null_terminated checks. */
    *out = cJSON_ParseWithLengthOpts(text, len + 1, &end, 1);
    if (*out) return BL_OK;
    if (bl_json_alloc_failures() != failures_before)
        return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory while reading the JSON", name);
    size_t line, col;
    const char *at = end ? end : text + len;
    line_col(text, at, &line, &col);
    char near[24] = "";
    size_t k = 0;
    for (const char *p = at; *p && *p != '\n' && k < 16; p++) near[k++] = *p;
    near[k] = '\0';
    if (at >= text + len || !near[0])
        return bl_error_set(err, BL_ERR_INPUT, "%s:%zu:%zu: JSON syntax error: unexpected end of file", name, line,
                            col);
    return bl_error_set(err, BL_ERR_INPUT, "%s:%zu:%zu: JSON syntax error near '%s'", name, line, col, near);
}

bl_status bl_json_read_file(const char *path, const char *what, char **text, bl_error *err)
{
    *text = NULL;
    FILE *f = fopen(path, "rb");
    if (!f)
        return bl_error_set(err, bl_status_from_errno(errno), "%s: cannot open %s: %s", path, what, strerror(errno));
    char *buf = NULL;
    size_t len = 0, cap = 0;
    for (;;) {
        if (len + 4096 + 1 > cap) {
            cap = cap ? 2 * cap : 8192;
            char *nb = realloc(buf, cap);
            if (!nb) {
                free(buf);
                fclose(f);
                return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory reading %s", path, what);
            }
            buf = nb;
        }
        size_t got = fread(buf + len, 1, 4096, f);
        len += got;
        if (got < 4096) break;
    }
    int rerr = ferror(f), rerrno = errno;
    fclose(f);
    if (rerr) {
        free(buf);
        /* A folder given for the file is the user's mistake (exit 2); a failing disk is not. */
        return bl_error_set(err, bl_status_from_errno(rerrno), "%s: cannot read %s: %s", path, what,
                            rerrno == EISDIR ? "it is a folder" : strerror(rerrno));
    }
    buf[len] = '\0';
    if (memchr(buf, '\0', len)) {
        free(buf);
        return bl_error_set(err, BL_ERR_INPUT, "%s: %s is not a text file (contains a NUL byte)", path, what);
    }
    if (len >= 3 && (unsigned char)buf[0] == 0xEF && (unsigned char)buf[1] == 0xBB && (unsigned char)buf[2] == 0xBF)
        memmove(buf, buf + 3, len - 2);
    *text = buf;
    return BL_OK;
}
