/* The error convention under allocation failure: every call converted to return a bl_status
 * (bl_path_join, bl_table_create, bl_table_parse, bl_study_parse, bl_study_to_json,
 * bl_trials_exclusion_counts, bl_model_build, bl_model_copy, bl_likelihood_create,
 * bl_model_nested_in, bl_information_inverse) is run once for every allocation it makes, with that
 * allocation failing. Each run must return BL_ERR_NOMEM with a message and no output (or, for the
 * parsers, another status the input explains), and the call must succeed once nothing fails.
 *
 * How: this program defines malloc, calloc, realloc and aligned_alloc itself (the C library's
 * documented way to replace the allocator: glibc manual, "Replacing malloc"), passing through to
 * glibc's __libc_* functions unless a failure is armed. The failure rule is the one of the CLI's
 * fault-injection shim (tests/fault/): the n-th allocation fails. Skipped under AddressSanitizer,
 * which owns malloc itself.
 */
#define _GNU_SOURCE 1 /* dladdr */
#include "harness.h"

#include <dlfcn.h>

#include "core/output.h"
#include "design/model.h"
#include "design/study.h"
#include "design/table.h"
#include "design/trials.h"
#include "fit/fit.h"
#include "fit_testutil.h"

#include <string.h>

#if defined(__SANITIZE_ADDRESS__)
#define BL_NOMEM_SKIP 1
#elif defined(__has_feature)
#if __has_feature(address_sanitizer)
#define BL_NOMEM_SKIP 1
#endif
#endif

#ifndef BL_NOMEM_SKIP
extern void *__libc_malloc(size_t);
extern void *__libc_calloc(size_t, size_t);
extern void *__libc_realloc(void *, size_t);
extern void *__libc_memalign(size_t, size_t);

static long alloc_countdown; /* 0: nothing fails; n: the n-th allocation from now fails */
static long alloc_failed;    /* failures injected since armed */

/* Allocations the C library makes for itself (qsort's buffer: it falls back to sorting in place
 * without it, by design) are neither failed nor counted: only failures bandlink must report are. */
static int from_libc(void *ret)
{
    Dl_info info;
    if (!dladdr(ret, &info) || !info.dli_fname) return 0;
    const char *f = strrchr(info.dli_fname, '/');
    return strncmp(f ? f + 1 : info.dli_fname, "libc.so", 7) == 0;
}

static int alloc_fails_for(void *ret)
{
    if (alloc_countdown <= 0 || from_libc(ret)) return 0;
    if (--alloc_countdown > 0) return 0;
    alloc_failed++;
    return 1;
}

#define alloc_fails() alloc_fails_for(__builtin_return_address(0))
void *malloc(size_t n) { return alloc_fails() ? NULL : __libc_malloc(n); }
void *calloc(size_t n, size_t size) { return alloc_fails() ? NULL : __libc_calloc(n, size); }
void *realloc(void *p, size_t n) { return alloc_fails() ? NULL : __libc_realloc(p, n); }
void *aligned_alloc(size_t alignment, size_t n) { return alloc_fails() ? NULL : __libc_memalign(alignment, n); }

/* One call under test: returns its status and whether it left an output behind. */
typedef bl_status (*call_fn)(void *ctx, bl_error *err, int *has_output);

/* Run `call` with allocation 1, 2, ... failing until it succeeds (at most `max` runs). */
static void sweep(const char *name, call_fn call, void *ctx, int input_errors_allowed, long max)
{
    long failures = 0, bad = 0, n;
    int succeeded = 0;
    char first_bad[BL_ERROR_MESSAGE_MAX + 64] = "";
    for (n = 1; n <= max; n++) {
        bl_error err = {0};
        int has_output = 0;
        alloc_failed = 0;
        alloc_countdown = n;
        bl_status st = call(ctx, &err, &has_output);
        alloc_countdown = 0;
        if (alloc_failed == 0) {
            succeeded = st == BL_OK && has_output;
            break;
        }
        failures++;
        int ok = !has_output && err.message[0] &&
                 (st == BL_ERR_NOMEM || (input_errors_allowed && st != BL_OK && st == err.status));
        if (!ok && bad++ == 0)
            snprintf(first_bad, sizeof first_bad, "allocation %ld: status %d, output %d, '%s'", n, (int)st, has_output,
                     err.message);
    }
    check_true(failures > 0, "%s: %ld allocation failures injected", name, failures);
    check_true(bad == 0, "%s: every failed allocation gives a status and a message, no output %s", name, first_bad);
    check_true(succeeded, "%s: succeeds once every allocation succeeds (after %ld runs)", name, n);
}

/* ---- the calls ---- */

static bl_status call_path_join(void *ctx, bl_error *err, int *has_output)
{
    (void)ctx;
    char *p = NULL;
    bl_status st = bl_path_join("results", "fits.json", &p, err);
    *has_output = p != NULL;
    free(p);
    return st;
}

static bl_status call_table_create(void *ctx, bl_error *err, int *has_output)
{
    (void)ctx;
    bl_table *t = NULL;
    bl_status st = bl_table_create(5, &t, err);
    *has_output = t != NULL;
    bl_table_destroy(t);
    return st;
}

static bl_status call_table_parse(void *ctx, bl_error *err, int *has_output)
{
    (void)ctx;
    /* RFC 4180 quoting: a doubled quote and a line break inside quotes. */
    static const char csv[] = "participant,rt,note\nr1,0.5,\"a \"\"b\"\"\nc\"\nr1,0.61,n/a\nr2,0.7,plain\n";
    bl_table *t = NULL;
    bl_status st = bl_table_parse(csv, sizeof csv - 1, "mem.csv", &t, err);
    *has_output = t != NULL;
    bl_table_destroy(t);
    return st;
}

static const char *study_json =
    "{\"trials\": {\"file\": \"trials.csv\", \"participant\": \"animal\", \"rt\": \"rt\", \"response\": \"correct\","
    " \"upper\": [\"1\"]},"
    " \"models\": [{\"name\": \"base\", \"threshold\": {\"per\": [\"context\"]}},"
    " {\"name\": \"wide\", \"extends\": \"base\", \"drift\": {\"per\": [\"difficulty\"]}}]}";

static bl_status call_study_parse(void *ctx, bl_error *err, int *has_output)
{
    (void)ctx;
    bl_study *s = NULL;
    bl_status st = bl_study_parse(study_json, "/data/exp/study.json", &s, err);
    *has_output = s != NULL;
    bl_study_destroy(s);
    return st;
}

static bl_status call_study_to_json(void *ctx, bl_error *err, int *has_output)
{
    char *json = NULL;
    bl_status st = bl_study_to_json(ctx, &json, err);
    *has_output = json != NULL;
    free(json);
    return st;
}

static bl_status call_exclusion_counts(void *ctx, bl_error *err, int *has_output)
{
    bl_exclusion_count *c = NULL;
    size_t n = 0;
    bl_status st = bl_trials_exclusion_counts(ctx, &c, &n, err);
    *has_output = c != NULL && n == 2;
    free(c);
    return st;
}

typedef struct {
    const bl_model_spec *spec;
    const bl_trials *trials;
    const bl_model *model, *smaller;
} model_ctx;

static bl_status call_model_build(void *ctx, bl_error *err, int *has_output)
{
    model_ctx *c = ctx;
    bl_model *m = NULL;
    bl_status st = bl_model_build(c->spec, c->trials, NULL, &m, err);
    *has_output = m != NULL;
    bl_model_destroy(m);
    return st;
}

static bl_status call_model_copy(void *ctx, bl_error *err, int *has_output)
{
    model_ctx *c = ctx;
    bl_model *m = NULL;
    bl_status st = bl_model_copy(c->model, &m, err);
    *has_output = m != NULL;
    bl_model_destroy(m);
    return st;
}

static bl_status call_likelihood_create(void *ctx, bl_error *err, int *has_output)
{
    model_ctx *c = ctx;
    bl_likelihood *w = NULL;
    bl_status st = bl_likelihood_create(c->model, 1, &w, err);
    *has_output = w != NULL;
    bl_likelihood_destroy(w);
    return st;
}

static bl_status call_nested_in(void *ctx, bl_error *err, int *has_output)
{
    model_ctx *c = ctx;
    int nested = -1;
    bl_status st = bl_model_nested_in(c->smaller, c->model, &nested, err);
    /* "Output" here: the answer, which must be "nested" when the call succeeds and 0 when it fails. */
    *has_output = st == BL_OK ? nested == 1 : nested != 0;
    return st;
}

static bl_status call_information_inverse(void *ctx, bl_error *err, int *has_output)
{
    (void)ctx;
    const double info[4] = {4.0, 1.5, 1.5, 2.25};
    double cov[4], cond;
    int pd = -1;
    bl_status st = bl_information_inverse(info, 2, cov, &cond, &pd, err);
    *has_output = st == BL_OK ? pd == 1 : pd != 0;
    return st;
}

int main(void)
{
    gsl_set_error_handler_off();
    sweep("bl_path_join", call_path_join, NULL, 0, 50);
    sweep("bl_table_create", call_table_create, NULL, 0, 50);
    sweep("bl_table_parse", call_table_parse, NULL, 0, 400);
    /* The study parser cannot tell every failed cJSON allocation from bad JSON: allow input errors. */
    sweep("bl_study_parse", call_study_parse, NULL, 1, 2000);

    bl_error err = {0};
    bl_study *study = NULL;
    if (check_true(bl_study_parse(study_json, "/data/exp/study.json", &study, &err) == BL_OK, "study parses (%s)",
                   err.message))
        sweep("bl_study_to_json", call_study_to_json, study, 0, 2000);
    bl_study_destroy(study);

    /* Trials with two exclusion reasons (built by hand, not loaded). */
    const char *excluded[4] = {NULL, "missing rt", NULL, "rt < keep.rt_min"};
    bl_trials tr = {0};
    tr.n = 4;
    tr.excluded = excluded;
    sweep("bl_trials_exclusion_counts", call_exclusion_counts, &tr, 0, 50);

    /* A model with intercepts per context and slopes, and the plain model nested in it. */
    sim_truth truth = {.n = 120, .n_participants = 2, .a = {1.2, 1.6}, .v = {1.5, 1.0, 0.5}, .t0 = 0.25};
    bl_trials *t = sim_trials(&truth, 7);
    bl_model_spec spec, plain;
    bl_slope_spec slopes[2];
    spec_regression(&spec, slopes, "regression");
    spec_default(&plain, "plain");
    bl_model *m = NULL, *m0 = NULL;
    if (check_true(bl_model_build(&spec, t, NULL, &m, &err) == BL_OK &&
                       bl_model_build(&plain, t, NULL, &m0, &err) == BL_OK,
                   "models build (%s)", err.message)) {
        model_ctx c = {&spec, t, m, m0};
        sweep("bl_model_build", call_model_build, &c, 0, 5000);
        sweep("bl_model_copy", call_model_copy, &c, 0, 400);
        sweep("bl_likelihood_create", call_likelihood_create, &c, 0, 50);
        sweep("bl_model_nested_in", call_nested_in, &c, 0, 400);
    }
    bl_model_destroy(m);
    bl_model_destroy(m0);
    bl_trials_destroy(t);
    sweep("bl_information_inverse", call_information_inverse, NULL, 0, 400);
    return harness_summary();
}
#else
int main(void)
{
    printf("skipped: AddressSanitizer replaces malloc itself\n");
    return 77;
}
#endif
