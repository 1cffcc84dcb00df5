/* SHA-256 of the input files on a thread of its own, while the analysis goes on (input_hashes.c): the
 * provenance needs every input's digest, and reading the recordings whole a second time would otherwise
 * be a step of its own. */
#ifndef BL_ANALYSIS_INPUT_HASHES_H
#define BL_ANALYSIS_INPUT_HASHES_H

#include "bandlink/status.h"
#include "core/sha256.h"

#include <stddef.h>

typedef struct bl_input_hashes bl_input_hashes;

/* Start hashing `paths` (copied) in the background. Falls back to hashing in bl_input_hashes_wait when no
 * thread can be started. */
bl_status bl_input_hashes_start(const char *const *paths, size_t n, bl_input_hashes **out, bl_error *err);
/* Wait for the digests; *hex points to n strings of 64 hex digits, in the order of `paths`, owned by `h`.
 * The first file that could not be read is reported. */
bl_status bl_input_hashes_wait(bl_input_hashes *h, const char (**hex)[BL_SHA256_HEX_SIZE], bl_error *err);
/* Wait if needed, then free. NULL-safe. */
void bl_input_hashes_destroy(bl_input_hashes *h);

#endif
