/* plot_map: the spectra of every point of a scan as one image, frequency
 * across and the scanned quantity (a field, say) up, each spectrum a band
 * reaching halfway to its neighbours, with a colour bar. Not for a single
 * spectrum (plot.c) nor for the page's files (plot_page.c). PLplot keeps
 * global state: not reentrant; call it from one thread. */
#include "analysis.h"
#include "plot_page.h"

#include <math.h>
#include <plplot.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define MAX_COLUMNS 700         /* drawn columns: the highest of each bucket of bins */
#define LEFT 0.11
#define RIGHT 0.83
#define BOTTOM (90.0 / 800)     /* margins of 90 and 82 px on the 800 px page */
#define TOP (1 - 82.0 / 800)

typedef struct {
    const an_plot_map_data *d;
    size_t *order;              /* rows with a finite y (positive on a log axis), by y */
    size_t nrows, ncols;        /* drawn rows and columns */
    double *edge;               /* nrows + 1 band edges, drawn coordinates */
    PLFLT **image;              /* ncols x nrows: image[column][row] */
    double zmin, zmax;
    an_axis f, y;
    char desc[512];
} map_page;

/* ---- the bands ------------------------------------------------------------- */

typedef struct {
    double y;
    size_t row;
} keyed_row;

static int by_y(const void *a, const void *b) {
    double x = ((const keyed_row *)a)->y, y = ((const keyed_row *)b)->y;
    return x < y ? -1 : x > y;
}

/* How evenly spaced the rows are on an axis: the spread of the gaps
 * between neighbours over their mean (0: even). */
static double unevenness(const map_page *p, bool log) {
    double sum = 0, sum2 = 0;
    size_t n = p->nrows - 1;
    for (size_t k = 0; k < n; k++) {
        double a = p->d->y[p->order[k]], b = p->d->y[p->order[k + 1]];
        double gap = log ? log10(b / a) : b - a;
        sum += gap;
        sum2 += gap * gap;
    }
    double mean = sum / (double)n;
    return mean > 0 ? sqrt(fmax(sum2 / (double)n - mean * mean, 0)) / mean : INFINITY;
}

/* Rows by y; a log axis when y spans a decade or more and its values are
 * more evenly spaced on one. */
static int choose_rows(map_page *p) {
    const an_plot_map_data *d = p->d;
    keyed_row *key = malloc(d->nrows * sizeof *key);
    if (!key) return -1;
    bool positive = true;
    p->nrows = 0;
    for (size_t r = 0; r < d->nrows; r++)
        if (isfinite(d->y[r])) {
            key[p->nrows++] = (keyed_row){d->y[r], r};
            positive &= d->y[r] > 0;
        }
    qsort(key, p->nrows, sizeof *key, by_y);
    for (size_t k = 0; k < p->nrows; k++) p->order[k] = key[k].row;
    free(key);
    double lo = d->y[p->order[0]], hi = d->y[p->order[p->nrows - 1]];
    bool log = positive && p->nrows >= 3 && hi >= 10 * lo &&
               unevenness(p, true) < unevenness(p, false);
    an_range r;
    an_range_init(&r, log);
    for (size_t k = 0; k < p->nrows; k++) an_range_add(&r, d->y[p->order[k]]);
    an_axis_set(&p->y, &r, 0, d->y_name, d->y_unit);
    return 0;
}

/* Band edges halfway between neighbours; the outer ones as far out as
 * their inner ones are in. */
static void band_edges(map_page *p) {
    size_t n = p->nrows;
    double *c = p->edge;            /* the centres first, then the edges */
    for (size_t k = 0; k < n; k++) c[k] = an_axis_at(&p->y, p->d->y[p->order[k]]);
    if (n == 1) {
        c[1] = p->y.hi;
        c[0] = p->y.lo;
        return;
    }
    double last = c[n - 1], before = c[n - 2], first = c[0], second = c[1];
    for (size_t k = n - 1; k >= 1; k--) c[k] = 0.5 * (c[k] + c[k - 1]);
    c[0] = first - 0.5 * (second - first);
    c[n] = last + 0.5 * (last - before);
    p->y.lo = c[0];
    p->y.hi = c[n];
}

/* The image: columns of bins merged by their highest value (a line stays
 * visible), NAN where a row has nothing finite in a bucket. */
static void fill_image(map_page *p) {
    const an_plot_map_data *d = p->d;
    size_t per = (d->ncols + p->ncols - 1) / p->ncols;
    p->zmin = INFINITY;
    p->zmax = -INFINITY;
    for (size_t c = 0; c < p->ncols; c++)
        for (size_t k = 0; k < p->nrows; k++) {
            const double *row = d->magnitude + p->order[k] * d->ncols;
            double best = NAN;
            for (size_t b = c * per; b < (c + 1) * per && b < d->ncols; b++)
                if (isfinite(row[b]) && !(row[b] <= best)) best = row[b];
            p->image[c][k] = best;
            if (best < p->zmin) p->zmin = best;
            if (best > p->zmax) p->zmax = best;
        }
}

static void free_page(map_page *p) {
    if (p->image)
        for (size_t c = 0; c < p->ncols; c++) free(p->image[c]);
    free(p->image);
    free(p->order);
    free(p->edge);
}

static int alloc_page(map_page *p) {
    const an_plot_map_data *d = p->d;
    size_t per = (d->ncols + MAX_COLUMNS - 1) / MAX_COLUMNS;
    p->ncols = (d->ncols + per - 1) / per;
    p->order = malloc(d->nrows * sizeof *p->order);
    p->edge = malloc((d->nrows + 1) * sizeof *p->edge);
    p->image = calloc(p->ncols, sizeof *p->image);
    if (!p->order || !p->edge || !p->image) return -1;
    for (size_t c = 0; c < p->ncols; c++)
        if (!(p->image[c] = malloc(d->nrows * sizeof **p->image))) return -1;
    return 0;
}

/* ---- drawing ---------------------------------------------------------------- */

/* Image cell corners (column, row) -> world coordinates. */
static void corner(PLFLT ix, PLFLT iy, PLFLT *x, PLFLT *y, PLPointer data) {
    const map_page *p = data;
    *x = p->f.lo + (p->f.hi - p->f.lo) * ix / (double)p->ncols;
    double k = floor(iy);
    if (k < 0) k = 0;
    if (k > (double)p->nrows - 1) k = (double)p->nrows - 1;
    size_t r = (size_t)k;
    *y = p->edge[r] + (iy - k) * (p->edge[r + 1] - p->edge[r]);
}

/* A dark-to-bright map that stays readable in grey: a line's peak is the
 * brightest, the noise floor the darkest. */
static void colour_map(void) {
    static const PLFLT at[] = {0, 0.25, 0.5, 0.75, 1};
    static const PLFLT r[] = {0.27, 0.23, 0.13, 0.48, 0.99};
    static const PLFLT g[] = {0.00, 0.32, 0.57, 0.82, 0.91};
    static const PLFLT b[] = {0.33, 0.55, 0.55, 0.32, 0.14};
    plscmap1n(256);
    plscmap1l(1, 5, at, r, g, b, NULL);
}

static void colour_bar(const map_page *p) {
    enum { STEPS = 64 };
    PLFLT values[STEPS], w, h;
    for (int k = 0; k < STEPS; k++)
        values[k] = p->zmin + (p->zmax - p->zmin) * k / (STEPS - 1.0);
    const PLFLT *columns[1] = {values};
    PLINT label_opts[1] = {PL_COLORBAR_LABEL_RIGHT}, sub[1] = {0}, nvalues[1] = {STEPS};
    PLFLT tick[1] = {0};
    PLCHAR_VECTOR labels[1] = {"relative magnitude"}, axis_opts[1] = {"bcvmst"};
    plcol0(AN_COL_AXIS);
    plwidth(1);
    plcolorbar(&w, &h, PL_COLORBAR_IMAGE, PL_POSITION_RIGHT | PL_POSITION_OUTSIDE |
               PL_POSITION_VIEWPORT, 0.03, 0, 0.035, 1, AN_COL_BG, AN_COL_AXIS, 1, 0, 0, 0,
               0, 1, label_opts, labels, 1, axis_opts, tick, sub, nvalues, columns);
}

static int draw_map(const void *data) {
    const map_page *p = data;
    an_page_title(p->d->title, LEFT, RIGHT, TOP);
    colour_map();
    an_axes_begin(&p->f, &p->y, LEFT, RIGHT, BOTTOM, TOP);
    double zlo = p->zmin, zhi = p->zmax > p->zmin ? p->zmax : p->zmin + 1;
    plimagefr((PLFLT_MATRIX)p->image, (PLINT)p->ncols, (PLINT)p->nrows, p->f.lo, p->f.hi,
              p->y.lo, p->y.hi, zlo, zhi, zlo, zhi, corner, (PLPointer)p);
    an_axes_frame(&p->f, &p->y, true, true);
    colour_bar(p);
    return 0;
}

/* ---- the map ---------------------------------------------------------------- */

static int check_map(const char *base, const an_plot_map_data *d, char *err, size_t errlen) {
    const char *b = base ? base : "?";
    if (!d || !d->y || !d->magnitude)
        return an_page_fail(err, errlen, "no spectra to plot into %s", b);
    if (d->nrows == 0 || d->ncols == 0)
        return an_page_fail(err, errlen, "nothing to plot into %s: the map has %zu row%s of "
                            "%zu bin%s", b, d->nrows, d->nrows == 1 ? "" : "s", d->ncols,
                            d->ncols == 1 ? "" : "s");
    if (!isfinite(d->f_min) || !isfinite(d->f_max) || !(d->f_max > d->f_min))
        return an_page_fail(err, errlen, "cannot plot the map into %s: its frequencies run "
                            "from %g Hz to %g Hz; give f_min < f_max", b, d->f_min, d->f_max);
    size_t finite = 0;
    for (size_t r = 0; r < d->nrows; r++)
        if (isfinite(d->y[r]))
            for (size_t c = 0; c < d->ncols; c++)
                finite += isfinite(d->magnitude[r * d->ncols + c]) != 0;
    if (!finite)
        return an_page_fail(err, errlen, "nothing to plot into %s: no row of the map has a "
                            "finite %s and a finite magnitude", b, d->y_name ? d->y_name : "y");
    return 0;
}

int an_plot_map(const char *base, const an_plot_map_data *d, char *err, size_t errlen) {
    if (check_map(base, d, err, errlen)) return -1;
    map_page p = {.d = d};
    int rc = -1;
    if (alloc_page(&p) || choose_rows(&p)) {
        an_page_fail(err, errlen, "out of memory plotting the map into %s", base);
    } else {
        band_edges(&p);
        an_range rf;
        an_range_init(&rf, false);
        an_range_add(&rf, d->f_min);
        an_range_add(&rf, d->f_max);
        an_axis_set(&p.f, &rf, 0, "frequency", "Hz");
        fill_image(&p);
        snprintf(p.desc, sizeof p.desc, "The magnitude spectra of %zu points as an image: %s "
                 "across, %s up%s; a colour bar for the relative magnitude.", p.nrows,
                 p.f.label, p.y.label, p.y.log ? " (log axis)" : "");
        an_page page = {.base = base, .width = 1100, .height = 800, .draw = draw_map,
                        .data = &p, .what = "the map of spectra", .svg_title = d->title,
                        .svg_desc = p.desc};
        rc = an_page_write(&page, err, errlen);
    }
    free_page(&p);
    return rc;
}
