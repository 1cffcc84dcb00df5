/* A growing text buffer: printf into it, take the string at the end. An allocation failure is remembered
 * and reported once, by bl_textbuf_take returning NULL, so callers need not check every append. */
#ifndef BL_CORE_TEXTBUF_H
#define BL_CORE_TEXTBUF_H

#include "bandlink/status.h"

#include <stddef.h>

typedef struct {
    char *s;
    size_t n, cap;
    int failed;
} bl_textbuf;

void bl_textbuf_printf(bl_textbuf *b, const char *fmt, ...) BL_PRINTF(2, 3);
/* The text (caller frees), or NULL when any append failed (the buffer is then freed). */
char *bl_textbuf_take(bl_textbuf *b);
/* Discard the text. */
void bl_textbuf_clear(bl_textbuf *b);

#endif
