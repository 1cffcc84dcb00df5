/* GSL's error handler, made safe for a program that embeds the library. */
#ifndef BL_GSL_GUARD_H
#define BL_GSL_GUARD_H

/* Make sure a GSL error inside bandlink comes back as a status instead of GSL's default abort().
 * Called at the top of every library entry point that reaches GSL; the work is done once per
 * process (pthread_once), so it is cheap and thread-safe to call anywhere. A handler the host
 * program installed itself (gsl_set_error_handler) is kept. */
void bl_gsl_guard(void);

#endif
