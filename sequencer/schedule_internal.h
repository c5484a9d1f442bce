/* schedule_internal: what schedule.c, run.c and shot_record.c share: the
 * running scheduler and the attempt being run. Not a public interface. */
#ifndef PRECESS_SCHEDULE_INTERNAL_H
#define PRECESS_SCHEDULE_INTERNAL_H

#include <ev.h>
#include "schedule.h"

typedef struct {
    const sched_run_args *a;
    sched_clock *clock;
    struct ev_loop *loop;
    ev_timer wake, poll;
    double *errors;             /* actual - planned of every soft event */
    size_t nerrors, cap_errors;
} sched;

typedef struct {
    double at;                  /* planned, s from the shot's start */
    const compile_event *ev;    /* NULL: the shot's end */
    double actual;
} sched_soft;

/* One acquisition's samples as they come in. */
typedef struct {
    const compile_event *ev;
    drv_acquisition req;
    float *samples;             /* interleaved, req.ninputs per instant */
    size_t n, want;
    double start;               /* s from the shot's start */
    int polarity;               /* of the last pulse before it */
} sched_acq;

typedef struct {
    sched *s;
    uint32_t shot, attempt;     /* 0 for setup and teardown */
    const compile_timeline *tl;
    bool tl_record;             /* a shot (recorded), not setup or teardown */
    double t0;                  /* clock time of the start */
    sched_soft *soft;
    size_t nsoft;
    sched_acq *acqs;
    size_t nacqs;
    bool acq_active, acq_done;
    int fd;
    ev_io io;
    int failed, fault, limit;   /* limit: the fault was a limit the driver refused */
    char error[256];
    char started_utc[40];
} sched_shot;

int sched_wait(sched_shot *sh, double t);
int sched_attempt(sched_shot *sh);
/* Polarity of a pulse in this attempt's shot. */
int sched_polarity(const sched_shot *sh, const compile_pulse *pu);

/* shot_record.c: acquisitions and the record of an attempt. */
int sched_acq_start(sched_shot *sh, const compile_event *e);
void sched_acq_read(sched_shot *sh);
void sched_acq_finish(sched_shot *sh);
bool sched_interlock_broken(sched_shot *sh);
store_record *sched_make_record(sched_shot *sh);

#endif
