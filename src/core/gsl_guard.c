/* GSL reports errors through one process-wide handler whose default calls abort(). bandlink checks
 * the status of every GSL call it makes, so it needs GSL to return those statuses, not abort.
 *
 * Choice: switch the handler off once, at the first library entry point that reaches GSL, rather
 * than call the _e variants everywhere: most GSL calls bandlink makes (allocators, FFT, the
 * multimin drivers, random numbers) have no _e variant, and allocators report out-of-memory only
 * through the handler. The handler is a global of GSL, not of a thread, so setting it per call and
 * restoring it afterwards would race between threads; pthread_once sets it exactly once, before any
 * thread can get past the guard. A handler the host installed before the first call is its own
 * choice and is put back: we replace only GSL's default (a NULL handler means abort()).
 */
#include "core/gsl_guard.h"

#include <gsl/gsl_errno.h>
#include <pthread.h>

static pthread_once_t gsl_guard_once = PTHREAD_ONCE_INIT;

static void gsl_guard_install(void)
{
    gsl_error_handler_t *previous = gsl_set_error_handler_off();
    if (previous != NULL) gsl_set_error_handler(previous);
}

void bl_gsl_guard(void) { (void)pthread_once(&gsl_guard_once, gsl_guard_install); }
