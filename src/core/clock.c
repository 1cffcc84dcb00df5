/* Clocks (clock.h). */
#include "core/clock.h"

#include <time.h>

double bl_clock_seconds(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

void bl_utc_stamp(char out[32])
{
    struct timespec ts;
    clock_gettime(CLOCK_REALTIME, &ts);
    struct tm tm;
    gmtime_r(&ts.tv_sec, &tm);
    strftime(out, 32, "%Y-%m-%dT%H:%M:%SZ", &tm);
}
