/* Atomic output files (write into a temporary file beside the target, then rename over it, so a reader
 * never sees a half-written file and a failure leaves the old file intact), results folders written whole
 * or not at all (results_folder.c), and path helpers. Files and folders follow the user's umask. */
#ifndef BL_OUTPUT_H
#define BL_OUTPUT_H

#include "bandlink/status.h"

#include <stddef.h>
#include <stdio.h>
#include <sys/types.h>

typedef struct bl_outfile bl_outfile;

/* Open a temporary file in the folder of `path` (which must exist). */
bl_status bl_outfile_open(const char *path, bl_outfile **out, bl_error *err);
/* The stream to write into. */
FILE *bl_outfile_stream(bl_outfile *f);
/* Flush, fsync, check for write errors, rename to the target; always frees `f`. On failure the
 * temporary file is removed and the target is untouched. */
bl_status bl_outfile_commit(bl_outfile *f, bl_error *err);
/* Discard: remove the temporary file and free. NULL-safe. */
void bl_outfile_abort(bl_outfile *f);

/* Write a whole buffer atomically. */
bl_status bl_write_file_atomic(const char *path, const void *data, size_t size, bl_error *err);
/* Create a folder and its parents (like mkdir -p). */
bl_status bl_mkdir_p(const char *path, bl_error *err);
/* Join a folder and a name into a new string *out (caller frees). BL_ERR_NOMEM (*out NULL) when
 * memory ran out. */
bl_status bl_path_join(const char *dir, const char *name, char **out, bl_error *err);

/* ---- Results folders: build a folder completely, then move it into place. ---- */

/* The marker file in every results folder: its first line says bandlink wrote it, then one line per entry
 * (folders end in '/'). */
#define BL_RESULTS_MARKER ".bandlink-results"

typedef struct bl_results_folder bl_results_folder;

/* May `target` become a results folder? Checked before any work, creating nothing: not a symbolic link,
 * not ".", an existing folder only with `force` and only when bandlink wrote everything in it (its marker),
 * and none of `inputs` (files or folders; NULL entries skipped) inside it. Errors name the target and the
 * culprit. */
bl_status bl_results_folder_check(const char *target, int force, const char *const *inputs, size_t n_inputs,
                                  bl_error *err);
/* Check again, create the parent folders and a hidden temporary folder beside the target
 * (".<name>.partial-<pid>-XXXXXX"); leftovers of killed runs whose process is gone are removed first.
 * `command` ("run", "fit", ...) is recorded in the marker. */
bl_status bl_results_folder_begin(const char *target, int force, const char *command, bl_results_folder **out,
                                  bl_error *err);
/* The temporary folder to write into. */
const char *bl_results_folder_dir(const bl_results_folder *s);
/* Write the marker, move the finished folder into place (atomically swapping with the old one where the
 * system allows), free. On failure the old folder is kept whole. */
bl_status bl_results_folder_commit(bl_results_folder *s, bl_error *err);
/* Remove the temporary folder and free. NULL-safe. */
void bl_results_folder_abort(bl_results_folder *s);

/* *inside = 1 when the existing file or folder `path` is `folder` or lies inside it (symbolic links
 * resolved); 0 otherwise, or when either does not exist. */
bl_status bl_path_inside(const char *path, const char *folder, int *inside, bl_error *err);
/* Remove a folder tree (like rm -r). */
bl_status bl_remove_tree(const char *path, bl_error *err);
/* `mode` less the process's umask: the mode a new file or folder should get. */
mode_t bl_creation_mode(mode_t mode);

#endif
