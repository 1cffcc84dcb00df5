/* Fault injection for CLI tests, loaded with LD_PRELOAD (the idea of jq's src/inject_errors.c).
 *
 * BL_FAULT="<call>:<n>[,<call>:<n>...]" makes the n-th call (1-based, counted from program start) of
 * <call> fail, and every later call too when BL_FAULT_STICKY=1. <call> is one of:
 *   malloc   (malloc, calloc and realloc share one counter; returns NULL, errno ENOMEM)
 *   fopen    (returns NULL, errno EIO)
 *   write    (the write(2) wrapper used by libsndfile and by stdio flushes through fflush; errno ENOSPC)
 *   fsync    (errno EIO)   rename (rename and renameat2 share one counter; errno EIO)
 *   mkdir    (errno EACCES)   read (errno EIO)
 * BL_FAULT_TRACE=1 prints a backtrace where the failure is injected.
 * The real functions are found with dlsym(RTLD_NEXT). Counting starts only after this library's
 * constructor ran, so the dynamic loader's own allocations are not counted.
 */
#undef _FILE_OFFSET_BITS /* define fopen and fopen64 separately */
#ifndef _GNU_SOURCE
#define _GNU_SOURCE
#endif
#include <dlfcn.h>
#include <execinfo.h>
#include <fcntl.h>
#include <errno.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>
#include <unistd.h>

enum { F_MALLOC, F_FOPEN, F_WRITE, F_FSYNC, F_RENAME, F_MKDIR, F_READ, F_COUNT };
static const char *const fault_names[F_COUNT] = {"malloc", "fopen", "write", "fsync", "rename", "mkdir", "read"};
static long fault_at[F_COUNT];
static long fault_calls[F_COUNT];
static int fault_sticky, fault_ready;

__attribute__((constructor)) static void fault_init(void)
{
    const char *spec = getenv("BL_FAULT");
    const char *sticky = getenv("BL_FAULT_STICKY");
    fault_sticky = sticky && strcmp(sticky, "1") == 0;
    while (spec && *spec) {
        for (int k = 0; k < F_COUNT; k++) {
            size_t n = strlen(fault_names[k]);
            if (strncmp(spec, fault_names[k], n) == 0 && spec[n] == ':') fault_at[k] = atol(spec + n + 1);
        }
        spec = strchr(spec, ',');
        if (spec) spec++;
    }
    fault_ready = 1;
}

/* BL_FAULT_REPORT=1: print the call counts at exit, so a test can pick N inside a run's range. */
__attribute__((destructor)) static void fault_report(void)
{
    const char *r = getenv("BL_FAULT_REPORT");
    if (!r || strcmp(r, "1") != 0) return;
    for (int k = 0; k < F_COUNT; k++) fprintf(stderr, "bl_fault %s %ld\n", fault_names[k], fault_calls[k]);
}

/* True when this call of kind k must fail. */
static int fault_now(int k)
{
    if (!fault_ready) return 0;
    long c = __atomic_add_fetch(&fault_calls[k], 1, __ATOMIC_RELAXED);
    if (fault_at[k] <= 0) return 0;
    int fail = fault_sticky ? c >= fault_at[k] : c == fault_at[k];
    if (fail && getenv("BL_FAULT_TRACE")) {
        /* Where the injected failure hit (backtrace_symbols_fd does not allocate). */
        void *frames[32];
        int n = backtrace(frames, 32);
        backtrace_symbols_fd(frames, n, 2);
    }
    return fail;
}

#define REAL(name)                                                                                                     \
    static __typeof__(&name) real_##name;                                                                              \
    if (!real_##name) real_##name = (__typeof__(&name))dlsym(RTLD_NEXT, #name)

/* dlsym itself may call calloc: serve those early requests from a small static arena. */
static char early_arena[4096];
static size_t early_used;
static int in_dlsym;

static void *early_alloc(size_t n)
{
    n = (n + 15) & ~(size_t)15;
    if (early_used + n > sizeof early_arena) return NULL;
    void *p = early_arena + early_used;
    early_used += n;
    return p;
}
static int is_early(void *p) { return (char *)p >= early_arena && (char *)p < early_arena + sizeof early_arena; }

typedef void *(*malloc_fn)(size_t);
typedef void *(*calloc_fn)(size_t, size_t);
typedef void *(*realloc_fn)(void *, size_t);
typedef void (*free_fn)(void *);

static malloc_fn real_malloc_p;
static calloc_fn real_calloc_p;
static realloc_fn real_realloc_p;
static free_fn real_free_p;

static void resolve_alloc(void)
{
    if (real_malloc_p) return;
    in_dlsym = 1;
    real_malloc_p = (malloc_fn)dlsym(RTLD_NEXT, "malloc");
    real_calloc_p = (calloc_fn)dlsym(RTLD_NEXT, "calloc");
    real_realloc_p = (realloc_fn)dlsym(RTLD_NEXT, "realloc");
    real_free_p = (free_fn)dlsym(RTLD_NEXT, "free");
    in_dlsym = 0;
}

/* Allocations made by the C library itself (qsort's buffer, stdio buffers: it falls back without them by
 * design), by libgomp, and by libsndfile and its codecs (1.2.0 crashes in sf_open when one of its own allocations fails: a
 * defect outside bandlink that no caller can handle) are not failed and not counted: the sweep is over
 * allocations whose failure bandlink itself must report. */
static int exempt_caller(void *ret)
{
    Dl_info info;
    if (!dladdr(ret, &info) || !info.dli_fname) return 0;
    const char *f = strrchr(info.dli_fname, '/');
    f = f ? f + 1 : info.dli_fname;
    /* libsndfile's codecs too (libFLAC, libvorbis, libogg, libopus, libmpg123): their failures surface as
     * "decoder error" without saying memory ran out */
    static const char *const exempt[] = {"libc.so", "libgomp", "libsndfile", "libFLAC",   "libvorbis",
                                         "libogg",  "libopus", "libmpg123",  "libmp3lame"};
    for (size_t i = 0; i < sizeof exempt / sizeof exempt[0]; i++)
        if (strncmp(f, exempt[i], strlen(exempt[i])) == 0) return 1;
    return 0;
}

void *malloc(size_t n)
{
    if (in_dlsym) return early_alloc(n);
    resolve_alloc();
    if (!exempt_caller(__builtin_return_address(0)) && fault_now(F_MALLOC)) {
        errno = ENOMEM;
        return NULL;
    }
    return real_malloc_p(n);
}

void *calloc(size_t a, size_t b)
{
    if (in_dlsym) {
        void *p = early_alloc(a * b);
        if (p) memset(p, 0, a * b);
        return p;
    }
    resolve_alloc();
    if (!exempt_caller(__builtin_return_address(0)) && fault_now(F_MALLOC)) {
        errno = ENOMEM;
        return NULL;
    }
    return real_calloc_p(a, b);
}

void *realloc(void *p, size_t n)
{
    resolve_alloc();
    if (is_early(p)) {
        void *q = real_malloc_p(n);
        if (q) memcpy(q, p, n < 64 ? n : 64);
        return q;
    }
    if (!exempt_caller(__builtin_return_address(0)) && fault_now(F_MALLOC)) {
        errno = ENOMEM;
        return NULL;
    }
    return real_realloc_p(p, n);
}

void free(void *p)
{
    if (!p || is_early(p)) return;
    resolve_alloc();
    real_free_p(p);
}

FILE *fopen(const char *path, const char *mode)
{
    REAL(fopen);
    if (fault_now(F_FOPEN)) {
        errno = EIO;
        return NULL;
    }
    return real_fopen(path, mode);
}

FILE *fopen64(const char *path, const char *mode)
{
    REAL(fopen64);
    if (fault_now(F_FOPEN)) {
        errno = EIO;
        return NULL;
    }
    return real_fopen64(path, mode);
}

ssize_t write(int fd, const void *buf, size_t n)
{
    REAL(write);
    if (fd > 2 && fault_now(F_WRITE)) {
        errno = ENOSPC;
        return -1;
    }
    return real_write(fd, buf, n);
}

ssize_t read(int fd, void *buf, size_t n)
{
    REAL(read);
    if (fd > 2 && fault_now(F_READ)) {
        errno = EIO;
        return -1;
    }
    return real_read(fd, buf, n);
}

int fsync(int fd)
{
    REAL(fsync);
    if (fault_now(F_FSYNC)) {
        errno = EIO;
        return -1;
    }
    return real_fsync(fd);
}

int rename(const char *a, const char *b)
{
    REAL(rename);
    if (fault_now(F_RENAME)) {
        errno = EIO;
        return -1;
    }
    return real_rename(a, b);
}

int renameat2(int olddirfd, const char *a, int newdirfd, const char *b, unsigned int flags)
{
    REAL(renameat2);
    if (fault_now(F_RENAME)) {
        errno = EIO;
        return -1;
    }
    return real_renameat2(olddirfd, a, newdirfd, b, flags);
}

int mkdir(const char *path, mode_t mode)
{
    REAL(mkdir);
    if (fault_now(F_MKDIR)) {
        errno = EACCES;
        return -1;
    }
    return real_mkdir(path, mode);
}
