/* Every status code has its own text and exit code (the libsndfile tests/error_test.c idea). */
#include "core/output.h"
#include "bandlink/status.h"
#include "harness.h"

#include <string.h>
#include <unistd.h>

HARNESS_CASE(status_texts_and_exit_codes)
{
    for (int s = 0; s < BL_STATUS_COUNT; s++) {
        check_true(strcmp(bl_strerror((bl_status)s), "unknown status") != 0, "status %d has a text", s);
        for (int t = 0; t < s; t++)
            check_true(strcmp(bl_strerror((bl_status)s), bl_strerror((bl_status)t)) != 0,
                       "status %d and %d have different texts", s, t);
    }
    check_true(bl_status_exit_code(BL_OK) == 0, "ok exits 0");
    check_true(bl_status_exit_code(BL_ERR_INPUT) == 2, "bad input exits 2");
    check_true(bl_status_exit_code(BL_ERR_IO) == 1, "io failure exits 1");
}

HARNESS_CASE(one_line_messages)
{
    bl_error err = {0};
    bl_error_set(&err, BL_ERR_INPUT, "trials.csv:%d:%d: line\nbreak", 3, 4);
    check_true(err.status == BL_ERR_INPUT && strchr(err.message, '\n') == NULL, "messages stay on one line");
}

HARNESS_CASE(atomic_write)
{
    bl_error err = {0};
    /* Atomic write: the target appears whole, no temporary file is left behind. */
    char dir[] = "/tmp/bl_test_status_XXXXXX";
    check_true(mkdtemp(dir) != NULL, "temporary folder");
    char *path = NULL, *sub = NULL;
    check_true(bl_path_join(dir, "sub/x.txt", &path, &err) == BL_OK && bl_path_join(dir, "sub", &sub, &err) == BL_OK,
               "paths joined");
    /* POSIX path syntax (IEEE Std 1003.1, "Pathname"): one slash between folder and name. */
    char *joined = NULL;
    check_true(bl_path_join("a/", "b", &joined, &err) == BL_OK && strcmp(joined, "a/b") == 0,
               "a folder ending in '/' gets no second slash (%s)", joined ? joined : "NULL");
    free(joined);
    check_true(bl_mkdir_p(sub, &err) == BL_OK, "mkdir -p");
    check_true(bl_write_file_atomic(path, "hello\n", 6, &err) == BL_OK, "atomic write");
    FILE *f = fopen(path, "r");
    char buf[16] = {0};
    check_true(f && fread(buf, 1, sizeof buf, f) == 6 && strcmp(buf, "hello\n") == 0, "content read back");
    if (f) fclose(f);
    unlink(path);
    rmdir(sub);
    check_true(rmdir(dir) == 0, "no temporary file left behind");
    free(path);
    free(sub);
}

int main(int argc, char **argv)
{
    static const harness_case cases[] = {
        HARNESS_ENTRY(status_texts_and_exit_codes),
        HARNESS_ENTRY(one_line_messages),
        HARNESS_ENTRY(atomic_write),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
