/* plot: the plots a lab user reads after a run: a shot's record and its
 * spectrum with the fit and the fitted lines marked, a relaxation or
 * build-up curve with its fit and residuals, and a dispersion profile
 * (the map of spectra is plot_map.c). Not for the page's files and PLplot's
 * handlers (plot_page.c) nor for axes (plot_axes.c). PLplot keeps global
 * state: these functions are not reentrant; call them from one thread. */
#include "analysis.h"
#include "plot_page.h"

#include <math.h>
#include <plplot.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define TRACE_POINTS 4000       /* drawn per line at most: an envelope beyond */
#define LEFT 0.12
#define TOP 0.89
#define RIGHT 0.97
#define MAX_ROWS 4              /* rows of line labels above a spectrum */
#define LABEL_ROW 0.09          /* a row's height, as a share of the spectrum's */
#define ZOOM_LEFT 0.74          /* the zoom on the trace's first periods */
#define ZOOM_PERIODS 6

/* Points of (x, y) that can be drawn: finite, and > 0 on a log axis. */
static size_t drawable(const double *x, const double *y, size_t n, bool log_x, bool log_y) {
    size_t count = 0;
    for (size_t i = 0; x && y && i < n; i++)
        if (isfinite(x[i]) && isfinite(y[i]) && (!log_x || x[i] > 0) && (!log_y || y[i] > 0))
            count++;
    return count;
}

/* ---- a shot's record and spectrum ----------------------------------------- */

typedef struct {
    const an_plot_shot *d;
    an_axis t, y, f, mag;
    double top;                 /* the spectrum's highest point, drawn coordinates */
    an_axis zoom_t;             /* the first periods of the strongest line; */
    size_t zoom_first, zoom_n;  /* ... its samples, zoom_n 0: no zoom panel */
    char zoom_note[64];
    char desc[1024];
} record_page;

/* The highest magnitude within a few bins of frequency f; NAN when none. */
static double peak_near(const an_plot_shot *d, double f) {
    double span = d->f[d->nspec - 1] - d->f[0];
    double bin = d->nspec > 1 ? fabs(span) / (double)(d->nspec - 1) : 1;
    double tol = fmax(3 * bin, 0.004 * fabs(span)), best = NAN;
    for (size_t i = 0; i < d->nspec; i++)
        if (fabs(d->f[i] - f) <= tol && isfinite(d->mag[i]) && !(d->mag[i] <= best))
            best = d->mag[i];
    return best;
}

/* A label over one line, or over lines too close to tell apart at this
 * width ("425.8, 431.2 Hz"). */
typedef struct {
    double x, peak;             /* drawn coordinates */
    int row;                    /* -1: no room for it */
    char text[AN_MAX_LINES * 12 + 8];
} line_mark;

static int by_value(const void *a, const void *b) {
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y;
}

/* The width of text in x's drawn coordinates. */
static double text_width(const char *text, double wx) {
    PLFLT ch, scaled;
    plgchr(&ch, &scaled);
    size_t chars = 0;
    for (const char *c = text; *c; c++) chars += ((unsigned char)*c & 0xC0) != 0x80;
    return (0.6 * scaled * (double)chars + 1.5) * wx;
}

/* The labels of the lines in the window, close lines sharing one. */
static size_t group_marks(const record_page *p, line_mark *m, double wx) {
    const an_plot_shot *d = p->d;
    double f[AN_MAX_LINES];
    size_t nf = 0, nm = 0;
    for (size_t k = 0; d->line_frequency && k < d->nlines && nf < AN_MAX_LINES; k++) {
        double x = an_axis_at(&p->f, d->line_frequency[k]);
        if (!isnan(x) && x >= p->f.lo && x <= p->f.hi) f[nf++] = d->line_frequency[k];
    }
    qsort(f, nf, sizeof *f, by_value);
    double one = text_width("0000.0 Hz", wx);
    for (size_t k = 0; k < nf;) {
        size_t j = k + 1, len = 0;
        while (j < nf && an_axis_at(&p->f, f[j]) - an_axis_at(&p->f, f[j - 1]) < one) j++;
        line_mark *mk = &m[nm++];
        mk->peak = -INFINITY;
        for (size_t i = k; i < j; i++) {
            len += (size_t)snprintf(mk->text + len, sizeof mk->text - len, "%s%.1f",
                                    i > k ? ", " : "", f[i]);
            mk->peak = fmax(mk->peak, an_axis_at(&p->mag, peak_near(d, f[i])));
        }
        snprintf(mk->text + len, sizeof mk->text - len, " Hz");
        mk->x = 0.5 * (an_axis_at(&p->f, f[k]) + an_axis_at(&p->f, f[j - 1]));
        k = j;
    }
    return nm;
}

/* Each label in the lowest row where it is clear of those to its left.
 * Returns the rows used. */
static int place_marks(const record_page *p, line_mark *m, size_t *nm) {
    double wx, wy, free_from[MAX_ROWS];
    an_world_per_mm(&p->f, &p->mag, &wx, &wy);
    *nm = group_marks(p, m, wx);
    int rows = 0;
    for (int r = 0; r < MAX_ROWS; r++) free_from[r] = -INFINITY;
    for (size_t k = 0; k < *nm; k++) {
        double half = 0.5 * text_width(m[k].text, wx);
        m[k].row = -1;
        for (int r = 0; r < MAX_ROWS && m[k].row < 0; r++)
            if (free_from[r] <= m[k].x - half) {
                free_from[r] = m[k].x + half;
                m[k].row = r;
                if (r + 1 > rows) rows = r + 1;
            }
    }
    return rows;
}

/* Each label in its row above the spectrum, a dotted line down to the
 * peak it names. */
static void draw_marks(const record_page *p, const line_mark *m, size_t nm) {
    double row = LABEL_ROW * (p->top - p->mag.lo);
    plcol0(AN_COL_NOTE);
    plwidth(1);
    for (size_t k = 0; k < nm; k++) {
        if (m[k].row < 0) continue;
        double y = p->top + row * (m[k].row + 1.3), from = m[k].peak + 0.1 * row;
        pllsty(3);
        if (isfinite(m[k].peak) && from < y - 0.5 * row)
            pljoin(m[k].x, from, m[k].x, y - 0.5 * row);
        pllsty(1);
        plptex(m[k].x, y, 1, 0, 0.5, m[k].text);
    }
}

/* The record and its fit over n samples from first. */
static int trace_lines(const record_page *p, const an_axis *t, size_t first, size_t n) {
    const an_plot_shot *d = p->d;
    plcol0(AN_COL_DATA);
    plwidth(t == &p->t ? 1 : 1.4);
    if (an_draw_line(t, &p->y, d->t + first, d->y + first, n, TRACE_POINTS)) return -1;
    if (!d->fit) return 0;
    plcol0(AN_COL_FIT);
    return an_draw_line(t, &p->y, d->t + first, d->fit + first, n, TRACE_POINTS);
}

/* The whole trace; beside it, when the line's periods are too many to
 * see, its first few with the fit. */
static int draw_trace(const record_page *p) {
    double right = p->zoom_n ? ZOOM_LEFT - 0.06 : RIGHT;
    an_axes_begin(&p->t, &p->y, LEFT, right, 0.57, TOP);
    an_axes_frame(&p->t, &p->y, true, false);
    if (trace_lines(p, &p->t, 0, p->d->n)) return -1;
    if (p->d->fit) {
        an_legend_entry e[2] = {{"record", AN_COL_DATA, false}, {"fit", AN_COL_FIT, false}};
        an_legend_above(e, 2, &p->t, &p->y);
    }
    if (!p->zoom_n) return 0;
    an_axis y = p->y;
    y.label[0] = '\0';                 /* the whole trace's, beside it */
    an_axes_begin(&p->zoom_t, &y, ZOOM_LEFT, RIGHT, 0.57, TOP);
    an_axes_frame(&p->zoom_t, &y, true, false);
    plcol0(AN_COL_NOTE);
    plmtex("t", 0.6, 0.5, 0.5, p->zoom_note);
    return trace_lines(p, &p->zoom_t, p->zoom_first, p->zoom_n);
}

static int draw_spectrum(const record_page *p) {
    const an_plot_shot *d = p->d;
    line_mark marks[AN_MAX_LINES];
    size_t nm = 0;
    an_axis mag = p->mag;
    an_axes_begin(&p->f, &mag, LEFT, RIGHT, 0.09, 0.45);
    int rows = place_marks(p, marks, &nm);
    mag.hi = fmax(mag.hi, p->top + (p->top - mag.lo) * LABEL_ROW * (rows + 0.9));
    an_axes_begin(&p->f, &mag, LEFT, RIGHT, 0.09, 0.45);
    an_axes_frame(&p->f, &mag, true, false);
    plcol0(AN_COL_DATA);
    plwidth(1);
    if (an_draw_line(&p->f, &mag, d->f, d->mag, d->nspec, TRACE_POINTS)) return -1;
    if (d->fit_mag) {
        plcol0(AN_COL_FIT);
        if (an_draw_line(&p->f, &mag, d->f, d->fit_mag, d->nspec, TRACE_POINTS)) return -1;
        an_legend_entry e[2] = {{"spectrum", AN_COL_DATA, false}, {"fit", AN_COL_FIT, false}};
        an_legend_above(e, 2, &p->f, &mag);
    }
    draw_marks(p, marks, nm);
    return 0;
}

static int draw_record(const void *data) {
    const record_page *p = data;
    an_page_title(p->d->title, LEFT, RIGHT, TOP);
    return draw_trace(p) || draw_spectrum(p) ? -1 : 0;
}

/* The zoom on the trace: ZOOM_PERIODS of the strongest line from the
 * first sample, when the trace holds many more than that. */
static void record_zoom(record_page *p) {
    const an_plot_shot *d = p->d;
    p->zoom_n = 0;
    if (!d->line_frequency || d->nlines == 0 || !(d->line_frequency[0] > 0)) return;
    double period = 1 / d->line_frequency[0], from = INFINITY, to = -INFINITY;
    for (size_t i = 0; i < d->n; i++)
        if (isfinite(d->t[i])) from = fmin(from, d->t[i]), to = fmax(to, d->t[i]);
    if (!(to - from > 5 * ZOOM_PERIODS * period)) return;
    an_range r;
    an_range_init(&r, false);
    size_t first = 0, end = 0;          /* the samples are in time order */
    while (first < d->n && !(d->t[first] >= from)) first++;
    for (end = first; end < d->n && !(d->t[end] > from + ZOOM_PERIODS * period); end++)
        an_range_add(&r, d->t[end]);
    if (end - first < 4 * ZOOM_PERIODS) return;     /* too few samples per period */
    an_axis_set(&p->zoom_t, &r, 0, "time from shot start", "s");
    p->zoom_first = first;
    p->zoom_n = end - first;
    snprintf(p->zoom_note, sizeof p->zoom_note, "the first %d periods", ZOOM_PERIODS);
}

/* The axes, from the data; the description the SVG carries. */
static void record_axes(record_page *p) {
    const an_plot_shot *d = p->d;
    an_range rt, ry, rf, rm;
    an_range_init(&rt, false);
    an_range_init(&ry, false);
    an_range_init(&rf, false);
    an_range_init(&rm, false);
    an_range_add_all(&rt, d->t, d->n);
    an_range_add_all(&ry, d->y, d->n);
    an_range_add_all(&ry, d->fit, d->fit ? d->n : 0);
    an_range_add_all(&rf, d->f, d->nspec);
    an_range_add_all(&rm, d->mag, d->nspec);
    an_range_add_all(&rm, d->fit_mag, d->fit_mag ? d->nspec : 0);
    an_range_add(&rm, 0);
    an_axis_set(&p->t, &rt, 0, "time from shot start", "s");
    an_axis_set(&p->y, &ry, 0.05, "signal", d->units);
    an_axis_set(&p->f, &rf, 0, "frequency", "Hz");
    an_axis_set(&p->mag, &rm, 0.04, "magnitude", d->units);
    p->top = rm.hi * p->mag.scale;
    p->mag.lo = 0;
    record_zoom(p);
    size_t k = (size_t)snprintf(p->desc, sizeof p->desc,
                                "Top: %s against %s, the record%s%s. Bottom: %s against %s, "
                                "the spectrum%s.", p->y.label, p->t.label,
                                d->fit ? " and the fit" : "",
                                p->zoom_n ? "; beside it, its first periods" : "",
                                p->mag.label, p->f.label, d->fit_mag ? " and the fit's" : "");
    for (size_t i = 0; d->line_frequency && i < d->nlines && k + 16 < sizeof p->desc; i++)
        k += (size_t)snprintf(p->desc + k, sizeof p->desc - k, "%s%.1f Hz%s",
                              i ? ", " : " Lines marked at ", d->line_frequency[i],
                              i + 1 == d->nlines ? "." : "");
}

int an_plot_record(const char *base, const an_plot_shot *d, char *err, size_t errlen) {
    if (!d) return an_page_fail(err, errlen, "no record to plot into %s", base ? base : "?");
    if (!drawable(d->t, d->y, d->n, false, false))
        return an_page_fail(err, errlen, "nothing to plot into %s: the record has no sample "
                            "with a finite time and value", base ? base : "?");
    if (!drawable(d->f, d->mag, d->nspec, false, false))
        return an_page_fail(err, errlen, "nothing to plot into %s: the spectrum has no bin "
                            "with a finite frequency and magnitude", base ? base : "?");
    record_page p = {.d = d};
    record_axes(&p);
    an_page page = {.base = base, .width = 1200, .height = 900, .draw = draw_record,
                    .data = &p, .what = "the record plot", .svg_title = d->title,
                    .svg_desc = p.desc};
    return an_page_write(&page, err, errlen);
}

/* ---- a series with its fit, and a profile ------------------------------- */

typedef struct {
    const an_plot_curve *d;
    an_axis x, y, res;
    int height;                 /* px */
    double top, main_bottom, res_bottom, res_top;
    char desc[1024];
} series_page;

static int draw_residual(const series_page *p) {
    const an_plot_curve *d = p->d;
    an_axes_begin(&p->x, &p->res, LEFT, RIGHT, p->res_bottom, p->res_top);
    an_axes_frame(&p->x, &p->res, true, false);
    plcol0(AN_COL_ZERO);
    plwidth(1.2);
    pllsty(2);
    an_draw_level(&p->x, &p->res, 0);
    pllsty(1);
    return an_draw_points(&p->x, &p->res, d->x, d->residual, d->y_err, d->n);
}

static int draw_series(const void *data) {
    const series_page *p = data;
    const an_plot_curve *d = p->d;
    an_page_title(d->title, LEFT, RIGHT, p->top);
    an_axes_begin(&p->x, &p->y, LEFT, RIGHT, p->main_bottom, p->top);
    an_axes_frame(&p->x, &p->y, !d->residual, false);
    if (d->ncurve && d->curve_x && d->curve_y) {
        plcol0(AN_COL_FIT);
        plwidth(1.8);
        if (an_draw_line(&p->x, &p->y, d->curve_x, d->curve_y, d->ncurve, TRACE_POINTS))
            return -1;
    }
    if (an_draw_points(&p->x, &p->y, d->x, d->y, d->y_err, d->n)) return -1;
    if (d->ncurve && d->curve_x && d->curve_y) {
        an_legend_entry e[2] = {{d->y_err ? "measured, ±1σ" : "measured", AN_COL_DATA, true},
                                {"fit", AN_COL_FIT, false}};
        an_legend(e, 2, &p->x, &p->y, d->x, d->y, d->n);
    }
    return d->residual ? draw_residual(p) : 0;
}

static void series_axes(series_page *p) {
    const an_plot_curve *d = p->d;
    an_range rx, ry, rr;
    an_range_init(&rx, d->log_x);
    an_range_init(&ry, d->log_y);
    an_range_init(&rr, false);
    for (size_t i = 0; i < d->n; i++) {
        if (!isfinite(d->x[i]) || !isfinite(d->y[i])) continue;
        an_range_add(&rx, d->x[i]);
        an_range_add_bars(&ry, &d->y[i], d->y_err ? &d->y_err[i] : NULL, 1);
        if (d->residual && isfinite(d->residual[i]))
            an_range_add_bars(&rr, &d->residual[i], d->y_err ? &d->y_err[i] : NULL, 1);
    }
    for (size_t i = 0; d->curve_x && d->curve_y && i < d->ncurve; i++)
        if (isfinite(d->curve_x[i]) && isfinite(d->curve_y[i])) {
            an_range_add(&rx, d->curve_x[i]);
            an_range_add(&ry, d->curve_y[i]);
        }
    an_range_add(&rr, 0);
    an_axis_set(&p->x, &rx, 0.04, d->x_name, d->x_unit);
    an_axis_set(&p->y, &ry, 0.06, d->y_name, d->y_unit);
    an_axis_like(&p->res, &p->y, &rr, 0.12);
    an_axis_name(&p->res, "residual");
    /* Margins in pixels, the same whatever the page's height. */
    p->height = d->residual ? 820 : 680;
    double px = 1.0 / p->height;
    p->top = 1 - 82 * px;
    p->res_bottom = 82 * px;
    p->res_top = p->res_bottom + 165 * px;
    p->main_bottom = d->residual ? p->res_top + 45 * px : 82 * px;
    snprintf(p->desc, sizeof p->desc, "%s against %s: %zu measured points%s%s%s.",
             p->y.label, p->x.label, d->n, d->y_err ? " with error bars (one sigma)" : "",
             d->ncurve ? ", the fit as a line" : "",
             d->residual ? "; below, the residuals (measured minus fit)" : "");
}

static int write_series(const char *base, const an_plot_curve *d, const char *what,
                        char *err, size_t errlen) {
    if (!d || !d->x || !d->y)
        return an_page_fail(err, errlen, "no %s to plot into %s", what, base ? base : "?");
    if (!drawable(d->x, d->y, d->n, d->log_x, d->log_y))
        return an_page_fail(err, errlen, "nothing to plot into %s: the %s has no point with "
                            "a finite%s x and y", base ? base : "?", what,
                            d->log_x || d->log_y ? ", positive on a log axis," : "");
    series_page p = {.d = d};
    series_axes(&p);
    char plot_what[64];
    snprintf(plot_what, sizeof plot_what, "the %s plot", what);
    an_page page = {.base = base, .width = 1000, .height = p.height,
                    .draw = draw_series, .data = &p, .what = plot_what,
                    .svg_title = d->title, .svg_desc = p.desc};
    return an_page_write(&page, err, errlen);
}

int an_plot_series(const char *base, const an_plot_curve *d, char *err, size_t errlen) {
    return write_series(base, d, "series", err, errlen);
}

int an_plot_profile(const char *base, const an_plot_profile_data *d, char *err,
                    size_t errlen) {
    if (!d) return an_page_fail(err, errlen, "no profile to plot into %s", base ? base : "?");
    an_plot_curve c = {.title = d->title, .x_name = d->x_name, .x_unit = d->x_unit,
                       .y_name = d->y_name, .y_unit = d->y_unit, .n = d->n, .x = d->x,
                       .y = d->y, .y_err = d->y_err, .log_x = true, .log_y = true};
    return write_series(base, &c, "profile", err, errlen);
}
