/* report: what `precess analyze` leaves in RUN/analysis/: shots.csv,
 * points.csv and fits.csv (one row per shot, point and fit), a record and
 * spectrum plot per point, each series with its fit, the dispersion profile
 * and the spectral map. Each file is written whole (temporary name, then
 * renamed). Not for the reduction itself (run.c) nor drawing (plot.c). */
#include "analysis_internal.h"
#include "plot_page.h"

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#define MAX_POINT_PLOTS 48      /* record plots: every point up to this many */
#define MAP_COLUMNS 800         /* frequency bins of the spectral map */

/* dir/name, opened to be written whole (outfile.c). */
static an_out *open_in(const char *dir, const char *name, char *path, size_t n, char *err,
                       size_t errlen) {
    snprintf(path, n, "%s/%s", dir, name);
    return an_out_open(path, err, errlen);
}

/* A number for a CSV cell: empty when unknown, round-trip exact. */
static void cell(an_out *f, double v) {
    if (isnan(v)) an_out_write(f, ",", 1);
    else an_out_printf(f, ",%.17g", v);
}

static void line_cells(an_out *f, const an_shot *s, bool ok) {
    const an_line_fit *l = ok && s->nlines ? &s->lines[0] : NULL;
    double nan = NAN;
    cell(f, l ? l->frequency : nan);
    cell(f, l ? l->frequency_err : nan);
    cell(f, l ? l->amplitude : nan);
    cell(f, l ? l->amplitude_err : nan);
    cell(f, l ? l->phase : nan);
    cell(f, l ? l->linewidth : nan);
    cell(f, l ? l->linewidth_err : nan);
    cell(f, l ? l->snr : nan);
    cell(f, ok ? s->noise : nan);
    an_out_printf(f, ",%zu", ok ? s->nlines : 0);
}

static const char LINE_HEADER[] = "frequency,frequency_err,amplitude,amplitude_err,phase,"
                                  "linewidth,linewidth_err,snr,noise,lines";

static int write_shots(const an_run *r, const char *dir, char *err, size_t errlen) {
    char path[4400];
    an_out *o = open_in(dir, "shots.csv", path, sizeof path, err, errlen);
    if (!o) return -1;
    an_out_printf(o, "shot,point,average,kind,x,%s,error\n", LINE_HEADER);
    for (size_t i = 0; i < r->nshots; i++) {
        const an_shot_entry *e = &r->shots[i];
        an_out_printf(o, "%d,%d,%d,%s", e->shot, e->point, e->average, e->kind);
        cell(o, e->x);
        line_cells(o, &e->result, e->reduced);
        an_out_printf(o, ",\"%s\"\n", e->reduced ? "" : e->error);
    }
    return an_out_finish(o, err, errlen);
}

static int write_points(const an_run *r, const char *dir, char *err, size_t errlen) {
    char path[4400];
    an_out *o = open_in(dir, "points.csv", path, sizeof path, err, errlen);
    if (!o) return -1;
    an_out_printf(o, "point,shots");
    for (size_t j = 0; j < r->nparameters; j++) an_out_printf(o, ",%s", r->parameter[j]);
    an_out_printf(o, ",x,field,%s\n", LINE_HEADER);
    for (size_t i = 0; i < r->npoints; i++) {
        const an_point_entry *pe = &r->points[i];
        if (!pe->nshots) continue;
        an_out_printf(o, "%d,%zu", pe->point, pe->nshots);
        for (size_t j = 0; j < r->nparameters; j++) cell(o, pe->parameters[j]);
        cell(o, pe->x);
        cell(o, pe->field);
        line_cells(o, &pe->result, pe->reduced);
        an_out_write(o, "\n", 1);
    }
    return an_out_finish(o, err, errlen);
}

static int write_fits(const an_run *r, const an_plan *p, const char *dir, char *err,
                      size_t errlen) {
    char path[4400];
    an_out *o = open_in(dir, "fits.csv", path, sizeof path, err, errlen);
    if (!o) return -1;
    an_out_printf(o, "fit,per,per_value,points,fitted,t1,t1_err,r1,r1_err,amplitude,"
                  "amplitude_err,offset,offset_err,k,k_err,b_z,b_z_err,b_perp,b_perp_err,"
                  "chi2_dof\n");
    for (size_t i = 0; i < r->nseries; i++) {
        const an_series_entry *s = &r->series[i];
        an_out_printf(o, "%s,%s", an_series_name(s->fit), p->per ? p->per : "");
        cell(o, s->per);
        an_out_printf(o, ",%zu,%d", s->n, s->fitted ? 1 : 0);
        const an_decay_fit *d = &s->decay;
        const an_calibration_fit *c = &s->calibration;
        bool decay = s->fitted && s->fit != AN_SERIES_CALIBRATION;
        bool cal = s->fitted && s->fit == AN_SERIES_CALIBRATION;
        double nan = NAN;
        cell(o, decay ? d->t1 : nan);
        cell(o, decay ? d->t1_err : nan);
        cell(o, decay ? 1 / d->t1 : nan);
        cell(o, decay ? d->t1_err / (d->t1 * d->t1) : nan);
        cell(o, decay ? d->amplitude : nan);
        cell(o, decay ? d->amplitude_err : nan);
        cell(o, decay ? d->offset : nan);
        cell(o, decay ? d->offset_err : nan);
        cell(o, cal ? c->k : nan);
        cell(o, cal ? c->k_err : nan);
        cell(o, cal ? c->b_z : nan);
        cell(o, cal ? c->b_z_err : nan);
        cell(o, cal ? c->b_perp : nan);
        cell(o, cal ? c->b_perp_err : nan);
        cell(o, s->fitted ? (decay ? d->chi2_dof : c->chi2_dof) : nan);
        an_out_write(o, "\n", 1);
    }
    return an_out_finish(o, err, errlen);
}

/* ---- plots ------------------------------------------------------------- */

/* The fitted model of a reduced record at time t (s from shot start). */
static double model_at(const an_shot *s, double t) {
    double y = 0, u = t - s->t_ref;
    for (size_t k = 0; k < s->nlines; k++) {
        const an_line_fit *l = &s->lines[k];
        y += l->amplitude * exp(-M_PI * l->linewidth * u) *
             cos(2 * M_PI * l->frequency * u + l->phase);
    }
    return y;
}

typedef struct {
    an_work *w;
    const an_run *r;
    const an_plan *p;
    char dir[4200];
    double *t, *y, *fit, *f, *mag, *fit_mag, *map, *map_y, *map_strength;
    size_t map_rows;
    double map_fmax;
} plotter;

static int grow(double **v, size_t n) {
    double *g = realloc(*v, (n + 1) * sizeof *g);
    if (!g) return -1;
    *v = g;
    return 0;
}

/* "7.95 uT" (with the prefix the plots use), or the bare number. */
static const char *quantity(const an_plan *p, const char *name, double v, char *buf, size_t n) {
    const char *unit = "";
    for (size_t i = 0; i < p->nvars; i++)
        if (strcmp(p->var_name[i], name) == 0) unit = p->var_unit[i];
    const char *prefix = "";
    double factor = *unit ? an_axis_prefix(fabs(v), unit, &prefix) : 1;
    snprintf(buf, n, "%.4g%s%s%s", v * factor, *unit ? " " : "", prefix, unit);
    return buf;
}

static const char *parameters_text(const plotter *z, const an_point_entry *pe, char *buf,
                                   size_t n) {
    size_t k = 0;
    buf[0] = '\0';
    for (size_t j = 0; j < z->r->nparameters && k < n; j++) {
        char q[64];
        k += (size_t)snprintf(buf + k, n - k, "%s%s = %s", j ? ", " : "", z->r->parameter[j],
                              quantity(z->p, z->r->parameter[j], pe->parameters[j], q,
                                       sizeof q));
    }
    return buf;
}

/* The averaged trace of a point, its fitted model, and both spectra. */
static int point_spectra(plotter *z, const an_point_entry *pe, an_record *avg, an_trace *tr,
                         an_spectrum *sp, char *err, size_t errlen) {
    const an_settings *st = &z->p->settings;
    an_mains mains;
    if (an_run_point_average(z->r, pe->point, avg, err, errlen) != 0 ||
        an_trace_of(z->w, avg, st, tr, &mains, err, errlen) != 0)
        return -1;
    if (grow(&z->t, tr->n) || grow(&z->y, tr->n) || grow(&z->fit, tr->n)) return -1;
    for (size_t i = 0; i < tr->n; i++) {
        z->t[i] = tr->t_first + (double)i / tr->rate;
        z->y[i] = tr->y[i];
        z->fit[i] = model_at(&pe->result, z->t[i]);
    }
    if (an_spectrum_of(z->w, z->fit, tr->n, tr->rate, st->apodization, st->zero_fill, sp) != 0)
        return -1;
    if (grow(&z->f, sp->n) || grow(&z->mag, sp->n) || grow(&z->fit_mag, sp->n)) return -1;
    for (size_t k = 0; k < sp->n; k++) z->fit_mag[k] = sp->scale * hypot(sp->re[k], sp->im[k]);
    if (an_spectrum_of(z->w, z->y, tr->n, tr->rate, st->apodization, st->zero_fill, sp) != 0)
        return -1;
    for (size_t k = 0; k < sp->n; k++) {
        z->f[k] = (double)k * sp->df;
        z->mag[k] = sp->scale * hypot(sp->re[k], sp->im[k]);
    }
    return 0;
}

/* One row of the map: the magnitude spectrum binned to MAP_COLUMNS over
 * [0, fmax], normalized to its largest bin. */
static void map_row(const double *mag, const an_spectrum *sp, double fmax, double *row) {
    double top = 0;
    for (size_t c = 0; c < MAP_COLUMNS; c++) row[c] = 0;
    for (size_t k = 1; k < sp->n; k++) {
        double f = (double)k * sp->df;
        if (f >= fmax) break;
        size_t c = (size_t)(f / fmax * MAP_COLUMNS);
        if (mag[k] > row[c]) row[c] = mag[k];
        if (mag[k] > top) top = mag[k];
    }
    for (size_t c = 0; top > 0 && c < MAP_COLUMNS; c++) row[c] /= top;
}

/* The spectrum up to twice the highest line (at least 50 Hz above it), or
 * all of it when there is no line. */
static size_t shown_bins(const an_shot *s, const an_spectrum *sp) {
    double top = 0;
    for (size_t k = 0; k < s->nlines; k++)
        top = fmax(top, s->lines[k].frequency + 10 * s->lines[k].linewidth);
    if (top <= 0) return sp->n;
    size_t n = (size_t)(fmax(2 * top, top + 50) / sp->df) + 1;
    return n < sp->n ? n : sp->n;
}

/* The map's rows are the field the series is taken per (a dispersion
 * study's relaxation field), else the series' x, else the plan's first
 * scan variable that is a field (or its first at all). */
static int map_parameter(const plotter *z) {
    int first_field = -1;
    for (size_t j = 0; j < z->r->nparameters; j++) {
        if (z->p->per && strcmp(z->r->parameter[j], z->p->per) == 0) return (int)j;
        for (size_t i = 0; i < z->p->nvars && first_field < 0; i++)
            if (strcmp(z->p->var_name[i], z->r->parameter[j]) == 0 &&
                strcmp(z->p->var_unit[i], "T") == 0)
                first_field = (int)j;
    }
    if (z->p->against || z->p->against_coil) return -1;     /* the x */
    return first_field >= 0 ? first_field : z->r->nparameters ? 0 : -2;
}

static double map_y_of(const plotter *z, const an_point_entry *pe) {
    int j = map_parameter(z);
    return j >= 0 ? pe->parameters[j] : j == -1 ? pe->x : NAN;
}

static const char *map_unit(const plotter *z, int j) {
    for (size_t i = 0; j >= 0 && i < z->p->nvars; i++)
        if (strcmp(z->p->var_name[i], z->r->parameter[j]) == 0) return z->p->var_unit[i];
    return j == -1 ? (z->p->against_coil ? "A" : z->p->against_unit) : "";
}

static int plot_point(plotter *z, const an_point_entry *pe, bool draw, char *err,
                      size_t errlen) {
    an_record avg;
    an_trace tr;
    an_spectrum sp;
    int rc = point_spectra(z, pe, &avg, &tr, &sp, err, errlen);
    double y = map_y_of(z, pe);
    if (rc == 0 && z->map && !isnan(y)) {
        /* one row per value: the point with the strongest line */
        size_t row = z->map_rows;
        for (size_t i = 0; i < z->map_rows; i++)
            if (z->map_y[i] == y) row = i;
        double strength = pe->reduced && pe->result.nlines ? pe->result.lines[0].amplitude : 0;
        if (row == z->map_rows || strength > z->map_strength[row]) {
            map_row(z->mag, &sp, z->map_fmax, z->map + row * MAP_COLUMNS);
            z->map_y[row] = y;
            z->map_strength[row] = strength;
            if (row == z->map_rows) z->map_rows++;
        }
    }
    if (rc == 0 && draw) {
        char title[512], params[400], base[4400];
        double lf[AN_MAX_LINES];
        for (size_t k = 0; k < pe->result.nlines; k++) lf[k] = pe->result.lines[k].frequency;
        snprintf(title, sizeof title, "point %d (%zu shot%s): %s", pe->point, pe->nshots,
                 pe->nshots == 1 ? "" : "s", parameters_text(z, pe, params, sizeof params));
        snprintf(base, sizeof base, "%s/points/point-%03d", z->dir, pe->point);
        an_plot_shot d = {.title = title, .units = avg.units, .n = tr.n, .t = z->t, .y = z->y,
                          .fit = pe->result.nlines ? z->fit : NULL,
                          .nspec = shown_bins(&pe->result, &sp), .f = z->f,
                          .mag = z->mag, .fit_mag = pe->result.nlines ? z->fit_mag : NULL,
                          .nlines = pe->result.nlines, .line_frequency = lf};
        rc = an_plot_record(base, &d, err, errlen);
    }
    an_record_free(&avg);
    return rc;
}

/* A field with its prefix: "-38 pT". */
static const char *field_text(double b, char *buf, size_t n) {
    const char *prefix = "";
    double factor = an_axis_prefix(fabs(b), "T", &prefix);
    snprintf(buf, n, "%.3g %sT", b * factor, prefix);
    return buf;
}

static void series_title(const plotter *z, const an_series_entry *s, char *buf, size_t n) {
    char q[64];
    if (isnan(s->per)) snprintf(buf, n, "%s", an_series_name(s->fit));
    else snprintf(buf, n, "%s at %s = %s", an_series_name(s->fit), z->p->per,
                  quantity(z->p, z->p->per, s->per, q, sizeof q));
}

/* The fit's curve over the data's x range, and the residuals at the data. */
static double series_model(const an_series_entry *s, const an_plan *p, double x) {
    const an_decay_fit *d = &s->decay;
    const an_calibration_fit *c = &s->calibration;
    if (s->fit == AN_SERIES_RELAXATION) return d->amplitude * exp(-x / d->t1) + d->offset;
    if (s->fit == AN_SERIES_BUILDUP) return d->amplitude * (1 - exp(-x / d->t1)) + d->offset;
    return p->gamma_hz * hypot(c->k * x + c->b_z, c->b_perp);
}

#define CURVE_POINTS 400

static int plot_series(plotter *z, const an_series_entry *s, size_t index, char *err,
                       size_t errlen) {
    if (s->n == 0) return 0;
    const an_plan *p = z->p;
    double x[s->n], y[s->n], ye[s->n], res[s->n], cx[CURVE_POINTS], cy[CURVE_POINTS];
    double lo = INFINITY, hi = -INFINITY;
    for (size_t i = 0; i < s->n; i++) {
        x[i] = s->data[i].x;
        y[i] = s->data[i].y;
        ye[i] = s->data[i].y_err;
        res[i] = s->fitted ? y[i] - series_model(s, p, x[i]) : NAN;
        lo = fmin(lo, x[i]);
        hi = fmax(hi, x[i]);
    }
    bool decay = s->fit != AN_SERIES_CALIBRATION;
    if (decay) lo = fmin(lo, 0);
    for (size_t i = 0; i < CURVE_POINTS; i++) {
        cx[i] = lo + (hi - lo) * (double)i / (CURVE_POINTS - 1);
        cy[i] = series_model(s, p, cx[i]);
    }
    char title[512], what[300], xname[160], base[4400], bz[32], bp[32];
    series_title(z, s, what, sizeof what);
    if (s->fitted && decay)
        snprintf(title, sizeof title, "%s: T1 = %.4g ± %.2g s", what, s->decay.t1,
                 s->decay.t1_err);
    else if (s->fitted)
        snprintf(title, sizeof title, "%s: k = %.6g ± %.1g, b_z = %s, b_perp = %s", what,
                 s->calibration.k, s->calibration.k_err,
                 field_text(s->calibration.b_z, bz, sizeof bz),
                 field_text(s->calibration.b_perp, bp, sizeof bp));
    else
        snprintf(title, sizeof title, "%s: no fit (%zu points)", what, s->n);
    if (p->against_coil) snprintf(xname, sizeof xname, "current of %s", p->against_coil);
    else snprintf(xname, sizeof xname, "%s", p->against ? p->against : "x");
    if (s->fit == AN_SERIES_CALIBRATION) snprintf(base, sizeof base, "%s/calibration", z->dir);
    else if (isnan(s->per)) snprintf(base, sizeof base, "%s/%s", z->dir, an_series_name(s->fit));
    else snprintf(base, sizeof base, "%s/%s-%02zu", z->dir, an_series_name(s->fit), index + 1);
    an_plot_curve d = {.title = title, .x_name = xname,
                       .x_unit = p->against_coil ? "A" : p->against_unit,
                       .y_name = decay ? "amplitude" : "line frequency",
                       .y_unit = decay ? z->r->units : "Hz", .n = s->n, .x = x, .y = y,
                       .y_err = ye, .ncurve = s->fitted ? CURVE_POINTS : 0, .curve_x = cx,
                       .curve_y = cy, .residual = s->fitted ? res : NULL};
    return an_plot_series(base, &d, err, errlen);
}

static int plot_profile(plotter *z, char *err, size_t errlen) {
    const an_run *r = z->r;
    size_t n = 0;
    double x[r->nseries + 1], y[r->nseries + 1], ye[r->nseries + 1];
    for (size_t i = 0; i < r->nseries; i++) {
        const an_series_entry *s = &r->series[i];
        if (!s->fitted || s->fit == AN_SERIES_CALIBRATION || isnan(s->per)) continue;
        x[n] = s->per;
        y[n] = 1 / s->decay.t1;
        ye[n++] = s->decay.t1_err / (s->decay.t1 * s->decay.t1);
    }
    if (n < 2) return 0;
    char base[4400], xname[200];
    snprintf(base, sizeof base, "%s/profile", z->dir);
    snprintf(xname, sizeof xname, "%s", z->p->per);
    an_plot_profile_data d = {.title = "relaxation rate R1 = 1/T1", .x_name = xname,
                              .x_unit = z->p->per_unit, .y_name = "R1", .y_unit = "1/s",
                              .n = n, .x = x, .y = y, .y_err = ye};
    return an_plot_profile(base, &d, err, errlen);
}

/* Sorts the map's rows by their y (insertion: a few hundred rows). */
static void sort_rows(double *y, double *rows, size_t n) {
    double tmp[MAP_COLUMNS];
    for (size_t i = 1; i < n; i++)
        for (size_t j = i; j > 0 && y[j - 1] > y[j]; j--) {
            double t = y[j];
            y[j] = y[j - 1];
            y[j - 1] = t;
            memcpy(tmp, rows + j * MAP_COLUMNS, sizeof tmp);
            memcpy(rows + j * MAP_COLUMNS, rows + (j - 1) * MAP_COLUMNS, sizeof tmp);
            memcpy(rows + (j - 1) * MAP_COLUMNS, tmp, sizeof tmp);
        }
}

/* The map spans 0 Hz to 1.25 times the highest fitted line (at most the
 * Nyquist frequency of the records). */
static double map_span(const an_run *r) {
    double top = 0, nyquist = INFINITY;
    for (size_t i = 0; i < r->npoints; i++) {
        const an_point_entry *pe = &r->points[i];
        if (!pe->reduced) continue;
        nyquist = fmin(nyquist, pe->result.rate / 2);
        for (size_t k = 0; k < pe->result.nlines; k++)
            top = fmax(top, pe->result.lines[k].frequency);
    }
    return top > 0 ? fmin(1.25 * top, nyquist) : nyquist;
}

static int plot_all(plotter *z, char *err, size_t errlen) {
    const an_run *r = z->r;
    size_t with_shots = 0;
    for (size_t i = 0; i < r->npoints; i++) with_shots += r->points[i].nshots > 0;
    if (with_shots >= 2 && map_parameter(z) != -2) {
        z->map = malloc(with_shots * MAP_COLUMNS * sizeof *z->map);
        z->map_y = malloc(with_shots * sizeof *z->map_y);
        z->map_strength = malloc(with_shots * sizeof *z->map_strength);
        z->map_fmax = map_span(r);
        if (!z->map || !z->map_y || !z->map_strength || !isfinite(z->map_fmax)) {
            free(z->map), free(z->map_y), free(z->map_strength);
            z->map = z->map_y = z->map_strength = NULL;
        }
    }
    size_t every = with_shots > MAX_POINT_PLOTS ? (with_shots + MAX_POINT_PLOTS - 1) / MAX_POINT_PLOTS : 1;
    int rc = 0;
    for (size_t i = 0, seen = 0; rc == 0 && i < r->npoints; i++) {
        const an_point_entry *pe = &r->points[i];
        if (!pe->nshots || !pe->reduced) continue;  /* points.csv says why not */
        rc = plot_point(z, pe, seen++ % every == 0, err, errlen);
    }
    for (size_t i = 0; rc == 0 && i < r->nseries; i++) rc = plot_series(z, &r->series[i], i, err, errlen);
    if (rc == 0) rc = plot_profile(z, err, errlen);
    if (rc == 0 && z->map && z->map_rows >= 2) {
        sort_rows(z->map_y, z->map, z->map_rows);
        char base[4400], yname[160];
        snprintf(base, sizeof base, "%s/map", z->dir);
        bool per = z->p->per != NULL;
        int j = map_parameter(z);
        if (j >= 0) snprintf(yname, sizeof yname, "%s", z->r->parameter[j]);
        else if (z->p->against_coil)
            snprintf(yname, sizeof yname, "current of %s", z->p->against_coil);
        else snprintf(yname, sizeof yname, "%s", z->p->against);
        an_plot_map_data d = {.title = per ? "spectra, the strongest point of each value "
                                             "(each scaled to its largest)"
                                           : "spectra of every point (each scaled to its largest)",
                              .y_name = yname, .y_unit = map_unit(z, j),
                              .nrows = z->map_rows, .ncols = MAP_COLUMNS, .y = z->map_y,
                              .f_min = 0, .f_max = z->map_fmax, .magnitude = z->map};
        rc = an_plot_map(base, &d, err, errlen);
    }
    return rc;
}

static int make_dir(const char *path, char *err, size_t errlen) {
    if (mkdir(path, 0777) == 0 || errno == EEXIST) return 0;
    snprintf(err, errlen, "cannot create %s: %s", path, strerror(errno));
    return -1;
}

int an_run_write(const an_run *r, const an_plan *p, char *err, size_t errlen) {
    plotter z = {.r = r, .p = p};
    snprintf(z.dir, sizeof z.dir, "%s/analysis", r->dir);
    char points_dir[4300];
    snprintf(points_dir, sizeof points_dir, "%s/points", z.dir);
    if (make_dir(z.dir, err, errlen) || make_dir(points_dir, err, errlen)) return -1;
    int rc = write_shots(r, z.dir, err, errlen);
    if (rc == 0) rc = write_points(r, z.dir, err, errlen);
    if (rc == 0) rc = write_fits(r, p, z.dir, err, errlen);
    if (rc == 0) {
        z.w = an_work_new();
        rc = z.w ? plot_all(&z, err, errlen) : (snprintf(err, errlen, "out of memory"), -1);
    }
    an_work_free(z.w);
    free(z.t), free(z.y), free(z.fit), free(z.f), free(z.mag), free(z.fit_mag);
    free(z.map), free(z.map_y), free(z.map_strength);
    return rc;
}
