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

/* Messages are printed on terminals and quote values from input files: keep them to one line
 * (line breaks and tabs become spaces) and show every other control character (ESC, BEL, DEL, ...)
 * as \xHH, so that a value cannot move the cursor, ring the bell or change colours. */
static void make_printable(char *msg, size_t cap)
{
    size_t n = strlen(msg), extra = 0;
    for (size_t i = 0; i < n; i++) {
        unsigned char c = (unsigned char)msg[i];
        if (c == '\n' || c == '\r' || c == '\t') msg[i] = ' ';
        else if (c < 0x20 || c == 0x7F) extra += 3;
    }
    if (!extra) return;
    char *out = malloc(n + extra + 1);
    if (!out) { /* cannot expand: blank them out */
        for (size_t i = 0; i < n; i++)
            if ((unsigned char)msg[i] < 0x20 || msg[i] == 0x7F) msg[i] = '?';
        return;
    }
    size_t w = 0;
    for (size_t i = 0; i < n; i++) { /* whole escapes only: stop before one that would not fit */
        unsigned char c = (unsigned char)msg[i];
        int ctrl = c < 0x20 || c == 0x7F;
        if (w + (ctrl ? 4 : 1) >= cap) break;
        if (ctrl) w += (size_t)sprintf(out + w, "\\x%02X", c);
        else out[w++] = (char)c;
    }
    out[w] = '\0';
    memcpy(msg, out, w + 1);
    free(out);
}

bl_status bl_error_setv(bl_error *err, bl_status status, const char *fmt, va_list ap)
{
    if (err) {
        err->status = status;
        vsnprintf(err->message, sizeof err->message, fmt, ap);
        make_printable(err->message, sizeof err->message);
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
    make_printable(buf, sizeof buf);
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
