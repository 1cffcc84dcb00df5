/* Fuzz target: the study-file parser must return a status for any bytes, never crash. */
#include "design/study.h"

#include <stdint.h>
#include <stdlib.h>
#include <string.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    char *json = malloc(size + 1);
    if (!json) return 0;
    memcpy(json, data, size);
    json[size] = '\0';
    bl_study *s = NULL;
    bl_error err = {0};
    if (bl_study_parse(json, "/tmp/fuzz/study.json", &s, &err) == BL_OK) {
        char *text = NULL;
        bl_study_to_json(s, &text, &err);
        free(text);
        bl_study_destroy(s);
    }
    free(json);
    return 0;
}
