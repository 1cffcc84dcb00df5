/* A growing text buffer (textbuf.h). */
#include "core/textbuf.h"

#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>

void bl_textbuf_printf(bl_textbuf *b, const char *fmt, ...)
{
    if (b->failed) return;
    va_list ap;
    va_start(ap, fmt);
    int k = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (k < 0) {
        b->failed = 1;
        return;
    }
    if (b->n + (size_t)k + 1 > b->cap) {
        size_t cap = b->cap ? b->cap : 1024;
        while (cap < b->n + (size_t)k + 1) cap *= 2;
        char *ns = realloc(b->s, cap);
        if (!ns) {
            b->failed = 1;
            return;
        }
        b->s = ns;
        b->cap = cap;
    }
    va_start(ap, fmt);
    vsnprintf(b->s + b->n, (size_t)k + 1, fmt, ap);
    va_end(ap);
    b->n += (size_t)k;
}

char *bl_textbuf_take(bl_textbuf *b)
{
    char *s = b->s;
    int ok = !b->failed && s;
    b->s = NULL;
    b->n = b->cap = 0;
    b->failed = 0;
    if (!ok) free(s);
    return ok ? s : NULL;
}

void bl_textbuf_clear(bl_textbuf *b)
{
    free(b->s);
    b->s = NULL;
    b->n = b->cap = 0;
    b->failed = 0;
}
