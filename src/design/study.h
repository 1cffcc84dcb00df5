/* A study file (JSON) parsed and checked into plain structs. Every key of the contract in
 * docs/study-file.md; unknown keys, wrong types and impossible values are errors naming the key
 * path (e.g. "models[1].threshold.slopes") and the value. Relative paths are resolved against the
 * study file's folder. Defaults are filled in, so the parsed study is complete. */
#ifndef BL_STUDY_H
#define BL_STUDY_H

#include "bandlink/status.h"
#include "bandlink/wiener.h"

#include <stddef.h>

typedef enum { BL_LINK_DEFAULT = 0, BL_LINK_IDENTITY, BL_LINK_LOG } bl_link;

/* power.window.from and .to must lie within this many seconds of the alignment point. */
#define BL_MAX_WINDOW_SECONDS 1e6

typedef struct {
    char *regressor; /* a band name or a numeric trial column */
    char **by;       /* one slope per level combination of these columns; n_by = 0: one shared slope */
    size_t n_by;
} bl_slope_spec;

typedef struct {
    int named;    /* the model (or a model it extends) names this parameter */
    int is_fixed; /* {"fixed": value} */
    double fixed;
    char **per; /* one intercept per level combination of these columns */
    size_t n_per;
    bl_slope_spec *slopes;
    size_t n_slopes;
    bl_link link; /* BL_LINK_DEFAULT: identity (see docs/models.md) */
    /* Hierarchical fits: the terms whose coefficients vary by participant ("intercept",
     * "intercept:<level>", "<regressor>", "<regressor>:<level>"). varies_given = 0: the default
     * (the intercept of a free parameter varies, slopes do not). */
    char **varies;
    size_t n_varies;
    int varies_given;
} bl_param_spec;

typedef struct {
    char *name;
    char *extends;                  /* NULL, or the name of the model it copied (already applied) */
    bl_param_spec param[BL_NPARAM]; /* after `extends` and defaults: unnamed parameters are free
                                        single values (threshold, drift, nondecision) or fixed
                                        (start 0.5, the rest 0) */
    int correlated;                 /* hierarchical: participants' effects with an unstructured covariance */
} bl_model_spec;

typedef struct {
    char *name;
    double lo, hi; /* Hz, closed band [lo, hi] */
} bl_band_spec;

typedef enum { BL_SCALE_LINEAR = 0, BL_SCALE_LOG10, BL_SCALE_DB } bl_scale;
typedef enum {
    BL_STANDARDIZE_NONE = 0,
    BL_STANDARDIZE_PARTICIPANT,
    BL_STANDARDIZE_PARTICIPANT_CONDITION
} bl_standardize;
typedef enum { BL_ALIGN_ONSET = 0, BL_ALIGN_RESPONSE } bl_align;
/* What each Welch segment loses before the taper: its mean (scipy's detrend='constant'), its
 * least-squares line, or nothing. The one detrend type: spectrum.h takes it as it is. */
typedef enum { BL_DETREND_MEAN = 0, BL_DETREND_LINEAR, BL_DETREND_NONE } bl_detrend;
typedef enum {
    BL_PARTICIPANTS_POOLED = 0,
    BL_PARTICIPANTS_SEPARATE,
    BL_PARTICIPANTS_HIERARCHICAL
} bl_participants_mode;

typedef struct bl_study {
    char *path; /* the study file as given */
    char *dir;  /* its folder, for resolving relative paths */

    struct {
        char *file;        /* resolved path */
        char *participant; /* column name */
        char *rt;          /* column name */
        int rt_in_ms;      /* rt_unit "ms" */
        char *response;    /* choice column */
        char **upper;      /* values of `response` (and of `stimulus`) meaning the upper boundary */
        size_t n_upper;
        char *stimulus;        /* NULL = accuracy coding */
        double rt_min, rt_max; /* keep rules; NAN when not given */
        char *trial;           /* column with the trial's own label ("trial" by default, used when present) */
        int trial_given;       /* the study named `trial` explicitly (then the column must exist) */
    } trials;

    struct {
        char *root; /* resolved BIDS dataset folder; NULL without a "bids" block */
        char *task; /* the task label of the *_task-<label>_events.tsv files */
    } bids;
    struct {
        char **column; /* trials.split: columns holding combined factors ("left/easy") */
        char ***into;  /* per column, the names of the parts */
        size_t *n_into, n;
    } split;

    int has_recordings; /* the study has a "recordings" section */
    struct {
        char *file;         /* resolved path, may contain {column} placeholders */
        char *onset;        /* column with each trial's onset [s from recording start] */
        double gain;        /* multiplies what the reader returns into `unit` (1 with per-format gains) */
        char **gain_format; /* "gain": {"flac": 838860.8, "csv": 1}: file extensions (no dot) ... */
        double *gain_value; /* ... and their gains; a recording of another extension gets `gain` */
        size_t n_gain_formats;
        char *unit;      /* e.g. "uV" */
        double rate;     /* Hz, required for CSV traces; NAN otherwise */
        char **channels; /* "3", "1-2", "Cz", "Cz-Pz"; several are averaged */
        size_t n_channels;
        char *series;      /* NWB: the ElectricalSeries to read when a file has several; NULL = the only one */
        int average_power; /* "average": "power" (mean of each entry's band power), else the signals' mean */
    } recordings;

    int has_power; /* the study has a "power" section */
    struct {
        bl_align align;
        double from, to; /* seconds relative to the alignment point, to > from */
        double segment;  /* seconds */
        double overlap;  /* fraction in [0, 1) */
        bl_detrend detrend;
        bl_band_spec *bands;
        size_t n_bands;
        bl_scale scale;
        bl_standardize standardize;
        char **condition; /* columns defining "condition" for participant_condition */
        size_t n_condition;
        double line_noise;   /* 0 = off, else 50 or 60 Hz */
        double peak_to_peak; /* artifact limit in `unit`; 0 = off */
        double flat;         /* flat if peak-to-peak below this; 0 = off */
        int clipping;        /* flag samples at the format's full scale */
        int median;          /* average "median" (bias-corrected) instead of "mean" */
    } power;

    struct {
        bl_participants_mode participants; /* when not given: hierarchical for >= 3 participants, else pooled
                                              (bl_study_participants_mode) */
        int participants_given;
        int starts;     /* optimiser starts per fit */
        int quadrature; /* hierarchical: Gauss-Hermite nodes per dimension; 1 = the Laplace approximation */
    } fit;

    bl_model_spec *models;
    size_t n_models;

    char *output;            /* resolved results folder */
    struct cJSON *scan_json; /* a copy of the "scan" block (checked by src/scan/scan_spec.c), or NULL */
} bl_study;

bl_status bl_study_load(const char *path, bl_study **out, bl_error *err);
bl_status bl_study_parse(const char *json, const char *path, bl_study **out, bl_error *err);
/* The study as parsed, defaults filled in, as a JSON string *out (caller frees with free()).
 * BL_ERR_NOMEM (*out NULL) when memory ran out. */
bl_status bl_study_to_json(const bl_study *study, char **out, bl_error *err);
void bl_study_destroy(bl_study *study);

/* The participants mode a fit uses: the study's, or when the study does not name one, hierarchical
 * with 3 or more participants or when a model names `varies`/`correlated` or fit.quadrature > 1, and
 * pooled otherwise. */
bl_participants_mode bl_study_participants_mode(const bl_study *s, size_t n_participants);

/* The gain for one recording: its extension's entry of a per-format "gain" object, else recordings.gain. */
double bl_study_recording_gain(const bl_study *s, const char *path);

#endif
