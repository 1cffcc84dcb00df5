/* Private: JSON parsing with messages that tell a syntax error (line:column, exit 2) from an
 * allocation failure (exit 1), which cJSON alone reports the same way (NULL). */
#ifndef BL_JSON_H
#define BL_JSON_H

#include "bandlink/status.h"

#include <cjson/cJSON.h>

/* Parse NUL-terminated `text`; `name` (a file name) is used in messages. */
bl_status bl_json_parse(const char *text, const char *name, cJSON **out, bl_error *err);

#endif
