/* Private: the hook through which trace.c hands a recording to a format reader of its own file
 * (trace_edf.c, trace_brainvision.c, trace_nwb.c). A reader fills the info (rate, channels, frames,
 * format), the channel names and units, and two callbacks; trace.c checks window ranges before `read`
 * is called, so readers only seek and convert. Samples come back in each channel's physical unit as
 * the file's own header defines it.
 */
#ifndef BL_TRACE_BACKEND_H
#define BL_TRACE_BACKEND_H

#include "signal/trace.h"

typedef struct {
    const char *series; /* input: NWB ElectricalSeries to use (path or name), or NULL; not owned */
    void *impl;
    /* frames [start, start + n) of every channel, interleaved; the range is already checked */
    bl_status (*read)(void *impl, int64_t start, size_t n, double *buf, bl_error *err);
    void (*close)(void *impl);
    char **names;              /* info.channels malloc'd names (owned by trace.c once open succeeds) */
    char **units;              /* info.channels malloc'd unit strings as written in the file */
    double *clip_lo, *clip_hi; /* info.channels physical values at the digital extremes, or NULL (unknown) */
} bl_trace_backend;

/* Each returns BL_OK with `b` filled, or an error naming the file and the header field. */
bl_status bl_trace_edf_open(const char *path, bl_trace_info *info, bl_trace_backend *b, bl_error *err);
bl_status bl_trace_brainvision_open(const char *path, bl_trace_info *info, bl_trace_backend *b, bl_error *err);
bl_status bl_trace_nwb_open(const char *path, bl_trace_info *info, bl_trace_backend *b, bl_error *err);

/* Free a names/units array of n entries (NULL allowed). */
void bl_trace_strings_free(char **s, size_t n);

#endif
