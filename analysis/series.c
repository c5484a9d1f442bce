/* series: fits across the points of a run. T1 from relaxation curves
 * (amplitude against delay) and build-up curves (against polarizing time),
 * and the field calibration of a setpoint or coil current from line
 * frequencies, by GSL's trust-region nonlinear least squares with analytic
 * Jacobians. Not for per-shot fits (fit.c) nor for choosing what to fit. */
#include "analysis.h"

#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_blas.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_fit.h>
#include <gsl/gsl_multifit.h>
#include <gsl/gsl_multifit_nlinear.h>

/* GSL reports errors through a process-wide handler whose default aborts.
 * The calls here are made so that GSL has nothing to report: sizes are
 * checked first (never fewer points than parameters), models never hand GSL
 * a non-finite value, and matrices are views on memory allocated here. Only
 * GSL's own workspaces are allocated by GSL; running out of memory there
 * would reach the handler.
 *
 * Every fit works in scaled units, x / max|x| and y / max|y|, so that the
 * parameters are of order one whatever the units (a signal of 1e-11 T, a
 * field of 1e-6 T) and the convergence tests mean the same for every data
 * set. The parameters:
 *   decays:      a, u = ln(T1 / max|x|), c; T1 = exp(u) is positive by
 *                construction, and its error is T1 * sigma_u, which is the
 *                linearized error of T1 itself (the covariance at the
 *                optimum does not depend on the parametrization).
 *   calibration: k, b, q = b_perp^2 (scaled). In b_perp itself the model's
 *                derivative vanishes at b_perp = 0, so a fit of a residual
 *                field near zero would stall and its error would be
 *                undefined; in q it does not (d f / d q = 1 / (2 f)). q may
 *                go negative while (k x + b)^2 + q stays positive at every
 *                point; b_perp is reported as sqrt(max(q, 0)), and its error
 *                as the rise of b_perp when q rises by one sigma:
 *                sqrt(max(q, 0) + sigma_q) - b_perp. Far from zero that is
 *                sigma_q / (2 b_perp), the usual linear error; at zero it is
 *                sqrt(sigma_q), a bound that still means something. The
 *                caller gets sigma_q back as (b_perp + b_perp_err)^2 -
 *                b_perp^2. k is reported >= 0: the frequency cannot tell
 *                (k, b_z) from (-k, -b_z).
 *
 * Refused (-1), out untouched: fewer points than the header says, fewer
 * than three different x, a value that is not finite, no convergence (a
 * curve with no finite minimum, such as a straight line for a decay, whose
 * T1 runs off to infinity), or a parameter the data do not determine (all
 * y equal). A calibration from exactly three points has no degrees of
 * freedom left: chi2_dof is NAN, and so are its errors without weights. */

#define MAX_ITERATIONS 500
#define XTOL 1e-12              /* a step this small relative to the parameters */
#define COS_CONVERGED 1e-10     /* residual against every Jacobian column */
#define COS_STALLED 1e-6        /* accepted once no step lowers the cost */
#define MAX_INFLATION 1e12      /* variance inflation past which a parameter is
                                 * not determined by the data */
#define EXACT 1e-13             /* a residual this small relative to the data */
#define INFEASIBLE 1e100        /* residual of a trial point outside the model */
#define MIN_FIELD2 1e-30        /* smallest (k x + b)^2 + q, scaled */
#define MAX_STARTS 3            /* starting points tried, best first */
#define NPARAM 3

typedef enum { RELAXATION, BUILDUP, CALIBRATION } model;

/* The data of one fit, scaled. */
typedef struct {
    model kind;
    size_t n;
    double *t;          /* x / xs */
    double *y;          /* y / ys (calibration: f / gamma_hz / ys) */
    double *w;          /* 1 / (y_err / ys)^2, or NULL: unweighted */
    double xs, ys;      /* the scales: max|x|, max|y| */
} series;

typedef struct {
    double theta[NPARAM];
    double cost;        /* sum of weighted squared residuals */
} start;

/* ---- data --------------------------------------------------------------- */

static int by_value(const void *a, const void *b) {
    double u = *(const double *)a, v = *(const double *)b;
    return (u > v) - (u < v);
}

/* The number of different values among n. */
static size_t distinct(const double *v, size_t n, double *scratch) {
    memcpy(scratch, v, n * sizeof *v);
    qsort(scratch, n, sizeof *scratch, by_value);
    size_t count = n ? 1 : 0;
    for (size_t i = 1; i < n; i++) count += scratch[i] != scratch[i - 1];
    return count;
}

/* Checks and scales the points (y divided by divisor first). Returns 0, or
 * -1 for too few points, fewer than three different x, a value that is not
 * finite, or no memory. */
static int series_load(series *s, model kind, const an_point *p, size_t n, size_t min_points,
                       double divisor) {
    memset(s, 0, sizeof *s);
    if (!p || n < min_points || n > SIZE_MAX / (5 * sizeof(double))) return -1;
    bool weighted = true;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(p[i].x) || !isfinite(p[i].y) || !isfinite(p[i].y_err)) return -1;
        if (!(p[i].y_err > 0)) weighted = false;
    }
    s->kind = kind;
    s->n = n;
    s->t = malloc(3 * n * sizeof *s->t);
    if (!s->t) return -1;
    s->y = s->t + n;
    double xs = 0, ys = 0;
    for (size_t i = 0; i < n; i++) {
        s->t[i] = p[i].x;
        s->y[i] = p[i].y / divisor;
        xs = fmax(xs, fabs(p[i].x));
        ys = fmax(ys, fabs(s->y[i]));
    }
    if (distinct(s->t, n, s->y + n) < 3 || !isfinite(ys)) {
        free(s->t);
        s->t = NULL;
        return -1;
    }
    s->xs = xs;
    s->ys = ys > 0 ? ys : 1;
    for (size_t i = 0; i < n; i++) {
        s->t[i] /= s->xs;
        s->y[i] /= s->ys;
    }
    if (weighted) {
        s->w = s->y + n;
        for (size_t i = 0; i < n; i++) {
            double e = p[i].y_err / divisor / s->ys;
            s->w[i] = 1 / (e * e);
            if (!isfinite(s->w[i]) || !(s->w[i] > 0)) weighted = false;
        }
        if (!weighted) s->w = NULL;
    }
    return 0;
}

static void series_free(series *s) {
    free(s->t);
    s->t = NULL;
}

static double weight(const series *s, size_t i) {
    return s->w ? s->w[i] : 1.0;
}

/* ---- the models --------------------------------------------------------- */

static int infeasible(gsl_vector *f) {
    gsl_vector_set_all(f, INFEASIBLE);
    return GSL_SUCCESS;
}

/* The model at t_i for parameters th; NAN outside its domain. */
static double model_at(const series *s, const double *th, size_t i) {
    double t = s->t[i];
    if (s->kind == CALIBRATION) {
        double u = th[0] * t + th[1], field2 = u * u + th[2];
        return field2 > MIN_FIELD2 && isfinite(field2) ? sqrt(field2) : NAN;
    }
    double tau = exp(th[1]);
    if (!(tau > 0) || !isfinite(tau)) return NAN;
    double m = s->kind == RELAXATION ? th[0] * exp(-t / tau) + th[2]
                                     : -th[0] * expm1(-t / tau) + th[2];
    return isfinite(m) ? m : NAN;
}

/* Residuals model - data. A point outside the model's domain gets a huge
 * residual, so that the trust region rejects the step (a NAN would be
 * accepted: GSL compares norms). */
static int residuals(const gsl_vector *x, void *params, gsl_vector *f) {
    const series *s = params;
    const double th[NPARAM] = {gsl_vector_get(x, 0), gsl_vector_get(x, 1),
                               gsl_vector_get(x, 2)};
    for (size_t i = 0; i < s->n; i++) {
        double m = model_at(s, th, i);
        if (isnan(m)) return infeasible(f);
        gsl_vector_set(f, i, m - s->y[i]);
    }
    return GSL_SUCCESS;
}

/* The Jacobian, only ever asked for at points residuals accepted. */
static int jacobian(const gsl_vector *x, void *params, gsl_matrix *J) {
    const series *s = params;
    double p0 = gsl_vector_get(x, 0), p1 = gsl_vector_get(x, 1), p2 = gsl_vector_get(x, 2);
    for (size_t i = 0; i < s->n; i++) {
        double t = s->t[i], d0, d1, d2;
        if (s->kind == CALIBRATION) {
            double u = p0 * t + p1, m = sqrt(u * u + p2);
            d0 = u * t / m;
            d1 = u / m;
            d2 = 0.5 / m;
        } else {
            double tau = exp(p1), e = exp(-t / tau), slope = p0 * e * t / tau;
            d0 = s->kind == RELAXATION ? e : -expm1(-t / tau);
            d1 = s->kind == RELAXATION ? slope : -slope;
            d2 = 1;
        }
        gsl_matrix_set(J, i, 0, d0);
        gsl_matrix_set(J, i, 1, d1);
        gsl_matrix_set(J, i, 2, d2);
    }
    return GSL_SUCCESS;
}

/* Sum of weighted squared residuals at th; INFINITY outside the domain. */
static double cost_at(const series *s, const double *th) {
    double sum = 0;
    for (size_t i = 0; i < s->n; i++) {
        double m = model_at(s, th, i);
        if (isnan(m)) return INFINITY;
        sum += weight(s, i) * (m - s->y[i]) * (m - s->y[i]);
    }
    return isfinite(sum) ? sum : INFINITY;
}

/* ---- the nonlinear fit -------------------------------------------------- */

/* The largest |cosine| between the residual vector and a Jacobian column:
 * zero at a minimum whatever the scale of the data. A residual at rounding
 * level (an exact curve) points anywhere: 0 then too. */
static double worst_cosine(const gsl_multifit_nlinear_workspace *w, double data_norm) {
    const gsl_matrix *J = gsl_multifit_nlinear_jac(w);
    const gsl_vector *f = gsl_multifit_nlinear_residual(w);
    double fnorm = gsl_blas_dnrm2(f), worst = 0;
    if (fnorm <= EXACT * data_norm) return 0;
    for (size_t j = 0; j < J->size2; j++) {
        gsl_vector_const_view col = gsl_matrix_const_column(J, j);
        double cnorm = gsl_blas_dnrm2(&col.vector), dot;
        gsl_blas_ddot(&col.vector, f, &dot);
        if (cnorm > 0) worst = fmax(worst, fabs(dot) / (cnorm * fnorm));
    }
    return worst;
}

/* Iterates to convergence: the residual orthogonal to the Jacobian's columns
 * (to 1e-10), or nearly so (1e-6) once steps are negligible or none lowers
 * the cost any more (the minimum to machine precision). Returns 0 or -1. */
static int converge(gsl_multifit_nlinear_workspace *w, double data_norm) {
    for (size_t iter = 0; iter < MAX_ITERATIONS; iter++) {
        int status = gsl_multifit_nlinear_iterate(w);
        double cosine = worst_cosine(w, data_norm);
        if (status == GSL_ENOPROG) {
            if (cosine <= COS_STALLED) return 0;
            if (iter == 0) return -1;
            continue;
        }
        if (status != GSL_SUCCESS) return -1;
        if (cosine <= COS_CONVERGED) return 0;
        int info;
        if (gsl_multifit_nlinear_test(XTOL, 0, 0, &info, w) == GSL_SUCCESS &&
            cosine <= COS_STALLED)
            return 0;
    }
    return -1;
}

/* cov = (J^T W J)^-1 at the solution. Refused (-1) when a parameter is not
 * determined: a dropped or non-finite variance, or one inflated past
 * MAX_INFLATION by its correlation with the others. */
static int covariance(const gsl_multifit_nlinear_workspace *w, double *cov) {
    const gsl_matrix *J = gsl_multifit_nlinear_jac(w);
    gsl_matrix_view c = gsl_matrix_view_array(cov, NPARAM, NPARAM);
    if (gsl_multifit_nlinear_covar(J, 0.0, &c.matrix) != GSL_SUCCESS) return -1;
    for (size_t j = 0; j < NPARAM; j++) {
        gsl_vector_const_view col = gsl_matrix_const_column(J, j);
        double norm = gsl_blas_dnrm2(&col.vector);
        double inflation = cov[j * NPARAM + j] * norm * norm;
        if (!isfinite(inflation) || !(inflation >= 0.5) || inflation > MAX_INFLATION) return -1;
    }
    for (size_t k = 0; k < NPARAM * NPARAM; k++)
        if (!isfinite(cov[k])) return -1;
    return 0;
}

/* Fits from theta (replaced by the result), with the unscaled covariance and
 * the sum of weighted squared residuals. Returns 0 or -1. */
static int solve(const series *s, double *theta, double *cov, double *chi2) {
    gsl_multifit_nlinear_parameters par = gsl_multifit_nlinear_default_parameters();
    gsl_multifit_nlinear_workspace *w =
        gsl_multifit_nlinear_alloc(gsl_multifit_nlinear_trust, &par, s->n, NPARAM);
    if (!w) return -1;
    gsl_multifit_nlinear_fdf fdf = {.f = residuals, .df = jacobian, .fvv = NULL,
                                    .n = s->n, .p = NPARAM, .params = (void *)s};
    gsl_vector_view x0 = gsl_vector_view_array(theta, NPARAM);
    int rc;
    if (s->w) {
        gsl_vector_const_view wts = gsl_vector_const_view_array(s->w, s->n);
        rc = gsl_multifit_nlinear_winit(&x0.vector, &wts.vector, &fdf, w);
    } else {
        rc = gsl_multifit_nlinear_init(&x0.vector, &fdf, w);
    }
    double data_norm = 0;
    for (size_t i = 0; i < s->n; i++) data_norm += weight(s, i) * s->y[i] * s->y[i];
    if (rc == GSL_SUCCESS) rc = converge(w, sqrt(data_norm));
    if (rc == 0) rc = covariance(w, cov);
    if (rc == 0) {
        gsl_vector *x = gsl_multifit_nlinear_position(w);
        for (size_t j = 0; j < NPARAM; j++) theta[j] = gsl_vector_get(x, j);
        *chi2 = cost_at(s, theta);
        if (!isfinite(*chi2)) rc = -1;
        for (size_t j = 0; j < NPARAM; j++)
            if (!isfinite(theta[j])) rc = -1;
    }
    gsl_multifit_nlinear_free(w);
    return rc == 0 ? 0 : -1;
}

/* Fits from each start in turn, best first, until one converges. */
static int solve_from(const series *s, start *starts, size_t nstarts, double *theta,
                      double *cov, double *chi2) {
    for (size_t k = 0; k < nstarts; k++) {
        memcpy(theta, starts[k].theta, sizeof starts[k].theta);
        if (solve(s, theta, cov, chi2) == 0) return 0;
    }
    return -1;
}

static int by_cost(const void *a, const void *b) {
    double u = ((const start *)a)->cost, v = ((const start *)b)->cost;
    return (u > v) - (u < v);
}

/* Keeps the starts of finite cost, sorted best first; returns how many
 * remain, at most MAX_STARTS. */
static size_t rank_starts(const series *s, start *starts, size_t count) {
    size_t kept = 0;
    for (size_t k = 0; k < count; k++) {
        starts[k].cost = cost_at(s, starts[k].theta);
        if (isfinite(starts[k].cost)) starts[kept++] = starts[k];
    }
    qsort(starts, kept, sizeof *starts, by_cost);
    return kept < MAX_STARTS ? kept : MAX_STARTS;
}

/* The variance factor for the errors, in scaled units: with weights, the
 * reduced chi-square when above 1 (else 1); without, the residual variance.
 * *chi2_dof gets the reduced chi-square or the residual variance (scaled);
 * both NAN without degrees of freedom, except a weighted factor of 1. */
static double error_scale(const series *s, double chi2, double *chi2_dof) {
    size_t dof = s->n - NPARAM;
    *chi2_dof = dof > 0 ? chi2 / (double)dof : NAN;
    if (s->w) return *chi2_dof > 1 ? *chi2_dof : 1;
    return *chi2_dof;
}

/* ---- decays ------------------------------------------------------------- */

/* A log-linear estimate of the scaled time constant: ln|y - c| against t over
 * the points on the start's side of the last one, weighted by (y - c)^2 (the
 * log's own error grows as 1 / |y - c|). c is the value at the largest t. */
static double loglinear_tau(const series *s) {
    size_t lo = 0, hi = 0;
    for (size_t i = 1; i < s->n; i++) {
        if (s->t[i] < s->t[lo]) lo = i;
        if (s->t[i] > s->t[hi]) hi = i;
    }
    double c = s->y[hi], sign = s->y[lo] >= c ? 1 : -1, span = s->t[hi] - s->t[lo];
    double *buf = malloc(3 * s->n * sizeof *buf);
    if (!buf) return span / 3;
    size_t m = 0;
    for (size_t i = 0; i < s->n; i++) {
        double d = sign * (s->y[i] - c);
        if (i == hi || !(d > 0)) continue;
        buf[m] = s->t[i];
        buf[s->n + m] = log(d);
        buf[2 * s->n + m] = weight(s, i) * d * d;
        m++;
    }
    double c0 = NAN, c1 = NAN, v00, v01, v11, chi2;
    if (m >= 2)
        gsl_fit_wlinear(buf, 1, buf + 2 * s->n, 1, buf + s->n, 1, m, &c0, &c1, &v00, &v01,
                        &v11, &chi2);
    free(buf);
    return c1 < 0 && isfinite(c1) ? -1 / c1 : span / 3;
}

/* For a time constant tau, the amplitude and offset by a linear fit (the
 * relaxation's form: y = a e + c with e = exp(-t / tau)). */
static void decay_linear_part(const series *s, double tau, double *scratch, double *a,
                              double *c) {
    double *e = scratch, *w = scratch + s->n, v00, v01, v11, chi2;
    for (size_t i = 0; i < s->n; i++) {
        e[i] = exp(-s->t[i] / tau);
        w[i] = weight(s, i);
    }
    gsl_fit_wlinear(e, 1, w, 1, s->y, 1, s->n, c, a, &v00, &v01, &v11, &chi2);
}

/* Starting points: the log-linear time constant and multiples of it from 1/16
 * to 16, each with its linear amplitude and offset; the best few by cost. */
static size_t decay_starts(const series *s, start *starts) {
    double tau0 = loglinear_tau(s);
    double *scratch = malloc(2 * s->n * sizeof *scratch);
    if (!scratch) return 0;
    size_t count = 0;
    for (int k = -4; k <= 4; k++) {
        double tau = tau0 * ldexp(1.0, k), a, c;
        decay_linear_part(s, tau, scratch, &a, &c);
        if (!isfinite(a) || !isfinite(c)) continue;
        start *st = &starts[count++];
        /* buildup: y = A (1 - e) + C = -A e + (A + C) */
        st->theta[0] = s->kind == RELAXATION ? a : -a;
        st->theta[1] = log(tau);
        st->theta[2] = s->kind == RELAXATION ? c : c + a;
    }
    free(scratch);
    return rank_starts(s, starts, count);
}

static int fit_decay(const an_point *p, size_t n, model kind, an_decay_fit *out) {
    if (!out) return -1;
    series s;
    if (series_load(&s, kind, p, n, 4, 1.0) != 0) return -1;
    start starts[9];
    size_t nstarts = decay_starts(&s, starts);
    double theta[NPARAM], cov[NPARAM * NPARAM], chi2, chi2_dof;
    int rc = solve_from(&s, starts, nstarts, theta, cov, &chi2);
    if (rc == 0) {
        double f = error_scale(&s, chi2, &chi2_dof), t1 = s.xs * exp(theta[1]);
        out->amplitude = s.ys * theta[0];
        out->amplitude_err = s.ys * sqrt(cov[0] * f);
        out->t1 = t1;
        out->t1_err = t1 * sqrt(cov[4] * f);
        out->offset = s.ys * theta[2];
        out->offset_err = s.ys * sqrt(cov[8] * f);
        out->chi2_dof = s.w ? chi2_dof : chi2_dof * s.ys * s.ys;
        out->n = n;
    }
    series_free(&s);
    return rc;
}

int an_fit_relaxation(const an_point *p, size_t n, an_decay_fit *out) {
    return fit_decay(p, n, RELAXATION, out);
}

int an_fit_buildup(const an_point *p, size_t n, an_decay_fit *out) {
    return fit_decay(p, n, BUILDUP, out);
}

/* ---- calibration -------------------------------------------------------- */

/* q at least this far from zero, and above -min (k t + b)^2: a start must lie
 * inside the model's domain. */
static double feasible_q(const series *s, double k, double b, double q) {
    double floor = 1e-12;
    for (size_t i = 0; i < s->n; i++) {
        double u = k * s->t[i] + b;
        floor = fmax(floor, 1e-12 - u * u);
    }
    return fmax(q, floor);
}

/* The start the plain reading of the data gives: a linear fit of the field
 * (f / gamma) against x, with the field's sign turned on the low side of its
 * smallest value when that is inside the range (the field goes through zero
 * there), then q from that smallest value: B_min^2 - (k x_min + b)^2. */
static int calibration_linear_start(const series *s, double *scratch, start *st) {
    size_t lo = 0, hi = 0, low = 0;
    for (size_t i = 1; i < s->n; i++) {
        if (s->t[i] < s->t[lo]) lo = i;
        if (s->t[i] > s->t[hi]) hi = i;
        if (s->y[i] < s->y[low]) low = i;
    }
    bool inside = s->t[low] > s->t[lo] && s->t[low] < s->t[hi];
    double *sy = scratch, *w = scratch + s->n, k, b, v00, v01, v11, chi2;
    for (size_t i = 0; i < s->n; i++) {
        bool below = inside && s->t[i] < s->t[low];
        sy[i] = below ? -s->y[i] : s->y[i];
        w[i] = inside && s->t[i] == s->t[low] ? 0 : weight(s, i);
    }
    gsl_fit_wlinear(s->t, 1, w, 1, sy, 1, s->n, &b, &k, &v00, &v01, &v11, &chi2);
    if (!isfinite(k) || !isfinite(b)) return -1;
    double u = k * s->t[low] + b;
    st->theta[0] = k;
    st->theta[1] = b;
    st->theta[2] = feasible_q(s, k, b, s->y[low] * s->y[low] - u * u);
    return 0;
}

/* The start from the field squared, which is a quadratic in x: B^2 = k^2 x^2
 * + 2 k b x + b^2 + q, by a linear least-squares fit (weights for B^2's own
 * error, 2 B sigma, with B floored at a tenth of the largest field). */
static int calibration_quadratic_start(const series *s, double *scratch, start *st) {
    size_t n = s->n;
    gsl_multifit_linear_workspace *work = gsl_multifit_linear_alloc(n, 3);
    if (!work) return -1;
    double *xm = scratch, *y2 = scratch + 3 * n, *w = scratch + 4 * n, c[3], cv[9], chi2;
    for (size_t i = 0; i < n; i++) {
        xm[3 * i] = 1;
        xm[3 * i + 1] = s->t[i];
        xm[3 * i + 2] = s->t[i] * s->t[i];
        y2[i] = s->y[i] * s->y[i];
        w[i] = weight(s, i) / (4 * (y2[i] + 0.01));
    }
    gsl_matrix_view X = gsl_matrix_view_array(xm, n, 3);
    gsl_vector_view Y = gsl_vector_view_array(y2, n), W = gsl_vector_view_array(w, n);
    gsl_vector_view C = gsl_vector_view_array(c, 3);
    gsl_matrix_view CV = gsl_matrix_view_array(cv, 3, 3);
    int rc = gsl_multifit_wlinear(&X.matrix, &W.vector, &Y.vector, &C.vector, &CV.matrix,
                                  &chi2, work);
    gsl_multifit_linear_free(work);
    if (rc != GSL_SUCCESS || !(c[2] > 0) || !isfinite(c[2])) return -1;
    double k = sqrt(c[2]), b = c[1] / (2 * k);
    st->theta[0] = k;
    st->theta[1] = b;
    st->theta[2] = feasible_q(s, k, b, c[0] - b * b);
    return isfinite(b) && isfinite(st->theta[2]) ? 0 : -1;
}

static size_t calibration_starts(const series *s, start *starts) {
    double *scratch = malloc(5 * s->n * sizeof *scratch);
    if (!scratch) return 0;
    size_t count = 0;
    if (calibration_linear_start(s, scratch, &starts[count]) == 0) count++;
    if (calibration_quadratic_start(s, scratch, &starts[count]) == 0) count++;
    free(scratch);
    return rank_starts(s, starts, count);
}

/* Scaled parameters to the caller's units, k >= 0 (the frequency does not
 * tell the field's sign: (k, b_z) and (-k, -b_z) fit alike). */
static void report_calibration(const series *s, const double *theta, const double *cov,
                               double chi2, double gamma_hz, an_calibration_fit *out) {
    double chi2_dof, f = error_scale(s, chi2, &chi2_dof), sign = theta[0] < 0 ? -1 : 1;
    double bs = s->ys;
    out->k = sign * theta[0] * bs / s->xs;
    out->k_err = bs / s->xs * sqrt(cov[0] * f);
    out->b_z = sign * theta[1] * bs;
    out->b_z_err = bs * sqrt(cov[4] * f);
    double q = fmax(theta[2], 0) * bs * bs, sigma_q = bs * bs * sqrt(cov[8] * f);
    out->b_perp = sqrt(q);
    /* sqrt(q + sigma_q) - sqrt(q), without the cancellation */
    out->b_perp_err = sigma_q / (sqrt(q + sigma_q) + sqrt(q));
    out->chi2_dof = s->w ? chi2_dof : chi2_dof * (gamma_hz * bs) * (gamma_hz * bs);
    out->n = s->n;
}

int an_fit_calibration(const an_point *p, size_t n, double gamma_hz, an_calibration_fit *out) {
    if (!out || !(gamma_hz > 0) || !isfinite(gamma_hz)) return -1;
    series s;
    if (series_load(&s, CALIBRATION, p, n, 3, gamma_hz) != 0) return -1;
    start starts[2];
    size_t nstarts = calibration_starts(&s, starts);
    double theta[NPARAM], cov[NPARAM * NPARAM], chi2;
    int rc = solve_from(&s, starts, nstarts, theta, cov, &chi2);
    if (rc == 0) report_calibration(&s, theta, cov, chi2, gamma_hz, out);
    series_free(&s);
    return rc;
}
