/* Fuzz target: the recording reader (libsndfile formats and CSV traces) must return a status for any
 * bytes, never crash. The input is written to a file in /dev/shm (memory-backed); the first byte picks
 * the reader: even = sound file (format detected from content), odd = CSV trace. */
#include "signal/trace.h"

#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <unistd.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size < 1) return 0;
    int csv = data[0] & 1;
    char path[64];
    snprintf(path, sizeof path, "/dev/shm/bl-fuzz-%ld.%s", (long)getpid(), csv ? "csv" : "wav");
    FILE *f = fopen(path, "wb");
    if (!f) return 0;
    fwrite(data + 1, 1, size - 1, f);
    fclose(f);
    bl_trace *t = NULL;
    bl_error err = {0};
    if (bl_trace_open(path, 1000.0, &t, &err) == BL_OK) {
        const bl_trace_info *info = bl_trace_get_info(t);
        size_t n = 64;
        if (info->channels > 0 && info->channels <= 64) {
            double *buf = malloc(n * info->channels * sizeof *buf);
            if (buf) {
                bl_trace_read(t, 0, n, buf, &err);
                bl_trace_read(t, info->frames > 8 ? info->frames - 8 : 0, n, buf, &err);
                free(buf);
            }
        }
        bl_trace_close(t);
    }
    unlink(path);
    return 0;
}
