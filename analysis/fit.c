/* fit: damped sinusoids fitted to a trace by GSL's nonlinear least squares
 * (trust region, Levenberg-Marquardt steps, analytic Jacobian), with
 * one-sigma errors from the covariance scaled by the residual variance.
 * Not for choosing the lines or their starting values (shot.c), nor for
 * fits across points (series.c).
 *
 * Internally each line has the parameters a = A / ys (ys the trace's rms),
 * phi, u = (f - f_start) T and v = W T (T the record's length), all of
 * order one, so GSL's relative tolerances mean the same for a trace in
 * tesla as in volts. These are linear rescalings: the errors come back
 * exactly. The linewidth is not bounded: a record much shorter than T2*
 * may give W slightly below 0, which is reported as fitted, with its error
 * (a bound at 0 would make both the value and its error biased).
 *
 * The solver is GSL's multilarge_nlinear, the same trust-region method as
 * multifit_nlinear but fed J^T J and J u by the model itself: multifit keeps
 * the n x p Jacobian and multiplies it through GSL's reference CBLAS, which
 * for n = 16384 samples and p = 4 took ~2 ms an iteration, most of a shot's
 * reduction; here one pass over the samples gives both. */
#include "analysis_internal.h"

#include <gsl/gsl_blas.h>
#include <gsl/gsl_eigen.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_matrix.h>
#include <gsl/gsl_multilarge_nlinear.h>
#include <gsl/gsl_vector.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define NPAR 4                  /* a, phi, u, v per line */
#define MAXP (AN_MAX_LINES * NPAR)
#define MAX_SPACES 4            /* workspaces kept, by (n, nlines) */
#define MAX_ITER 200
#define XTOL 1e-10
#define GTOL 1e-10
#define FTOL 1e-14
#define ANCHOR 256              /* the oscillator is set exactly this often */
#define RCOND 1e-13             /* smallest eigenvalue of J^T J, relative, of a fit */
#define STEP_SIGMA 1e-5         /* converged: the next step is below this many errors */

/* What f and df see: the data and each line's oscillation at the last x,
 * and the normal equations at the last x GSL asked them for. */
typedef struct {
    const double *y;
    size_t n, nlines;
    double rate, t_start, length, inv_ys;
    double dt, inv_length;      /* 1 / rate, 1 / length */
    double f_start[AN_MAX_LINES];
    double *c, *s;              /* nlines x n: exp(-pi W t) cos / sin(2 pi f t + phi) */
    double *kv;                 /* n: pi t / T */
    double x[MAXP];
    bool valid;                 /* c, s belong to x */
    double jtj[MAXP * MAXP], g[MAXP], normal_x[MAXP];   /* J^T J (lower), J^T f */
    bool normal;                /* jtj, g belong to normal_x */
} model;

typedef struct {
    size_t n, nlines;
    gsl_multilarge_nlinear_workspace *w;
    gsl_matrix *jtj, *evec, *covar;
    gsl_vector *eval;
    gsl_eigen_symmv_workspace *eigen;
    double *c, *s, *kv;
} space_slot;

struct an_fit_space {
    space_slot slot[MAX_SPACES];
    size_t used, next;
};

static void slot_free(space_slot *sl) {
    if (sl->w) gsl_multilarge_nlinear_free(sl->w);
    if (sl->jtj) gsl_matrix_free(sl->jtj);
    if (sl->evec) gsl_matrix_free(sl->evec);
    if (sl->covar) gsl_matrix_free(sl->covar);
    if (sl->eval) gsl_vector_free(sl->eval);
    if (sl->eigen) gsl_eigen_symmv_free(sl->eigen);
    free(sl->c);
    free(sl->s);
    free(sl->kv);
    memset(sl, 0, sizeof *sl);
}

void an_fit_space_free(an_fit_space *s) {
    if (!s) return;
    for (size_t i = 0; i < s->used; i++) slot_free(&s->slot[i]);
    free(s);
}

/* ---- the model ----------------------------------------------------------------- */

/* Fills c, s of every line for parameters x, by a rotation per sample. */
static int oscillate(model *m, const double *x) {
    if (m->valid && memcmp(m->x, x, m->nlines * NPAR * sizeof *x) == 0) return 0;
    m->valid = false;
    for (size_t k = 0; k < m->nlines; k++) {
        double f = m->f_start[k] + x[NPAR * k + 2] * m->inv_length;
        double width = x[NPAR * k + 3] * m->inv_length, phi = x[NPAR * k + 1];
        double decay = -M_PI * width, omega = 2 * M_PI * f;
        double qe = exp(decay * m->dt), qc = qe * cos(omega * m->dt), qs = qe * sin(omega * m->dt);
        double *c = m->c + k * m->n, *s = m->s + k * m->n, zc = 0, zs = 0;
        for (size_t i = 0; i < m->n; i++) {
            if (i % ANCHOR == 0) {
                double t = m->t_start + (double)i * m->dt, e = exp(decay * t);
                zc = e * cos(omega * t + phi);
                zs = e * sin(omega * t + phi);
                if (!isfinite(zc) || !isfinite(zs) || e > 1e150) return GSL_EDOM;
            }
            c[i] = zc;
            s[i] = zs;
            double nc = zc * qc - zs * qs;
            zs = zc * qs + zs * qc;
            zc = nc;
        }
    }
    memcpy(m->x, x, m->nlines * NPAR * sizeof *x);
    m->valid = true;
    return 0;
}

static int model_f(const gsl_vector *xv, void *params, gsl_vector *fv) {
    model *m = params;
    const double *x = xv->data;
    if (oscillate(m, x)) return GSL_EDOM;
    double *f = fv->data;
    size_t stride = fv->stride;
    for (size_t i = 0; i < m->n; i++) f[i * stride] = -m->y[i] * m->inv_ys;
    for (size_t k = 0; k < m->nlines; k++) {
        double a = x[NPAR * k];
        const double *c = m->c + k * m->n;
        for (size_t i = 0; i < m->n; i++) f[i * stride] += a * c[i];
    }
    return GSL_SUCCESS;
}

/* Row i of the Jacobian holds, for each line k, alpha_j B_j kv^e_j with
 * (alpha, B, e) = (1, c, 0), (-a, s, 0), (-2a, s, 1), (-a, c, 1) for
 * d/da, d/dphi, d/du, d/dv, and kv = pi t / T. So J^T J comes from twelve
 * sums per pair of lines, of c or s of one times c or s of the other times
 * kv^0, kv^1 or kv^2, kept in registers over one pass each. */
static const int basis_of[NPAR] = {0, 1, 1, 0};     /* 0: c, 1: s */
static const int power_of[NPAR] = {0, 0, 1, 1};

static double alpha_of(const double *x, size_t k, size_t j) {
    static const double scale[NPAR] = {1, -1, -2, -1};
    return j == 0 ? 1 : scale[j] * x[NPAR * k];
}

/* sum[bk][bl][e] = sum_i B_bk(line k) B_bl(line l) kv^e. */
static void pair_sums(const model *m, size_t k, size_t l, double sum[2][2][3]) {
    const double *ck = m->c + k * m->n, *sk = m->s + k * m->n;
    const double *cl = m->c + l * m->n, *sl = m->s + l * m->n, *kv = m->kv;
    double cc0 = 0, cc1 = 0, cc2 = 0, cs0 = 0, cs1 = 0, cs2 = 0;
    double sc0 = 0, sc1 = 0, sc2 = 0, ss0 = 0, ss1 = 0, ss2 = 0;
    for (size_t i = 0; i < m->n; i++) {
        double w = kv[i], cc = ck[i] * cl[i], cs = ck[i] * sl[i], sc = sk[i] * cl[i],
               ss = sk[i] * sl[i];
        cc0 += cc, cs0 += cs, sc0 += sc, ss0 += ss;
        cc *= w, cs *= w, sc *= w, ss *= w;
        cc1 += cc, cs1 += cs, sc1 += sc, ss1 += ss;
        cc2 += cc * w, cs2 += cs * w, sc2 += sc * w, ss2 += ss * w;
    }
    double out[2][2][3] = {{{cc0, cc1, cc2}, {cs0, cs1, cs2}}, {{sc0, sc1, sc2}, {ss0, ss1, ss2}}};
    memcpy(sum, out, sizeof out);
}

/* J^T u for line k into jtu[4k..4k+3]. */
static void line_times(const model *m, const double *x, size_t k, const gsl_vector *u,
                       double *jtu) {
    const double *c = m->c + k * m->n, *s = m->s + k * m->n, *kv = m->kv;
    double c0 = 0, c1 = 0, s0 = 0, s1 = 0;
    for (size_t i = 0; i < m->n; i++) {
        double ui = u->data[i * u->stride], uc = ui * c[i], us = ui * s[i];
        c0 += uc, s0 += us, c1 += uc * kv[i], s1 += us * kv[i];
    }
    double sum[2][2] = {{c0, c1}, {s0, s1}};
    for (size_t j = 0; j < NPAR; j++)
        jtu[NPAR * k + j] = alpha_of(x, k, j) * sum[basis_of[j]][power_of[j]];
}

/* The lower half of J^T J (rows MAXP apart) and J^T u (u may be NULL). */
static void normal_equations(const model *m, const double *x, const gsl_vector *u,
                             double *jtj, double *jtu) {
    for (size_t k = 0; k < m->nlines; k++) {
        for (size_t l = 0; l <= k; l++) {
            double sum[2][2][3];
            pair_sums(m, k, l, sum);
            for (size_t j = 0; j < NPAR; j++)
                for (size_t jl = 0; jl < NPAR && (l < k || jl <= j); jl++)
                    jtj[(NPAR * k + j) * MAXP + NPAR * l + jl] =
                        alpha_of(x, k, j) * alpha_of(x, l, jl) *
                        sum[basis_of[j]][basis_of[jl]][power_of[j] + power_of[jl]];
        }
        if (u) line_times(m, x, k, u, jtu);
    }
}

/* v = J u, line by line: each line's four columns folded into one
 * coefficient of c and one of s per sample. */
static void jacobian_times(const model *m, const double *x, const gsl_vector *u, gsl_vector *v) {
    double *out = v->data;
    size_t stride = v->stride;
    for (size_t i = 0; i < m->n; i++) out[i * stride] = 0;
    for (size_t k = 0; k < m->nlines; k++) {
        const double *uk = u->data + NPAR * k * u->stride;
        double a = x[NPAR * k], ua = uk[0], up = uk[u->stride], uu = uk[2 * u->stride],
               uv = uk[3 * u->stride];
        const double *c = m->c + k * m->n, *s = m->s + k * m->n;
        for (size_t i = 0; i < m->n; i++) {
            double kv = m->kv[i];
            /* row . u = c ua - a s up - a s 2 kv uu - a c kv uv */
            out[i * stride] += c[i] * (ua - a * kv * uv) - a * s[i] * (up + 2 * kv * uu);
        }
    }
}

/* v = J u (NoTrans) or J^T u (Trans) when v is given, and the lower half of
 * J^T J when JTJ is given, each in one pass over the samples. J^T J and
 * J^T f at the point GSL asks them for are kept for the convergence test. */
static int model_df(CBLAS_TRANSPOSE_t trans, const gsl_vector *xv, const gsl_vector *u,
                    void *params, gsl_vector *v, gsl_matrix *JTJ) {
    model *m = params;
    const double *x = xv->data;
    size_t p = NPAR * m->nlines;
    if (oscillate(m, x)) return GSL_EDOM;
    if (v && trans == CblasNoTrans) jacobian_times(m, x, u, v);
    if (!JTJ && !(v && trans == CblasTrans)) return GSL_SUCCESS;
    const gsl_vector *back = v && trans == CblasTrans ? u : NULL;
    normal_equations(m, x, back, m->jtj, m->g);
    memcpy(m->normal_x, x, p * sizeof *x);
    m->normal = back != NULL;
    if (back)
        for (size_t j = 0; j < p; j++) gsl_vector_set(v, j, m->g[j]);
    if (JTJ)
        for (size_t j = 0; j < p; j++)
            for (size_t l = 0; l <= j; l++) gsl_matrix_set(JTJ, j, l, m->jtj[j * MAXP + l]);
    return GSL_SUCCESS;
}

/* ---- workspaces ------------------------------------------------------------------- */

static space_slot *slot_for(an_fit_space **space, size_t n, size_t nlines) {
    if (!*space && !(*space = calloc(1, sizeof **space))) return NULL;
    an_fit_space *fs = *space;
    for (size_t i = 0; i < fs->used; i++)
        if (fs->slot[i].n == n && fs->slot[i].nlines == nlines) return &fs->slot[i];
    size_t i = fs->used < MAX_SPACES ? fs->used++ : fs->next++ % MAX_SPACES;
    space_slot *sl = &fs->slot[i];
    slot_free(sl);
    gsl_multilarge_nlinear_parameters par = gsl_multilarge_nlinear_default_parameters();
    par.trs = gsl_multilarge_nlinear_trs_lm;
    par.scale = gsl_multilarge_nlinear_scale_levenberg;
    par.solver = gsl_multilarge_nlinear_solver_mcholesky;
    size_t p = NPAR * nlines;
    sl->w = gsl_multilarge_nlinear_alloc(gsl_multilarge_nlinear_trust, &par, n, p);
    sl->jtj = gsl_matrix_alloc(p, p);
    sl->evec = gsl_matrix_alloc(p, p);
    sl->covar = gsl_matrix_alloc(p, p);
    sl->eval = gsl_vector_alloc(p);
    sl->eigen = gsl_eigen_symmv_alloc(p);
    sl->c = malloc(n * nlines * sizeof *sl->c);
    sl->s = malloc(n * nlines * sizeof *sl->s);
    sl->kv = malloc(n * sizeof *sl->kv);
    sl->n = n;
    sl->nlines = nlines;
    if (!sl->w || !sl->jtj || !sl->evec || !sl->covar || !sl->eval || !sl->eigen || !sl->c ||
        !sl->s || !sl->kv) {
        slot_free(sl);
        if (i + 1 == fs->used) fs->used--;
        return NULL;
    }
    return sl;
}

/* ---- the fit ------------------------------------------------------------------------- */

/* |f|, without the reference CBLAS's overflow-safe (and slow) dnrm2: the
 * residuals here are of order one. */
static double norm(const gsl_vector *f) {
    double sum = 0;
    for (size_t i = 0; i < f->size; i++) sum += f->data[i * f->stride] * f->data[i * f->stride];
    return sqrt(sum);
}

static double trace_rms(const double *y, size_t n) {
    double sum = 0;
    for (size_t i = 0; i < n; i++) sum += y[i] * y[i];
    return sqrt(sum / (double)n);
}

static bool usable(const an_line_fit *start, size_t nlines, double rate) {
    for (size_t k = 0; k < nlines; k++) {
        const an_line_fit *l = &start[k];
        if (!isfinite(l->frequency) || !isfinite(l->amplitude) || !isfinite(l->phase) ||
            !isfinite(l->linewidth) || fabs(l->frequency) > rate)
            return false;
    }
    return true;
}

/* The eigen-decomposition of J^T J and J^T f at x (the ones kept from GSL's
 * last request when they are for x). -1 when J^T J is singular: a
 * parameter the data do not determine. */
static int decompose(space_slot *sl, model *m, const gsl_vector *x, const gsl_vector *f) {
    size_t p = NPAR * m->nlines;
    if (!m->normal || memcmp(m->normal_x, x->data, p * sizeof *m->normal_x) != 0) {
        if (oscillate(m, x->data)) return -1;
        normal_equations(m, x->data, f, m->jtj, m->g);
        memcpy(m->normal_x, x->data, p * sizeof *m->normal_x);
        m->normal = true;
    }
    for (size_t j = 0; j < p; j++)
        for (size_t l = 0; l <= j; l++) {
            gsl_matrix_set(sl->jtj, j, l, m->jtj[j * MAXP + l]);
            gsl_matrix_set(sl->jtj, l, j, m->jtj[j * MAXP + l]);
        }
    if (gsl_eigen_symmv(sl->jtj, sl->eval, sl->evec, sl->eigen)) return -1;
    double top = gsl_vector_max(sl->eval), low = gsl_vector_min(sl->eval);
    return top > 0 && low > RCOND * top ? 0 : -1;
}

/* g^T (J^T J)^-1 g: the next Gauss-Newton step's length squared in units
 * of the parameters' errors, times the residual variance. */
static double decrement(const space_slot *sl, const model *m) {
    size_t p = NPAR * m->nlines;
    double d = 0;
    for (size_t e = 0; e < p; e++) {
        double proj = 0;
        for (size_t j = 0; j < p; j++) proj += gsl_matrix_get(sl->evec, j, e) * m->g[j];
        d += proj * proj / gsl_vector_get(sl->eval, e);
    }
    return d;
}

/* (J^T J)^-1 from the decomposition, into sl->covar. */
static void covariance(space_slot *sl, size_t p) {
    for (size_t j = 0; j < p; j++)
        for (size_t l = 0; l <= j; l++) {
            double sum = 0;
            for (size_t e = 0; e < p; e++)
                sum += gsl_matrix_get(sl->evec, j, e) * gsl_matrix_get(sl->evec, l, e) /
                       gsl_vector_get(sl->eval, e);
            gsl_matrix_set(sl->covar, j, l, sum);
            gsl_matrix_set(sl->covar, l, j, sum);
        }
}

/* The fitted lines back in the caller's units, with their errors; the
 * amplitude made >= 0 and the phase put in (-pi, pi]. */
static void unpack(const model *m, const double *x, const gsl_matrix *covar, double variance,
                   double ys, an_line_fit *out) {
    for (size_t k = 0; k < m->nlines; k++) {
        const double *q = x + NPAR * k;
        double err[NPAR];
        for (size_t j = 0; j < NPAR; j++) {
            double c = gsl_matrix_get(covar, NPAR * k + j, NPAR * k + j) * variance;
            err[j] = c > 0 ? sqrt(c) : 0;
        }
        an_line_fit *l = &out[k];
        double a = q[0] * ys, phi = q[1];
        if (a < 0) a = -a, phi += M_PI;
        phi = remainder(phi, 2 * M_PI);
        if (phi <= -M_PI) phi += 2 * M_PI;
        l->amplitude = a;
        l->amplitude_err = err[0] * ys;
        l->phase = phi;
        l->phase_err = err[1];
        l->frequency = m->f_start[k] + q[2] / m->length;
        l->frequency_err = err[2] / m->length;
        l->linewidth = q[3] / m->length;
        l->linewidth_err = err[3] / m->length;
        l->snr = 0;
    }
}

/* Iterates until the next Gauss-Newton step would move no parameter by
 * more than STEP_SIGMA of its error (a scale-free test; GSL's own xtol and
 * gtol tests are kept as a backstop). Then the minimum's cost changes
 * below rounding, where GSL's steps are rejected one after another. */
static int iterate(space_slot *sl, model *m, size_t p) {
    for (size_t iter = 0; iter < MAX_ITER; iter++) {
        int status = gsl_multilarge_nlinear_iterate(sl->w);
        if (status == GSL_ENOPROG) return 0;
        if (status != GSL_SUCCESS) return -1;
        const gsl_vector *x = gsl_multilarge_nlinear_position(sl->w);
        const gsl_vector *f = gsl_multilarge_nlinear_residual(sl->w);
        double chi = norm(f), variance = chi * chi / (double)(m->n - p);
        if (decompose(sl, m, x, f) == 0 &&
            decrement(sl, m) <= STEP_SIGMA * STEP_SIGMA * variance)
            return 0;
        int info;
        if (gsl_multilarge_nlinear_test(XTOL, GTOL, FTOL, &info, sl->w) == GSL_SUCCESS)
            return 0;
    }
    return -1;
}

/* x - (J^T J)^-1 J^T f from the decomposition: the Gauss-Newton step. */
static void newton_step(const space_slot *sl, const model *m, const double *x, double *out) {
    size_t p = NPAR * m->nlines;
    memcpy(out, x, p * sizeof *x);
    for (size_t e = 0; e < p; e++) {
        double proj = 0;
        for (size_t j = 0; j < p; j++) proj += gsl_matrix_get(sl->evec, j, e) * m->g[j];
        proj /= gsl_vector_get(sl->eval, e);
        for (size_t j = 0; j < p; j++) out[j] -= proj * gsl_matrix_get(sl->evec, j, e);
    }
}

/* The minimum, its residual norm and the decomposition at it: one last
 * Gauss-Newton step from where the iterations stopped, so close that its
 * effect on the cost is below rounding (GSL's trust region could not take
 * it), but not on the parameters: it brings them from 1e-5 of an error to
 * a small fraction of that (the convergence is linear, ~1e-2 a step here). */
static int finish(space_slot *sl, model *m, gsl_vector *x, gsl_vector *f, double *chi) {
    size_t p = NPAR * m->nlines;
    if (model_f(x, m, f) || !isfinite(*chi = norm(f)) || decompose(sl, m, x, f)) return -1;
    double polished[MAXP];
    newton_step(sl, m, x->data, polished);
    gsl_vector_view pv = gsl_vector_view_array(polished, p);
    double was = *chi;
    if (model_f(&pv.vector, m, f) == 0 && isfinite(*chi = norm(f)) &&
        *chi <= was * (1 + 1e-12) && decompose(sl, m, &pv.vector, f) == 0) {
        gsl_vector_memcpy(x, &pv.vector);
        return 0;
    }
    /* the step made things worse: stay where the iterations stopped */
    return model_f(x, m, f) || !isfinite(*chi = norm(f)) || decompose(sl, m, x, f) ? -1 : 0;
}

static int solve(space_slot *sl, model *m, const double *x0, double ys, an_line_fit *out,
                 double *rms) {
    size_t p = NPAR * m->nlines;
    gsl_vector_const_view x0v = gsl_vector_const_view_array(x0, p);
    gsl_multilarge_nlinear_fdf fdf = {model_f, model_df, NULL, m->n, p, m, 0, 0, 0, 0};
    if (gsl_multilarge_nlinear_init(&x0v.vector, &fdf, sl->w) != GSL_SUCCESS ||
        iterate(sl, m, p))
        return -1;
    gsl_vector *x = gsl_multilarge_nlinear_position(sl->w);
    for (size_t j = 0; j < p; j++)
        if (!isfinite(gsl_vector_get(x, j))) return -1;
    /* f: the workspace's own residual vector, overwritten (the fit is over) */
    gsl_vector *f = gsl_multilarge_nlinear_residual(sl->w);
    double chi;
    if (finish(sl, m, x, f, &chi)) return -1;
    covariance(sl, p);
    unpack(m, x->data, sl->covar, chi * chi / (double)(m->n - p), ys, out);
    if (rms) *rms = ys * chi / sqrt((double)m->n);
    return 0;
}

int an_fit_lines_in(an_fit_space **space, const double *y, size_t n, double rate,
                    double t_start, const an_line_fit *start, size_t nlines, an_line_fit *out,
                    double *rms) {
    if (!space || !y || !start || !out || nlines == 0 || nlines > AN_MAX_LINES ||
        !(rate > 0) || !isfinite(rate) || !isfinite(t_start) || n < NPAR * nlines + 2 ||
        !usable(start, nlines, rate))
        return -1;
    double ys = trace_rms(y, n);
    if (!(ys > 0) || !isfinite(ys)) return -1;
    space_slot *sl = slot_for(space, n, nlines);
    if (!sl) return -1;
    model m = {.y = y, .n = n, .nlines = nlines, .rate = rate, .t_start = t_start,
               .length = (double)n / rate, .inv_ys = 1.0 / ys, .dt = 1.0 / rate,
               .inv_length = rate / (double)n, .c = sl->c, .s = sl->s, .kv = sl->kv};
    for (size_t i = 0; i < n; i++) m.kv[i] = M_PI * (t_start + (double)i * m.dt) * m.inv_length;
    double x0[MAXP];
    for (size_t k = 0; k < nlines; k++) {
        m.f_start[k] = start[k].frequency;
        x0[NPAR * k] = start[k].amplitude / ys;
        x0[NPAR * k + 1] = start[k].phase;
        x0[NPAR * k + 2] = 0;
        x0[NPAR * k + 3] = start[k].linewidth * m.length;
    }
    return solve(sl, &m, x0, ys, out, rms);
}

void an_lines_subtract(const an_line_fit *lines, size_t nlines, double rate, double t_start,
                       const double *y, size_t n, double *out) {
    for (size_t i = 0; i < n; i++) out[i] = y[i];
    for (size_t k = 0; k < nlines; k++) {
        const an_line_fit *l = &lines[k];
        double decay = -M_PI * l->linewidth, omega = 2 * M_PI * l->frequency, dt = 1.0 / rate;
        double qe = exp(decay * dt), qc = qe * cos(omega * dt), qs = qe * sin(omega * dt);
        double zc = 0, zs = 0;
        for (size_t i = 0; i < n; i++) {
            if (i % ANCHOR == 0) {
                double t = t_start + (double)i * dt, e = l->amplitude * exp(decay * t);
                zc = e * cos(omega * t + l->phase);
                zs = e * sin(omega * t + l->phase);
            }
            out[i] -= zc;
            double nc = zc * qc - zs * qs;
            zs = zc * qs + zs * qc;
            zc = nc;
        }
    }
}

int an_fit_lines(const double *y, size_t n, double rate, double t_start,
                 const an_line_fit *start, size_t nlines, an_line_fit *out, double *rms) {
    an_fit_space *space = NULL;
    int rc = an_fit_lines_in(&space, y, n, rate, t_start, start, nlines, out, rms);
    an_fit_space_free(space);
    return rc;
}
