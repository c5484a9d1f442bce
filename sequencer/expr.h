/* expr: the plan language's expressions and the table of nuclei.
 * Parses a scalar such as "b_relax / 2 + 3 uT" or "larmor(13C, 2 mT)" into a
 * small tree, evaluates it with dimension checking against named values,
 * and looks up nuclei (gyromagnetic ratio, spin) by their written token.
 * Not for reading YAML nor for knowing what a key expects (plan reading). */
#ifndef PRECESS_EXPR_H
#define PRECESS_EXPR_H

#include <stddef.h>
#include "arena.h"
#include "units.h"

/* ---- nuclei ---------------------------------------------------------- */

typedef struct {
    const char *token;   /* as written in plans: "1H", "13C" */
    double gamma;        /* gyromagnetic ratio, rad s^-1 T^-1 (signed) */
    int twice_spin;      /* 2 I: 1 for spin 1/2, 2 for spin 1, 3 for 3/2 */
    const char *source;  /* where gamma comes from */
} nuc_info;

/* The nucleus written as token (len bytes), or NULL. */
const nuc_info *nuc_find(const char *token, size_t len);
/* True when text looks like a nucleus token (digits then an element symbol),
 * whether or not the table knows it. */
int nuc_is_token(const char *text, size_t len);
/* All known nuclei, *n set to their count. */
const nuc_info *nuc_table(size_t *n);

/* ---- expressions ----------------------------------------------------- */

typedef struct expr_node expr_node;   /* opaque parse tree */

/* Looks up a name for evaluation: returns 0 and fills *out, or -1 when the
 * name is not defined. */
typedef int (*expr_lookup_fn)(void *ctx, const char *name, size_t len,
                              units_qty *out);

typedef struct {
    char message[256];
    size_t pos;          /* byte offset within the expression's text */
} expr_error;

/* Parse text (len bytes) into a tree allocated from arena a (freed with
 * it), or return NULL with *err filled. */
expr_node *expr_parse(arena *a, const char *text, size_t len, expr_error *err);

/* Evaluate with dimensions. Returns 0 and *out, or -1 with *err (undefined
 * name, dimension mismatch, log of a dimensional value, ...). */
int expr_eval(const expr_node *e, expr_lookup_fn lookup, void *ctx,
              units_qty *out, expr_error *err);

/* Call fn for every variable name the expression refers to (functions and
 * nucleus tokens excluded), in order of appearance. */
typedef void (*expr_name_fn)(void *ctx, const char *name, size_t len,
                             size_t pos);
void expr_names(const expr_node *e, expr_name_fn fn, void *ctx);

/* True when the expression is a constant (refers to no variable). */
int expr_is_constant(const expr_node *e);

/* True when name (len bytes) may be a variable: matches [a-z_][a-z0-9_]*
 * and is neither a unit word (with or without prefix), a function name,
 * nor "pi". */
int expr_name_allowed(const char *name, size_t len);

#endif
