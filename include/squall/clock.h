/* Clocks: the wall clock and the monotonic clock in integer nanoseconds. The monotonic one has
 * the same base as libuv's uv_hrtime() (CLOCK_MONOTONIC), so the two can be compared. */
#ifndef SQUALL_CLOCK_H
#define SQUALL_CLOCK_H

#include <stdint.h>

int64_t clock_real_ns(void); /* CLOCK_REALTIME */
int64_t clock_mono_ns(void); /* CLOCK_MONOTONIC */

#endif
