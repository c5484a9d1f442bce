/* plot_page: what the plot sources (plot.c, plot_map.c) share: a page drawn
 * by PLplot into BASE.png and BASE.svg (plot_page.c), and axes with SI
 * prefixes, linear or log, with lines, points and error bars on them
 * (plot_axes.c). Internal to analysis/plot*.c; not part of analysis.h.
 * PLplot keeps global state, so none of this is reentrant. */
#ifndef PRECESS_PLOT_PAGE_H
#define PRECESS_PLOT_PAGE_H

#include <stdbool.h>
#include <stddef.h>

/* Colour map 0: background, frame, grid, then what is drawn. */
enum { AN_COL_BG, AN_COL_AXIS, AN_COL_GRID, AN_COL_DATA, AN_COL_FIT, AN_COL_NOTE,
       AN_COL_ZERO, AN_COL_BAR, AN_NCOLOURS };

/* ---- the page (plot_page.c) ----------------------------------------------- */

/* One page: draw is called twice (PNG, then SVG) between plinit and plend
 * and returns 0, or -1 when out of memory. svg_title and svg_desc are
 * written into the SVG as <title> and <desc>: cairo draws text as glyph
 * outlines, so this is where a reader (or a search) finds the words. */
typedef struct {
    const char *base;
    int width, height;          /* px of the PNG (pt of the SVG) */
    int (*draw)(const void *data);
    const void *data;
    const char *what;           /* "the record plot": for messages */
    const char *svg_title, *svg_desc;
} an_page;

int an_page_write(const an_page *p, char *err, size_t errlen);
int an_page_fail(char *err, size_t errlen, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

/* Text as PLplot is to write it: '#' starts an escape there, so it is
 * doubled. Returns buf. */
const char *an_page_text(const char *text, char *buf, size_t n);
/* The page's title, above the viewport (left, right, bottom, top). */
void an_page_title(const char *title, double left, double right, double top);

/* ---- axes (plot_axes.c) --------------------------------------------------- */

/* The SI prefix for values up to biggest in unit: sets *prefix ("p", "µ",
 * "" ...) and returns the factor that turns values into prefixed ones
 * (1e12 for pT). A unit that is not letters only gets "" and 1. */
double an_axis_prefix(double biggest, const char *unit, const char **prefix);

/* Finite values seen (> 0 only, on a log axis). */
typedef struct {
    double lo, hi;
    size_t n;
    bool log;
} an_range;

void an_range_init(an_range *r, bool log);
void an_range_add(an_range *r, double v);
void an_range_add_all(an_range *r, const double *v, size_t n);
/* Each v[i] -/+ err[i] (err may be NULL: v alone). */
void an_range_add_bars(an_range *r, const double *v, const double *err, size_t n);

/* An axis: drawn coordinate = value * scale, or its log10 on a log axis. */
typedef struct {
    double lo, hi;              /* the window, in drawn coordinates */
    double scale;
    bool log;
    char unit[32];              /* with its prefix: "pT" */
    char label[160];            /* "amplitude (pT)", plain text */
} an_axis;

/* The axis over the range r (not empty), padded by pad of its span on
 * either side (a single value gets a span of its own), with the prefix
 * chosen from the range and the label "name (prefix unit)". */
void an_axis_set(an_axis *a, const an_range *r, double pad, const char *name,
                 const char *unit);
/* The same scale, unit and label as like, over the range r (linear or log
 * as r is). */
void an_axis_like(an_axis *a, const an_axis *like, const an_range *r, double pad);
/* value -> drawn coordinate; NAN when it cannot be drawn. */
double an_axis_at(const an_axis *a, double v);

/* The viewport (normalized page coordinates) with x and y as its window. */
void an_axes_begin(const an_axis *x, const an_axis *y, double left, double right,
                   double bottom, double top);
/* Grid, frame, ticks and numbers; x numbers and label only when x_numbers.
 * On an image: no grid, and the ticks point out. */
void an_axes_frame(const an_axis *x, const an_axis *y, bool x_numbers, bool on_image);

/* The label "name (unit)" with a's prefixed unit. */
void an_axis_name(an_axis *a, const char *name);

/* A polyline through (x[i], y[i]), broken where a point cannot be drawn;
 * above max_points, an envelope (min and max per bucket) of x-sorted data.
 * Returns 0, or -1 when out of memory. */
int an_draw_line(const an_axis *ax, const an_axis *ay, const double *x, const double *y,
                 size_t n, size_t max_points);
/* Points as filled dots, with error bars of +-err (err may be NULL). */
int an_draw_points(const an_axis *ax, const an_axis *ay, const double *x, const double *y,
                   const double *err, size_t n);
/* A horizontal line across the window at value y. */
void an_draw_level(const an_axis *ax, const an_axis *ay, double y);
/* A legend of n entries (a line, or a dot with an error bar) inside the
 * viewport, at the corner where the fewest of the n points are. */
typedef struct {
    const char *text;
    int colour;
    bool dot;
} an_legend_entry;
void an_legend(const an_legend_entry *e, size_t n, const an_axis *ax, const an_axis *ay,
               const double *x, const double *y, size_t npoints);

/* The same as a row of coloured text above the viewport's right end. */
void an_legend_above(const an_legend_entry *e, size_t n, const an_axis *ax,
                     const an_axis *ay);

/* World units per mm on each axis of the current viewport. */
void an_world_per_mm(const an_axis *ax, const an_axis *ay, double *wx, double *wy);

#endif
