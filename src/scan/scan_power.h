/* Per-trial power of every cell of a scan grid by the multitaper method (Thomson 1982), with discrete
 * prolate spheroidal (Slepian) sequences as tapers (Slepian 1978; Percival & Walden 1993, ch. 8).
 *
 * Cell (frequency f, window w): the window's samples x[t], t < N (detrended as the study's power.detrend
 * says), K = floor(2 NW) - 1 tapers with NW = N * (bandwidth(f) / 2) / fs, and
 *     power = 2 / (K fs) * sum_k |sum_t h_k[t] x[t] exp(-2 pi i f t / fs)|^2     [unit^2/Hz]
 * (one-sided density, tapers of unit energy), i.e. the eigenspectrum average at f, which is the average
 * power over [f - W, f + W]. Windows: [a + round(from_w fs), + N) with a = round(alignment time * fs),
 * N = round(length fs). Windows are read by seeking in the recording (signal/trace.h), one span per trial.
 */
#ifndef BL_SCAN_POWER_H
#define BL_SCAN_POWER_H

#include "bandlink/status.h"
#include "design/study.h"
#include "design/trials.h"
#include "scan/scan_spec.h"

#include <stddef.h>

/* The K tapers of length N with time-half-bandwidth NW, largest concentration first, unit energy, signs
 * as scipy.signal.windows.dpss (symmetric ones with a positive sum, antisymmetric ones starting with a
 * positive lobe). From the tridiagonal eigenproblem of Slepian (1978) by LAPACKE_dstevr. tapers: K x N
 * row-major. BL_ERR_NUMERIC when LAPACK fails. */
bl_status bl_dpss(size_t N, double NW, size_t K, double *tapers, bl_error *err);

/* Tapers for a cell: K = max(1, floor(2 NW) - 1). */
size_t bl_dpss_count(double NW);

/* Raw cell power of the trials rows[0..n): out[c * n + j] for cell c = f * n_windows + w and trial j.
 * fs_out (may be NULL) receives the sampling rate. Errors name participant, trial and file, or the scan
 * key (bl_scan_spec_check_signal). threads <= 0: OpenMP default; results do not depend on it. */
bl_status bl_scan_power(const bl_study *study, const bl_scan_spec *spec, const bl_trials *trials, const size_t *rows,
                        size_t n, int threads, double *out, double *fs_out, bl_error *err);

/* The checks of bl_scan_spec_check_signal against the recordings of the kept trials (headers only), so that
 * a bad grid is reported before the null model is fitted. */
bl_status bl_scan_power_check(const bl_study *study, const bl_scan_spec *spec, const bl_trials *trials, bl_error *err);

/* Scale (power.scale) and standardise (power.standardize) each cell's values over the n trials, in
 * place, by the study's rules (docs/study-file.md: z-score within participant, or participant x
 * power.condition). Errors: power that cannot be log-scaled, a group without spread (naming the cell). */
bl_status bl_scan_standardize(const bl_study *study, const bl_trials *trials, const size_t *rows, size_t n,
                              const bl_scan_spec *spec, double *x, bl_error *err);

#endif
