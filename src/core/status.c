/* Status codes, error messages and warning lists. */
#include "bandlink/status.h"

#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

const char *bl_strerror(bl_status status)
{
    switch (status) {
    case BL_OK: return "ok";
    case BL_ERR_USAGE: return "bad usage";
    case BL_ERR_INPUT: return "bad input";
    case BL_ERR_RANGE: return "value out of range";
    case BL_ERR_MODEL: return "model cannot be fitted";
    case BL_ERR_IO: return "input/output failure";
    case BL_ERR_NOMEM: return "out of memory";
    case BL_ERR_NUMERIC: return "numerical failure";
    case BL_ERR_EXISTS: return "output exists";
    case BL_ERR_INTERNAL: return "internal error";
    case BL_STATUS_COUNT: break;
    }
    return "unknown status";
}

int bl_status_exit_code(bl_status status)
{
    switch (status) {
    case BL_OK: return 0;
    case BL_ERR_USAGE:
    case BL_ERR_INPUT:
    case BL_ERR_RANGE:
    case BL_ERR_MODEL:
    case BL_ERR_EXISTS: return 2;
    default: return 1;
    }
}

bl_status bl_status_from_errno(int error_number)
{
    switch (error_number) {
    case ENOENT:
    case EACCES:
    case EISDIR:
    case ENOTDIR:
    case ENAMETOOLONG:
    case ELOOP: return BL_ERR_INPUT;
    case ENOMEM: return BL_ERR_NOMEM;
    default: return BL_ERR_IO;
    }
}

bl_status bl_error_setv(bl_error *err, bl_status status, const char *fmt, va_list ap)
{
    if (err) {
        err->status = status;
        vsnprintf(err->message, sizeof err->message, fmt, ap);
        /* Keep messages to one line whatever the caller passed in. */
        for (char *c = err->message; *c; c++)
            if (*c == '\n' || *c == '\r') *c = ' ';
    }
    return status;
}

bl_status bl_error_set(bl_error *err, bl_status status, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    bl_error_setv(err, status, fmt, ap);
    va_end(ap);
    return status;
}

void bl_warnings_add(bl_warnings *w, const char *fmt, ...)
{
    if (!w) return;
    if (w->count == w->capacity) {
        size_t cap = w->capacity ? 2 * w->capacity : 8;
        char **items = realloc(w->items, cap * sizeof *items);
        if (!items) {
            w->lost++;
            return;
        }
        w->items = items;
        w->capacity = cap;
    }
    va_list ap;
    va_start(ap, fmt);
    char buf[1024];
    vsnprintf(buf, sizeof buf, fmt, ap);
    va_end(ap);
    char *copy = malloc(strlen(buf) + 1);
    if (!copy) {
        w->lost++;
        return;
    }
    strcpy(copy, buf);
    w->items[w->count++] = copy;
}

void bl_warnings_clear(bl_warnings *w)
{
    if (!w) return;
    for (size_t i = 0; i < w->count; i++) free(w->items[i]);
    free(w->items);
    w->items = NULL;
    w->count = w->capacity = w->lost = 0;
}
