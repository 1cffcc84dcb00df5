/* Fuzz target: the CSV/TSV trial-table parser must return a status for any bytes, never crash. */
#include "design/table.h"

#include <stddef.h>
#include <stdint.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    bl_table *t = NULL;
    bl_error err = {0};
    if (bl_table_parse((const char *)data, size, "fuzz.csv", &t, &err) == BL_OK) bl_table_destroy(t);
    return 0;
}
