/* Clocks: a monotonic clock for stage timings and the UTC time stamp of provenance records. */
#ifndef BL_CORE_CLOCK_H
#define BL_CORE_CLOCK_H

/* Seconds on a monotonic clock (unaffected by changes of the wall clock). */
double bl_clock_seconds(void);
/* The current UTC time as "YYYY-MM-DDTHH:MM:SSZ". */
void bl_utc_stamp(char out[32]);

#endif
