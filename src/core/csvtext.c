/* Text cells of output CSV files: RFC 4180 quoting and formula neutralisation (OWASP, "CSV Injection"). */
#include "core/csvtext.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

int bl_csv_needs_guard(const char *s)
{
    if (!s || !strchr("=+-@\t\r", s[0]) || !s[0]) return 0;
    char *end;
    double x = strtod(s, &end);
    return !(end != s && *end == '\0' && isfinite(x));
}

void bl_csv_text(FILE *f, const char *s)
{
    if (!s) {
        fputs("NA", f);
        return;
    }
    int guard = bl_csv_needs_guard(s);
    if (!strpbrk(s, ",\"\r\n")) {
        if (guard) fputc('\'', f);
        fputs(s, f);
        return;
    }
    fputc('"', f);
    if (guard) fputc('\'', f);
    for (; *s; s++) {
        if (*s == '"') fputc('"', f);
        fputc(*s, f);
    }
    fputc('"', f);
}
