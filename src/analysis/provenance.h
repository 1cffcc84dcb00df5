/* The provenance record written with every result (provenance.c). */
#ifndef BL_ANALYSIS_PROVENANCE_H
#define BL_ANALYSIS_PROVENANCE_H

#include "bandlink/status.h"
#include "design/study.h"
#include "design/trials.h"
#include "core/sha256.h"
#include "signal/power.h"

#include <cjson/cJSON.h>

/* Build the record (caller frees with cJSON_Delete). `power` may be NULL; `started` is a UTC stamp.
 * `hashes` (may be NULL: computed here) holds the SHA-256 of the study file, the trial table and each
 * recording of `power`, in that order. */
bl_status bl_provenance_create(const char *study_path, const bl_study *study, const bl_trials *trials,
                               const bl_power_result *power, unsigned long seed, int threads,
                               unsigned long permutations, const char *started,
                               const char (*hashes)[BL_SHA256_HEX_SIZE], cJSON **out, bl_error *err);

#endif
