/* Private: one trial table from many files — `trials.file` patterns with {placeholders} (every matching file
 * is read; each placeholder's value becomes a column), and the file lists a BIDS tree yields. Rows keep
 * their files' order (files sorted by path, rows in file order); a column missing from one file while other
 * files have it is an error naming that file.
 */
#ifndef BL_TRIAL_FILES_H
#define BL_TRIAL_FILES_H

#include "bandlink/status.h"
#include "design/table.h"

typedef struct bl_trial_sources {
    size_t n, n_keys;
    char **path;       /* n files */
    char **key;        /* n_keys column names the files add (placeholders, BIDS entities) */
    char **value;      /* n x n_keys values, row-major; NULL = missing */
    size_t *first_row; /* n + 1 entries once read: file i holds stacked rows [first_row[i], first_row[i+1]) */
} bl_trial_sources;

/* The file stacked row `row` came from (for messages), or NULL. */
const char *bl_trial_sources_file_of(const bl_trial_sources *s, size_t row);

/* Every file matching `pattern` (an absolute or relative path whose segments may hold {name}
 * placeholders; a name used twice must match the same text). Errors: no file matches (naming the
 * pattern and the deepest folder searched). */
bl_status bl_trial_sources_glob(const char *pattern, bl_trial_sources **out, bl_error *err);
/* An empty list with the given key names, to be filled with bl_trial_sources_add. */
bl_trial_sources *bl_trial_sources_create(const char *const *keys, size_t n_keys);
/* Append a file with its n_keys values (copied). 0 when memory ran out. */
int bl_trial_sources_add(bl_trial_sources *s, const char *path, const char *const *values);
void bl_trial_sources_destroy(bl_trial_sources *s);

/* Read every file and stack them into one table named `name` (for messages). `required` (NULL-terminated,
 * may be NULL) lists columns each file must have. Each key becomes a text column unless a file already
 * has a column of that name. */
bl_status bl_trial_sources_read(bl_trial_sources *s, const char *name, const char *const *required, bl_table **out,
                                bl_error *err);

/* "<path>.*": the one file whose name is <path>'s name plus an extension bandlink reads as a recording
 * (companion files .vmrk, .eeg, .json and .tsv sidecars are skipped). Errors name the pattern and the
 * candidates. Caller frees *out. */
bl_status bl_resolve_any_extension(const char *path, char **out, bl_error *err);

/* The study's trial table: one file, a {placeholder} pattern, or the events files of its "bids" tree;
 * then trials.split. *files lists the files read (NULL for a single file), for the input checksums. */
struct bl_study;
bl_status bl_trial_table_load(const struct bl_study *study, bl_table **out, bl_trial_sources **files, bl_error *err);

#endif
