/* Test tool: print what bl_trace reads from a recording, for the live format checks
 * (tests/reference/formats_mne.py). usage: trace_dump FILE [START N]
 * Prints "rate R", "channels C", "frames F", "format ...", one "channel i name unit" line per channel, then N
 * rows of C samples (%.17g) from frame START (default: the whole recording). Errors: the library's message
 * on stderr, exit 2 (input) or 1.
 * trace_dump --events FILE prints the file's events (design/events_files.h) as TSV, missing cells "NA". */
#include "signal/trace.h"
#include "design/events_files.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int dump_events(const char *path)
{
    bl_error err = {0};
    bl_table *t = NULL;
    bl_status st = bl_events_table_read(path, &t, &err);
    if (st) {
        fprintf(stderr, "%s\n", err.message);
        return bl_status_exit_code(st);
    }
    for (size_t c = 0; c < t->n_cols; c++) printf("%s%c", t->cols[c].name, c + 1 == t->n_cols ? '\n' : '\t');
    for (size_t r = 0; r < t->n_rows; r++)
        for (size_t c = 0; c < t->n_cols; c++)
            printf("%s%c", t->cols[c].text[r] ? t->cols[c].text[r] : "NA", c + 1 == t->n_cols ? '\n' : '\t');
    bl_table_destroy(t);
    return 0;
}

int main(int argc, char **argv)
{
    if (argc == 3 && strcmp(argv[1], "--events") == 0) return dump_events(argv[2]);
    if (argc != 2 && argc != 4) {
        fprintf(stderr, "usage: trace_dump FILE [START N]\n");
        return 2;
    }
    bl_error err = {0};
    bl_trace *t = NULL;
    bl_status st = bl_trace_open(argv[1], 0, &t, &err);
    if (st) {
        fprintf(stderr, "%s\n", err.message);
        return bl_status_exit_code(st);
    }
    const bl_trace_info *info = bl_trace_get_info(t);
    printf("rate %.17g\nchannels %zu\nframes %lld\nformat %s\n", info->rate, info->channels, (long long)info->frames,
           info->format);
    for (size_t c = 0; c < info->channels; c++) {
        const char *name = bl_trace_channel_name(t, c), *unit = bl_trace_channel_unit(t, c);
        printf("channel\t%zu\t%s\t%s\n", c + 1, name ? name : "-", unit && *unit ? unit : "-");
    }
    long long start = argc == 4 ? atoll(argv[2]) : 0, n = argc == 4 ? atoll(argv[3]) : (long long)info->frames;
    double *buf = malloc((size_t)(n > 0 ? n : 1) * info->channels * sizeof *buf);
    if (!buf) return 1;
    if ((st = bl_trace_read(t, start, (size_t)n, buf, &err))) {
        fprintf(stderr, "%s\n", err.message);
        free(buf);
        bl_trace_close(t);
        return bl_status_exit_code(st);
    }
    for (long long f = 0; f < n; f++)
        for (size_t c = 0; c < info->channels; c++)
            printf("%.17g%c", buf[(size_t)f * info->channels + c], c + 1 == info->channels ? '\n' : ' ');
    free(buf);
    bl_trace_close(t);
    return 0;
}
