/* diagram: one shot's timing diagram drawn with PLplot into a PNG or SVG:
 * a strip per coil that changes (its current against time), a strip of the
 * output lines, a strip of pulse and acquisition windows, one time axis.
 * Not for analysis plots of records (analysis/plot.c), nor for printing:
 * it reports problems through err and leaves printing to the command. */
#include "cli.h"
#include "compile.h"
#include "scan.h"
#include "units.h"

#include <errno.h>
#include <math.h>
#include <plplot.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>
#include <unistd.h>

#define UNIFORM_SAMPLES 2400    /* across the shot, on top of every edge */
#define PULSE_SAMPLES 400       /* inside each pulse, for its shape ... */
#define PULSE_SAMPLES_ALL 40000 /* ... but no more than this over all pulses */

/* Colour map 0: background, axes, grid, then the traces in turn. */
enum { COL_BG, COL_AXIS, COL_GRID, COL_LINE, COL_PULSE, COL_ACQUIRE, COL_NOTE,
       COL_TRACE0, NCOLOURS = COL_TRACE0 + 6 };
static const int colour_rgb[NCOLOURS][3] = {
    {255, 255, 255}, {0, 0, 0}, {215, 215, 215}, {40, 40, 40}, {214, 39, 40},
    {44, 150, 44}, {150, 20, 20},
    {31, 100, 180}, {200, 90, 0}, {120, 70, 170}, {20, 140, 140}, {140, 86, 75},
    {90, 90, 90},
};

/* The viewport the strips share (normalized page coordinates). */
#define PAGE_LEFT 0.11
#define PAGE_RIGHT 0.97
#define PAGE_BOTTOM 0.09
#define PAGE_TOP 0.93
#define STRIP_GAP 0.018
#define TEXT_SCALE 0.8          /* of PLplot's default character height */
#define CHAR_WIDTH 0.0108       /* one character's width, as a share of the time axis */
#define TRACE_WIDTH 2.2
#define LINE_PITCH 2.0          /* between the baselines of output lines */

typedef struct {
    const compiled *c;
    uint32_t shot;
    const compile_timeline *tl;
    double span;                /* the shot's duration, s */
    PLFLT *t, *y;               /* sample times (sorted) and a scratch trace */
    size_t nt;
    int *coils;                 /* the coils drawn, in rig order */
    size_t ncoils;
    int *lines;                 /* the output lines, in rig order */
    size_t nlines;
    size_t nstrips, strip;      /* strips in all, and the one being drawn */
} diagram;

/* PLplot reports recoverable errors through its abort handler and ends
 * the process through its exit handler (no drivers at all, say); both
 * are caught, the second by jumping back out of PLplot, so that nothing
 * prints and nothing exits. */
static char plplot_error[256];
static jmp_buf plplot_exit;

static void on_plplot_abort(PLCHAR_VECTOR message) {
    if (!plplot_error[0]) snprintf(plplot_error, sizeof plplot_error, "%s", message);
}

static int on_plplot_exit(PLCHAR_VECTOR message) {
    on_plplot_abort(message);
    longjmp(plplot_exit, 1);
}

static int fail(char *err, size_t errlen, const char *fmt, ...) {
    if (err && errlen) {
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(err, errlen, fmt, ap);
        va_end(ap);
    }
    return -1;
}

/* A name as PLplot text: '#' starts an escape there, so it is doubled. */
static const char *plain(const char *name, char *buf, size_t n) {
    size_t k = 0;
    for (const char *p = name; *p && k + 2 < n; p++) {
        if (*p == '#') buf[k++] = '#';
        buf[k++] = *p;
    }
    buf[k] = '\0';
    return buf;
}

static const char *device_for(const char *path) {
    const char *dot = strrchr(path, '.');
    if (!dot || strchr(dot, '/')) return NULL;
    if (strcasecmp(dot, ".png") == 0) return "pngcairo";
    if (strcasecmp(dot, ".svg") == 0) return "svgcairo";
    return NULL;
}

/* Whether PLplot has the device: asked first, since plinit would prompt
 * on the terminal for another one. */
static int device_available(const char *device) {
    enum { MAX_DEVICES = 128 };
    PLCHAR_VECTOR menu[MAX_DEVICES], names[MAX_DEVICES];
    PLCHAR_VECTOR *pm = menu, *pn = names;
    int n = MAX_DEVICES;
    plgDevs(&pm, &pn, &n);
    for (int i = 0; i < n; i++)
        if (names[i] && strcmp(names[i], device) == 0) return 1;
    return 0;
}

/* ---- sampling ----------------------------------------------------------- */

/* A coil's current in this shot: the timeline's, with the pulse polarity
 * of the shot's average applied. */
static double shot_current(const diagram *d, int coil, double time) {
    double i = compile_current_at(d->c, d->tl, coil, time);
    for (size_t k = 0; k < d->tl->nevents; k++) {
        const compile_event *e = &d->tl->events[k];
        if (e->kind != EV_PULSE || e->channel != coil) continue;
        if (time < e->start || time >= e->start + e->length) continue;
        const compile_pulse *pu = &d->tl->pulses[e->index];
        if (compile_pulse_polarity(d->c, d->shot, pu) < 0)
            i -= 2 * pulse_current_at(&pu->shape_at_sample, e->to, time - e->start);
    }
    return i;
}

static int cmp_double(const void *a, const void *b) {
    double x = *(const PLFLT *)a, y = *(const PLFLT *)b;
    return x < y ? -1 : x > y;
}

static void add_edge(diagram *d, double t) {
    if (t > 0) d->t[d->nt++] = nextafter(t, -INFINITY);
    d->t[d->nt++] = t;
}

/* Uniform times plus both sides of every edge, and many inside pulses. */
static int sample_times(diagram *d) {
    const compile_timeline *tl = d->tl;
    size_t inside = tl->npulses ? PULSE_SAMPLES_ALL / tl->npulses : 0;
    if (inside > PULSE_SAMPLES) inside = PULSE_SAMPLES;
    if (inside < 8) inside = 8;
    size_t cap = UNIFORM_SAMPLES + 1 + tl->nevents * 8 + tl->npulses * inside;
    d->t = malloc(cap * sizeof *d->t);
    d->y = malloc(cap * sizeof *d->y);
    if (!d->t || !d->y) return -1;
    for (size_t k = 0; k <= UNIFORM_SAMPLES; k++)
        d->t[d->nt++] = d->span * (double)k / UNIFORM_SAMPLES;
    for (size_t k = 0; k < tl->nevents; k++) {
        const compile_event *e = &tl->events[k];
        add_edge(d, e->start);
        add_edge(d, e->start + e->length);
        if (e->kind != EV_PULSE) continue;
        const compile_pulse *pu = &tl->pulses[e->index];
        add_edge(d, e->start + pu->rise);
        add_edge(d, e->start + e->length - pu->rise);
        for (size_t j = 1; j < inside; j++)
            d->t[d->nt++] = e->start + e->length * (double)j / (double)inside;
    }
    qsort(d->t, d->nt, sizeof *d->t, cmp_double);
    size_t n = 0;
    for (size_t k = 0; k < d->nt; k++)
        if (d->t[k] >= 0 && d->t[k] <= d->span && (n == 0 || d->t[k] != d->t[n - 1]))
            d->t[n++] = d->t[k];
    d->nt = n;
    return 0;
}

/* Fill d->y with coil's trace; returns whether it ever changes. */
static int coil_trace(diagram *d, int coil) {
    int changes = 0;
    for (size_t k = 0; k < d->nt; k++) {
        d->y[k] = shot_current(d, coil, d->t[k]);
        if (d->y[k] != d->y[0]) changes = 1;
    }
    return changes;
}

/* Choose the coils that change and the output lines. */
static int choose_channels(diagram *d) {
    const plan_rig *rig = &d->c->plan->rig;
    d->coils = malloc((rig->ncoils + 1) * sizeof *d->coils);
    d->lines = malloc((rig->nlines + 1) * sizeof *d->lines);
    if (!d->coils || !d->lines) return -1;
    for (size_t k = 0; k < rig->ncoils; k++)
        if (coil_trace(d, (int)k)) d->coils[d->ncoils++] = (int)k;
    for (size_t k = 0; k < rig->nlines; k++)
        if (rig->lines[k].direction == LINE_OUTPUT) d->lines[d->nlines++] = (int)k;
    d->nstrips = d->ncoils + 2;
    return 0;
}

/* ---- layout ------------------------------------------------------------- */

static double strip_weight(const diagram *d, size_t strip) {
    if (strip < d->ncoils) return 1.0;
    if (strip == d->ncoils) return d->nlines > 1 ? 0.35 * (double)d->nlines : 0.45;
    return 0.55;
}

/* Make strip the current viewport with y from ylo to yhi over the shot. */
static void strip_begin(diagram *d, size_t strip, double ylo, double yhi) {
    double total = 0, above = 0;
    for (size_t k = 0; k < d->nstrips; k++) {
        total += strip_weight(d, k);
        if (k < strip) above += strip_weight(d, k);
    }
    double room = PAGE_TOP - PAGE_BOTTOM - STRIP_GAP * (double)(d->nstrips - 1);
    double top = PAGE_TOP - room * above / total - STRIP_GAP * (double)strip;
    double bottom = top - room * strip_weight(d, strip) / total;
    d->strip = strip;
    plvpor(PAGE_LEFT, PAGE_RIGHT, bottom, top);
    plwind(0, d->span, ylo, yhi);
}

/* Numbers as written, without PLplot's shared "(x10^-3)" that would sit
 * on the strip above. */
static void plain_number(PLINT axis, PLFLT value, PLCHAR_NC_VECTOR label, PLINT n,
                         PLPointer data) {
    (void)axis;
    (void)data;
    if (fabs(value) < 1e-15) value = 0;
    snprintf(label, (size_t)n, "%.6g", value);
}

/* A round step (1, 2 or 5 times a power of ten) giving three or four ticks. */
static double tick_step(double range) {
    if (!(range > 0)) return 0;
    double raw = range / 3, mag = pow(10, floor(log10(raw))), norm = raw / mag;
    return (norm < 1.5 ? 1 : norm < 3.5 ? 2 : norm < 7.5 ? 5 : 10) * mag;
}

/* Grid, frame and numbers (the time numbers only on the last strip);
 * yrange 0: no y numbers, and ylabel NULL: the strip labels its rows. */
static void strip_frame(const diagram *d, double yrange, const char *ylabel) {
    int last = d->strip + 1 == d->nstrips, numbers = yrange > 0;
    double ytick = tick_step(yrange);
    plcol0(COL_GRID);
    plwidth(1);
    plbox("g", 0, 0, numbers ? "g" : "", ytick, 0);
    plcol0(COL_AXIS);
    plwidth(1.5);
    plbox(last ? "bcnst" : "bcst", 0, 0, numbers ? "bcnstvo" : "bc", ytick, 0);
    if (ylabel) plmtex("l", 6.5, 0.5, 0.5, ylabel);
}

/* ---- labels ------------------------------------------------------------ */

/* Text runs in lanes (rows of a strip); a label goes in the first lane
 * still free where it would start, or is left out when none is, so that
 * a train of pulses does not write over itself. */
#define NLANES 3
typedef struct {
    double free_from[NLANES];   /* s: where each lane is free again */
    double row[NLANES];         /* the lane's height on the strip's y axis */
    size_t n;
} lanes;

static void lanes_add(lanes *l, double row) {
    if (l->n == NLANES) return;
    l->free_from[l->n] = -INFINITY;
    l->row[l->n++] = row;
}

/* The lane for text from t0 to t1, taken; -1 when every lane is busy. */
static int lane_take(lanes *l, double t0, double t1) {
    for (size_t k = 0; k < l->n; k++)
        if (l->free_from[k] <= t0) {
            l->free_from[k] = t1;
            return (int)k;
        }
    return -1;
}

/* The width of text on the time axis, from the character height used. */
static double text_span(const diagram *d, const char *text) {
    size_t chars = 0;
    for (const char *p = text; *p; p++) chars += ((unsigned char)*p & 0xC0) != 0x80;
    return CHAR_WIDTH * d->span * (double)chars;
}

/* Text beside the window t0..t1 (inside it when it fits), in the first
 * free lane; pointing says to lead it with an arrow toward the window. */
static void place_text(const diagram *d, lanes *l, double t0, double t1, const char *text,
                       int inside, int pointing) {
    char buf[320];
    double w = text_span(d, text) + (pointing ? 2 * CHAR_WIDTH * d->span : 0);
    double pad = 0.006 * d->span, x, just;
    if (inside && t1 - t0 > w + 2 * pad) x = (t0 + t1) / 2, just = 0.5;
    else if (t1 + pad + w < d->span) x = t1 + pad, just = 0;
    else x = t0 - pad, just = 1;
    int k = lane_take(l, x - just * w - pad, x + (1 - just) * w + pad);
    if (k < 0) return;
    if (!pointing || just == 0.5) snprintf(buf, sizeof buf, "%s", text);
    else if (just == 0) snprintf(buf, sizeof buf, "← %s", text);
    else snprintf(buf, sizeof buf, "%s →", text);
    plptex(x, l->row[k], 1, 0, just, buf);
}

/* ---- the strips --------------------------------------------------------- */

/* A note beside a pulse, which is often microseconds in seconds. */
static void pulse_note(const diagram *d, const compile_event *e, lanes *l) {
    const compile_pulse *pu = &d->tl->pulses[e->index];
    const plan *p = d->c->plan;
    char len[48], amp[48], edge[48], angle[48] = "", edges[64] = "", text[256];
    units_format(pu->length, UNITS_TIME, len, sizeof len);
    units_format(pu->current * compile_pulse_polarity(d->c, d->shot, pu), UNITS_CURRENT, amp,
                 sizeof amp);
    if (p->sample.nnuclei > 0 && pu->angles)
        snprintf(angle, sizeof angle, "%.0f° ", pu->angles[0] * 180 / M_PI);
    if (pu->shape == SHAPE_DC && pu->rise > 0)
        snprintf(edges, sizeof edges, " (edges %s)",
                 units_format(pu->rise, UNITS_TIME, edge, sizeof edge));
    snprintf(text, sizeof text, "%s%s pulse: %s%s, peak %s", angle,
             pu->shape == SHAPE_RESONANT ? "resonant" : "dc", len, edges, amp);
    plcol0(COL_NOTE);
    place_text(d, l, e->start, e->start + e->length, text, 0, 1);
}

/* Rows for notes on a coil strip, clear of the coil's resting level. */
static void note_lanes(lanes *l, double rest, double ylo, double yhi) {
    static const double share[] = {0.82, 0.62, 0.40, 0.20};
    double h = yhi - ylo;
    l->n = 0;
    for (size_t k = 0; k < sizeof share / sizeof *share; k++)
        if (fabs(ylo + share[k] * h - rest) > 0.15 * h) lanes_add(l, ylo + share[k] * h);
}

static void draw_coil(diagram *d, size_t strip) {
    int coil = d->coils[strip];
    coil_trace(d, coil);
    double lo = 0, hi = 0;
    for (size_t k = 0; k < d->nt; k++) {
        if (d->y[k] < lo) lo = d->y[k];
        if (d->y[k] > hi) hi = d->y[k];
    }
    double pad = 0.1 * (hi - lo);
    strip_begin(d, strip, lo - pad, hi + pad);
    char name[96], label[112];
    snprintf(label, sizeof label, "%s (A)",
             plain(d->c->plan->rig.coils[coil].name, name, sizeof name));
    strip_frame(d, hi - lo, label);
    plcol0(COL_TRACE0 + (int)(strip % (NCOLOURS - COL_TRACE0)));
    plwidth(TRACE_WIDTH);
    plline((PLINT)d->nt, d->t, d->y);
    lanes l;
    note_lanes(&l, d->y[0], lo - pad, hi + pad);
    for (size_t k = 0; k < d->tl->nevents; k++) {
        const compile_event *e = &d->tl->events[k];
        if (e->kind == EV_PULSE && e->channel == coil) pulse_note(d, e, &l);
    }
}

/* One output line as a step trace from inactive, offset by its rank. */
static void line_trace(const diagram *d, int line, double base) {
    size_t cap = 2 * d->tl->nevents + 2, n = 0;
    PLFLT *t = malloc(cap * sizeof *t), *y = malloc(cap * sizeof *y);
    double level = 0;
    if (t && y) {
        t[n] = 0;
        y[n++] = base;
        for (size_t k = 0; k < d->tl->nevents; k++) {
            const compile_event *e = &d->tl->events[k];
            if (e->kind != EV_LINE || e->channel != line) continue;
            t[n] = e->start;
            y[n++] = base + level;
            level = e->to;
            t[n] = e->start;
            y[n++] = base + level;
        }
        t[n] = d->span;
        y[n++] = base + level;
        plline((PLINT)n, t, y);
    }
    free(t);
    free(y);
}

/* Each output line at 0 (inactive) or 1 (active) above its own baseline,
 * the baseline dotted so that a line held active reads as active. */
static void draw_lines(diagram *d) {
    double hi = d->nlines ? LINE_PITCH * (double)(d->nlines - 1) + 1.3 : 1;
    strip_begin(d, d->ncoils, -0.3, hi);
    strip_frame(d, 0, NULL);
    const plan_rig *rig = &d->c->plan->rig;
    char name[96];
    if (!d->nlines) {
        plcol0(COL_AXIS);
        plptex(d->span / 2, 0.35, 1, 0, 0.5, "the rig has no output lines");
        return;
    }
    for (size_t k = 0; k < d->nlines; k++) {
        double base = LINE_PITCH * (double)k;
        PLFLT bx[2] = {0, d->span}, by[2] = {base, base};
        plcol0(COL_GRID);
        plwidth(1);
        pllsty(3);
        plline(2, bx, by);
        pllsty(1);
        plcol0(COL_LINE);
        plwidth(TRACE_WIDTH);
        line_trace(d, d->lines[k], base);
        plcol0(COL_AXIS);
        plmtex("lv", 0.8, (base + 0.5 + 0.3) / (hi + 0.3), 1.0,
               plain(rig->lines[d->lines[k]].name, name, sizeof name));
    }
}

/* A filled bar from t0 to t1 at rows y0..y1, at least a few pixels wide. */
static void bar(const diagram *d, double t0, double t1, double y0, double y1, int colour) {
    double least = 0.003 * d->span;
    if (t1 - t0 < least) t1 = t0 + least;
    PLFLT x[5] = {t0, t1, t1, t0, t0}, y[5] = {y0, y0, y1, y1, y0};
    plcol0(colour);
    plfill(4, x, y);
    plcol0(COL_AXIS);
    plwidth(1);
    plline(5, x, y);
}

static void acquire_label(const diagram *d, const compile_acquire *aq, char *buf, size_t n) {
    const plan_rig *rig = &d->c->plan->rig;
    char name[96];
    size_t k = (size_t)snprintf(buf, n, "acquire");
    for (size_t i = 0; i < aq->ninputs && k < n; i++)
        k += (size_t)snprintf(buf + k, n - k, "%s%s", i ? ", " : " ",
                              plain(rig->inputs[aq->inputs[i]].name, name, sizeof name));
}

static void draw_windows(diagram *d) {
    strip_begin(d, d->ncoils + 1, 0, 2);
    strip_frame(d, 0, NULL);
    plmtex("lv", 0.8, 0.75, 1.0, "pulses");
    plmtex("lv", 0.8, 0.25, 1.0, "acquire");
    const plan_rig *rig = &d->c->plan->rig;
    char name[96], text[256];
    lanes pulse_row = {.n = 0}, acquire_row = {.n = 0};
    lanes_add(&pulse_row, 1.5);
    lanes_add(&acquire_row, 0.5);
    for (size_t k = 0; k < d->tl->nevents; k++) {
        const compile_event *e = &d->tl->events[k];
        double t0 = e->start, t1 = e->start + e->length;
        if (e->kind == EV_PULSE) {
            bar(d, t0, t1, 1.15, 1.85, COL_PULSE);
            snprintf(text, sizeof text, "pulse %s", plain(rig->coils[e->channel].name, name,
                                                          sizeof name));
            plcol0(COL_AXIS);
            place_text(d, &pulse_row, t0, t1, text, 0, 0);
        } else if (e->kind == EV_ACQUIRE) {
            bar(d, t0, t1, 0.15, 0.85, COL_ACQUIRE);
            acquire_label(d, &d->tl->acquisitions[e->index], text, sizeof text);
            plcol0(COL_AXIS);
            place_text(d, &acquire_row, t0, t1, text, 1, 0);
        }
    }
    plcol0(COL_AXIS);
    pllab("time from shot start (s)", "", "");
}

static void draw_title(diagram *d) {
    const scan_shot *sh = &d->c->scan->shots[d->shot - 1];
    char took[48], title[192];
    units_format(d->span, UNITS_TIME, took, sizeof took);
    snprintf(title, sizeof title, "shot %u (point %u, average %u, %s): %s", sh->shot,
             sh->point, sh->average, scan_kind_name((scan_shot_kind)sh->kind), took);
    plvpor(PAGE_LEFT, PAGE_RIGHT, PAGE_BOTTOM, PAGE_TOP);
    plcol0(COL_AXIS);
    plschr(0, 1.2 * TEXT_SCALE);
    plmtex("t", 1.2, 0.5, 0.5, title);
    plschr(0, TEXT_SCALE);
}

/* ---- the page ----------------------------------------------------------- */

typedef struct {
    diagram *d;
    const char *device, *path;
} plot_job;

/* Run step with PLplot's handlers caught: its result, or -1 when PLplot
 * gave up (plplot_error says why). */
static int guarded(int (*step)(plot_job *), plot_job *job) {
    volatile int rc = -1;
    plplot_error[0] = '\0';
    plsabort(on_plplot_abort);
    plsexit(on_plplot_exit);
    if (setjmp(plplot_exit) == 0) rc = step(job);
    plsexit(NULL);
    plsabort(NULL);
    return rc;
}

static int check_device(plot_job *job) {
    return device_available(job->device) ? 0 : 1;
}

static int draw_page(plot_job *job) {
    diagram *d = job->d;
    plsdev(job->device);
    plsfnam(job->path);
    plspage(0, 0, 1400, 900, 0, 0);
    plscmap0n(NCOLOURS);
    for (int k = 0; k < NCOLOURS; k++)
        plscol0(k, colour_rgb[k][0], colour_rgb[k][1], colour_rgb[k][2]);
    plscolbg(255, 255, 255);
    plinit();
    if (!plplot_error[0]) {
        pladv(0);
        plslabelfunc(plain_number, NULL);
        plschr(0, TEXT_SCALE);
        draw_title(d);
        for (size_t k = 0; k < d->ncoils; k++) draw_coil(d, k);
        draw_lines(d);
        draw_windows(d);
        plslabelfunc(NULL, NULL);
    }
    plend();
    return plplot_error[0] ? -1 : 0;
}

static int check_output(const char *path, char *err, size_t errlen) {
    struct stat st;
    if (stat(path, &st) != 0 || st.st_size == 0)
        return fail(err, errlen, "PLplot wrote nothing to %s; is plplot-driver-cairo "
                    "installed?", path);
    return 0;
}

/* Ready to draw: a known kind of file, PLplot's device for it, and a
 * file that can be written (PLplot would ask on the terminal otherwise). */
static int prepare(plot_job *job, char *err, size_t errlen) {
    job->device = device_for(job->path);
    if (!job->device)
        return fail(err, errlen, "cannot draw the diagram %s: give a file ending in .png or "
                    ".svg", job->path);
    int rc = guarded(check_device, job);
    if (rc < 0) return fail(err, errlen, "PLplot cannot start: %s", plplot_error);
    if (rc > 0)
        return fail(err, errlen, "PLplot has no %s device; install plplot-driver-cairo",
                    job->device);
    FILE *probe = fopen(job->path, "wb");
    if (!probe) return fail(err, errlen, "cannot write %s: %s", job->path, strerror(errno));
    fclose(probe);
    return 0;
}

int cli_draw_diagram(const compiled *c, uint32_t shot, const char *path, char *err,
                     size_t errlen) {
    if (!c || !path) return fail(err, errlen, "no compiled plan or no output path");
    if (shot < 1 || shot > c->scan->nshots)
        return fail(err, errlen, "shot %u is out of range: the plan has %zu shot%s (1 to %zu)",
                    shot, c->scan->nshots, c->scan->nshots == 1 ? "" : "s", c->scan->nshots);
    diagram d = {.c = c, .shot = shot, .tl = compile_shot_timeline(c, shot)};
    plot_job job = {.d = &d, .path = path};
    if (prepare(&job, err, errlen)) return -1;
    d.span = d.tl->duration > 0 ? d.tl->duration : 1;
    int rc = -1;
    if (sample_times(&d) || choose_channels(&d))
        fail(err, errlen, "out of memory drawing the diagram");
    else if (guarded(draw_page, &job))
        fail(err, errlen, "cannot draw the diagram %s: PLplot: %s", path, plplot_error);
    else
        rc = check_output(path, err, errlen);
    if (rc) unlink(path);
    free(d.t);
    free(d.y);
    free(d.coils);
    free(d.lines);
    return rc;
}
