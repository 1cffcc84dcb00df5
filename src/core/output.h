/* Atomic output files: write into a temporary file beside the target, then rename over it,
 * so a reader never sees a half-written file and a failure leaves the old file intact. */
#ifndef BL_OUTPUT_H
#define BL_OUTPUT_H

#include "bandlink/status.h"

#include <stdio.h>

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

#endif
