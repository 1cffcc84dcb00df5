/* Test harness for the C unit tests (tests/test_*.c).
 *
 * A test program is a list of named cases, each runnable alone:
 *
 *     HARNESS_CASE(inverse_2x2)
 *     {
 *         check_rel(cov[0], 2.25 / det, 1e-14, "inverse [0][0]");   // source: closed-form 2x2 inverse
 *     }
 *
 *     int main(int argc, char **argv)
 *     {
 *         static const harness_case cases[] = {
 *             HARNESS_ENTRY(inverse_2x2),
 *             HARNESS_ENTRY(ez_round_trip),
 *         };
 *         return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
 *     }
 *
 *     build/tests/test_fit                   every case, in the order listed
 *     build/tests/test_fit --list            the case names, one a line
 *     build/tests/test_fit --case NAME       one case (repeatable; NAME may be a pattern such as 'ez_*')
 *     bash tests/run fit:NAME                the same through meson (its environment, its summary line)
 *
 * A case the list forgets is an unused static function: -Werror stops the build, so no case is silently skipped.
 * Work shared by several cases (an expensive fit, say) goes in a static function that computes it once and
 * caches it (see the fixtures of test_fit.c, test_power.c); free it with atexit() so ASan sees no leak. A case
 * never depends on another having run. A new program: tests/test_NAME.c plus 'NAME' in tests/meson.build.
 *
 * Checks (each prints one PASS/FAIL line; name the outside source of the expected value in a comment beside it):
 *     check_rel(got, want, tol, fmt, ...)    |got - want| <= tol * |want| (or got == want, infinities included)
 *     check_abs(got, want, tol, fmt, ...)    |got - want| <= tol, both finite
 *     check_int(got, want, fmt, ...)         integers equal
 *     check_str(got, want, fmt, ...)         strings equal (NULL never equals)
 *     check_true(cond, fmt, ...)             a condition
 * A failing check also prints file:line, the expressions, the values and the tolerance. Every check returns 1
 * when it passed, so a case can stop early: `if (!check_true(p != NULL, "allocated")) return;`.
 * The last line is "N checks passed, M failed", then one line per failed case with the command that reruns it;
 * exit 1 on any failure, 2 on bad usage. harness_summary() prints that tally for a program without cases.
 * tests/harness_demo.c shows every check failing (tests/cli/harness_selftest.sh runs it). */
#ifndef BL_TEST_HARNESS_H
#define BL_TEST_HARNESS_H

#include <fnmatch.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int harness_passed, harness_failed;

#define HARNESS_UNUSED __attribute__((unused))
#define HARNESS_PRINTF(f, a) __attribute__((format(printf, f, a), unused))

/* One PASS/FAIL line: the message, then what was compared; on failure, where and what was written. */
static inline int harness_record(int ok, const char *file, int line, const char *expr, const char *values,
                                 const char *fmt, va_list ap) HARNESS_UNUSED;
static inline int harness_record(int ok, const char *file, int line, const char *expr, const char *values,
                                 const char *fmt, va_list ap)
{
    char msg[1024];
    vsnprintf(msg, sizeof msg, fmt, ap);
    printf("%s: %s%s%s\n", ok ? "PASS" : "FAIL", msg, values[0] ? " " : "", values);
    if (!ok) printf("    at %s:%d: %s\n", file, line, expr);
    if (ok) harness_passed++;
    else harness_failed++;
    fflush(stdout);
    return ok;
}

#define check_rel(got, want, tol, ...)                                                                                 \
    harness_check_rel(__FILE__, __LINE__, "check_rel(" #got ", " #want ", " #tol ")", (got), (want), (tol), __VA_ARGS__)
static inline int harness_check_rel(const char *file, int line, const char *expr, double got, double want, double tol,
                                    const char *fmt, ...) HARNESS_PRINTF(7, 8);
static inline int harness_check_rel(const char *file, int line, const char *expr, double got, double want, double tol,
                                    const char *fmt, ...)
{
    int ok = (got == want) || (isfinite(got) && isfinite(want) && fabs(got - want) <= tol * fabs(want));
    char values[256];
    snprintf(values, sizeof values, "(got %.17g, want %.17g, rel %.3g, tol %.3g)", got, want,
             want != 0 ? fabs(got - want) / fabs(want) : fabs(got), tol);
    va_list ap;
    va_start(ap, fmt);
    harness_record(ok, file, line, expr, values, fmt, ap);
    va_end(ap);
    return ok;
}

#define check_abs(got, want, tol, ...)                                                                                 \
    harness_check_abs(__FILE__, __LINE__, "check_abs(" #got ", " #want ", " #tol ")", (got), (want), (tol), __VA_ARGS__)
static inline int harness_check_abs(const char *file, int line, const char *expr, double got, double want, double tol,
                                    const char *fmt, ...) HARNESS_PRINTF(7, 8);
static inline int harness_check_abs(const char *file, int line, const char *expr, double got, double want, double tol,
                                    const char *fmt, ...)
{
    int ok = isfinite(got) && isfinite(want) && fabs(got - want) <= tol;
    char values[256];
    snprintf(values, sizeof values, "(got %.17g, want %.17g, diff %.3g, tol %.3g)", got, want, fabs(got - want), tol);
    va_list ap;
    va_start(ap, fmt);
    harness_record(ok, file, line, expr, values, fmt, ap);
    va_end(ap);
    return ok;
}

#define check_int(got, want, ...)                                                                                      \
    harness_check_int(__FILE__, __LINE__, "check_int(" #got ", " #want ")", (long long)(got), (long long)(want),       \
                      __VA_ARGS__)
static inline int harness_check_int(const char *file, int line, const char *expr, long long got, long long want,
                                    const char *fmt, ...) HARNESS_PRINTF(6, 7);
static inline int harness_check_int(const char *file, int line, const char *expr, long long got, long long want,
                                    const char *fmt, ...)
{
    char values[128];
    snprintf(values, sizeof values, "(got %lld, want %lld)", got, want);
    va_list ap;
    va_start(ap, fmt);
    harness_record(got == want, file, line, expr, values, fmt, ap);
    va_end(ap);
    return got == want;
}

#define check_str(got, want, ...)                                                                                      \
    harness_check_str(__FILE__, __LINE__, "check_str(" #got ", " #want ")", (got), (want), __VA_ARGS__)
static inline int harness_check_str(const char *file, int line, const char *expr, const char *got, const char *want,
                                    const char *fmt, ...) HARNESS_PRINTF(6, 7);
static inline int harness_check_str(const char *file, int line, const char *expr, const char *got, const char *want,
                                    const char *fmt, ...)
{
    int ok = got && want && strcmp(got, want) == 0;
    char values[512];
    snprintf(values, sizeof values, "(got \"%.200s\", want \"%.200s\")", got ? got : "(null)", want ? want : "(null)");
    va_list ap;
    va_start(ap, fmt);
    harness_record(ok, file, line, expr, ok ? "" : values, fmt, ap);
    va_end(ap);
    return ok;
}

#define check_true(cond, ...) harness_check_true(__FILE__, __LINE__, "check_true(" #cond ")", (cond) != 0, __VA_ARGS__)
static inline int harness_check_true(const char *file, int line, const char *expr, int ok, const char *fmt, ...)
    HARNESS_PRINTF(5, 6);
static inline int harness_check_true(const char *file, int line, const char *expr, int ok, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    harness_record(ok, file, line, expr, ok ? "" : "(false)", fmt, ap);
    va_end(ap);
    return ok;
}

/* A whole file as a NUL-terminated string (caller frees); NULL when it cannot be read completely. */
static inline char *harness_read_file(const char *path) HARNESS_UNUSED;
static inline char *harness_read_file(const char *path)
{
    FILE *f = fopen(path, "rb");
    if (!f) return NULL;
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    char *s = n >= 0 ? malloc((size_t)n + 1) : NULL;
    if (s && fread(s, 1, (size_t)n, f) != (size_t)n) {
        free(s);
        s = NULL;
    }
    if (s) s[n] = '\0';
    fclose(f);
    return s;
}

/* Print the tally and return the process exit status. */
static inline int harness_summary(void) HARNESS_UNUSED;
static inline int harness_summary(void)
{
    printf("%d checks passed, %d failed\n", harness_passed, harness_failed);
    return harness_failed ? EXIT_FAILURE : EXIT_SUCCESS;
}

/* ---- Named cases ---- */

typedef struct {
    const char *name;
    void (*run)(void);
} harness_case;

#define HARNESS_CASE(name) static void harness_case_##name(void)
/* clang-format off */
#define HARNESS_ENTRY(name) {#name, harness_case_##name}
/* clang-format on */
#define HARNESS_COUNT(cases) (sizeof(cases) / sizeof((cases)[0]))

static inline int harness_usage(const char *prog, int status) HARNESS_UNUSED;
static inline int harness_usage(const char *prog, int status)
{
    fprintf(status ? stderr : stdout,
            "usage: %s [--list] [--case NAME]...\n"
            "  no option    run every case\n"
            "  --list       print the case names\n"
            "  --case NAME  run the case NAME (a shell pattern such as 'ez_*' selects several); repeatable\n",
            prog);
    return status;
}

/* Run the cases selected on the command line (all by default); the exit status of the program. */
static inline int harness_main(int argc, char **argv, const harness_case *cases, size_t n) HARNESS_UNUSED;
static inline int harness_main(int argc, char **argv, const harness_case *cases, size_t n)
{
    const char *prog = argc > 0 ? argv[0] : "test";
    const char **patterns = calloc((size_t)argc + 1, sizeof *patterns);
    unsigned char *selected = calloc(n + 1, 1), *failed = calloc(n + 1, 1);
    size_t n_patterns = 0;
    int status = -1;
    if (!patterns || !selected || !failed) {
        fprintf(stderr, "%s: out of memory\n", prog);
        status = 2;
    }
    for (int i = 1; status < 0 && i < argc; i++) {
        if (!strcmp(argv[i], "--list")) {
            for (size_t c = 0; c < n; c++) printf("%s\n", cases[c].name);
            status = 0;
        } else if (!strcmp(argv[i], "--help") || !strcmp(argv[i], "-h")) {
            status = harness_usage(prog, 0);
        } else if (!strcmp(argv[i], "--case") && i + 1 < argc) {
            patterns[n_patterns++] = argv[++i];
        } else if (!strncmp(argv[i], "--case=", 7)) {
            patterns[n_patterns++] = argv[i] + 7;
        } else {
            fprintf(stderr, "%s: unknown argument '%s'\n", prog, argv[i]);
            status = harness_usage(prog, 2);
        }
    }
    for (size_t p = 0; status < 0 && p < n_patterns; p++) {
        int matched = 0;
        for (size_t c = 0; c < n; c++)
            if (fnmatch(patterns[p], cases[c].name, 0) == 0) {
                selected[c] = 1;
                matched = 1;
            }
        if (!matched) {
            fprintf(stderr, "%s: no case matches '%s' (see --list)\n", prog, patterns[p]);
            status = 2;
        }
    }
    for (size_t c = 0; status < 0 && c < n; c++) {
        if (n_patterns && !selected[c]) continue;
        printf("== case %s\n", cases[c].name);
        fflush(stdout);
        int before = harness_failed;
        cases[c].run();
        failed[c] = harness_failed > before;
    }
    if (status < 0) {
        status = harness_summary();
        for (size_t c = 0; c < n; c++)
            if (failed[c]) printf("failed case: %s (rerun alone: %s --case %s)\n", cases[c].name, prog, cases[c].name);
    }
    free(patterns);
    free(selected);
    free(failed);
    return status;
}

#endif
