/* run: the whole run on the scheduler: the safe state first, setup, every
 * shot with its retries (failed attempts recorded too), teardown, and the
 * safe state again on every way out; the timing errors summed up.
 * Not for one attempt's events (schedule.c). */
#include "schedule_internal.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int by_value(const void *a, const void *b) {
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y ? 1 : 0;
}

void sched_percentiles(double *e, size_t n, double *p50, double *p99, double *max) {
    *p50 = *p99 = *max = 0;
    if (!n) return;
    qsort(e, n, sizeof *e, by_value);
    *p50 = e[(size_t)floor(0.50 * (double)(n - 1))];
    *p99 = e[(size_t)ceil(0.99 * (double)(n - 1))];
    *max = e[n - 1];
}

static void keep_errors(sched *s, const sched_shot *sh) {
    for (size_t i = 0; i < sh->nsoft; i++) {
        if (isnan(sh->soft[i].actual)) continue;
        if (s->nerrors == s->cap_errors) {
            size_t cap = s->cap_errors ? s->cap_errors * 2 : 1024;
            double *n = realloc(s->errors, cap * sizeof *n);
            if (!n) return;
            s->errors = n;
            s->cap_errors = cap;
        }
        double e = sh->soft[i].actual - sh->soft[i].at;
        s->errors[s->nerrors++] = fabs(e) < 1e-9 ? 0 : e;   /* rounding, not time */
    }
}

static void free_shot(sched_shot *sh) {
    for (size_t i = 0; i < sh->nacqs; i++) free(sh->acqs[i].samples);
    free(sh->acqs);
    free(sh->soft);
}

/* How a run ends that stops short, without a signal or with one. */
static sched_status stopped(const sched_run_args *a, bool limit) {
    return *a->abort ? SCHED_INTERRUPTED : limit ? SCHED_LIMIT : SCHED_FAULT;
}

/* Setup or teardown: no record, no retries. Returns SCHED_OK, or how it
 * ended the run (interrupted, a limit the driver refused, a fault) with err. */
static sched_status run_part(sched *s, const compile_timeline *t, double *next, char *err,
                             size_t n) {
    if (t->nevents == 0 && t->duration == 0) return SCHED_OK;
    sched_shot sh = {.s = s, .tl = t, .t0 = *next};
    int rc = sched_attempt(&sh);
    if (rc) snprintf(err, n, "%s", sh.error[0] ? sh.error : "interrupted");
    *next = sh.t0 + t->duration;
    free_shot(&sh);
    return rc ? stopped(s->a, sh.limit) : SCHED_OK;
}

/* One attempt of shot k; hands its record over. Returns 0 ok, 1 failed,
 * -1 the run must end (fault, abort, or on_record refused). */
static int run_attempt(sched *s, uint32_t k, uint32_t attempt, double *next, sched_summary *o) {
    const sched_run_args *a = s->a;
    sched_shot sh = {.s = s, .shot = k, .attempt = attempt, .tl_record = true};
    sh.tl = compile_shot_timeline(a->plan, k);
    double now = clock_now(s->clock);
    sh.t0 = *next > now ? *next : now + (clock_is_virtual(s->clock) ? 0 : 0.010);
    journal_time_now(sh.started_utc, sizeof sh.started_utc);
    int rc = sched_attempt(&sh);
    *next = sh.t0 + sh.tl->duration;
    keep_errors(s, &sh);
    sched_shot_result res = {k, attempt, rc == 0, "", NULL, sh.t0};
    snprintf(res.error, sizeof res.error, "%s",
             sh.error[0] ? sh.error : rc ? "interrupted" : "");
    res.record = sched_make_record(&sh);
    int out = rc == 0 ? 0 : 1;
    if (sh.fault) {
        o->status = sh.limit ? SCHED_LIMIT : SCHED_FAULT;
        snprintf(o->error, sizeof o->error, "%s", sh.error);
        out = -1;
    } else if (*a->abort) {
        o->status = SCHED_INTERRUPTED;
        out = -1;
    }
    if (a->on_record(a->ctx, &res) && out >= 0) {
        o->status = SCHED_FAILED;
        snprintf(o->error, sizeof o->error, "%s", res.error[0] ? res.error : "recording failed");
        out = -1;
    }
    if (rc == 0) o->shots_ok++;
    free_shot(&sh);
    return out;
}

static int run_shots(sched *s, double *next, sched_summary *o) {
    const sched_run_args *a = s->a;
    const plan *p = a->plan->plan;
    for (uint32_t k = 1; k <= a->plan->scan->nshots; k++) {
        if (a->done && a->done[k - 1]) continue;
        if (*a->stop || *a->abort) {
            o->status = SCHED_INTERRUPTED;
            return -1;
        }
        int r = 1;
        for (uint32_t att = 1; r == 1 && att <= (uint32_t)p->retries + 1; att++) {
            if (att > 1 && *a->stop) break;   /* no retry once asked to stop */
            r = run_attempt(s, k, att, next, o);
            if (r < 0) return -1;
        }
        if (r == 1) {
            o->shots_failed++;
            if (p->stop_on_fault) {
                o->status = SCHED_FAILED;
                snprintf(o->error, sizeof o->error, "shot %u failed and on_fault is stop", k);
                return -1;
            }
        }
    }
    return 0;
}

static void on_wake_cb(struct ev_loop *loop, ev_timer *w, int revents) {
    (void)w;
    (void)revents;
    ev_break(loop, EVBREAK_ONE);
}

static void on_poll_cb(struct ev_loop *loop, ev_timer *w, int revents) {
    (void)loop;
    (void)w;
    (void)revents;
    ev_break(loop, EVBREAK_ONE);
}

sched_status sched_run(const sched_run_args *a, sched_summary *o) {
    memset(o, 0, sizeof *o);
    sched s = {.a = a, .clock = a->clock};
    s.loop = ev_loop_new(EVFLAG_AUTO);
    if (!s.loop) {
        snprintf(o->error, sizeof o->error, "cannot start the event loop");
        return o->status = SCHED_FAILED;
    }
    ev_init(&s.wake, on_wake_cb);
    ev_timer_init(&s.poll, on_poll_cb, 0.010, 0.010);
    clock_tighten_slack();
    double next = clock_now(s.clock) + (clock_is_virtual(s.clock) ? 0 : 0.010);
    char err[256] = "";
    const drv_ops *ops = a->ops;
    sched_status part = ops->safe_state(a->driver, clock_now(s.clock), err, sizeof err)
                            ? stopped(a, false)
                            : run_part(&s, &a->plan->setup, &next, err, sizeof err);
    if (part != SCHED_OK) {
        o->status = part;
        snprintf(o->error, sizeof o->error, "setup: %.200s", err);
    } else if (run_shots(&s, &next, o) == 0) {
        if ((part = run_part(&s, &a->plan->teardown, &next, err, sizeof err)) != SCHED_OK) {
            o->status = part;
            snprintf(o->error, sizeof o->error, "teardown: %.200s", err);
        } else if (o->shots_failed) {
            o->status = SCHED_FAILED;
        }
    }
    /* Every way out ends here. */
    char safe_err[256];
    if (ops->safe_state(a->driver, clock_now(s.clock), safe_err, sizeof safe_err) &&
        o->status == SCHED_OK) {
        o->status = SCHED_FAULT;
        snprintf(o->error, sizeof o->error, "safe state: %.200s", safe_err);
    }
    o->nevents = s.nerrors;
    sched_percentiles(s.errors, s.nerrors, &o->p50, &o->p99, &o->max);
    free(s.errors);
    ev_loop_destroy(s.loop);
    return o->status;
}
