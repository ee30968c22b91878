/* The two clocks squall reads, in integer nanoseconds. */
#include <time.h>

#include "squall/clock.h"

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
