/* schedule: the run loop. Setup, every shot with its retries, teardown,
 * then the safe state, whatever happens. Within a shot the hardware-timed
 * segments go to the driver first; then the soft events (line edges,
 * acquisition starts, the shot's end) are waited for one by one, with libev
 * watching the acquisition's descriptor and the interlock meanwhile.
 * Not for building records (shot_record.c) nor for clocks (clock.c). */
#include "schedule_internal.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define LEAD_REAL 0.010      /* s: a shot's start after the scheduler is ready */
#define ACQ_AHEAD 0.002      /* s: an acquisition is armed this long before it starts */
#define EARLY 0.001          /* s: libev wakes this long before a deadline */
#define POLL 0.010           /* s: the interlock is read at least this often */
#define DRAIN_LIMIT 2.0      /* s: samples must have arrived this long after the window */

/* ---- waiting -------------------------------------------------------------- */

static void on_samples(struct ev_loop *loop, ev_io *w, int revents) {
    (void)revents;
    sched_shot *sh = w->data;
    sched_acq_read(sh);
    if (sh->acq_done || sh->failed) ev_io_stop(loop, w);
}

/* Wait until clock time t with the loop serving samples and the interlock.
 * Returns 0, or -1 when the shot must end now (abort, interlock, failure). */
int sched_wait(sched_shot *sh, double t) {
    sched *s = sh->s;
    if (clock_is_virtual(s->clock)) {
        clock_wait_until(s->clock, t);
        ev_run(s->loop, EVRUN_NOWAIT);
        if (sched_interlock_broken(sh)) return -1;
    } else {
        for (;;) {
            if (*s->a->abort || sh->fault || sh->failed) return -1;
            double left = t - EARLY - clock_now(s->clock);
            if (left <= 0) break;
            ev_timer_set(&s->wake, left, 0);
            ev_timer_start(s->loop, &s->wake);
            ev_run(s->loop, EVRUN_ONCE);   /* samples, the 10 ms poll, or the wake-up */
            ev_timer_stop(s->loop, &s->wake);
            if (sched_interlock_broken(sh)) return -1;
        }
        clock_wait_until(s->clock, t);
    }
    return *s->a->abort || sh->fault || sh->failed ? -1 : 0;
}

/* ---- one attempt ------------------------------------------------------------ */

/* A driver's answer: -2 is a hardware fault and DRV_LIMIT a limit the
 * driver refused (either ends the run), -1 a failure. */
static int driver_rc(sched_shot *sh, int rc) {
    if (rc < -1) sh->fault = 1;
    if (rc == DRV_LIMIT) sh->limit = 1;
    return rc ? -1 : 0;
}

static int cmp_soft(const void *a, const void *b) {
    const sched_soft *x = a, *y = b;
    return x->at < y->at ? -1 : x->at > y->at ? 1 : 0;
}

static int load_segments(sched_shot *sh) {
    sched *s = sh->s;
    const compile_timeline *t = sh->tl;
    drv_caps caps;
    s->a->ops->caps(s->a->driver, &caps);
    for (size_t k = 0; k < t->nevents; k++) {
        const compile_event *e = &t->events[k];
        if (e->kind != EV_RAMP && e->kind != EV_PULSE) continue;
        drv_segment seg = {e->channel, sh->t0 + e->start, e->length, e->from, e->to, NULL, 0};
        if (e->kind == EV_PULSE) {
            const compile_pulse *pu = &t->pulses[e->index];
            seg.pulse = &pu->shape_at_sample;
            seg.peak = pu->current * sched_polarity(sh, pu);
            seg.from = seg.to = 0;
        }
        if (driver_rc(sh, s->a->ops->load_segment(s->a->driver, &seg, sh->error,
                                                  sizeof sh->error)))
            return -1;
    }
    return 0;
}

/* The soft events of a timeline: line edges, acquisition starts, the end. */
static int build_soft(sched_shot *sh) {
    const compile_timeline *t = sh->tl;
    size_t n = 1;
    for (size_t k = 0; k < t->nevents; k++)
        n += t->events[k].kind == EV_LINE || t->events[k].kind == EV_ACQUIRE;
    sh->soft = calloc(n, sizeof *sh->soft);
    if (!sh->soft) return -1;
    for (size_t k = 0; k < t->nevents; k++) {
        const compile_event *e = &t->events[k];
        if (e->kind != EV_LINE && e->kind != EV_ACQUIRE) continue;
        double ahead = e->kind == EV_ACQUIRE && !clock_is_virtual(sh->s->clock) ? ACQ_AHEAD : 0;
        sh->soft[sh->nsoft++] = (sched_soft){e->start - ahead, e, NAN};
    }
    sh->soft[sh->nsoft++] = (sched_soft){t->duration, NULL, NAN};
    qsort(sh->soft, sh->nsoft, sizeof *sh->soft, cmp_soft);
    return 0;
}

static int fire(sched_shot *sh, sched_soft *so) {
    sched *s = sh->s;
    const compile_event *e = so->ev;
    so->actual = clock_now(s->clock) - sh->t0;
    if (!e) return 0;
    if (e->kind == EV_LINE)
        return driver_rc(sh, s->a->ops->set_line(s->a->driver, e->channel, e->to != 0,
                                                 sh->t0 + e->start, sh->error, sizeof sh->error));
    if (driver_rc(sh, sched_acq_start(sh, e))) return -1;
    ev_io_init(&sh->io, on_samples, sh->fd, EV_READ);
    sh->io.data = sh;
    ev_io_start(s->loop, &sh->io);
    return 0;
}

static void drain(sched_shot *sh) {
    sched *s = sh->s;
    double limit = clock_now(s->clock) + DRAIN_LIMIT;
    while (sh->acq_active && !sh->acq_done && !sh->failed && !sh->fault) {
        if (clock_is_virtual(s->clock)) {
            sched_acq_read(sh);
            if (!sh->acq_done && !sh->failed) {
                snprintf(sh->error, sizeof sh->error, "the acquisition gave fewer samples "
                         "than asked");
                sh->failed = 1;
            }
            break;
        }
        if (clock_now(s->clock) > limit) {
            snprintf(sh->error, sizeof sh->error, "samples did not arrive within %.0f s of the "
                     "acquisition's end", DRAIN_LIMIT);
            sh->failed = 1;
            break;
        }
        ev_run(s->loop, EVRUN_ONCE);
        if (sched_interlock_broken(sh)) break;
    }
    sched_acq_finish(sh);
}

/* Runs one attempt of the timeline from clock time t0. Returns 0 when every
 * soft event fired; -1 otherwise (sh->failed, sh->fault or an abort). */
int sched_attempt(sched_shot *sh) {
    sched *s = sh->s;
    int rc = 0;
    if (sched_interlock_broken(sh)) return -1;
    if (sh->tl_record &&
        driver_rc(sh, s->a->ops->begin_shot(s->a->driver, sh->shot, sh->attempt, sh->tl, sh->t0,
                                            sh->error, sizeof sh->error)))
        rc = -1;
    if (rc == 0 && (load_segments(sh) || build_soft(sh))) rc = -1;
    if (rc && !sh->fault) sh->failed = 1;
    ev_timer_start(s->loop, &s->poll);
    for (size_t i = 0; rc == 0 && i < sh->nsoft; i++) {
        sched_soft *so = &sh->soft[i];
        if (sched_wait(sh, sh->t0 + so->at) || fire(sh, so)) {
            if (!sh->fault && !*s->a->abort) sh->failed = 1;
            rc = -1;
        }
        if (rc == 0 && !so->ev) drain(sh);
    }
    ev_timer_stop(s->loop, &s->poll);
    if (rc) {
        sched_acq_finish(sh);
        s->a->ops->stop_acquisition(s->a->driver);
    }
    return rc;
}
