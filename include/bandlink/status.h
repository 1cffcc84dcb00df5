/* bandlink status codes and error detail.
 *
 * Every library call that can fail returns a bl_status and, when it fails, fills a
 * caller-owned bl_error with one line that names the culprit (file, line/column or
 * key path, and the offending value). The library never prints and keeps no global
 * error state; the CLI prints the message as "bandlink: error: <message>".
 */
#ifndef BL_STATUS_H
#define BL_STATUS_H

#include <stdarg.h>
#include <stddef.h>

#if defined(BL_BUILDING_LIBRARY)
#define BL_API __attribute__((visibility("default")))
#else
#define BL_API
#endif

#if defined(__GNUC__)
#define BL_PRINTF(fmt, args) __attribute__((format(printf, fmt, args)))
#else
#define BL_PRINTF(fmt, args)
#endif

#ifdef __cplusplus
extern "C" {
#endif

typedef enum {
    BL_OK = 0,
    BL_ERR_USAGE,    /* bad command-line use: unknown option, missing argument */
    BL_ERR_INPUT,    /* bad input data: non-numeric RT, unknown study key, window beyond the recording */
    BL_ERR_RANGE,    /* a parameter outside its valid range: threshold <= 0, start outside (0,1) */
    BL_ERR_MODEL,    /* a model that cannot be fitted: unknown regressor, rank-deficient design */
    BL_ERR_IO,       /* the system failed us: cannot write the output folder, disk full, rename failed */
    BL_ERR_NOMEM,    /* an allocation failed */
    BL_ERR_NUMERIC,  /* a numerical method failed: series did not converge, Hessian not positive definite */
    BL_ERR_EXISTS,   /* an output exists and --force was not given */
    BL_ERR_INTERNAL, /* a bug: a broken invariant inside bandlink */
    BL_STATUS_COUNT
} bl_status;

enum { BL_ERROR_MESSAGE_MAX = 1024 };

typedef struct {
    bl_status status;
    char message[BL_ERROR_MESSAGE_MAX];
} bl_error;

/* Short generic text for a status code ("bad input", ...). Never NULL. */
BL_API const char *bl_strerror(bl_status status);

/* Process exit code for a status: 0 ok, 2 bad usage or bad input (USAGE, INPUT, RANGE, MODEL, EXISTS),
 * 1 failure while running (IO, NOMEM, NUMERIC, INTERNAL). */
BL_API int bl_status_exit_code(bl_status status);

/* Record an error (printf-style message, one line, no trailing period needed) and return `status`.
 * `err` may be NULL. Report an error once, where it is found; callers only pass the status up. */
BL_API bl_status bl_error_set(bl_error *err, bl_status status, const char *fmt, ...) BL_PRINTF(3, 4);
BL_API bl_status bl_error_setv(bl_error *err, bl_status status, const char *fmt, va_list ap);

/* Status for a failed attempt to open or read an input file, from its errno: the user's problem (a
 * missing or unreadable path: BL_ERR_INPUT, exit 2) or the machine's (ENOMEM: BL_ERR_NOMEM, anything
 * else: BL_ERR_IO, exit 1). */
BL_API bl_status bl_status_from_errno(int error_number);

/* Warnings collected during a run (shown by the CLI, written into fits.json and the report). */
typedef struct {
    char **items;
    size_t count, capacity;
    size_t lost; /* warnings that could not be stored (out of memory): writers refuse to write then */
} bl_warnings;

/* Append a warning. On allocation failure the warning is counted in `lost`, and the writers of
 * fits.json and report.html fail rather than write an incomplete list. NULL-safe. */
BL_API void bl_warnings_add(bl_warnings *w, const char *fmt, ...) BL_PRINTF(2, 3);
BL_API void bl_warnings_clear(bl_warnings *w);

#ifdef __cplusplus
}
#endif
#endif
