/* The library's own GSL error handling: a program that never touched GSL's error handler calls a
 * library function in which GSL fails, and gets a bl_status back instead of GSL's default abort().
 *
 * How GSL is made to fail: bl_welch_plan_create with a 2-sample segment zero-padded to an FFT of
 * 2^46 points. The library's own buffers are tiny; GSL's gsl_fft_real_wavetable_alloc then asks for
 * 2^45 complex twiddle factors (2^49 bytes, beyond a 47-bit address space), malloc fails, and GSL
 * reports GSL_ENOMEM through its error handler (GSL reference manual, "Error handling": the default
 * handler prints a message and calls abort()). Each case runs in a child process, since the
 * handler is process-wide and the library sets it once per process.
 */
#include "harness.h"

#include "signal/spectrum.h"

#include <gsl/gsl_errno.h>
#include <sys/wait.h>
#include <unistd.h>

static const size_t huge_nfft = (size_t)1 << 46;

static int host_handler_calls;
static void host_handler(const char *reason, const char *file, int line, int gsl_errno)
{
    (void)reason, (void)file, (void)line, (void)gsl_errno;
    host_handler_calls++;
}

/* Child: 0 when the plan failed with BL_ERR_NOMEM and the handler afterwards is as expected. */
static int child(int install_host_handler)
{
    if (install_host_handler) gsl_set_error_handler(host_handler);
    bl_welch_plan *plan = NULL;
    bl_error err = {0};
    bl_status st = bl_welch_plan_create(1000.0, 2, 0, huge_nfft, BL_DETREND_MEAN, BL_WELCH_MEAN, BL_WELCH_DENSITY,
                                        &plan, &err);
    bl_welch_plan_destroy(plan);
    if (st != BL_ERR_NOMEM) return 10;
    if (install_host_handler) {
        /* The host's handler is kept, and it saw GSL's failure. */
        gsl_error_handler_t *now = gsl_set_error_handler(NULL);
        if (now != host_handler) return 11;
        if (host_handler_calls < 1) return 12;
    } else {
        /* The library replaced GSL's default (NULL, i.e. abort) by the "off" handler. */
        if (gsl_set_error_handler(NULL) == NULL) return 13;
    }
    return 0;
}

static int run_child(int install_host_handler, int *signal_out)
{
    fflush(stdout);
    pid_t pid = fork();
    if (pid == 0) _exit(child(install_host_handler));
    int status = 0;
    if (pid < 0 || waitpid(pid, &status, 0) != pid) return -1;
    *signal_out = WIFSIGNALED(status) ? WTERMSIG(status) : 0;
    return WIFEXITED(status) ? WEXITSTATUS(status) : -1;
}

int main(void)
{
    int sig = 0;
    int rc = run_child(0, &sig);
    check_true(rc == 0 && sig == 0,
               "GSL fails inside bl_welch_plan_create in a program that left GSL's handler alone: "
               "BL_ERR_NOMEM, no abort (child exit %d, signal %d)",
               rc, sig);
    rc = run_child(1, &sig);
    check_true(rc == 0 && sig == 0,
               "a handler the host installed is kept and sees the GSL failure; the call still returns "
               "BL_ERR_NOMEM (child exit %d, signal %d)",
               rc, sig);
    return harness_summary();
}
