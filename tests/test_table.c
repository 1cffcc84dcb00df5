/* CSV/TSV trial tables: RFC 4180 quoting, CRLF, UTF-8 BOM, BIDS events.tsv with n/a, typed columns, errors
 * naming file:line:column. Sources: RFC 4180 (2005) "Common Format and MIME Type for CSV Files"; BIDS
 * specification 1.9, "Common principles: tabular files" and "Task events" (onset, duration, trial_type,
 * response_time; n/a for missing). */
#include "design/table.h"
#include "harness.h"

#include <string.h>

static bl_table *parse(const char *text, bl_error *err)
{
    bl_table *t = NULL;
    if (bl_table_parse(text, strlen(text), "t.csv", &t, err)) return NULL;
    return t;
}

HARNESS_CASE(bids_events_tsv)
{
    bl_error err = {0};
    /* BIDS events.tsv (columns and n/a as in the BIDS task-events example) */
    bl_table *t = parse("onset\tduration\ttrial_type\tresponse_time\tvalue\n"
                        "1.2\t0.6\tgo\t0.435\t1\n"
                        "5.6\t0.6\tstop\tn/a\t2\n"
                        "9.1\t0.6\tgo\t0.512\tn/a\n",
                        &err);
    if (check_true(t != NULL, "BIDS events.tsv parses: %s", err.message)) {
        check_true(t->n_rows == 3 && t->n_cols == 5, "3 rows, 5 columns");
        int rt = bl_table_find(t, "response_time");
        check_true(rt == 3 && t->cols[rt].numeric, "response_time is numeric despite n/a");
        check_true(isnan(t->cols[rt].num[1]) && t->cols[rt].text[1] == NULL, "n/a is missing (NAN, NULL text)");
        check_rel(t->cols[rt].num[2], 0.512, 0, "value 0.512 parsed");
        check_true(!t->cols[2].numeric && strcmp(t->cols[2].text[1], "stop") == 0, "trial_type is text");
        check_true(t->line[0] == 2 && t->line[2] == 4, "source lines recorded");
        bl_table_destroy(t);
    }
}

HARNESS_CASE(rfc4180_quoting)
{
    bl_error err = {0};
    bl_table *t;
    /* RFC 4180: quoted fields with the delimiter, doubled quotes and a line break; CRLF; BOM */
    t = parse("\xef\xbb\xbf"
              "name,\"note\",x\r\n"
              "a,\"one, two\",1\r\n"
              "b,\"say \"\"hi\"\"\",2.5\r\n"
              "c,\"line1\r\nline2\",NA\r\n"
              "\r\n",
              &err);
    if (check_true(t != NULL, "quoted CSV with CRLF and BOM parses: %s", err.message)) {
        check_true(strcmp(t->cols[0].name, "name") == 0, "BOM stripped from the first header name");
        check_true(strcmp(t->cols[1].text[0], "one, two") == 0, "delimiter inside quotes kept");
        check_true(strcmp(t->cols[1].text[1], "say \"hi\"") == 0, "doubled quotes become one");
        check_true(strcmp(t->cols[1].text[2], "line1\r\nline2") == 0, "line break inside quotes kept");
        check_true(t->n_rows == 3 && t->line[2] == 4, "blank trailing line ignored; row 3 starts on line 4");
        check_true(t->cols[2].numeric && isnan(t->cols[2].num[2]), "NA is missing in a numeric column");
        bl_table_destroy(t);
    }
}

HARNESS_CASE(numbers_and_missing_cells)
{
    bl_error err = {0};
    bl_table *t;
    /* numbers: only plain decimals; "inf", "nan", hex are text */
    t = parse("a,b,c\n1e3,inf,0x10\n-2.5,1,3\n", &err);
    if (check_true(t != NULL, "parses")) {
        check_true(t->cols[0].numeric && t->cols[0].num[0] == 1000, "1e3 is a number");
        check_true(!t->cols[1].numeric && !t->cols[2].numeric, "inf and 0x10 make a column text");
        bl_table_destroy(t);
    }
    /* an empty quoted field is a missing cell */
    t = parse("a,b\n\"\",1\n", &err);
    check_true(t && t->n_rows == 1 && t->cols[0].text[0] == NULL && t->cols[1].num[0] == 1, "\"\" is missing");
    bl_table_destroy(t);
}

HARNESS_CASE(errors)
{
    bl_error err = {0};
    bl_table *t;
    /* errors */
    struct {
        const char *text, *want;
    } bad[] = {
        {"", "empty"},
        {"a,b\n1,2,3\n", "t.csv:2: expected 2 fields"},
        {"a,b\n1\n", "t.csv:2: expected 2 fields"},
        {"a,a\n1,2\n", "t.csv:1:3: column name \"a\" appears twice"},
        {"a,,c\n1,2,3\n", "t.csv:1:3: header column 2 has no name"},
        {"a,b\n\"open,2\n", "t.csv:2:1: quoted field is never closed"},
        {"a,b\n\"x\"y,2\n", "t.csv:2:4: unexpected text after a closing quote"},
    };
    for (size_t k = 0; k < sizeof bad / sizeof bad[0]; k++) {
        err.message[0] = '\0';
        t = parse(bad[k].text, &err);
        check_true(!t && strstr(err.message, bad[k].want), "bad table %zu: \"%s\" in \"%s\"", k, bad[k].want,
                   err.message);
        bl_table_destroy(t);
    }
    check_true(bl_table_read("/nonexistent/trials.csv", &t, &err) == BL_ERR_INPUT &&
                   strstr(err.message, "/nonexistent/trials.csv"),
               "missing file named: %s", err.message);
    /* header only: a table with no rows (the trials loader rejects it) */
    t = parse("a,b\n", &err);
    check_true(t && t->n_rows == 0 && t->n_cols == 2, "header-only table has 0 rows");
    bl_table_destroy(t);
}

int main(int argc, char **argv)
{
    static const harness_case cases[] = {
        HARNESS_ENTRY(bids_events_tsv),
        HARNESS_ENTRY(rfc4180_quoting),
        HARNESS_ENTRY(numbers_and_missing_cells),
        HARNESS_ENTRY(errors),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
