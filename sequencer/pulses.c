/* pulses: the pulse calculator. The tip angle of a dc (trapezoid) or a
 * resonant pulse, integrated over its real shape in the real static field;
 * the flat length that gives a wanted angle; the coil current profile.
 * Not for choosing amplitudes, coils or the polarity of each average
 * (compile.c), nor for checking limits (limits.c). */
#include <math.h>
#include <stdlib.h>

#include <gsl/gsl_errno.h>
#include <gsl/gsl_roots.h>

#include "compile.h"

#define TWO_PI 6.283185307179586476925286766559

/* Where the field changes (dc edges, resonant pulses) the rotation is
 * integrated in piecewise-constant substeps at the midpoint field, each
 * turning by at most STEP_ANGLE, with at least MIN_EDGE_STEPS per edge and,
 * for a resonant pulse, at least STEPS_PER_PERIOD per period of the drive.
 * An evaluation needing more than MAX_STEPS substeps (seconds of work) is
 * not made: the tip angle is NaN, the angle unreachable. */
#define STEP_ANGLE 0.005
#define MIN_EDGE_STEPS 16
#define STEPS_PER_PERIOD 64
#define MAX_STEPS 1e8

/* The search for a flat length samples the tip angle about every 0.2 rad of
 * precession: SCAN_STEPS samples per period about the flat top's field, or
 * every RESONANT_SCAN_STEPS substeps of a resonant pulse. The tip changes by
 * at most the precession between samples, so a sampled local maximum lies
 * within PEAK_MARGIN of the true one. Local maxima are refined to their top
 * (180 deg with no static field is one), and a top within ANGLE_TOL below
 * the target counts as reaching it. Roots are refined until their bracket
 * is ROOT_REL of the length. */
#define SCAN_STEPS 32
#define RESONANT_SCAN_STEPS 40
#define PEAK_MARGIN 0.105
#define ANGLE_TOL 1e-9
#define ROOT_REL 1e-13
#define ROOT_MAX_ITER 200

/* A resonant search ends where gamma B1 t / 2 would be this many times the
 * target, or after this many periods of the drive. */
#define RESONANT_SEARCH_FACTOR 4.0
#define RESONANT_MAX_PERIODS 1e6

static double dot(const double a[3], const double b[3]) {
    return a[0] * b[0] + a[1] * b[1] + a[2] * b[2];
}

static void cross(const double a[3], const double b[3], double out[3]) {
    out[0] = a[1] * b[2] - a[2] * b[1];
    out[1] = a[2] * b[0] - a[0] * b[2];
    out[2] = a[0] * b[1] - a[1] * b[0];
}

static double norm(const double a[3]) { return sqrt(dot(a, a)); }

/* Angle between two vectors of any length; accurate near 0 and pi. */
static double angle_between(const double a[3], const double b[3]) {
    double c[3];
    cross(a, b, c);
    return atan2(norm(c), dot(a, b));
}

/* Below this turn (rad) rotate() sums series instead of calling sin and
 * cos: the first neglected terms, phi^8 / 9!, are below 1e-19. */
#define SERIES_ANGLE 0.02

/* Turn v as dv/dt = w x v does over dt (w constant): Rodrigues' formula,
 * v cos(phi) + (k x v) sin(phi) + k (k.v)(1 - cos(phi)), phi = |w| dt,
 * written with w itself so that small turns (every substep) need neither a
 * square root nor sin and cos. */
typedef struct {
    double cosine;     /* cos(phi) */
    double sine_n;     /* sin(phi) / |w| */
    double versine_n2; /* (1 - cos(phi)) / |w|^2 */
} turn;

static turn turn_of(const double w[3], double dt) {
    double n2 = dot(w, w), phi2 = n2 * dt * dt;
    turn t;
    if (phi2 < SERIES_ANGLE * SERIES_ANGLE) {
        t.sine_n = dt * (1 - phi2 * (1.0 / 6) * (1 - phi2 * (1.0 / 20) * (1 - phi2 * (1.0 / 42))));
        t.versine_n2 = dt * dt * 0.5 *
                       (1 - phi2 * (1.0 / 12) * (1 - phi2 * (1.0 / 30) * (1 - phi2 * (1.0 / 56))));
    } else {
        double n = sqrt(n2), sh = sin(0.5 * n * dt), ch = cos(0.5 * n * dt);
        t.sine_n = 2 * sh * ch / n;
        t.versine_n2 = 2 * sh * sh / n2;
    }
    t.cosine = 1 - n2 * t.versine_n2;
    return t;
}

/* Apply the turn t about w to v; backwards (its inverse) when back is -1. */
static void turn_apply(const turn *t, const double w[3], double back, double v[3]) {
    double wv[3];
    cross(w, v, wv);
    double wd = dot(w, v), s = back * t->sine_n;
    for (int i = 0; i < 3; i++) v[i] = v[i] * t->cosine + wv[i] * s + w[i] * wd * t->versine_n2;
}

static void rotate(const double w[3], double dt, double v[3]) {
    turn t = turn_of(w, dt);
    turn_apply(&t, w, 1, v);
}

/* ---- the field seen by the spins ------------------------------------- */

typedef struct {
    double b0[3], axis[3];  /* axis normalised */
    double peak;            /* signed pulse field at level 1, T */
    double gamma;
    double m0[3];           /* the magnetization's start: along b0, else z */
} pulse_field;

/* Polarity: a negative sign flips the pulse; anything else (0 too) is +1. */
static double polarity(const pulse_shape *s) { return s->sign < 0 ? -1.0 : 1.0; }

/* Angular velocity w = -gamma (b0 + level * peak * axis): dm/dt = w x m is
 * dm/dt = gamma m x B. */
static void omega_at(const pulse_field *f, double level, double w[3]) {
    for (int i = 0; i < 3; i++) w[i] = -f->gamma * (f->b0[i] + level * f->peak * f->axis[i]);
}

/* Checks what every pulse needs (the flat length is the caller's). */
static int field_setup(const pulse_shape *s, double gamma, pulse_field *f) {
    double an = norm(s->axis), bn = norm(s->b0);
    if (!isfinite(an) || !(an > 0) || !isfinite(bn) || !isfinite(gamma) ||
        !isfinite(s->amplitude) || !isfinite(s->rise) || !(s->rise >= 0))
        return -1;
    for (int i = 0; i < 3; i++) {
        f->axis[i] = s->axis[i] / an;
        f->b0[i] = s->b0[i];
        f->m0[i] = bn > 0 ? s->b0[i] / bn : (i == 2);
    }
    f->peak = polarity(s) * s->amplitude;
    f->gamma = gamma;
    return 0;
}

/* ---- dc pulses: edges in substeps, the flat top exactly --------------- */

typedef struct {
    double m1[3];      /* the start, along b0, after the rising edge */
    double m0_back[3]; /* m0 carried back through the falling edge */
    double w[3];       /* angular velocity on the flat top */
    double rate;       /* |w| */
} dc_pulse;

/* The tip angle and the slope of its cosine, d(m.m0)/dt, at one length. */
typedef struct {
    double theta, slope;
} tip_point;

/* Substeps for one edge, or -1 when too many. |B| is convex along a linear
 * ramp, so its larger end bounds the turn. */
static double edge_steps(const pulse_field *f, double rise) {
    if (rise == 0) return 0;
    double w0[3], w1[3];
    omega_at(f, 0, w0);
    omega_at(f, 1, w1);
    double n = ceil(fmax(norm(w0), norm(w1)) * rise / STEP_ANGLE);
    if (!(n <= MAX_STEPS)) return -1;
    return n < MIN_EDGE_STEPS ? MIN_EDGE_STEPS : n;
}

/* Carry m1 forward through the rising edge, n substeps at levels from 0
 * to 1, and back through the falling edge: the fall's substeps inverted,
 * in reverse order, are the same levels rising, turned backwards. */
static void edges_apply(const pulse_field *f, double n, double rise, double m1[3],
                        double back[3]) {
    double w0[3], w1[3], dw[3], dt = rise / n, step = 1 / n;
    omega_at(f, 0, w0);
    omega_at(f, 1, w1);
    for (int i = 0; i < 3; i++) dw[i] = w1[i] - w0[i];
    for (double i = 0; i < n; i++) {
        double level = (i + 0.5) * step;
        double w[3] = {w0[0] + level * dw[0], w0[1] + level * dw[1], w0[2] + level * dw[2]};
        turn t = turn_of(w, dt);
        turn_apply(&t, w, 1, m1);
        turn_apply(&t, w, -1, back);
    }
}

static int dc_prepare(const pulse_shape *s, double gamma, dc_pulse *p) {
    pulse_field f;
    if (field_setup(s, gamma, &f) != 0) return -1;
    double n = edge_steps(&f, s->rise);
    if (n < 0) return -1;
    for (int i = 0; i < 3; i++) p->m1[i] = p->m0_back[i] = f.m0[i];
    if (n > 0) edges_apply(&f, n, s->rise, p->m1, p->m0_back);
    omega_at(&f, 1, p->w);
    p->rate = norm(p->w);
    return 0;
}

/* The angle between the final m and m0 is that between the flat top's end
 * and m0 carried back through the fall: rotations keep angles. */
static tip_point dc_eval(void *ctx, double flat) {
    const dc_pulse *p = ctx;
    double m[3] = {p->m1[0], p->m1[1], p->m1[2]}, wm[3];
    rotate(p->w, flat, m);
    cross(p->w, m, wm);
    return (tip_point){angle_between(m, p->m0_back), dot(p->m0_back, wm)};
}

/* ---- resonant pulses: substeps on a fixed grid ------------------------ */

/* The substep grid starts at the pulse's start and does not depend on its
 * length, so the same length gives the same numbers by any route. */
typedef struct {
    pulse_field f;
    double omega_drive; /* 2 pi frequency */
    double phase;
    double dt;          /* grid substep; 0 when nothing turns */
} res_pulse;

static int res_prepare(const pulse_shape *s, double gamma, res_pulse *r) {
    if (field_setup(s, gamma, &r->f) != 0 || !isfinite(s->frequency) || !isfinite(s->phase))
        return -1;
    r->omega_drive = TWO_PI * s->frequency;
    r->phase = s->phase;
    double fastest = fabs(gamma) * (norm(s->b0) + fabs(s->amplitude));
    r->dt = fastest > 0 ? STEP_ANGLE / fastest : 0;
    if (fastest > 0 && s->frequency != 0)
        r->dt = fmin(r->dt, 1 / (STEPS_PER_PERIOD * fabs(s->frequency)));
    if (!isfinite(r->dt)) return -1;
    return 0;
}

static void res_omega(const res_pulse *r, double t, double w[3]) {
    omega_at(&r->f, cos(r->omega_drive * t + r->phase), w);
}

/* Whole grid substeps from grid point *k while they end by t. */
static void res_whole_steps(const res_pulse *r, double *k, double m[3], double t) {
    if (r->dt == 0) return;
    while ((*k + 1) * r->dt <= t) {
        double w[3];
        res_omega(r, (*k + 0.5) * r->dt, w);
        rotate(w, r->dt, m);
        *k += 1;
    }
}

/* States kept at grid points while a search moves on (newest last), so
 * that each evaluation integrates only from the latest one before it; and
 * the grid state the last evaluation passed, ready to be kept. */
typedef struct {
    const res_pulse *r;
    double k[3];
    double m[3][3];
    int n;
    double last_t, last_k, last_m[3];
    int last_from;      /* the kept state it started from */
} res_cursor;

static void res_cursor_init(res_cursor *c, const res_pulse *r) {
    c->r = r;
    c->n = 1;
    c->k[0] = 0;
    for (int i = 0; i < 3; i++) c->m[0][i] = r->f.m0[i];
    c->last_from = -1;
}

static tip_point res_eval(void *ctx, double t) {
    res_cursor *c = ctx;
    const res_pulse *r = c->r;
    int i = c->n - 1;
    while (i > 0 && c->k[i] * r->dt > t) i--;
    double k = c->k[i], m[3] = {c->m[i][0], c->m[i][1], c->m[i][2]}, w[3], wm[3];
    res_whole_steps(r, &k, m, t);
    c->last_t = t;
    c->last_k = k;
    c->last_from = i;
    for (int j = 0; j < 3; j++) c->last_m[j] = m[j];
    double rest = t - k * r->dt;
    if (r->dt > 0 && rest > 0) {
        res_omega(r, k * r->dt + 0.5 * rest, w);
        rotate(w, rest, m);
    }
    res_omega(r, t, w);
    cross(w, m, wm);
    return (tip_point){angle_between(m, r->f.m0), dot(r->f.m0, wm)};
}

/* Keep the state at the last grid point by t (the last evaluation's, when
 * it was at t), dropping the oldest. */
static void res_keep(void *ctx, double t) {
    res_cursor *c = ctx;
    int last = c->n - 1;
    double k = c->k[last], m[3] = {c->m[last][0], c->m[last][1], c->m[last][2]};
    if (c->last_from == last && c->last_t == t) {
        k = c->last_k;
        for (int i = 0; i < 3; i++) m[i] = c->last_m[i];
    }
    res_whole_steps(c->r, &k, m, t);
    if (c->n == 3) {
        for (int j = 0; j < 2; j++) {
            c->k[j] = c->k[j + 1];
            for (int i = 0; i < 3; i++) c->m[j][i] = c->m[j + 1][i];
        }
        c->n = 2;
    }
    c->k[c->n] = k;
    for (int i = 0; i < 3; i++) c->m[c->n][i] = m[i];
    c->n++;
    c->last_from = -1;
}

/* ---- finding the first length that reaches an angle ------------------- */

typedef struct {
    tip_point (*eval)(void *ctx, double t);
    void (*keep)(void *ctx, double t); /* NULL: nothing to keep */
    void *ctx;
    double angle;
    double step, end;                  /* sample spacing and last sample, s */
} tip_search;

typedef struct {
    double t;
    tip_point p;
} tip_sample;

static double excess_fn(double t, void *params) {
    const tip_search *s = params;
    return s->eval(s->ctx, t).theta - s->angle;
}

static double slope_fn(double t, void *params) {
    const tip_search *s = params;
    return s->eval(s->ctx, t).slope;
}

/* A root of fn in [lo, hi], whose ends differ in sign, by GSL's Brent
 * solver. The solver is set up on memory allocated here rather than by
 * gsl_root_fsolver_alloc, whose failure would call GSL's process-wide
 * error handler (default: abort); the bracket is valid and fn finite, so
 * GSL has nothing else to report. */
static int brent_root(double (*fn)(double, void *), const tip_search *s, double lo, double hi,
                      double *root) {
    gsl_function f = {fn, (void *)s};
    gsl_root_fsolver solver = {0};
    solver.type = gsl_root_fsolver_brent;
    solver.state = malloc(solver.type->size);
    if (solver.state == NULL) return -1;
    int rc = gsl_root_fsolver_set(&solver, &f, lo, hi) == GSL_SUCCESS ? 0 : -1;
    for (int i = 0; rc == 0 && i < ROOT_MAX_ITER; i++) {
        if (gsl_root_fsolver_iterate(&solver) != GSL_SUCCESS) rc = -1;
        double a = gsl_root_fsolver_x_lower(&solver), b = gsl_root_fsolver_x_upper(&solver);
        if (gsl_root_test_interval(a, b, ROOT_REL * hi, ROOT_REL) == GSL_SUCCESS) break;
    }
    *root = gsl_root_fsolver_root(&solver);
    free(solver.state);
    return rc;
}

static int found(tip_sample at, double *flat, double *reach) {
    *flat = at.t;
    *reach = at.p.theta;
    return 0;
}

/* The length in [lo, hi] at which the tip reaches the angle, with lo
 * below it and hi at or above it. */
static int crossing(const tip_search *s, tip_sample lo, tip_sample hi, double *flat,
                    double *reach) {
    if (hi.p.theta == s->angle) return found(hi, flat, reach);
    tip_sample at = {0, {0, 0}};
    if (brent_root(excess_fn, s, lo.t, hi.t, &at.t) != 0) return -1;
    at.p = s->eval(s->ctx, at.t);
    return found(at, flat, reach);
}

/* The top of a sampled local maximum mid (between a and b): where the slope
 * of cos(theta), smooth even where theta peaks at pi, changes sign. */
static tip_sample refine_peak(const tip_search *s, tip_sample a, tip_sample mid, tip_sample b) {
    if (mid.p.slope == 0) return mid;
    tip_sample lo = mid.p.slope > 0 ? a : mid, hi = mid.p.slope > 0 ? mid : b;
    double t;
    if (!(lo.p.slope < 0 && hi.p.slope > 0) || brent_root(slope_fn, s, lo.t, hi.t, &t) != 0)
        return mid;
    tip_sample top = {t, s->eval(s->ctx, t)};
    return top.p.theta > mid.p.theta ? top : mid;
}

/* Samples the tip from length 0 to s->end: the first sample at or above the
 * angle brackets the first crossing; a local maximum that, refined, comes
 * within ANGLE_TOL of the angle is taken (or brackets the crossing when it
 * passes). Returns 0 with *flat, or -1 with *reach the largest tip seen. */
static int find_first(const tip_search *s, double *flat, double *reach) {
    tip_sample prev2 = {0}, prev = {0, s->eval(s->ctx, 0)};
    double best = prev.p.theta;
    if (!(prev.p.theta <= s->angle)) { /* the edges alone tip too far; NaN */
        *reach = isnan(s->angle) ? NAN : prev.p.theta;
        return -1;
    }
    if (prev.p.theta == s->angle) return found(prev, flat, reach);
    for (double j = 1; prev.t < s->end; j++) {
        tip_sample cur = {fmin(j * s->step, s->end), {0, 0}};
        cur.p = s->eval(s->ctx, cur.t);
        if (s->keep) s->keep(s->ctx, cur.t);
        if (cur.p.theta >= s->angle) return crossing(s, prev, cur, flat, reach);
        if (j >= 2 && prev.p.theta > prev2.p.theta && prev.p.theta > cur.p.theta &&
            prev.p.theta > best - PEAK_MARGIN) {
            tip_sample top = refine_peak(s, prev2, prev, cur);
            if (top.p.theta > s->angle) return crossing(s, prev2, top, flat, reach);
            if (top.p.theta >= s->angle - ANGLE_TOL) return found(top, flat, reach);
            best = fmax(best, top.p.theta);
        }
        best = fmax(best, cur.p.theta);
        prev2 = prev;
        prev = cur;
    }
    *reach = best;
    return -1;
}

/* One precession about the flat top's field (and one sample more, to see
 * a maximum at the wrap): beyond it the angle only repeats. */
static int dc_set_angle(const pulse_shape *s, double gamma, double angle, double *flat,
                        double *reach) {
    dc_pulse p;
    if (dc_prepare(s, gamma, &p) != 0) return -1;
    double period = p.rate > 0 ? TWO_PI / p.rate : 0;
    if (!isfinite(period)) period = 0;
    tip_search search = {dc_eval, NULL, &p, angle, period / SCAN_STEPS,
                         period * (SCAN_STEPS + 1) / SCAN_STEPS};
    return find_first(&search, flat, reach);
}

static int resonant_set_angle(const pulse_shape *s, double gamma, double angle, double *flat,
                              double *reach) {
    res_pulse r;
    if (res_prepare(s, gamma, &r) != 0) return -1;
    double nutation = 0.5 * fabs(gamma) * fabs(s->amplitude); /* rad/s, rotating wave */
    double end = nutation > 0 ? RESONANT_SEARCH_FACTOR * angle / nutation : INFINITY;
    if (s->frequency != 0) end = fmin(end, RESONANT_MAX_PERIODS / fabs(s->frequency));
    end = r.dt > 0 ? fmin(end, MAX_STEPS * r.dt) : 0;
    if (!(end >= 0)) end = 0;
    res_cursor cursor;
    res_cursor_init(&cursor, &r);
    tip_search search = {res_eval, res_keep, &cursor, angle, RESONANT_SCAN_STEPS * r.dt, end};
    return find_first(&search, flat, reach);
}

/* ---- the interface ---------------------------------------------------- */

double pulse_tip_angle(const pulse_shape *s, double gamma) {
    if (!isfinite(s->flat) || !(s->flat >= 0)) return NAN;
    if (s->resonant) {
        res_pulse r;
        if (res_prepare(s, gamma, &r) != 0) return NAN;
        if (r.dt > 0 && s->flat / r.dt > MAX_STEPS) return NAN;
        res_cursor cursor;
        res_cursor_init(&cursor, &r);
        return res_eval(&cursor, s->flat).theta;
    }
    dc_pulse p;
    if (dc_prepare(s, gamma, &p) != 0) return NAN;
    return dc_eval(&p, s->flat).theta;
}

double pulse_duration(const pulse_shape *s) {
    return s->resonant ? s->flat : s->flat + s->rise;
}

/* On success *reach is the angle given; on failure s is left alone and
 * *reach is NaN when the shape, gamma or angle cannot be used. */
int pulse_set_angle(pulse_shape *s, double gamma, double angle, double *reach) {
    double flat = 0, got = NAN;
    int rc = s->resonant ? resonant_set_angle(s, gamma, angle, &flat, &got)
                         : dc_set_angle(s, gamma, angle, &flat, &got);
    if (reach) *reach = got;
    if (rc == 0) s->flat = flat;
    return rc;
}

int pulse_set_duration(pulse_shape *s, double duration) {
    if (!isfinite(duration)) return -1;
    if (s->resonant) {
        if (!(duration >= 0)) return -1;
        s->flat = duration;
        return 0;
    }
    if (!isfinite(s->rise) || !(s->rise >= 0) || !(duration >= s->rise)) return -1;
    s->flat = duration - s->rise;
    return 0;
}

/* The shape's own sign is applied; alternation per average is not. */
double pulse_current_at(const pulse_shape *s, double peak_current, double t) {
    double current = polarity(s) * peak_current;
    if (!(t >= 0)) return 0;
    if (s->resonant)
        return t <= s->flat ? current * cos(TWO_PI * s->frequency * t + s->phase) : 0;
    double top = s->rise + s->flat, end = top + s->rise;
    if (t > end) return 0;
    if (t < s->rise) return current * t / s->rise;
    if (t <= top) return current;
    return current * (end - t) / s->rise;
}
