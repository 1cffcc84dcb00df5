/* Helpers behind scaling and hostile input: numbering by first appearance (against the direct
 * quadratic definition), CSV formula neutralisation (OWASP "CSV Injection" cases), control characters
 * in messages, and UTF-8 validation of tables (RFC 3629 section 3 and 10 examples; Kuhn's
 * "UTF-8 decoder capability and stress test" classes: overlong, surrogate, above U+10FFFF, cut off). */
#include "core/csvtext.h"
#include "core/groups.h"
#include "design/table.h"
#include "harness.h"

#include <gsl/gsl_rng.h>
#include <stdio.h>
#include <string.h>

/* The definition: a new id for every value not seen before, in row order (quadratic, for checking). */
static size_t naive_ids(const char *const *k, size_t n, size_t *id)
{
    size_t groups = 0;
    for (size_t i = 0; i < n; i++) {
        size_t j = 0;
        while (j < i && !((k[j] == NULL && k[i] == NULL) || (k[j] && k[i] && strcmp(k[j], k[i]) == 0))) j++;
        id[i] = j < i ? id[j] : groups++;
    }
    return groups;
}

static void check_groups(void)
{
    enum { N = 3000 };
    static char buf[N][16];
    static const char *keys[N];
    static size_t got[N], want[N], a[N], b[N], pair_want[N];
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 3);
    for (size_t i = 0; i < N; i++) {
        unsigned long v = gsl_rng_uniform_int(rng, 257);
        snprintf(buf[i], sizeof buf[i], "v%lu", v);
        keys[i] = v == 0 ? NULL : buf[i]; /* missing values form a group of their own */
    }
    bl_error err = {0};
    size_t ng = 0, nw = naive_ids(keys, N, want);
    check_true(bl_group_strings(keys, N, got, &ng, "test", &err) == BL_OK && ng == nw &&
                   memcmp(got, want, sizeof got) == 0,
               "strings: ids by first appearance equal the direct definition (%zu groups)", nw);
    /* pairs: compared with strings made from the pair */
    for (size_t i = 0; i < N; i++) {
        a[i] = gsl_rng_uniform_int(rng, 40);
        b[i] = gsl_rng_uniform_int(rng, 7);
        snprintf(buf[i], sizeof buf[i], "%zu/%zu", a[i], b[i]);
        keys[i] = buf[i];
    }
    nw = naive_ids(keys, N, pair_want);
    check_true(bl_group_pairs(a, b, N, got, &ng, "test", &err) == BL_OK && ng == nw &&
                   memcmp(got, pair_want, sizeof got) == 0,
               "pairs: ids by first appearance equal the direct definition (%zu groups)", nw);
    check_true(bl_group_strings(keys, 0, got, &ng, "test", &err) == BL_OK && ng == 0, "no rows: no groups");
    gsl_rng_free(rng);
}

static void check_csv_guard(void)
{
    /* OWASP "CSV Injection": cells starting with = + - @ tab CR are formulas to spreadsheets. */
    const char *formula[] = {"=1+2", "+cmd", "-2+3", "@SUM(A1)", "\tx", "\rx", "=HYPERLINK(\"x\")", "-", "+", "-inf"};
    const char *plain[] = {"-1.5", "+3", "-0", "1e-5", "abc", "", "a=b", "-2e10"};
    for (size_t i = 0; i < sizeof formula / sizeof *formula; i++)
        check_true(bl_csv_needs_guard(formula[i]), "formula start guarded: \"%s\"",
                   formula[i][0] < 32 ? "(ctl)x" : formula[i]);
    for (size_t i = 0; i < sizeof plain / sizeof *plain; i++)
        check_true(!bl_csv_needs_guard(plain[i]), "number or plain text left alone: \"%s\"", plain[i]);
    char out[128] = "";
    FILE *f = fmemopen(out, sizeof out, "w");
    if (f) {
        bl_csv_text(f, "=a,b");
        fputc('|', f);
        bl_csv_text(f, "@x");
        fputc('|', f);
        bl_csv_text(f, "-1.5");
        fclose(f);
    }
    /* RFC 4180: a field with a comma is quoted; the guard quote goes inside the quotes. */
    check_true(strcmp(out, "\"'=a,b\"|'@x|-1.5") == 0, "written cells: %s", out);
}

static void check_messages(void)
{
    bl_error err = {0};
    bl_error_set(&err, BL_ERR_INPUT, "value '%s'", "\x1b[31mred\x07 and\ttab\nline");
    check_true(strcmp(err.message, "value '\\x1B[31mred\\x07 and tab line'") == 0, "ESC and BEL shown as \\xHH: %s",
               err.message);
    char big[600];
    memset(big, '\x1b', sizeof big - 1);
    big[sizeof big - 1] = '\0';
    bl_error_set(&err, BL_ERR_INPUT, "%s", big);
    size_t len = strlen(err.message);
    check_true(len < sizeof err.message && len % 4 == 0 && strncmp(err.message + len - 4, "\\x1B", 4) == 0,
               "a long run of ESC is cut at a whole escape (%zu characters)", len);
}

static void check_utf8(void)
{
    struct {
        const char *text, *what;
        int ok;
    } cases[] = {
        {"a,b\n\xc3\xa9,1\n", "U+00E9 (2 bytes)", 1},
        {"a,b\n\xe2\x82\xac,1\n", "U+20AC (3 bytes)", 1},
        {"a,b\n\xf0\x9f\x98\x80,1\n", "U+1F600 (4 bytes)", 1},
        {"a,b\n\xff,1\n", "byte FF", 0},
        {"a,b\n\xc0\x80,1\n", "overlong NUL C0 80", 0},
        {"a,b\n\xe0\x80\xaf,1\n", "overlong '/' E0 80 AF", 0},
        {"a,b\n\xed\xa0\x80,1\n", "surrogate U+D800", 0},
        {"a,b\n\xf4\x90\x80\x80,1\n", "above U+10FFFF", 0},
        {"a,b\nx,\xe2\x82", "cut off at the end of the file", 0},
        {"a,b\n\xe9t\xe9,1\n", "Latin-1 e-acute", 0},
    };
    for (size_t i = 0; i < sizeof cases / sizeof *cases; i++) {
        bl_table *t = NULL;
        bl_error err = {0};
        bl_status st = bl_table_parse(cases[i].text, strlen(cases[i].text), "t.csv", &t, &err);
        if (cases[i].ok) check_true(st == BL_OK, "UTF-8 accepted: %s", cases[i].what);
        else
            check_true(st == BL_ERR_INPUT && strncmp(err.message, "t.csv:", 6) == 0 && strstr(err.message, "UTF-8"),
                       "not UTF-8, refused with file:line:column: %s (%s)", cases[i].what, err.message);
        bl_table_destroy(t);
    }
    bl_table *t = NULL;
    bl_error err = {0};
    bl_table_parse("a,b\nxy,\xff\n", 9, "t.csv", &t, &err);
    check_true(strncmp(err.message, "t.csv:2:4:", 10) == 0 && strstr(err.message, "\\xFF"),
               "line 2, column 4, byte: %s", err.message);
    bl_table_destroy(t);
}

int main(void)
{
    check_groups();
    check_csv_guard();
    check_messages();
    check_utf8();
    return harness_summary();
}
