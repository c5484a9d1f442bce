/* sim: the simulated rig's DAQ, the drv_ops table "sim": each coil's commanded
 * current as a history for the shot, the lines, a log of every timed command,
 * each acquisition's record made at its start and handed out through an
 * eventfd (virtual time) or a 10 ms timerfd (real time); faults; limits again.
 * Not for physics (sample.c, noise.c) nor for timing decisions (schedule). */
#include "sim.h"

#include <errno.h>
#include <fcntl.h>
#include <float.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/eventfd.h>
#include <sys/timerfd.h>
#include <time.h>
#include <unistd.h>

/* What this DAQ does, for the scheduler and the tests:
 * - Times are absolute seconds of the caller's clock. begin_shot comes before
 *   a shot's segments: it folds what came before into each coil's present
 *   current and drops whatever was still loaded. The history is continuous
 *   (the 1 us resolution is what caps reports, not a grid imposed here).
 * - The log, when asked for: one line per timed command, "<time %.6f>
 *   <command> <args>": begin_shot S A, set_current COIL I, segment COIL ramp
 *   FROM TO LENGTH, segment COIL pulse PEAK LENGTH, line NAME 0|1 (active),
 *   acquire NINPUTS RATE NSAMPLES shot S attempt A, safe_state followed by a
 *   ramp to 0 for every coil and `line NAME 0` for every output line. Reads
 *   are not logged. A failed write to the log is ignored.
 * - Faults: read_error and overrun fail read_samples of the named shot's
 *   first attempt (attempt 0 or 1); interlock flips the input lines from the
 *   start of the named shot's first acquisition until the next begin_shot, on
 *   every attempt; device_gone makes every call from begin_shot of that shot
 *   on return SIM_GONE ("device gone"); disk_full is not the driver's.
 * - done comes with the last samples; a read after it gives 0 and done. */

#define RESOLUTION 1e-6         /* s */
#define MAX_RATE 1e6            /* Hz */
#define CHUNK 0.010             /* s: a real-time acquisition's delivery period */
#define TOLERANCE 1e-9          /* relative slack of the limit checks */
#define LOG_LINE 512            /* the longest line of the command log */
#define LOG_BUFFER 8192         /* bytes of log lines held in virtual time */

typedef struct {
    bool active;
    float *data;                /* nsamples x ninputs, interleaved */
    size_t nsamples, ninputs, handed;
    double start, rate;
    uint32_t shot, attempt;
    int fd;
} sim_acq;

struct drv {
    const plan_rig *rig;
    const compiled *plan;
    uint64_t run_seed;
    bool virtual_time;
    int log_fd;                 /* -1: no log */
    /* In virtual time a shot's lines go in one write: at the next shot, the
     * safe state or the close (each line a write of its own was a tenth of
     * the scheduler thread's system calls). In real time, each at once. */
    char log_buf[LOG_BUFFER];
    size_t log_len;
    sim_history *coils;
    double *scratch;            /* per coil */
    bool *line_active;
    int sample_place, sensor_place;
    sim_env env;
    float *buf;                 /* the acquisitions' samples, kept between them */
    size_t buf_cap;             /* floats */
    /* the shot */
    uint32_t shot, attempt, acquisitions;
    const compile_timeline *tl;
    double shot_start;          /* NAN before the first begin_shot */
    double interlock_at;        /* NAN: the interlock holds */
    bool gone;
    sim_acq acq;
};

static int fail(char *err, size_t errlen, int rc, const char *fmt, ...)
    __attribute__((format(printf, 4, 5)));

static int fail(char *err, size_t errlen, int rc, const char *fmt, ...) {
    if (err && errlen) {
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(err, errlen, fmt, ap);
        va_end(ap);
    }
    return rc;
}

/* The lines held so far, written (a short write goes on from where it
 * stopped). Errors of the log are not the rig's: they are ignored. */
static void log_flush(drv *d) {
    for (size_t at = 0; d->log_fd >= 0 && at < d->log_len;) {
        ssize_t w = write(d->log_fd, d->log_buf + at, d->log_len - at);
        if (w < 0 && errno == EINTR) continue;
        if (w <= 0) break;
        at += (size_t)w;
    }
    d->log_len = 0;
}

/* One command a line, "<time> <command> <args>", each line in one write. */
static void log_command(drv *d, double at, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

static void log_command(drv *d, double at, const char *fmt, ...) {
    if (d->log_fd < 0) return;
    if (d->log_len + LOG_LINE > sizeof d->log_buf) log_flush(d);
    char *line = d->log_buf + d->log_len;
    int n = snprintf(line, LOG_LINE, "%.6f ", at);
    if (n < 0 || n > 64) return;
    va_list ap;
    va_start(ap, fmt);
    n += vsnprintf(line + n, LOG_LINE - (size_t)n - 1, fmt, ap);
    va_end(ap);
    if (n > LOG_LINE - 2) n = LOG_LINE - 2;
    line[n++] = '\n';
    d->log_len += (size_t)n;
    if (!d->virtual_time) log_flush(d);
}

static double now_monotonic(void) {
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

static struct timespec to_timespec(double t) {
    struct timespec ts;
    double s = floor(t);
    ts.tv_sec = (time_t)s;
    ts.tv_nsec = (long)((t - s) * 1e9);
    if (ts.tv_nsec >= 1000000000L) ts.tv_nsec = 999999999L;
    return ts;
}

/* ---- faults --------------------------------------------------------------- */

static bool fault_on(const plan_rig *rig, uint32_t shot, rig_fault_kind kind) {
    for (size_t i = 0; i < rig->nfaults; i++)
        if (rig->faults[i].kind == kind && (uint32_t)rig->faults[i].shot == shot) return true;
    return false;
}

static bool gone_by(const plan_rig *rig, uint32_t shot) {
    for (size_t i = 0; i < rig->nfaults; i++)
        if (rig->faults[i].kind == FAULT_DEVICE_GONE && (uint32_t)rig->faults[i].shot <= shot)
            return true;
    return false;
}

#define CHECK_GONE(d, err, errlen)                                                 \
    do {                                                                           \
        if ((d)->gone) return fail(err, errlen, SIM_GONE, "device gone");          \
    } while (0)

/* ---- the coils' history ------------------------------------------------------ */

/* A pulse's shape at 1 A, its own sign removed: the polarity is peak's. */
static double pulse_unit(const sim_segment *s, double t) {
    return pulse_current_at(&s->shape, 1.0, t) * (s->shape.sign < 0 ? -1 : 1);
}

double sim_history_current(const sim_history *h, double t) {
    double i = h->base, extra = 0;
    for (size_t k = 0; k < h->n && h->seg[k].start <= t; k++) {
        const sim_segment *s = &h->seg[k];
        if (s->kind == SIM_RAMP) {
            if (s->length <= 0 || t >= s->start + s->length) i = s->to;
            else i = s->from + (s->to - s->from) * (t - s->start) / s->length;
        } else if (t < s->start + s->length && t < s->until) {
            extra += s->peak * pulse_unit(s, t - s->start);
        }
    }
    return i + extra;
}

bool sim_history_steady(const sim_history *h, double a, double b) {
    for (size_t k = 0; k < h->n && h->seg[k].start < b; k++) {
        const sim_segment *s = &h->seg[k];
        if (s->start > a) return false;
        if (s->kind == SIM_PULSE) {
            double end = fmin(s->start + s->length, s->until);
            if (end - a > SIM_ROUNDING * DBL_EPSILON * fmax(1, fabs(a))) return false;
        } else if (s->from != s->to && s->start + s->length > a + SIM_STEADY_SLACK) {
            return false;
        }
    }
    return true;
}

static int history_add(sim_history *h, const sim_segment *s) {
    if (h->n == h->cap) {
        size_t nc = h->cap ? 2 * h->cap : 16;
        sim_segment *g = realloc(h->seg, nc * sizeof *g);
        if (!g) return -1;
        h->seg = g;
        h->cap = nc;
    }
    size_t i = h->n++;
    for (; i > 0 && h->seg[i - 1].start > s->start; i--) h->seg[i] = h->seg[i - 1];
    h->seg[i] = *s;
    return 0;
}

/* Drop the segments that start after t, cut the pulses at t; return the
 * current at t (what was commanded up to and at t). */
static double history_cut(sim_history *h, double t) {
    size_t m = 0;
    while (m < h->n && h->seg[m].start <= t) m++;
    h->n = m;
    double i = sim_history_current(h, t);
    for (size_t k = 0; k < h->n; k++)
        if (h->seg[k].kind == SIM_PULSE && h->seg[k].until > t) h->seg[k].until = t;
    return i;
}

/* A shot's history starts at t: what started before t is folded into the
 * base (a segment still running at t is taken as done at its value there).
 * Segments already loaded are the earlier shots' (begin_shot comes before a
 * shot's segments), so any starting at or after t are stale and dropped. */
static void history_rebase(sim_history *h, double t) {
    size_t m = 0;
    while (m < h->n && h->seg[m].start < t) m++;
    h->n = m;
    h->base = sim_history_current(h, t);
    h->n = 0;
}

double sim_current_at(drv *d, int coil, double t) {
    if (!d || coil < 0 || (size_t)coil >= d->rig->ncoils) return NAN;
    return sim_history_current(&d->coils[coil], t);
}

/* ---- limits, again (defence in depth) ---------------------------------- */

static int check_coil(const drv *d, int coil, char *err, size_t errlen) {
    if (coil < 0 || (size_t)coil >= d->rig->ncoils)
        return fail(err, errlen, -1, "no coil %d on rig %s", coil, d->rig->name);
    return 0;
}

static int check_current(const drv *d, int coil, double amps, char *err, size_t errlen) {
    const rig_coil *c = &d->rig->coils[coil];
    if (!isfinite(amps))
        return fail(err, errlen, DRV_LIMIT, "coil %s: the current asked is not a number", c->name);
    if (c->max_current > 0 && fabs(amps) > c->max_current * (1 + TOLERANCE))
        return fail(err, errlen, DRV_LIMIT, "coil %s: %.6g A exceeds its max_current of %.6g A; "
                    "nothing was sent", c->name, amps, c->max_current);
    if (c->amps_per_volt != 0 && fabs(amps / c->amps_per_volt) > d->rig->ao_range * (1 + TOLERANCE))
        return fail(err, errlen, DRV_LIMIT, "coil %s: %.6g A needs %.6g V, outside the analog "
                    "outputs' +-%.6g V; nothing was sent", c->name, amps,
                    amps / c->amps_per_volt, d->rig->ao_range);
    return 0;
}

static int check_slew(const drv *d, int coil, double change, double time, char *err,
                      size_t errlen) {
    const rig_coil *c = &d->rig->coils[coil];
    if (!(time > 0) || !(c->max_slew > 0)) return 0;
    if (fabs(change) / time > c->max_slew * (1 + 1e-6))
        return fail(err, errlen, DRV_LIMIT, "coil %s: %.6g A/s exceeds its max_slew of %.6g A/s; "
                    "nothing was sent", c->name, fabs(change) / time, c->max_slew);
    return 0;
}

static int check_segment(const drv *d, const drv_segment *s, char *err, size_t errlen) {
    if (check_coil(d, s->coil, err, errlen)) return -1;
    if (!isfinite(s->start) || !(s->length >= 0))
        return fail(err, errlen, -1, "coil %s: a segment needs a start and a length of at "
                    "least 0", d->rig->coils[s->coil].name);
    int rc;
    if (!s->pulse) {
        if ((rc = check_current(d, s->coil, s->from, err, errlen)) ||
            (rc = check_current(d, s->coil, s->to, err, errlen)))
            return rc;
        return check_slew(d, s->coil, s->to - s->from, s->length, err, errlen);
    }
    if ((rc = check_current(d, s->coil, s->peak, err, errlen))) return rc;
    return s->pulse->resonant ? 0 : check_slew(d, s->coil, s->peak, s->pulse->rise, err, errlen);
}

/* ---- open, close, caps -------------------------------------------------------- */

static int sensor_place(const plan_rig *rig) {
    if (rig->detector.present && rig->detector.input >= 0 &&
        (size_t)rig->detector.input < rig->ninputs) {
        const char *name = rig->inputs[rig->detector.input].name;
        int p = rig_find_place(rig, name, strlen(name));
        if (p >= 0) return p;
    }
    for (size_t i = 0; i < rig->nplaces; i++)
        if (rig->places[i].is_sensor) return (int)i;
    return -1;
}

static void sim_close(drv *d) {
    if (!d) return;
    if (d->acq.fd >= 0) close(d->acq.fd);
    free(d->buf);
    for (size_t c = 0; d->coils && c < d->rig->ncoils; c++) free(d->coils[c].seg);
    free(d->coils);
    free(d->scratch);
    free(d->line_active);
    sim_env_free(&d->env);
    if (d->log_fd >= 0) {
        log_flush(d);
        close(d->log_fd);
    }
    free(d);
}

static int sim_open(const drv_context *ctx, drv **out, char *err, size_t errlen) {
    *out = NULL;
    if (!ctx || !ctx->rig) return fail(err, errlen, -1, "the simulated rig needs a rig");
    const plan_rig *rig = ctx->rig;
    drv *d = calloc(1, sizeof *d);
    if (!d) return fail(err, errlen, -1, "out of memory opening the simulated rig");
    d->rig = rig;
    d->plan = ctx->plan;
    d->run_seed = ctx->run_seed;
    d->virtual_time = ctx->virtual_time;
    d->log_fd = d->acq.fd = -1;
    d->shot_start = d->interlock_at = NAN;
    d->coils = calloc(rig->ncoils + 1, sizeof *d->coils);
    d->scratch = calloc(rig->ncoils + 1, sizeof *d->scratch);
    d->line_active = calloc(rig->nlines + 1, sizeof *d->line_active);
    if (!d->coils || !d->scratch || !d->line_active || sim_env_init(&d->env, rig, ctx->run_seed)) {
        sim_close(d);
        return fail(err, errlen, -1, "out of memory opening the simulated rig");
    }
    d->sample_place = ctx->plan ? ctx->plan->sample_place : compile_find_sample_place(rig);
    d->sensor_place = sensor_place(rig);
    if (ctx->log_path) {
        d->log_fd = open(ctx->log_path, O_WRONLY | O_CREAT | O_APPEND | O_CLOEXEC, 0644);
        if (d->log_fd < 0) {
            int e = errno;
            sim_close(d);
            return fail(err, errlen, -1, "cannot open the command log %s: %s", ctx->log_path,
                        strerror(e));
        }
    }
    *out = d;
    return 0;
}

static void sim_caps(drv *d, drv_caps *out) {
    *out = (drv_caps){RESOLUTION, true, true, d->rig->acts_as_hardware, MAX_RATE,
                      d->rig->ncoils, d->rig->ninputs, d->rig->nlines};
}

static void sim_input_scale(drv *d, int input, double *volts_per_count, int *bits) {
    *volts_per_count = 0;
    *bits = 0;
    if (input < 0 || (size_t)input >= d->rig->ninputs) return;
    *volts_per_count = sim_volts_per_count(&d->rig->inputs[input]);
    *bits = d->rig->inputs[input].bits;
}

/* ---- outputs ------------------------------------------------------------------ */

static int sim_begin_shot(drv *d, uint32_t shot, uint32_t attempt, const compile_timeline *t,
                          double start, char *err, size_t errlen) {
    CHECK_GONE(d, err, errlen);
    log_flush(d);       /* the last shot's lines */
    log_command(d, start, "begin_shot %u %u", shot, attempt);
    if (gone_by(d->rig, shot)) {
        d->gone = true;
        return fail(err, errlen, SIM_GONE, "device gone");
    }
    for (size_t c = 0; c < d->rig->ncoils; c++) history_rebase(&d->coils[c], start);
    d->shot = shot;
    d->attempt = attempt;
    d->acquisitions = 0;
    d->tl = t;
    d->shot_start = start;
    d->interlock_at = NAN;
    sim_env_drift_to(&d->env, d->rig, start);
    return 0;
}

static int sim_set_current(drv *d, int coil, double amps, double at, char *err, size_t errlen) {
    CHECK_GONE(d, err, errlen);
    if (check_coil(d, coil, err, errlen)) return -1;
    int rc = check_current(d, coil, amps, err, errlen);
    if (rc) return rc;
    sim_history *h = &d->coils[coil];
    sim_segment s = {.kind = SIM_RAMP, .start = at, .from = sim_history_current(h, at),
                     .to = amps, .until = INFINITY};
    if (history_add(h, &s)) return fail(err, errlen, -1, "out of memory");
    log_command(d, at, "set_current %s %.9g", d->rig->coils[coil].name, amps);
    return 0;
}

static int sim_load_segment(drv *d, const drv_segment *s, char *err, size_t errlen) {
    CHECK_GONE(d, err, errlen);
    int rc = check_segment(d, s, err, errlen);
    if (rc) return rc;
    sim_segment g = {.kind = s->pulse ? SIM_PULSE : SIM_RAMP, .start = s->start,
                     .length = s->length, .from = s->from, .to = s->to, .peak = s->peak,
                     .until = INFINITY, .given = s->pulse};
    if (s->pulse) g.shape = *s->pulse;
    if (history_add(&d->coils[s->coil], &g)) return fail(err, errlen, -1, "out of memory");
    const char *name = d->rig->coils[s->coil].name;
    if (s->pulse)
        log_command(d, s->start, "segment %s pulse %.9g %.9g", name, s->peak, s->length);
    else
        log_command(d, s->start, "segment %s ramp %.9g %.9g %.9g", name, s->from, s->to, s->length);
    return 0;
}

static int check_line(const drv *d, int line, char *err, size_t errlen) {
    if (line < 0 || (size_t)line >= d->rig->nlines)
        return fail(err, errlen, -1, "no line %d on rig %s", line, d->rig->name);
    return 0;
}

static int sim_set_line(drv *d, int line, bool active, double at, char *err, size_t errlen) {
    CHECK_GONE(d, err, errlen);
    if (check_line(d, line, err, errlen)) return -1;
    const rig_line *l = &d->rig->lines[line];
    if (l->direction == LINE_INPUT)
        return fail(err, errlen, -1, "line %s is an input; it cannot be set", l->name);
    d->line_active[line] = active;
    log_command(d, at, "line %s %d", l->name, active ? 1 : 0);
    return 0;
}

/* Inputs give their required level (high without one), the opposite once
 * an `interlock` fault's shot has started its first acquisition; outputs
 * give the level they are set to. */
static int sim_read_line(drv *d, int line, bool *high, char *err, size_t errlen) {
    CHECK_GONE(d, err, errlen);
    if (check_line(d, line, err, errlen)) return -1;
    const rig_line *l = &d->rig->lines[line];
    if (l->direction == LINE_OUTPUT) {
        *high = d->line_active[line] == l->active_high;
        return 0;
    }
    bool level = l->has_require ? l->require_high : true;
    bool tripped = !isnan(d->interlock_at) &&
                   (d->virtual_time || now_monotonic() >= d->interlock_at);
    *high = tripped ? !level : level;
    return 0;
}

/* Every coil from its present current to 0 at its max_slew, every output
 * line inactive; segments that would start after `at` are dropped, pulses
 * cut at `at`. */
static int sim_safe_state(drv *d, double at, char *err, size_t errlen) {
    CHECK_GONE(d, err, errlen);
    log_command(d, at, "safe_state");
    double longest = 0;
    for (size_t c = 0; c < d->rig->ncoils; c++) {
        const rig_coil *coil = &d->rig->coils[c];
        sim_history *h = &d->coils[c];
        double from = history_cut(h, at);
        double length = coil->max_slew > 0 ? fabs(from) / coil->max_slew : 0;
        sim_segment s = {.kind = SIM_RAMP, .start = at, .length = length, .from = from,
                         .to = 0, .until = INFINITY};
        if (history_add(h, &s)) {   /* no room for the ramp: at zero at once */
            h->base = 0;
            h->n = 0;
        }
        log_command(d, at, "segment %s ramp %.9g 0 %.9g", coil->name, from, length);
        longest = fmax(longest, length);
    }
    for (size_t l = 0; l < d->rig->nlines; l++) {
        if (d->rig->lines[l].direction != LINE_OUTPUT) continue;
        d->line_active[l] = false;
        log_command(d, at, "line %s 0", d->rig->lines[l].name);
    }
    log_flush(d);
    if (d->virtual_time) return 0;
    struct timespec until = to_timespec(at + longest);
    while (clock_nanosleep(CLOCK_MONOTONIC, TIMER_ABSTIME, &until, NULL) == EINTR) {
    }
    return 0;
}

/* ---- acquisitions ------------------------------------------------------------- */

/* The samples' buffer (d->buf) stays for the next acquisition. */
static void sim_stop_acquisition(drv *d) {
    if (d->acq.fd >= 0) close(d->acq.fd);
    d->acq = (sim_acq){.fd = -1};
}

/* Room for n floats in d->buf; NULL out of memory. */
static float *samples_buffer(drv *d, size_t n) {
    if (n > d->buf_cap) {
        float *g = realloc(d->buf, n * sizeof *g);
        if (!g) return NULL;
        d->buf = g;
        d->buf_cap = n;
    }
    return d->buf;
}

static int check_acquisition(const drv *d, const drv_acquisition *a, char *err, size_t errlen) {
    if (!a->ninputs || !a->inputs)
        return fail(err, errlen, -1, "an acquisition needs at least one input");
    for (size_t i = 0; i < a->ninputs; i++)
        if (a->inputs[i] < 0 || (size_t)a->inputs[i] >= d->rig->ninputs)
            return fail(err, errlen, -1, "no input %d on rig %s", a->inputs[i], d->rig->name);
    if (!(a->rate > 0) || a->rate > MAX_RATE)
        return fail(err, errlen, -1, "acquisition rate %.6g Hz is outside (0, %.0f Hz]",
                    a->rate, MAX_RATE);
    if (!isfinite(a->start))
        return fail(err, errlen, -1, "an acquisition needs a start time");
    if (a->nsamples > (SIZE_MAX / sizeof(float) - 1) / a->ninputs)
        return fail(err, errlen, -1, "an acquisition of %zu samples is too long", a->nsamples);
    return 0;
}

/* The descriptor: an eventfd readable at once (virtual time), or a timerfd
 * firing every CHUNK of acquisition time from the start (real time). */
static int open_fd(drv *d, const drv_acquisition *a, char *err, size_t errlen) {
    if (d->virtual_time) {
        d->acq.fd = eventfd(1, EFD_NONBLOCK | EFD_CLOEXEC);
        if (d->acq.fd < 0) return fail(err, errlen, -1, "eventfd: %s", strerror(errno));
        return 0;
    }
    d->acq.fd = timerfd_create(CLOCK_MONOTONIC, TFD_NONBLOCK | TFD_CLOEXEC);
    if (d->acq.fd < 0) return fail(err, errlen, -1, "timerfd_create: %s", strerror(errno));
    struct itimerspec its = {.it_interval = to_timespec(CHUNK),
                             .it_value = to_timespec(a->start + CHUNK)};
    if (timerfd_settime(d->acq.fd, TFD_TIMER_ABSTIME, &its, NULL))
        return fail(err, errlen, -1, "timerfd_settime: %s", strerror(errno));
    return 0;
}

static int make_record(drv *d, const drv_acquisition *a) {
    sim_scene sc = {d->rig, d->plan ? d->plan->plan : NULL, d->tl, d->shot_start, d->coils,
                    d->sample_place, d->sensor_place, d->scratch};
    sim_signal sig;
    sim_env_drift_to(&d->env, d->rig, a->start);
    if (sim_sample_signal(&sc, a->start, d->env.drift, &sig)) return -1;
    uint64_t seed = sim_mix(d->run_seed, a->shot, (uint64_t)a->attempt << 32 | d->acquisitions);
    int rc = sim_record(&d->env, &sc, &sig, a, seed, d->acq.data);
    sim_signal_free(&sig);
    return rc;
}

static int sim_start_acquisition(drv *d, const drv_acquisition *a, int *fd, char *err,
                                 size_t errlen) {
    *fd = -1;
    CHECK_GONE(d, err, errlen);
    if (check_acquisition(d, a, err, errlen)) return -1;
    sim_stop_acquisition(d);
    if (fault_on(d->rig, a->shot, FAULT_INTERLOCK) && isnan(d->interlock_at))
        d->interlock_at = a->start;
    sim_acq *q = &d->acq;
    q->data = samples_buffer(d, a->nsamples * a->ninputs + 1);
    if (!q->data || make_record(d, a)) {
        sim_stop_acquisition(d);
        return fail(err, errlen, -1, "out of memory for an acquisition of %zu samples",
                    a->nsamples);
    }
    d->acquisitions++;
    q->nsamples = a->nsamples;
    q->ninputs = a->ninputs;
    q->start = a->start;
    q->rate = a->rate;
    q->shot = a->shot;
    q->attempt = a->attempt;
    if (open_fd(d, a, err, errlen)) {
        sim_stop_acquisition(d);
        return -1;
    }
    q->active = true;
    log_command(d, a->start, "acquire %zu %.9g %zu shot %u attempt %u", a->ninputs, a->rate,
          a->nsamples, a->shot, a->attempt);
    *fd = q->fd;
    return 0;
}

static void drain_fd(int fd) {
    uint64_t count;
    ssize_t r = read(fd, &count, sizeof count);
    (void)r;
}

/* Samples whose time has passed (real time), all of them (virtual). */
static size_t arrived(const sim_acq *q, bool virtual_time) {
    if (virtual_time) return q->nsamples;
    double elapsed = now_monotonic() - q->start;
    if (elapsed < 0) return 0;
    double n = floor(elapsed * q->rate) + 1;
    return n >= (double)q->nsamples ? q->nsamples : (size_t)n;
}

static int sim_read_samples(drv *d, float *out, size_t max, size_t *got, bool *done, char *err,
                            size_t errlen) {
    *got = 0;
    *done = false;
    CHECK_GONE(d, err, errlen);
    sim_acq *q = &d->acq;
    if (!q->active) return fail(err, errlen, -1, "no acquisition is running");
    if (q->attempt <= 1 && fault_on(d->rig, q->shot, FAULT_READ_ERROR)) {
        drain_fd(q->fd);
        return fail(err, errlen, -1, "simulated read error");
    }
    if (q->attempt <= 1 && fault_on(d->rig, q->shot, FAULT_OVERRUN)) {
        drain_fd(q->fd);
        return fail(err, errlen, -1, "acquisition overrun: samples were lost");
    }
    if (!d->virtual_time) drain_fd(q->fd);
    size_t avail = arrived(q, d->virtual_time), take = avail - q->handed;
    if (take > max / q->ninputs) take = max / q->ninputs;
    if (take) memcpy(out, q->data + q->handed * q->ninputs, take * q->ninputs * sizeof *out);
    q->handed += take;
    *got = take * q->ninputs;
    *done = q->handed == q->nsamples;
    if (*done && d->virtual_time) drain_fd(q->fd);
    return 0;
}

const drv_ops sim_driver = {
    .name = "sim",
    .open = sim_open,
    .close = sim_close,
    .caps = sim_caps,
    .begin_shot = sim_begin_shot,
    .set_current = sim_set_current,
    .load_segment = sim_load_segment,
    .set_line = sim_set_line,
    .read_line = sim_read_line,
    .start_acquisition = sim_start_acquisition,
    .read_samples = sim_read_samples,
    .stop_acquisition = sim_stop_acquisition,
    .safe_state = sim_safe_state,
    .input_scale = sim_input_scale,
};
