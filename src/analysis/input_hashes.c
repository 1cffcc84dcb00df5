/* SHA-256 of the input files on a thread of its own (input_hashes.h). */
#include "analysis/input_hashes.h"
#include "core/strutil.h"

#include <pthread.h>
#include <stdlib.h>
#include <string.h>

struct bl_input_hashes {
    char **paths;
    size_t n;
    char (*hex)[BL_SHA256_HEX_SIZE];
    bl_status status;
    bl_error err;
    pthread_t thread;
    int running; /* the thread was started and not yet joined */
    int done;    /* digests computed (or failed) */
};

static void hash_all(bl_input_hashes *h)
{
    h->status = BL_OK;
    for (size_t i = 0; i < h->n && h->status == BL_OK; i++) h->status = bl_sha256_file(h->paths[i], h->hex[i], &h->err);
    h->done = 1;
}

static void *hash_thread(void *arg)
{
    hash_all(arg);
    return NULL;
}

void bl_input_hashes_destroy(bl_input_hashes *h)
{
    if (!h) return;
    if (h->running) pthread_join(h->thread, NULL);
    for (size_t i = 0; i < h->n; i++) free(h->paths[i]);
    free(h->paths);
    free(h->hex);
    free(h);
}

bl_status bl_input_hashes_start(const char *const *paths, size_t n, bl_input_hashes **out, bl_error *err)
{
    *out = NULL;
    bl_input_hashes *h = calloc(1, sizeof *h);
    if (!h || !(h->paths = calloc(n ? n : 1, sizeof *h->paths)) || !(h->hex = calloc(n ? n : 1, sizeof *h->hex))) {
        bl_input_hashes_destroy(h);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    for (size_t i = 0; i < n; i++, h->n = i)
        if (!(h->paths[i] = bl_strdup(paths[i]))) {
            bl_input_hashes_destroy(h);
            return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        }
    h->n = n;
    h->running = pthread_create(&h->thread, NULL, hash_thread, h) == 0;
    *out = h;
    return BL_OK;
}

bl_status bl_input_hashes_wait(bl_input_hashes *h, const char (**hex)[BL_SHA256_HEX_SIZE], bl_error *err)
{
    if (h->running) {
        pthread_join(h->thread, NULL);
        h->running = 0;
    }
    if (!h->done) hash_all(h); /* no thread could be started */
    if (h->status != BL_OK) {
        if (err) *err = h->err;
        return h->status;
    }
    *hex = (const char(*)[BL_SHA256_HEX_SIZE])h->hex;
    return BL_OK;
}
