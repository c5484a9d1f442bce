/* plan_keys: the checks every mapping and scalar of a plan or rig goes
 * through: known and required keys, quantities of the right dimension,
 * counts, booleans, choices, nuclei and names of the rig's parts.
 * Not for what a particular key means (plan_read.c, rig_read.c). */
#include "plan.h"

#include <errno.h>
#include <limits.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

plan_loc plan_loc_in(const plan_node *n, size_t pos) {
    plan_loc l = n->loc;
    l.col = n->text_col;
    for (size_t i = 0; i < pos && i < n->len; i++) {
        unsigned char c = (unsigned char)n->text[i];
        if (c == '\n') {
            l.line++;
            l.col = 1;
        } else if ((c & 0xC0) != 0x80) {
            l.col++;
        }
    }
    return l;
}

static size_t count_words(const char *const *w) {
    size_t n = 0;
    while (w && w[n]) n++;
    return n;
}

/* "a, b or c" for messages. */
static void join_words(const char *const *w, char *buf, size_t len) {
    size_t n = count_words(w), used = 0;
    buf[0] = '\0';
    for (size_t i = 0; i < n && used < len; i++) {
        const char *sep = i == 0 ? "" : i + 1 == n ? " or " : ", ";
        used += (size_t)snprintf(buf + used, len - used, "%s%s", sep, w[i]);
    }
}

static const char *kind_name(const plan_node *n) {
    return n->kind == PN_MAP ? "a mapping" : n->kind == PN_SEQ ? "a list" : "a value";
}

int plan_keys(plan_reader *r, const plan_node *n, const char *where,
              const char *const *known, const char *const *required) {
    if (n->kind != PN_MAP) {
        diag_add(r->d, DIAG_ERROR, n->loc, "%s must be a mapping of keys, got %s",
                 where, kind_name(n));
        return -1;
    }
    int bad = 0;
    size_t nknown = count_words(known);
    for (size_t i = 0; i < n->n; i++) {
        const char *k = n->keys[i]->text;
        size_t j = 0;
        while (j < nknown && strcmp(known[j], k) != 0) j++;
        if (j < nknown) continue;
        const char *near = diag_nearest(k, known, nknown);
        if (near)
            diag_add(r->d, DIAG_ERROR, n->keys[i]->loc,
                     "unknown key '%s' in %s; did you mean '%s'?", k, where, near);
        else {
            char list[512];
            join_words(known, list, sizeof list);
            diag_add(r->d, DIAG_ERROR, n->keys[i]->loc,
                     "unknown key '%s' in %s; known keys are %s", k, where, list);
        }
        bad = 1;
    }
    for (size_t j = 0; required && required[j]; j++) {
        if (plan_node_get(n, required[j])) continue;
        diag_add(r->d, DIAG_ERROR, n->loc, "%s needs '%s'", where, required[j]);
        bad = 1;
    }
    return bad ? -1 : 0;
}

static int want_scalar(plan_reader *r, const plan_node *n, const char *key) {
    if (n->kind == PN_SCALAR) return 0;
    diag_add(r->d, DIAG_ERROR, n->loc, "'%s' takes a single value, got %s", key,
             kind_name(n));
    return -1;
}

const char *plan_read_text(plan_reader *r, const plan_node *n, const char *key) {
    return want_scalar(r, n, key) ? NULL : n->text;
}

static int rig_lookup(void *ctx, const char *name, size_t len, units_qty *out) {
    (void)ctx;
    (void)name;
    (void)len;
    (void)out;
    return -1;
}

/* The message for a value of the wrong dimension. */
static void wrong_dimension(plan_reader *r, const plan_node *n, const char *key,
                            units_dim want, units_dim got) {
    char w[96], g[96];
    units_dim_describe(want, w, sizeof w);
    units_dim_describe(got, g, sizeof g);
    units_dim angular = units_dim_div(UNITS_ANGLE_DIM, UNITS_TIME);
    if (units_dim_eq(want, UNITS_FREQUENCY) && units_dim_eq(got, angular))
        diag_add(r->d, DIAG_ERROR, n->loc,
                 "'%s': expected %s, got %s; write frequencies in Hz (cycles per second)",
                 key, w, g);
    else
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s': expected %s, got %s", key, w, g);
}

expr_node *plan_read_expr(plan_reader *r, const plan_node *n, const char *key) {
    if (want_scalar(r, n, key)) return NULL;
    if (n->len == 0) {
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s' needs a value", key);
        return NULL;
    }
    expr_error err;
    expr_node *e = expr_parse(r->a, n->text, n->len, &err);
    if (!e) diag_add(r->d, DIAG_ERROR, plan_loc_in(n, err.pos), "'%s': %s", key, err.message);
    return e;
}

int plan_read_value(plan_reader *r, const plan_node *n, const char *key,
                    units_dim dim, plan_value *out) {
    memset(out, 0, sizeof *out);
    expr_node *e = plan_read_expr(r, n, key);
    if (!e) return -1;
    expr_error err;
    units_qty q;
    expr_lookup_fn fn = r->lookup ? r->lookup : rig_lookup;
    if (expr_eval(e, fn, r->lookup_ctx, &q, &err)) {
        if (!r->lookup && !expr_is_constant(e))
            diag_add(r->d, DIAG_ERROR, plan_loc_in(n, err.pos),
                     "'%s': a rig takes constants, not variables (%s)", key, err.message);
        else if (r->suggest && r->suggest(r->lookup_ctx))
            diag_add(r->d, DIAG_ERROR, plan_loc_in(n, err.pos), "'%s': %s; did you mean "
                     "'%s'?", key, err.message, r->suggest(r->lookup_ctx));
        else
            diag_add(r->d, DIAG_ERROR, plan_loc_in(n, err.pos), "'%s': %s", key,
                     err.message);
        return -1;
    }
    if (!units_dim_eq(q.dim, dim)) {
        wrong_dimension(r, n, key, dim, q.dim);
        return -1;
    }
    out->set = true;
    out->loc = n->loc;
    out->expr = e;
    out->text = n->text;
    out->dim = dim;
    out->value = q.value;
    return 0;
}

int plan_read_const(plan_reader *r, const plan_node *n, const char *key,
                    units_dim dim, double *out) {
    plan_value v;
    if (plan_read_value(r, n, key, dim, &v)) return -1;
    if (!expr_is_constant(v.expr)) {
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s' must be a constant, not an expression of "
                 "scan variables", key);
        return -1;
    }
    *out = v.value;
    return 0;
}

/* A plain whole number of at most 20 digits into *out; 0 or -1 (errors). */
static int read_whole(plan_reader *r, const plan_node *n, const char *key,
                      unsigned long long *out) {
    if (want_scalar(r, n, key)) return -1;
    int ok = n->len > 0 && !n->quoted;
    for (size_t i = 0; ok && i < n->len; i++) ok = n->text[i] >= '0' && n->text[i] <= '9';
    if (!ok) {
        diag_add(r->d, DIAG_ERROR, n->loc,
                 "'%s' is a count: a plain whole number such as 4, got '%s'", key, n->text);
        return -1;
    }
    errno = 0;
    *out = strtoull(n->text, NULL, 10);
    if (errno || n->len > 20) *out = ULLONG_MAX;
    return 0;
}

int plan_read_count(plan_reader *r, const plan_node *n, const char *key,
                    int min, int *out) {
    unsigned long long v;
    if (read_whole(r, n, key, &v)) return -1;
    if (v > INT_MAX) {
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s' is at most %d, got %s", key, INT_MAX, n->text);
        return -1;
    }
    *out = (int)v;
    if (*out < min) {
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s' must be at least %d, got %d", key, min, *out);
        return -1;
    }
    return 0;
}

int plan_read_seed(plan_reader *r, const plan_node *n, const char *key, unsigned long *out) {
    unsigned long long v;
    if (read_whole(r, n, key, &v)) return -1;
    if (v > 4294967295ULL) {
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s' is at most 4294967295 (32 bits), got %s", key,
                 n->text);
        return -1;
    }
    *out = (unsigned long)v;
    return 0;
}

int plan_read_bool(plan_reader *r, const plan_node *n, const char *key, bool *out) {
    if (want_scalar(r, n, key)) return -1;
    if (strcmp(n->text, "true") == 0 || strcmp(n->text, "false") == 0) {
        *out = n->text[0] == 't';
        return 0;
    }
    diag_add(r->d, DIAG_ERROR, n->loc, "'%s' is true or false, got '%s'", key, n->text);
    return -1;
}

int plan_read_choice(plan_reader *r, const plan_node *n, const char *key,
                     const char *const *choices, int *out) {
    if (want_scalar(r, n, key)) return -1;
    for (int i = 0; choices[i]; i++) {
        if (strcmp(choices[i], n->text) == 0) {
            *out = i;
            return 0;
        }
    }
    char list[256];
    join_words(choices, list, sizeof list);
    const char *near = diag_nearest(n->text, choices, count_words(choices));
    if (near)
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s' is %s, got '%s'; did you mean '%s'?", key,
                 list, n->text, near);
    else
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s' is %s, got '%s'", key, list, n->text);
    return -1;
}

const nuc_info *plan_read_nucleus(plan_reader *r, const plan_node *n, const char *key) {
    if (want_scalar(r, n, key)) return NULL;
    const nuc_info *nu = nuc_find(n->text, n->len);
    if (nu) return nu;
    size_t count;
    const nuc_info *t = nuc_table(&count);
    char list[256];
    size_t used = 0;
    list[0] = '\0';
    for (size_t i = 0; i < count && used < sizeof list; i++)
        used += (size_t)snprintf(list + used, sizeof list - used, "%s%s", i ? " " : "",
                                 t[i].token);
    diag_add(r->d, DIAG_ERROR, n->loc,
             "'%s': unknown nucleus '%s'; known nuclei are %s", key, n->text, list);
    return NULL;
}

int plan_read_ref(plan_reader *r, const plan_node *n, const char *kind, int *out) {
    if (want_scalar(r, n, kind)) return -1;
    size_t count = 0;
    const char **names = rig_names(r->a, r->rig, kind, &count);
    for (size_t i = 0; i < count; i++) {
        if (strcmp(names[i], n->text) == 0) {
            *out = (int)i;
            return 0;
        }
    }
    const char *near = names ? diag_nearest(n->text, names, count) : NULL;
    const char *rig = r->rig && r->rig->name ? r->rig->name : "the rig";
    const char *an = strchr("aeiou", kind[0]) ? "an" : "a";
    if (near)
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s' is not %s %s of rig %s; did you mean '%s'?",
                 n->text, an, kind, rig, near);
    else if (count == 0)
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s' is not %s %s of rig %s; it has no %ss",
                 n->text, an, kind, rig, kind);
    else {
        char list[512];
        size_t used = 0;
        list[0] = '\0';
        for (size_t i = 0; i < count && used < sizeof list; i++)
            used += (size_t)snprintf(list + used, sizeof list - used, "%s%s",
                                     i ? ", " : "", names[i]);
        diag_add(r->d, DIAG_ERROR, n->loc, "'%s' is not %s %s of rig %s; its %ss are %s",
                 n->text, an, kind, rig, kind, list);
    }
    return -1;
}
