/* clock: the scheduler's two clocks. The real one is CLOCK_MONOTONIC and
 * waits with an absolute clock_nanosleep to just before the deadline, then
 * spins; the virtual one (run --fast) jumps to each deadline at once.
 * How long before the deadline the sleep ends is learnt from the sleeps
 * themselves: how late a sleep wakes differs from host to host (about 50 us
 * on one virtual machine, over 100 us on another), and a spin that starts
 * after the deadline has passed is no spin at all.
 * Not for the event queue (schedule.c). */
#include "schedule.h"

#include <errno.h>
#include <stdlib.h>
#include <string.h>
#include <sys/prctl.h>
#include <time.h>

struct sched_clock {
    bool virtual_time;
    double now;
    double late[CLOCK_LATE_KEPT];  /* how late the last sleeps woke, s */
    size_t next;                   /* where the next sleep's lateness goes */
    double spin;                   /* the stretch spun before a deadline, s */
};

sched_clock *clock_new(bool virtual_time) {
    sched_clock *c = calloc(1, sizeof *c);
    if (c) {
        c->virtual_time = virtual_time;
        /* generous at first, so that the first events are on time and the
         * first sleeps measured end before them: a prior the measured
         * sleeps replace, holding the spin at CLOCK_SPIN_FIRST until they
         * are most of the kept ones, or raising it as soon as one in ten of
         * them wakes later */
        c->spin = CLOCK_SPIN_FIRST;
        for (size_t i = 0; i < CLOCK_LATE_KEPT; i++) c->late[i] = CLOCK_SPIN_FIRST - CLOCK_SPIN_PAD;
    }
    return c;
}

void clock_free(sched_clock *c) { free(c); }

bool clock_is_virtual(const sched_clock *c) { return c->virtual_time; }

double clock_spin(const sched_clock *c) { return c->spin; }

static int by_value(const void *a, const void *b) {
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

double clock_spin_for(const double *late, size_t n) {
    if (n == 0) return CLOCK_SPIN_FIRST;
    if (n > CLOCK_LATE_KEPT) n = CLOCK_LATE_KEPT;
    double sorted[CLOCK_LATE_KEPT];
    memcpy(sorted, late, n * sizeof *sorted);
    qsort(sorted, n, sizeof *sorted, by_value);
    /* the 90th percentile: the rare wake-up the host delays by milliseconds
     * would have every later one spin for as long */
    double spin = sorted[(n * 9 + 9) / 10 - 1] + CLOCK_SPIN_PAD;
    if (spin < CLOCK_SPIN_PAD) spin = CLOCK_SPIN_PAD;
    return spin > CLOCK_SPIN_MOST ? CLOCK_SPIN_MOST : spin;
}

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
    double sleep_to = t - c->spin;
    if (monotonic() < sleep_to) {
        struct timespec ts;
        ts.tv_sec = (time_t)sleep_to;
        ts.tv_nsec = (long)((sleep_to - (double)ts.tv_sec) * 1e9);
        while (clock_nanosleep(CLOCK_MONOTONIC, TIMER_ABSTIME, &ts, NULL) == EINTR) {
        }
        /* learnt while there is still the spin's time to spare */
        c->late[c->next] = monotonic() - sleep_to;
        c->next = (c->next + 1) % CLOCK_LATE_KEPT;
        c->spin = clock_spin_for(c->late, CLOCK_LATE_KEPT);
    }
    while (monotonic() < t) {
    }
}

void clock_tighten_slack(void) { prctl(PR_SET_TIMERSLACK, 1UL, 0, 0, 0); }
