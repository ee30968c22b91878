/* The conductor's wake-up at a nanosecond instant: a Linux timerfd with an absolute
 * CLOCK_MONOTONIC expiry (timerfd_create(2), TFD_TIMER_ABSTIME), polled by libuv with a uv_poll.
 *
 * libuv's own timers count whole milliseconds on the loop's cached clock (libuv 1.44
 * docs/src/timer.rst, "timeout ... in milliseconds"), so requests planned anywhere inside a
 * millisecond all left together on the next tick. A timerfd expires on the monotonic clock's
 * nanosecond (the hrtimer behind it has no timer slack, unlike epoll_wait's own timeout), and
 * its descriptor becomes readable, which wakes the loop's epoll_wait at once. The expiry is set
 * a little before the instant (the kernel's wake-up and the loop pass take some microseconds);
 * the caller spins the rest (run.c, on_wake). CLOCK_MONOTONIC is clock_mono_ns()'s clock.
 *
 * How early: the smoothed latency of the wake-ups armed for a future instant plus four times its
 * smoothed deviation (the estimator of TCP's retransmission timer, RFC 6298 section 2, with
 * gains 1/8 and 1/4), kept within WAKE_EARLY_MIN_NS..RUN_WAKE_EARLY_MAX_NS: a quiet machine
 * spins a few microseconds per request, a busy one up to 100 µs. Measured on loopback with
 * tools/bench/wire.sh (RESULTS.md, "wire"). */
#include <errno.h>
#include <stdint.h>
#include <sys/timerfd.h>
#include <unistd.h>

#include "run_int.h"
#include "squall/clock.h"
#include "squall/err.h"

#define WAKE_EARLY_MIN_NS INT64_C(10000)

int64_t run_wake_early(const run_wake_t *w)
{
    int64_t e = w->late_avg_ns + 4 * w->late_dev_ns;
    return e < WAKE_EARLY_MIN_NS       ? WAKE_EARLY_MIN_NS
           : e > RUN_WAKE_EARLY_MAX_NS ? RUN_WAKE_EARLY_MAX_NS
                                       : e;
}

/* One measured wake-up latency into the estimate. */
static void learn(run_wake_t *w, int64_t late)
{
    int64_t d = late > w->late_avg_ns ? late - w->late_avg_ns : w->late_avg_ns - late;
    w->late_dev_ns += (d - w->late_dev_ns) / 4;
    w->late_avg_ns += (late - w->late_avg_ns) / 8;
}

int64_t run_wake_spin(int64_t at_ns)
{
    int64_t now;
    while ((now = clock_mono_ns()) < at_ns) {
#if defined(__x86_64__) || defined(__i386__)
        __builtin_ia32_pause();
#endif
    }
    return now;
}

static void on_ready(uv_poll_t *p, int status, int events)
{
    (void)events;
    run_wake_t *w = p->data;
    uint64_t n;
    /* Reading clears the readiness; EAGAIN when a re-arm already cleared it. */
    while (read(w->fd, &n, sizeof n) < 0 && errno == EINTR) {
    }
    if (status < 0)
        return;
    /* How late the loop got here after the expiry, when it was armed for a future instant. */
    int64_t late = clock_mono_ns() - w->armed_ns;
    if (w->future && late >= 0)
        learn(w, late);
    w->armed_ns = INT64_MAX;
    w->cb(w->data);
}

int run_wake_init(uv_loop_t *loop, run_wake_t *w, void (*cb)(void *), void *data)
{
    w->cb = cb;
    w->data = data;
    w->armed_ns = INT64_MAX;
    w->late_avg_ns = w->late_dev_ns = 10000; /* a first margin of 50 µs, learnt from there */
    w->fd = timerfd_create(CLOCK_MONOTONIC, TFD_NONBLOCK | TFD_CLOEXEC);
    if (w->fd < 0)
        return SQ_EIO;
    if (uv_poll_init(loop, &w->poll, w->fd) != 0) {
        close(w->fd);
        w->fd = -1;
        return SQ_ELIBUV;
    }
    w->poll.data = w;
    w->started = false;
    return 0;
}

void run_wake_at(run_wake_t *w, int64_t at_ns)
{
    if (at_ns == w->armed_ns)
        return;
    /* 0 would disarm the timer: an instant at or before the clock's start fires at once. */
    if (at_ns < 1)
        at_ns = 1;
    struct itimerspec its = {
        .it_value = {.tv_sec = at_ns / 1000000000, .tv_nsec = at_ns % 1000000000},
    };
    if (timerfd_settime(w->fd, TFD_TIMER_ABSTIME, &its, NULL) != 0)
        return;
    w->armed_ns = at_ns;
    w->future = at_ns > clock_mono_ns();
    if (!w->started) {
        uv_poll_start(&w->poll, UV_READABLE, on_ready);
        w->started = true;
    }
}

void run_wake_stop(run_wake_t *w)
{
    struct itimerspec its = {0};
    if (!w->cb || w->fd < 0)
        return;
    timerfd_settime(w->fd, 0, &its, NULL);
    w->armed_ns = INT64_MAX;
    if (w->started) {
        uv_poll_stop(&w->poll);
        w->started = false;
    }
}

void run_wake_close(run_wake_t *w)
{
    if (!w->cb || w->fd < 0)
        return; /* never set up */
    run_wake_stop(w);
    /* uv_close stops the poll at once (libuv 1.44 src/unix/poll.c), so the fd may close next. */
    if (!uv_is_closing((uv_handle_t *)&w->poll))
        uv_close((uv_handle_t *)&w->poll, NULL);
    close(w->fd);
    w->fd = -1;
}
