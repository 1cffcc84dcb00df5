/* Private: the part of `bandlink check` that breaks exclusions down per participant and recording, and
 * names a likely scale/unit problem when most of one recording's trials are flagged as artifacts. */
#ifndef BL_CHECK_BREAKDOWN_H
#define BL_CHECK_BREAKDOWN_H

#include "signal/power.h"

/* Text lines for the check summary (caller frees), or NULL when memory ran out. result may be NULL. */
char *bl_check_breakdown(const bl_study *study, const bl_trials *trials, const bl_power_result *result);

#endif
