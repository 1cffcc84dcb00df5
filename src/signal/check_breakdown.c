/* Exclusions per participant and recording, and the scale/unit diagnosis for `bandlink check`. */
#include "signal/check_breakdown.h"
#include "core/textbuf.h"

#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y;
}

/* Median of the finite peak-to-peak values of rows in (or, with inside = 0, outside) recording rec. */
static double median_ptp(const bl_power_result *r, size_t rec, int inside, double *lo, double *hi)
{
    double *v = malloc((r->n_trials ? r->n_trials : 1) * sizeof *v);
    size_t n = 0;
    if (!v) return NAN;
    for (size_t i = 0; i < r->n_trials; i++)
        if (r->row_recording[i] != SIZE_MAX && (r->row_recording[i] == rec) == inside && isfinite(r->row_ptp[i]))
            v[n++] = r->row_ptp[i];
    double m = NAN;
    if (n) {
        qsort(v, n, sizeof *v, cmp_double);
        m = n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
        if (lo) *lo = v[0];
        if (hi) *hi = v[n - 1];
    }
    free(v);
    return m;
}

/* Most of recording k's windows flagged: say so, with the values seen and what they suggest. */
static void diagnose(bl_textbuf *b, const bl_study *s, const bl_trials *t, const bl_power_result *r, size_t k)
{
    size_t windowed = 0, flagged = 0;
    const char *reason = NULL;
    for (size_t i = 0; i < r->n_trials; i++) {
        if (r->row_recording[i] != k) continue;
        windowed++;
        if (t->excluded[i] && strncmp(t->excluded[i], "artifact:", 9) == 0) {
            flagged++;
            reason = t->excluded[i];
        }
    }
    if (windowed < 3 || 2 * flagged <= windowed) return;
    double lo = NAN, hi = NAN, med = median_ptp(r, k, 1, &lo, &hi), other = median_ptp(r, k, 0, NULL, NULL);
    const char *u = r->unit;
    bl_textbuf_printf(b,
                      "  ! %s: %zu of %zu trials flagged (%s); peak-to-peak of its windows %.4g to %.4g %s "
                      "(median %.4g)",
                      r->recordings[k].path, flagged, windowed, reason, lo, hi, u, med);
    if (isfinite(other)) bl_textbuf_printf(b, ", other recordings median %.4g %s", other, u);
    if (strcmp(reason, "artifact: peak-to-peak") == 0)
        bl_textbuf_printf(b, ", limit %.4g %s", s->power.peak_to_peak, u);
    else if (strcmp(reason, "artifact: flat") == 0) bl_textbuf_printf(b, ", flat below %.4g %s", s->power.flat, u);
    double ratio = isfinite(other) && other > 0 && med > 0 ? med / other : NAN;
    double decades = log10(ratio);
    bl_textbuf_printf(b, ".\n    Likely a scale/unit problem, not the data: ");
    if (isfinite(decades) && fabs(decades) >= 1.5)
        bl_textbuf_printf(b, "this recording's values are about 10^%.0f times the others' (%s), ", decades,
                          fabs(fabs(decades) - 3) < 0.5   ? "as between mV and uV"
                          : fabs(fabs(decades) - 6) < 0.5 ? "as between V and uV"
                                                          : "a gain or unit mismatch");
    bl_textbuf_printf(b, "check recordings.gain and recordings.unit (sound files and CSV traces take `gain`; "
                         "EDF/BDF/BrainVision/NWB carry their own unit) and the artifact limits.\n");
}

char *bl_check_breakdown(const bl_study *s, const bl_trials *t, const bl_power_result *r)
{
    bl_textbuf b = {0};
    bl_textbuf_printf(&b, "by participant (trials, kept, excluded by reason)%s\n", r ? " and recording" : "");
    size_t *reason_n = calloc(t->n ? t->n : 1, sizeof *reason_n);
    const char **reasons = calloc(t->n ? t->n : 1, sizeof *reasons);
    if (!reason_n || !reasons) {
        free(reason_n);
        free(reasons);
        return NULL;
    }
    size_t shown = t->n_participants < 50 ? t->n_participants : 50;
    for (size_t p = 0; p < shown; p++) {
        size_t total = 0, kept = 0, nr = 0;
        for (size_t i = 0; i < t->n; i++) {
            if (t->participant[i] != p) continue;
            total++;
            if (!t->excluded[i]) {
                kept++;
                continue;
            }
            size_t k = 0;
            while (k < nr && strcmp(reasons[k], t->excluded[i]) != 0) k++;
            if (k == nr) reasons[nr] = t->excluded[i], reason_n[nr++] = 0;
            reason_n[k]++;
        }
        bl_textbuf_printf(&b, "  %s: %zu trials, %zu kept", t->participants[p], total, kept);
        for (size_t k = 0; k < nr; k++) bl_textbuf_printf(&b, "%s%s %zu", k ? ", " : "; ", reasons[k], reason_n[k]);
        bl_textbuf_printf(&b, "\n");
        for (size_t k = 0; r && k < r->n_recordings; k++) {
            size_t windowed = 0, flagged = 0;
            for (size_t i = 0; i < t->n; i++)
                if (r->row_recording[i] == k && t->participant[i] == p) {
                    windowed++;
                    flagged += t->excluded[i] && strncmp(t->excluded[i], "artifact:", 9) == 0;
                }
            if (windowed)
                bl_textbuf_printf(&b, "    %s: %zu windowed, %zu flagged as artifacts\n", r->recordings[k].path,
                                  windowed, flagged);
        }
    }
    if (shown < t->n_participants) bl_textbuf_printf(&b, "  ... %zu more participants\n", t->n_participants - shown);
    free(reason_n);
    free(reasons);
    for (size_t k = 0; r && r->row_recording && k < r->n_recordings; k++) diagnose(&b, s, t, r, k);
    return bl_textbuf_take(&b);
}
