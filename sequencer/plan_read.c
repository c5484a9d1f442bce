/* plan_read: a plan file read into a plan: its rig, sample, variables
 * (vary, let), order, averages, reference shots, rest, analysis and the
 * steps (plan_steps.c). Every expression is dimension-checked at point 1.
 * Not for expanding the scan (scan.c) nor for timing and limits (compile). */
#include "plan_internal.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

int plan_slurp(const char *path, char **bytes, size_t *len, diag_list *d) {
    plan_loc at = {path, 0, 0};
    FILE *f = fopen(path, "rb");
    if (!f) {
        diag_add(d, DIAG_ERROR, at, "cannot read the file: %s", strerror(errno));
        return -1;
    }
    size_t cap = 64 * 1024, n = 0;
    char *buf = malloc(cap + 1);
    while (buf) {
        size_t got = fread(buf + n, 1, cap - n, f);
        n += got;
        if (n > PLAN_MAX_FILE_BYTES) break;
        if (got == 0) break;
        if (n == cap) {
            char *nb = realloc(buf, cap * 2 + 1);
            if (!nb) {
                free(buf);
                buf = NULL;
                break;
            }
            buf = nb;
            cap *= 2;
        }
    }
    int err = ferror(f);
    fclose(f);
    if (!buf) {
        diag_add(d, DIAG_ERROR, at, "out of memory reading the file");
        return -1;
    }
    if (err) {
        free(buf);
        diag_add(d, DIAG_ERROR, at, "cannot read the file: read error");
        return -1;
    }
    if (n > PLAN_MAX_FILE_BYTES) {
        free(buf);
        diag_add(d, DIAG_ERROR, at, "file is larger than %d bytes; plans and rigs are "
                 "limited to 1 MiB", PLAN_MAX_FILE_BYTES);
        return -1;
    }
    buf[n] = '\0';
    *bytes = buf;
    *len = n;
    return 0;
}

/* ---- the scope expressions see while reading --------------------------- */

static int scope_lookup(void *ctx, const char *name, size_t len, units_qty *out) {
    plan_scope *s = ctx;
    const plan *p = s->p;
    s->missing = NULL;
    for (size_t i = 0; i < p->nvars; i++) {
        const plan_var *v = &p->vars[i];
        if (strlen(v->name) == len && memcmp(v->name, name, len) == 0) {
            p->vars[i].used = true;
            out->value = s->vals ? s->vals[i] : v->kind == SCAN_RANGE ? v->from.value
                         : v->n ? v->values[0].value : 0;
            out->dim = v->dim;
            return 0;
        }
    }
    for (size_t i = 0; i < s->nlets && i < p->nlets; i++) {
        const plan_let *l = &p->lets[i];
        if (strlen(l->name) == len && memcmp(l->name, name, len) == 0) {
            p->lets[i].used = true;
            out->value = s->let_vals ? s->let_vals[i] : l->value.value;
            out->dim = l->value.dim;
            return 0;
        }
    }
    snprintf(s->missing_buf, sizeof s->missing_buf, "%.*s", (int)len, name);
    s->missing = s->missing_buf;
    return -1;
}

static const char *scope_suggest(void *ctx) {
    plan_scope *s = ctx;
    if (!s->missing) return NULL;
    const plan *p = s->p;
    size_t n = 0;
    const char *names[512];
    for (size_t i = 0; i < p->nvars && n < 512; i++) names[n++] = p->vars[i].name;
    for (size_t i = 0; i < s->nlets && i < p->nlets && n < 512; i++)
        names[n++] = p->lets[i].name;
    return diag_nearest(s->missing, names, n);
}

void plan_reader_init(plan_reader *r, plan *p, plan_scope *s, diag_list *d) {
    memset(s, 0, sizeof *s);
    s->p = p;
    s->nlets = p->nlets;
    memset(r, 0, sizeof *r);
    r->a = p->arena;
    r->d = d;
    r->lookup = scope_lookup;
    r->lookup_ctx = s;
    r->rig = &p->rig;
    r->suggest = scope_suggest;
}

int plan_eval_lets(const plan *p, const double *vals, double *let_vals, diag_list *d) {
    plan_scope s = {.p = p, .vals = vals, .let_vals = let_vals};
    for (size_t i = 0; i < p->nlets; i++) {
        s.nlets = i;
        expr_error err;
        units_qty q;
        if (expr_eval(p->lets[i].value.expr, scope_lookup, &s, &q, &err)) {
            diag_add(d, DIAG_ERROR, p->lets[i].value.loc, "let %s: %s", p->lets[i].name,
                     err.message);
            return -1;
        }
        let_vals[i] = q.value;
    }
    return 0;
}

int plan_eval(const plan *p, const plan_value *v, const double *vals,
              const double *let_vals, double *out, diag_list *d) {
    if (!v->set) {
        *out = 0;
        return 0;
    }
    plan_scope s = {.p = p, .vals = vals, .let_vals = let_vals, .nlets = p->nlets};
    expr_error err;
    units_qty q;
    if (expr_eval(v->expr, scope_lookup, &s, &q, &err)) {
        diag_add(d, DIAG_ERROR, v->loc, "%s", err.message);
        return -1;
    }
    *out = q.value;
    return 0;
}

/* ---- variables ------------------------------------------------------- */

static int check_name(plan_reader *r, const plan_node *k, const plan *p, size_t upto_vars,
                      size_t upto_lets) {
    if (!expr_name_allowed(k->text, k->len)) {
        if (units_is_unit_word(k->text, k->len))
            diag_add(r->d, DIAG_ERROR, k->loc,
                     "'%s' cannot be a variable name: it is a unit symbol", k->text);
        else
            diag_add(r->d, DIAG_ERROR, k->loc,
                     "'%s' cannot be a variable name: names are lower-case letters, digits "
                     "and _, start with a letter or _, and are not a function or pi",
                     k->text);
        return -1;
    }
    for (size_t i = 0; i < upto_vars; i++)
        if (strcmp(p->vars[i].name, k->text) == 0) {
            diag_add(r->d, DIAG_ERROR, k->loc, "'%s' is already a scan variable (line %d)",
                     k->text, p->vars[i].loc.line);
            return -1;
        }
    for (size_t i = 0; i < upto_lets; i++)
        if (strcmp(p->lets[i].name, k->text) == 0) {
            diag_add(r->d, DIAG_ERROR, k->loc, "'%s' is already defined by let (line %d)",
                     k->text, p->lets[i].loc.line);
            return -1;
        }
    return 0;
}

static const char *const range_keys[] = {"from", "to", "steps", "spacing", NULL};
static const char *const range_required[] = {"from", "to", "steps", NULL};
static const char *const spacing_words[] = {"linear", "log", NULL};
static const char *const values_keys[] = {"values", NULL};

/* Constants only: vary values cannot refer to variables. */
static int const_reader_value(plan_reader *r, const plan_node *n, const char *key,
                              plan_value *out) {
    units_qty q;
    expr_error err;
    if (n->kind != PN_SCALAR) {
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s' takes single values, got a collection", key);
        return -1;
    }
    expr_node *e = expr_parse(r->a, n->text, n->len, &err);
    if (!e) {
        diag_add(r->d, DIAG_ERROR, plan_loc_in(n, err.pos), "'%s': %s", key, err.message);
        return -1;
    }
    if (!expr_is_constant(e)) {
        diag_add(r->d, DIAG_ERROR, n->loc,
                 "'%s': scan values must be constants (quantities, not variables)", key);
        return -1;
    }
    if (expr_eval(e, NULL, NULL, &q, &err)) {
        diag_add(r->d, DIAG_ERROR, plan_loc_in(n, err.pos), "'%s': %s", key, err.message);
        return -1;
    }
    *out = (plan_value){true, n->loc, e, n->text, q.dim, q.value};
    return 0;
}

static int same_dim(plan_reader *r, const plan_var *v, const plan_value *x) {
    if (units_dim_eq(v->dim, x->dim)) return 0;
    char a[96], b[96];
    diag_add(r->d, DIAG_ERROR, x->loc, "values of '%s' must share one dimension: %s, then %s",
             v->name, units_dim_describe(v->dim, a, sizeof a),
             units_dim_describe(x->dim, b, sizeof b));
    return -1;
}

static int read_list(plan_reader *r, const plan_node *list, plan_var *v) {
    v->kind = SCAN_LIST;
    v->n = list->n;
    if (v->n == 0) {
        diag_add(r->d, DIAG_ERROR, list->loc, "'%s' has no values", v->name);
        return -1;
    }
    v->values = arena_alloc(r->a, v->n * sizeof *v->values);
    if (!v->values) return -1;
    int bad = 0;
    for (size_t i = 0; i < v->n; i++) {
        if (const_reader_value(r, list->items[i], v->name, &v->values[i])) {
            bad = 1;
            continue;
        }
        if (i == 0 || bad) v->dim = v->values[i].dim;
        else bad |= same_dim(r, v, &v->values[i]) != 0;
    }
    return bad ? -1 : 0;
}

static int read_range(plan_reader *r, const plan_node *m, plan_var *v) {
    v->kind = SCAN_RANGE;
    if (plan_keys(r, m, v->name, range_keys, range_required)) return -1;
    int steps = 0, spacing = 0, bad = 0;
    bad |= const_reader_value(r, plan_node_get(m, "from"), "from", &v->from) != 0;
    bad |= const_reader_value(r, plan_node_get(m, "to"), "to", &v->to) != 0;
    bad |= plan_read_count(r, plan_node_get(m, "steps"), "steps", 0, &steps) != 0;
    const plan_node *sp = plan_node_get(m, "spacing");
    if (sp) bad |= plan_read_choice(r, sp, "spacing", spacing_words, &spacing) != 0;
    if (bad) return -1;
    v->dim = v->from.dim;
    if (same_dim(r, v, &v->to)) return -1;
    v->n = (size_t)steps;
    v->spacing = spacing ? SPACING_LOG : SPACING_LINEAR;
    if (steps < 2) {
        diag_add(r->d, DIAG_ERROR, plan_node_get(m, "steps")->loc,
                 "a range has both ends, so 'steps' is at least 2, got %d", steps);
        return -1;
    }
    if (v->spacing == SPACING_LOG &&
        !(v->from.value * v->to.value > 0)) {
        diag_add(r->d, DIAG_ERROR, sp->loc,
                 "log spacing needs both ends non-zero and of one sign (from %s to %s)",
                 v->from.text, v->to.text);
        return -1;
    }
    return 0;
}

static int read_vary(plan_reader *r, plan *p, const plan_node *m) {
    if (m->kind != PN_MAP) {
        diag_add(r->d, DIAG_ERROR, m->loc, "'vary' must map variable names to lists or ranges");
        return -1;
    }
    p->vars = arena_alloc(r->a, (m->n + 1) * sizeof *p->vars);
    if (!p->vars) return -1;
    int bad = 0;
    for (size_t i = 0; i < m->n; i++) {
        const plan_node *k = m->keys[i], *v = m->items[i];
        plan_var *var = &p->vars[p->nvars];
        var->name = k->text;
        var->loc = k->loc;
        if (check_name(r, k, p, p->nvars, 0)) {
            bad = 1;
            continue;
        }
        int rc;
        if (v->kind == PN_SEQ) {
            rc = read_list(r, v, var);
        } else if (v->kind == PN_MAP && plan_node_get(v, "values")) {
            rc = plan_keys(r, v, k->text, values_keys, values_keys);
            if (rc == 0 && plan_node_get(v, "values")->kind != PN_SEQ) {
                diag_add(r->d, DIAG_ERROR, plan_node_get(v, "values")->loc,
                         "'values' takes a list such as [1 mT, 2 mT]");
                rc = -1;
            }
            if (rc == 0) rc = read_list(r, plan_node_get(v, "values"), var);
        } else if (v->kind == PN_MAP) {
            rc = read_range(r, v, var);
        } else {
            diag_add(r->d, DIAG_ERROR, v->loc,
                     "'%s' takes a list [a, b, ...] or a range {from, to, steps}", k->text);
            rc = -1;
        }
        bad |= rc != 0;
        p->nvars++;
    }
    return bad ? -1 : 0;
}

static int read_lets(plan_reader *r, plan_scope *s, plan *p, const plan_node *m) {
    if (m->kind != PN_MAP) {
        diag_add(r->d, DIAG_ERROR, m->loc, "'let' must map names to values");
        return -1;
    }
    p->lets = arena_alloc(r->a, (m->n + 1) * sizeof *p->lets);
    if (!p->lets) return -1;
    int bad = 0;
    for (size_t i = 0; i < m->n; i++) {
        const plan_node *k = m->keys[i], *v = m->items[i];
        plan_let *l = &p->lets[p->nlets];
        l->name = k->text;
        l->loc = k->loc;
        if (check_name(r, k, p, p->nvars, p->nlets)) {
            bad = 1;
            continue;
        }
        s->nlets = p->nlets;
        /* A let takes whatever dimension its expression has. */
        if (v->kind != PN_SCALAR) {
            diag_add(r->d, DIAG_ERROR, v->loc, "let %s takes a single value", k->text);
            bad = 1;
            continue;
        }
        expr_error err;
        units_qty q;
        expr_node *e = expr_parse(r->a, v->text, v->len, &err);
        if (!e || expr_eval(e, r->lookup, s, &q, &err)) {
            const char *near = e ? scope_suggest(s) : NULL;
            diag_add(r->d, DIAG_ERROR, plan_loc_in(v, err.pos), "let %s: %s%s%s%s", k->text,
                     err.message, near ? "; did you mean '" : "", near ? near : "",
                     near ? "'?" : "");
            bad = 1;
            continue;
        }
        l->value = (plan_value){true, v->loc, e, v->text, q.dim, q.value};
        p->nlets++;
    }
    s->nlets = p->nlets;
    return bad ? -1 : 0;
}

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

static int read_sample(plan_reader *r, const plan_node *m, plan_sample *s) {
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

/* ---- scan options, reference shots, analysis -------------------------- */

static int find_var(const plan *p, const char *name) {
    for (size_t i = 0; i < p->nvars; i++)
        if (strcmp(p->vars[i].name, name) == 0) return (int)i;
    return -1;
}

/* A scan variable named by n; *out its index. */
static int read_var_ref(plan_reader *r, const plan *p, const plan_node *n, const char *key,
                        int *out) {
    if (n->kind == PN_SCALAR && (*out = find_var(p, n->text)) >= 0) return 0;
    const char *names[512];
    size_t k = 0;
    for (size_t i = 0; i < p->nvars && k < 512; i++) names[k++] = p->vars[i].name;
    const char *near = n->kind == PN_SCALAR ? diag_nearest(n->text, names, k) : NULL;
    if (near)
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s': '%s' is not a scan variable; did you mean "
                 "'%s'?", key, n->text, near);
    else
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s' names a scan variable of 'vary'%s", key,
                 p->nvars ? "" : ", and this plan varies nothing");
    return -1;
}

static const char *const reference_keys[] = {"every", "with", NULL};
static const char *const reference_required[] = {"every", NULL};

static int read_reference(plan_reader *r, plan *p, const plan_node *m) {
    if (plan_keys(r, m, "reference", reference_keys, reference_required)) return -1;
    p->reference.present = true;
    p->reference.loc = m->loc;
    int bad = plan_read_count(r, plan_node_get(m, "every"), "every", 1, &p->reference.every);
    const plan_node *w = plan_node_get(m, "with");
    if (!w) return bad ? -1 : 0;
    if (w->kind != PN_MAP) {
        diag_add(r->d, DIAG_ERROR, w->loc, "'with' maps scan variables to the values a "
                 "reference shot takes, e.g. {t_relax: 2.5 s}");
        return -1;
    }
    p->reference.n = w->n;
    p->reference.var = arena_alloc(r->a, (w->n + 1) * sizeof(int));
    p->reference.value = arena_alloc(r->a, (w->n + 1) * sizeof(plan_value));
    if (!p->reference.var || !p->reference.value) return -1;
    for (size_t i = 0; i < w->n; i++) {
        int v;
        if (read_var_ref(r, p, w->keys[i], "with", &v)) {
            bad = 1;
            continue;
        }
        p->reference.var[i] = v;
        bad |= plan_read_value(r, w->items[i], w->keys[i]->text, p->vars[v].dim,
                               &p->reference.value[i]);
        if (!bad && !expr_is_constant(p->reference.value[i].expr)) {
            diag_add(r->d, DIAG_ERROR, w->items[i]->loc, "reference values are constants");
            bad = 1;
        }
    }
    return bad ? -1 : 0;
}

static const char *const analysis_keys[] = {"fit", "against", "per", "line_noise", "window",
                                            NULL};
static const char *const fit_words[] = {"none", "relaxation", "buildup", "calibration", NULL};

static int read_against(plan_reader *r, plan *p, const plan_node *n) {
    static const char *const current_keys[] = {"current", NULL};
    if (n->kind == PN_MAP) {
        if (plan_keys(r, n, "against", current_keys, current_keys)) return -1;
        if (p->analysis.fit != FIT_CALIBRATION) {
            diag_add(r->d, DIAG_ERROR, n->loc, "{current: COIL} is the axis of a calibration "
                     "fit only");
            return -1;
        }
        return plan_read_ref(r, plan_node_get(n, "current"), "coil", &p->analysis.against_current);
    }
    if (read_var_ref(r, p, n, "against", &p->analysis.against_var)) return -1;
    const plan_var *v = &p->vars[p->analysis.against_var];
    units_dim want = p->analysis.fit == FIT_CALIBRATION ? UNITS_FIELD : UNITS_TIME;
    if (p->analysis.fit != FIT_NONE && !units_dim_eq(v->dim, want)) {
        char a[96], b[96];
        diag_add(r->d, DIAG_ERROR, n->loc, "a %s fit needs %s on its axis; '%s' is %s",
                 fit_words[p->analysis.fit], units_dim_describe(want, a, sizeof a), v->name,
                 units_dim_describe(v->dim, b, sizeof b));
        return -1;
    }
    return 0;
}

static int read_window(plan_reader *r, plan *p, const plan_node *w) {
    static const char *const window_keys[] = {"from", "to", NULL};
    if (plan_keys(r, w, "window", window_keys, NULL)) return -1;
    const plan_node *from = plan_node_get(w, "from"), *to = plan_node_get(w, "to");
    p->analysis.has_window = true;
    p->analysis.window_to = INFINITY;
    int bad = 0;
    if (from) bad |= plan_read_const(r, from, "from", UNITS_TIME, &p->analysis.window_from);
    if (to) bad |= plan_read_const(r, to, "to", UNITS_TIME, &p->analysis.window_to);
    if (!bad && (p->analysis.window_from < 0 ||
                 p->analysis.window_to <= p->analysis.window_from)) {
        diag_add(r->d, DIAG_ERROR, w->loc, "the window must start at or after 0 s and end "
                 "after it starts");
        bad = 1;
    }
    return bad ? -1 : 0;
}

static int read_analysis(plan_reader *r, plan *p, const plan_node *m) {
    if (plan_keys(r, m, "analysis", analysis_keys, NULL)) return -1;
    p->analysis.loc = m->loc;
    int fit = 0, bad = 0;
    const plan_node *v;
    if ((v = plan_node_get(m, "fit"))) bad |= plan_read_choice(r, v, "fit", fit_words, &fit);
    p->analysis.fit = (plan_fit)fit;
    if ((v = plan_node_get(m, "against"))) bad |= read_against(r, p, v);
    else if (fit != FIT_NONE) {
        diag_add(r->d, DIAG_ERROR, m->loc, "a %s fit needs 'against' (its x axis)",
                 fit_words[fit]);
        bad = 1;
    }
    if ((v = plan_node_get(m, "per"))) bad |= read_var_ref(r, p, v, "per", &p->analysis.per_var);
    if (!bad && p->analysis.per_var >= 0 && p->analysis.per_var == p->analysis.against_var) {
        diag_add(r->d, DIAG_ERROR, v->loc, "'per' and 'against' name the same variable");
        bad = 1;
    }
    if ((v = plan_node_get(m, "line_noise")))
        bad |= plan_read_const(r, v, "line_noise", UNITS_FREQUENCY, &p->analysis.line_noise);
    if ((v = plan_node_get(m, "window"))) bad |= read_window(r, p, v);
    return bad ? -1 : 0;
}

/* ---- the whole plan ---------------------------------------------------- */

static const char *const plan_keys_known[] = {
    "version", "title", "rig", "sample", "let", "vary", "combine", "order", "seed",
    "averages", "warmup", "reference", "retries", "on_fault", "limits", "rest", "setup",
    "teardown", "shot", "analysis", NULL};
static const char *const plan_required[] = {"version", "rig", "shot", NULL};
static const char *const combine_words[] = {"grid", "together", NULL};
static const char *const order_words[] = {"as-written", "reversed", "shuffled", NULL};
static const char *const fault_words[] = {"continue", "stop", NULL};
static const char *const limits_keys[] = {"max_duration", NULL};

/* The rig: a path relative to the plan's folder, or an inline mapping. */
static int read_rig(plan_reader *r, plan *p, const plan_node *n) {
    if (n->kind == PN_MAP) {
        p->rig_inline = true;
        p->rig.file = p->file;
        return rig_read_node(r->a, n, &p->rig, r->d);
    }
    const char *path = plan_read_text(r, n, "rig");
    if (!path) return -1;
    const char *slash = strrchr(p->file, '/');
    char *full;
    if (path[0] == '/' || !slash) {
        full = arena_strdup(r->a, path);
    } else {
        size_t dl = (size_t)(slash - p->file) + 1;
        full = arena_alloc(r->a, dl + strlen(path) + 1);
        if (full) {
            memcpy(full, p->file, dl);
            strcpy(full + dl, path);
        }
    }
    if (!full) return -1;
    p->rig_path = full;
    diag_list rd;
    diag_init(&rd);
    int rc = rig_read_file(r->a, full, &p->rig, &rd);
    /* A rig that cannot be opened is reported where the plan names it. */
    for (size_t i = 0; i < rd.n; i++) {
        diag *g = &rd.items[i];
        if (g->line == 0 && strcmp(g->file, full) == 0)
            diag_add(r->d, g->severity, n->loc, "rig %s: %s", full, g->message);
        else
            diag_add(r->d, g->severity, (plan_loc){g->file, g->line, g->col}, "%s", g->message);
    }
    diag_free(&rd);
    return rc;
}

static int read_options(plan_reader *r, plan *p, const plan_node *root) {
    int bad = 0, word = 0;
    const plan_node *v;
    p->averages = 1;
    p->retries = 1;
    if ((v = plan_node_get(root, "combine"))) {
        bad |= plan_read_choice(r, v, "combine", combine_words, &word);
        p->combine = (plan_combine)word;
    }
    word = 0;
    if ((v = plan_node_get(root, "order"))) {
        bad |= plan_read_choice(r, v, "order", order_words, &word);
        p->order = (plan_order)word;
    }
    if ((v = plan_node_get(root, "seed"))) {
        int seed = 0;
        bad |= plan_read_count(r, v, "seed", 0, &seed);
        p->seed = (unsigned long)seed;
    } else if (p->order == ORDER_SHUFFLED) {
        diag_add(r->d, DIAG_ERROR, plan_node_get(root, "order")->loc,
                 "order: shuffled needs 'seed' (a whole number) so the order can be repeated");
        bad = 1;
    }
    if ((v = plan_node_get(root, "averages"))) bad |= plan_read_count(r, v, "averages", 1,
                                                                      &p->averages);
    if ((v = plan_node_get(root, "warmup"))) bad |= plan_read_count(r, v, "warmup", 0,
                                                                    &p->warmup);
    if ((v = plan_node_get(root, "retries"))) bad |= plan_read_count(r, v, "retries", 0,
                                                                     &p->retries);
    word = 0;
    if ((v = plan_node_get(root, "on_fault"))) {
        bad |= plan_read_choice(r, v, "on_fault", fault_words, &word);
        p->stop_on_fault = word == 1;
    }
    if ((v = plan_node_get(root, "limits"))) {
        if (plan_keys(r, v, "limits", limits_keys, NULL)) bad = 1;
        else if ((v = plan_node_get(v, "max_duration"))) {
            bad |= plan_read_const(r, v, "max_duration", UNITS_TIME, &p->max_duration);
            if (!bad && p->max_duration <= 0) {
                diag_add(r->d, DIAG_ERROR, v->loc, "'max_duration' must be greater than zero");
                bad = 1;
            }
        }
    }
    return bad ? -1 : 0;
}

static int check_together(plan_reader *r, const plan *p) {
    if (p->combine != COMBINE_TOGETHER) return 0;
    int bad = 0;
    for (size_t i = 1; i < p->nvars; i++)
        if (p->vars[i].n != p->vars[0].n) {
            diag_add(r->d, DIAG_ERROR, p->vars[i].loc,
                     "combine: together walks the lists side by side, so they need one "
                     "length: '%s' has %zu values, '%s' has %zu", p->vars[i].name,
                     p->vars[i].n, p->vars[0].name, p->vars[0].n);
            bad = 1;
        }
    return bad ? -1 : 0;
}

static int read_rest(plan_reader *r, plan *p, const plan_node *m) {
    if (m->kind != PN_MAP) {
        diag_add(r->d, DIAG_ERROR, m->loc, "'rest' maps places to the fields held between "
                 "shots, e.g. {sample: 5 uT}");
        return -1;
    }
    p->nrest = m->n;
    p->rest = arena_alloc(r->a, (m->n + 1) * sizeof *p->rest);
    if (!p->rest) return -1;
    int bad = 0;
    for (size_t i = 0; i < m->n; i++)
        bad |= plan_read_target(r, p, m->keys[i], m->items[i], &p->rest[i]);
    return bad ? -1 : 0;
}

static void warn_unused(plan_reader *r, const plan *p) {
    for (size_t i = 0; i < p->nvars; i++)
        if (!p->vars[i].used)
            diag_add(r->d, DIAG_WARNING, p->vars[i].loc,
                     "scan variable '%s' is not used by any step or let", p->vars[i].name);
    for (size_t i = 0; i < p->nlets; i++)
        if (!p->lets[i].used)
            diag_add(r->d, DIAG_WARNING, p->lets[i].loc,
                     "let '%s' is not used by any step or let", p->lets[i].name);
}

static int read_body(plan_reader *r, plan_scope *s, plan *p, const plan_node *root) {
    int bad = 0;
    const plan_node *v;
    if ((v = plan_node_get(root, "version"))) {
        if (v->kind != PN_SCALAR || strcmp(v->text, "1") != 0) {
            diag_add(r->d, DIAG_ERROR, v->loc, "'version' must be 1 (this precess reads "
                     "version 1 files), got '%s'", v->kind == PN_SCALAR ? v->text : "a collection");
            bad = 1;
        }
    }
    p->title = "";
    if ((v = plan_node_get(root, "title")) && !(p->title = plan_read_text(r, v, "title"))) {
        p->title = "";
        bad = 1;
    }
    int rig_ok = (v = plan_node_get(root, "rig")) && read_rig(r, p, v) == 0;
    bad |= !rig_ok;
    if ((v = plan_node_get(root, "vary"))) bad |= read_vary(r, p, v);
    bad |= check_together(r, p);
    if ((v = plan_node_get(root, "let"))) bad |= read_lets(r, s, p, v);
    bad |= read_sample(r, plan_node_get(root, "sample"), &p->sample);
    bad |= read_options(r, p, root);
    if ((v = plan_node_get(root, "reference"))) bad |= read_reference(r, p, v);
    if (!rig_ok) return -1;    /* names of the rig's parts cannot be checked */
    if ((v = plan_node_get(root, "rest"))) bad |= read_rest(r, p, v);
    if ((v = plan_node_get(root, "setup")))
        bad |= plan_read_steps(r, p, v, "setup", &p->setup, 0);
    if ((v = plan_node_get(root, "teardown")))
        bad |= plan_read_steps(r, p, v, "teardown", &p->teardown, 0);
    if ((v = plan_node_get(root, "shot"))) {
        bad |= plan_read_steps(r, p, v, "shot", &p->shot, 0);
        if (v->kind == PN_SEQ && v->n == 0) {
            diag_add(r->d, DIAG_ERROR, v->loc, "'shot' has no steps");
            bad = 1;
        }
    }
    p->analysis.against_var = p->analysis.against_current = p->analysis.per_var = -1;
    if ((v = plan_node_get(root, "analysis"))) bad |= read_analysis(r, p, v);
    warn_unused(r, p);
    return bad ? -1 : 0;
}

plan *plan_read_bytes(const char *file, const char *bytes, size_t len, diag_list *d) {
    arena *a = arena_new();
    if (!a) return NULL;
    plan *p = arena_alloc(a, sizeof *p);
    char *kept = arena_strndup(a, bytes, len);
    if (!p || !kept) {
        arena_free(a);
        return NULL;
    }
    p->arena = a;
    p->bytes = kept;
    p->nbytes = len;
    size_t errors = d->errors;
    plan_node *root = plan_yaml_parse(a, file, kept, len, d);
    if (!root) {
        arena_free(a);
        return NULL;
    }
    p->file = root->loc.file;
    plan_reader r;
    plan_scope s;
    plan_reader_init(&r, p, &s, d);
    plan_keys(&r, root, "the plan", plan_keys_known, plan_required);
    read_body(&r, &s, p, root);
    if (d->errors != errors) {
        arena_free(a);
        return NULL;
    }
    return p;
}

plan *plan_read_file(const char *path, diag_list *d) {
    char *bytes;
    size_t len;
    if (plan_slurp(path, &bytes, &len, d)) return NULL;
    plan *p = plan_read_bytes(path, bytes, len, d);
    free(bytes);
    return p;
}

void plan_free(plan *p) {
    if (p) arena_free(p->arena);
}

int plan_file_kind(const char *path, diag_list *d) {
    char *bytes;
    size_t len;
    if (plan_slurp(path, &bytes, &len, d)) return -1;
    arena *a = arena_new();
    plan_node *root = a ? plan_yaml_parse(a, path, bytes, len, d) : NULL;
    int kind = -1;
    if (root) {
        if (plan_node_get(root, "shot")) kind = 1;
        else if (plan_node_get(root, "coils") || plan_node_get(root, "inputs") ||
                 plan_node_get(root, "driver"))
            kind = 2;
        else kind = 0;
    }
    arena_free(a);
    free(bytes);
    return kind;
}
