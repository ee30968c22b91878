/* Clocks, read in one place: wall time for stamps that people and other hosts read, monotonic
 * time for intervals.
 *
 * clock_mono_ns() reads CLOCK_MONOTONIC, the clock libuv's uv_hrtime() reads on Linux (libuv
 * 1.44 src/unix, uv__hrtime with UV_CLOCK_PRECISE), so both give the same instant on the same base
 * and may be mixed; this file does not depend on libuv. The base is arbitrary (boot, on Linux):
 * compare monotonic readings with each other only. clock_real_ns() reads CLOCK_REALTIME, which
 * can jump when the system clock is set: never measure an interval with it. */
#ifndef SQUALL_CLOCK_H
#define SQUALL_CLOCK_H

#include <stdint.h>

/* Nanoseconds since the Unix epoch (CLOCK_REALTIME). */
int64_t clock_real_ns(void);
/* Nanoseconds on the monotonic clock (CLOCK_MONOTONIC; uv_hrtime()'s base). */
int64_t clock_mono_ns(void);

#endif
