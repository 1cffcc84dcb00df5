/* Private: channel selections resolved against one recording: names looked up in the file's header (or the
 * CSV header row), bipolar pairs of names, and each channel's physical unit converted into the study's.
 */
#ifndef BL_CHANNELS_H
#define BL_CHANNELS_H

#include "signal/trace.h"

/* A copy of `m` with every entry's channel indices set for recording `t` and per-channel multipliers
 * gain x (the channel's unit in `unit`): 1 for formats without units (sound files, CSV), and for `unit` "au"
 * (then the selected channels must share a unit). An entry is first looked up as a whole name ("EEG Fz-Ref"),
 * then as "<a>-<b>" with a and b names or numbers. Errors (exit 2) name `key`, the entry, the file, and list
 * the available channels. Caller destroys *out. */
bl_status bl_montage_resolve(const bl_montage *m, const bl_trace *t, const char *key, const char *unit, double gain,
                             bl_montage **out, bl_error *err);

/* out[f] = entry k of a resolved montage alone: wpos x[pos] - wneg x[neg], from interleaved x. */
void bl_montage_apply_entry(const bl_montage *m, size_t k, const double *x, size_t frames, size_t channels,
                            double *out);

/* Volts per unit for "V", "volts", "mV", "uV", "µV" (UTF-8 micro or Greek mu, or Latin-1 0xB5), "nV"; NAN for
 * anything else (including "au"). */
double bl_unit_volts(const char *unit);

#endif
