/* The two clocks squall reads (see squall/clock.h): wall time for stamps, monotonic time for
 * intervals, both in int64 nanoseconds. */
#include "squall/clock.h"

#include <time.h>

static int64_t read_ns(clockid_t id)
{
    struct timespec ts;
    clock_gettime(id, &ts);
    return (int64_t)ts.tv_sec * 1000000000 + ts.tv_nsec;
}

int64_t clock_real_ns(void)
{
    return read_ns(CLOCK_REALTIME);
}

int64_t clock_mono_ns(void)
{
    return read_ns(CLOCK_MONOTONIC);
}
