/* Private: small string helpers shared by the library's modules. */
#ifndef BL_STRUTIL_H
#define BL_STRUTIL_H

#include <stdlib.h>
#include <string.h>

/* A malloc'd copy of s; NULL when s is NULL or the allocation fails (callers check). */
static inline char *bl_strdup(const char *s)
{
    if (!s) return NULL;
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (d) memcpy(d, s, n);
    return d;
}

#endif
