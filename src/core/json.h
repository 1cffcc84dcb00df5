/* Private: JSON through cJSON with allocation failures made visible. cJSON reports a failed
 * allocation while parsing exactly like a syntax error (NULL), and the cJSON_Add* builders drop the
 * item silently; its allocator hooks (installed once at start-up) count every failed allocation, so
 * parsers tell the two apart and writers refuse to write a document that may be incomplete. */
#ifndef BL_JSON_H
#define BL_JSON_H

#include "bandlink/status.h"

#include <cjson/cJSON.h>

/* Parse NUL-terminated `text`; `name` (a file name) is used in messages: syntax errors give
 * line:column (BL_ERR_INPUT), allocation failures BL_ERR_NOMEM. */
bl_status bl_json_parse(const char *text, const char *name, cJSON **out, bl_error *err);

/* Read a whole text file (a study, a scenario, a fits.json) into *text (caller frees), with a UTF-8 byte
 * order mark dropped. `what` names the document in messages ("the study file"). A missing file or a folder
 * is the user's mistake (BL_ERR_INPUT, exit 2), a NUL byte is not text (BL_ERR_INPUT), a failing disk is
 * BL_ERR_IO. */
bl_status bl_json_read_file(const char *path, const char *what, char **text, bl_error *err);

/* Allocations that failed inside cJSON since the program started. Non-zero means a document built
 * with cJSON may lack items: writers check it before writing (BL_ERR_NOMEM). */
unsigned long bl_json_alloc_failures(void);

#endif
