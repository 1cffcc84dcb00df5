/* Fuzz target: the CSV/TSV trace reader alone (text parsing, header, delimiters, BOM, CRLF, numbers)
 * must return a status for any bytes, never crash, and windows read from a trace it accepted must stay
 * inside it. The first byte picks the extension (.csv or .tsv) and where the windows start; the rest
 * is the file, written to /dev/shm (memory-backed). */
#include "signal/trace.h"

#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <unistd.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size < 1) return 0;
    char path[64];
    snprintf(path, sizeof path, "/dev/shm/bl-fuzz-csv-%ld.%s", (long)getpid(), data[0] & 1 ? "tsv" : "csv");
    FILE *f = fopen(path, "wb");
    if (!f) return 0;
    fwrite(data + 1, 1, size - 1, f);
    fclose(f);
    bl_trace *t = NULL;
    bl_error err = {0};
    if (bl_trace_open(path, 250.0, &t, &err) == BL_OK) {
        const bl_trace_info *info = bl_trace_get_info(t);
        if (info->channels > 0 && info->channels <= 256 && info->frames > 0) {
            size_t n = (size_t)(data[0] >> 1) % 16 + 1;
            double *buf = malloc(n * info->channels * sizeof *buf);
            if (buf) {
                int64_t starts[4] = {0, info->frames - (int64_t)n, info->frames / 2, -1};
                for (int k = 0; k < 4; k++) bl_trace_read(t, starts[k], n, buf, &err); /* some are outside */
                free(buf);
            }
        }
        bl_trace_close(t);
    }
    unlink(path);
    return 0;
}
