/* The "scan" block of a study file (docs/scan.md): the time-frequency grid, the parameters whose slope
 * is tested, the null model, the permutations and the family-wise correction. Parsed from the copy of
 * the block that study.c keeps (bl_study.scan_json); errors name the key path ("scan.frequencies.to")
 * and the value, BL_ERR_INPUT (exit 2). Checks that need the recordings (Nyquist frequency, recording
 * length, frequency resolution) are in bl_scan_spec_check_signal. */
#ifndef BL_SCAN_SPEC_H
#define BL_SCAN_SPEC_H

#include "bandlink/status.h"
#include "design/study.h"

#include <stddef.h>

typedef enum { BL_SCAN_CORRECTION_MAX = 0, BL_SCAN_CORRECTION_CLUSTER } bl_scan_correction;

typedef struct {
    int param; /* bl_param index */
    char **by; /* condition columns whose level combinations get their own slope */
    size_t n_by;
} bl_scan_param;

typedef struct {
    size_t n_freqs;
    double *freq;              /* Hz, centre of each cell's band, increasing */
    double bandwidth;          /* Hz, full width 2W of the multitaper band (bandwidth rule "hz") */
    double bandwidth_fraction; /* > 0: full width = fraction * frequency instead (rule "fraction") */
    bl_align align;
    double from, to;     /* s relative to the alignment point: the span the windows tile */
    double length, step; /* s */
    size_t n_windows;
    double *window_from; /* s, start of each window (window_from + length = its end) */
    size_t n_params;
    bl_scan_param *params;
    char *null_model;    /* a model of the study (default: the first) */
    size_t permutations; /* default 1000 */
    bl_scan_correction correction;
    double cluster_threshold; /* uncorrected p below which a cell joins a cluster (default 0.05) */
    size_t refit;             /* the strongest cells refitted with a likelihood-ratio test (default 0) */
} bl_scan_spec;

/* NULL study->scan_json is an error ("the study has no \"scan\" block"). */
bl_status bl_scan_spec_parse(const bl_study *study, bl_scan_spec **out, bl_error *err);
void bl_scan_spec_destroy(bl_scan_spec *s);

/* Full bandwidth [Hz] of the cell at frequency f. */
double bl_scan_bandwidth(const bl_scan_spec *s, double f);

/* Checks against the recordings: fs [Hz], the shortest recording [s]. Errors name the key and value:
 * a window longer than the recording (scan.windows.length), a band above the Nyquist frequency
 * (scan.frequencies.to), a bandwidth below the resolution 2/length of one taper (scan.frequencies.bandwidth). */
bl_status bl_scan_spec_check_signal(const bl_scan_spec *s, const bl_study *study, double fs, double shortest,
                                    bl_error *err);

#endif
