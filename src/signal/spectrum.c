/* Welch PSD matching scipy.signal.welch, and band power by the rectangle rule.
 *
 * Sources: P. D. Welch (1967), IEEE Trans. Audio Electroacoust. 15(2):70-73; scipy 1.10
 * scipy/signal/_spectral_py.py (_spectral_helper: periodic window from get_window, detrend per segment,
 * scale 1/(fs*sum(w^2)) or 1/sum(w)^2, one-sided doubling of bins 1..ceil(nfft/2)-1, mean or median
 * average with _median_bias); B. Allen et al. (2012), FINDCHIRP, Phys. Rev. D 85:122006, Appendix B
 * (median bias). GSL 2.7 manual, "Mixed-radix FFT routines for real data" (half-complex layout).
 */
#include "signal/spectrum.h"

#include "core/gsl_guard.h"
#include <gsl/gsl_errno.h>
#include <gsl/gsl_fft_real.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

struct bl_welch_plan {
    double fs;
    size_t nperseg, noverlap, nfft, n_freqs;
    bl_detrend detrend;
    bl_welch_average average;
    double *window;
    double scale;                      /* per-segment |X|^2 factor */
    gsl_fft_real_wavetable *wavetable; /* read-only during transforms: shared between threads */
};

struct bl_welch_work {
    size_t max_n, max_k;
    gsl_fft_real_workspace *ws;
    double *buf;  /* nfft */
    double *rows; /* max_k x n_freqs, median only */
    double *col;  /* max_k, median only */
    double *seg;  /* n_freqs: one segment's power (mean average) */
};

bl_status bl_welch_plan_create(double fs, size_t nperseg, size_t noverlap, size_t nfft, bl_detrend detrend,
                               bl_welch_average average, bl_welch_scaling scaling, bl_welch_plan **out, bl_error *err)
{
    bl_gsl_guard();
    *out = NULL;
    if (nfft == 0) nfft = nperseg;
    if (!(fs > 0) || !isfinite(fs)) return bl_error_set(err, BL_ERR_INPUT, "Welch: sampling rate %g is not > 0", fs);
    if (nperseg < 2)
        return bl_error_set(err, BL_ERR_INPUT, "Welch: segment of %zu samples is too short (need >= 2)", nperseg);
    if (noverlap >= nperseg)
        return bl_error_set(err, BL_ERR_INPUT, "Welch: overlap of %zu samples must be below the segment (%zu)",
                            noverlap, nperseg);
    if (nfft < nperseg)
        return bl_error_set(err, BL_ERR_INPUT, "Welch: nfft %zu is smaller than the segment (%zu)", nfft, nperseg);
    bl_welch_plan *p = calloc(1, sizeof *p);
    if (!p) return bl_error_set(err, BL_ERR_NOMEM, "out of memory for the Welch plan");
    p->fs = fs;
    p->nperseg = nperseg;
    p->noverlap = noverlap;
    p->nfft = nfft;
    p->n_freqs = nfft / 2 + 1;
    p->detrend = detrend;
    p->average = average;
    p->window = malloc(nperseg * sizeof *p->window);
    p->wavetable = gsl_fft_real_wavetable_alloc(nfft);
    if (!p->window || !p->wavetable) {
        bl_welch_plan_destroy(p);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory for the Welch plan (nfft %zu)", nfft);
    }
    /* periodic (DFT-even) Hann: w[n] = 0.5 - 0.5 cos(2 pi n / M), scipy get_window('hann', M) */
    double s1 = 0, s2 = 0;
    for (size_t n = 0; n < nperseg; n++) {
        double w = 0.5 - 0.5 * cos(6.283185307179586476925286766559 * (double)n / (double)nperseg);
        p->window[n] = w;
        s1 += w;
        s2 += w * w;
    }
    p->scale = scaling == BL_WELCH_DENSITY ? 1.0 / (fs * s2) : 1.0 / (s1 * s1);
    *out = p;
    return BL_OK;
}

void bl_welch_plan_destroy(bl_welch_plan *p)
{
    if (!p) return;
    if (p->wavetable) gsl_fft_real_wavetable_free(p->wavetable);
    free(p->window);
    free(p);
}

size_t bl_welch_n_freqs(const bl_welch_plan *p) { return p->n_freqs; }
double bl_welch_df(const bl_welch_plan *p) { return p->fs / (double)p->nfft; }

size_t bl_welch_n_segments(const bl_welch_plan *p, size_t n)
{
    if (n < p->nperseg) return 0;
    return (n - p->noverlap) / (p->nperseg - p->noverlap);
}

bl_status bl_welch_work_create(const bl_welch_plan *p, size_t max_n, bl_welch_work **out, bl_error *err)
{
    bl_gsl_guard();
    *out = NULL;
    bl_welch_work *w = calloc(1, sizeof *w);
    if (!w) return bl_error_set(err, BL_ERR_NOMEM, "out of memory for a Welch workspace");
    w->max_n = max_n;
    w->max_k = bl_welch_n_segments(p, max_n);
    w->ws = gsl_fft_real_workspace_alloc(p->nfft);
    w->buf = malloc(p->nfft * sizeof *w->buf);
    w->seg = malloc(p->n_freqs * sizeof *w->seg);
    if (p->average == BL_WELCH_MEDIAN && w->max_k > 0) {
        w->rows = malloc(w->max_k * p->n_freqs * sizeof *w->rows);
        w->col = malloc(w->max_k * sizeof *w->col);
    }
    if (!w->ws || !w->buf || !w->seg || (p->average == BL_WELCH_MEDIAN && w->max_k > 0 && (!w->rows || !w->col))) {
        bl_welch_work_destroy(w);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory for a Welch workspace");
    }
    *out = w;
    return BL_OK;
}

void bl_welch_work_destroy(bl_welch_work *w)
{
    if (!w) return;
    if (w->ws) gsl_fft_real_workspace_free(w->ws);
    free(w->buf);
    free(w->rows);
    free(w->col);
    free(w->seg);
    free(w);
}

/* One segment: detrend, taper, zero-pad, FFT, scaled one-sided |X|^2 into out[n_freqs]. */
static int segment_power(const bl_welch_plan *p, bl_welch_work *w, const double *x, double *out)
{
    size_t m = p->nperseg, nfft = p->nfft;
    double *b = w->buf;
    if (p->detrend == BL_DETREND_NONE) {
        for (size_t i = 0; i < m; i++) b[i] = x[i] * p->window[i];
    } else {
        double mean = 0;
        for (size_t i = 0; i < m; i++) mean += x[i];
        mean /= (double)m;
        if (p->detrend == BL_DETREND_MEAN) {
            for (size_t i = 0; i < m; i++) b[i] = (x[i] - mean) * p->window[i];
        } else {
            /* least-squares line on centred time t = i - (m-1)/2: slope = sum t*y / sum t^2 */
            double c = 0.5 * (double)(m - 1), stt = 0, sty = 0;
            for (size_t i = 0; i < m; i++) {
                double t = (double)i - c;
                stt += t * t;
                sty += t * (x[i] - mean);
            }
            double slope = sty / stt;
            for (size_t i = 0; i < m; i++) b[i] = (x[i] - mean - slope * ((double)i - c)) * p->window[i];
        }
    }
    for (size_t i = m; i < nfft; i++) b[i] = 0;
    int rc = gsl_fft_real_transform(b, 1, nfft, p->wavetable, w->ws);
    if (rc) return rc;
    /* half-complex layout: b[0] = Re X0; Re Xj = b[2j-1], Im Xj = b[2j]; even nfft: Re X(n/2) = b[n-1] */
    double s = p->scale;
    out[0] = s * b[0] * b[0];
    size_t half = (nfft + 1) / 2; /* bins 1..half-1 have real and imaginary parts, and are doubled */
    for (size_t j = 1; j < half; j++) out[j] = 2.0 * s * (b[2 * j - 1] * b[2 * j - 1] + b[2 * j] * b[2 * j]);
    if (nfft % 2 == 0) out[nfft / 2] = s * b[nfft - 1] * b[nfft - 1];
    return 0;
}

static double median_bias(size_t k)
{
    double b = 1.0;
    for (size_t i = 1; i <= (k - 1) / 2; i++) b += 1.0 / (double)(2 * i + 1) - 1.0 / (double)(2 * i);
    return b;
}

static double median_of(double *v, size_t k)
{
    for (size_t i = 1; i < k; i++) { /* insertion sort: k (segments per window) is small */
        double x = v[i];
        size_t j = i;
        while (j > 0 && v[j - 1] > x) {
            v[j] = v[j - 1];
            j--;
        }
        v[j] = x;
    }
    return k % 2 ? v[k / 2] : 0.5 * (v[k / 2 - 1] + v[k / 2]);
}

bl_status bl_welch_compute(const bl_welch_plan *p, bl_welch_work *w, const double *x, size_t n, double *psd,
                           bl_error *err)
{
    if (n < p->nperseg)
        return bl_error_set(err, BL_ERR_INPUT, "Welch: %zu samples are fewer than one segment (%zu)", n, p->nperseg);
    if (n > w->max_n)
        return bl_error_set(err, BL_ERR_INTERNAL, "Welch: %zu samples exceed the workspace (%zu)", n, w->max_n);
    size_t nf = p->n_freqs, step = p->nperseg - p->noverlap;
    size_t k = bl_welch_n_segments(p, n);
    int rc;
    if (k == 1) {
        if ((rc = segment_power(p, w, x, psd))) goto fft_fail;
        return BL_OK;
    }
    if (p->average == BL_WELCH_MEAN) {
        memset(psd, 0, nf * sizeof *psd);
        for (size_t s = 0; s < k; s++) {
            if ((rc = segment_power(p, w, x + s * step, w->seg))) goto fft_fail;
            for (size_t j = 0; j < nf; j++) psd[j] += w->seg[j];
        }
        for (size_t j = 0; j < nf; j++) psd[j] /= (double)k;
        return BL_OK;
    }
    for (size_t s = 0; s < k; s++)
        if ((rc = segment_power(p, w, x + s * step, w->rows + s * nf))) goto fft_fail;
    double bias = median_bias(k);
    for (size_t j = 0; j < nf; j++) {
        for (size_t s = 0; s < k; s++) w->col[s] = w->rows[s * nf + j];
        psd[j] = median_of(w->col, k) / bias;
    }
    return BL_OK;
fft_fail:
    return bl_error_set(err, BL_ERR_NUMERIC, "Welch: GSL FFT of length %zu failed: %s", p->nfft, gsl_strerror(rc));
}

size_t bl_band_bins(double df, size_t n_freqs, double lo, double hi, size_t *first, size_t *last)
{
    /* a tolerance of 1e-9 bin keeps an edge that equals a bin frequency (4 Hz at df = 0.5) inside */
    double a = ceil(lo / df - 1e-9), b = floor(hi / df + 1e-9);
    if (a < 1) a = 1;
    if (b > (double)(n_freqs - 1)) b = (double)(n_freqs - 1);
    if (b < a) {
        *first = 1;
        *last = 0;
        return 0;
    }
    *first = (size_t)a;
    *last = (size_t)b;
    return *last - *first + 1;
}

double bl_band_power(const double *psd, double df, size_t first, size_t last, const unsigned char *mask)
{
    double s = 0;
    for (size_t j = first; j <= last && first <= last; j++)
        if (!mask || mask[j]) s += psd[j];
    return df * s;
}

size_t bl_largest_prime_factor(size_t n)
{
    size_t best = 1;
    for (size_t f = 2; f * f <= n; f++)
        while (n % f == 0) {
            best = f;
            n /= f;
        }
    return n > 1 ? n : best;
}

size_t bl_next_fast_size(size_t n)
{
    for (size_t m = n < 1 ? 1 : n;; m++) {
        size_t r = m;
        while (r % 2 == 0) r /= 2;
        while (r % 3 == 0) r /= 3;
        while (r % 5 == 0) r /= 5;
        if (r == 1) return m;
    }
}
