/* The provenance record of a results folder (provenance.json, and inside fits.json): bandlink version,
 * start and end times, seed, threads, permutations, the study as parsed, the SHA-256 (FIPS 180-4,
 * core/sha256.c) of the study file, the trial table and every recording read, Welch settings and the
 * frequency bins of each band, exclusion counts. docs/outputs.md lists every field. */
#include "analysis/provenance.h"
#include "design/trial_files.h"
#include "core/json.h"
#include "core/sha256.h"
#include "bl_config.h"

#include "core/strutil.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

static const char *detrend_name(bl_detrend d)
{
    return d == BL_DETREND_LINEAR ? "linear" : d == BL_DETREND_NONE ? "none" : "mean";
}

/* `path` made absolute (not resolved: a recordings pattern keeps its placeholders), so the record reads the
 * same from the results folder or anywhere else. Caller frees; NULL when memory ran out. */
static char *absolute_path(const char *path)
{
    if (path[0] == '/') return bl_strdup(path);
    char *cwd = getcwd(NULL, 0);
    if (!cwd) return NULL;
    while (path[0] == '.' && path[1] == '/') path += 2;
    size_t n = strlen(cwd) + strlen(path) + 2;
    char *p = malloc(n);
    if (p) snprintf(p, n, "%s/%s", cwd, path);
    free(cwd);
    return p;
}

/* Replace the string at obj[key] (when it is one) by its absolute form; 0 when memory ran out. */
static int absolute_key(cJSON *obj, const char *key)
{
    cJSON *it = obj ? cJSON_GetObjectItemCaseSensitive(obj, key) : NULL;
    if (!cJSON_IsString(it)) return 1;
    char *abs = absolute_path(it->valuestring);
    cJSON *rep = abs ? cJSON_CreateString(abs) : NULL;
    free(abs);
    if (!rep) return 0;
    return cJSON_ReplaceItemInObjectCaseSensitive(obj, key, rep) ? 1 : (cJSON_Delete(rep), 0);
}

/* One inputs[] entry; its digest from `known` (hashed beforehand) or computed now. */
static cJSON *input_entry(cJSON *arr, const char *role, const char *path, const char *known, bl_error *err,
                          bl_status *st)
{
    char hex[BL_SHA256_HEX_SIZE];
    if (known) memcpy(hex, known, BL_SHA256_HEX_SIZE);
    else if ((*st = bl_sha256_file(path, hex, err)) != BL_OK) return NULL;
    cJSON *o = cJSON_CreateObject();
    if (!o) return NULL;
    char *abs = absolute_path(path);
    if (!abs || !cJSON_AddStringToObject(o, "role", role) || !cJSON_AddStringToObject(o, "path", abs) ||
        !cJSON_AddStringToObject(o, "sha256", hex) || !cJSON_AddItemToArray(arr, o)) {
        free(abs);
        cJSON_Delete(o);
        return NULL; /* *st stays BL_OK: the caller reports out of memory */
    }
    free(abs);
    return o;
}

/* The provenance record of fits.json (docs/outputs.md). */
bl_status bl_provenance_create(const char *study_path, const bl_study *study, const bl_trials *trials,
                               const bl_power_result *pr, unsigned long seed, int threads, unsigned long permutations,
                               const char *started, const char (*hashes)[BL_SHA256_HEX_SIZE], cJSON **out,
                               bl_error *err)
{
    bl_status st = BL_OK;
    cJSON *p = cJSON_CreateObject();
    char *sj = NULL;
    bl_exclusion_count *ex = NULL;
    if (!p) goto nomem;
    if ((st = bl_study_to_json(study, &sj, err))) goto fail;
    if (!cJSON_AddStringToObject(p, "bandlink_version", BL_VERSION_STRING)) goto nomem;
    if (!cJSON_AddStringToObject(p, "started", started)) goto nomem;
    if (!cJSON_AddNumberToObject(p, "seed", (double)seed)) goto nomem;
    if (!cJSON_AddNumberToObject(p, "threads", threads)) goto nomem;
    if (!cJSON_AddNumberToObject(p, "permutations", (double)permutations)) goto nomem;
    cJSON *parsed = NULL;
    if ((st = bl_json_parse(sj, "the parsed study", &parsed, err))) goto fail;
    /* Paths absolute, so the recorded study parses again from the results folder (docs/outputs.md). */
    if (!absolute_key(cJSON_GetObjectItemCaseSensitive(parsed, "trials"), "file") ||
        !absolute_key(cJSON_GetObjectItemCaseSensitive(parsed, "recordings"), "file") ||
        !absolute_key(cJSON_GetObjectItemCaseSensitive(parsed, "bids"), "root") || !absolute_key(parsed, "output") ||
        !cJSON_AddItemToObject(p, "study", parsed)) {
        cJSON_Delete(parsed);
        goto nomem;
    }

    cJSON *inputs = cJSON_AddArrayToObject(p, "inputs");
    if (!inputs) goto nomem;
    if (!input_entry(inputs, "study", study_path, hashes ? hashes[0] : NULL, err, &st)) goto fail_or_nomem;
    /* a trials.file pattern or a BIDS tree: one entry per file read (design/trial_files.h) */
    const bl_trial_sources *files = trials ? trials->files : NULL;
    size_t n_tables = files ? files->n : 1;
    for (size_t k = 0; k < n_tables; k++)
        if (!input_entry(inputs, "trials", files ? files->path[k] : study->trials.file, hashes ? hashes[1 + k] : NULL,
                         err, &st))
            goto fail_or_nomem;
    for (size_t r = 0; pr && r < pr->n_recordings; r++) {
        const bl_power_recording *rec = &pr->recordings[r];
        cJSON *o = input_entry(inputs, "recording", rec->path, hashes ? hashes[1 + n_tables + r] : NULL, err, &st);
        if (!o) goto fail_or_nomem;
        if (!cJSON_AddStringToObject(o, "participant", rec->participant ? rec->participant : "")) goto nomem;
        if (!cJSON_AddStringToObject(o, "format", rec->format)) goto nomem;
        if (!cJSON_AddNumberToObject(o, "rate", rec->rate)) goto nomem;
        if (!cJSON_AddNumberToObject(o, "channels", (double)rec->channels)) goto nomem;
        if (!cJSON_AddNumberToObject(o, "frames", (double)rec->frames)) goto nomem;
        if (!cJSON_AddNumberToObject(o, "trials", (double)rec->n_trials)) goto nomem;
    }

    if (pr) {
        cJSON *w = cJSON_AddObjectToObject(p, "welch");
        if (!w) goto nomem;
        if (!cJSON_AddNumberToObject(w, "rate", pr->fs)) goto nomem;
        if (!cJSON_AddStringToObject(w, "align", study->power.align == BL_ALIGN_RESPONSE ? "response" : "onset"))
            goto nomem;
        if (!cJSON_AddNumberToObject(w, "from", study->power.from)) goto nomem;
        if (!cJSON_AddNumberToObject(w, "to", study->power.to)) goto nomem;
        if (!cJSON_AddNumberToObject(w, "window_samples", (double)pr->window_samples)) goto nomem;
        if (!cJSON_AddNumberToObject(w, "segment_samples", (double)pr->nperseg)) goto nomem;
        if (!cJSON_AddNumberToObject(w, "overlap_samples", (double)pr->noverlap)) goto nomem;
        if (!cJSON_AddNumberToObject(w, "fft_length", (double)pr->nfft)) goto nomem;
        if (!cJSON_AddNumberToObject(w, "segments", (double)pr->n_segments)) goto nomem;
        if (!cJSON_AddNumberToObject(w, "resolution_hz", pr->df)) goto nomem;
        if (!cJSON_AddStringToObject(w, "taper", "hann")) goto nomem;
        if (!cJSON_AddStringToObject(w, "detrend", detrend_name(study->power.detrend))) goto nomem;
        if (!cJSON_AddStringToObject(w, "average", study->power.median ? "median" : "mean")) goto nomem;
        if (!cJSON_AddStringToObject(w, "unit", pr->unit ? pr->unit : "")) goto nomem;
        if (!cJSON_AddNumberToObject(w, "line_noise", study->power.line_noise)) goto nomem;
        cJSON *bands = cJSON_AddArrayToObject(p, "bands");
        if (!bands) goto nomem;
        for (size_t b = 0; b < pr->n_bands; b++) {
            const bl_power_band *pb = &pr->bands[b];
            cJSON *o = cJSON_CreateObject();
            if (!o) goto nomem;
            if (!cJSON_AddItemToArray(bands, o)) goto nomem;
            if (!cJSON_AddStringToObject(o, "name", pb->name)) goto nomem;
            if (!cJSON_AddNumberToObject(o, "lo", pb->lo)) goto nomem;
            if (!cJSON_AddNumberToObject(o, "hi", pb->hi)) goto nomem;
            if (!cJSON_AddNumberToObject(o, "bins", (double)pb->n_bins)) goto nomem;
            cJSON *fr = cJSON_AddArrayToObject(o, "frequencies");
            if (!fr) goto nomem;
            for (size_t j = 0; j < pr->n_freqs; j++)
                if (pb->used && pb->used[j]) {
                    cJSON *f = cJSON_CreateNumber(pr->freq[j]);
                    if (!f || !cJSON_AddItemToArray(fr, f)) {
                        cJSON_Delete(f);
                        goto nomem;
                    }
                }
        }
    }

    cJSON *tr = cJSON_AddObjectToObject(p, "trials");
    if (!tr) goto nomem;
    if (!cJSON_AddNumberToObject(tr, "total", (double)trials->n)) goto nomem;
    if (!cJSON_AddNumberToObject(tr, "kept", (double)trials->n_kept)) goto nomem;
    if (!cJSON_AddNumberToObject(tr, "participants", (double)trials->n_participants)) goto nomem;
    cJSON *exo = cJSON_AddObjectToObject(tr, "excluded");
    if (!exo) goto nomem;
    size_t nex = 0;
    if ((st = bl_trials_exclusion_counts(trials, &ex, &nex, err))) goto fail;
    for (size_t i = 0; i < nex; i++)
        if (!cJSON_AddNumberToObject(exo, ex[i].reason, (double)ex[i].count)) goto nomem;
    free(ex);
    free(sj);
    *out = p;
    return BL_OK;
fail_or_nomem:
    if (st != BL_OK) goto fail;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "out of memory building the provenance record");
fail:
    free(ex);
    free(sj);
    cJSON_Delete(p);
    return st;
}
