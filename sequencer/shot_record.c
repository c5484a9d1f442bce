/* shot_record: an attempt's acquisitions as their samples come in, the
 * interlock check, and the shot record (store.h) made from the compiled
 * timeline, the samples and the soft events' actual times.
 * Not for timing (schedule.c) nor for writing files (store.c). */
#include "schedule_internal.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

int sched_polarity(const sched_shot *sh, const compile_pulse *pu) {
    return sh->shot ? compile_pulse_polarity(sh->s->a->plan, sh->shot, pu) : 1;
}

bool sched_interlock_broken(sched_shot *sh) {
    const sched_run_args *a = sh->s->a;
    const plan_rig *rig = &a->plan->plan->rig;
    if (sh->fault) return true;
    for (size_t i = 0; i < rig->nlines; i++) {
        const rig_line *l = &rig->lines[i];
        if (l->direction != LINE_INPUT || !l->has_require) continue;
        bool high;
        if (a->ops->read_line(a->driver, (int)i, &high, sh->error, sizeof sh->error)) {
            sh->fault = 1;
            return true;
        }
        if (high != l->require_high) {
            snprintf(sh->error, sizeof sh->error, "interlock: line %s left its required "
                     "state (%s)", l->name, l->require_high ? "high" : "low");
            sh->fault = 1;
            return true;
        }
    }
    return false;
}

/* The polarity of the last pulse before time t in the timeline. */
static int polarity_before(const sched_shot *sh, double t) {
    int sign = 1;
    for (size_t k = 0; k < sh->tl->nevents; k++) {
        const compile_event *e = &sh->tl->events[k];
        if (e->kind == EV_PULSE && e->start <= t)
            sign = sched_polarity(sh, &sh->tl->pulses[e->index]);
    }
    return sign;
}

int sched_acq_start(sched_shot *sh, const compile_event *e) {
    const sched_run_args *a = sh->s->a;
    if (sh->acq_active) sched_acq_finish(sh);
    const compile_acquire *ca = &sh->tl->acquisitions[e->index];
    sched_acq *grown = realloc(sh->acqs, (sh->nacqs + 1) * sizeof *grown);
    if (!grown) return -1;
    sh->acqs = grown;
    sched_acq *q = &sh->acqs[sh->nacqs++];
    memset(q, 0, sizeof *q);
    q->ev = e;
    q->start = e->start;
    q->polarity = polarity_before(sh, e->start);
    size_t n = (size_t)llround(ca->length * ca->rate);
    q->req = (drv_acquisition){ca->ninputs, ca->inputs, ca->rate, sh->t0 + e->start, n,
                               sh->shot, sh->attempt};
    q->want = n * ca->ninputs;
    q->samples = malloc((q->want + 1) * sizeof *q->samples);
    if (!q->samples) return -1;
    sh->acq_done = false;
    int rc = a->ops->start_acquisition(a->driver, &q->req, &sh->fd, sh->error, sizeof sh->error);
    if (rc) return rc;
    sh->acq_active = true;
    return 0;
}

void sched_acq_read(sched_shot *sh) {
    const sched_run_args *a = sh->s->a;
    if (!sh->acq_active || sh->acq_done || !sh->nacqs) return;
    sched_acq *q = &sh->acqs[sh->nacqs - 1];
    for (;;) {
        size_t got = 0;
        bool done = false;
        int rc = a->ops->read_samples(a->driver, q->samples + q->n, q->want - q->n, &got, &done,
                                      sh->error, sizeof sh->error);
        if (rc) {
            if (rc < -1) sh->fault = 1;
            else sh->failed = 1;
            return;
        }
        q->n += got;
        if (done || q->n >= q->want) {
            sh->acq_done = q->n >= q->want;
            if (!sh->acq_done) {
                snprintf(sh->error, sizeof sh->error, "the acquisition ended after %zu of %zu "
                         "samples", q->n, q->want);
                sh->failed = 1;
            }
            return;
        }
        if (got == 0) return;
    }
}

void sched_acq_finish(sched_shot *sh) {
    if (!sh->acq_active) return;
    if (ev_is_active(&sh->io)) ev_io_stop(sh->s->loop, &sh->io);
    sh->s->a->ops->stop_acquisition(sh->s->a->driver);
    sh->acq_active = false;
}

/* ---- the record ------------------------------------------------------------ */

static const char *event_kind(const sched_soft *so) {
    if (!so->ev) return "end";
    return so->ev->kind == EV_LINE ? "line" : "acquire";
}

static int record_plan_values(store_record *r, const sched_shot *sh) {
    const compiled *c = sh->s->a->plan;
    const plan *p = c->plan;
    arena *a = r->arena;
    r->nparameters = p->nvars + p->nlets;
    r->parameter_names = arena_alloc(a, (r->nparameters + 1) * sizeof *r->parameter_names);
    r->parameters = arena_alloc(a, (r->nparameters + 1) * sizeof *r->parameters);
    r->parameter_units = arena_alloc(a, (r->nparameters + 1) * sizeof *r->parameter_units);
    r->ncoils = p->rig.ncoils;
    r->coil_names = arena_alloc(a, (r->ncoils + 1) * sizeof *r->coil_names);
    r->currents = arena_alloc(a, (r->ncoils + 1) * sizeof *r->currents);
    r->nplaces = p->rig.nplaces;
    r->place_names = arena_alloc(a, (r->nplaces + 1) * sizeof *r->place_names);
    r->fields = arena_alloc(a, (r->nplaces + 1) * sizeof *r->fields);
    if (!r->parameter_names || !r->parameters || !r->parameter_units || !r->coil_names ||
        !r->currents || !r->place_names || !r->fields)
        return -1;
    for (size_t i = 0; i < r->nparameters; i++) {
        r->parameter_names[i] = i < p->nvars ? p->vars[i].name : p->lets[i - p->nvars].name;
        r->parameters[i] = sh->tl->values[i];
        char unit[64];
        units_dim_symbol(i < p->nvars ? p->vars[i].dim : p->lets[i - p->nvars].value.dim, unit,
                         sizeof unit);
        if (!(r->parameter_units[i] = arena_strdup(a, unit[0] ? unit : "1"))) return -1;
    }
    for (size_t i = 0; i < r->ncoils; i++) {
        r->coil_names[i] = p->rig.coils[i].name;
        r->currents[i] = sh->tl->currents[i];
    }
    for (size_t i = 0; i < r->nplaces; i++) {
        r->place_names[i] = p->rig.places[i].name;
        r->fields[i] = sh->tl->fields[i];
    }
    return 0;
}

static int record_pulses(store_record *r, const sched_shot *sh) {
    const plan *p = sh->s->a->plan->plan;
    const compile_timeline *t = sh->tl;
    r->npulses = t->npulses;
    r->pulses = arena_alloc(r->arena, (t->npulses + 1) * sizeof *r->pulses);
    if (!r->pulses) return -1;
    for (size_t k = 0; k < t->npulses; k++) {
        const compile_pulse *pu = &t->pulses[k];
        store_pulse *sp = &r->pulses[k];
        sp->coil = p->rig.coils[pu->coil].name;
        sp->shape = pu->shape == SHAPE_RESONANT ? "resonant" : "dc";
        sp->duration = pu->duration;
        sp->amplitude = pu->amplitude;
        sp->polarity = sched_polarity(sh, pu);
        for (size_t i = 0; i < t->nevents; i++) {
            const compile_event *e = &t->events[i];
            if (e->kind == EV_PULSE && e->index == k) {
                sp->start = e->start;
                sp->end = e->start + e->length;
            }
        }
        sp->nangles = p->sample.nnuclei;
        sp->nuclei = arena_alloc(r->arena, (sp->nangles + 1) * sizeof *sp->nuclei);
        sp->angles = arena_alloc(r->arena, (sp->nangles + 1) * sizeof *sp->angles);
        if (!sp->nuclei || !sp->angles) return -1;
        for (size_t i = 0; i < sp->nangles; i++) {
            sp->nuclei[i] = p->sample.nuclei[i]->token;
            sp->angles[i] = pu->angles[i];
        }
    }
    return 0;
}

static int record_events(store_record *r, const sched_shot *sh) {
    r->events = arena_alloc(r->arena, (sh->nsoft + 1) * sizeof *r->events);
    if (!r->events) return -1;
    for (size_t i = 0; i < sh->nsoft; i++) {
        const sched_soft *so = &sh->soft[i];
        if (isnan(so->actual)) continue;
        int step = so->ev ? so->ev->step : 0;
        const char *label = step >= 1 && (size_t)step <= sh->tl->nsteps
                                ? sh->tl->steps[step - 1].label : "";
        r->events[r->nevents++] = (store_event){step, label, event_kind(so), so->at, so->actual};
    }
    return 0;
}

static int record_acquisitions(store_record *r, const sched_shot *sh) {
    const sched_run_args *a = sh->s->a;
    const plan_rig *rig = &a->plan->plan->rig;
    r->nacquisitions = sh->nacqs;
    r->acquisitions = arena_alloc(r->arena, (sh->nacqs + 1) * sizeof *r->acquisitions);
    if (!r->acquisitions) return -1;
    for (size_t k = 0; k < sh->nacqs; k++) {
        const sched_acq *q = &sh->acqs[k];
        store_acquisition *sa = &r->acquisitions[k];
        size_t ni = q->req.ninputs, per = ni ? q->n / ni : 0;
        sa->nchannels = ni;
        sa->channels = arena_alloc(r->arena, (ni + 1) * sizeof *sa->channels);
        if (!sa->channels) return -1;
        for (size_t i = 0; i < ni; i++) {
            store_channel *ch = &sa->channels[i];
            int input = q->req.inputs[i];
            ch->input = rig->inputs[input].name;
            ch->units = "T";
            ch->sample_rate = q->req.rate;
            ch->t0 = q->start;
            ch->receiver_sign = q->polarity;
            a->ops->input_scale(a->driver, input, &ch->volts_per_count, &ch->adc_bits);
            ch->n = per;
            ch->samples = arena_alloc(r->arena, (per + 1) * sizeof *ch->samples);
            if (!ch->samples) return -1;
            for (size_t j = 0; j < per; j++) ch->samples[j] = q->samples[j * ni + i];
        }
    }
    return 0;
}

store_record *sched_make_record(sched_shot *sh) {
    const sched_run_args *a = sh->s->a;
    const scan_shot *ss = &a->plan->scan->shots[sh->shot - 1];
    store_record *r = store_record_new();
    if (!r) return NULL;
    r->run = a->run_id;
    r->kind = scan_kind_name((scan_shot_kind)ss->kind);
    r->status = sh->failed || sh->fault || *a->abort ? "failed" : "ok";
    r->started_utc = arena_strdup(r->arena, sh->started_utc);
    r->driver = a->driver_name;
    r->precess_version = PRECESS_VERSION;
    r->plan_sha256 = a->plan_sha256;
    r->shot = sh->shot;
    r->attempt = sh->attempt;
    r->point = ss->point;
    r->average = ss->average;
    if (strcmp(r->status, "failed") == 0)
        r->error = arena_strdup(r->arena, sh->error[0] ? sh->error : "interrupted");
    if (record_plan_values(r, sh) || record_pulses(r, sh) || record_events(r, sh) ||
        record_acquisitions(r, sh)) {
        store_record_free(r);
        return NULL;
    }
    return r;
}
