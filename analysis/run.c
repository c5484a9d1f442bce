/* run: a run folder read and reduced: the journal's ok records and
 * points.json, every shot through the per-shot pipeline, every point's
 * coherent average, and the series fits the plan's analysis: section asks
 * for (one per `per` value). Reads the folder only; never the rig, never
 * the plan file (the caller passes what it says), and writes nothing
 * (report.c does). */
#include "analysis.h"

#include <errno.h>
#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#define SAMPLE_PLACE "sample"   /* the rig's place the sample sits at */

static void copy(char *dst, size_t n, const char *src) {
    snprintf(dst, n, "%s", src ? src : "");
}

/* ---- opening the folder ------------------------------------------------ */

static int read_points(an_run *r, char *err, size_t errlen) {
    char path[4200];
    snprintf(path, sizeof path, "%s/points.json", r->dir);
    json_error_t je;
    json_t *doc = json_load_file(path, 0, &je);
    if (!doc) {
        snprintf(err, errlen, "%s: %s", path, errno == ENOENT ? "no such file: not a run folder"
                                                               : je.text);
        return -1;
    }
    json_t *list = json_object_get(doc, "shot_list");
    copy(r->title, sizeof r->title, json_string_value(json_object_get(doc, "title")));
    r->planned = json_array_size(list);
    json_t *first = json_object_get(json_array_get(list, 0), "parameters");
    r->nparameters = json_object_size(first);
    r->parameter = calloc(r->nparameters + 1, sizeof *r->parameter);
    size_t i = 0;
    const char *key;
    json_t *v;
    json_object_foreach(first, key, v) copy(r->parameter[i++], AN_NAME, key);
    /* One entry per point, with its parameters from its first shot. */
    int maxpoint = 0;
    for (size_t k = 0; k < r->planned; k++) {
        int pt = (int)json_integer_value(json_object_get(json_array_get(list, k), "point"));
        if (pt > maxpoint) maxpoint = pt;
    }
    r->points = calloc((size_t)maxpoint + 1, sizeof *r->points);
    if (!r->parameter || !r->points || !json_is_array(list)) {
        json_decref(doc);
        snprintf(err, errlen, "%s: %s", path, json_is_array(list) ? "out of memory"
                                                                   : "no shot_list");
        return -1;
    }
    r->npoints = (size_t)maxpoint;
    for (size_t k = 0; k < r->planned; k++) {
        json_t *s = json_array_get(list, k);
        int pt = (int)json_integer_value(json_object_get(s, "point"));
        if (pt < 1) continue;
        an_point_entry *e = &r->points[pt - 1];
        if (e->parameters) continue;
        e->point = pt;
        e->parameters = calloc(r->nparameters + 1, sizeof *e->parameters);
        if (!e->parameters) break;
        json_t *ps = json_object_get(s, "parameters");
        for (size_t j = 0; j < r->nparameters; j++) {
            json_t *x = json_object_get(ps, r->parameter[j]);
            e->parameters[j] = x ? json_number_value(x) : NAN;
        }
    }
    json_decref(doc);
    return 0;
}

static int shot_order(const void *a, const void *b) {
    const an_shot_entry *x = a, *y = b;
    return (x->shot > y->shot) - (x->shot < y->shot);
}

/* One journal line: a start gives the run's id, an ok shot an entry. */
static int journal_line(an_run *r, const char *line, size_t *cap) {
    json_t *o = json_loads(line, 0, NULL);
    if (!o) return 0;           /* a line cut off: not done */
    const char *event = json_string_value(json_object_get(o, "event"));
    const char *status = json_string_value(json_object_get(o, "status"));
    const char *file = json_string_value(json_object_get(o, "file"));
    int rc = 0;
    if (event && strcmp(event, "start") == 0) {
        copy(r->id, sizeof r->id, json_string_value(json_object_get(o, "run")));
    } else if (event && strcmp(event, "shot") == 0 && status && strcmp(status, "ok") == 0 &&
               file) {
        if (r->nshots == *cap) {
            size_t n = *cap ? 2 * *cap : 64;
            an_shot_entry *g = realloc(r->shots, n * sizeof *g);
            if (!g) rc = -1;
            else r->shots = g, *cap = n;
        }
        if (rc == 0) {
            an_shot_entry *e = &r->shots[r->nshots++];
            memset(e, 0, sizeof *e);
            e->shot = (int)json_integer_value(json_object_get(o, "shot"));
            e->point = (int)json_integer_value(json_object_get(o, "point"));
            e->average = (int)json_integer_value(json_object_get(o, "average"));
            copy(e->kind, sizeof e->kind, json_string_value(json_object_get(o, "kind")));
            copy(e->file, sizeof e->file, file);
            e->x = e->field = NAN;
        }
    }
    json_decref(o);
    return rc;
}

static int read_journal(an_run *r, char *err, size_t errlen) {
    char path[4200];
    snprintf(path, sizeof path, "%s/journal.jsonl", r->dir);
    FILE *f = fopen(path, "r");
    if (!f) {
        snprintf(err, errlen, "%s: %s", path, strerror(errno));
        return -1;
    }
    char *line = NULL;
    size_t n = 0, cap = 0;
    ssize_t len;
    int rc = 0;
    while (rc == 0 && (len = getline(&line, &n, f)) > 0)
        if (line[len - 1] == '\n') rc = journal_line(r, line, &cap);
    free(line);
    fclose(f);
    if (rc != 0) {
        snprintf(err, errlen, "%s: out of memory", path);
        return -1;
    }
    qsort(r->shots, r->nshots, sizeof *r->shots, shot_order);
    return 0;
}

int an_run_open(const char *dir, an_run **out, char *err, size_t errlen) {
    *out = NULL;
    an_run *r = calloc(1, sizeof *r);
    if (!r) return snprintf(err, errlen, "out of memory"), -1;
    copy(r->dir, sizeof r->dir, dir);
    size_t len = strlen(r->dir);
    while (len > 1 && r->dir[len - 1] == '/') r->dir[--len] = '\0';
    if (read_points(r, err, errlen) != 0 || read_journal(r, err, errlen) != 0) {
        an_run_free(r);
        return -1;
    }
    *out = r;
    return 0;
}

void an_run_free(an_run *r) {
    if (!r) return;
    for (size_t i = 0; i < r->npoints; i++) free(r->points[i].parameters);
    for (size_t i = 0; i < r->nseries; i++) free(r->series[i].data);
    free(r->points);
    free(r->series);
    free(r->shots);
    free(r->parameter);
    free(r);
}

/* ---- shots and points -------------------------------------------------- */

static int parameter_index(const an_run *r, const char *name) {
    for (size_t i = 0; name && i < r->nparameters; i++)
        if (strcmp(r->parameter[i], name) == 0) return (int)i;
    return -1;
}

/* The series' x at a shot: its parameter, or its coil's current. */
static double shot_x(const an_record *rec, const an_plan *p) {
    if (p->against_coil) return an_named_value(rec->currents, rec->ncurrents, p->against_coil);
    if (p->against) return an_named_value(rec->parameters, rec->nparameters, p->against);
    return NAN;
}

typedef struct {
    an_run *r;
    const an_plan *p;
    an_work *w;
    an_average avg;
    double x_sum, field_sum;
    size_t x_count, field_count;
} reducer;

static void reduce_shot(reducer *z, an_shot_entry *e, bool into_average) {
    char path[4300];
    snprintf(path, sizeof path, "%s/%s", z->r->dir, e->file);
    an_record rec;
    if (an_record_read(path, &rec, e->error, sizeof e->error) != 0) return;
    if (!z->r->units[0]) copy(z->r->units, sizeof z->r->units, rec.units);
    e->x = shot_x(&rec, z->p);
    e->field = an_named_value(rec.fields, rec.nfields, SAMPLE_PLACE);
    e->reduced = an_reduce(z->w, &rec, &z->p->settings, &e->result, e->error,
                           sizeof e->error) == 0;
    if (into_average && an_average_add(&z->avg, &rec, e->error, sizeof e->error) == 0) {
        if (!isnan(e->x)) z->x_sum += e->x, z->x_count++;
        if (!isnan(e->field)) z->field_sum += e->field, z->field_count++;
    }
    an_record_free(&rec);
}

/* Every shot of point pt (shots sorted by shot number; each shot is
 * visited once over all points), then the point's average. */
static void reduce_point(reducer *z, an_point_entry *pe, size_t *order, size_t nshots) {
    an_average_init(&z->avg);
    z->x_sum = z->field_sum = 0;
    z->x_count = z->field_count = 0;
    for (size_t k = 0; k < nshots; k++) {
        an_shot_entry *e = &z->r->shots[order[k]];
        bool scan = strcmp(e->kind, "scan") == 0;
        reduce_shot(z, e, scan);
    }
    pe->nshots = z->avg.count;
    pe->x = z->x_count ? z->x_sum / (double)z->x_count : NAN;
    pe->field = z->field_count ? z->field_sum / (double)z->field_count : NAN;
    pe->line = -1;
    if (pe->nshots && an_average_finish(&z->avg) == 0) {
        pe->reduced = an_reduce(z->w, &z->avg.sum, &z->p->settings, &pe->result, pe->error,
                                sizeof pe->error) == 0;
        an_record_free(&z->avg.sum);    /* a finished average is the caller's */
    }
    an_average_free(&z->avg);
}

static int by_point(const void *a, const void *b, void *ctx) {
    const an_shot_entry *s = ctx;
    const an_shot_entry *x = &s[*(const size_t *)a], *y = &s[*(const size_t *)b];
    if (x->point != y->point) return (x->point > y->point) - (x->point < y->point);
    return (x->shot > y->shot) - (x->shot < y->shot);
}

static int reduce_all(an_run *r, const an_plan *p, char *err, size_t errlen) {
    size_t *order = malloc((r->nshots + 1) * sizeof *order);
    reducer z = {.r = r, .p = p, .w = an_work_new()};
    if (!order || !z.w) {
        free(order);
        an_work_free(z.w);
        return snprintf(err, errlen, "out of memory"), -1;
    }
    for (size_t i = 0; i < r->nshots; i++) order[i] = i;
    qsort_r(order, r->nshots, sizeof *order, by_point, r->shots);
    for (size_t k = 0; k < r->nshots;) {
        size_t end = k;
        while (end < r->nshots && r->shots[order[end]].point == r->shots[order[k]].point) end++;
        int pt = r->shots[order[k]].point;
        if (pt >= 1 && (size_t)pt <= r->npoints) reduce_point(&z, &r->points[pt - 1], order + k,
                                                            end - k);
        k = end;
    }
    free(order);
    an_work_free(z.w);
    return 0;
}

/* ---- the line a series follows ----------------------------------------- */

/* The line nearest to f (Hz) within tol, or -1. */
static int line_near(const an_shot *s, double f, double tol) {
    int best = -1;
    for (size_t i = 0; i < s->nlines; i++) {
        double d = fabs(s->lines[i].frequency - f);
        if (d <= tol && (best < 0 || d < fabs(s->lines[best].frequency - f))) best = (int)i;
    }
    return best;
}

/* A point whose line fell below the peak threshold (a long delay, a low
 * field): its average fitted again, started at the series' line (its
 * frequency and width, the amplitude and phase of the spectrum there), the
 * line appended to its result. Left without a line when the fit fails or
 * wanders off. */
static void refit_at(const an_run *r, const an_plan *p, an_point_entry *pe,
                     const an_line_fit *ref, double tol) {
    const an_settings *st = &p->settings;
    char err[256];
    an_record avg;
    an_work *w = an_work_new();
    if (!w || pe->result.nlines >= AN_MAX_LINES ||
        an_run_point_average(r, pe->point, &avg, err, sizeof err) != 0) {
        an_work_free(w);
        return;
    }
    an_trace tr;
    an_spectrum sp;
    an_mains mains;
    if (an_trace_of(w, &avg, st, &tr, &mains, err, sizeof err) == 0 &&
        an_spectrum_of(w, tr.y, tr.n, tr.rate, 0, 1, &sp) == 0) {
        size_t k = (size_t)llround(ref->frequency / sp.df);
        double t_start = isnan(avg.pulse_end) ? 0 : tr.t_first - avg.pulse_end;
        double re = k < sp.n ? sp.re[k] : 0, im = k < sp.n ? sp.im[k] : 0;
        an_line_fit start = *ref, got;
        start.amplitude = sp.scale * hypot(re, im);
        start.phase = remainder(atan2(im, re) - 2 * M_PI * ref->frequency * t_start, 2 * M_PI);
        double rms, exclude = fmax(10 * ref->linewidth, 3 * sp.df);
        if (an_fit_lines(tr.y, tr.n, tr.rate, t_start, &start, 1, &got, &rms) == 0 &&
            fabs(got.frequency - ref->frequency) <= tol) {
            double noise = an_noise_rms(&sp, &got.frequency, &exclude, 1, exclude);
            got.snr = noise > 0 ? sp.scale * hypot(re, im) / noise : NAN;
            pe->line = (int)pe->result.nlines;
            pe->result.lines[pe->result.nlines++] = got;
        }
    }
    an_record_free(&avg);
    an_work_free(w);
}

/* Calibration follows the default nucleus's line: the one nearest its
 * Larmor frequency in the solved field (the strongest when the field is
 * unknown); relaxation and build-up the line of the group's strongest
 * point, at its frequency in every point. */
static void choose_lines(an_run *r, const an_plan *p, const double *per_of, double per) {
    an_point_entry *ref = NULL;
    for (size_t i = 0; i < r->npoints; i++) {
        an_point_entry *pe = &r->points[i];
        if (!pe->reduced || pe->result.nlines == 0) continue;
        if (!isnan(per) && per_of[i] != per) continue;
        if (p->fit == AN_SERIES_CALIBRATION) {
            double f = p->gamma_hz * fabs(pe->field);
            pe->line = isnan(f) ? 0 : line_near(&pe->result, f, 0.2 * f + 1);
            if (pe->line < 0) pe->line = 0;
        } else if (!ref || pe->result.lines[0].amplitude > ref->result.lines[0].amplitude) {
            ref = pe;
        }
    }
    if (!ref) return;
    const an_line_fit rl = ref->result.lines[0];
    double tol = fmax(3 * rl.linewidth, 3.0 / ((double)ref->result.n / ref->result.rate));
    for (size_t i = 0; i < r->npoints; i++) {
        an_point_entry *pe = &r->points[i];
        if (!pe->reduced || (!isnan(per) && per_of[i] != per)) continue;
        pe->line = line_near(&pe->result, rl.frequency, tol);
        if (pe->line < 0) refit_at(r, p, pe, &rl, tol);
    }
}

/* ---- series ------------------------------------------------------------ */

static int add_series(an_run *r, const an_plan *p, double per, const double *per_of) {
    an_series_kind fit = p->fit;
    an_series_entry *g = realloc(r->series, (r->nseries + 1) * sizeof *g);
    if (!g) return -1;
    r->series = g;
    an_series_entry *s = &r->series[r->nseries++];
    memset(s, 0, sizeof *s);
    s->fit = fit;
    s->per = per;
    s->data = calloc(r->npoints + 1, sizeof *s->data);
    if (!s->data) return -1;
    for (size_t i = 0; i < r->npoints; i++) {
        const an_point_entry *pe = &r->points[i];
        if (!pe->reduced || pe->line < 0 || isnan(pe->x)) continue;
        if (!isnan(per) && per_of[i] != per) continue;
        const an_line_fit *l = &pe->result.lines[pe->line];
        an_point *d = &s->data[s->n++];
        d->x = pe->x;
        d->y = fit == AN_SERIES_CALIBRATION ? l->frequency : l->amplitude;
        d->y_err = fit == AN_SERIES_CALIBRATION ? l->frequency_err : l->amplitude_err;
    }
    int rc = -1;
    if (fit == AN_SERIES_RELAXATION) rc = an_fit_relaxation(s->data, s->n, &s->decay);
    else if (fit == AN_SERIES_BUILDUP) rc = an_fit_buildup(s->data, s->n, &s->decay);
    else rc = an_fit_calibration(s->data, s->n, p->gamma_hz, &s->calibration);
    s->fitted = rc == 0;
    return 0;
}

static int cmp_double(const void *a, const void *b) {
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* One series per distinct per value (in increasing order), or one. */
static int fit_series(an_run *r, const an_plan *p) {
    int pi = parameter_index(r, p->per);
    double *per_of = malloc((r->npoints + 1) * sizeof *per_of);
    double *values = malloc((r->npoints + 1) * sizeof *values);
    size_t nvalues = 0;
    int rc = per_of && values ? 0 : -1;
    for (size_t i = 0; rc == 0 && i < r->npoints; i++) {
        const an_point_entry *pe = &r->points[i];
        per_of[i] = pi >= 0 && pe->parameters ? pe->parameters[pi] : NAN;
        if (pi >= 0 && pe->reduced && !isnan(per_of[i])) values[nvalues++] = per_of[i];
    }
    if (rc == 0 && pi >= 0) {
        qsort(values, nvalues, sizeof *values, cmp_double);
        size_t u = 0;
        for (size_t i = 0; i < nvalues; i++)
            if (u == 0 || values[i] != values[u - 1]) values[u++] = values[i];
        for (size_t i = 0; rc == 0 && i < u; i++) {
            choose_lines(r, p, per_of, values[i]);
            rc = add_series(r, p, values[i], per_of);
        }
    } else if (rc == 0) {
        choose_lines(r, p, per_of, NAN);
        rc = add_series(r, p, NAN, per_of);
    }
    free(per_of);
    free(values);
    return rc;
}

const char *an_series_name(an_series_kind k) {
    return k == AN_SERIES_RELAXATION    ? "relaxation"
           : k == AN_SERIES_BUILDUP     ? "buildup"
           : k == AN_SERIES_CALIBRATION ? "calibration"
                                        : "none";
}

int an_run_reduce(an_run *r, const an_plan *p, char *err, size_t errlen) {
    if (reduce_all(r, p, err, errlen) != 0) return -1;
    if (p->fit == AN_SERIES_NONE) return 0;
    if ((p->against || p->against_coil) && fit_series(r, p) != 0)
        return snprintf(err, errlen, "series fits: out of memory"), -1;
    return 0;
}

int an_run_point_average(const an_run *r, int point, an_record *out, char *err, size_t errlen) {
    memset(out, 0, sizeof *out);
    an_average a;
    an_average_init(&a);
    int rc = 0;
    for (size_t i = 0; rc == 0 && i < r->nshots; i++) {
        const an_shot_entry *e = &r->shots[i];
        if (e->point != point || strcmp(e->kind, "scan") != 0) continue;
        char path[4300];
        snprintf(path, sizeof path, "%s/%s", r->dir, e->file);
        an_record rec;
        if (an_record_read(path, &rec, err, errlen) != 0) continue;
        rc = an_average_add(&a, &rec, err, errlen);
        an_record_free(&rec);
    }
    if (rc == 0 && an_average_finish(&a) != 0) {
        snprintf(err, errlen, "point %d has no scan shot recorded", point);
        rc = -1;
    }
    if (rc == 0) {
        *out = a.sum;
        memset(&a.sum, 0, sizeof a.sum);
    }
    an_average_free(&a);
    return rc;
}
