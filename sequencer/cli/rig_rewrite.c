/* rig_rewrite: a copy of a rig file with some values replaced, through
 * libyaml's parser and emitter (events in, the same events out, with the
 * replaced scalars and sequences swapped in): the coil coefficients of one
 * place and that place's residual field. Comments are not carried over
 * (libyaml does not keep them); the caller writes its own header.
 * Not for deciding the new values (cmd_calibrate.c). */
#include "cli.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <yaml.h>

#define MAX_DEPTH 32

typedef struct {
    bool mapping;               /* else a sequence */
    bool expect_key;            /* mapping: the next node is a key */
    char key[128];              /* mapping: the key of the node being read */
} level;

typedef struct {
    const rig_changes *ch;
    yaml_emitter_t *em;
    level stack[MAX_DEPTH];
    int depth;
    bool residual_done, residual_place_seen;
    int failed;
} rewriter;

static int emit(rewriter *w, yaml_event_t *ev) {
    if (!w->failed && !yaml_emitter_emit(w->em, ev)) w->failed = 1;
    return w->failed ? -1 : 0;
}

static int emit_scalar(rewriter *w, const char *text) {
    yaml_event_t ev;
    yaml_scalar_event_initialize(&ev, NULL, NULL, (yaml_char_t *)text, (int)strlen(text), 1, 1,
                                 YAML_ANY_SCALAR_STYLE);
    return emit(w, &ev);
}

/* [x, y, z] as a flow sequence of quantities. */
static int emit_residual(rewriter *w) {
    yaml_event_t ev;
    yaml_sequence_start_event_initialize(&ev, NULL, NULL, 1, YAML_FLOW_SEQUENCE_STYLE);
    emit(w, &ev);
    for (int i = 0; i < 3; i++) emit_scalar(w, w->ch->residual_text[i]);
    yaml_sequence_end_event_initialize(&ev);
    return emit(w, &ev);
}

/* The path of the node about to be read: keys of the enclosing mappings. */
static bool at(const rewriter *w, const char *a, const char *b, const char *c) {
    const char *want[3] = {a, b, c};
    int n = c ? 3 : b ? 2 : 1;
    if (w->depth != n) return false;
    for (int i = 0; i < n; i++)
        if (!w->stack[i].mapping || w->stack[i].expect_key || strcmp(w->stack[i].key, want[i]))
            return false;
    return true;
}

/* A replacement coefficient for places.PLACE.COIL, or NULL. */
static const char *coefficient(const rewriter *w) {
    const rig_changes *ch = w->ch;
    if (w->depth != 3 || !at(w, "places", ch->place, w->stack[2].key)) return NULL;
    for (size_t i = 0; i < ch->ncoils; i++)
        if (strcmp(ch->coil[i], w->stack[2].key) == 0) return ch->coefficient_text[i];
    return NULL;
}

/* Skips the node whose first event was ev (already taken), with its children. */
static int skip_node(yaml_parser_t *p, yaml_event_t *ev) {
    int depth = ev->type == YAML_SEQUENCE_START_EVENT || ev->type == YAML_MAPPING_START_EVENT;
    yaml_event_delete(ev);
    while (depth > 0) {
        yaml_event_t e;
        if (!yaml_parser_parse(p, &e)) return -1;
        if (e.type == YAML_SEQUENCE_START_EVENT || e.type == YAML_MAPPING_START_EVENT) depth++;
        if (e.type == YAML_SEQUENCE_END_EVENT || e.type == YAML_MAPPING_END_EVENT) depth--;
        yaml_event_delete(&e);
    }
    return 0;
}

/* After a node: the enclosing mapping expects a key again. */
static void node_done(rewriter *w) {
    if (w->depth > 0 && w->stack[w->depth - 1].mapping) w->stack[w->depth - 1].expect_key = true;
}

static int on_mapping_end(rewriter *w, yaml_event_t *ev) {
    /* residual: with no entry for the place, or no residual: at all. */
    if (w->depth == 2 && w->stack[0].mapping && strcmp(w->stack[0].key, "residual") == 0 &&
        !w->residual_done) {
        emit_scalar(w, w->ch->place);
        emit_residual(w);
        w->residual_done = true;
    }
    if (w->depth == 1 && !w->residual_done) {
        yaml_event_t m;
        emit_scalar(w, "residual");
        yaml_mapping_start_event_initialize(&m, NULL, NULL, 1, YAML_FLOW_MAPPING_STYLE);
        emit(w, &m);
        emit_scalar(w, w->ch->place);
        emit_residual(w);
        yaml_mapping_end_event_initialize(&m);
        emit(w, &m);
        w->residual_done = true;
    }
    w->depth--;
    emit(w, ev);
    node_done(w);
    return w->failed ? -1 : 0;
}

static int on_event(rewriter *w, yaml_parser_t *p, yaml_event_t *ev) {
    level *top = w->depth ? &w->stack[w->depth - 1] : NULL;
    switch (ev->type) {
    case YAML_SCALAR_EVENT:
        if (top && top->mapping && top->expect_key) {
            snprintf(top->key, sizeof top->key, "%s", (const char *)ev->data.scalar.value);
            top->expect_key = false;
            return emit(w, ev);
        }
        break;
    case YAML_MAPPING_END_EVENT:
        return on_mapping_end(w, ev);
    case YAML_SEQUENCE_END_EVENT:
        w->depth--;
        emit(w, ev);
        node_done(w);
        return w->failed ? -1 : 0;
    default:
        break;
    }
    /* A node (value or sequence item) starts here. */
    const char *coef = coefficient(w);
    if (coef || at(w, "residual", w->ch->place, NULL)) {
        if (skip_node(p, ev) != 0) return -1;
        if (coef) emit_scalar(w, coef);
        else emit_residual(w), w->residual_done = true;
        node_done(w);
        return w->failed ? -1 : 0;
    }
    if (ev->type == YAML_MAPPING_START_EVENT || ev->type == YAML_SEQUENCE_START_EVENT) {
        if (w->depth == MAX_DEPTH) return -1;
        w->stack[w->depth++] = (level){.mapping = ev->type == YAML_MAPPING_START_EVENT,
                                       .expect_key = true};
        return emit(w, ev);
    }
    int rc = emit(w, ev);
    if (ev->type == YAML_SCALAR_EVENT || ev->type == YAML_ALIAS_EVENT) node_done(w);
    return rc;
}

static int write_out(void *data, unsigned char *buffer, size_t size) {
    return fwrite(buffer, 1, size, data) == size;
}

int rig_rewrite(const char *bytes, size_t len, FILE *out, const rig_changes *ch, char *err,
                size_t errlen) {
    yaml_parser_t p;
    yaml_emitter_t em;
    yaml_parser_initialize(&p);
    yaml_emitter_initialize(&em);
    yaml_parser_set_input_string(&p, (const unsigned char *)bytes, len);
    yaml_emitter_set_output(&em, write_out, out);
    yaml_emitter_set_unicode(&em, 1);
    yaml_emitter_set_width(&em, -1);   /* no line is folded */
    rewriter w = {.ch = ch, .em = &em};
    int rc = 0;
    for (bool done = false; !done && rc == 0;) {
        yaml_event_t ev;
        if (!yaml_parser_parse(&p, &ev)) {
            snprintf(err, errlen, "line %zu: %s", p.problem_mark.line + 1,
                     p.problem ? p.problem : "YAML error");
            rc = -1;
            break;
        }
        done = ev.type == YAML_STREAM_END_EVENT;
        rc = on_event(&w, &p, &ev);
    }
    if (rc == 0 && w.failed) rc = -1;
    if (rc != 0 && !err[0])
        snprintf(err, errlen, "%s", em.problem ? em.problem : "the rig could not be rewritten");
    yaml_parser_delete(&p);
    yaml_emitter_delete(&em);
    return rc;
}
