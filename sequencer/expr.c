/* expr: parses the plan language's scalar expressions into a small tree
 * (recursive descent) and evaluates them with dimension checking.
 * Not for units themselves (units.c reads "mT/A") nor for the nuclei table
 * (nuclei.c), nor for knowing what dimension a key expects. */
#include "expr.h"

#include <math.h>
#include <stdarg.h>
#include <stdbool.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define PI 3.14159265358979323846
#define MAX_DEPTH 200      /* nesting of parentheses and signs */
#define MAX_EXPONENT 60    /* |n| in x^n */
#define MAX_HEIGHT 1000    /* tree height, which bounds evaluation's recursion */

typedef enum { N_NUM, N_VAR, N_NEG, N_ADD, N_SUB, N_MUL, N_DIV, N_POW, N_CALL } node_kind;
typedef enum { F_SQRT, F_EXP, F_LOG, F_ABS, F_MIN, F_MAX, F_LARMOR, F_FIELD_FOR } func_id;

struct expr_node {
    node_kind kind;
    size_t pos;            /* the token an error points at */
    size_t start;          /* where the subexpression begins */
    unsigned height;       /* 1 for a leaf */
    double number, scale, offset;   /* N_NUM: value = number * scale + offset */
    size_t num_start, num_len;      /* N_NUM: the number's text, while parsing */
    units_dim dim;
    bool literal;          /* N_NUM written as a number: a sign folds into it */
    char *name;            /* N_VAR, copied into the arena */
    size_t len;
    expr_node *left, *right;
    func_id func;          /* N_CALL */
    const nuc_info *nucleus;
    expr_node **args;
    size_t nargs;
};

static const struct {
    const char *name;
    func_id id;
    size_t min_args, max_args;   /* larmor and field_for: after the nucleus */
} FUNCS[] = {   /* in func_id order: FUNCS[id].id == id */
    {"sqrt", F_SQRT, 1, 1}, {"exp", F_EXP, 1, 1}, {"log", F_LOG, 1, 1},
    {"abs", F_ABS, 1, 1}, {"min", F_MIN, 2, (size_t)-1}, {"max", F_MAX, 2, (size_t)-1},
    {"larmor", F_LARMOR, 1, 1}, {"field_for", F_FIELD_FOR, 1, 1},
};

#define FUNC_COUNT (sizeof FUNCS / sizeof FUNCS[0])

static int find_func(const char *s, size_t len) {
    for (size_t i = 0; i < FUNC_COUNT; i++)
        if (strlen(FUNCS[i].name) == len && memcmp(FUNCS[i].name, s, len) == 0) return (int)i;
    return -1;
}

static bool is_digit(char c) { return c >= '0' && c <= '9'; }
static bool is_lower_name_char(char c) { return (c >= 'a' && c <= 'z') || c == '_' || is_digit(c); }
static bool is_ident_start(char c) { return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || c == '_'; }
static bool is_ident_char(char c) { return is_ident_start(c) || is_digit(c); }
/* Letters and UTF-8 bytes (µ, Ω) begin a unit after a number. */
static bool is_unit_start(char c) { return is_ident_start(c) || (unsigned char)c >= 0x80; }
static bool is_unit_char(char c) { return is_unit_start(c) || is_digit(c); }

static bool is_var_pattern(const char *s, size_t len) {
    if (len == 0 || is_digit(s[0])) return false;
    for (size_t i = 0; i < len; i++)
        if (!is_lower_name_char(s[i])) return false;
    return true;
}

int expr_name_allowed(const char *name, size_t len) {
    return is_var_pattern(name, len) && !units_is_unit_word(name, len) &&
           find_func(name, len) < 0 && !(len == 2 && memcmp(name, "pi", 2) == 0);
}

#if defined(__GNUC__)
#define PRINTF_LIKE(f, a) __attribute__((format(printf, f, a)))
#else
#define PRINTF_LIKE(f, a)
#endif

/* ---- parsing ------------------------------------------------------------ */

typedef struct {
    arena *a;
    const char *s;
    size_t len, pos;
    expr_error *err;
    int depth;
    bool failed;
} parser;

PRINTF_LIKE(3, 4)
static expr_node *parse_fail(parser *p, size_t pos, const char *fmt, ...) {
    if (p->failed) return NULL;   /* keep the first, innermost error */
    p->failed = true;
    if (p->err) {
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(p->err->message, sizeof p->err->message, fmt, ap);
        va_end(ap);
        p->err->pos = pos;
    }
    return NULL;
}

static void skip_spaces(parser *p) {
    while (p->pos < p->len && (p->s[p->pos] == ' ' || p->s[p->pos] == '\t')) p->pos++;
}

static bool at(parser *p, char c) { return p->pos < p->len && p->s[p->pos] == c; }

static expr_node *new_node(parser *p, node_kind kind, size_t pos) {
    expr_node *n = arena_alloc(p->a, sizeof *n);
    if (!n) return parse_fail(p, pos, "out of memory");
    n->kind = kind;
    n->pos = n->start = pos;
    n->height = 1;
    return n;
}

static unsigned height_of(const expr_node *n) { return n ? n->height : 0; }

/* Sets n's height from its children; refuses trees too deep to evaluate. */
static expr_node *finish(parser *p, expr_node *n) {
    unsigned h = height_of(n->left);
    if (height_of(n->right) > h) h = height_of(n->right);
    for (size_t i = 0; i < n->nargs; i++)
        if (height_of(n->args[i]) > h) h = height_of(n->args[i]);
    n->height = h + 1;
    if (n->height > MAX_HEIGHT)
        return parse_fail(p, n->pos, "expression too long; split it into let names");
    return n;
}

/* Length of the word at pos for messages: a name, or one character. */
static int token_length(parser *p, size_t pos) {
    size_t i = pos;
    while (i < p->len && is_unit_char(p->s[i])) i++;
    if (i == pos) {
        i++;
        while (i < p->len && ((unsigned char)p->s[i] & 0xC0) == 0x80) i++;
    }
    return (int)(i - pos);
}

static expr_node *parse_sum(parser *p);
static expr_node *parse_unary(parser *p);

/* Where a unit written right after a number ends: words joined by '*' or
 * '/' with no spaces, each with an optional "^n". */
static size_t unit_end(parser *p, size_t i) {
    for (;;) {
        while (i < p->len && is_unit_char(p->s[i])) i++;
        if (i < p->len && p->s[i] == '^') {
            size_t j = i + 1;
            if (j < p->len && (p->s[j] == '-' || p->s[j] == '+')) j++;
            if (j >= p->len || !is_digit(p->s[j])) return i;
            while (j < p->len && is_digit(p->s[j])) j++;
            i = j;
        }
        if (i + 1 < p->len && (p->s[i] == '*' || p->s[i] == '/') && is_unit_start(p->s[i + 1])) {
            i++;
            continue;
        }
        return i;
    }
}

/* The unit after a number, if any, into n. */
static expr_node *parse_unit(parser *p, expr_node *n) {
    size_t save = p->pos;
    skip_spaces(p);
    if (p->pos >= p->len || !is_unit_start(p->s[p->pos])) {
        p->pos = save;
        return n;
    }
    size_t start = p->pos, end = unit_end(p, start), sub = 0;
    expr_error ue;
    if (units_parse_unit(p->s + start, end - start, &n->scale, &n->offset, &n->dim,
                         ue.message, sizeof ue.message, &sub) < 0) {
        /* "2 x": a lone lower-case word is more likely a name than a unit */
        if (is_var_pattern(p->s + start, end - start) &&
            strncmp(ue.message, "unknown unit", 12) == 0)
            return parse_fail(p, start, "%s (to multiply by a name, write '*' between them)",
                              ue.message);
        return parse_fail(p, start + sub, "%s", ue.message);
    }
    /* Fold a power-of-ten scale into the written number: 5 uT is 5e-6. */
    n->number = units_scale_text(p->s + n->num_start, n->num_len, n->scale);
    n->scale = 1;
    p->pos = end;
    return n;
}

static expr_node *parse_number(parser *p) {
    size_t start = p->pos, i = start;
    while (i < p->len && is_digit(p->s[i])) i++;
    if (i < p->len && p->s[i] == '.') i++;
    while (i < p->len && is_digit(p->s[i])) i++;
    if (i < p->len && (p->s[i] == 'e' || p->s[i] == 'E')) {
        size_t j = i + 1;
        if (j < p->len && (p->s[j] == '-' || p->s[j] == '+')) j++;
        if (j < p->len && is_digit(p->s[j])) {
            while (j < p->len && is_digit(p->s[j])) j++;
            i = j;
        }
    }
    char buf[64];
    if (i - start >= sizeof buf) return parse_fail(p, start, "number too long");
    memcpy(buf, p->s + start, i - start);
    buf[i - start] = '\0';
    expr_node *n = new_node(p, N_NUM, start);
    if (!n) return NULL;
    n->number = strtod(buf, NULL);
    if (!isfinite(n->number)) return parse_fail(p, start, "number out of range");
    n->scale = 1;
    n->num_start = start;
    n->num_len = i - start;
    n->literal = true;
    p->pos = i;
    return parse_unit(p, n);
}

/* The nucleus that is larmor's or field_for's first argument. */
static const nuc_info *parse_nucleus(parser *p, const char *fname) {
    skip_spaces(p);
    size_t start = p->pos, i = start;
    while (i < p->len && is_ident_char(p->s[i])) i++;
    if (!nuc_is_token(p->s + start, i - start)) {
        parse_fail(p, start, "%s needs a nucleus such as 1H or 13C as its first argument", fname);
        return NULL;
    }
    const nuc_info *nuc = nuc_find(p->s + start, i - start);
    if (!nuc) {
        parse_fail(p, start, "unknown nucleus '%.*s'", (int)(i - start), p->s + start);
        return NULL;
    }
    p->pos = i;
    skip_spaces(p);
    if (!at(p, ',')) {
        parse_fail(p, p->pos, "expected ',' after the nucleus in %s(...)", fname);
        return NULL;
    }
    p->pos++;
    return nuc;
}

static bool push_arg(parser *p, expr_node *call, expr_node *arg, size_t *cap) {
    if (call->nargs == *cap) {
        size_t ncap = *cap ? *cap * 2 : 4;
        expr_node **grown = arena_grow(p->a, call->args, *cap * sizeof *grown, ncap * sizeof *grown);
        if (!grown) {
            parse_fail(p, arg->start, "out of memory");
            return false;
        }
        call->args = grown;
        *cap = ncap;
    }
    call->args[call->nargs++] = arg;
    return true;
}

static expr_node *check_arity(parser *p, expr_node *call, int f) {
    const char *name = FUNCS[f].name;
    size_t n = call->nargs;
    if (call->func == F_LARMOR && n != 1)
        return parse_fail(p, call->pos, "larmor takes a nucleus and a field, as in larmor(1H, 2 mT)");
    if (call->func == F_FIELD_FOR && n != 1)
        return parse_fail(p, call->pos,
                          "field_for takes a nucleus and a frequency, as in field_for(1H, 850 Hz)");
    if (FUNCS[f].max_args == 1 && n != 1)
        return parse_fail(p, call->pos, "%s takes one argument, got %zu", name, n);
    if (n < FUNCS[f].min_args)
        return parse_fail(p, call->pos, "%s takes two or more arguments, got %zu", name, n);
    return finish(p, call);
}

/* name( ... ): p->pos is just past '('. */
static expr_node *parse_call(parser *p, int f, size_t name_pos, size_t open_pos) {
    expr_node *call = new_node(p, N_CALL, name_pos);
    if (!call) return NULL;
    call->func = FUNCS[f].id;
    if (call->func == F_LARMOR || call->func == F_FIELD_FOR) {
        call->nucleus = parse_nucleus(p, FUNCS[f].name);
        if (!call->nucleus) return NULL;
    }
    size_t cap = 0;
    skip_spaces(p);
    if (at(p, ')') && call->func != F_LARMOR && call->func != F_FIELD_FOR) {
        p->pos++;
        return check_arity(p, call, f);
    }
    for (;;) {
        expr_node *arg = parse_sum(p);
        if (!arg || !push_arg(p, call, arg, &cap)) return NULL;
        skip_spaces(p);
        if (at(p, ',')) {
            p->pos++;
            continue;
        }
        if (at(p, ')')) break;
        if (p->pos >= p->len) return parse_fail(p, open_pos, "unclosed '(' of %s", FUNCS[f].name);
        return parse_fail(p, p->pos, "expected ',' or ')' before '%.*s'",
                          token_length(p, p->pos), p->s + p->pos);
    }
    p->pos++;
    return check_arity(p, call, f);
}

/* A name: a function call, pi, or a variable. */
static expr_node *parse_name(parser *p) {
    size_t start = p->pos, end = start;
    while (end < p->len && is_ident_char(p->s[end])) end++;
    const char *w = p->s + start;
    size_t len = end - start;
    int wl = (int)len;
    int f = find_func(w, len);
    p->pos = end;
    if (at(p, '(')) {
        if (f < 0) return parse_fail(p, start, "unknown function '%.*s'", wl, w);
        p->pos++;
        return parse_call(p, f, start, end);
    }
    skip_spaces(p);
    bool paren_after_space = at(p, '(');
    p->pos = end;
    if (f >= 0 && FUNCS[f].id == F_MIN && paren_after_space)
        return parse_fail(p, start, "to call the function write 'min(' with no space; "
                          "alone, 'min' is the minute");
    if (f >= 0 && paren_after_space) {
        skip_spaces(p);
        p->pos++;
        return parse_call(p, f, start, p->pos - 1);
    }
    if (len == 2 && memcmp(w, "pi", 2) == 0) {
        expr_node *n = new_node(p, N_NUM, start);
        if (n) n->number = PI, n->scale = 1;
        return n;
    }
    if (units_is_unit_word(w, len))
        return parse_fail(p, start, "'%.*s' is a unit: write a number before it, as in '1 %.*s'",
                          wl, w, wl, w);
    if (f >= 0) return parse_fail(p, start, "'%.*s' is a function: write %.*s(...)", wl, w, wl, w);
    if (!is_var_pattern(w, len))
        return parse_fail(p, start, "'%.*s' is not a valid name: names use lower-case letters, "
                          "digits and '_'", wl, w);
    expr_node *n = new_node(p, N_VAR, start);
    if (!n) return NULL;
    n->name = arena_strndup(p->a, w, len);
    n->len = len;
    return n->name ? n : parse_fail(p, start, "out of memory");
}

static expr_node *parse_primary(parser *p) {
    skip_spaces(p);
    if (p->pos >= p->len) return parse_fail(p, p->pos, "expected a value at the end of the expression");
    char c = p->s[p->pos];
    if (is_digit(c) || (c == '.' && p->pos + 1 < p->len && is_digit(p->s[p->pos + 1])))
        return parse_number(p);
    if (is_ident_start(c)) return parse_name(p);
    if (c == '(') {
        size_t open = p->pos++;
        expr_node *inner = parse_sum(p);
        if (!inner) return NULL;
        skip_spaces(p);
        if (p->pos >= p->len) return parse_fail(p, open, "unclosed '('");
        if (!at(p, ')'))
            return parse_fail(p, p->pos, "expected an operator or ')' before '%.*s'",
                              token_length(p, p->pos), p->s + p->pos);
        p->pos++;
        inner->literal = false;   /* -(20 degC) negates the kelvins */
        inner->start = open;
        return inner;
    }
    if (strchr("+-*/^", c))
        return parse_fail(p, p->pos, "expected a value before '%c'", c);
    return parse_fail(p, p->pos, "unexpected '%.*s'", token_length(p, p->pos), p->s + p->pos);
}

/* primary ('^' unary)?: right-associative, tighter than a leading sign. */
static expr_node *parse_power(parser *p) {
    expr_node *base = parse_primary(p);
    if (!base) return NULL;
    skip_spaces(p);
    if (!at(p, '^')) return base;
    expr_node *n = new_node(p, N_POW, p->pos++);
    if (!n) return NULL;
    n->start = base->start;
    n->left = base;
    n->right = parse_unary(p);
    return n->right ? finish(p, n) : NULL;
}

static expr_node *parse_unary(parser *p) {
    if (++p->depth > MAX_DEPTH) return parse_fail(p, p->pos, "expression nested too deeply");
    skip_spaces(p);
    expr_node *n;
    if (at(p, '-') || at(p, '+')) {
        size_t op = p->pos++;
        bool minus = p->s[op] == '-';
        expr_node *operand = parse_unary(p);
        if (!operand || !minus) {
            n = operand;
        } else if (operand->kind == N_NUM && operand->literal) {
            operand->number = -operand->number;   /* -10 degC is 263.15 K */
            operand->start = operand->pos = op;
            n = operand;
        } else if ((n = new_node(p, N_NEG, op)) != NULL) {
            n->left = operand;
            n = finish(p, n);
        }
    } else {
        n = parse_power(p);
    }
    p->depth--;
    return n;
}

static expr_node *parse_binary(parser *p, const char *ops, expr_node *(*next)(parser *)) {
    expr_node *left = next(p);
    for (;;) {
        if (!left) return NULL;
        skip_spaces(p);
        if (p->pos >= p->len || !strchr(ops, p->s[p->pos])) return left;
        char c = p->s[p->pos];
        node_kind k = c == '+' ? N_ADD : c == '-' ? N_SUB : c == '*' ? N_MUL : N_DIV;
        expr_node *n = new_node(p, k, p->pos++);
        if (!n) return NULL;
        n->start = left->start;
        n->left = left;
        n->right = next(p);
        left = n->right ? finish(p, n) : NULL;
    }
}

static expr_node *parse_product(parser *p) { return parse_binary(p, "*/", parse_unary); }
static expr_node *parse_sum(parser *p) { return parse_binary(p, "+-", parse_product); }

expr_node *expr_parse(arena *a, const char *text, size_t len, expr_error *err) {
    parser p = {a, text, len, 0, err, 0, false};
    skip_spaces(&p);
    if (p.pos >= len) return parse_fail(&p, 0, "empty expression");
    expr_node *e = parse_sum(&p);
    if (!e) return NULL;
    skip_spaces(&p);
    if (p.pos < len) {
        if (at(&p, ')')) return parse_fail(&p, p.pos, "unmatched ')'");
        return parse_fail(&p, p.pos, "expected an operator before '%.*s'",
                          token_length(&p, p.pos), text + p.pos);
    }
    return e;
}

/* ---- evaluation --------------------------------------------------------- */

typedef struct {
    expr_lookup_fn lookup;
    void *ctx;
    expr_error *err;
} evaluator;

static int eval_node(const expr_node *e, const evaluator *ev, units_qty *out);

PRINTF_LIKE(3, 4)
static int eval_fail(const evaluator *ev, size_t pos, const char *fmt, ...) {
    if (ev->err) {
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(ev->err->message, sizeof ev->err->message, fmt, ap);
        va_end(ap);
        ev->err->pos = pos;
    }
    return -1;
}

#define DESCRIBE(d, buf) units_dim_describe((d), (buf), sizeof (buf))

/* a * b or a / b of dimensions, refusing exponents that would not fit. */
static bool combine_dims(units_dim a, units_dim b, int sign, units_dim *out) {
    for (int i = 0; i < UNITS_NDIM; i++) {
        int t = a.twice[i] + sign * b.twice[i];
        if (t > 127 || t < -127) return false;
    }
    *out = sign > 0 ? units_dim_mul(a, b) : units_dim_div(a, b);
    return true;
}

static int eval_additive(const expr_node *e, units_qty l, units_qty r, const evaluator *ev,
                         units_qty *out) {
    char da[96], db[96];
    if (!units_dim_eq(l.dim, r.dim)) {
        if (e->kind == N_ADD)
            return eval_fail(ev, e->pos, "cannot add %s and %s", DESCRIBE(l.dim, da),
                             DESCRIBE(r.dim, db));
        return eval_fail(ev, e->pos, "cannot subtract %s from %s", DESCRIBE(r.dim, db),
                         DESCRIBE(l.dim, da));
    }
    out->value = e->kind == N_ADD ? l.value + r.value : l.value - r.value;
    out->dim = l.dim;
    return 0;
}

static int eval_power(const expr_node *e, units_qty b, units_qty x, const evaluator *ev,
                      units_qty *out) {
    char d[96];
    size_t xpos = e->right->start;
    if (!units_dim_is_none(x.dim))
        return eval_fail(ev, xpos, "exponent must be an integer, got %s", DESCRIBE(x.dim, d));
    if (x.value != floor(x.value)) return eval_fail(ev, xpos, "exponent must be an integer");
    if (fabs(x.value) > MAX_EXPONENT)
        return eval_fail(ev, xpos, "exponent too large (at most %d)", MAX_EXPONENT);
    int n = (int)x.value;
    if (!units_dim_pow(b.dim, 2 * n, &out->dim))
        return eval_fail(ev, xpos, "exponent too large for %s", DESCRIBE(b.dim, d));
    out->value = pow(b.value, n);
    return 0;
}

static int eval_binary(const expr_node *e, const evaluator *ev, units_qty *out) {
    units_qty l, r;
    if (eval_node(e->left, ev, &l) < 0 || eval_node(e->right, ev, &r) < 0) return -1;
    switch (e->kind) {
    case N_ADD:
    case N_SUB:
        return eval_additive(e, l, r, ev, out);
    case N_POW:
        return eval_power(e, l, r, ev, out);
    case N_DIV:
        if (r.value == 0) return eval_fail(ev, e->pos, "division by zero");
        if (!combine_dims(l.dim, r.dim, -1, &out->dim))
            return eval_fail(ev, e->pos, "unit exponents grow too large");
        out->value = l.value / r.value;
        return 0;
    default:
        if (!combine_dims(l.dim, r.dim, 1, &out->dim))
            return eval_fail(ev, e->pos, "unit exponents grow too large");
        out->value = l.value * r.value;
        return 0;
    }
}

/* min or max over all arguments, which must share one dimension. */
static int eval_extremum(const expr_node *e, const evaluator *ev, units_qty *out) {
    const char *name = e->func == F_MIN ? "min" : "max";
    char da[96], db[96];
    for (size_t i = 0; i < e->nargs; i++) {
        units_qty v;
        if (eval_node(e->args[i], ev, &v) < 0) return -1;
        if (i == 0) {
            *out = v;
            continue;
        }
        if (!units_dim_eq(v.dim, out->dim))
            return eval_fail(ev, e->args[i]->start, "%s needs arguments of one dimension: "
                             "%s, then %s", name, DESCRIBE(out->dim, da), DESCRIBE(v.dim, db));
        if (e->func == F_MIN ? v.value < out->value : v.value > out->value) out->value = v.value;
    }
    return 0;
}

/* larmor(N, B) = |gamma| B / 2 pi; field_for(N, f) = 2 pi f / |gamma|. */
static int eval_nuclear(const expr_node *e, units_qty v, const evaluator *ev, units_qty *out) {
    char d[96], w[96];
    bool larmor = e->func == F_LARMOR;
    units_dim want = larmor ? UNITS_FIELD : UNITS_FREQUENCY;
    if (!units_dim_eq(v.dim, want)) {
        const char *hint = units_dim_eq(v.dim, units_dim_div(UNITS_ANGLE_DIM, UNITS_TIME))
                               ? "; frequencies are written in Hz (cycles per second)" : "";
        return eval_fail(ev, e->args[0]->start, "%s needs %s as its second argument, got %s%s",
                         larmor ? "larmor" : "field_for", DESCRIBE(want, w), DESCRIBE(v.dim, d),
                         hint);
    }
    double g = fabs(e->nucleus->gamma);
    out->value = larmor ? g * v.value / (2 * PI) : 2 * PI * v.value / g;
    out->dim = larmor ? UNITS_FREQUENCY : UNITS_FIELD;
    return 0;
}

static int eval_call(const expr_node *e, const evaluator *ev, units_qty *out) {
    if (e->func == F_MIN || e->func == F_MAX) return eval_extremum(e, ev, out);
    units_qty v;
    if (eval_node(e->args[0], ev, &v) < 0) return -1;
    if (e->func == F_LARMOR || e->func == F_FIELD_FOR) return eval_nuclear(e, v, ev, out);
    char d[96], f[64];
    size_t apos = e->args[0]->start;
    const char *name = FUNCS[e->func].name;
    if (e->func == F_ABS) {
        *out = (units_qty){fabs(v.value), v.dim};
        return 0;
    }
    if (e->func == F_SQRT) {
        if (!units_dim_pow(v.dim, 1, &out->dim))
            return eval_fail(ev, apos, "cannot take sqrt of %s: its unit has no square root "
                             "in half powers", DESCRIBE(v.dim, d));
        if (v.value < 0)
            return eval_fail(ev, apos, "sqrt needs a non-negative argument, got %s",
                             units_format(v.value, v.dim, f, sizeof f));
        out->value = sqrt(v.value);
        return 0;
    }
    if (!units_dim_is_none(v.dim))
        return eval_fail(ev, apos, "%s needs a dimensionless argument, got %s", name,
                         DESCRIBE(v.dim, d));
    if (e->func == F_LOG && v.value <= 0)
        return eval_fail(ev, apos, "log needs a positive argument, got %s",
                         units_format(v.value, v.dim, f, sizeof f));
    *out = (units_qty){e->func == F_LOG ? log(v.value) : exp(v.value), UNITS_NONE};
    return 0;
}

static int eval_node(const expr_node *e, const evaluator *ev, units_qty *out) {
    int rc = 0;
    switch (e->kind) {
    case N_NUM:
        *out = (units_qty){e->number * e->scale + e->offset, e->dim};
        break;
    case N_VAR:
        if (!ev->lookup || ev->lookup(ev->ctx, e->name, e->len, out) < 0)
            return eval_fail(ev, e->pos, "undefined name '%.*s'", (int)e->len, e->name);
        break;
    case N_NEG:
        rc = eval_node(e->left, ev, out);
        if (rc == 0) out->value = -out->value;
        break;
    case N_CALL:
        rc = eval_call(e, ev, out);
        break;
    default:
        rc = eval_binary(e, ev, out);
        break;
    }
    if (rc == 0 && !isfinite(out->value))
        return eval_fail(ev, e->pos, "the result here is not a finite number");
    return rc;
}

int expr_eval(const expr_node *e, expr_lookup_fn lookup, void *ctx, units_qty *out,
              expr_error *err) {
    evaluator ev = {lookup, ctx, err};
    return eval_node(e, &ev, out);
}

/* ---- inspection --------------------------------------------------------- */

void expr_names(const expr_node *e, expr_name_fn fn, void *ctx) {
    if (!e) return;
    if (e->kind == N_VAR) {
        fn(ctx, e->name, e->len, e->pos);
        return;
    }
    expr_names(e->left, fn, ctx);
    expr_names(e->right, fn, ctx);
    for (size_t i = 0; i < e->nargs; i++) expr_names(e->args[i], fn, ctx);
}

int expr_is_constant(const expr_node *e) {
    if (!e) return 1;
    if (e->kind == N_VAR) return 0;
    if (!expr_is_constant(e->left) || !expr_is_constant(e->right)) return 0;
    for (size_t i = 0; i < e->nargs; i++)
        if (!expr_is_constant(e->args[i])) return 0;
    return 1;
}
