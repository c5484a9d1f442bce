/* plan_sample: the plan's sample: its nuclei, temperature and the model
 * the simulated rig reads (relaxation models, signal size, coupled spins).
 * Not for simulating it (drivers/sim/). */
#include "plan_internal.h"

#include <stdio.h>
#include <string.h>

/* ---- sample ---------------------------------------------------------- */

static const char *const sample_keys[] = {"label", "nuclei", "temperature", "model", NULL};
static const char *const model_keys[] = {"t1", "t2", "signal_per_field", "spin_density",
                                         "volume", "distance", "spins", "couplings", NULL};
static const char *const relax_forms[] = {"bpp", "lorentzians", "table", NULL};
static const char *const bpp_keys[] = {"tau", "strength", NULL};
static const char *const lor_keys[] = {"base", "terms", NULL};
static const char *const term_keys[] = {"rate", "corner", NULL};

static units_dim per_time(void) { return units_dim_div(UNITS_NONE, UNITS_TIME); }

static int read_lorentzians(plan_reader *r, const plan_node *m, plan_relax_model *out) {
    if (plan_keys(r, m, "lorentzians", lor_keys, lor_keys)) return -1;
    int bad = plan_read_const(r, plan_node_get(m, "base"), "base", per_time(), &out->base);
    const plan_node *t = plan_node_get(m, "terms");
    if (t->kind != PN_SEQ) {
        diag_add(r->d, DIAG_ERROR, t->loc, "'terms' is a list of {rate, corner}");
        return -1;
    }
    out->n = t->n;
    out->rate = arena_alloc(r->a, (t->n + 1) * sizeof *out->rate);
    out->corner = arena_alloc(r->a, (t->n + 1) * sizeof *out->corner);
    for (size_t i = 0; i < t->n && out->rate && out->corner; i++) {
        const plan_node *e = t->items[i];
        if (plan_keys(r, e, "a lorentzian term", term_keys, term_keys)) {
            bad = 1;
            continue;
        }
        bad |= plan_read_const(r, plan_node_get(e, "rate"), "rate", per_time(), &out->rate[i]);
        bad |= plan_read_const(r, plan_node_get(e, "corner"), "corner", UNITS_FIELD,
                               &out->corner[i]);
    }
    return bad ? -1 : 0;
}

static int read_table(plan_reader *r, const plan_node *t, plan_relax_model *out) {
    if (t->kind != PN_SEQ || t->n < 1) {
        diag_add(r->d, DIAG_ERROR, t->loc, "'table' is a list of [field, time] pairs");
        return -1;
    }
    out->n = t->n;
    out->field = arena_alloc(r->a, (t->n + 1) * sizeof *out->field);
    out->time = arena_alloc(r->a, (t->n + 1) * sizeof *out->time);
    int bad = 0;
    for (size_t i = 0; i < t->n && out->field && out->time; i++) {
        const plan_node *row = t->items[i];
        if (row->kind != PN_SEQ || row->n != 2) {
            diag_add(r->d, DIAG_ERROR, row->loc, "a table row is [field, time], e.g. "
                     "[5 uT, 0.8 s]");
            bad = 1;
            continue;
        }
        bad |= plan_read_const(r, row->items[0], "table", UNITS_FIELD, &out->field[i]);
        bad |= plan_read_const(r, row->items[1], "table", UNITS_TIME, &out->time[i]);
        if (!bad && (out->field[i] <= 0 || out->time[i] <= 0)) {
            diag_add(r->d, DIAG_ERROR, row->loc, "table rows are interpolated on log axes: "
                     "fields and times must be greater than zero");
            bad = 1;
        }
        if (!bad && i > 0 && out->field[i] <= out->field[i - 1]) {
            diag_add(r->d, DIAG_ERROR, row->loc, "table rows must go up in field");
            bad = 1;
        }
    }
    return bad ? -1 : 0;
}

static int read_relax(plan_reader *r, const plan_node *n, const char *key,
                      plan_relax_model *out) {
    out->loc = n->loc;
    if (n->kind == PN_SCALAR) {
        out->kind = MODEL_CONST;
        return plan_read_const(r, n, key, UNITS_TIME, &out->value);
    }
    if (n->kind != PN_MAP || n->n != 1) {
        diag_add(r->d, DIAG_ERROR, n->loc,
                 "'%s' is a time, or one of {bpp: ...}, {lorentzians: ...}, {table: ...}", key);
        return -1;
    }
    int form;
    if (plan_read_choice(r, n->keys[0], key, relax_forms, &form)) return -1;
    const plan_node *v = n->items[0];
    if (form == 0) {
        out->kind = MODEL_BPP;
        if (plan_keys(r, v, "bpp", bpp_keys, bpp_keys)) return -1;
        int bad = plan_read_const(r, plan_node_get(v, "tau"), "tau", UNITS_TIME, &out->tau);
        bad |= plan_read_const(r, plan_node_get(v, "strength"), "strength", UNITS_RATE_SQUARED,
                               &out->strength);
        return bad ? -1 : 0;
    }
    out->kind = form == 1 ? MODEL_LORENTZIANS : MODEL_TABLE;
    return form == 1 ? read_lorentzians(r, v, out) : read_table(r, v, out);
}

static int find_spin(const plan_sample *s, const char *label, size_t len) {
    for (size_t i = 0; i < s->nspins; i++)
        if (strlen(s->spin_label[i]) == len && memcmp(s->spin_label[i], label, len) == 0)
            return (int)i;
    return -1;
}

static int read_spins(plan_reader *r, const plan_node *sp, const plan_node *cp,
                      plan_sample *s) {
    int bad = 0;
    if (sp->kind != PN_MAP) {
        diag_add(r->d, DIAG_ERROR, sp->loc, "'spins' maps labels to nuclei, e.g. {Ha: 1H, C: 13C}");
        return -1;
    }
    s->nspins = sp->n;
    s->spin_label = arena_alloc(r->a, (sp->n + 1) * sizeof *s->spin_label);
    s->spin_nucleus = arena_alloc(r->a, (sp->n + 1) * sizeof *s->spin_nucleus);
    if (!s->spin_label || !s->spin_nucleus) return -1;
    for (size_t i = 0; i < sp->n; i++) {
        const char *t = sp->keys[i]->text;
        int ok = (t[0] >= 'A' && t[0] <= 'Z') || (t[0] >= 'a' && t[0] <= 'z');
        for (size_t j = 1; ok && t[j]; j++)
            ok = (t[j] >= 'A' && t[j] <= 'Z') || (t[j] >= 'a' && t[j] <= 'z') ||
                 (t[j] >= '0' && t[j] <= '9');
        if (!ok) {
            diag_add(r->d, DIAG_ERROR, sp->keys[i]->loc,
                     "spin label '%s': letters and digits, starting with a letter", t);
            bad = 1;
        }
        s->spin_label[i] = t;
        s->spin_nucleus[i] = plan_read_nucleus(r, sp->items[i], t);
        bad |= !s->spin_nucleus[i];
    }
    if (!cp) return bad ? -1 : 0;
    if (cp->kind != PN_MAP) {
        diag_add(r->d, DIAG_ERROR, cp->loc, "'couplings' maps label pairs to J, e.g. "
                 "{Ha-C: 140 Hz}");
        return -1;
    }
    s->ncouplings = cp->n;
    s->coupling_a = arena_alloc(r->a, (cp->n + 1) * sizeof(int));
    s->coupling_b = arena_alloc(r->a, (cp->n + 1) * sizeof(int));
    s->coupling = arena_alloc(r->a, (cp->n + 1) * sizeof(double));
    if (!s->coupling_a || !s->coupling_b || !s->coupling) return -1;
    for (size_t i = 0; i < cp->n; i++) {
        const plan_node *k = cp->keys[i];
        const char *dash = strchr(k->text, '-');
        int a = dash ? find_spin(s, k->text, (size_t)(dash - k->text)) : -1;
        int b = dash ? find_spin(s, dash + 1, strlen(dash + 1)) : -1;
        if (a < 0 || b < 0 || a == b) {
            diag_add(r->d, DIAG_ERROR, k->loc, "coupling '%s' must join two different spin "
                     "labels of 'spins' with '-', e.g. Ha-C", k->text);
            bad = 1;
            continue;
        }
        s->coupling_a[i] = a;
        s->coupling_b[i] = b;
        bad |= plan_read_const(r, cp->items[i], k->text, UNITS_FREQUENCY, &s->coupling[i]);
    }
    return bad ? -1 : 0;
}

static int read_model(plan_reader *r, const plan_node *m, plan_sample *s) {
    if (plan_keys(r, m, "model", model_keys, NULL)) return -1;
    s->has_model = true;
    int bad = 0;
    const plan_node *v;
    if ((v = plan_node_get(m, "t1"))) bad |= read_relax(r, v, "t1", &s->t1) != 0;
    if ((v = plan_node_get(m, "t2"))) bad |= read_relax(r, v, "t2", &s->t2) != 0;
    if ((v = plan_node_get(m, "signal_per_field")))
        bad |= plan_read_const(r, v, "signal_per_field", UNITS_NONE, &s->signal_per_field);
    static const char *const curie[] = {"spin_density", "volume", "distance"};
    units_dim dims[] = {UNITS_NUMBER_DENSITY, UNITS_VOLUME, UNITS_LENGTH};
    double *outs[] = {&s->spin_density, &s->volume, &s->distance};
    int ncurie = 0;
    for (int i = 0; i < 3; i++)
        if ((v = plan_node_get(m, curie[i]))) {
            ncurie++;
            bad |= plan_read_const(r, v, curie[i], dims[i], outs[i]);
        }
    if (ncurie && plan_node_get(m, "signal_per_field")) {
        diag_add(r->d, DIAG_ERROR, plan_node_get(m, "signal_per_field")->loc,
                 "give signal_per_field or spin_density, volume and distance, not both");
        bad = 1;
    } else if (ncurie && ncurie < 3) {
        diag_add(r->d, DIAG_ERROR, m->loc, "a signal from the Curie law needs "
                 "'spin_density', 'volume' and 'distance'");
        bad = 1;
    }
    if ((v = plan_node_get(m, "spins")))
        bad |= read_spins(r, v, plan_node_get(m, "couplings"), s) != 0;
    else if ((v = plan_node_get(m, "couplings"))) {
        diag_add(r->d, DIAG_ERROR, v->loc, "'couplings' needs 'spins' to name the labels");
        bad = 1;
    }
    return bad ? -1 : 0;
}

static const nuc_info *proton(void) { return nuc_find("1H", 2); }

int plan_read_sample(plan_reader *r, const plan_node *m, plan_sample *s) {
    s->temperature = 295.0;
    if (!m) {
        s->nnuclei = 1;
        s->nuclei = arena_alloc(r->a, sizeof *s->nuclei);
        if (!s->nuclei) return -1;
        s->nuclei[0] = proton();
        s->label = "";
        return 0;
    }
    static const char *const required[] = {"nuclei", NULL};
    if (plan_keys(r, m, "sample", sample_keys, required)) return -1;
    int bad = 0;
    const plan_node *v;
    s->label = "";
    if ((v = plan_node_get(m, "label"))) s->label = plan_read_text(r, v, "label");
    bad |= !s->label;
    v = plan_node_get(m, "nuclei");
    if (v->kind == PN_SCALAR) {
        s->nnuclei = 1;
        s->nuclei = arena_alloc(r->a, sizeof *s->nuclei);
        if (s->nuclei && !(s->nuclei[0] = plan_read_nucleus(r, v, "nuclei"))) bad = 1;
    } else if (v->kind == PN_SEQ && v->n > 0) {
        s->nnuclei = v->n;
        s->nuclei = arena_alloc(r->a, v->n * sizeof *s->nuclei);
        for (size_t i = 0; s->nuclei && i < v->n; i++)
            if (!(s->nuclei[i] = plan_read_nucleus(r, v->items[i], "nuclei"))) bad = 1;
    } else {
        diag_add(r->d, DIAG_ERROR, v->loc, "'nuclei' is a list of nuclei such as [1H, 13C]");
        bad = 1;
    }
    if ((v = plan_node_get(m, "temperature"))) {
        bad |= plan_read_const(r, v, "temperature", UNITS_TEMPERATURE, &s->temperature);
        if (!bad && s->temperature <= 0) {
            diag_add(r->d, DIAG_ERROR, v->loc, "'temperature' must be above absolute zero");
            bad = 1;
        }
    }
    if ((v = plan_node_get(m, "model"))) bad |= read_model(r, v, s) != 0;
    return bad ? -1 : 0;
}

