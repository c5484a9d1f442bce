/* mains: removal of line noise (the mains fundamental and its harmonics)
 * from a trace by a linear least-squares fit of a sine and a cosine per
 * harmonic, with the fundamental refined from the data. Not a notch filter:
 * a line between harmonics keeps its shape. Not for finding NMR lines, and
 * not for interference that changes during the trace (one amplitude each). */
#include "analysis_internal.h"

#include <fftw3.h>     /* before complex.h: fftw_complex stays double[2] */
#include <complex.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_math.h>
#include <gsl/gsl_min.h>
#include <gsl/gsl_permutation.h>
#include <limits.h>
#include <math.h>
#include <string.h>

/* GSL reports errors through a process-wide handler whose default aborts.
 * Rather than swap that handler (global state), the calls here are made so
 * that GSL has nothing to report: matrices are views on this file's memory,
 * the normal equations go through the modified Cholesky factorization
 * (which never fails; a perturbation it had to add means "not positive
 * definite enough" and the fit is refused), every function value given to
 * the minimizer is finite and its bracket is checked before it is set. Only
 * gsl_min_fminimizer_alloc could still call the handler, when a malloc of a
 * hundred bytes fails. */

/* Two doubles side by side: the recurrences below are written on pairs so
 * that gcc and clang both keep them in SSE2 registers (a GNU C extension
 * both support; without it gcc leaves the loops scalar). */
typedef double pair __attribute__((vector_size(16)));

#define MAX_HARMONICS 32
#define GROUP 8               /* harmonics projected side by side (vectorized) */
#define SYNTH_GROUP 8         /* harmonics synthesized side by side */
#define SEGMENT 1024          /* samples between exact re-seeds of the recurrences */
#define SCAN_STEPS_PER_LOBE 4 /* coarse scan: 1 / (4 H T) */
#define REFINE_HARMONICS 8     /* harmonics the fundamental is refined on */
#define ZERO_FILL 2           /* the coarse scan's spectrum: bins 1 / (2 T) apart */
#define MIN_CYCLES 2.0        /* shortest trace, in periods of the lowest fundamental */
#define MAX_BRENT 100
#define MAX_CANDIDATES 4      /* maxima of the coarse scan valued exactly */
#define CANDIDATE_SHARE 0.9   /* ... when within 10 % of the best */
#define EXACT_SHARE 0.94      /* ... and searched when within 6 % of the best exactly */
#define MAX_EXPAND 64         /* moves of the exact bracket (each grows by GOLDEN) */
#define GOLDEN 1.618034

/* How: the explained power E(f) below is the quantity maximized over the
 * fundamental f. A coarse scan on an FFT (FFTW) of the trace proposes
 * where; exact values of E bracket the maximum and Brent's method (gsl_min)
 * refines it. Each exact value costs O(n H) (Goertzel's recurrence for the
 * projections) plus O(H^3) (two H x H solves); the comb is then subtracted
 * by the sinusoids' own recurrence. FFTW's planner is called here and is
 * not thread-safe: callers on several threads must serialize (or make the
 * planner thread-safe with fftw_make_planner_thread_safe).
 *
 * The fit's model, with the time origin at the middle of the trace, u_i =
 * i - (n - 1) / 2 (in samples), theta_h = 2 pi h f / rate:
 *   y_i ~ sum_h a_h cos(theta_h u_i) + b_h sin(theta_h u_i).
 * With that origin every cosine is orthogonal to every sine over the trace,
 * so the 2H x 2H normal equations split into two H x H blocks, C (cosines)
 * and S (sines), each built in closed form from the Dirichlet kernel
 *   sum_i cos(x u_i) = sin(n x / 2) / sin(x / 2) = D(x),  sum_i sin(x u_i) = 0:
 *   C_hk = (D((h - k) phi) + D((h + k) phi)) / 2,
 *   S_hk = (D((h - k) phi) - D((h + k) phi)) / 2,   phi = 2 pi f / rate.
 * The explained power is E(f) = c^T C^-1 c + s^T S^-1 s, with c_h, s_h the
 * projections of y on the cosines and sines. */

typedef struct {
    double a[MAX_HARMONICS], b[MAX_HARMONICS];  /* cosine, sine coefficients */
    double explained;                           /* E(f) */
} fit_result;

typedef struct {
    const double *y;
    size_t n;
    double rate;
    size_t nh;          /* harmonics fitted */
    double origin;      /* Hz: the minimizer's variable is f - origin */
    int failed;         /* a normal-equation block was not positive definite */
    fit_result best;    /* the fit that explained most so far, at best_f */
    double best_f;      /* Hz; 0: none yet */
    double last_f;      /* Hz: where E was last evaluated */
} fit_context;

/* Goertzel's recurrence s_j = x_j + 2 cos(theta) s_{j-1} - s_{j-2} over one
 * segment of len samples, GROUP harmonics side by side (their state stays
 * in registers for the whole segment): on return s1 holds s_{len-1} and s0
 * s_{len-2}, for every harmonic of every group. The roles of the two state
 * arrays alternate sample by sample so that no value is copied. */
static void goertzel_segment(const double *x, size_t len, size_t ngroups, const double *w,
                             double *s0, double *s1) {
    for (size_t g = 0; g < ngroups; g++) {
        pair a0[GROUP / 2], a1[GROUP / 2], ww[GROUP / 2];
        for (size_t k = 0; k < GROUP / 2; k++) {
            a0[k] = a1[k] = (pair){0, 0};
            ww[k] = (pair){w[g * GROUP + 2 * k], w[g * GROUP + 2 * k + 1]};
        }
        size_t j = 0;
        for (; j + 1 < len; j += 2) {
            pair x0 = {x[j], x[j]}, x1 = {x[j + 1], x[j + 1]};
#pragma GCC unroll 8
            for (size_t k = 0; k < GROUP / 2; k++) a0[k] = (x0 - a0[k]) + ww[k] * a1[k];
#pragma GCC unroll 8
            for (size_t k = 0; k < GROUP / 2; k++) a1[k] = (x1 - a1[k]) + ww[k] * a0[k];
        }
        if (j < len) {  /* an odd length: one more step, and the roles swap */
            pair x0 = {x[j], x[j]};
            for (size_t k = 0; k < GROUP / 2; k++) {
                pair t = (x0 - a0[k]) + ww[k] * a1[k];
                a0[k] = a1[k];
                a1[k] = t;
            }
        }
        for (size_t k = 0; k < GROUP / 2; k++) {
            for (int l = 0; l < 2; l++) {
                s0[g * GROUP + 2 * k + l] = a0[k][l];
                s1[g * GROUP + 2 * k + l] = a1[k][l];
            }
        }
    }
}

/* z^1 .. z^nh into out (|z| = 1: rounding grows by one part in 1e16 per
 * power, so 32 powers stay well within what the fit needs). */
static void powers(double complex z, size_t nh, double complex *out) {
    double complex p = z;
    for (size_t k = 0; k < nh; k++) {
        out[k] = p;
        p *= z;
    }
}

/* c_h = sum_i y_i cos(theta_h u_i), s_h = sum_i y_i sin(theta_h u_i) for
 * h = 1..nh, in O(n nh). Per segment of len samples from i0, Goertzel gives
 * sum_m x_m e^{-i theta m} = e^{-i theta (len - 1)} (s_{len-1} - e^{-i theta}
 * s_{len-2}); the segment's own phase e^{-i theta (i0 - centre)} advances by
 * an exact factor per segment, so rounding grows with the number of
 * segments (16 for 16384 samples), not of samples. */
static void project(const double *y, size_t n, double phi, size_t nh, double *c, double *s) {
    size_t ngroups = (nh + GROUP - 1) / GROUP;
    double w[MAX_HARMONICS] = {0}, s0[MAX_HARMONICS], s1[MAX_HARMONICS];
    double complex back[MAX_HARMONICS], start[MAX_HARMONICS], step[MAX_HARMONICS],
        tail[MAX_HARMONICS], sum[MAX_HARMONICS];
    double centre = 0.5 * (double)(n - 1);
    powers(cexp(-I * phi), nh, back);
    powers(cexp(I * phi * centre), nh, start);
    powers(cexp(-I * phi * SEGMENT), nh, step);
    powers(cexp(-I * phi * (SEGMENT - 1)), nh, tail);
    for (size_t k = 0; k < nh; k++) {
        w[k] = 2 * creal(back[k]);
        sum[k] = 0;
    }
    for (size_t i0 = 0; i0 < n; i0 += SEGMENT) {
        size_t len = n - i0 < SEGMENT ? n - i0 : SEGMENT;
        goertzel_segment(y + i0, len, ngroups, w, s0, s1);
        for (size_t k = 0; k < nh; k++) {
            double theta = (double)(k + 1) * phi;
            double complex t = len == SEGMENT ? tail[k] : cexp(-I * theta * (double)(len - 1));
            sum[k] += start[k] * t * (s1[k] - back[k] * s0[k]);
            start[k] *= step[k];
        }
    }
    for (size_t k = 0; k < nh; k++) {   /* sum = sum_i y_i e^{-i theta u_i} */
        c[k] = creal(sum[k]);
        s[k] = -cimag(sum[k]);
    }
}

/* The two blocks of the normal equations, nh x nh each, row-major. */
static void gram(size_t n, double phi, size_t nh, double *cc, double *ss) {
    double d[2 * MAX_HARMONICS + 1];
    double complex top[2 * MAX_HARMONICS], bottom[2 * MAX_HARMONICS];
    powers(cexp(0.5 * I * (double)n * phi), 2 * nh, top);
    powers(cexp(0.5 * I * phi), 2 * nh, bottom);
    d[0] = (double)n;
    for (size_t m = 1; m <= 2 * nh; m++) d[m] = cimag(top[m - 1]) / cimag(bottom[m - 1]);
    for (size_t h = 1; h <= nh; h++) {
        for (size_t k = 1; k <= nh; k++) {
            double near = d[h > k ? h - k : k - h], far = d[h + k];
            cc[(h - 1) * nh + (k - 1)] = 0.5 * (near + far);
            ss[(h - 1) * nh + (k - 1)] = 0.5 * (near - far);
        }
    }
}

/* x = G^-1 v for one block (G is overwritten). -1 when the modified Cholesky
 * factorization had to perturb G: the harmonics are too close to collinear
 * over this trace for their amplitudes to mean anything. */
static int solve_block(double *g, const double *v, double *x, size_t nh) {
    size_t perm[MAX_HARMONICS];
    double e[MAX_HARMONICS];
    gsl_matrix_view gv = gsl_matrix_view_array(g, nh, nh);
    gsl_permutation p = {nh, perm};
    gsl_vector_view ev = gsl_vector_view_array(e, nh);
    gsl_linalg_mcholesky_decomp(&gv.matrix, &p, &ev.vector);
    for (size_t k = 0; k < nh; k++)
        if (e[k] != 0) return -1;
    gsl_vector_const_view vv = gsl_vector_const_view_array(v, nh);
    gsl_vector_view xv = gsl_vector_view_array(x, nh);
    gsl_linalg_mcholesky_solve(&gv.matrix, &p, &vv.vector, &xv.vector);
    return 0;
}

/* The least-squares comb at fundamental f. -1 when the normal equations are
 * not positive definite. */
static int fit_at(const fit_context *fc, double f, fit_result *r) {
    size_t nh = fc->nh;
    double phi = 2 * M_PI * f / fc->rate;
    double c[MAX_HARMONICS], s[MAX_HARMONICS];
    double cc[MAX_HARMONICS * MAX_HARMONICS], ss[MAX_HARMONICS * MAX_HARMONICS];
    project(fc->y, fc->n, phi, nh, c, s);
    gram(fc->n, phi, nh, cc, ss);
    if (solve_block(cc, c, r->a, nh) || solve_block(ss, s, r->b, nh)) return -1;
    double e = 0;
    for (size_t k = 0; k < nh; k++) e += c[k] * r->a[k] + s[k] * r->b[k];
    r->explained = e;
    return isfinite(e) ? 0 : -1;
}

/* -E(f). A failed fit counts as explaining nothing (and is remembered),
 * so that the value is always finite. */
static double unexplained(fit_context *fc, double f) {
    fit_result r;
    fc->last_f = f;
    if (fit_at(fc, f, &r)) {
        fc->failed = 1;
        return 0;
    }
    if (fc->best_f == 0 || r.explained > fc->best.explained) {
        fc->best = r;
        fc->best_f = f;
    }
    return -r.explained;
}

/* What the minimizer sees: -E(origin + x). The offset from the bracket's
 * middle, not f itself, because GSL's Brent steps no finer than
 * sqrt(DBL_EPSILON) |x|: 1e-6 Hz at 50 Hz, coarser than the fit needs. */
static double unexplained_offset(double x, void *params) {
    fit_context *fc = params;
    return unexplained(fc, fc->origin + x);
}

/* Smallest m >= x whose only prime factors are 2, 3, 5 and 7 (FFTW is fast
 * on those). */
static size_t fast_length(size_t x) {
    for (size_t m = x;; m++) {
        size_t r = m;
        static const size_t primes[] = {2, 3, 5, 7};
        for (size_t k = 0; k < 4; k++)
            while (r % primes[k] == 0) r /= primes[k];
        if (r == 1) return m;
    }
}

/* The power at fractional bin x, by the parabola through the three bins
 * around it (nbins >= 3). */
static double power_at(const double *power, size_t nbins, double x) {
    size_t k = (size_t)(x + 0.5);
    if (k < 1) k = 1;
    if (k > nbins - 2) k = nbins - 2;
    double u = x - (double)k, lower = power[k - 1], mid = power[k], upper = power[k + 1];
    return mid + 0.5 * u * (upper - lower) + 0.5 * u * u * (upper - 2 * mid + lower);
}

/* The coarse scan's best candidates: local maxima of the scan within
 * CANDIDATE_SHARE of the best, best first. */
typedef struct {
    size_t count;
    double f[MAX_CANDIDATES], value[MAX_CANDIDATES];
} candidates;

static void keep_candidate(candidates *c, double f, double value) {
    size_t k = c->count;
    if (k == MAX_CANDIDATES) {
        if (value <= c->value[k - 1]) return;
        k--;                    /* the weakest makes room */
    } else {
        c->count++;
    }
    for (; k > 0 && c->value[k - 1] < value; k--) {
        c->f[k] = c->f[k - 1];
        c->value[k] = c->value[k - 1];
    }
    c->f[k] = f;
    c->value[k] = value;
}

/* The scan's values at f_j = lo + j step, j < m, over the power spectrum
 * (nbins bins, per_hz bins per Hz), into the candidates kept. */
static void scan_power(const double *power, size_t nbins, double per_hz, size_t nh, double lo,
                       double step, size_t m, candidates *c) {
    double before = -INFINITY, here = -INFINITY;
    for (size_t j = 0; j <= m; j++) {
        double next = -INFINITY;
        if (j < m) {
            double f = lo + (double)j * step;
            next = 0;
            for (size_t h = 1; h <= nh; h++) next += power_at(power, nbins, (double)h * f * per_hz);
        }
        if (j > 0 && here >= before && here > next)
            keep_candidate(c, lo + (double)(j - 1) * step, here);
        before = here;
        here = next;
    }
    size_t k = 1;
    while (k < c->count && c->value[k] >= CANDIDATE_SHARE * c->value[0]) k++;
    c->count = k;
}

/* The coarse scan: on the power spectrum of y zero filled to twice its
 * length (bins 1 / (2 T) apart), the sum over harmonics of the power at h f
 * (interpolated between bins) for each candidate f_j = lo + j step, j < m.
 * This is E(f) as if the harmonics were orthogonal and the spectrum smooth:
 * it only points the exact search at the right places (a few, for a trace
 * without a comb has many maxima of nearly the same height). -1 when out
 * of memory. */
static int coarse_scan(const fit_context *fc, double lo, double step, size_t m, candidates *c) {
    size_t nfft = fast_length(ZERO_FILL * fc->n), nbins = nfft / 2 + 1;
    if (nfft > INT_MAX) return -1;
    /* In place: 2 nbins doubles, the trace in, the spectrum out. */
    double *buf = fftw_malloc(2 * nbins * sizeof *buf);
    fftw_plan plan = NULL;
    an_planner_lock();
    if (buf) plan = fftw_plan_dft_r2c_1d((int)nfft, buf, (fftw_complex *)buf, FFTW_ESTIMATE);
    an_planner_unlock();
    if (!plan) {
        fftw_free(buf);
        return -1;
    }
    memcpy(buf, fc->y, fc->n * sizeof *buf);
    memset(buf + fc->n, 0, (2 * nbins - fc->n) * sizeof *buf);
    fftw_execute(plan);
    for (size_t k = 0; k < nbins; k++)  /* the power over the spectrum, as it goes */
        buf[k] = buf[2 * k] * buf[2 * k] + buf[2 * k + 1] * buf[2 * k + 1];
    c->count = 0;
    scan_power(buf, nbins, (double)nfft / fc->rate, fc->nh, lo, step, m, c);
    an_planner_lock();
    fftw_destroy_plan(plan);
    an_planner_unlock();
    fftw_free(buf);
    return 0;
}

/* The maximum of E is between the end of the range edge and inner (E(edge)
 * > E(inner), -E values e_edge, e_inner): halve toward the edge until a
 * midpoint beats the edge (a bracket: 1) or the interval is narrower than
 * tolerance (the edge is the answer: 0). -1 when a fit failed. */
static int toward_edge(fit_context *fc, double edge, double e_edge, double inner, double e_inner,
                       double tolerance, double f[3], double e[3]) {
    while (fabs(inner - edge) >= tolerance && !fc->failed) {
        double mid = 0.5 * (edge + inner), e_mid = unexplained(fc, mid);
        if (e_mid < e_edge) {
            int left = edge < inner;
            f[left ? 0 : 2] = edge, e[left ? 0 : 2] = e_edge;
            f[1] = mid, e[1] = e_mid;
            f[left ? 2 : 0] = inner, e[left ? 2 : 0] = e_inner;
            return 1;
        }
        inner = mid, e_inner = e_mid;
    }
    return fc->failed ? -1 : 0;
}

/* Exact values around a candidate: -E at f[0] < f[1] < f[2], starting step
 * apart around start (where -E is e_start), then, while f[1] is not the
 * best of the three, moving toward the better side with steps growing by
 * the golden ratio (so that a scan far off costs a few values, not many),
 * within [lo, hi]. 1 when f[1] is the strict best (a bracket of the
 * maximum), 0 when the values are flat or the best is at an end of the
 * range, -1 when a fit failed. */
static int bracket(fit_context *fc, double lo, double hi, double step, double start,
                   double e_start, double tolerance, double f[3], double e[3]) {
    f[1] = fmin(fmax(start, lo + step), hi - step);
    f[0] = f[1] - step;
    f[2] = f[1] + step;
    for (int k = 0; k < 3; k++) e[k] = k == 1 && f[1] == start ? e_start : unexplained(fc, f[k]);
    for (int k = 0; k < MAX_EXPAND && !fc->failed; k++) {
        if (e[1] < e[0] && e[1] < e[2]) return 1;
        if (!(e[0] < e[1]) && !(e[2] < e[1])) return 0;     /* flat */
        int left = e[0] < e[2];
        double edge = left ? lo : hi, from = left ? f[0] : f[2], e_from = left ? e[0] : e[2];
        if (from == edge) return toward_edge(fc, edge, e_from, f[1], e[1], tolerance, f, e);
        double next = from + GOLDEN * (from - f[1]);
        next = left ? fmax(next, lo) : fmin(next, hi);
        if (left) {
            f[2] = f[1], e[2] = e[1], f[1] = f[0], e[1] = e[0];
            f[0] = next, e[0] = unexplained(fc, next);
        } else {
            f[0] = f[1], e[0] = e[1], f[1] = f[2], e[1] = e[2];
            f[2] = next, e[2] = unexplained(fc, next);
        }
    }
    return fc->failed ? -1 : 0;
}

/* Whether the best point so far is the maximum to within tolerance, after
 * a step between from and to shorter than tolerance / 4 (one of them is the
 * best point, the other explains no more and is as good as a probe on its
 * side): a probe half a tolerance out on the other side must not explain
 * more either. When the two coincide, a probe either side. */
static int certified(fit_context *fc, double from, double to, double tolerance) {
    double best = fc->best.explained, f = fc->best_f, other = f == from ? to : from;
    if (other == f) unexplained(fc, f - 0.5 * tolerance);
    if (other <= f) unexplained(fc, f + 0.5 * tolerance);
    if (other > f) unexplained(fc, f - 0.5 * tolerance);
    return !fc->failed && fc->best.explained <= best;
}

/* Brent's method (gsl_min) on -E inside the bracket (f_lo, f_mid, f_hi),
 * until the bracket is narrower than tolerance Hz, or a step from the best
 * point is shorter than a quarter of that and nothing within half a
 * tolerance either side of it explains more. Brent's steps are that short
 * only when its parabola puts the maximum there, but the parabola may come
 * from points far apart, hence the check; stopping then saves the steps by
 * which Brent pulls the far end of its bracket in. */
static int brent(fit_context *fc, const double f[3], const double e[3], double tolerance) {
    gsl_min_fminimizer *s = gsl_min_fminimizer_alloc(gsl_min_fminimizer_brent);
    if (!s) return -1;
    gsl_function fn = {unexplained_offset, fc};
    fc->origin = f[1];
    gsl_min_fminimizer_set_with_values(s, &fn, 0, e[1], f[0] - f[1], e[0], f[2] - f[1], e[2]);
    for (int iter = 0; iter < MAX_BRENT && !fc->failed; iter++) {
        double from = fc->origin + gsl_min_fminimizer_x_minimum(s);
        if (gsl_min_fminimizer_iterate(s) != GSL_SUCCESS) break;
        double a = gsl_min_fminimizer_x_lower(s), b = gsl_min_fminimizer_x_upper(s);
        if (gsl_min_test_interval(a, b, tolerance, 0) == GSL_SUCCESS) break;
        double to = fc->last_f;
        if (fabs(to - from) < 0.25 * tolerance && certified(fc, from, to, tolerance)) break;
    }
    gsl_min_fminimizer_free(s);
    return fc->failed ? -1 : 0;
}

/* The least value of the parabola through (f[k], e[k]), e[1] the least of
 * the three. */
static double vertex_value(const double f[3], const double e[3]) {
    double u0 = f[0] - f[1], u2 = f[2] - f[1], d0 = e[0] - e[1], d2 = e[2] - e[1];
    double det = u0 * u2 * (u0 - u2);
    double a = (d0 * u2 - d2 * u0) / det, b = (u0 * u0 * d2 - u2 * u2 * d0) / det;
    return a > 0 ? e[1] - b * b / (4 * a) : e[1];
}

/* From one candidate of the scan: a bracket by exact values, then Brent,
 * unless the parabola through the bracket says that its peak falls more
 * than 1 % short of the best fundamental tried so far. */
static int search_from(fit_context *fc, double lo, double hi, double step, double start,
                       double e_start, double tolerance) {
    double f[3], e[3];
    int bracketed = bracket(fc, lo, hi, step, start, e_start, tolerance, f, e);
    if (bracketed <= 0) return bracketed;
    if (-vertex_value(f, e) < 0.99 * fc->best.explained) return 0;
    return brent(fc, f, e, tolerance);
}

/* The fundamental in [lo, hi] that explains most of y: the coarse scan's
 * candidates valued exactly, and each within EXACT_SHARE of the best of
 * them searched to its maximum (more than one only when no comb stands
 * out: a trace of noise alone has many maxima of nearly the same height,
 * and a candidate valued a fraction of a step off its peak can lose up to
 * 5 % to another). The answer is the best fundamental tried. */
static int refine(fit_context *fc, double lo, double hi, size_t all, double *fundamental) {
    double duration = (double)fc->n / fc->rate;
    double step = 1 / (SCAN_STEPS_PER_LOBE * (double)fc->nh * duration);
    /* Converged when the top harmonic removed (of all) has its phase over
     * the trace uncertain by 1e-5 rad or less: pi H df T <= 1e-5. */
    double tolerance = 1e-5 / (M_PI * (double)all * duration);
    if (!(hi > lo)) {
        *fundamental = lo;
        return 0;
    }
    size_t m = (size_t)ceil((hi - lo) / step) + 1;
    if (m < 3) m = 3;
    step = (hi - lo) / (double)(m - 1);
    candidates c;
    if (coarse_scan(fc, lo, step, m, &c)) return -1;
    if (c.count == 0) c.f[c.count++] = lo;
    double value[MAX_CANDIDATES], top = 0;
    for (size_t k = 0; k < c.count; k++) {
        value[k] = unexplained(fc, c.f[k]);
        top = fmin(top, value[k]);
    }
    for (size_t k = 0; k < c.count && !fc->failed; k++) {
        if (value[k] > EXACT_SHARE * top) continue;     /* -E: smaller is better */
        if (search_from(fc, lo, hi, step, c.f[k], value[k], tolerance) < 0) return -1;
    }
    if (fc->failed) return -1;
    *fundamental = fc->best_f;
    return 0;
}

/* The comb over one segment of len samples into comb[], by the recurrence
 * m_{j+2} = 2 cos(2 theta) m_j - m_{j-2} that every sinusoid of angle theta
 * per sample obeys: each harmonic keeps the pair (m_j, m_{j+1}) and its
 * predecessor pair (m_{j-2}, m_{j-1}), so a pair of samples advances
 * together and the harmonics' sum needs no reduction across lanes.
 * prev, cur: by harmonic, the pairs just before the segment; w2: 2 cos(2
 * theta). len is even. */
static void synthesize_segment(double *comb, size_t len, size_t ngroups, const double *w2,
                               const double (*prev)[2], const double (*cur)[2]) {
    memset(comb, 0, len * sizeof *comb);
    for (size_t g = 0; g < ngroups; g++) {
        pair p[SYNTH_GROUP], q[SYNTH_GROUP], ww[SYNTH_GROUP];
        for (size_t k = 0; k < SYNTH_GROUP; k++) {
            size_t h = g * SYNTH_GROUP + k;
            p[k] = (pair){prev[h][0], prev[h][1]};
            q[k] = (pair){cur[h][0], cur[h][1]};
            ww[k] = (pair){w2[h], w2[h]};
        }
        for (size_t j = 0; j < len; j += 2) {
            pair t = {0, 0};
#pragma GCC unroll 8
            for (size_t k = 0; k < SYNTH_GROUP; k++) {
                pair next = ww[k] * q[k] - p[k];
                p[k] = q[k];
                q[k] = next;
                t += next;
            }
            pair c;
            memcpy(&c, comb + j, sizeof c);
            c += t;
            memcpy(comb + j, &c, sizeof c);
        }
    }
}

/* y -= the fitted comb. Each segment's recurrence starts from values taken
 * from phases advanced by an exact factor per segment (as in project).
 * Returns the sum of squares of what was removed. */
static double subtract(double *y, size_t n, double phi, size_t nh, const fit_result *r) {
    size_t ngroups = (nh + SYNTH_GROUP - 1) / SYNTH_GROUP;
    double w2[MAX_HARMONICS] = {0}, prev[MAX_HARMONICS][2] = {{0}}, cur[MAX_HARMONICS][2] = {{0}};
    double complex at[MAX_HARMONICS], rot[MAX_HARMONICS], step[MAX_HARMONICS];
    double comb[SEGMENT + 1], centre = 0.5 * (double)(n - 1), removed = 0;
    powers(cexp(-I * phi * (centre + 4)), nh, at);  /* sample -4 */
    powers(cexp(I * phi), nh, rot);
    powers(cexp(I * phi * SEGMENT), nh, step);
    for (size_t k = 0; k < nh; k++) {
        w2[k] = 2 * creal(rot[k] * rot[k]);
        at[k] *= r->a[k] - I * r->b[k];
    }
    for (size_t i0 = 0; i0 < n; i0 += SEGMENT) {
        size_t len = n - i0 < SEGMENT ? n - i0 : SEGMENT;
        for (size_t k = 0; k < nh; k++) {   /* the samples i0 - 4 .. i0 - 1 */
            double complex z = at[k];
            prev[k][0] = creal(z), z *= rot[k];
            prev[k][1] = creal(z), z *= rot[k];
            cur[k][0] = creal(z), z *= rot[k];
            cur[k][1] = creal(z);
            at[k] *= step[k];
        }
        synthesize_segment(comb, len + (len & 1), ngroups, w2, prev, cur);
        for (size_t j = 0; j < len; j++) {
            y[i0 + j] -= comb[j];
            removed += comb[j] * comb[j];
        }
    }
    return removed;
}

/* The harmonics to fit: those of the highest fundamental searched below
 * 0.45 rate (so that none comes near the Nyquist frequency, where the sine
 * vanishes at the samples), at most 32, and at least the fundamental. */
static size_t harmonics_below(double highest, double rate) {
    size_t nh = 0;
    while (nh < MAX_HARMONICS && (double)(nh + 1) * highest < 0.45 * rate) nh++;
    return nh ? nh : 1;
}

static int all_finite(const double *y, size_t n) {
    for (size_t i = 0; i < n; i++)
        if (!isfinite(y[i])) return 0;
    return 1;
}

/* Refused (-1, y and out untouched): no trace or no result; a rate that is
 * not a positive number; nominal not in (0, rate / 2); search negative, not
 * a number, or half the nominal or more (the search would reach the
 * sub-harmonics); a trace shorter than 2 periods of the lowest fundamental
 * searched (the fundamental's sine and cosine, and its harmonics, are then
 * close to collinear and their amplitudes meaningless); samples that are
 * not finite; normal equations that are not positive definite; no memory.
 * The fundamental only (nharmonics 1) when nominal is at or above 0.45 rate. */
int an_remove_mains(double *y, size_t n, double rate, double nominal, double search,
                    an_mains *out) {
    if (!y || !out || !(rate > 0) || !isfinite(rate)) return -1;
    if (!(nominal > 0) || !(nominal < 0.5 * rate)) return -1;
    if (!(search >= 0) || !(search < 0.5 * nominal)) return -1;
    double lo = nominal - search, hi = nominal + search;
    if (lo * (double)n / rate < MIN_CYCLES) return -1;
    if (!all_finite(y, n)) return -1;
    fit_context fc = {.y = y, .n = n, .rate = rate, .nh = harmonics_below(hi, rate)};
    /* The fundamental alone, near the Nyquist frequency: search no higher
     * than 0.45 rate, or than nominal when that is higher still. */
    if (hi >= 0.45 * rate) hi = fmax(nominal, 0.45 * rate);
    /* The fundamental found on the first harmonics only (a high harmonic's
     * reach, h times the search, spans hertz, where a strong NMR line would
     * pull it onto itself), then refined on every harmonic within one lobe
     * of the whole comb, 1 / (H T), too narrow for a line to pull it far. */
    size_t all = fc.nh;
    double fundamental, duration = (double)n / rate;
    if (all > REFINE_HARMONICS) {
        fc.nh = REFINE_HARMONICS;
        if (refine(&fc, lo, hi, all, &fundamental)) return -1;
        double lobe = 1 / ((double)all * duration);
        fc.nh = all;
        fc.best_f = 0;
        lo = fmax(lo, fundamental - lobe);
        hi = fmin(hi, fundamental + lobe);
    }
    if (refine(&fc, lo, hi, all, &fundamental)) return -1;
    fit_result r = fc.best;
    if (fc.best_f != fundamental && fit_at(&fc, fundamental, &r)) return -1;
    double removed = subtract(y, n, 2 * M_PI * fundamental / rate, fc.nh, &r);
    memset(out, 0, sizeof *out);
    out->fundamental = fundamental;
    out->nharmonics = fc.nh;
    for (size_t k = 0; k < fc.nh; k++) out->amplitude[k] = hypot(r.a[k], r.b[k]);
    out->rms_removed = sqrt(removed / (double)n);
    return 0;
}
