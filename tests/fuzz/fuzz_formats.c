/* Fuzz target: the EDF/BDF and BrainVision readers and the events read from recordings must return a status
 * for any bytes, never crash. The first byte picks the case: 0 = .edf, 1 = .bdf (both also read as events),
 * 2 = BrainVision: the rest is "<x.vhdr text>\0<x.eeg bytes>", 3 = the same with the .vmrk events of the
 * header (the .vmrk is the .eeg part). Files go to a folder in /dev/shm (memory-backed). */
#include "signal/trace.h"
#include "design/events_files.h"

#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static void put(const char *path, const uint8_t *p, size_t n)
{
    FILE *f = fopen(path, "wb");
    if (!f) return;
    fwrite(p, 1, n, f);
    fclose(f);
}

static void read_some(const char *path)
{
    bl_trace *t = NULL;
    bl_error err = {0};
    if (bl_trace_open(path, 0, &t, &err) == BL_OK) {
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
        for (size_t c = 0; c < info->channels && c < 8; c++) {
            (void)bl_trace_channel_name(t, c);
            (void)bl_trace_channel_unit(t, c);
        }
        bl_trace_close(t);
    }
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size < 1) return 0;
    char dir[64], a[96], b[96], c[96];
    snprintf(dir, sizeof dir, "/dev/shm/bl-fuzz-formats-%ld", (long)getpid());
    mkdir(dir, 0700);
    int kind = data[0] & 3;
    bl_table *tab = NULL;
    bl_error err = {0};
    if (kind < 2) {
        snprintf(a, sizeof a, "%s/x.%s", dir, kind ? "bdf" : "edf");
        put(a, data + 1, size - 1);
        read_some(a);
        if (bl_events_table_read(a, &tab, &err) == BL_OK) bl_table_destroy(tab);
        unlink(a);
    } else {
        const uint8_t *zero = memchr(data + 1, 0, size - 1);
        size_t head = zero ? (size_t)(zero - data - 1) : size - 1;
        snprintf(a, sizeof a, "%s/x.vhdr", dir);
        snprintf(b, sizeof b, "%s/x.eeg", dir);
        snprintf(c, sizeof c, "%s/x.vmrk", dir);
        put(a, data + 1, head);
        put(kind == 2 ? b : c, zero ? zero + 1 : data + size, zero ? size - 1 - head - 1 : 0);
        if (kind == 2) read_some(a);
        else if (bl_events_table_read(c, &tab, &err) == BL_OK) bl_table_destroy(tab);
        unlink(a);
        unlink(b);
        unlink(c);
    }
    rmdir(dir);
    return 0;
}
