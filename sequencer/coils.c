/* coils: the coil solver. Currents x from A x = b (field per ampere of each
 * coil at each place, field wanted there): exact when square, least squares
 * when over-determined, minimum norm when under-determined, with the
 * condition number from the singular values. GSL does the linear algebra.
 * Not for building A or b from a rig (compile.c) nor for limits (limits.c). */
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_blas.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_matrix.h>
#include <gsl/gsl_permutation.h>
#include <gsl/gsl_vector.h>

#include "compile.h"

/* GSL reports errors through a process-wide handler whose default aborts.
 * Rather than swap that handler (global state), every call here is made so
 * that GSL has nothing to report: dimensions are checked first, and every
 * matrix, vector and permutation is a view on memory this file allocates
 * with malloc (a failed gsl_*_alloc would call the handler). */

/* Scratch for one solve. The decomposed matrix is m x n with m >= n: A when
 * nrows >= ncols, A transposed when wider than tall. */
typedef struct {
    size_t m, n;
    double *u;        /* m x n: the matrix, then U of its SVD */
    double *v;        /* n x n: V of the SVD */
    double *s;        /* n: singular values, largest first */
    double *work;     /* n: SVD scratch, then the minimum-norm coefficients */
    double *factor;   /* m x n: LU or QR factors of A */
    double *tau;      /* n: QR Householder coefficients */
    double *residual; /* m: QR residual, then A x - b */
    double *x;        /* m (at least ncols): the currents until accepted */
    size_t *perm;     /* n: LU row permutation */
} coil_work;

static int all_finite(const double *v, size_t count) {
    for (size_t i = 0; i < count; i++)
        if (!isfinite(v[i])) return 0;
    return 1;
}

/* Allocates the scratch; -1 when the sizes would overflow or memory is out.
 * Every block is at most m * n doubles, so bounding m * n bounds them all. */
static int work_alloc(coil_work *w, size_t nrows, size_t ncols) {
    memset(w, 0, sizeof *w);
    w->m = nrows >= ncols ? nrows : ncols;
    w->n = nrows >= ncols ? ncols : nrows;
    if (w->m > SIZE_MAX / 16 / sizeof(double) / w->n) return -1;
    size_t mn = w->m * w->n, nn = w->n * w->n;
    double *block = malloc((2 * mn + nn + 3 * w->n + 2 * w->m) * sizeof *block);
    w->perm = malloc(w->n * sizeof *w->perm);
    if (!block || !w->perm) {
        free(block);
        free(w->perm);
        return -1;
    }
    w->u = block;
    w->v = w->u + mn;
    w->s = w->v + nn;
    w->work = w->s + w->n;
    w->factor = w->work + w->n;
    w->tau = w->factor + mn;
    w->residual = w->tau + w->n;
    w->x = w->residual + w->m;
    return 0;
}

static void work_free(coil_work *w) {
    free(w->u);
    free(w->perm);
}

/* SVD of A (or of A^T when wide) into w; returns the condition number,
 * +inf when the smallest singular value is zero. */
static double decompose_svd(coil_work *w, const double *a, size_t nrows, size_t ncols) {
    if (nrows >= ncols) {
        memcpy(w->u, a, nrows * ncols * sizeof *a);
    } else {
        for (size_t i = 0; i < nrows; i++)
            for (size_t j = 0; j < ncols; j++) w->u[j * nrows + i] = a[i * ncols + j];
    }
    gsl_matrix_view u = gsl_matrix_view_array(w->u, w->m, w->n);
    gsl_matrix_view v = gsl_matrix_view_array(w->v, w->n, w->n);
    gsl_vector_view s = gsl_vector_view_array(w->s, w->n);
    gsl_vector_view work = gsl_vector_view_array(w->work, w->n);
    gsl_linalg_SV_decomp(&u.matrix, &v.matrix, &s.vector, &work.vector);
    double largest = w->s[0], smallest = w->s[w->n - 1];
    if (!(smallest > 0)) return INFINITY;
    return largest / smallest;
}

/* Square A: LU with partial pivoting. -1 when a pivot is exactly zero
 * (which the condition check makes all but impossible; checked so that
 * gsl_linalg_LU_solve never reports a singular matrix). */
static int solve_exact(coil_work *w, const double *a, const double *b, double *x) {
    size_t n = w->n;
    memcpy(w->factor, a, n * n * sizeof *a);
    gsl_matrix_view lu = gsl_matrix_view_array(w->factor, n, n);
    gsl_permutation p = {n, w->perm};
    int signum;
    gsl_linalg_LU_decomp(&lu.matrix, &p, &signum);
    for (size_t i = 0; i < n; i++)
        if (w->factor[i * n + i] == 0) return -1;
    gsl_vector_const_view bv = gsl_vector_const_view_array(b, n);
    gsl_vector_view xv = gsl_vector_view_array(x, n);
    gsl_linalg_LU_solve(&lu.matrix, &p, &bv.vector, &xv.vector);
    return 0;
}

/* Tall A (more places than coils): Householder QR, then R x = Q^T b. */
static void solve_least_squares(coil_work *w, const double *a, const double *b, double *x) {
    size_t m = w->m, n = w->n;
    memcpy(w->factor, a, m * n * sizeof *a);
    gsl_matrix_view qr = gsl_matrix_view_array(w->factor, m, n);
    gsl_vector_view tau = gsl_vector_view_array(w->tau, n);
    gsl_linalg_QR_decomp(&qr.matrix, &tau.vector);
    gsl_vector_const_view bv = gsl_vector_const_view_array(b, m);
    gsl_vector_view xv = gsl_vector_view_array(x, n);
    gsl_vector_view residual = gsl_vector_view_array(w->residual, m);
    gsl_linalg_QR_lssolve(&qr.matrix, &tau.vector, &bv.vector, &xv.vector,
                          &residual.vector);
}

/* Wide A (fewer places than coils), from the SVD of A^T = U S V^T, so that
 * A = V S U^T and its pseudo-inverse is U S^-1 V^T: x = U (S^-1 (V^T b)). */
static void solve_min_norm(coil_work *w, const double *b, double *x) {
    gsl_matrix_const_view u = gsl_matrix_const_view_array(w->u, w->m, w->n);
    gsl_matrix_const_view v = gsl_matrix_const_view_array(w->v, w->n, w->n);
    gsl_vector_const_view bv = gsl_vector_const_view_array(b, w->n);
    gsl_vector_view t = gsl_vector_view_array(w->work, w->n);
    gsl_vector_view xv = gsl_vector_view_array(x, w->m);
    gsl_blas_dgemv(CblasTrans, 1.0, &v.matrix, &bv.vector, 0.0, &t.vector);
    for (size_t i = 0; i < w->n; i++) w->work[i] /= w->s[i];
    gsl_blas_dgemv(CblasNoTrans, 1.0, &u.matrix, &t.vector, 0.0, &xv.vector);
}

/* |A x - b|, with the original A. */
static double misfit_of(coil_work *w, const double *a, size_t nrows, size_t ncols,
                        const double *b, const double *x) {
    memcpy(w->residual, b, nrows * sizeof *b);
    gsl_matrix_const_view av = gsl_matrix_const_view_array(a, nrows, ncols);
    gsl_vector_const_view xv = gsl_vector_const_view_array(x, ncols);
    gsl_vector_view r = gsl_vector_view_array(w->residual, nrows);
    gsl_blas_dgemv(CblasNoTrans, 1.0, &av.matrix, &xv.vector, -1.0, &r.vector);
    return gsl_blas_dnrm2(&r.vector);
}

/* Every step after the sizes are known: the checks of A and b, the
 * condition, the solve into w->x and the misfit. 0, or -1 on refusal. */
static int solve_checked(coil_work *w, const double *a, size_t nrows, size_t ncols,
                         const double *b, coil_method method, double *misfit,
                         double *condition) {
    if (!all_finite(a, nrows * ncols) || !all_finite(b, nrows)) return -1;
    *condition = decompose_svd(w, a, nrows, ncols);
    if (!(*condition <= COIL_MAX_CONDITION)) return -1;
    if (method == COIL_EXACT) {
        if (solve_exact(w, a, b, w->x) != 0) return -1;
    } else if (method == COIL_LEAST_SQUARES) {
        solve_least_squares(w, a, b, w->x);
    } else {
        solve_min_norm(w, b, w->x);
    }
    double r = misfit_of(w, a, nrows, ncols, b, w->x);
    if (!all_finite(w->x, ncols) || !isfinite(r)) return -1;
    *misfit = r;
    return 0;
}

/* Besides what compile.h says: -1 also for a NULL pointer, a zero or
 * overflowing size, a non-finite entry of A or b, a solution that is not
 * finite (currents beyond what doubles hold), or memory running out. On -1,
 * *method and *condition are set when the sizes allowed (condition +inf for
 * a singular A, NaN when it was not computed); x and *misfit are left as
 * they were. */
int coil_solve(const double *a, size_t nrows, size_t ncols, const double *b, double *x,
               double *misfit, coil_method *method, double *condition) {
    if (!a || !b || !x || !misfit || !method || !condition) return -1;
    if (nrows == 0 || ncols == 0) return -1;
    *method = nrows == ncols ? COIL_EXACT : nrows > ncols ? COIL_LEAST_SQUARES : COIL_MIN_NORM;
    *condition = NAN;
    coil_work w;
    if (work_alloc(&w, nrows, ncols) != 0) return -1;
    int rc = solve_checked(&w, a, nrows, ncols, b, *method, misfit, condition);
    if (rc == 0) memcpy(x, w.x, ncols * sizeof *x);
    work_free(&w);
    return rc;
}
