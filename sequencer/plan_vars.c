/* plan_vars: a plan's scan variables (vary) and let entries, and the scope
 * through which expressions see them, both while reading (point 1) and when
 * evaluating at any point. Not for expanding the scan (scan.c). */
#include "plan_internal.h"

#include <stdio.h>
#include <string.h>

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
    expr_node *e = plan_read_expr(r, n, key);
    if (!e) return -1;
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

int plan_read_vary(plan_reader *r, plan *p, const plan_node *m) {
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

int plan_read_lets(plan_reader *r, plan_scope *s, plan *p, const plan_node *m) {
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
        expr_error err;
        units_qty q;
        expr_node *e = plan_read_expr(r, v, k->text);
        if (!e) {
            bad = 1;
            continue;
        }
        if (expr_eval(e, r->lookup, s, &q, &err)) {
            const char *near = scope_suggest(s);
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

