/* Private: one text cell of an output CSV file. */
#ifndef BL_CSVTEXT_H
#define BL_CSVTEXT_H

#include <stdio.h>

/* Writes s as a CSV field: "NA" for NULL; quoted (quotes doubled) when it holds a comma, quote or
 * line break (RFC 4180). A text that a spreadsheet would run as a formula (first character =, +, -,
 * @, tab or carriage return) gets a leading single quote, as OWASP's "CSV Injection" guidance
 * recommends; a text that is a whole finite number (-1.5, +3) is left as it is. */
void bl_csv_text(FILE *f, const char *s);

/* 1 when bl_csv_text would prefix s with a single quote. */
int bl_csv_needs_guard(const char *s);

#endif
