/* Band power per trial: window each kept trial's recording, Welch PSD, band sums, artifact flags,
 * and the band regressors added to the trial table.
 *
 * Conventions (docs/study-file.md, shared signal conventions): window = [s + round(from*fs),
 * s + round(to*fs)) with s = round(onset*fs) (onset + rt when aligned to the response);
 * nperseg = round(segment*fs), noverlap = round(overlap*nperseg); band power = df * sum of PSD bins
 * with lo <= f <= hi, DC excluded, line-noise bins excluded when `line_noise` is set.
 * Columns added to trials->table: "<band>_power" (raw, unit^2) and "<band>" (after scale and
 * standardize over the kept trials; NAN for excluded trials).
 */
#ifndef BL_POWER_H
#define BL_POWER_H

#include "bandlink/status.h"
#include "design/study.h"
#include "design/trials.h"

#include <stddef.h>
#include <stdint.h>

typedef struct {
    char *name;
    double lo, hi;              /* Hz, as given */
    size_t first_bin, last_bin; /* closed range of bins inside the band (first > last: none) */
    size_t n_bins;              /* bins actually summed (line-noise bins left out) */
    unsigned char *used;        /* n_freqs flags: 1 = bin j is summed for this band */
} bl_power_band;

typedef struct {
    char *path;        /* resolved file */
    char *participant; /* participant of the first trial that uses it */
    double rate;
    size_t channels;
    int64_t frames;
    char format[64];
    size_t n_trials; /* trials windowed from it */
} bl_power_recording;

/* Mean spectrum of the kept trials of one condition cell, accumulated trial by trial (Welford 1962,
 * Technometrics 4(3):419) so that memory depends on the frequency grid, not on the number of trials. */
typedef struct {
    char *condition; /* cell label, "col=value;..." or "all" (as in fit_quantiles.csv) */
    size_t trials;   /* trials accumulated */
    size_t *n;       /* n_freqs: trials with a finite PSD value at bin j */
    double *mean;    /* n_freqs, unit^2/Hz */
    double *m2;      /* n_freqs: sum of squared deviations from the mean */
} bl_power_spectrum;

typedef struct {
    double fs; /* Hz (all recordings of a study must share it) */
    size_t nperseg, noverlap, nfft, n_segments;
    size_t window_samples; /* samples per trial window */
    double df;             /* Hz */
    size_t n_freqs;
    double *freq; /* n_freqs, j * df */
    size_t n_bands;
    bl_power_band *bands;
    size_t n_trials;            /* = trials->n */
    size_t n_spectra;           /* condition cells (design/cells.h) with at least one kept trial */
    bl_power_spectrum *spectra; /* mean PSD per cell over its kept trials, in order of first appearance */
    double *band_power;         /* n_trials x n_bands, raw unit^2; NAN for excluded trials */
    double *artifact_power;     /* n_trials x n_bands, raw unit^2 of artifact-flagged trials (NAN for the
                                    rest and for non-finite windows); written to power.csv only. Points
                                    into band_power's allocation (not freed on its own) */
    size_t n_window_confounds;  /* windows that reach before the onset (aligned to the response) or past
                                    the response (aligned to the onset) */
    size_t n_recordings;
    bl_power_recording *recordings;
    char *unit;            /* the study's unit; PSD is unit^2/Hz, band power unit^2 */
    size_t n_artifacts;    /* trials flagged by an artifact rule */
    size_t *row_recording; /* n_trials: index into recordings of each windowed trial, SIZE_MAX otherwise */
    double *row_ptp;       /* n_trials: peak-to-peak of the trial's signal in unit (largest over entries
                                    with "average": "power"); NAN when not windowed (for check's diagnosis) */
} bl_power_result;

/* Compute band power for every kept trial of `trials` (study must have recordings and power).
 * Artifacts exclude the trial with a reason ("artifact: peak-to-peak", "artifact: flat",
 * "artifact: clipping", "artifact: non-finite"). A window outside the recording, a missing file or
 * channel are errors naming participant, trial and file. threads <= 0: OpenMP default; results are
 * identical for any thread count. */
bl_status bl_power_compute(const bl_study *study, bl_trials *trials, int threads, bl_power_result **out,
                           bl_warnings *warn, bl_error *err);
void bl_power_result_destroy(bl_power_result *r);

/* Write power.csv (columns: participant, trial, the trial table's columns, <band>_power and <band>
 * per band, artifact). Atomic. Missing values "NA", numbers %.17g. An artifact-flagged trial keeps
 * its raw <band>_power (from artifact_power); its regressor <band> is NA. */
bl_status bl_power_write_csv(const bl_study *study, const bl_trials *trials, const bl_power_result *result,
                             const char *path, bl_error *err);

/* Human-readable summary for `bandlink check`: participants, trials kept/excluded by reason,
 * recordings (rate, channels, duration, format), Welch settings, frequency resolution and bins per band.
 * result may be NULL (study without recordings). Caller frees *out. BL_ERR_NOMEM (*out NULL) when memory
 * ran out. */
bl_status bl_check_summary(const bl_study *study, const bl_trials *trials, const bl_power_result *result, char **out,
                           bl_error *err);

#endif
