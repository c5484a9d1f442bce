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

/* Points as written: grid (first variable slowest) or side by side. */
static int fill_points(const plan *p, scan *s, diag_list *d) {
    size_t nv = p->nvars;
    double **vals = calloc(nv + 1, sizeof *vals);
    if (!vals) return -1;
    int rc = 0;
    size_t npoints = 1;
    for (size_t i = 0; i < nv && rc == 0; i++) {
        vals[i] = malloc((p->vars[i].n + 1) * sizeof **vals);
        if (!vals[i] || scan_var_values(p, &p->vars[i], vals[i], d)) {
            rc = -1;
            break;
        }
        if (p->combine == COMBINE_TOGETHER) {
            if (i > 0 && p->vars[i].n != npoints) {
                diag_add(d, DIAG_ERROR, p->vars[i].loc, "combine: together needs lists of one "
                         "length; '%s' has %zu values, not %zu", p->vars[i].name,
                         p->vars[i].n, npoints);
                rc = -1;
            }
            npoints = p->vars[i].n;
        } else {
            npoints *= p->vars[i].n;
            if (npoints > SCAN_MAX_SHOTS) {
                diag_add(d, DIAG_ERROR, p->vars[i].loc, "the scan has more than %u points",
                         SCAN_MAX_SHOTS);
                rc = -1;
            }
        }
    }
    if (rc == 0) {
        s->npoints = npoints;
        s->nvars = nv;
        s->values = malloc((npoints * nv + 1) * sizeof *s->values);
        if (!s->values) rc = -1;
    }
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
    for (size_t i = 0; i < nv; i++) free(vals[i]);
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
        return -1;
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
