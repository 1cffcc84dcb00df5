/* The whole job as one library call (`bandlink run`): band power -> fit every model -> compare ->
 * goodness of fit -> figures -> report, with provenance, stage timings and a results folder that is
 * written into a temporary folder beside the target and renamed into place only when complete.
 * Also the staging-folder helpers shared with `bandlink simulate`. */
#ifndef BL_PIPELINE_H
#define BL_PIPELINE_H

#include "bandlink/status.h"

#include <stddef.h>

/* ---- Staging folder: build a folder completely, then move it into place. ---- */
typedef struct bl_stage bl_stage;

/* Prepare to (re)create folder `target`. When it exists and force == 0: BL_ERR_EXISTS naming it.
 * Creates the parent folder and a hidden temporary folder beside the target (".<name>.partial-<pid>-XXXXXX");
 * leftovers of killed runs (whose process is gone) are removed first. */
BL_API bl_status bl_stage_begin(const char *target, int force, bl_stage **out, bl_error *err);
/* The temporary folder to write into. */
BL_API const char *bl_stage_dir(const bl_stage *s);
/* Move the finished folder into place (replacing the old one atomically where the system allows, else
 * old -> aside, new -> target, old removed), free the stage. On failure the old folder is kept. */
BL_API bl_status bl_stage_commit(bl_stage *s, bl_error *err);
/* Remove the temporary folder and free. NULL-safe. */
BL_API void bl_stage_abort(bl_stage *s);
/* Remove a folder tree (like rm -r). */
BL_API bl_status bl_remove_tree(const char *path, bl_error *err);

#endif
