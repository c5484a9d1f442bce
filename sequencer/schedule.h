/* schedule: running compiled shots on a driver in time. The scheduler owns
 * the queue of timed events of each shot; libev waits for the next deadline
 * and for the drivers' sample descriptors; the last stretch to a deadline is
 * an absolute clock_nanosleep with minimal timer slack, then a short spin.
 * Hardware-timed segments (ramps, pulses) and acquisitions are handed to the
 * driver ahead of time; line edges and starts are soft events whose actual
 * time is recorded. A virtual clock (run --fast) runs the same code.
 * Not for writing records (store.h) nor for printing (the CLI). */
#ifndef PRECESS_SCHEDULE_H
#define PRECESS_SCHEDULE_H

#include <signal.h>
#include <stdbool.h>
#include <stdint.h>
#include "compile.h"
#include "driver.h"
#include "store.h"

/* ---- clocks (clock.c) ----------------------------------------------------- */

typedef struct sched_clock sched_clock;

/* The real monotonic clock, or a virtual one that starts at 0 and jumps to
 * each deadline. */
sched_clock *clock_new(bool virtual_time);
void clock_free(sched_clock *c);
bool clock_is_virtual(const sched_clock *c);
double clock_now(sched_clock *c);
/* Returns when now >= t: the real clock sleeps (absolute clock_nanosleep)
 * to clock_spin before t and spins the rest; the virtual clock jumps. */
void clock_wait_until(sched_clock *c, double t);

/* The spin is learnt from how late the clock's last CLOCK_LATE_KEPT sleeps
 * woke: their 90th percentile plus CLOCK_SPIN_PAD, at most CLOCK_SPIN_MOST;
 * a new clock counts CLOCK_LATE_KEPT sleeps that woke CLOCK_SPIN_FIRST less
 * the pad late, so that it spins CLOCK_SPIN_FIRST until its own sleeps are
 * most of those kept (or one in ten of them woke later). clock_spin_for is
 * that rule over n lateness values (s); clock_spin the clock's spin now. */
#define CLOCK_LATE_KEPT 64
#define CLOCK_SPIN_PAD 20e-6
#define CLOCK_SPIN_MOST 500e-6
#define CLOCK_SPIN_FIRST 200e-6
double clock_spin_for(const double *late, size_t n);
double clock_spin(const sched_clock *c);
/* Set the calling thread's timer slack to its minimum (1 ns). */
void clock_tighten_slack(void);

/* ---- running ---------------------------------------------------------------- */

/* SCHED_LIMIT: the driver refused a command past a limit of the rig. */
typedef enum { SCHED_OK, SCHED_FAILED, SCHED_INTERRUPTED, SCHED_FAULT, SCHED_LIMIT } sched_status;

/* What one attempt of a shot gave. */
typedef struct {
    uint32_t shot, attempt;
    bool ok;
    char error[256];
    store_record *record;       /* handed to on_record, which takes it */
    double start;               /* clock time of the shot's start */
} sched_shot_result;

typedef struct {
    const compiled *plan;
    const drv_ops *ops;
    drv *driver;
    sched_clock *clock;
    const char *run_id, *driver_name, *plan_sha256;
    /* Signals: set by the CLI's handlers. stop: end after the current shot;
     * abort: end the current shot now. */
    volatile sig_atomic_t *stop, *abort;
    /* Called after every attempt, between shots (at rest). It takes the
     * record; returning -1 ends the run as failed (e.g. the disk). */
    int (*on_record)(void *ctx, sched_shot_result *r);
    void *ctx;
    /* Shots to skip (already done, for resume); NULL: none. */
    const bool *done;
} sched_run_args;

typedef struct {
    sched_status status;
    size_t shots_ok, shots_failed;
    char error[256];            /* fault or failure */
    /* actual - planned of every soft event, seconds */
    size_t nevents;
    double p50, p99, max;
} sched_summary;

/* Run setup, every shot (with retries), teardown; always ends in the safe
 * state. Returns the summary's status. */
sched_status sched_run(const sched_run_args *a, sched_summary *out);

/* Percentiles of n timing errors (sorted in place). */
void sched_percentiles(double *errors, size_t n, double *p50, double *p99, double *max);

#endif
