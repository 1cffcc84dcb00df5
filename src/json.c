/* JSON parsing through cJSON with allocation failures told apart from syntax errors.
 * cJSON returns NULL for both; its allocator hooks (cJSON_InitHooks, process-wide) are pointed once at
 * malloc/free wrappers that raise a per-thread flag when an allocation fails. */
#include "json.h"

#include <pthread.h>
#include <stdlib.h>
#include <string.h>

static _Thread_local int json_alloc_failed;
static pthread_once_t json_hooks_once = PTHREAD_ONCE_INIT;

static void *json_malloc(size_t n)
{
    void *p = malloc(n);
    if (!p) json_alloc_failed = 1;
    return p;
}

static void json_install_hooks(void)
{
    cJSON_Hooks hooks = {json_malloc, free};
    cJSON_InitHooks(&hooks);
}

static void line_col(const char *text, const char *at, size_t *line, size_t *col)
{
    *line = 1;
    *col = 1;
    for (const char *p = text; p < at && *p; p++) {
        if (*p == '\n') {
            (*line)++;
            *col = 1;
        } else {
            (*col)++;
        }
    }
}

bl_status bl_json_parse(const char *text, const char *name, cJSON **out, bl_error *err)
{
    pthread_once(&json_hooks_once, json_install_hooks);
    json_alloc_failed = 0;
    size_t len = strlen(text);
    const char *end = NULL;
    /* The length counts the NUL that require_null_terminated checks. */
    *out = cJSON_ParseWithLengthOpts(text, len + 1, &end, 1);
    if (*out) return BL_OK;
    if (json_alloc_failed) return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory while reading the JSON", name);
    size_t line, col;
    const char *at = end ? end : text + len;
    line_col(text, at, &line, &col);
    char near[24] = "";
    size_t k = 0;
    for (const char *p = at; *p && *p != '\n' && k < 16; p++) near[k++] = *p;
    near[k] = '\0';
    if (at >= text + len || !near[0])
        return bl_error_set(err, BL_ERR_INPUT, "%s:%zu:%zu: JSON syntax error: unexpected end of file", name, line, col);
    return bl_error_set(err, BL_ERR_INPUT, "%s:%zu:%zu: JSON syntax error near '%s'", name, line, col, near);
}
