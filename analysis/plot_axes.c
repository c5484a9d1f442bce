/* plot_axes: axes for the analysis plots: SI prefixes chosen from the data
 * (20 pT, not 2e-11 T), linear axes with round ticks and log axes with
 * ticks of our own (PLplot numbers only whole decades), and lines, dots and
 * error bars drawn on them, leaving out what cannot be drawn. Not for the
 * page and its files (plot_page.c). PLplot keeps global state: not reentrant. */
#include "plot_page.h"

#include <ctype.h>
#include <math.h>
#include <plplot.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define MAX_TICKS 64
#define LEAST_DECADES 0.5       /* the narrowest log axis */
#define DOT_RADIUS 1.9          /* mm */
#define DIGIT_WIDTH 0.75        /* of the character height: a digit's width, and some */

/* ---- prefixes and ranges --------------------------------------------------- */

static bool letters_only(const char *unit) {
    for (const char *c = unit; *c; c++)
        if (!isalpha((unsigned char)*c)) return false;
    return *unit != '\0';
}

double an_axis_prefix(double biggest, const char *unit, const char **prefix) {
    static const char *const names[] = {"f", "p", "n", "µ", "m", "", "k", "M", "G"};
    enum { LOWEST = -15, HIGHEST = 9 };
    *prefix = "";
    if (!unit || !letters_only(unit) || !(biggest > 0) || !isfinite(biggest)) return 1;
    int e = 3 * (int)floor(log10(biggest) / 3 + 1e-9);
    if (e == 3 && biggest < 1e4) e = 0;     /* 2500 Hz reads better than 2.5 kHz */
    int highest = strcmp(unit, "s") == 0 ? 0 : HIGHEST;   /* 3000 s, not 3 ks */
    if (e < LOWEST) e = LOWEST;
    if (e > highest) e = highest;
    *prefix = names[(e - LOWEST) / 3];
    return pow(10, -e);
}

void an_range_init(an_range *r, bool log) {
    r->lo = INFINITY;
    r->hi = -INFINITY;
    r->n = 0;
    r->log = log;
}

void an_range_add(an_range *r, double v) {
    if (!isfinite(v) || (r->log && v <= 0)) return;
    if (v < r->lo) r->lo = v;
    if (v > r->hi) r->hi = v;
    r->n++;
}

void an_range_add_all(an_range *r, const double *v, size_t n) {
    for (size_t i = 0; v && i < n; i++) an_range_add(r, v[i]);
}

void an_range_add_bars(an_range *r, const double *v, const double *err, size_t n) {
    for (size_t i = 0; v && i < n; i++) {
        if (!isfinite(v[i])) continue;
        an_range_add(r, v[i]);
        if (err && isfinite(err[i]) && err[i] > 0) {
            an_range_add(r, v[i] + err[i]);
            an_range_add(r, v[i] - err[i]);
        }
    }
}

/* The window over lo..hi (drawn coordinates), padded; a log axis spans
 * half a decade at least, so that two of its ticks are numbered. */
static void window(an_axis *a, double lo, double hi, double pad) {
    if (a->log && hi - lo < LEAST_DECADES) {
        double mid = 0.5 * (lo + hi);
        lo = mid - 0.5 * LEAST_DECADES;
        hi = mid + 0.5 * LEAST_DECADES;
    } else if (!(hi - lo > 1e-9 * fmax(fabs(lo), fabs(hi)))) {
        double half = lo != 0 ? 0.1 * fabs(lo) : 1;
        lo -= half;
        hi += half;
    }
    a->lo = lo - pad * (hi - lo);
    a->hi = hi + pad * (hi - lo);
}

static void axis_window(an_axis *a, const an_range *r, double pad) {
    double lo = r->n ? r->lo : 1, hi = r->n ? r->hi : 1;
    if (a->log) window(a, log10(lo * a->scale), log10(hi * a->scale), pad);
    else window(a, lo * a->scale, hi * a->scale, pad);
}

void an_axis_set(an_axis *a, const an_range *r, double pad, const char *name,
                 const char *unit) {
    const char *prefix = "";
    a->log = r->log;
    a->scale = r->n ? an_axis_prefix(fmax(fabs(r->lo), fabs(r->hi)), unit, &prefix) : 1;
    snprintf(a->unit, sizeof a->unit, "%s%s", prefix, unit ? unit : "");
    an_axis_name(a, name);
    axis_window(a, r, pad);
}

void an_axis_name(an_axis *a, const char *name) {
    if (a->unit[0]) snprintf(a->label, sizeof a->label, "%s (%s)", name ? name : "", a->unit);
    else snprintf(a->label, sizeof a->label, "%s", name ? name : "");
}

void an_axis_like(an_axis *a, const an_axis *like, const an_range *r, double pad) {
    *a = *like;
    a->log = r->log;
    axis_window(a, r, pad);
}

double an_axis_at(const an_axis *a, double v) {
    if (!isfinite(v)) return NAN;
    if (!a->log) return v * a->scale;
    return v > 0 ? log10(v * a->scale) : NAN;
}

/* ---- ticks ----------------------------------------------------------------- */

typedef struct {
    double at[MAX_TICKS];       /* drawn coordinates */
    char text[MAX_TICKS][24];
    size_t n;
    double step;                /* linear axes: the spacing */
    double minor[4 * MAX_TICKS];
    size_t nminor;
} ticks;

/* A round step (1, 2 or 5 times a power of ten) giving about as many ticks
 * as the viewport has room for: numbers 10 characters apart across, 5.5
 * lines apart up. */
static double linear_step(double span, bool across) {
    PLFLT ch, scaled, sx0, sx1, sy0, sy1, vx0, vx1, vy0, vy1;
    plgchr(&ch, &scaled);
    plgspa(&sx0, &sx1, &sy0, &sy1);
    plgvpd(&vx0, &vx1, &vy0, &vy1);
    double room = across ? (vx1 - vx0) * (sx1 - sx0) / (10 * scaled)
                         : (vy1 - vy0) * (sy1 - sy0) / (5.5 * scaled);
    double target = fmin(fmax(room, across ? 3 : 4), across ? 10 : 8);
    double raw = span / target, mag = pow(10, floor(log10(raw))), norm = raw / mag;
    return (norm < 1.5 ? 1 : norm < 3.5 ? 2 : norm < 7.5 ? 5 : 10) * mag;
}

static void number(char *buf, size_t n, double v, double step) {
    if (fabs(v) < 1e-9 * step) v = 0;
    int decimals = step >= 1 ? 0 : (int)ceil(-log10(step) - 1e-9);
    if (fabs(v) >= 1e6 || decimals > 6) snprintf(buf, n, "%g", v);
    else snprintf(buf, n, "%.*f", decimals, v);
}

static void linear_ticks(const an_axis *a, ticks *t, bool across) {
    t->n = t->nminor = 0;
    t->step = linear_step(a->hi - a->lo, across);
    for (double k = ceil(a->lo / t->step - 1e-9); t->n < MAX_TICKS; k++) {
        double v = k * t->step;
        if (v > a->hi + 1e-9 * t->step) break;
        t->at[t->n] = v;
        number(t->text[t->n++], sizeof t->text[0], v, t->step);
    }
}

static bool in_window(const an_axis *a, double w) {
    double eps = 1e-9 * (a->hi - a->lo);
    return w >= a->lo - eps && w <= a->hi + eps;
}

/* Numbered ticks at 1, 2, 5 (or every) times each decade as the span
 * allows; minor ticks at the other whole multiples. */
static void log_ticks(const an_axis *a, ticks *t) {
    static const double all[] = {1, 2, 3, 4, 5, 6, 7, 8, 9}, some[] = {1, 2, 5}, few[] = {1, 3};
    static const double more[] = {1, 2, 3, 5};
    double decades = a->hi - a->lo;
    const double *m = decades <= 0.9 ? all : decades <= 1.5 ? more : decades <= 2.6 ? some
                      : decades <= 4.5 ? few : all;
    size_t nm = decades <= 0.9 ? 9 : decades <= 1.5 ? 4 : decades <= 2.6 ? 3
                : decades <= 4.5 ? 2 : 1;
    int every = decades <= 8 ? 1 : (int)ceil(decades / 8);
    t->n = t->nminor = 0;
    for (int d = (int)floor(a->lo); d <= (int)ceil(a->hi); d++) {
        for (size_t k = 0; k < 9; k++) {
            double w = d + log10(all[k]);
            if (!in_window(a, w)) continue;
            bool major = false;
            for (size_t j = 0; j < nm; j++) major |= all[k] == m[j];
            major &= (d % every) == 0;
            if (major && t->n < MAX_TICKS) {
                t->at[t->n] = w;
                snprintf(t->text[t->n++], sizeof t->text[0], "%.6g", all[k] * pow(10, d));
            } else if (decades <= 8 && t->nminor < 4 * MAX_TICKS) {
                t->minor[t->nminor++] = w;
            }
        }
    }
}

static void axis_ticks(const an_axis *a, ticks *t, bool across) {
    if (a->log) log_ticks(a, t);
    else linear_ticks(a, t, across);
}

static size_t widest(const ticks *t) {
    size_t w = 0;
    for (size_t k = 0; k < t->n; k++) {
        size_t chars = 0;
        for (const char *c = t->text[k]; *c; c++) chars += ((unsigned char)*c & 0xC0) != 0x80;
        if (chars > w) w = chars;
    }
    return w;
}

/* ---- the frame ------------------------------------------------------------- */

void an_world_per_mm(const an_axis *ax, const an_axis *ay, double *wx, double *wy) {
    PLFLT sx0, sx1, sy0, sy1, vx0, vx1, vy0, vy1;
    plgspa(&sx0, &sx1, &sy0, &sy1);
    plgvpd(&vx0, &vx1, &vy0, &vy1);
    *wx = (ax->hi - ax->lo) / ((vx1 - vx0) * (sx1 - sx0));
    *wy = (ay->hi - ay->lo) / ((vy1 - vy0) * (sy1 - sy0));
}

void an_axes_begin(const an_axis *x, const an_axis *y, double left, double right,
                   double bottom, double top) {
    plvpor(left, right, bottom, top);
    plwind(x->lo, x->hi, y->lo, y->hi);
}

/* Grid lines at the numbered ticks, across the window. */
static void grid(const an_axis *x, const an_axis *y, const ticks *tx, const ticks *ty) {
    plcol0(AN_COL_GRID);
    plwidth(0.8);
    for (size_t k = 0; k < tx->n; k++) pljoin(tx->at[k], y->lo, tx->at[k], y->hi);
    for (size_t k = 0; k < ty->n; k++) pljoin(x->lo, ty->at[k], x->hi, ty->at[k]);
}

/* Ticks on both sides of the frame, length mm long: in, or out when
 * length < 0. */
static void tick_marks(const an_axis *x, const an_axis *y, const double *at, size_t n,
                       bool on_x, double length) {
    double wx, wy;
    an_world_per_mm(x, y, &wx, &wy);
    PLFLT v[4];
    plgvpd(&v[0], &v[1], &v[2], &v[3]);
    if (length < 0) {
        /* Lines are clipped to the viewport: widen it for ticks that point
         * out, keeping the same world-to-page scale. */
        const double m = 0.05;
        double sx = (x->hi - x->lo) / (v[1] - v[0]), sy = (y->hi - y->lo) / (v[3] - v[2]);
        plvpor(v[0] - m, v[1] + m, v[2] - m, v[3] + m);
        plwind(x->lo - m * sx, x->hi + m * sx, y->lo - m * sy, y->hi + m * sy);
    }
    for (size_t k = 0; k < n; k++) {
        if (on_x) {
            pljoin(at[k], y->lo, at[k], y->lo + length * wy);
            pljoin(at[k], y->hi, at[k], y->hi - length * wy);
        } else {
            pljoin(x->lo, at[k], x->lo + length * wx, at[k]);
            pljoin(x->hi, at[k], x->hi - length * wx, at[k]);
        }
    }
    if (length < 0) {
        plvpor(v[0], v[1], v[2], v[3]);
        plwind(x->lo, x->hi, y->lo, y->hi);
    }
}

/* The frame and its ticks: PLplot's on linear axes (with its minor ticks
 * between ours), our own on log axes. */
static void frame_marks(const an_axis *x, const an_axis *y, const ticks *tx,
                        const ticks *ty, bool out) {
    PLFLT ch, scaled;
    plgchr(&ch, &scaled);
    double major = (out ? -0.45 : 0.45) * scaled;
    plsmin(0, 1);
    plsmaj(0, 1);
    const char *lin = out ? "bcsti" : "bcst";
    plbox(x->log ? "bc" : lin, x->log ? 0 : tx->step, 0, y->log ? "bc" : lin,
          y->log ? 0 : ty->step, 0);
    if (x->log) tick_marks(x, y, tx->minor, tx->nminor, true, 0.5 * major);
    if (y->log) tick_marks(x, y, ty->minor, ty->nminor, false, 0.5 * major);
    if (x->log) tick_marks(x, y, tx->at, tx->n, true, major);
    if (y->log) tick_marks(x, y, ty->at, ty->n, false, major);
}

void an_axes_frame(const an_axis *x, const an_axis *y, bool x_numbers, bool on_image) {
    ticks tx, ty;
    char buf[200];
    axis_ticks(x, &tx, true);
    axis_ticks(y, &ty, false);
    if (!on_image) grid(x, y, &tx, &ty);
    plcol0(AN_COL_AXIS);
    plwidth(1.2);
    frame_marks(x, y, &tx, &ty, on_image);
    double gap = on_image ? 0.5 : 0;    /* room for ticks pointing out */
    for (size_t k = 0; x_numbers && k < tx.n; k++)
        plmtex("b", 1.5 + gap, (tx.at[k] - x->lo) / (x->hi - x->lo), 0.5, tx.text[k]);
    for (size_t k = 0; k < ty.n; k++)
        plmtex("lv", 0.7 + gap, (ty.at[k] - y->lo) / (y->hi - y->lo), 1.0, ty.text[k]);
    if (x_numbers)
        plmtex("b", 3.3 + gap, 0.5, 0.5, an_page_text(x->label, buf, sizeof buf));
    double room = 0.7 + gap + DIGIT_WIDTH * (double)widest(&ty) + 1.2;
    if (y->label[0]) plmtex("l", room, 0.5, 0.5, an_page_text(y->label, buf, sizeof buf));
}

/* ---- what is drawn on the axes --------------------------------------------- */

typedef struct {
    PLFLT *x, *y;
    size_t n;
} run;

static void flush(run *r) {
    if (r->n >= 2) plline((PLINT)r->n, r->x, r->y);
    r->n = 0;
}

static void put(run *r, double x, double y) {
    r->x[r->n] = x;
    r->y[r->n++] = y;
}

/* One bucket of [i, end): its lowest and highest drawable points in order. */
static void bucket(const an_axis *ax, const an_axis *ay, const double *x, const double *y,
                   size_t i, size_t end, run *r) {
    size_t lo = end, hi = end;
    double ylo = INFINITY, yhi = -INFINITY;
    for (size_t k = i; k < end; k++) {
        double px = an_axis_at(ax, x[k]), py = an_axis_at(ay, y[k]);
        if (isnan(px) || isnan(py)) continue;
        if (py < ylo) ylo = py, lo = k;
        if (py > yhi) yhi = py, hi = k;
    }
    if (lo == end) {
        flush(r);
        return;
    }
    size_t first = lo < hi ? lo : hi, second = lo < hi ? hi : lo;
    put(r, an_axis_at(ax, x[first]), an_axis_at(ay, y[first]));
    if (second != first) put(r, an_axis_at(ax, x[second]), an_axis_at(ay, y[second]));
}

int an_draw_line(const an_axis *ax, const an_axis *ay, const double *x, const double *y,
                 size_t n, size_t max_points) {
    if (!x || !y || n == 0) return 0;
    size_t step = 1;
    if (max_points >= 4 && n > max_points) step = (n + max_points / 2 - 1) / (max_points / 2);
    size_t cap = 2 * (n / step + 1);
    run r = {malloc(cap * sizeof *r.x), malloc(cap * sizeof *r.y), 0};
    if (!r.x || !r.y) {
        free(r.x);
        free(r.y);
        return -1;
    }
    for (size_t i = 0; i < n; i += step) bucket(ax, ay, x, y, i, i + step < n ? i + step : n, &r);
    flush(&r);
    free(r.x);
    free(r.y);
    return 0;
}

int an_draw_points(const an_axis *ax, const an_axis *ay, const double *x, const double *y,
                   const double *err, size_t n) {
    double wx, wy;
    an_world_per_mm(ax, ay, &wx, &wy);
    plwidth(1.2);
    for (size_t i = 0; err && i < n; i++) {
        double px = an_axis_at(ax, x[i]), py = an_axis_at(ay, y[i]);
        if (isnan(px) || isnan(py) || !(err[i] > 0) || !isfinite(err[i])) continue;
        double lo = an_axis_at(ay, y[i] - err[i]), hi = an_axis_at(ay, y[i] + err[i]);
        PLFLT bx = px, blo = isnan(lo) || lo < ay->lo ? ay->lo : lo;
        PLFLT bhi = hi > ay->hi ? ay->hi : hi;
        plcol0(AN_COL_BAR);
        plerry(1, &bx, &blo, &bhi);
    }
    for (size_t i = 0; i < n; i++) {
        double px = an_axis_at(ax, x[i]), py = an_axis_at(ay, y[i]);
        if (isnan(px) || isnan(py)) continue;
        plcol0(AN_COL_DATA);
        plarc(px, py, DOT_RADIUS * wx, DOT_RADIUS * wy, 0, 360, 0, 1);
    }
    return 0;
}

void an_draw_level(const an_axis *ax, const an_axis *ay, double y) {
    double py = an_axis_at(ay, y);
    if (!isnan(py)) pljoin(ax->lo, py, ax->hi, py);
}

/* ---- the legend ------------------------------------------------------------ */

/* Characters in UTF-8 text. */
static size_t chars(const char *text) {
    size_t n = 0;
    for (const char *c = text; *c; c++) n += ((unsigned char)*c & 0xC0) != 0x80;
    return n;
}

void an_legend_above(const an_legend_entry *e, size_t n, const an_axis *ax,
                     const an_axis *ay) {
    PLFLT ch, scaled;
    double wx, wy, at = 1.0;
    char text[128], buf[140];
    plgchr(&ch, &scaled);
    an_world_per_mm(ax, ay, &wx, &wy);
    double per_char = 0.58 * scaled * wx / (ax->hi - ax->lo);
    for (size_t k = n; k-- > 0;) {
        snprintf(text, sizeof text, "%s %s", e[k].dot ? "●" : "━━", e[k].text);
        plcol0(e[k].colour);
        plmtex("t", 0.6, at, 1.0, an_page_text(text, buf, sizeof buf));
        at -= per_char * (double)(chars(text) + 3);
    }
}

/* How many of the points fall in the corner box of the window at (cx, cy)
 * (0 or 1 on each axis), a share wide and high. */
static size_t in_corner(const an_axis *ax, const an_axis *ay, const double *x,
                        const double *y, size_t n, int cx, int cy) {
    double w = 0.35 * (ax->hi - ax->lo), h = 0.3 * (ay->hi - ay->lo);
    size_t count = 0;
    double x0 = cx ? ax->hi - w : ax->lo, y0 = cy ? ay->hi - h : ay->lo;
    for (size_t i = 0; x && y && i < n; i++) {
        double px = an_axis_at(ax, x[i]), py = an_axis_at(ay, y[i]);
        if (px >= x0 && px <= x0 + w && py >= y0 && py <= y0 + h) count++;
    }
    return count;
}

void an_legend(const an_legend_entry *e, size_t n, const an_axis *ax, const an_axis *ay,
               const double *x, const double *y, size_t npoints) {
    enum { MAX_ENTRIES = 4 };
    static const int corner[4][2] = {{1, 1}, {0, 1}, {1, 0}, {0, 0}};
    static const PLINT place[4] = {
        PL_POSITION_RIGHT | PL_POSITION_TOP, PL_POSITION_LEFT | PL_POSITION_TOP,
        PL_POSITION_RIGHT | PL_POSITION_BOTTOM, PL_POSITION_LEFT | PL_POSITION_BOTTOM};
    size_t best = 0, fewest = (size_t)-1;
    for (size_t k = 0; k < 4; k++) {
        size_t c = in_corner(ax, ay, x, y, npoints, corner[k][0], corner[k][1]);
        if (c < fewest) fewest = c, best = k;
    }
    if (n > MAX_ENTRIES) n = MAX_ENTRIES;
    PLINT opt[MAX_ENTRIES], colour[MAX_ENTRIES], style[MAX_ENTRIES], count[MAX_ENTRIES];
    PLFLT width[MAX_ENTRIES], sscale[MAX_ENTRIES];
    PLCHAR_VECTOR text[MAX_ENTRIES], symbol[MAX_ENTRIES];
    char buf[MAX_ENTRIES][96];
    for (size_t k = 0; k < n; k++) {
        opt[k] = e[k].dot ? PL_LEGEND_SYMBOL : PL_LEGEND_LINE;
        colour[k] = e[k].colour;
        style[k] = 1;
        count[k] = 1;
        width[k] = 2;
        sscale[k] = 0.7;
        symbol[k] = "●";
        text[k] = an_page_text(e[k].text, buf[k], sizeof buf[k]);
    }
    PLFLT lw, lh;
    plcol0(AN_COL_AXIS);
    pllegend(&lw, &lh, PL_LEGEND_BACKGROUND | PL_LEGEND_BOUNDING_BOX,
             place[best] | PL_POSITION_INSIDE | PL_POSITION_VIEWPORT, 0.015, 0.025, 0.035,
             AN_COL_BG, AN_COL_GRID, 1, (PLINT)n, 1, (PLINT)n, opt, 0.6, 1.0, 2.0, 0.0, colour,
             text, NULL, NULL, NULL, NULL, colour, style, width, colour, sscale, count, symbol);
}
