/* scan: a plan's variables expanded into numbered points and the shots
 * that run them, in execution order (warmup, averages, reference shots,
 * as-written, reversed or shuffled with GSL's mt19937).
 * Not for evaluating step values or timing (compile.h). */
#include "scan.h"

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define SCAN_MAX_SHOTS 100000000u

const char *scan_kind_name(scan_shot_kind k) {
    return k == SHOT_WARMUP ? "warmup" : k == SHOT_REFERENCE ? "reference" : "scan";
}

/* The same arithmetic as numpy's linspace and geomspace, so that a range
 * gives the values a lab's analysis script would compute. */
int scan_var_values(const plan *p, const plan_var *v, double *out, diag_list *d) {
    (void)p;
    if (v->kind == SCAN_LIST) {
        for (size_t i = 0; i < v->n; i++) out[i] = v->values[i].value;
        return 0;
    }
    double a = v->from.value, b = v->to.value;
    size_t n = v->n;
    if (n < 2) {
        diag_add(d, DIAG_ERROR, v->loc, "range '%s' needs at least 2 steps", v->name);
        return -1;
    }
    if (v->spacing == SPACING_LINEAR) {
        double step = (b - a) / (double)(n - 1);
        for (size_t i = 0; i < n; i++) out[i] = a + (double)i * step;
    } else {
        if (!(a * b > 0)) {
            diag_add(d, DIAG_ERROR, v->loc, "log range '%s' needs both ends non-zero and of "
                     "one sign", v->name);
            return -1;
        }
        double sign = a < 0 ? -1.0 : 1.0;
        double la = log10(fabs(a)), lb = log10(fabs(b));
        double step = (lb - la) / (double)(n - 1);
        for (size_t i = 0; i < n; i++) out[i] = sign * pow(10.0, la + (double)i * step);
    }
    out[0] = a;
    out[n - 1] = b;
    return 0;
}

/* The number of points, checked against the limit before anything is
 * allocated; 0 with an error when there are too many. */
static size_t count_points(const plan *p, diag_list *d) {
    double npoints = p->nvars ? (double)p->vars[0].n : 1;
    for (size_t i = 1; i < p->nvars; i++) {
        if (p->combine == COMBINE_TOGETHER && p->vars[i].n != p->vars[0].n) {
            diag_add(d, DIAG_ERROR, p->vars[i].loc, "combine: together needs lists of one "
                     "length; '%s' has %zu values, not %zu", p->vars[i].name, p->vars[i].n,
                     p->vars[0].n);
            return 0;
        }
        if (p->combine == COMBINE_GRID) npoints *= (double)p->vars[i].n;
    }
    if (npoints > SCAN_MAX_SHOTS || npoints < 1) {
        diag_add(d, DIAG_ERROR, p->nvars ? p->vars[0].loc : (plan_loc){p->file, 1, 1},
                 "the scan has %.0f points; at most %u can be planned", npoints,
                 SCAN_MAX_SHOTS);
        return 0;
    }
    return (size_t)npoints;
}

static int out_of_memory(const plan *p, diag_list *d) {
    diag_add(d, DIAG_ERROR, (plan_loc){p->file, 0, 0}, "out of memory expanding the scan");
    return -1;
}

/* Points as written: grid (first variable slowest) or side by side. */
static int fill_points(const plan *p, scan *s, diag_list *d) {
    size_t nv = p->nvars, npoints = count_points(p, d);
    if (npoints == 0) return -1;
    double **vals = calloc(nv + 1, sizeof *vals);
    s->values = malloc((npoints * nv + 1) * sizeof *s->values);
    int rc = vals && s->values ? 0 : out_of_memory(p, d);
    for (size_t i = 0; i < nv && rc == 0; i++) {
        vals[i] = malloc((p->vars[i].n + 1) * sizeof **vals);
        if (!vals[i]) rc = out_of_memory(p, d);
        else rc = scan_var_values(p, &p->vars[i], vals[i], d);
    }
    s->npoints = npoints;
    s->nvars = nv;
    for (size_t k = 0; rc == 0 && k < npoints; k++) {
        size_t rest = k;
        for (size_t i = nv; i-- > 0;) {
            size_t idx = rest;
            if (p->combine == COMBINE_GRID) {
                idx = rest % p->vars[i].n;
                rest /= p->vars[i].n;
            }
            s->values[k * nv + i] = vals[i][idx];
        }
    }
    for (size_t i = 0; vals && i < nv; i++) free(vals[i]);
    free(vals);
    return rc;
}

/* The order in which points run, as point numbers from 1. */
static uint32_t *point_order(const plan *p, size_t npoints) {
    uint32_t *order = malloc((npoints + 1) * sizeof *order);
    if (!order) return NULL;
    for (size_t i = 0; i < npoints; i++)
        order[i] = (uint32_t)(p->order == ORDER_REVERSED ? npoints - i : i + 1);
    if (p->order == ORDER_SHUFFLED && npoints > 1) {
        gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
        if (!rng) {
            free(order);
            return NULL;
        }
        gsl_rng_set(rng, p->seed);
        gsl_ran_shuffle(rng, order, npoints, sizeof *order);
        gsl_rng_free(rng);
    }
    return order;
}

static int fill_shots(const plan *p, scan *s, diag_list *d) {
    size_t per_point = (size_t)p->averages;
    size_t every = p->reference.present ? (size_t)p->reference.every : 0;
    size_t nref = every ? s->npoints / every : 0;
    double total = (double)p->warmup + (double)s->npoints * (double)per_point + (double)nref;
    if (total > SCAN_MAX_SHOTS) {
        diag_add(d, DIAG_ERROR, (plan_loc){p->file, 1, 1}, "the plan has %.0f shots; at most "
                 "%u can be planned", total, SCAN_MAX_SHOTS);
        return -1;
    }
    s->nshots = (size_t)total;
    s->shots = malloc((s->nshots + 1) * sizeof *s->shots);
    uint32_t *order = point_order(p, s->npoints);
    if (!s->shots || !order) {
        free(order);
        return out_of_memory(p, d);
    }
    size_t k = 0;
    for (int w = 0; w < p->warmup; w++)
        s->shots[k++] = (scan_shot){0, 1, (uint32_t)w + 1, SHOT_WARMUP};
    for (size_t i = 0; i < s->npoints; i++) {
        for (size_t a = 0; a < per_point; a++)
            s->shots[k++] = (scan_shot){0, order[i], (uint32_t)a + 1, SHOT_SCAN};
        if (every && (i + 1) % every == 0)
            s->shots[k++] = (scan_shot){0, order[i], 1, SHOT_REFERENCE};
    }
    for (size_t i = 0; i < k; i++) s->shots[i].shot = (uint32_t)i + 1;
    free(order);
    return 0;
}

scan *scan_expand(const plan *p, diag_list *d) {
    scan *s = calloc(1, sizeof *s);
    if (!s) return NULL;
    s->reference = malloc((p->nvars + 1) * sizeof *s->reference);
    if (!s->reference) out_of_memory(p, d);
    if (!s->reference || fill_points(p, s, d) || fill_shots(p, s, d)) {
        scan_free(s);
        return NULL;
    }
    for (size_t i = 0; i < p->nvars; i++) s->reference[i] = NAN;
    for (size_t i = 0; i < p->reference.n; i++)
        s->reference[p->reference.var[i]] = p->reference.value[i].value;
    return s;
}

void scan_free(scan *s) {
    if (!s) return;
    free(s->values);
    free(s->shots);
    free(s->reference);
    free(s);
}

void scan_shot_values(const scan *s, const scan_shot *shot, double *out) {
    const double *row = s->values + (size_t)(shot->point - 1) * s->nvars;
    for (size_t i = 0; i < s->nvars; i++)
        out[i] = shot->kind == SHOT_REFERENCE && !isnan(s->reference[i]) ? s->reference[i]
                                                                         : row[i];
}
