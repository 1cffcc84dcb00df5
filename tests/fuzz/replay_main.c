/* Replays every file of the given folders through a fuzz target's entry point, so the seed corpus and
 * every input that once crashed a parser run in the normal suite (built with gcc, under ASan+UBSan in
 * .ci/run's sanitizer pass). Passing means: no crash, no sanitizer report. */
#include <dirent.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static int replay_file(const char *path)
{
    FILE *f = fopen(path, "rb");
    if (!f) return 0;
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    uint8_t *buf = malloc(n > 0 ? (size_t)n : 1);
    if (!buf || fread(buf, 1, (size_t)n, f) != (size_t)n) {
        fclose(f);
        free(buf);
        return 0;
    }
    fclose(f);
    LLVMFuzzerTestOneInput(buf, (size_t)n);
    free(buf);
    return 1;
}

int main(int argc, char **argv)
{
    int files = 0;
    for (int i = 1; i < argc; i++) {
        DIR *d = opendir(argv[i]);
        if (!d) {
            fprintf(stderr, "FAIL: cannot open folder %s\n", argv[i]);
            return 1;
        }
        struct dirent *e;
        while ((e = readdir(d))) {
            if (e->d_name[0] == '.') continue;
            char path[4096];
            snprintf(path, sizeof path, "%s/%s", argv[i], e->d_name);
            if (replay_file(path)) {
                printf("PASS: %s replayed without a crash\n", path);
                files++;
            }
        }
        closedir(d);
    }
    printf("%d files replayed\n", files);
    return files > 0 ? 0 : 1;
}
