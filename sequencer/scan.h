/* scan: expanding a plan's `vary` section into points and shots.
 * Points are numbered from 1 as written (grid: first key slowest; together:
 * side by side); shots from 1 in execution order, with warmup, averages,
 * reference shots and the as-written, reversed or shuffled order.
 * Not for timing or physics (compile.h): only which values, in which order. */
#ifndef PRECESS_SCAN_H
#define PRECESS_SCAN_H

#include <stddef.h>
#include <stdint.h>
#include "plan.h"

typedef enum { SHOT_SCAN, SHOT_WARMUP, SHOT_REFERENCE } scan_shot_kind;

typedef struct {
    uint32_t shot;      /* from 1, execution order */
    uint32_t point;     /* from 1, as written */
    uint32_t average;   /* from 1 */
    uint8_t kind;       /* scan_shot_kind */
} scan_shot;

typedef struct {
    size_t npoints, nvars;
    double *values;     /* npoints x nvars, row-major, SI, point k at (k-1) */
    size_t nshots;
    scan_shot *shots;
    double *reference;  /* nvars values a reference shot puts in place, NaN
                           where the point's own value stays */
} scan;

/* The values of one variable as written: a list's entries or a range's
 * steps (linear: from + k (to-from)/(n-1); log: geometric, exact ends).
 * out has v->n entries. Returns 0, or -1 with an error in d (log range
 * through zero, a non-constant entry, ...). */
int scan_var_values(const plan *p, const plan_var *v, double *out, diag_list *d);

/* Expand a plan. Returns a scan the caller frees with scan_free, or NULL
 * with errors in d (together with unequal lengths, too many shots). */
scan *scan_expand(const plan *p, diag_list *d);
void scan_free(scan *s);

/* The scan-variable values shot s runs with (a reference shot's with
 * its `with` values in place). out has nvars entries. */
void scan_shot_values(const scan *s, const scan_shot *shot, double *out);

const char *scan_kind_name(scan_shot_kind k);

#endif
