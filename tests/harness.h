/* Minimal test harness: one PASS/FAIL line per check, a summary, exit status 1 on any failure.
 * Each check names its outside source in a comment beside it (see DEVELOPERS.md). */
#ifndef BL_TEST_HARNESS_H
#define BL_TEST_HARNESS_H

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>

static int harness_passed, harness_failed;

static void harness_report(int ok, const char *fmt, va_list ap)
{
    printf("%s: ", ok ? "PASS" : "FAIL");
    vprintf(fmt, ap);
    printf("\n");
    if (ok) harness_passed++;
    else harness_failed++;
}

/* |got - want| <= tol * |want| (and both finite, or both equal infinities). */
static inline int check_rel(double got, double want, double tol, const char *fmt, ...)
    __attribute__((format(printf, 4, 5), unused));
static inline int check_rel(double got, double want, double tol, const char *fmt, ...)
{
    int ok = (got == want) || (isfinite(got) && isfinite(want) && fabs(got - want) <= tol * fabs(want));
    va_list ap;
    va_start(ap, fmt);
    char buf[512];
    vsnprintf(buf, sizeof buf, fmt, ap);
    va_end(ap);
    printf("%s: %s (got %.17g, want %.17g, rel %.3g, tol %.3g)\n", ok ? "PASS" : "FAIL", buf, got, want,
           want != 0 ? fabs(got - want) / fabs(want) : fabs(got), tol);
    if (ok) harness_passed++;
    else harness_failed++;
    return ok;
}

/* |got - want| <= tol. */
static inline int check_abs(double got, double want, double tol, const char *fmt, ...)
    __attribute__((format(printf, 4, 5), unused));
static inline int check_abs(double got, double want, double tol, const char *fmt, ...)
{
    int ok = isfinite(got) && isfinite(want) && fabs(got - want) <= tol;
    va_list ap;
    va_start(ap, fmt);
    char buf[512];
    vsnprintf(buf, sizeof buf, fmt, ap);
    va_end(ap);
    printf("%s: %s (got %.17g, want %.17g, diff %.3g, tol %.3g)\n", ok ? "PASS" : "FAIL", buf, got, want,
           fabs(got - want), tol);
    if (ok) harness_passed++;
    else harness_failed++;
    return ok;
}

/* A condition. */
static inline int check_true(int cond, const char *fmt, ...) __attribute__((format(printf, 2, 3), unused));
static inline int check_true(int cond, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    harness_report(cond != 0, fmt, ap);
    va_end(ap);
    return cond != 0;
}

/* A whole file as a NUL-terminated string (caller frees); NULL when it cannot be read completely. */
static inline char *harness_read_file(const char *path) __attribute__((unused));
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
static inline int harness_summary(void) __attribute__((unused));
static inline int harness_summary(void)
{
    printf("%d checks passed, %d failed\n", harness_passed, harness_failed);
    return harness_failed ? EXIT_FAILURE : EXIT_SUCCESS;
}

#endif
