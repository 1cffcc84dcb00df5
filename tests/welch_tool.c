/* Test helper for the live scipy comparison: PSD of a raw float64 file.
 * usage: welch_tool IN.f64 FS NPERSEG NOVERLAP NFFT constant|linear|none mean|median density|spectrum OUT.f64 */
#include "signal/spectrum.h"

#include <gsl/gsl_errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

int main(int argc, char **argv)
{
    gsl_set_error_handler_off();
    if (argc != 10) {
        fprintf(stderr, "usage: welch_tool IN FS NPERSEG NOVERLAP NFFT DETREND AVERAGE SCALING OUT\n");
        return 2;
    }
    FILE *f = fopen(argv[1], "rb");
    if (!f) return 2;
    fseek(f, 0, SEEK_END);
    size_t n = (size_t)ftell(f) / sizeof(double);
    fseek(f, 0, SEEK_SET);
    double *x = malloc(n * sizeof *x + 8);
    if (fread(x, sizeof *x, n, f) != n) return 2;
    fclose(f);
    bl_detrend d = strcmp(argv[6], "constant") == 0 ? BL_DETREND_MEAN
                   : strcmp(argv[6], "linear") == 0 ? BL_DETREND_LINEAR
                                                    : BL_DETREND_NONE;
    bl_welch_plan *p = NULL;
    bl_welch_work *w = NULL;
    bl_error err = {0};
    if (bl_welch_plan_create(atof(argv[2]), (size_t)atol(argv[3]), (size_t)atol(argv[4]), (size_t)atol(argv[5]), d,
                             strcmp(argv[7], "median") == 0 ? BL_WELCH_MEDIAN : BL_WELCH_MEAN,
                             strcmp(argv[8], "spectrum") == 0 ? BL_WELCH_SPECTRUM : BL_WELCH_DENSITY, &p, &err) ||
        bl_welch_work_create(p, n, &w, &err)) {
        fprintf(stderr, "%s\n", err.message);
        return 2;
    }
    size_t nf = bl_welch_n_freqs(p);
    double *psd = malloc(nf * sizeof *psd);
    if (bl_welch_compute(p, w, x, n, psd, &err)) {
        fprintf(stderr, "%s\n", err.message);
        return 1;
    }
    f = fopen(argv[9], "wb");
    if (!f || fwrite(psd, sizeof *psd, nf, f) != nf || fclose(f)) return 1;
    bl_welch_work_destroy(w);
    bl_welch_plan_destroy(p);
    free(psd);
    free(x);
    return 0;
}
