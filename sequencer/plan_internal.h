/* plan_internal: what the plan module's own files share and nobody else
 * uses: the reading scope and the step reader. Not a public interface. */
#ifndef PRECESS_PLAN_INTERNAL_H
#define PRECESS_PLAN_INTERNAL_H

#include "plan.h"

/* Names expressions may refer to while a plan is read or evaluated. */
typedef struct {
    const plan *p;
    size_t nlets;               /* lets visible (those above the one read) */
    const double *vals;         /* NULL while reading: point 1 */
    const double *let_vals;
    const char *missing;
    char missing_buf[80];
} plan_scope;

void plan_reader_init(plan_reader *r, plan *p, plan_scope *s, diag_list *d);

/* Variables (plan_vars.c): vary and let. Return 0 or -1. */
int plan_read_vary(plan_reader *r, plan *p, const plan_node *m);
int plan_read_lets(plan_reader *r, plan_scope *s, plan *p, const plan_node *m);
/* The sample (plan_sample.c); m may be NULL (no sample: nuclei [1H]). */
int plan_read_sample(plan_reader *r, const plan_node *m, plan_sample *s);

/* Steps (plan_steps.c): a list of steps into out. Returns 0 or -1. */
int plan_read_steps(plan_reader *r, plan *p, const plan_node *list, const char *where,
                    plan_steps *out, int depth);
/* Targets of a field step or of rest: the keys of m that name places. */
int plan_read_target(plan_reader *r, plan *p, const plan_node *key,
                     const plan_node *value, plan_target *out);

#endif
