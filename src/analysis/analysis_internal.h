/* The analysis handle's insides, for the library's own drivers (simulate.c) and tests. */
#ifndef BL_ANALYSIS_INTERNAL_H
#define BL_ANALYSIS_INTERNAL_H

#include "bandlink/analysis.h"
#include "analysis/input_hashes.h"
#include "design/study.h"
#include "design/trials.h"
#include "fit/fit.h"
#include "signal/power.h"

struct bl_analysis {
    char *study_path;
    bl_analysis_options opt;
    int threads;      /* resolved: >= 1 */
    char started[32]; /* UTC, when opened */
    double opened_at; /* monotonic seconds */
    bl_study *study;
    bl_trials *trials;
    bl_power_result *power; /* NULL until bl_analysis_power (or when the study has no band power) */
    bl_fit_set *fits;       /* NULL until bl_analysis_fit */
    char *target;           /* results folder; NULL until bl_analysis_target */
    int force;
    bl_warnings warnings;
    double seconds[BL_STEP_COUNT];
    char *fit_summary, *check_summary, *power_summary, *timings;
    bl_input_hashes *hashes;     /* the inputs being hashed in the background, once their list is known */
    struct bl_scan_result *scan; /* NULL until bl_analysis_scan */
    char *scan_summary;
};

#endif
