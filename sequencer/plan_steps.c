/* plan_steps: the steps of a shot (polarize, field, pulse, acquire, line,
 * wait, repeat), of setup and teardown, and the field targets of `field`
 * steps and `rest`, read and checked against the rig.
 * Not for their timing or physics (compile.h). */
#include "plan_internal.h"

#include <stdio.h>
#include <string.h>

#define MAX_STEP_DEPTH 16

static const char *const step_words[] = {"polarize", "field", "pulse", "acquire", "line",
                                         "wait", "repeat", NULL};

static int read_opt(plan_reader *r, const plan_node *m, const char *key, units_dim dim,
                    plan_value *out) {
    const plan_node *v = plan_node_get(m, key);
    if (!v) {
        memset(out, 0, sizeof *out);
        return 0;
    }
    return plan_read_value(r, v, key, dim, out);
}

static int read_label(plan_reader *r, const plan_node *m, plan_step *s) {
    const plan_node *v = plan_node_get(m, "label");
    s->label = "";
    if (!v) return 0;
    s->label = plan_read_text(r, v, "label");
    if (s->label) return 0;
    s->label = "";
    return -1;
}

/* ---- targets ----------------------------------------------------------- */

static const char *const larmor_keys[] = {"larmor", "nucleus", NULL};
static const char *const larmor_required[] = {"larmor", NULL};
static const char *const tune_keys[] = {"tune", NULL};

int plan_read_target(plan_reader *r, plan *p, const plan_node *key,
                     const plan_node *value, plan_target *out) {
    memset(out, 0, sizeof *out);
    out->loc = key->loc;
    if (plan_read_ref(r, key, "place", &out->place)) return -1;
    const rig_place *pl = &p->rig.places[out->place];
    if (value->kind == PN_SCALAR && strcmp(value->text, "tune") == 0) {
        out->kind = TARGET_TUNE;
    } else if (value->kind == PN_SCALAR) {
        out->kind = TARGET_FIELD;
        return plan_read_value(r, value, key->text, UNITS_FIELD, &out->value);
    } else if (value->kind == PN_MAP && plan_node_get(value, "tune")) {
        out->kind = TARGET_TUNE_FREQ;
        if (plan_keys(r, value, key->text, tune_keys, tune_keys)) return -1;
        if (plan_read_value(r, plan_node_get(value, "tune"), "tune", UNITS_FREQUENCY,
                            &out->value))
            return -1;
    } else if (value->kind == PN_MAP) {
        out->kind = TARGET_LARMOR;
        char where[128];
        snprintf(where, sizeof where, "the target of place %s", key->text);
        if (plan_keys(r, value, where, larmor_keys, larmor_required)) return -1;
        const plan_node *nu = plan_node_get(value, "nucleus");
        if (nu && !(out->nucleus = plan_read_nucleus(r, nu, "nucleus"))) return -1;
        return plan_read_value(r, plan_node_get(value, "larmor"), "larmor", UNITS_FREQUENCY,
                               &out->value);
    } else {
        diag_add(r->d, DIAG_ERROR, value->loc, "place %s takes a field, {larmor: F}, tune or "
                 "{tune: F}", key->text);
        return -1;
    }
    if (!pl->is_sensor) {
        diag_add(r->d, DIAG_ERROR, value->loc, "'tune' sets the detector's own field, so it "
                 "applies only to a sensor place (a place named like an input); %s is not one",
                 key->text);
        return -1;
    }
    if (!p->rig.detector.present) {
        diag_add(r->d, DIAG_ERROR, value->loc, "'tune' needs the rig's 'detector' "
                 "(its gyromagnetic ratio)");
        return -1;
    }
    return 0;
}

/* ---- the steps ----------------------------------------------------------- */

static const char *const polarize_keys[] = {"coil", "magnet", "field", "current", "for",
                                            "off", "label", NULL};
static const char *const for_required[] = {"for", NULL};

static int read_polarize(plan_reader *r, const plan_node *m, plan_step *s) {
    if (plan_keys(r, m, "polarize", polarize_keys, for_required)) return -1;
    s->u.polarize.coil = s->u.polarize.magnet = -1;
    const plan_node *coil = plan_node_get(m, "coil"), *mag = plan_node_get(m, "magnet");
    const plan_node *field = plan_node_get(m, "field"), *cur = plan_node_get(m, "current");
    const plan_node *off = plan_node_get(m, "off");
    int bad = read_opt(r, m, "for", UNITS_TIME, &s->u.polarize.hold);
    if ((coil != NULL) == (mag != NULL)) {
        diag_add(r->d, DIAG_ERROR, m->loc, "polarize needs 'coil' (with field or current) or "
                 "'magnet', exactly one of them");
        return -1;
    }
    if (mag) {
        bad |= plan_read_ref(r, mag, "magnet", &s->u.polarize.magnet);
        const plan_node *extra = field ? field : cur ? cur : off;
        if (extra) {
            diag_add(r->d, DIAG_ERROR, extra->loc, "a fixed magnet takes only 'for'; "
                     "field, current and off apply to a polarizing coil");
            bad = 1;
        }
        return bad ? -1 : 0;
    }
    bad |= plan_read_ref(r, coil, "coil", &s->u.polarize.coil);
    if ((field != NULL) == (cur != NULL)) {
        diag_add(r->d, DIAG_ERROR, m->loc, "polarize with a coil needs 'field' or 'current', "
                 "exactly one of them");
        return -1;
    }
    bad |= read_opt(r, m, "field", UNITS_FIELD, &s->u.polarize.field);
    bad |= read_opt(r, m, "current", UNITS_CURRENT, &s->u.polarize.current);
    if (off && !(off->kind == PN_SCALAR && strcmp(off->text, "fastest") == 0))
        bad |= plan_read_value(r, off, "off", UNITS_TIME, &s->u.polarize.off_ramp);
    return bad ? -1 : 0;
}

static const char *const field_words[] = {"settle", "ramp", "expect", "label", NULL};
static const char *const expect_words[] = {"adiabatic", "sudden", NULL};

static int read_field(plan_reader *r, plan *p, const plan_node *m, plan_step *s) {
    if (m->kind != PN_MAP) {
        diag_add(r->d, DIAG_ERROR, m->loc, "field takes a mapping of places to fields, e.g. "
                 "{sample: 10 uT, settle: 5 ms}");
        return -1;
    }
    int bad = 0;
    s->u.field.targets = arena_alloc(r->a, (m->n + 1) * sizeof *s->u.field.targets);
    if (!s->u.field.targets) return -1;
    for (size_t i = 0; i < m->n; i++) {
        const plan_node *k = m->keys[i];
        int w = 0;
        while (field_words[w] && strcmp(field_words[w], k->text) != 0) w++;
        if (field_words[w]) continue;
        if (rig_find_place(&p->rig, k->text, k->len) < 0) {
            size_t np;
            const char **places = rig_names(r->a, &p->rig, "place", &np);
            const char *cand[520];
            size_t nc = 0;
            for (size_t j = 0; j < np && nc < 512; j++) cand[nc++] = places[j];
            for (int j = 0; field_words[j]; j++) cand[nc++] = field_words[j];
            const char *near = diag_nearest(k->text, cand, nc);
            diag_add(r->d, DIAG_ERROR, k->loc, "'%s' is neither a place of rig %s nor a key "
                     "of field (settle, ramp, expect, label)%s%s%s", k->text, p->rig.name,
                     near ? "; did you mean '" : "", near ? near : "", near ? "'?" : "");
            bad = 1;
            continue;
        }
        bad |= plan_read_target(r, p, k, m->items[i], &s->u.field.targets[s->u.field.n++]);
    }
    if (s->u.field.n == 0 && !bad) {
        diag_add(r->d, DIAG_ERROR, m->loc, "field names no place; give at least one, e.g. "
                 "{sample: 10 uT}");
        bad = 1;
    }
    bad |= read_opt(r, m, "settle", UNITS_TIME, &s->u.field.settle);
    bad |= read_opt(r, m, "ramp", UNITS_TIME, &s->u.field.ramp);
    const plan_node *e = plan_node_get(m, "expect");
    int ex = 0;
    if (e && plan_read_choice(r, e, "expect", expect_words, &ex) == 0)
        s->u.field.expect = ex ? EXPECT_SUDDEN : EXPECT_ADIABATIC;
    else if (e) bad = 1;
    return bad ? -1 : 0;
}

static const char *const pulse_keys[] = {"coil", "angle", "duration", "amplitude", "shape",
                                         "frequency", "phase", "nucleus", "alternate",
                                         "label", NULL};
static const char *const coil_required[] = {"coil", NULL};
static const char *const shape_words[] = {"dc", "resonant", NULL};

static int read_pulse(plan_reader *r, const plan_node *m, plan_step *s) {
    if (plan_keys(r, m, "pulse", pulse_keys, coil_required)) return -1;
    int bad = plan_read_ref(r, plan_node_get(m, "coil"), "coil", &s->u.pulse.coil);
    const plan_node *angle = plan_node_get(m, "angle"), *dur = plan_node_get(m, "duration");
    if ((angle != NULL) == (dur != NULL)) {
        diag_add(r->d, DIAG_ERROR, m->loc, "pulse needs 'angle' or 'duration', exactly one "
                 "of them (the other is computed)");
        bad = 1;
    }
    bad |= read_opt(r, m, "angle", UNITS_ANGLE_DIM, &s->u.pulse.angle);
    bad |= read_opt(r, m, "duration", UNITS_TIME, &s->u.pulse.duration);
    bad |= read_opt(r, m, "amplitude", UNITS_FIELD, &s->u.pulse.amplitude);
    const plan_node *v;
    int shape = 0;
    if ((v = plan_node_get(m, "shape"))) bad |= plan_read_choice(r, v, "shape", shape_words,
                                                                 &shape);
    s->u.pulse.shape = shape ? SHAPE_RESONANT : SHAPE_DC;
    const plan_node *freq = plan_node_get(m, "frequency"), *phase = plan_node_get(m, "phase");
    if (shape && !freq) {
        diag_add(r->d, DIAG_ERROR, m->loc, "a resonant pulse needs 'frequency'");
        bad = 1;
    } else if (!shape && (freq || phase)) {
        diag_add(r->d, DIAG_ERROR, (freq ? freq : phase)->loc,
                 "'%s' applies to resonant pulses (shape: resonant)", freq ? "frequency" : "phase");
        bad = 1;
    }
    bad |= read_opt(r, m, "frequency", UNITS_FREQUENCY, &s->u.pulse.frequency);
    bad |= read_opt(r, m, "phase", UNITS_ANGLE_DIM, &s->u.pulse.phase);
    if ((v = plan_node_get(m, "nucleus")) && !(s->u.pulse.nucleus =
                                                   plan_read_nucleus(r, v, "nucleus")))
        bad = 1;
    if ((v = plan_node_get(m, "alternate"))) bad |= plan_read_bool(r, v, "alternate",
                                                                   &s->u.pulse.alternate);
    return bad ? -1 : 0;
}

static const char *const acquire_keys[] = {"for", "rate", "inputs", "label", NULL};
static const char *const acquire_required[] = {"for", "rate", NULL};

static int read_acquire(plan_reader *r, plan *p, const plan_node *m, plan_step *s) {
    if (plan_keys(r, m, "acquire", acquire_keys, acquire_required)) return -1;
    int bad = read_opt(r, m, "for", UNITS_TIME, &s->u.acquire.length);
    bad |= read_opt(r, m, "rate", UNITS_FREQUENCY, &s->u.acquire.rate);
    const plan_node *in = plan_node_get(m, "inputs");
    size_t n = in ? (in->kind == PN_SEQ ? in->n : 1) : p->rig.ninputs;
    s->u.acquire.inputs = arena_alloc(r->a, (n + 1) * sizeof(int));
    if (!s->u.acquire.inputs) return -1;
    s->u.acquire.ninputs = n;
    if (!in) {
        for (size_t i = 0; i < n; i++) s->u.acquire.inputs[i] = (int)i;
        if (n == 0) {
            diag_add(r->d, DIAG_ERROR, m->loc, "acquire has nothing to record: rig %s has no "
                     "inputs", p->rig.name);
            bad = 1;
        }
        return bad ? -1 : 0;
    }
    for (size_t i = 0; i < n; i++)
        bad |= plan_read_ref(r, in->kind == PN_SEQ ? in->items[i] : in, "input",
                             &s->u.acquire.inputs[i]);
    if (n == 0) {
        diag_add(r->d, DIAG_ERROR, in->loc, "'inputs' lists no input");
        bad = 1;
    }
    return bad ? -1 : 0;
}

static const char *const line_keys[] = {"name", "state", "label", NULL};
static const char *const line_required[] = {"name", "state", NULL};
static const char *const state_words[] = {"off", "on", NULL};

static int read_line_step(plan_reader *r, plan *p, const plan_node *m, plan_step *s) {
    if (plan_keys(r, m, "line", line_keys, line_required)) return -1;
    int bad = plan_read_ref(r, plan_node_get(m, "name"), "line", &s->u.line.line);
    int on = 0;
    bad |= plan_read_choice(r, plan_node_get(m, "state"), "state", state_words, &on);
    s->u.line.on = on == 1;
    if (!bad && p->rig.lines[s->u.line.line].direction == LINE_INPUT) {
        diag_add(r->d, DIAG_ERROR, plan_node_get(m, "name")->loc,
                 "line %s is an input; a step can set only output lines",
                 p->rig.lines[s->u.line.line].name);
        bad = 1;
    }
    return bad ? -1 : 0;
}

static const char *const wait_keys[] = {"for", "label", NULL};
static const char *const repeat_keys[] = {"times", "steps", "label", NULL};
static const char *const repeat_required[] = {"times", "steps", NULL};

static int read_step(plan_reader *r, plan *p, const plan_node *item, plan_step *s,
                     int depth) {
    s->loc = item->loc;
    s->label = "";
    if (item->kind != PN_MAP || item->n != 1) {
        diag_add(r->d, DIAG_ERROR, item->loc, "a step is a mapping with one key (polarize, "
                 "field, pulse, acquire, line, wait or repeat), e.g. - wait: {for: 1 s}");
        return -1;
    }
    const plan_node *k = item->keys[0], *m = item->items[0];
    s->loc = k->loc;
    int kind;
    if (plan_read_choice(r, k, "step", step_words, &kind)) return -1;
    s->kind = (plan_step_kind)kind;
    if (m->kind != PN_MAP) {
        diag_add(r->d, DIAG_ERROR, m->loc, "%s takes a mapping of keys, e.g. %s", k->text,
                 kind == STEP_WAIT ? "{for: 2 s}" : "{...}");
        return -1;
    }
    int bad = read_label(r, m, s);
    switch (s->kind) {
    case STEP_POLARIZE: bad |= read_polarize(r, m, s); break;
    case STEP_FIELD: bad |= read_field(r, p, m, s); break;
    case STEP_PULSE: bad |= read_pulse(r, m, s); break;
    case STEP_ACQUIRE: bad |= read_acquire(r, p, m, s); break;
    case STEP_LINE: bad |= read_line_step(r, p, m, s); break;
    case STEP_WAIT:
        if (plan_keys(r, m, "wait", wait_keys, for_required)) return -1;
        bad |= read_opt(r, m, "for", UNITS_TIME, &s->u.wait.length);
        break;
    case STEP_REPEAT:
        if (plan_keys(r, m, "repeat", repeat_keys, repeat_required)) return -1;
        bad |= plan_read_count(r, plan_node_get(m, "times"), "times", 1, &s->u.repeat.times);
        bad |= plan_read_steps(r, p, plan_node_get(m, "steps"), "repeat", &s->u.repeat.body,
                               depth + 1);
        break;
    }
    return bad ? -1 : 0;
}

int plan_read_steps(plan_reader *r, plan *p, const plan_node *list, const char *where,
                    plan_steps *out, int depth) {
    out->n = 0;
    if (list->kind != PN_SEQ) {
        diag_add(r->d, DIAG_ERROR, list->loc, "'%s' is a list of steps, each written '- "
                 "step: {...}'", where);
        return -1;
    }
    if (depth >= MAX_STEP_DEPTH) {
        diag_add(r->d, DIAG_ERROR, list->loc, "repeat is nested deeper than %d levels",
                 MAX_STEP_DEPTH);
        return -1;
    }
    out->steps = arena_alloc(r->a, (list->n + 1) * sizeof *out->steps);
    if (!out->steps) return -1;
    int bad = 0;
    for (size_t i = 0; i < list->n; i++)
        bad |= read_step(r, p, list->items[i], &out->steps[out->n++], depth);
    return bad ? -1 : 0;
}
