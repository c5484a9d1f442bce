/* clock: the scheduler's two clocks. The real one is CLOCK_MONOTONIC and
 * waits with an absolute clock_nanosleep to just before the deadline, then
 * spins; the virtual one (run --fast) jumps to each deadline at once.
 * Not for the event queue (schedule.c). */
#include "schedule.h"

#include <errno.h>
#include <stdlib.h>
#include <sys/prctl.h>
#include <time.h>

#define SPIN 50e-6   /* the last stretch spun, past the sleep's wake-up jitter */

struct sched_clock {
    bool virtual_time;
    double now;
};

sched_clock *clock_new(bool virtual_time) {
    sched_clock *c = calloc(1, sizeof *c);
    if (c) c->virtual_time = virtual_time;
    return c;
}

void clock_free(sched_clock *c) { free(c); }

bool clock_is_virtual(const sched_clock *c) { return c->virtual_time; }

static double monotonic(void) {
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

double clock_now(sched_clock *c) { return c->virtual_time ? c->now : monotonic(); }

void clock_wait_until(sched_clock *c, double t) {
    if (c->virtual_time) {
        if (t > c->now) c->now = t;
        return;
    }
    double sleep_to = t - SPIN;
    if (monotonic() < sleep_to) {
        struct timespec ts;
        ts.tv_sec = (time_t)sleep_to;
        ts.tv_nsec = (long)((sleep_to - (double)ts.tv_sec) * 1e9);
        while (clock_nanosleep(CLOCK_MONOTONIC, TIMER_ABSTIME, &ts, NULL) == EINTR) {
        }
    }
    while (monotonic() < t) {
    }
}

void clock_tighten_slack(void) { prctl(PR_SET_TIMERSLACK, 1UL, 0, 0, 0); }
