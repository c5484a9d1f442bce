/* yaml_tree: libyaml's events turned into a tree of located nodes.
 * Keeps every node's file, line and column, mapping keys in written order,
 * refuses duplicate keys, deep nesting and alias bombs. Scalars stay text.
 * Not for interpreting keys (plan_read.c, rig_read.c). */
#include "plan.h"

#include <string.h>
#include <yaml.h>

typedef struct {
    const char *name;
    plan_node *node;
    size_t size;                /* nodes in its subtree */
} anchor;

typedef struct {
    plan_node *node;
    size_t size;                /* nodes so far in the subtree */
    size_t cap;
    plan_node *pending_key;     /* mappings: key awaiting its value */
    int discard;                /* the pending key was refused: drop its value */
} frame;

typedef struct {
    arena *a;
    const char *file;
    diag_list *d;
    const char *bytes;
    size_t len;
    frame stack[PLAN_MAX_DEPTH + 1];
    int depth;
    anchor *anchors;
    size_t nanchors, anchors_cap;
    size_t expanded;            /* nodes reachable, aliases counted in full */
    plan_node *root;
    int failed;
} builder;

static plan_loc at_mark(builder *b, yaml_mark_t m) {
    plan_loc l = {b->file, (int)m.line + 1, (int)m.column + 1};
    return l;
}

/* Line and column (in characters) of a byte offset, for reader errors. */
static plan_loc at_offset(builder *b, size_t off) {
    plan_loc l = {b->file, 1, 1};
    for (size_t i = 0; i < off && i < b->len; i++) {
        unsigned char c = (unsigned char)b->bytes[i];
        if (c == '\n') {
            l.line++;
            l.col = 1;
        } else if ((c & 0xC0) != 0x80) {
            l.col++;
        }
    }
    return l;
}

static int add_item(builder *b, frame *f, plan_node *child, yaml_mark_t m) {
    plan_node *n = f->node;
    (void)m;
    if (n->kind == PN_MAP && !f->pending_key && !f->discard) {
        /* A refused key is reported and its value dropped, so that reading
         * goes on and every other error of the file is found too. */
        if (child->kind != PN_SCALAR) {
            diag_add(b->d, DIAG_ERROR, child->loc,
                     "a mapping key must be a plain word, not a %s",
                     child->kind == PN_MAP ? "mapping" : "list");
            f->discard = 1;
            return 0;
        }
        for (size_t i = 0; i < n->n; i++) {
            if (strcmp(n->keys[i]->text, child->text) == 0) {
                diag_add(b->d, DIAG_ERROR, child->loc,
                         "duplicate key '%s' (first given at line %d, column %d)",
                         child->text, n->keys[i]->loc.line, n->keys[i]->loc.col);
                f->discard = 1;
                return 0;
            }
        }
        f->pending_key = child;
        return 0;
    }
    if (f->discard) {
        f->discard = 0;
        return 0;
    }
    if (n->n == f->cap) {
        size_t cap = f->cap ? f->cap * 2 : 8;
        n->items = arena_grow(b->a, n->items, f->cap * sizeof *n->items,
                              cap * sizeof *n->items);
        if (n->kind == PN_MAP)
            n->keys = arena_grow(b->a, n->keys, f->cap * sizeof *n->keys,
                                 cap * sizeof *n->keys);
        if (!n->items || (n->kind == PN_MAP && !n->keys)) return -1;
        f->cap = cap;
    }
    if (n->kind == PN_MAP) {
        n->keys[n->n] = f->pending_key;
        f->pending_key = NULL;
    }
    n->items[n->n++] = child;
    return 0;
}

/* Attach a finished node (size nodes) to its parent, or make it the root. */
static int attach(builder *b, plan_node *child, size_t size, yaml_mark_t m) {
    if (b->depth == 0) {
        if (b->root) {
            diag_add(b->d, DIAG_ERROR, child->loc,
                     "a file holds one YAML document; remove the second");
            return -1;
        }
        b->root = child;
        return 0;
    }
    frame *f = &b->stack[b->depth - 1];
    f->size += size;
    return add_item(b, f, child, m);
}

static int remember_anchor(builder *b, const unsigned char *name, plan_node *n,
                           size_t size) {
    if (!name) return 0;
    if (b->nanchors == b->anchors_cap) {
        size_t cap = b->anchors_cap ? b->anchors_cap * 2 : 8;
        b->anchors = arena_grow(b->a, b->anchors, b->anchors_cap * sizeof *b->anchors,
                                cap * sizeof *b->anchors);
        if (!b->anchors) return -1;
        b->anchors_cap = cap;
    }
    anchor *an = &b->anchors[b->nanchors++];
    an->name = arena_strdup(b->a, (const char *)name);
    an->node = n;
    an->size = size;
    return an->name ? 0 : -1;
}

static int on_alias(builder *b, yaml_event_t *ev) {
    const char *name = (const char *)ev->data.alias.anchor;
    plan_loc l = at_mark(b, ev->start_mark);
    for (size_t i = b->nanchors; i-- > 0;) {
        anchor *an = &b->anchors[i];
        if (strcmp(an->name, name) != 0) continue;
        b->expanded += an->size;
        if (b->expanded > PLAN_MAX_ALIAS_NODES) {
            diag_add(b->d, DIAG_ERROR, l,
                     "aliases expand past %d nodes; refusing to expand further",
                     PLAN_MAX_ALIAS_NODES);
            return -1;
        }
        return attach(b, an->node, an->size, ev->start_mark);
    }
    diag_add(b->d, DIAG_ERROR, l, "alias '*%s' names no anchor defined before it", name);
    return -1;
}

static int on_scalar(builder *b, yaml_event_t *ev) {
    plan_node *n = arena_alloc(b->a, sizeof *n);
    if (!n) return -1;
    n->kind = PN_SCALAR;
    n->loc = at_mark(b, ev->start_mark);
    n->len = ev->data.scalar.length;
    n->text = arena_strndup(b->a, (const char *)ev->data.scalar.value, n->len);
    if (!n->text) return -1;
    n->quoted = ev->data.scalar.style != YAML_PLAIN_SCALAR_STYLE;
    n->text_col = n->loc.col + (ev->data.scalar.style == YAML_SINGLE_QUOTED_SCALAR_STYLE ||
                                ev->data.scalar.style == YAML_DOUBLE_QUOTED_SCALAR_STYLE);
    b->expanded++;
    if (b->expanded > PLAN_MAX_ALIAS_NODES) {
        diag_add(b->d, DIAG_ERROR, n->loc, "more than %d nodes; refusing the file",
                 PLAN_MAX_ALIAS_NODES);
        return -1;
    }
    if (remember_anchor(b, ev->data.scalar.anchor, n, 1)) return -1;
    return attach(b, n, 1, ev->start_mark);
}

static int on_start(builder *b, yaml_event_t *ev, plan_node_kind kind) {
    plan_loc l = at_mark(b, ev->start_mark);
    if (b->depth >= PLAN_MAX_DEPTH) {
        diag_add(b->d, DIAG_ERROR, l, "nesting deeper than %d levels", PLAN_MAX_DEPTH);
        return -1;
    }
    plan_node *n = arena_alloc(b->a, sizeof *n);
    if (!n) return -1;
    n->kind = kind;
    n->loc = l;
    n->text = "";
    n->text_col = l.col;
    frame *f = &b->stack[b->depth++];
    memset(f, 0, sizeof *f);
    f->node = n;
    f->size = 1;
    b->expanded++;
    return 0;
}

static int on_end(builder *b, yaml_event_t *ev, const unsigned char *anchor_name) {
    frame f = b->stack[--b->depth];
    if (remember_anchor(b, anchor_name, f.node, f.size)) return -1;
    return attach(b, f.node, f.size, ev->start_mark);
}

static void syntax_error(builder *b, yaml_parser_t *p) {
    plan_loc l;
    if (p->error == YAML_READER_ERROR) {
        size_t off = p->problem_offset;
        const char *what = p->problem ? p->problem : "unreadable text";
        /* A broken multi-byte sequence is reported where it starts. */
        if (strstr(what, "trailing") || strstr(what, "incomplete")) {
            while (off > 0 && off < b->len && ((unsigned char)b->bytes[off] & 0xC0) != 0xC0)
                off--;
            if (off < b->len && ((unsigned char)b->bytes[off] & 0xC0) == 0xC0) {
                diag_add(b->d, DIAG_ERROR, at_offset(b, off),
                         "invalid UTF-8 sequence starting with byte 0x%02x; the file must "
                         "be UTF-8 text", (unsigned char)b->bytes[off]);
                return;
            }
        }
        l = at_offset(b, off);
        if (p->problem_value != -1)
            diag_add(b->d, DIAG_ERROR, l, "%s (byte 0x%02x); the file must be UTF-8 text",
                     what, p->problem_value & 0xff);
        else
            diag_add(b->d, DIAG_ERROR, l, "%s; the file must be UTF-8 text", what);
        return;
    }
    if (p->error == YAML_MEMORY_ERROR) {
        diag_add(b->d, DIAG_ERROR, (plan_loc){b->file, 0, 0}, "out of memory reading YAML");
        return;
    }
    l = at_mark(b, p->problem_mark);
    if (p->context)
        diag_add(b->d, DIAG_ERROR, l, "YAML syntax: %s %s (from line %d)", p->problem,
                 p->context, (int)p->context_mark.line + 1);
    else
        diag_add(b->d, DIAG_ERROR, l, "YAML syntax: %s", p->problem ? p->problem : "error");
}

/* Anchors of open collections, kept until their end event. */
typedef struct {
    unsigned char *name[PLAN_MAX_DEPTH + 1];
} open_anchors;

static int step(builder *b, yaml_event_t *ev, open_anchors *oa) {
    switch (ev->type) {
    case YAML_SCALAR_EVENT: return on_scalar(b, ev);
    case YAML_ALIAS_EVENT: return on_alias(b, ev);
    case YAML_SEQUENCE_START_EVENT:
    case YAML_MAPPING_START_EVENT: {
        int r = on_start(b, ev, ev->type == YAML_MAPPING_START_EVENT ? PN_MAP : PN_SEQ);
        const unsigned char *an = ev->type == YAML_MAPPING_START_EVENT
                                      ? ev->data.mapping_start.anchor
                                      : ev->data.sequence_start.anchor;
        if (r == 0 && an)
            oa->name[b->depth] = (unsigned char *)arena_strdup(b->a, (const char *)an);
        return r;
    }
    case YAML_SEQUENCE_END_EVENT:
    case YAML_MAPPING_END_EVENT: {
        unsigned char *an = oa->name[b->depth];
        oa->name[b->depth] = NULL;
        return on_end(b, ev, an);
    }
    default: return 0;
    }
}

plan_node *plan_yaml_parse(arena *a, const char *file, const char *bytes,
                           size_t len, diag_list *d) {
    builder b = {0};
    b.a = a;
    b.d = d;
    b.file = arena_strdup(a, file);
    b.bytes = bytes;
    b.len = len;
    if (!b.file) return NULL;
    if (len > PLAN_MAX_FILE_BYTES) {
        diag_add(d, DIAG_ERROR, (plan_loc){b.file, 0, 0},
                 "file is %zu bytes; plans and rigs are limited to %d bytes", len,
                 PLAN_MAX_FILE_BYTES);
        return NULL;
    }
    yaml_parser_t p;
    if (!yaml_parser_initialize(&p)) return NULL;
    yaml_parser_set_input_string(&p, (const unsigned char *)bytes, len);
    open_anchors oa = {{0}};
    int done = 0;
    while (!done) {
        yaml_event_t ev;
        if (!yaml_parser_parse(&p, &ev)) {
            syntax_error(&b, &p);
            b.failed = 1;
            break;
        }
        done = ev.type == YAML_STREAM_END_EVENT;
        if (step(&b, &ev, &oa)) b.failed = 1;
        yaml_event_delete(&ev);
        if (b.failed) break;
    }
    yaml_parser_delete(&p);
    if (b.failed) return NULL;
    if (!b.root || (b.root->kind == PN_SCALAR && b.root->len == 0)) {
        diag_add(d, DIAG_ERROR, (plan_loc){b.file, 1, 1},
                 "empty file: expected a plan (with shot:) or a rig (with coils:)");
        return NULL;
    }
    if (b.root->kind != PN_MAP) {
        diag_add(d, DIAG_ERROR, b.root->loc,
                 "expected a mapping of keys (version:, title:, ...) at the top of the file");
        return NULL;
    }
    return b.root;
}

const plan_node *plan_node_get(const plan_node *map, const char *key) {
    if (!map || map->kind != PN_MAP) return NULL;
    for (size_t i = 0; i < map->n; i++)
        if (strcmp(map->keys[i]->text, key) == 0) return map->items[i];
    return NULL;
}
