/* Welch power spectral density, computed exactly as scipy.signal.welch (1.10) does, and band power.
 *
 * Sources: Welch (1967), "The use of fast Fourier transform for the estimation of power spectra",
 * IEEE Trans. Audio Electroacoust. 15(2):70-73; scipy.signal.welch/csd (periodic Hann, segmenting
 * with the tail dropped, detrend per segment, density scaling 1/(fs*sum w^2), one-sided doubling);
 * median bias b(K) from Allen et al., FINDCHIRP (2012), Appendix B. FFT: GSL mixed-radix real
 * transform (half-complex layout: Re X_j = data[2j-1], Im X_j = data[2j]; Re X_{n/2} = data[n-1]).
 *
 * A plan holds everything that depends only on the settings (window, wavetable) and is shared
 * read-only between threads; each thread owns a workspace. No allocation per segment or per call.
 */
#ifndef BL_SPECTRUM_H
#define BL_SPECTRUM_H

#include "bandlink/status.h"
#include "design/study.h" /* bl_detrend: the one detrend type, chosen in the study file */

#include <stddef.h>

typedef enum { BL_WELCH_MEAN = 0, BL_WELCH_MEDIAN } bl_welch_average;
typedef enum { BL_WELCH_DENSITY = 0, BL_WELCH_SPECTRUM } bl_welch_scaling;

typedef struct bl_welch_plan bl_welch_plan;
typedef struct bl_welch_work bl_welch_work;

/* fs > 0 [Hz]; 1 <= nperseg; noverlap < nperseg; nfft >= nperseg (0 = nperseg). */
bl_status bl_welch_plan_create(double fs, size_t nperseg, size_t noverlap, size_t nfft, bl_detrend detrend,
                               bl_welch_average average, bl_welch_scaling scaling, bl_welch_plan **out, bl_error *err);
void bl_welch_plan_destroy(bl_welch_plan *p);
/* Number of one-sided frequencies, nfft/2 + 1. */
size_t bl_welch_n_freqs(const bl_welch_plan *p);
/* Frequency resolution fs/nfft [Hz]; frequency of bin j is j * df. */
double bl_welch_df(const bl_welch_plan *p);
/* Number of segments for a signal of n samples: floor((n - noverlap) / (nperseg - noverlap)), 0 if n < nperseg. */
size_t bl_welch_n_segments(const bl_welch_plan *p, size_t n);

/* A workspace for one thread, for signals of up to max_n samples (the median needs one row per segment). */
bl_status bl_welch_work_create(const bl_welch_plan *p, size_t max_n, bl_welch_work **out, bl_error *err);
void bl_welch_work_destroy(bl_welch_work *w);

/* PSD of x[0..n) into psd[0..n_freqs): unit^2/Hz for density scaling, unit^2 for spectrum scaling.
 * BL_ERR_INPUT when n < nperseg or n > the workspace's max_n; BL_ERR_NUMERIC when the FFT fails. */
bl_status bl_welch_compute(const bl_welch_plan *p, bl_welch_work *w, const double *x, size_t n, double *psd,
                           bl_error *err);

/* The bins j with lo <= j*df <= hi (closed band) and j >= 1 (the DC bin never counts), within
 * [0, n_freqs). Sets *first > *last (count 0) when the band holds no bin. Returns the count. */
size_t bl_band_bins(double df, size_t n_freqs, double lo, double hi, size_t *first, size_t *last);

/* Rectangle rule: df * sum of psd[j] over j in [first, last] with mask[j] != 0 (mask NULL = all). */
double bl_band_power(const double *psd, double df, size_t first, size_t last, const unsigned char *mask);

/* Largest prime factor of n (n >= 2), and the nearest size >= n whose factors are 2, 3 and 5 only. */
size_t bl_largest_prime_factor(size_t n);
size_t bl_next_fast_size(size_t n);

#endif
