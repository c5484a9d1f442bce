/* rig_read: a rig file (one bench's coils, magnets, places, lines, inputs
 * and detector) read into a plan_rig, every key and dimension checked.
 * Not for what the rig does in a shot (compile.h) nor for opening hardware
 * (drivers/). */
#include "plan.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* mu0, CODATA 2018: 1.256 637 062 12e-6 N/A^2. */
#define MU0 1.25663706212e-6

double rig_solenoid_field_per_current(int turns, double radius, double length) {
    return MU0 * turns / sqrt(length * length + 4.0 * radius * radius);
}

double rig_helmholtz_field_per_current(int turns, double radius) {
    return pow(0.8, 1.5) * MU0 * turns / radius;
}

#define FIND(fn, field, count)                                               \
    int fn(const plan_rig *r, const char *name, size_t len) {                \
        for (size_t i = 0; i < r->count; i++)                                \
            if (strlen(r->field[i].name) == len &&                           \
                memcmp(r->field[i].name, name, len) == 0)                    \
                return (int)i;                                               \
        return -1;                                                           \
    }
FIND(rig_find_coil, coils, ncoils)
FIND(rig_find_magnet, magnets, nmagnets)
FIND(rig_find_place, places, nplaces)
FIND(rig_find_line, lines, nlines)
FIND(rig_find_input, inputs, ninputs)

const char **rig_names(arena *a, const plan_rig *rig, const char *kind, size_t *n) {
    *n = 0;
    if (!rig) return NULL;
    size_t count = 0;
    const char **names = NULL;
#define COLLECT(word, arr, cnt)                                              \
    if (strcmp(kind, word) == 0) {                                           \
        count = rig->cnt;                                                    \
        names = arena_alloc(a, (count + 1) * sizeof *names);                 \
        for (size_t i = 0; names && i < count; i++) names[i] = rig->arr[i].name; \
    }
    COLLECT("coil", coils, ncoils)
    COLLECT("magnet", magnets, nmagnets)
    COLLECT("place", places, nplaces)
    COLLECT("line", lines, nlines)
    COLLECT("input", inputs, ninputs)
#undef COLLECT
    if (names) *n = count;
    return names;
}

static const char *const axis_words[] = {"x", "y", "z", NULL};

static int read_axis(plan_reader *r, const plan_node *n, int *out) {
    return plan_read_choice(r, n, "axis", axis_words, out);
}

/* Reads an optional constant: 0 when absent or read, -1 on error. */
static int opt_const(plan_reader *r, const plan_node *m, const char *key, units_dim dim,
                     double *out, bool *given) {
    const plan_node *v = plan_node_get(m, key);
    if (given) *given = v != NULL;
    return v ? plan_read_const(r, v, key, dim, out) : 0;
}

static int opt_count(plan_reader *r, const plan_node *m, const char *key, int min, int *out) {
    const plan_node *v = plan_node_get(m, key);
    return v ? plan_read_count(r, v, key, min, out) : 0;
}

static int positive(plan_reader *r, const plan_node *m, const char *key, double v) {
    if (v > 0) return 0;
    diag_add(r->d, DIAG_ERROR, plan_node_get(m, key)->loc, "'%s' must be greater than zero",
             key);
    return -1;
}

static int coil_geometry(plan_reader *r, const plan_node *m, rig_coil *c) {
    int bad = 0;
    bool has_turns = plan_node_get(m, "turns") != NULL;
    bool has_geom = has_turns || plan_node_get(m, "radius") || plan_node_get(m, "length") ||
                    plan_node_get(m, "helmholtz");
    if (!has_geom) return 0;
    if (c->has_field_per_current) {
        diag_add(r->d, DIAG_ERROR, plan_node_get(m, "field_per_current")->loc,
                 "coil %s: give field_per_current or its geometry (turns, radius, length "
                 "or helmholtz), not both", c->name);
        return -1;
    }
    const plan_node *h = plan_node_get(m, "helmholtz");
    if (h && plan_read_bool(r, h, "helmholtz", &c->helmholtz)) bad = 1;
    if (!has_turns || !plan_node_get(m, "radius") ||
        (!c->helmholtz && !plan_node_get(m, "length"))) {
        diag_add(r->d, DIAG_ERROR, m->loc,
                 "coil %s: a coil given by geometry needs 'turns', 'radius' and 'length' "
                 "(or 'helmholtz: true')", c->name);
        return -1;
    }
    bad |= opt_count(r, m, "turns", 1, &c->turns) != 0;
    bad |= opt_const(r, m, "radius", UNITS_LENGTH, &c->radius, NULL) != 0;
    bad |= opt_const(r, m, "length", UNITS_LENGTH, &c->length, NULL) != 0;
    if (bad) return -1;
    if (positive(r, m, "radius", c->radius)) return -1;
    if (c->helmholtz && plan_node_get(m, "length")) {
        diag_add(r->d, DIAG_ERROR, plan_node_get(m, "length")->loc,
                 "coil %s: a Helmholtz pair is given by turns and radius; 'length' does not "
                 "apply", c->name);
        return -1;
    }
    if (c->length < 0) {
        diag_add(r->d, DIAG_ERROR, plan_node_get(m, "length")->loc,
                 "coil %s: 'length' cannot be negative", c->name);
        return -1;
    }
    c->from_geometry = true;
    c->has_field_per_current = true;
    c->field_per_current = c->helmholtz
                               ? rig_helmholtz_field_per_current(c->turns, c->radius)
                               : rig_solenoid_field_per_current(c->turns, c->radius, c->length);
    char b[64];
    diag_add(r->d, DIAG_NOTE, m->loc, "coil %s: %s from its geometry (%s, %d turns): %s",
             c->name, "field per current at the centre",
             c->helmholtz ? "Helmholtz pair" : "finite solenoid", c->turns,
             units_format(c->field_per_current, UNITS_FIELD_PER_CURRENT, b, sizeof b));
    return 0;
}

static const char *const coil_keys[] = {
    "output", "amps_per_volt", "max_current", "max_slew", "resistance", "inductance",
    "compliance", "max_power", "thermal_time", "field_per_current", "turns", "radius",
    "length", "helmholtz", "axis", NULL};
static const char *const coil_required[] = {
    "output", "amps_per_volt", "max_current", "max_slew", "resistance", "inductance",
    "compliance", NULL};

static int read_coil(plan_reader *r, const plan_node *m, rig_coil *c) {
    char where[128];
    snprintf(where, sizeof where, "coil %s", c->name);
    if (plan_keys(r, m, where, coil_keys, coil_required)) return -1;
    int bad = 0;
    c->axis = AXIS_Z;
    bad |= opt_count(r, m, "output", 0, &c->output);
    struct { const char *key; units_dim dim; double *out; int must_be_positive; } q[] = {
        {"amps_per_volt", UNITS_AMPS_PER_VOLT, &c->amps_per_volt, 1},
        {"max_current", UNITS_CURRENT, &c->max_current, 1},
        {"max_slew", UNITS_SLEW, &c->max_slew, 1},
        {"resistance", UNITS_RESISTANCE, &c->resistance, 0},
        {"inductance", UNITS_INDUCTANCE, &c->inductance, 0},
        {"compliance", UNITS_VOLTAGE, &c->compliance, 1},
        {"max_power", UNITS_POWER, &c->max_power, 1},
        {"thermal_time", UNITS_TIME, &c->thermal_time, 1},
    };
    for (size_t i = 0; i < sizeof q / sizeof q[0]; i++) {
        bool given;
        if (opt_const(r, m, q[i].key, q[i].dim, q[i].out, &given)) {
            bad = 1;
        } else if (given && q[i].must_be_positive) {
            bad |= positive(r, m, q[i].key, *q[i].out) != 0;
        } else if (given && *q[i].out < 0) {
            diag_add(r->d, DIAG_ERROR, plan_node_get(m, q[i].key)->loc,
                     "'%s' cannot be negative", q[i].key);
            bad = 1;
        }
    }
    bad |= opt_const(r, m, "field_per_current", UNITS_FIELD_PER_CURRENT,
                     &c->field_per_current, &c->has_field_per_current);
    const plan_node *ax = plan_node_get(m, "axis");
    if (ax) bad |= read_axis(r, ax, &c->axis);
    if (!bad) bad |= coil_geometry(r, m, c);
    return bad ? -1 : 0;
}

/* Places: each a mapping of coil name to field per ampere. */
static int read_place(plan_reader *r, const plan_node *m, rig_place *pl, plan_rig *rig) {
    char where[128];
    snprintf(where, sizeof where, "place %s", pl->name);
    if (m->kind != PN_MAP) {
        diag_add(r->d, DIAG_ERROR, m->loc,
                 "%s must map coils to their field per ampere there, e.g. {main: 120 uT/A}",
                 where);
        return -1;
    }
    pl->n = m->n;
    pl->coil = arena_alloc(r->a, (m->n + 1) * sizeof *pl->coil);
    pl->per_current = arena_alloc(r->a, (m->n + 1) * sizeof *pl->per_current);
    pl->entry_loc = arena_alloc(r->a, (m->n + 1) * sizeof *pl->entry_loc);
    if (!pl->coil || !pl->per_current || !pl->entry_loc) return -1;
    int bad = 0;
    for (size_t i = 0; i < m->n; i++) {
        pl->entry_loc[i] = m->keys[i]->loc;
        if (plan_read_ref(r, m->keys[i], "coil", &pl->coil[i])) {
            bad = 1;
            continue;
        }
        bad |= plan_read_const(r, m->items[i], m->keys[i]->text, UNITS_FIELD_PER_CURRENT,
                               &pl->per_current[i]) != 0;
    }
    (void)rig;
    return bad ? -1 : 0;
}

static int read_places(plan_reader *r, const plan_node *m, const char *key,
                       rig_place **out, size_t *count, plan_rig *rig) {
    if (m->kind != PN_MAP) {
        diag_add(r->d, DIAG_ERROR, m->loc, "'%s' must be a mapping of place names", key);
        return -1;
    }
    *count = m->n;
    *out = arena_alloc(r->a, (m->n + 1) * sizeof **out);
    if (!*out) return -1;
    int bad = 0;
    for (size_t i = 0; i < m->n; i++) {
        rig_place *pl = &(*out)[i];
        pl->name = m->keys[i]->text;
        pl->loc = m->keys[i]->loc;
        bad |= read_place(r, m->items[i], pl, rig) != 0;
    }
    return bad ? -1 : 0;
}

/* A residual: a field along z, or [x, y, z]. */
static int read_residual(plan_reader *r, const plan_node *m, plan_rig *rig) {
    if (m->kind != PN_MAP) {
        diag_add(r->d, DIAG_ERROR, m->loc, "'residual' must map places to fields");
        return -1;
    }
    int bad = 0;
    for (size_t i = 0; i < m->n; i++) {
        int p;
        if (plan_read_ref(r, m->keys[i], "place", &p)) {
            bad = 1;
            continue;
        }
        double *res = rig->places[p].residual;
        const plan_node *v = m->items[i];
        if (v->kind == PN_SEQ) {
            if (v->n != 3) {
                diag_add(r->d, DIAG_ERROR, v->loc,
                         "a residual vector has three fields [x, y, z], got %zu", v->n);
                bad = 1;
                continue;
            }
            for (int k = 0; k < 3; k++)
                bad |= plan_read_const(r, v->items[k], "residual", UNITS_FIELD, &res[k]) != 0;
        } else {
            bad |= plan_read_const(r, v, "residual", UNITS_FIELD, &res[2]) != 0;
        }
    }
    return bad ? -1 : 0;
}

static const char *const line_keys[] = {"channel", "direction", "active", "require", NULL};
static const char *const line_required[] = {"channel", NULL};
static const char *const direction_words[] = {"output", "input", NULL};
static const char *const level_words[] = {"high", "low", NULL};

static int read_line(plan_reader *r, const plan_node *m, rig_line *l) {
    char where[128];
    snprintf(where, sizeof where, "line %s", l->name);
    if (plan_keys(r, m, where, line_keys, line_required)) return -1;
    int bad = opt_count(r, m, "channel", 0, &l->channel) != 0;
    int dir = 0, level = 0;
    const plan_node *v;
    if ((v = plan_node_get(m, "direction"))) bad |= plan_read_choice(r, v, "direction",
                                                                     direction_words, &dir);
    l->direction = dir ? LINE_INPUT : LINE_OUTPUT;
    l->active_high = true;
    if ((v = plan_node_get(m, "active"))) {
        bad |= plan_read_choice(r, v, "active", level_words, &level);
        l->active_high = level == 0;
    }
    if ((v = plan_node_get(m, "require"))) {
        if (l->direction != LINE_INPUT) {
            diag_add(r->d, DIAG_ERROR, v->loc,
                     "line %s: 'require' applies to input lines (direction: input)", l->name);
            return -1;
        }
        bad |= plan_read_choice(r, v, "require", level_words, &level);
        l->require_high = level == 0;
        l->has_require = true;
    }
    return bad ? -1 : 0;
}

static const char *const input_keys[] = {"channel", "range", "field_per_volt", "bits", NULL};
static const char *const input_required[] = {"channel", "range", "field_per_volt", NULL};
static const char *const span_keys[] = {"from", "to", NULL};

static int read_input(plan_reader *r, const plan_node *m, rig_input *in) {
    char where[128];
    snprintf(where, sizeof where, "input %s", in->name);
    if (plan_keys(r, m, where, input_keys, input_required)) return -1;
    int bad = opt_count(r, m, "channel", 0, &in->channel) != 0;
    in->bits = 16;
    bad |= opt_count(r, m, "bits", 1, &in->bits) != 0;
    bad |= opt_const(r, m, "field_per_volt", UNITS_FIELD_PER_VOLT, &in->field_per_volt,
                     NULL) != 0;
    const plan_node *rg = plan_node_get(m, "range");
    if (rg->kind == PN_MAP) {
        if (plan_keys(r, rg, "range", span_keys, span_keys)) return -1;
        bad |= opt_const(r, rg, "from", UNITS_VOLTAGE, &in->range_lo, NULL) != 0;
        bad |= opt_const(r, rg, "to", UNITS_VOLTAGE, &in->range_hi, NULL) != 0;
    } else {
        double span;
        if (plan_read_const(r, rg, "range", UNITS_VOLTAGE, &span)) return -1;
        in->range_lo = -fabs(span);
        in->range_hi = fabs(span);
    }
    if (!bad && !(in->range_hi > in->range_lo)) {
        diag_add(r->d, DIAG_ERROR, rg->loc, "input %s: the range is empty", in->name);
        bad = 1;
    }
    if (!bad && in->bits > 32) {
        diag_add(r->d, DIAG_ERROR, plan_node_get(m, "bits")->loc,
                 "input %s: 'bits' is at most 32, got %d", in->name, in->bits);
        bad = 1;
    }
    return bad ? -1 : 0;
}

static const char *const detector_keys[] = {"gyromagnetic", "bandwidth", "noise", "axis",
                                            "sense", NULL};
static const char *const detector_required[] = {"gyromagnetic", NULL};

static int read_detector(plan_reader *r, const plan_node *m, plan_rig *rig) {
    if (plan_keys(r, m, "detector", detector_keys, detector_required)) return -1;
    rig->detector.present = true;
    rig->detector.axis = AXIS_X;
    rig->detector.sense = 1;
    rig->detector.input = rig->ninputs ? 0 : -1;
    int bad = opt_const(r, m, "gyromagnetic", UNITS_FREQ_PER_FIELD,
                        &rig->detector.gyromagnetic, NULL) != 0;
    bad |= opt_const(r, m, "bandwidth", UNITS_FREQUENCY, &rig->detector.bandwidth, NULL) != 0;
    bad |= opt_const(r, m, "noise", UNITS_NOISE_DENSITY, &rig->detector.noise, NULL) != 0;
    const plan_node *v;
    if ((v = plan_node_get(m, "axis"))) bad |= read_axis(r, v, &rig->detector.axis) != 0;
    if ((v = plan_node_get(m, "sense"))) {
        if (strcmp(v->text, "1") == 0 || strcmp(v->text, "+1") == 0) {
            rig->detector.sense = 1;
        } else if (strcmp(v->text, "-1") == 0) {
            rig->detector.sense = -1;
        } else {
            diag_add(r->d, DIAG_ERROR, v->loc, "'sense' is 1 or -1, got '%s'", v->text);
            bad = 1;
        }
    }
    if (!bad && rig->detector.gyromagnetic == 0) {
        diag_add(r->d, DIAG_ERROR, plan_node_get(m, "gyromagnetic")->loc,
                 "'gyromagnetic' cannot be zero");
        bad = 1;
    }
    return bad ? -1 : 0;
}

static const char *const env_keys[] = {"mains", "mains_field", "harmonics",
                                       "drift_per_hour", NULL};

static int read_environment(plan_reader *r, const plan_node *m, plan_rig *rig) {
    if (plan_keys(r, m, "environment", env_keys, NULL)) return -1;
    rig->environment.present = true;
    int bad = opt_const(r, m, "mains", UNITS_FREQUENCY, &rig->environment.mains, NULL) != 0;
    if (!bad && plan_node_get(m, "mains")) bad |= positive(r, m, "mains", rig->environment.mains);
    bad |= opt_const(r, m, "mains_field", UNITS_FIELD, &rig->environment.mains_field,
                     NULL) != 0;
    bad |= opt_count(r, m, "harmonics", 0, &rig->environment.harmonics) != 0;
    bad |= opt_const(r, m, "drift_per_hour", UNITS_FIELD, &rig->environment.drift_per_hour,
                     NULL) != 0;
    return bad ? -1 : 0;
}

static const char *const fault_keys[] = {"shot", "kind", NULL};
static const char *const fault_words[] = {"read_error", "overrun", "device_gone",
                                          "interlock", "disk_full", NULL};

static int read_faults(plan_reader *r, const plan_node *m, plan_rig *rig) {
    if (m->kind != PN_SEQ) {
        diag_add(r->d, DIAG_ERROR, m->loc,
                 "'faults' is a list such as [{shot: 5, kind: read_error}]");
        return -1;
    }
    rig->nfaults = m->n;
    rig->faults = arena_alloc(r->a, (m->n + 1) * sizeof *rig->faults);
    if (!rig->faults) return -1;
    int bad = 0;
    for (size_t i = 0; i < m->n; i++) {
        const plan_node *f = m->items[i];
        rig_fault *out = &rig->faults[i];
        out->loc = f->loc;
        if (plan_keys(r, f, "fault", fault_keys, fault_keys)) {
            bad = 1;
            continue;
        }
        int kind = 0;
        bad |= plan_read_count(r, plan_node_get(f, "shot"), "shot", 1, &out->shot) != 0;
        bad |= plan_read_choice(r, plan_node_get(f, "kind"), "kind", fault_words, &kind) != 0;
        out->kind = (rig_fault_kind)kind;
    }
    return bad ? -1 : 0;
}

static const char *const ao_keys[] = {"range", "bits", NULL};

static int read_analog_out(plan_reader *r, const plan_node *m, plan_rig *rig) {
    if (plan_keys(r, m, "analog_out", ao_keys, NULL)) return -1;
    int bad = opt_const(r, m, "range", UNITS_VOLTAGE, &rig->ao_range, NULL) != 0;
    bad |= opt_count(r, m, "bits", 1, &rig->ao_bits) != 0;
    rig->ao_range = fabs(rig->ao_range);
    if (!bad && rig->ao_range == 0) {
        diag_add(r->d, DIAG_ERROR, plan_node_get(m, "range")->loc,
                 "'range' of analog_out must be greater than zero");
        bad = 1;
    }
    return bad ? -1 : 0;
}

/* Allocates count entries of size each for a mapping of named entries and
 * names them from its keys (name at offset 0, loc right after, as in every
 * rig_* entry struct). */
static void *named_entries(plan_reader *r, const plan_node *m, const char *key,
                           size_t size, size_t *count) {
    *count = 0;
    if (m->kind != PN_MAP) {
        diag_add(r->d, DIAG_ERROR, m->loc, "'%s' must be a mapping of names to entries", key);
        return NULL;
    }
    unsigned char *arr = arena_alloc(r->a, (m->n + 1) * size);
    if (!arr) return NULL;
    for (size_t i = 0; i < m->n; i++) {
        const plan_node *k = m->keys[i];
        struct { const char *name; plan_loc loc; } head = {k->text, k->loc};
        memcpy(arr + i * size, &head, sizeof head);
    }
    *count = m->n;
    return arr;
}

static int unique_channels(plan_reader *r, plan_rig *rig) {
    int bad = 0;
    for (size_t i = 0; i < rig->ncoils; i++)
        for (size_t j = 0; j < i; j++)
            if (rig->coils[i].output == rig->coils[j].output) {
                diag_add(r->d, DIAG_ERROR, rig->coils[i].loc,
                         "coil %s uses output %d, already used by coil %s",
                         rig->coils[i].name, rig->coils[i].output, rig->coils[j].name);
                bad = 1;
            }
    for (size_t i = 0; i < rig->nlines; i++)
        for (size_t j = 0; j < i; j++)
            if (rig->lines[i].channel == rig->lines[j].channel) {
                diag_add(r->d, DIAG_ERROR, rig->lines[i].loc,
                         "line %s uses channel %d, already used by line %s",
                         rig->lines[i].name, rig->lines[i].channel, rig->lines[j].name);
                bad = 1;
            }
    for (size_t i = 0; i < rig->ninputs; i++)
        for (size_t j = 0; j < i; j++)
            if (rig->inputs[i].channel == rig->inputs[j].channel) {
                diag_add(r->d, DIAG_ERROR, rig->inputs[i].loc,
                         "input %s uses channel %d, already used by input %s",
                         rig->inputs[i].name, rig->inputs[i].channel, rig->inputs[j].name);
                bad = 1;
            }
    return bad;
}

static const char *const rig_keys[] = {
    "version", "name", "driver", "device", "analog_out", "coils", "magnets", "places",
    "residual", "lines", "inputs", "detector", "environment", "true_places", "faults",
    "acts_as_hardware", NULL};
static const char *const rig_required[] = {"version", "name", "driver", NULL};
static const char *const driver_words[] = {"sim", "comedi", NULL};
static const char *const sim_only[] = {"environment", "true_places", "faults",
                                       "acts_as_hardware", NULL};

static int read_version(plan_reader *r, const plan_node *v) {
    if (v->kind == PN_SCALAR && strcmp(v->text, "1") == 0) return 0;
    diag_add(r->d, DIAG_ERROR, v->loc,
             "'version' must be 1 (this precess reads version 1 files), got '%s'",
             v->kind == PN_SCALAR ? v->text : "a collection");
    return -1;
}

static int read_parts(plan_reader *r, const plan_node *root, plan_rig *rig) {
    int bad = 0;
    const plan_node *v;
    if ((v = plan_node_get(root, "coils"))) {
        rig->coils = named_entries(r, v, "coils", sizeof *rig->coils, &rig->ncoils);
        bad |= v->kind != PN_MAP;
        for (size_t i = 0; i < rig->ncoils; i++)
            bad |= read_coil(r, v->items[i], &rig->coils[i]) != 0;
    }
    if ((v = plan_node_get(root, "magnets"))) {
        rig->magnets = named_entries(r, v, "magnets", sizeof *rig->magnets, &rig->nmagnets);
        bad |= v->kind != PN_MAP;
        static const char *const magnet_keys[] = {"field", NULL};
        for (size_t i = 0; i < rig->nmagnets; i++) {
            char where[128];
            snprintf(where, sizeof where, "magnet %s", rig->magnets[i].name);
            if (plan_keys(r, v->items[i], where, magnet_keys, magnet_keys)) bad = 1;
            else bad |= opt_const(r, v->items[i], "field", UNITS_FIELD,
                                  &rig->magnets[i].field, NULL) != 0;
        }
    }
    if ((v = plan_node_get(root, "lines"))) {
        rig->lines = named_entries(r, v, "lines", sizeof *rig->lines, &rig->nlines);
        bad |= v->kind != PN_MAP;
        for (size_t i = 0; i < rig->nlines; i++)
            bad |= read_line(r, v->items[i], &rig->lines[i]) != 0;
    }
    if ((v = plan_node_get(root, "inputs"))) {
        rig->inputs = named_entries(r, v, "inputs", sizeof *rig->inputs, &rig->ninputs);
        bad |= v->kind != PN_MAP;
        for (size_t i = 0; i < rig->ninputs; i++)
            bad |= read_input(r, v->items[i], &rig->inputs[i]) != 0;
    }
    if ((v = plan_node_get(root, "places")))
        bad |= read_places(r, v, "places", &rig->places, &rig->nplaces, rig) != 0;
    for (size_t i = 0; i < rig->nplaces; i++)
        rig->places[i].is_sensor =
            rig_find_input(rig, rig->places[i].name, strlen(rig->places[i].name)) >= 0;
    if ((v = plan_node_get(root, "true_places"))) {
        size_t n;
        bad |= read_places(r, v, "true_places", &rig->true_places, &n, rig) != 0;
        for (size_t i = 0; i < n && rig->true_places; i++)
            if (rig_find_place(rig, rig->true_places[i].name,
                               strlen(rig->true_places[i].name)) < 0) {
                diag_add(r->d, DIAG_ERROR, rig->true_places[i].loc,
                         "true_places names '%s', which is not among the rig's places",
                         rig->true_places[i].name);
                bad = 1;
            }
    }
    if ((v = plan_node_get(root, "residual"))) bad |= read_residual(r, v, rig) != 0;
    if ((v = plan_node_get(root, "detector"))) bad |= read_detector(r, v, rig) != 0;
    if ((v = plan_node_get(root, "environment"))) bad |= read_environment(r, v, rig) != 0;
    if ((v = plan_node_get(root, "faults"))) bad |= read_faults(r, v, rig) != 0;
    if ((v = plan_node_get(root, "acts_as_hardware")))
        bad |= plan_read_bool(r, v, "acts_as_hardware", &rig->acts_as_hardware) != 0;
    return bad;
}

int rig_read_node(arena *a, const plan_node *root, plan_rig *rig, diag_list *d) {
    plan_reader r = {.a = a, .d = d, .rig = rig};
    const char *file = rig->file;
    const char *bytes = rig->bytes;
    size_t nbytes = rig->nbytes;
    memset(rig, 0, sizeof *rig);
    rig->file = file ? file : root->loc.file;
    rig->bytes = bytes;
    rig->nbytes = nbytes;
    rig->loc = root->loc;
    rig->ao_range = 10.0;
    rig->ao_bits = 16;
    size_t errors = d->errors;
    /* On unknown or missing keys go on: the parts still get their checks. */
    if (plan_keys(&r, root, "the rig", rig_keys, rig_required) && root->kind != PN_MAP)
        return -1;
    const plan_node *v;
    if ((v = plan_node_get(root, "version"))) read_version(&r, v);
    if ((v = plan_node_get(root, "name"))) rig->name = plan_read_text(&r, v, "name");
    int drv = 0;
    if ((v = plan_node_get(root, "driver")) &&
        plan_read_choice(&r, v, "driver", driver_words, &drv) == 0) {
        rig->driver = driver_words[drv];
        if (drv == 1) {
            const plan_node *dev = plan_node_get(root, "device");
            if (!dev) diag_add(d, DIAG_ERROR, v->loc, "a comedi rig needs 'device', "
                               "e.g. /dev/comedi0");
            else rig->device = plan_read_text(&r, dev, "device");
            for (int i = 0; sim_only[i]; i++)
                if ((dev = plan_node_get(root, sim_only[i])))
                    diag_add(d, DIAG_ERROR, dev->loc,
                             "'%s' applies to simulated rigs (driver: sim) only", sim_only[i]);
        }
    }
    if ((v = plan_node_get(root, "analog_out"))) read_analog_out(&r, v, rig);
    read_parts(&r, root, rig);
    if (d->errors == errors) unique_channels(&r, rig);
    return d->errors == errors ? 0 : -1;
}

int rig_read_file(arena *a, const char *path, plan_rig *out, diag_list *d) {
    char *bytes;
    size_t len;
    if (plan_slurp(path, &bytes, &len, d)) return -1;
    char *kept = arena_strndup(a, bytes, len);
    free(bytes);
    if (!kept) return -1;
    plan_node *root = plan_yaml_parse(a, path, kept, len, d);
    if (!root) return -1;
    memset(out, 0, sizeof *out);
    out->file = root->loc.file;
    out->bytes = kept;
    out->nbytes = len;
    return rig_read_node(a, root, out, d);
}
