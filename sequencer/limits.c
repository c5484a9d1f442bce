/* limits: the hard limits of the rig checked on compiled timelines (coil
 * current, slew, compliance I R + L dI/dt, output voltage, mean power over
 * the thermal window, the plan's max_duration) and the adiabaticity of a
 * field change. Every refusal names the coil, the limit and the value.
 * Not for building timelines (compile.c). */
#include "compile_internal.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define TOLERANCE (1 + 1e-9)   /* rounding of ramps computed at the limit */

static const char *fmt(double v, units_dim d, char *buf) {
    return units_format(v, d, buf, 48);
}

/* The step an event belongs to, for the message's location. */
static plan_loc event_loc(const compile_builder *b, const compile_timeline *t,
                          const compile_event *e) {
    if (e->step >= 1 && e->step <= t->nsteps) return t->steps[e->step - 1].loc;
    return b->p->shot.n ? b->p->shot.steps[b->p->shot.n - 1].loc
                        : (plan_loc){b->p->file, 1, 1};
}

static void check_level(compile_builder *b, plan_loc at, int c, double current, double slew) {
    const rig_coil *coil = &b->p->rig.coils[c];
    char x[48], y[48];
    if (fabs(current) > coil->max_current * TOLERANCE)
        compile_report_at(b, DIAG_ERROR, at, c, REPORT_MAX_CURRENT,
                          "max_current of coil %s exceeded: %s > %s; lower the field or "
                          "current asked", coil->name, fmt(fabs(current), UNITS_CURRENT, x),
                          fmt(coil->max_current, UNITS_CURRENT, y));
    double volts = fabs(current) / coil->amps_per_volt;
    if (volts > b->p->rig.ao_range * TOLERANCE)
        compile_report_at(b, DIAG_ERROR, at, c, REPORT_VOLTAGE,
                          "the output voltage of coil %s leaves the analog output range: "
                          "%s > %s", coil->name, fmt(volts, UNITS_VOLTAGE, x),
                          fmt(b->p->rig.ao_range, UNITS_VOLTAGE, y));
    double drive = fabs(current * coil->resistance + coil->inductance * slew);
    if (drive > coil->compliance * TOLERANCE)
        compile_report_at(b, DIAG_ERROR, at, c, REPORT_COMPLIANCE,
                          "compliance of coil %s exceeded: %s > %s; lower max_slew or the "
                          "field step", coil->name, fmt(drive, UNITS_VOLTAGE, x),
                          fmt(coil->compliance, UNITS_VOLTAGE, y));
}

static void check_ramp(compile_builder *b, const compile_timeline *t, const compile_event *e) {
    const rig_coil *coil = &b->p->rig.coils[e->channel];
    plan_loc at = event_loc(b, t, e);
    double slew = e->length > 0 ? (e->to - e->from) / e->length
                                : (e->to != e->from ? INFINITY : 0);
    char x[48], y[48];
    if (fabs(slew) > coil->max_slew * TOLERANCE)
        compile_report_at(b, DIAG_ERROR, at, e->channel, REPORT_MAX_SLEW,
                          "max_slew of coil %s exceeded: %s > %s", coil->name,
                          fmt(fabs(slew), UNITS_SLEW, x), fmt(coil->max_slew, UNITS_SLEW, y));
    check_level(b, at, e->channel, e->from, slew);
    check_level(b, at, e->channel, e->to, slew);
}

static void check_pulse(compile_builder *b, const compile_timeline *t, const compile_event *e,
                        const double *base) {
    const compile_pulse *pu = &t->pulses[e->index];
    const rig_coil *coil = &b->p->rig.coils[pu->coil];
    plan_loc at = event_loc(b, t, e);
    double peak = fabs(base[pu->coil]) + pu->current;
    if (pu->shape == SHAPE_RESONANT) {
        /* I(t) = I cos(w t): the drive's amplitude is I |R + j w L|. */
        double w = 2 * M_PI * pu->frequency, slew = w * pu->current;
        char x[48], y[48];
        if (slew > coil->max_slew * TOLERANCE)
            compile_report_at(b, DIAG_ERROR, at, pu->coil, REPORT_MAX_SLEW,
                              "max_slew of coil %s exceeded by the resonant pulse: %s > %s",
                              coil->name, fmt(slew, UNITS_SLEW, x),
                              fmt(coil->max_slew, UNITS_SLEW, y));
        check_level(b, at, pu->coil, peak, 0);
        double drive = fabs(base[pu->coil]) * coil->resistance +
                       pu->current * hypot(coil->resistance, w * coil->inductance);
        if (drive > coil->compliance * TOLERANCE)
            compile_report_at(b, DIAG_ERROR, at, pu->coil, REPORT_COMPLIANCE,
                              "compliance of coil %s exceeded by the resonant pulse: %s > %s; "
                              "lower its amplitude or frequency", coil->name,
                              fmt(drive, UNITS_VOLTAGE, x), fmt(coil->compliance, UNITS_VOLTAGE, y));
        return;
    }
    double slew = pu->rise > 0 ? pu->current / pu->rise : INFINITY;
    check_level(b, at, pu->coil, peak, slew);
}

void limit_check_timeline(compile_builder *b, const compile_timeline *t) {
    double *base = calloc(b->ncoils + 1, sizeof *base);
    if (!base) return;
    for (size_t c = 0; c < b->ncoils; c++)
        base[c] = t == &b->c->setup ? 0 : b->c->rest_currents[c];
    for (size_t k = 0; k < t->nevents; k++) {
        const compile_event *e = &t->events[k];
        if (e->kind == EV_RAMP) {
            check_ramp(b, t, e);
            base[e->channel] = e->to;
        } else if (e->kind == EV_PULSE) {
            check_pulse(b, t, e, base);
        }
    }
    free(base);
}

/* ---- power over the thermal window ------------------------------------- */

typedef struct {
    double start, end, energy;  /* s from the timeline's start; J */
} power_segment;

typedef struct {
    power_segment *seg;
    size_t n, cap;
} segments;

static void add_segment(segments *s, double start, double end, double energy) {
    if (end <= start) return;
    if (s->n == s->cap) {
        size_t cap = s->cap ? s->cap * 2 : 16;
        power_segment *ns = realloc(s->seg, cap * sizeof *ns);
        if (!ns) return;
        s->seg = ns;
        s->cap = cap;
    }
    s->seg[s->n++] = (power_segment){start, end, energy};
}

/* Energy of a linear change a -> b over length in resistance r. */
static double ramp_energy(double a, double c, double length, double r) {
    return r * length * (a * a + a * c + c * c) / 3;
}

/* The coil's dissipation through one timeline, as segments covering it. */
static void coil_segments(const compile_timeline *t, int coil, double r, double base,
                          segments *out) {
    out->n = 0;
    double i = base, now = 0;
    for (size_t k = 0; k < t->nevents; k++) {
        const compile_event *e = &t->events[k];
        if (e->channel != coil || (e->kind != EV_RAMP && e->kind != EV_PULSE)) continue;
        add_segment(out, now, e->start, i * i * r * (e->start - now));
        if (e->kind == EV_RAMP) {
            add_segment(out, e->start, e->start + e->length,
                        ramp_energy(e->from, e->to, e->length, r));
            i = e->to;
        } else {
            const compile_pulse *pu = &t->pulses[e->index];
            double top = i + pu->current, t0 = e->start;
            if (pu->shape == SHAPE_RESONANT) {
                add_segment(out, t0, t0 + e->length,
                            r * e->length * (i * i + pu->current * pu->current / 2));
            } else {
                double flat = e->length - 2 * pu->rise;
                add_segment(out, t0, t0 + pu->rise, ramp_energy(i, top, pu->rise, r));
                add_segment(out, t0 + pu->rise, t0 + pu->rise + flat, top * top * r * flat);
                add_segment(out, t0 + pu->rise + flat, t0 + e->length,
                            ramp_energy(top, i, pu->rise, r));
            }
        }
        now = e->start + e->length;
    }
    add_segment(out, now, t->duration, i * i * r * (t->duration - now));
}

/* Walks the run's segments of one coil in execution order. */
typedef struct {
    const compile_builder *b;
    segments *per_timeline;     /* index: timeline, then setup, teardown */
    size_t part;                /* 0 setup, 1..nshots, nshots+1 teardown */
    size_t seg;
    double offset;              /* start of the part in the run */
    double energy;              /* before the current segment */
} run_walk;

static const segments *part_segments(const run_walk *w, size_t part) {
    const compiled *c = w->b->c;
    size_t nshots = w->b->s->nshots;
    if (part == 0) return &w->per_timeline[c->ntimelines];
    if (part > nshots) return &w->per_timeline[c->ntimelines + 1];
    return &w->per_timeline[c->shot_timeline[part - 1]];
}

static double part_duration(const run_walk *w, size_t part) {
    const compiled *c = w->b->c;
    size_t nshots = w->b->s->nshots;
    if (part == 0) return c->setup.duration;
    if (part > nshots) return c->teardown.duration;
    return c->timelines[c->shot_timeline[part - 1]].duration;
}

/* Move to the next segment; returns 0 at the end of the run. */
static int walk_next(run_walk *w) {
    size_t nparts = w->b->s->nshots + 2;
    const segments *s = part_segments(w, w->part);
    if (w->seg < s->n) w->energy += s->seg[w->seg].energy;
    w->seg++;
    while (w->part < nparts && w->seg >= part_segments(w, w->part)->n) {
        w->offset += part_duration(w, w->part);
        w->part++;
        w->seg = 0;
    }
    return w->part < nparts;
}

static const power_segment *walk_at(const run_walk *w) {
    return &part_segments(w, w->part)->seg[w->seg];
}

/* Cumulative energy up to time t (t never decreases between calls). */
static double energy_until(run_walk *w, double t) {
    size_t nparts = w->b->s->nshots + 2;
    while (w->part < nparts && w->offset + walk_at(w)->end <= t)
        if (!walk_next(w)) break;
    if (w->part >= nparts) return w->energy;
    const power_segment *s = walk_at(w);
    double a = w->offset + s->start, z = w->offset + s->end;
    if (t <= a) return w->energy;
    return w->energy + s->energy * (t - a) / (z - a);
}

static void walk_start(run_walk *w) {
    w->part = 0;
    w->seg = 0;
    w->offset = 0;
    w->energy = 0;
    size_t nparts = w->b->s->nshots + 2;
    while (w->part < nparts && part_segments(w, w->part)->n == 0) {
        w->offset += part_duration(w, w->part);
        w->part++;
    }
}

/* The largest energy in any window of width: the window starts or ends at
 * a segment boundary at its largest. */
static double max_window_energy(run_walk *trail, run_walk *lead, run_walk *lag, double width) {
    walk_start(trail);
    walk_start(lead);
    walk_start(lag);
    size_t nparts = trail->b->s->nshots + 2;
    double best = 0;
    while (trail->part < nparts) {
        const power_segment *s = walk_at(trail);
        double a = trail->offset + s->start, z = trail->offset + s->end;
        double e_a = trail->energy, e_z = trail->energy + s->energy;
        best = fmax(best, energy_until(lead, a + width) - e_a);
        best = fmax(best, e_z - (z - width > 0 ? energy_until(lag, z - width) : 0));
        if (!walk_next(trail)) break;
    }
    return best;
}

static void check_power(compile_builder *b, int coil) {
    const compiled *c = b->c;
    const rig_coil *rc = &b->p->rig.coils[coil];
    size_t n = c->ntimelines + 2;
    segments *per = calloc(n, sizeof *per);
    if (!per) return;
    for (size_t k = 0; k < c->ntimelines; k++)
        coil_segments(&c->timelines[k], coil, rc->resistance, c->rest_currents[coil], &per[k]);
    coil_segments(&c->setup, coil, rc->resistance, 0, &per[c->ntimelines]);
    coil_segments(&c->teardown, coil, rc->resistance, c->rest_currents[coil],
                  &per[c->ntimelines + 1]);
    char x[48], y[48], z[48];
    plan_loc at = rc->loc;
    if (rc->thermal_time > 0) {
        b->point = COMPILE_RUN_WIDE;
        run_walk w[3];
        for (int i = 0; i < 3; i++) w[i] = (run_walk){b, per, 0, 0, 0, 0};
        double mean = max_window_energy(&w[0], &w[1], &w[2], rc->thermal_time) /
                      rc->thermal_time;
        if (mean > rc->max_power * TOLERANCE)
            compile_report_at(b, DIAG_ERROR, at, coil, REPORT_POWER,
                              "max_power of coil %s exceeded: %s mean over %s > %s; shorten "
                              "its hold, lower its current or add a wait",
                              rc->name, fmt(mean, UNITS_POWER, x),
                              fmt(rc->thermal_time, UNITS_TIME, z), fmt(rc->max_power, UNITS_POWER, y));
    } else {
        for (size_t k = 0; k < c->ntimelines; k++) {
            double e = 0;
            for (size_t i = 0; i < per[k].n; i++) e += per[k].seg[i].energy;
            double mean = c->timelines[k].duration > 0 ? e / c->timelines[k].duration : 0;
            b->point = k < b->s->npoints ? (uint32_t)k + 1 : b->point;
            if (mean > rc->max_power * TOLERANCE)
                compile_report_at(b, DIAG_ERROR, at, coil, REPORT_POWER,
                                  "max_power of coil %s exceeded: %s mean over the shot > %s",
                                  rc->name, fmt(mean, UNITS_POWER, x),
                                  fmt(rc->max_power, UNITS_POWER, y));
        }
    }
    for (size_t k = 0; k < n; k++) free(per[k].seg);
    free(per);
}

void limit_check_run(compile_builder *b) {
    for (size_t coil = 0; coil < b->ncoils; coil++)
        if (b->p->rig.coils[coil].max_power > 0) check_power(b, (int)coil);
    const plan *p = b->p;
    if (p->max_duration > 0 && b->c->duration > p->max_duration * TOLERANCE) {
        char x[48], y[48];
        diag_add(b->d, DIAG_ERROR, p->max_duration_loc,
                 "the plan takes %s, longer than limits.max_duration (%s); take fewer points "
                 "or averages, or raise the limit", fmt(b->c->duration, UNITS_TIME, x),
                 fmt(p->max_duration, UNITS_TIME, y));
        b->any_failed = 1;
    }
}

/* ---- adiabaticity --------------------------------------------------------- */

static double dot3(const double a[3], const double c[3]) {
    return a[0] * c[0] + a[1] * c[1] + a[2] * c[2];
}

/* For B(s) = ba + s (bb - ba), s in [0, 1] over length T: the field turns
 * at |B x dB/dt| / |B|^2 with B x dB/dt = ba x (bb - ba) / T constant, so
 * the ratio |gamma| |B|^3 T / |ba x (bb - ba)| is smallest where |B| is. */
compile_regime limit_regime(const double ba[3], const double bb[3], double length,
                            double gamma, double *ratio) {
    double dv[3] = {bb[0] - ba[0], bb[1] - ba[1], bb[2] - ba[2]};
    double dd = dot3(dv, dv);
    *ratio = INFINITY;
    if (dd == 0) return REGIME_NONE;
    double s = -dot3(ba, dv) / dd;
    s = s < 0 ? 0 : s > 1 ? 1 : s;
    double bmin[3] = {ba[0] + s * dv[0], ba[1] + s * dv[1], ba[2] + s * dv[2]};
    double cross[3] = {ba[1] * dv[2] - ba[2] * dv[1], ba[2] * dv[0] - ba[0] * dv[2],
                       ba[0] * dv[1] - ba[1] * dv[0]};
    double turn = sqrt(dot3(cross, cross));
    double bm = sqrt(dot3(bmin, bmin));
    /* Through zero, or no time to turn in: the direction jumps. */
    if (bm <= 1e-18 * sqrt(dd) || length <= 0) {
        *ratio = 0;
        return REGIME_SUDDEN;
    }
    if (turn <= 1e-15 * sqrt(dd) * bm) return REGIME_ADIABATIC;   /* never turns */
    *ratio = gamma * bm * bm * bm * length / turn;
    return *ratio >= 10 ? REGIME_ADIABATIC : *ratio <= 0.1 ? REGIME_SUDDEN : REGIME_INTERMEDIATE;
}
