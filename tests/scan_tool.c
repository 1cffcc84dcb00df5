/* Helper for tests/reference/scan_scipy_live.py: prints what the scan computes so that python3-scipy can
 * check it on the same samples.
 *   scan_tool dpss N NW K        K tapers of length N, one per line
 *   scan_tool power STUDY.json   raw multitaper power: one line per kept trial, cells in scan.csv order
 *                                (frequency-major), after a header line "fs N"
 */
#include "design/study.h"
#include "design/trials.h"
#include "scan/scan_power.h"
#include "scan/scan_spec.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int dpss_main(char **argv)
{
    size_t N = (size_t)atol(argv[2]), K = (size_t)atol(argv[4]);
    double NW = atof(argv[3]);
    double *h = malloc(N * K * sizeof *h);
    bl_error err = {0};
    if (!h || bl_dpss(N, NW, K, h, &err)) {
        fprintf(stderr, "dpss: %s\n", err.message);
        return 1;
    }
    for (size_t k = 0; k < K; k++)
        for (size_t t = 0; t < N; t++) printf("%.17g%c", h[k * N + t], t + 1 < N ? ' ' : '\n');
    free(h);
    return 0;
}

static int power_main(const char *path)
{
    bl_study *s = NULL;
    bl_trials *t = NULL;
    bl_scan_spec *sp = NULL;
    bl_warnings w = {0};
    bl_error err = {0};
    if (bl_study_load(path, &s, &err) || bl_trials_load(s, &t, &w, &err) || bl_scan_spec_parse(s, &sp, &err)) {
        fprintf(stderr, "scan_tool: %s\n", err.message);
        return 2;
    }
    size_t n = 0, nc = sp->n_freqs * sp->n_windows;
    size_t *rows = malloc(t->n * sizeof *rows);
    for (size_t i = 0; i < t->n; i++)
        if (!t->excluded[i]) rows[n++] = i;
    double *x = malloc(nc * n * sizeof *x), fs = 0;
    if (bl_scan_power(s, sp, t, rows, n, 2, x, &fs, &err)) {
        fprintf(stderr, "scan_tool: %s\n", err.message);
        return 2;
    }
    printf("%.17g %ld\n", fs, lround(sp->length * fs));
    for (size_t j = 0; j < n; j++)
        for (size_t c = 0; c < nc; c++) printf("%.17g%c", x[c * n + j], c + 1 < nc ? ' ' : '\n');
    free(x);
    free(rows);
    bl_scan_spec_destroy(sp);
    bl_trials_destroy(t);
    bl_study_destroy(s);
    bl_warnings_clear(&w);
    return 0;
}

int main(int argc, char **argv)
{
    if (argc == 5 && !strcmp(argv[1], "dpss")) return dpss_main(argv);
    if (argc == 3 && !strcmp(argv[1], "power")) return power_main(argv[2]);
    fprintf(stderr, "usage: scan_tool dpss N NW K | scan_tool power STUDY.json\n");
    return 2;
}
