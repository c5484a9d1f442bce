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
    if ((v = plan_node_get(m, "line_noise"))) {
        int rc = plan_read_const(r, v, "line_noise", UNITS_FREQUENCY, &p->analysis.line_noise);
        if (rc == 0 && !(p->analysis.line_noise > 0)) {
            diag_add(r->d, DIAG_ERROR, v->loc, "'line_noise' must be greater than zero");
            rc = -1;
        }
        bad |= rc;
    }
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
        p->rig_path = NULL;
        p->rig.file = p->file;
        return rig_read_node(r->a, n, &p->rig, r->d);
    }
    const char *path = plan_read_text(r, n, "rig");
    if (!path) return -1;
    const char *slash = strrchr(p->file, '/');
    char *full;
    if (p->rig_path) {          /* a run folder's own copy, given by the caller */
        full = arena_strdup(r->a, p->rig_path);
    } else if (path[0] == '/' || !slash) {
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
        bad |= plan_read_seed(r, v, "seed", &p->seed);
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
            p->max_duration_loc = v->loc;
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

/* A plan without a title is named after its file ("t1-series.yaml" gives
 * "t1-series"). */
static const char *untitled(arena *a, const char *file) {
    const char *base = strrchr(file, '/');
    base = base ? base + 1 : file;
    const char *dot = strrchr(base, '.');
    return arena_strndup(a, base, dot && dot != base ? (size_t)(dot - base) : strlen(base));
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
    p->title = untitled(r->a, p->file);
    if ((v = plan_node_get(root, "title")) && !(p->title = plan_read_text(r, v, "title"))) {
        p->title = "";
        bad = 1;
    }
    int rig_ok = (v = plan_node_get(root, "rig")) && read_rig(r, p, v) == 0;
    bad |= !rig_ok;
    if ((v = plan_node_get(root, "vary"))) bad |= plan_read_vary(r, p, v);
    if ((v = plan_node_get(root, "let"))) bad |= plan_read_lets(r, s, p, v);
    bad |= plan_read_sample(r, plan_node_get(root, "sample"), &p->sample);
    bad |= read_options(r, p, root);
    bad |= check_together(r, p);
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

static plan *read_bytes(const char *file, const char *bytes, size_t len, const char *rig_path,
                        diag_list *d) {
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
    p->rig_path = rig_path;     /* read_rig copies it into the arena */
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

plan *plan_read_bytes(const char *file, const char *bytes, size_t len, diag_list *d) {
    return read_bytes(file, bytes, len, NULL, d);
}

plan *plan_read_with_rig(const char *path, const char *rig_path, diag_list *d) {
    char *bytes;
    size_t len;
    if (plan_slurp(path, &bytes, &len, d)) return NULL;
    plan *p = read_bytes(path, bytes, len, rig_path, d);
    free(bytes);
    return p;
}

plan *plan_read_file(const char *path, diag_list *d) {
    return plan_read_with_rig(path, NULL, d);
}

void plan_free(plan *p) {
    if (p) arena_free(p->arena);
}

int plan_file_kind(const char *path, diag_list *d) {
    char *bytes;
    size_t len;
    if (plan_slurp(path, &bytes, &len, d)) return -1;
    arena *a = arena_new();
    /* Errors that do not hide the kind are left to the full read. */
    diag_list own;
    diag_init(&own);
    plan_node *root = a ? plan_yaml_parse(a, path, bytes, len, &own) : NULL;
    for (size_t i = 0; !root && i < own.n; i++) {
        diag *g = &own.items[i];
        diag_add(d, g->severity, (plan_loc){g->file, g->line, g->col}, "%s", g->message);
    }
    diag_free(&own);
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
