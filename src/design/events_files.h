/* Private: a recording's own events as a trial table — BrainVision markers (.vmrk: onset, duration,
 * trial_type "<type>/<description>", sample, channel), EDF+/BDF+ annotations (.edf/.bdf: onset, duration,
 * trial_type = the annotation text) and the NWB intervals/trials table (.nwb: onset = start_time,
 * duration = stop_time - start_time, then every column). Onsets in seconds from the first stored sample
 * (NWB: session time, as the file stores it). */
#ifndef BL_EVENTS_FILES_H
#define BL_EVENTS_FILES_H

#include "bandlink/status.h"
#include "design/table.h"

/* 1 .vmrk, 2 .edf/.bdf, 3 .nwb, 0 anything else (a CSV/TSV trial table). */
int bl_events_file_kind(const char *path);
bl_status bl_events_table_read(const char *path, bl_table **out, bl_error *err);

#endif
