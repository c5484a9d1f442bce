/* compile: every point of a scan (and every reference variant) turned into
 * a timeline of timed events by the step-timing rules of the language:
 * ramps at max_slew, polarize up-hold-off, field ramps over one common
 * time then settle, pulses with their edges, acquisitions, lines, waits,
 * repeats, and the ramp back to rest that ends every shot.
 * Not for the fields (fields.c), the limits (limits.c) or running. */
#include "compile_internal.h"

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---- growing arrays ------------------------------------------------------ */

#define PUSH(arr, n, cap)                                                      \
    (((n) == (cap) && grow((void **)&(arr), &(cap), sizeof *(arr))) ? NULL     \
                                                                   : &(arr)[(n)++])

static int grow(void **arr, size_t *cap, size_t size) {
    size_t nc = *cap ? *cap * 2 : 16;
    void *na = realloc(*arr, nc * size);
    if (!na) return -1;
    *arr = na;
    *cap = nc;
    return 0;
}

/* ---- reports --------------------------------------------------------------- */

void compile_report_at(compile_builder *b, diag_severity sev, plan_loc loc, int coil,
                       int kind, const char *fmt, ...) {
    if (sev == DIAG_ERROR) b->failed = b->any_failed = 1;
    for (size_t i = 0; i < b->nreports; i++) {
        compile_report *r = &b->reports[i];
        if (r->kind == kind && r->coil == coil && r->loc.line == loc.line &&
            r->loc.col == loc.col && r->loc.file == loc.file) {
            if (r->last_point != b->point) r->more++;
            r->last_point = b->point;
            return;
        }
    }
    compile_report *r = PUSH(b->reports, b->nreports, b->cap_reports);
    if (!r) return;
    r->loc = loc;
    r->coil = coil;
    r->kind = kind;
    r->first_point = r->last_point = b->point;
    r->more = 0;
    r->severity = sev;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(r->message, sizeof r->message, fmt, ap);
    va_end(ap);
}

void compile_flush_reports(compile_builder *b) {
    for (size_t i = 0; i < b->nreports; i++) {
        const compile_report *r = &b->reports[i];
        char where[64] = "";
        if (r->first_point == 0) snprintf(where, sizeof where, "setup or teardown: ");
        else if (r->first_point != COMPILE_RUN_WIDE)
            snprintf(where, sizeof where, "point %u: ", r->first_point);
        if (r->more)
            diag_add(b->d, r->severity, r->loc, "%s%s (and at %zu more point%s)", where,
                     r->message, r->more, r->more == 1 ? "" : "s");
        else
            diag_add(b->d, r->severity, r->loc, "%s%s", where, r->message);
    }
}

/* ---- events ---------------------------------------------------------------- */

static void emit(compile_builder *b, compile_event_kind kind, int channel, double start,
                 double length, double from, double to, uint32_t index) {
    compile_event *e = PUSH(b->ev, b->nev, b->cap_ev);
    if (!e) {
        b->failed = 1;
        return;
    }
    *e = (compile_event){start, length, from, to, index, b->step, (uint8_t)kind,
                         (int16_t)channel};
}

static double eval(compile_builder *b, const plan_value *v) {
    double out = 0;
    if (v->set && plan_eval(b->p, v, b->vals, b->lets, &out, b->d)) {
        b->failed = 1;
        return NAN;
    }
    return out;
}

/* Ramp every coil whose current differs from target, linearly over one
 * common time: the shortest every max_slew allows, or `ramp` if longer.
 * Returns the time taken, or NAN after a report. */
static double ramp_to(compile_builder *b, const double *target, double ramp, plan_loc at) {
    const plan_rig *rig = &b->p->rig;
    double need = 0;
    int worst = -1;
    for (size_t c = 0; c < b->ncoils; c++) {
        double t = fabs(target[c] - b->cur[c]) / rig->coils[c].max_slew;
        if (t > need) {
            need = t;
            worst = (int)c;
        }
    }
    double length = need;
    if (ramp >= 0) {
        if (ramp < need * (1 - 1e-12)) {
            char a[64], n[64];
            compile_report_at(b, DIAG_ERROR, at, worst, REPORT_RAMP_TOO_SHORT,
                              "ramp %s is shorter than coil %s's max_slew allows (%s); "
                              "lengthen the ramp or make the field step smaller",
                              units_format(ramp, UNITS_TIME, a, sizeof a),
                              rig->coils[worst].name, units_format(need, UNITS_TIME, n, sizeof n));
            return NAN;
        }
        length = ramp;
    }
    for (size_t c = 0; c < b->ncoils; c++)
        if (target[c] != b->cur[c]) {
            emit(b, EV_RAMP, (int)c, b->t, length, b->cur[c], target[c], 0);
            b->cur[c] = target[c];
        }
    return length;
}

static void set_regime(compile_builder *b, compile_step *st, const double ba[3],
                       const double bb[3], double length, plan_expect expect) {
    double gamma = INFINITY;
    for (size_t i = 0; i < b->p->sample.nnuclei; i++)
        gamma = fmin(gamma, fabs(b->p->sample.nuclei[i]->gamma));
    st->regime = limit_regime(ba, bb, length, gamma, &st->adiabatic_ratio);
    static const char *const names[] = {"", "adiabatic", "intermediate", "sudden"};
    const char *want = expect == EXPECT_ADIABATIC ? "adiabatic" : "sudden";
    if (!((expect == EXPECT_ADIABATIC && st->regime != REGIME_ADIABATIC) ||
          (expect == EXPECT_SUDDEN && st->regime != REGIME_SUDDEN)))
        return;
    if (st->regime == REGIME_NONE)
        compile_report_at(b, DIAG_WARNING, st->loc, -1, REPORT_REGIME,
                          "the field does not change here, so it is not %s as expected", want);
    else if (isinf(st->adiabatic_ratio))
        compile_report_at(b, DIAG_WARNING, st->loc, -1, REPORT_REGIME,
                          "the field's direction never turns here, so the change is adiabatic, "
                          "not %s as expected", want);
    else
        compile_report_at(b, DIAG_WARNING, st->loc, -1, REPORT_REGIME,
                          "this field change is %s (smallest ratio %.3g), not %s as expected",
                          names[st->regime], st->adiabatic_ratio, want);
}

/* ---- the steps --------------------------------------------------------- */

static void step_polarize(compile_builder *b, const plan_step *s, compile_step *st) {
    const plan_rig *rig = &b->p->rig;
    double hold = eval(b, &s->u.polarize.hold);
    if (s->u.polarize.magnet >= 0) {
        b->t += hold;
        return;
    }
    int c = s->u.polarize.coil;
    const rig_coil *coil = &rig->coils[c];
    double target;
    if (s->u.polarize.field.set) {
        if (!coil->has_field_per_current) {
            compile_report_at(b, DIAG_ERROR, s->loc, c, REPORT_NO_FIELD_PER_CURRENT,
                              "coil %s has no field_per_current (nor geometry), so a field "
                              "cannot be turned into its current; give 'current' instead",
                              coil->name);
            return;
        }
        target = eval(b, &s->u.polarize.field) / coil->field_per_current;
    } else {
        target = eval(b, &s->u.polarize.current);
    }
    double rest = b->c->rest_currents[c];
    double up = fabs(target - b->cur[c]) / coil->max_slew;
    emit(b, EV_RAMP, c, b->t, up, b->cur[c], target, 0);
    b->cur[c] = target;
    b->t += up + hold;
    double before[3], after[3];
    compile_sample_field(rig, b->sample, b->cur, before);
    double off = fabs(target - rest) / coil->max_slew;
    if (s->u.polarize.off_ramp.set) {
        double given = eval(b, &s->u.polarize.off_ramp);
        if (given < off * (1 - 1e-12)) {
            char a[64], n[64];
            compile_report_at(b, DIAG_ERROR, s->u.polarize.off_ramp.loc, c,
                              REPORT_RAMP_TOO_SHORT,
                              "off ramp %s is faster than coil %s's max_slew allows (%s)",
                              units_format(given, UNITS_TIME, a, sizeof a), coil->name,
                              units_format(off, UNITS_TIME, n, sizeof n));
            return;
        }
        off = given;
    }
    emit(b, EV_RAMP, c, b->t, off, target, rest, 0);
    b->cur[c] = rest;
    compile_sample_field(rig, b->sample, b->cur, after);
    set_regime(b, st, before, after, off, EXPECT_NONE);
    b->t += off;
}

static void step_field(compile_builder *b, const plan_step *s, compile_step *st) {
    double target[256];
    if (b->ncoils > 256) return;
    memcpy(target, b->cur, b->ncoils * sizeof *target);
    if (compile_solve_targets(b, s->u.field.targets, s->u.field.n, s->loc, target)) return;
    double ba[3], bb[3];
    compile_sample_field(&b->p->rig, b->sample, b->cur, ba);
    double ramp = s->u.field.ramp.set ? eval(b, &s->u.field.ramp) : -1;
    double length = ramp_to(b, target, ramp, s->loc);
    if (isnan(length)) return;
    compile_sample_field(&b->p->rig, b->sample, b->cur, bb);
    set_regime(b, st, ba, bb, length, s->u.field.expect);
    b->t += length + eval(b, &s->u.field.settle);
}

static const nuc_info *pulse_nucleus(const compile_builder *b, const plan_step *s) {
    return s->u.pulse.nucleus ? s->u.pulse.nucleus : b->p->sample.nuclei[0];
}

/* The shape of the pulse at the sample: amplitude, edges, the static field. */
static int pulse_shape_for(compile_builder *b, const plan_step *s, pulse_shape *ps,
                           double *current) {
    const rig_coil *coil = &b->p->rig.coils[s->u.pulse.coil];
    if (!coil->has_field_per_current) {
        compile_report_at(b, DIAG_ERROR, s->loc, s->u.pulse.coil, REPORT_NO_FIELD_PER_CURRENT,
                          "coil %s has no field_per_current (nor geometry), so its pulse "
                          "field is unknown", coil->name);
        return -1;
    }
    double k = fabs(coil->field_per_current);
    double amplitude = s->u.pulse.amplitude.set ? fabs(eval(b, &s->u.pulse.amplitude))
                                                : coil->max_current * k;
    memset(ps, 0, sizeof *ps);
    compile_sample_field(&b->p->rig, b->sample, b->cur, ps->b0);
    ps->axis[coil->axis] = coil->field_per_current < 0 ? -1 : 1;
    ps->amplitude = amplitude;
    ps->sign = 1;
    *current = amplitude / k;
    if (s->u.pulse.shape == SHAPE_RESONANT) {
        ps->resonant = 1;
        ps->frequency = eval(b, &s->u.pulse.frequency);
        ps->phase = eval(b, &s->u.pulse.phase);
    } else {
        ps->rise = *current / coil->max_slew;
    }
    return isnan(amplitude) ? -1 : 0;
}

/* Find the pulse's length for its angle. At the default amplitude a pulse
 * whose slew-limited edges alone would tip too far is made weaker until it
 * fits; a resonant pulse may fall short of 180 deg by what its
 * counter-rotating half allows. Returns 0, or -1 after a report. */
static int set_angle(compile_builder *b, const plan_step *s, pulse_shape *ps, double *current,
                     const nuc_info *nu) {
    double angle = fabs(eval(b, &s->u.pulse.angle)), reach = 0;
    const rig_coil *coil = &b->p->rig.coils[s->u.pulse.coil];
    int rc = pulse_set_angle(ps, nu->gamma, angle, &reach);
    for (int k = 0; rc && !ps->resonant && !s->u.pulse.amplitude.set && reach > angle && k < 40;
         k++) {
        ps->amplitude *= 0.8;
        *current = ps->amplitude / fabs(coil->field_per_current);
        ps->rise = *current / coil->max_slew;
        rc = pulse_set_angle(ps, nu->gamma, angle, &reach);
    }
    double b0 = sqrt(ps->b0[0] * ps->b0[0] + ps->b0[1] * ps->b0[1] + ps->b0[2] * ps->b0[2]);
    /* Just under the largest angle, so the first peak that reaches it is
     * taken, not a later one of the same height. */
    if (rc && ps->resonant && b0 > 0 && fabs(reach - angle) <= 2 * ps->amplitude / b0)
        rc = pulse_set_angle(ps, nu->gamma, reach - 2e-4, &reach);
    if (rc == 0) return 0;
    char a[32], r[32], m[32], e[32];
    units_format(angle, UNITS_ANGLE_DIM, a, sizeof a);
    units_format(ps->amplitude, UNITS_FIELD, m, sizeof m);
    units_format(reach, UNITS_ANGLE_DIM, r, sizeof r);
    if (reach > angle && !ps->resonant)
        compile_report_at(b, DIAG_ERROR, s->loc, s->u.pulse.coil, REPORT_TIP_UNREACHABLE,
                          "the edges alone of this pulse tip %s by %s, more than %s: at coil "
                          "%s's max_slew each edge takes %s at %s; lower the amplitude",
                          nu->token, r, a, coil->name,
                          units_format(ps->rise, UNITS_TIME, e, sizeof e), m);
    else
        compile_report_at(b, DIAG_ERROR, s->loc, s->u.pulse.coil, REPORT_TIP_UNREACHABLE,
                          "the pulse cannot tip %s by %s at an amplitude of %s; it reaches at "
                          "most %s in this static field (raise the amplitude or lower the "
                          "field)", nu->token, a, m, r);
    return -1;
}

static void step_pulse(compile_builder *b, const plan_step *s) {
    pulse_shape ps;
    double current;
    if (pulse_shape_for(b, s, &ps, &current)) return;
    const nuc_info *nu = pulse_nucleus(b, s);
    char a[64], r[64];
    if (s->u.pulse.angle.set && set_angle(b, s, &ps, &current, nu)) return;
    if (!s->u.pulse.angle.set && pulse_set_duration(&ps, eval(b, &s->u.pulse.duration))) {
        compile_report_at(b, DIAG_ERROR, s->loc, s->u.pulse.coil, REPORT_PULSE_TOO_SHORT,
                          "a pulse of %s is shorter than its edges at coil %s's max_slew "
                          "(%s); lower the amplitude",
                          units_format(eval(b, &s->u.pulse.duration), UNITS_TIME, a, sizeof a),
                          b->p->rig.coils[s->u.pulse.coil].name,
                          units_format(ps.rise, UNITS_TIME, r, sizeof r));
        return;
    }
    compile_pulse *pu = PUSH(b->pu, b->npu, b->cap_pu);
    if (!pu) {
        b->failed = 1;
        return;
    }
    memset(pu, 0, sizeof *pu);
    pu->coil = s->u.pulse.coil;
    pu->shape = s->u.pulse.shape;
    pu->amplitude = ps.amplitude;
    pu->current = current;
    pu->duration = pulse_duration(&ps);
    pu->rise = ps.rise;
    pu->length = ps.resonant ? ps.flat : ps.flat + 2 * ps.rise;
    pu->frequency = ps.frequency;
    pu->phase = ps.phase;
    pu->alternate = s->u.pulse.alternate;
    pu->shape_at_sample = ps;
    emit(b, EV_PULSE, pu->coil, b->t, pu->length, 0, current, (uint32_t)(b->npu - 1));
    b->t += pu->length;
}

static void step_acquire(compile_builder *b, const plan_step *s) {
    double rate = eval(b, &s->u.acquire.rate), length = eval(b, &s->u.acquire.length);
    double bs[3];
    compile_sample_field(&b->p->rig, b->sample, b->cur, bs);
    double babs = sqrt(bs[0] * bs[0] + bs[1] * bs[1] + bs[2] * bs[2]);
    for (size_t i = 0; i < b->p->sample.nnuclei; i++) {
        const nuc_info *nu = b->p->sample.nuclei[i];
        double f = fabs(nu->gamma) * babs / (2 * M_PI);
        if (f >= rate / 2) {
            char a[64], r[64], m[64];
            compile_report_at(b, DIAG_ERROR, s->loc, -1, REPORT_NYQUIST,
                              "the %s signal at %s is at or above half the acquisition rate "
                              "(%s); raise rate above %s", nu->token,
                              units_format(f, UNITS_FREQUENCY, a, sizeof a),
                              units_format(rate, UNITS_FREQUENCY, r, sizeof r),
                              units_format(2 * f, UNITS_FREQUENCY, m, sizeof m));
        }
    }
    compile_acquire *aq = PUSH(b->aq, b->naq, b->cap_aq);
    if (!aq) {
        b->failed = 1;
        return;
    }
    *aq = (compile_acquire){rate, length, s->u.acquire.ninputs, s->u.acquire.inputs};
    emit(b, EV_ACQUIRE, -1, b->t, length, 0, 0, (uint32_t)(b->naq - 1));
    if (!b->got_acquisition) {
        b->got_acquisition = true;
        memcpy(b->tl->currents, b->cur, b->ncoils * sizeof *b->cur);
        for (size_t p = 0; p < b->p->rig.nplaces; p++)
            b->tl->fields[p] = compile_place_field(&b->p->rig, (int)p, b->cur);
        memcpy(b->tl->field_at_sample, bs, sizeof bs);
        b->tl->frequency = fabs(b->p->sample.nuclei[0]->gamma) * babs / (2 * M_PI);
    }
    b->t += length;
}

static void run_steps(compile_builder *b, const plan_steps *steps) {
    for (size_t i = 0; i < steps->n && !b->failed; i++) {
        const plan_step *s = &steps->steps[i];
        if (s->kind == STEP_REPEAT) {
            for (int k = 0; k < s->u.repeat.times && !b->failed; k++)
                run_steps(b, &s->u.repeat.body);
            continue;
        }
        b->step++;
        compile_step *st = PUSH(b->st, b->nst, b->cap_st);
        if (!st) {
            b->failed = 1;
            return;
        }
        *st = (compile_step){s->kind, s->label, s->loc, b->t, 0, REGIME_NONE, INFINITY};
        size_t index = b->nst - 1;
        switch (s->kind) {
        case STEP_POLARIZE: step_polarize(b, s, st); break;
        case STEP_FIELD: step_field(b, s, st); break;
        case STEP_PULSE: step_pulse(b, s); break;
        case STEP_ACQUIRE: step_acquire(b, s); break;
        case STEP_LINE:
            emit(b, EV_LINE, s->u.line.line, b->t, 0, b->line_on[s->u.line.line], s->u.line.on,
                 0);
            b->line_on[s->u.line.line] = s->u.line.on;
            break;
        case STEP_WAIT: b->t += eval(b, &s->u.wait.length); break;
        case STEP_REPEAT: break;
        }
        b->st[index].length = b->t - b->st[index].start;
    }
}

/* Copy the growing arrays into the arena as the timeline's own. */
static int seal(compile_builder *b, compile_timeline *tl) {
    arena *a = b->c->arena;
    tl->nevents = b->nev;
    tl->npulses = b->npu;
    tl->nacquisitions = b->naq;
    tl->nsteps = b->nst;
    tl->events = arena_alloc(a, (b->nev + 1) * sizeof *tl->events);
    tl->pulses = arena_alloc(a, (b->npu + 1) * sizeof *tl->pulses);
    tl->acquisitions = arena_alloc(a, (b->naq + 1) * sizeof *tl->acquisitions);
    tl->steps = arena_alloc(a, (b->nst + 1) * sizeof *tl->steps);
    if (!tl->events || !tl->pulses || !tl->acquisitions || !tl->steps) return -1;
    if (b->nev) memcpy(tl->events, b->ev, b->nev * sizeof *b->ev);
    if (b->npu) memcpy(tl->pulses, b->pu, b->npu * sizeof *b->pu);
    if (b->naq) memcpy(tl->acquisitions, b->aq, b->naq * sizeof *b->aq);
    if (b->nst) memcpy(tl->steps, b->st, b->nst * sizeof *b->st);
    size_t nn = b->p->sample.nnuclei;
    for (size_t i = 0; i < b->npu; i++) {
        compile_pulse *pu = &tl->pulses[i];
        pu->angles = arena_alloc(a, (nn + 1) * sizeof *pu->angles);
        if (!pu->angles) return -1;
        for (size_t k = 0; k < nn; k++)
            pu->angles[k] = pulse_tip_angle(&pu->shape_at_sample, b->p->sample.nuclei[k]->gamma);
    }
    return 0;
}

/* Build one timeline: from start currents (rest, or the safe state for
 * setup) through the steps, then back to end currents. */
static int build(compile_builder *b, compile_timeline *tl, const plan_steps *steps,
                 const double *start, const double *end, plan_loc end_loc) {
    const plan *p = b->p;
    arena *a = b->c->arena;
    b->tl = tl;
    b->t = 0;
    b->step = 0;
    b->got_acquisition = false;
    b->nev = b->npu = b->naq = b->nst = 0;
    tl->currents = arena_alloc(a, (b->ncoils + 1) * sizeof *tl->currents);
    tl->fields = arena_alloc(a, (p->rig.nplaces + 1) * sizeof *tl->fields);
    if (!tl->currents || !tl->fields) return -1;
    memcpy(b->cur, start, b->ncoils * sizeof *b->cur);
    memset(b->line_on, 0, (p->rig.nlines + 1) * sizeof *b->line_on);
    if (p->nlets && plan_eval_lets(p, b->vals, b->lets, b->d)) return -1;
    run_steps(b, steps);
    if (b->failed) return -1;
    /* Back to rest: part of the shot. Lines go inactive at its end. */
    b->step = 0;
    double length = ramp_to(b, end, -1, end_loc);
    if (isnan(length)) return -1;
    b->t += length;
    for (size_t l = 0; l < p->rig.nlines; l++)
        if (b->line_on[l]) {
            emit(b, EV_LINE, (int)l, b->t, 0, 1, 0, 0);
            b->line_on[l] = false;
        }
    tl->duration = b->t;
    if (seal(b, tl)) return -1;
    limit_check_timeline(b, tl);
    return b->failed ? -1 : 0;
}

/* ---- the whole plan ------------------------------------------------------ */

static int init_builder(compile_builder *b, const plan *p, const scan *s, compiled *c,
                        diag_list *d) {
    memset(b, 0, sizeof *b);
    b->p = p;
    b->s = s;
    b->c = c;
    b->d = d;
    b->ncoils = p->rig.ncoils;
    b->sample = compile_find_sample_place(&p->rig);
    size_t nv = p->nvars + p->nlets + 1;
    b->vals = calloc(nv, sizeof *b->vals);
    b->lets = b->vals + p->nvars;
    b->cur = calloc(b->ncoils + 1, sizeof *b->cur);
    b->line_on = calloc(p->rig.nlines + 1, sizeof *b->line_on);
    b->place_coils = calloc(b->ncoils + 1, sizeof *b->place_coils);
    if (!b->vals || !b->cur || !b->line_on || !b->place_coils) return -1;
    for (size_t coil = 0; coil < b->ncoils; coil++) {
        int used = 0;
        for (size_t pl = 0; pl < p->rig.nplaces && !used; pl++)
            for (size_t i = 0; i < p->rig.places[pl].n; i++)
                used |= p->rig.places[pl].coil[i] == (int)coil;
        if (used) b->place_coils[b->nplace_coils++] = (int)coil;
    }
    return 0;
}

static void free_builder(compile_builder *b) {
    free(b->vals);
    free(b->cur);
    free(b->line_on);
    free(b->place_coils);
    free(b->ev);
    free(b->pu);
    free(b->aq);
    free(b->st);
    free(b->reports);
}

static int timeline_at(compile_builder *b, compile_timeline *tl, uint32_t point,
                       const double *vals, plan_loc end_loc) {
    const plan *p = b->p;
    b->point = point;
    b->failed = 0;
    memcpy(b->vals, vals, p->nvars * sizeof *vals);
    int rc = build(b, tl, &p->shot, b->c->rest_currents, b->c->rest_currents, end_loc);
    tl->values = arena_alloc(b->c->arena, (p->nvars + p->nlets + 1) * sizeof *tl->values);
    if (tl->values) memcpy(tl->values, b->vals, (p->nvars + p->nlets) * sizeof *tl->values);
    return rc;
}

static int compile_points(compile_builder *b, plan_loc end_loc) {
    const plan *p = b->p;
    const scan *s = b->s;
    compiled *c = b->c;
    size_t nref = 0;
    for (size_t k = 0; k < s->nshots; k++) nref += s->shots[k].kind == SHOT_REFERENCE;
    c->ntimelines = s->npoints + nref;
    c->timelines = arena_alloc(c->arena, (c->ntimelines + 1) * sizeof *c->timelines);
    c->shot_timeline = arena_alloc(c->arena, (s->nshots + 1) * sizeof *c->shot_timeline);
    c->shot_start = arena_alloc(c->arena, (s->nshots + 1) * sizeof *c->shot_start);
    if (!c->timelines || !c->shot_timeline || !c->shot_start) return -1;
    for (size_t k = 0; k < s->npoints; k++)
        timeline_at(b, &c->timelines[k], (uint32_t)k + 1, s->values + k * s->nvars, end_loc);
    double *vals = malloc((p->nvars + 1) * sizeof *vals);
    if (!vals) return -1;
    size_t r = 0;
    double t = c->setup.duration;
    for (size_t k = 0; k < s->nshots; k++) {
        const scan_shot *sh = &s->shots[k];
        uint32_t tl = sh->point - 1;
        if (sh->kind == SHOT_REFERENCE) {
            tl = (uint32_t)(s->npoints + r++);
            scan_shot_values(s, sh, vals);
            timeline_at(b, &c->timelines[tl], sh->point, vals, end_loc);
        }
        c->shot_timeline[k] = tl;
        c->shot_start[k] = t;
        t += c->timelines[tl].duration;
    }
    free(vals);
    c->duration = t + c->teardown.duration;
    return 0;
}

compiled *compile_plan(const plan *p, const scan *s, diag_list *d) {
    arena *a = arena_new();
    compiled *c = a ? arena_alloc(a, sizeof *c) : NULL;
    if (!c) {
        arena_free(a);
        return NULL;
    }
    c->arena = a;
    c->plan = p;
    c->scan = s;
    compile_builder b;
    int rc = init_builder(&b, p, s, c, d);
    c->sample_place = b.sample;
    c->rest_currents = arena_alloc(a, (b.ncoils + 1) * sizeof *c->rest_currents);
    if (rc || !c->rest_currents) rc = -1;
    plan_loc end_loc = p->shot.n ? p->shot.steps[p->shot.n - 1].loc : (plan_loc){p->file, 1, 1};
    double *zero = calloc(b.ncoils + 1, sizeof *zero);
    if (rc == 0 && zero && s->npoints) {
        memcpy(b.vals, s->values, p->nvars * sizeof *b.vals);
        if (p->nlets) plan_eval_lets(p, b.vals, b.lets, d);
        if (compile_solve_targets(&b, p->rest, p->nrest, p->nrest ? p->rest[0].loc : end_loc,
                                  c->rest_currents) == 0) {
            build(&b, &c->setup, &p->setup, zero, c->rest_currents, end_loc);
            b.failed = 0;
            memcpy(b.vals, s->values, p->nvars * sizeof *b.vals);
            build(&b, &c->teardown, &p->teardown, c->rest_currents, zero, end_loc);
            if (compile_points(&b, end_loc)) rc = -1;
            if (!b.any_failed) limit_check_run(&b);
        }
    }
    free(zero);
    compile_flush_reports(&b);
    if (rc || b.any_failed) {
        if (!d->errors) diag_add(d, DIAG_ERROR, (plan_loc){p->file, 0, 0},
                                 "out of memory compiling the plan");
        free_builder(&b);
        arena_free(a);
        return NULL;
    }
    free_builder(&b);
    return c;
}

void compile_free(compiled *c) {
    if (c) arena_free(c->arena);
}

const compile_timeline *compile_shot_timeline(const compiled *c, uint32_t shot) {
    return &c->timelines[c->shot_timeline[shot - 1]];
}

int compile_pulse_polarity(const compiled *c, uint32_t shot, const compile_pulse *pulse) {
    const scan_shot *sh = &c->scan->shots[shot - 1];
    return pulse->alternate && sh->average % 2 == 0 ? -1 : 1;
}

double compile_current_at(const compiled *c, const compile_timeline *t, int coil, double time) {
    double i = c->rest_currents[coil];
    if (t == &c->setup) i = 0;
    for (size_t k = 0; k < t->nevents; k++) {
        const compile_event *e = &t->events[k];
        if (e->channel != coil || e->start > time) continue;
        if (e->kind == EV_RAMP) {
            if (time >= e->start + e->length || e->length <= 0) i = e->to;
            else i = e->from + (e->to - e->from) * (time - e->start) / e->length;
        } else if (e->kind == EV_PULSE && time < e->start + e->length) {
            i += pulse_current_at(&t->pulses[e->index].shape_at_sample, e->to, time - e->start);
        }
    }
    return i;
}
