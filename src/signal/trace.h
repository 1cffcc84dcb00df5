/* Recordings: continuous multichannel traces read one window at a time.
 *
 * Formats: everything libsndfile reads (WAV, FLAC, AIFF, W64, RF64, ...), read as doubles; integer PCM
 * comes back normalised to +-1 (libsndfile's default), float/double PCM unchanged. CSV/TSV traces: a
 * header row (channel names), one column per channel, one row per sample, the rate given by the
 * study (`recordings.rate`); values are taken as already in the study's unit.
 * Sound files are never loaded whole: each window seeks (sf_seek) and reads only its frames, so
 * memory is proportional to a window. CSV traces are parsed once into memory (text cannot be sought).
 * EDF/EDF+/BDF/BDF+ (.edf, .bdf), BrainVision (.vhdr with its .eeg) and NWB 2.x (.nwb, an ElectricalSeries)
 * have readers of their own (trace_edf.c, trace_brainvision.c, trace_nwb.c), chosen by extension; they
 * return samples in each channel's physical unit from the file's header, and read windows by seeking.
 */
#ifndef BL_TRACE_H
#define BL_TRACE_H

#include "bandlink/status.h"
#include "design/table.h"

#include <stddef.h>
#include <stdint.h>

typedef struct bl_trace bl_trace;

typedef struct {
    double rate; /* Hz */
    size_t channels;
    int64_t frames; /* samples per channel */
    int is_csv;
    int integer_pcm;         /* 1 when samples are integers normalised to +-1 */
    double clip_lo, clip_hi; /* integer PCM: the normalised full-scale values (-1 and (2^(b-1)-1)/2^(b-1));
                               NAN for float and CSV data, where full scale is unknown */
    char format[64];         /* e.g. "FLAC, 24-bit PCM", "CSV text" */
} bl_trace_info;

/* Open a recording. `csv_rate` [Hz] is required (> 0) for CSV/TSV traces (files ending in .csv,
 * .tsv or .txt) and ignored otherwise. Errors name the file. */
bl_status bl_trace_open(const char *path, double csv_rate, bl_trace **out, bl_error *err);
/* The same, naming the NWB ElectricalSeries to read ("/processing/ecephys/LFP/ElectricalSeries" or its last
 * part "ElectricalSeries"; NULL: the file's only one). Other formats ignore `series`. */
bl_status bl_trace_open_series(const char *path, double csv_rate, const char *series, bl_trace **out, bl_error *err);
const bl_trace_info *bl_trace_get_info(const bl_trace *t);
const char *bl_trace_path(const bl_trace *t);
/* Name of channel c (0-based) from the file's header or the CSV header row; NULL when the format has no
 * names (sound files) or the field is empty. */
const char *bl_trace_channel_name(const bl_trace *t, size_t c);
/* Physical unit of channel c as the file writes it ("uV", "volts", ...); NULL when the format has none
 * (sound files, CSV), whose values are scaled by recordings.gain instead. */
const char *bl_trace_channel_unit(const bl_trace *t, size_t c);
/* The values channel c reads at its format's full scale (integer PCM: info.clip_lo/hi; EDF/BDF: the physical
 * values of the digital minimum and maximum); 0 when the format has none (float, CSV, BrainVision, NWB). */
int bl_trace_channel_clip(const bl_trace *t, size_t c, double *lo, double *hi);
/* Read frames [start, start + n) of every channel, interleaved, into buf (n * channels doubles).
 * BL_ERR_INPUT when the range leaves the recording; BL_ERR_IO when fewer frames come back. */
bl_status bl_trace_read(bl_trace *t, int64_t start, size_t n, double *buf, bl_error *err);
void bl_trace_close(bl_trace *t);

/* A channel selection: each entry is one channel ("3", or a name "Cz") or a bipolar pair ("1-2" = channel 1
 * minus channel 2, "Cz-Pz"); numbers are 1-based; several entries are averaged. Entries given by name have
 * pos[i] = -1 until bl_montage_resolve (signal/channels.h) looks them up in a recording. */
typedef struct {
    size_t n;
    int *pos, *neg;      /* 0-based channel indices; neg[i] = -1 for a single channel */
    char **name;         /* n entries: the specification when it names channels, else NULL; NULL array when none */
    double *wpos, *wneg; /* per-entry multipliers (unit conversion x gain) set by bl_montage_resolve; NULL = 1 */
} bl_montage;

/* Parse channel specifications; errors name `key` (e.g. "recordings.channels[1]") and the value. */
bl_status bl_montage_parse(const char *const *specs, size_t n, const char *key, bl_montage **out, bl_error *err);
/* Largest channel number (1-based) the montage uses (entries by name not yet resolved count as 0). */
int bl_montage_max_channel(const bl_montage *m);
/* out[f] = gain * mean_i (x[f, pos_i] - x[f, neg_i]) for f < frames, from interleaved x. */
void bl_montage_apply(const bl_montage *m, const double *x, size_t frames, size_t channels, double gain, double *out);
void bl_montage_destroy(bl_montage *m);

/* Fill {column} placeholders of a file pattern from row `row` of the table; errors name the pattern,
 * the column and the table line. Caller frees *out. */
bl_status bl_pattern_expand(const char *pattern, const bl_table *table, size_t row, char **out, bl_error *err);

#endif
