/* test_coils: the coil solver's contract (coil_solve in compile.h) as cmocka
 * tests: exact, least-squares and minimum-norm cases with answers worked by
 * hand, and every refusal. It also writes $B/tests/coil_cases.jsonl, random
 * rig-sized systems that tests/ref/solver.py checks against numpy. Not for
 * building A and b from a rig, nor for limits (the compile tests). */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <errno.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_rng.h>
#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <unistd.h>

#include "compile.h"

/* Set by the GSL error handler main installs: coil_solve must never get
 * GSL to report an error (its default handler aborts the process). */
static int gsl_errors;

static void count_gsl_error(const char *reason, const char *file, int line, int gsl_errno) {
    (void)reason, (void)file, (void)line, (void)gsl_errno;
    gsl_errors++;
}

typedef struct {
    int rc;
    double x[8];
    double misfit, condition;
    coil_method method;
} solved;

/* Runs coil_solve with x and misfit preset to a marker, so that a refusal
 * can be seen to leave them alone. */
static solved solve(const double *a, size_t nrows, size_t ncols, const double *b) {
    solved s;
    for (size_t i = 0; i < 8; i++) s.x[i] = -999;
    s.misfit = -999;
    s.condition = -999;
    s.method = (coil_method)-1;
    gsl_errors = 0;
    s.rc = coil_solve(a, nrows, ncols, b, s.x, &s.misfit, &s.method, &s.condition);
    if (gsl_errors) fail_msg("GSL reported %d error(s)", gsl_errors);
    return s;
}

static void check_close(double got, double want, double tol, const char *what) {
    if (!(fabs(got - want) <= tol)) fail_msg("%s: got %.17g, want %.17g", what, got, want);
}

static void check_refused_untouched(const solved *s) {
    assert_int_equal(s->rc, -1);
    for (size_t i = 0; i < 8; i++) check_close(s->x[i], -999, 0, "x after a refusal");
    check_close(s->misfit, -999, 0, "misfit after a refusal");
}

static void test_square_system_solved_exactly(void **state) {
    (void)state;
    const double a[] = {2, 1, 1, 3}, b[] = {3, 5};
    solved s = solve(a, 2, 2, b);
    assert_int_equal(s.rc, 0);
    assert_int_equal(s.method, COIL_EXACT);
    /* source: Cramer's rule, x = (3*3 - 1*5, 2*5 - 1*3) / 5, by hand */
    check_close(s.x[0], 0.8, 1e-15, "x0");
    check_close(s.x[1], 1.4, 1e-15, "x1");
    check_close(s.misfit, 0, 1e-15, "misfit");
    /* source: eigenvalues of a symmetric 2x2, (5 +- sqrt 5) / 2, by hand */
    check_close(s.condition, (5 + sqrt(5)) / (5 - sqrt(5)), 1e-14, "condition");
}

static void test_rig_scaled_square_system_solved_exactly(void **state) {
    (void)state;
    /* Two coils of 20 uT/A and 50 uT/A, crossing over 5 uT/A. */
    const double a[] = {20e-6, 5e-6, 5e-6, 50e-6}, b[] = {1e-6, 2e-6};
    solved s = solve(a, 2, 2, b);
    assert_int_equal(s.rc, 0);
    /* source: Cramer's rule, det = 975e-12, by hand */
    check_close(s.x[0], (1e-6 * 50e-6 - 5e-6 * 2e-6) / 975e-12, 1e-16, "x0");
    check_close(s.x[1], (20e-6 * 2e-6 - 5e-6 * 1e-6) / 975e-12, 1e-16, "x1");
    check_close(s.misfit, 0, 1e-21, "misfit");
}

static void test_tall_system_solved_by_least_squares(void **state) {
    (void)state;
    const double a[] = {1, 0, 0, 1, 1, 1}, b[] = {1, 1, 0};
    solved s = solve(a, 3, 2, b);
    assert_int_equal(s.rc, 0);
    assert_int_equal(s.method, COIL_LEAST_SQUARES);
    /* source: normal equations [[2,1],[1,2]] x = [1,1], by hand */
    check_close(s.x[0], 1.0 / 3, 1e-15, "x0");
    check_close(s.x[1], 1.0 / 3, 1e-15, "x1");
    /* source: singular values sqrt 3 and 1 (eigenvalues of A^T A), by hand */
    check_close(s.condition, sqrt(3), 1e-14, "condition");
}

static void test_inconsistent_tall_system_has_its_residual_as_misfit(void **state) {
    (void)state;
    const double a[] = {1, 0, 0, 1, 1, 1}, b[] = {1, 1, 0};
    solved s = solve(a, 3, 2, b);
    assert_int_equal(s.rc, 0);
    /* source: residual (2/3, 2/3, -2/3) at x = (1/3, 1/3), by hand */
    check_close(s.misfit, 2 / sqrt(3), 1e-15, "misfit");
}

static void test_consistent_tall_system_has_zero_misfit(void **state) {
    (void)state;
    const double a[] = {1, 0, 0, 1, 1, 1}, b[] = {1, 2, 3};
    solved s = solve(a, 3, 2, b);
    assert_int_equal(s.rc, 0);
    check_close(s.x[0], 1, 1e-15, "x0");
    check_close(s.x[1], 2, 1e-15, "x1");
    check_close(s.misfit, 0, 1e-15, "misfit");
}

static void test_wide_system_solved_by_minimum_norm(void **state) {
    (void)state;
    const double a[] = {3, 4}, b[] = {5};
    solved s = solve(a, 1, 2, b);
    assert_int_equal(s.rc, 0);
    assert_int_equal(s.method, COIL_MIN_NORM);
    /* source: x = A^T b / |A|^2 for one row, by hand */
    check_close(s.x[0], 0.6, 1e-15, "x0");
    check_close(s.x[1], 0.8, 1e-15, "x1");
    check_close(s.misfit, 0, 1e-15, "misfit");
    check_close(s.condition, 1, 1e-15, "condition");
}

static void test_wide_two_by_three_solution_is_orthogonal_to_the_null_space(void **state) {
    (void)state;
    /* Null space of A: (1, -1, 0) scaled; the minimum-norm x has no part in it. */
    const double a[] = {1, 1, 0, 0, 0, 1}, b[] = {2, 3};
    solved s = solve(a, 2, 3, b);
    assert_int_equal(s.rc, 0);
    /* source: pseudo-inverse of a matrix with orthogonal rows, by hand */
    check_close(s.x[0], 1, 1e-15, "x0");
    check_close(s.x[1], 1, 1e-15, "x1");
    check_close(s.x[2], 3, 1e-15, "x2");
    check_close(s.misfit, 0, 1e-15, "misfit");
    check_close(s.condition, sqrt(2), 1e-15, "condition");
}

static void test_square_with_equal_rows_refused_as_singular(void **state) {
    (void)state;
    const double a[] = {1, 2, 1, 2}, b[] = {1, 1};
    solved s = solve(a, 2, 2, b);
    check_refused_untouched(&s);
    assert_int_equal(s.method, COIL_EXACT);
    assert_true(isinf(s.condition) || s.condition > COIL_MAX_CONDITION);
}

static void test_zero_coil_refused_as_singular(void **state) {
    (void)state;
    const double a[] = {0}, b[] = {1e-6};
    solved s = solve(a, 1, 1, b);
    check_refused_untouched(&s);
    assert_true(isinf(s.condition));
}

static void test_rows_differing_by_1e_12_refused_as_ill_conditioned(void **state) {
    (void)state;
    const double a[] = {1, 2, 1, 2 + 1e-12}, b[] = {1, 1};
    solved s = solve(a, 2, 2, b);
    check_refused_untouched(&s);
    /* About |A|_F^2 / det = 10 / 1e-12 (by hand): finite and past the limit. */
    assert_true(isfinite(s.condition));
    assert_true(s.condition > COIL_MAX_CONDITION);
}

static void test_rows_differing_by_1e_8_accepted_below_the_limit(void **state) {
    (void)state;
    const double a[] = {1, 2, 1, 2 + 1e-8}, b[] = {1, 1};
    solved s = solve(a, 2, 2, b);
    assert_int_equal(s.rc, 0);
    /* About 10 / 1e-8 (by hand); the exact answer is (1, 0). */
    assert_true(s.condition > 1e8 && s.condition < COIL_MAX_CONDITION);
    check_close(s.x[0], 1, 1e-6, "x0");
    check_close(s.x[1], 0, 1e-6, "x1");
}

static void test_tall_with_equal_columns_refused_as_singular(void **state) {
    (void)state;
    const double a[] = {1, 1, 2, 2, 3, 3}, b[] = {1, 2, 3};
    solved s = solve(a, 3, 2, b);
    check_refused_untouched(&s);
    assert_int_equal(s.method, COIL_LEAST_SQUARES);
}

static void test_wide_with_proportional_rows_refused_as_singular(void **state) {
    (void)state;
    const double a[] = {1, 2, 3, 2, 4, 6}, b[] = {1, 2};
    solved s = solve(a, 2, 3, b);
    check_refused_untouched(&s);
    assert_int_equal(s.method, COIL_MIN_NORM);
}

static void test_zero_coils_refused(void **state) {
    (void)state;
    const double a[] = {1}, b[] = {1};
    solved s = solve(a, 1, 0, b);
    check_refused_untouched(&s);
}

static void test_zero_places_refused(void **state) {
    (void)state;
    const double a[] = {1}, b[] = {1};
    solved s = solve(a, 0, 1, b);
    check_refused_untouched(&s);
}

static void test_sizes_past_memory_refused_before_reading_a(void **state) {
    (void)state;
    /* nrows * ncols is 8 past SIZE_MAX: a size that wraps round to a small
     * one. A and b are a page that cannot be read, so reading them crashes. */
    long page = sysconf(_SC_PAGESIZE);
    double *none = mmap(NULL, (size_t)page, PROT_NONE, MAP_PRIVATE | MAP_ANONYMOUS, -1, 0);
    assert_true(none != MAP_FAILED);
    solved s = solve(none, SIZE_MAX / 8 + 2, 8, none);
    munmap(none, (size_t)page);
    check_refused_untouched(&s);
}

static void test_not_a_number_in_a_refused(void **state) {
    (void)state;
    const double a[] = {1, 0, 0, NAN}, b[] = {1, 1};
    solved s = solve(a, 2, 2, b);
    check_refused_untouched(&s);
    /* Refused before the decomposition: no condition number was computed. */
    assert_true(isnan(s.condition));
}

static void test_infinite_target_refused(void **state) {
    (void)state;
    const double a[] = {1, 0, 0, 1}, b[] = {1, INFINITY};
    solved s = solve(a, 2, 2, b);
    check_refused_untouched(&s);
}

static void test_currents_beyond_doubles_refused(void **state) {
    (void)state;
    const double a[] = {1e-300, 0, 0, 1e-300}, b[] = {1e300, 1};
    solved s = solve(a, 2, 2, b);
    check_refused_untouched(&s);
    check_close(s.condition, 1, 1e-15, "condition");
}

static void test_null_pointer_refused(void **state) {
    (void)state;
    const double a[] = {1}, b[] = {1};
    double x[1] = {-999}, misfit = -999, condition;
    coil_method method;
    assert_int_equal(coil_solve(NULL, 1, 1, b, x, &misfit, &method, &condition), -1);
    assert_int_equal(coil_solve(a, 1, 1, NULL, x, &misfit, &method, &condition), -1);
    assert_int_equal(coil_solve(a, 1, 1, b, NULL, &misfit, &method, &condition), -1);
    assert_int_equal(coil_solve(a, 1, 1, b, x, NULL, &method, &condition), -1);
    assert_int_equal(coil_solve(a, 1, 1, b, x, &misfit, NULL, &condition), -1);
    assert_int_equal(coil_solve(a, 1, 1, b, x, &misfit, &method, NULL), -1);
    check_close(x[0], -999, 0, "x");
    check_close(misfit, -999, 0, "misfit");
}

/* ---- random cases for tests/ref/solver.py ---------------------------- */

#define NCASES 30
#define MAXDIM 8

/* Shapes: square 1..5 twice, ten tall and their ten transposes (wide). */
static const size_t case_shapes[NCASES][2] = {
    {1, 1}, {2, 2}, {3, 3}, {4, 4}, {5, 5}, {1, 1}, {2, 2}, {3, 3}, {4, 4}, {5, 5},
    {2, 1}, {3, 1}, {3, 2}, {4, 2}, {4, 3}, {5, 2}, {5, 4}, {6, 3}, {7, 5}, {8, 4},
    {1, 2}, {1, 3}, {2, 3}, {2, 4}, {3, 4}, {2, 5}, {4, 5}, {3, 6}, {5, 7}, {4, 8},
};

/* A random sign times a magnitude spread evenly in log between lo and hi. */
static double log_uniform(gsl_rng *rng, double lo, double hi) {
    double sign = gsl_rng_uniform(rng) < 0.5 ? -1 : 1;
    return sign * lo * pow(hi / lo, gsl_rng_uniform(rng));
}

static const char *method_name(coil_method m) {
    return m == COIL_EXACT ? "exact" : m == COIL_LEAST_SQUARES ? "least_squares" : "min_norm";
}

static json_t *json_reals(const double *v, size_t n) {
    json_t *array = json_array();
    for (size_t i = 0; i < n; i++) json_array_append_new(array, json_real(v[i]));
    return array;
}

/* mkdir -p: every folder along path. */
static void make_folders(const char *path) {
    char buf[512];
    if (strlen(path) >= sizeof buf) fail_msg("folder name too long: %s", path);
    strcpy(buf, path);
    for (char *p = buf + 1;; p++) {
        if (*p != '/' && *p != '\0') continue;
        char c = *p;
        *p = '\0';
        if (mkdir(buf, 0777) != 0 && errno != EEXIST) fail_msg("cannot create %s", buf);
        if (c == '\0') break;
        *p = c;
    }
}

/* One case: solves it and returns its JSON line (the caller frees it). */
static char *random_case(gsl_rng *rng, size_t nrows, size_t ncols) {
    double a[MAXDIM * MAXDIM], b[MAXDIM];
    for (size_t i = 0; i < nrows * ncols; i++) a[i] = log_uniform(rng, 1e-6, 1e-4);
    for (size_t i = 0; i < nrows; i++) b[i] = log_uniform(rng, 1e-8, 1e-4);
    solved s = solve(a, nrows, ncols, b);
    if (s.rc != 0) fail_msg("%zu x %zu case refused (condition %g)", nrows, ncols, s.condition);
    coil_method want = nrows == ncols ? COIL_EXACT
                       : nrows > ncols ? COIL_LEAST_SQUARES : COIL_MIN_NORM;
    assert_int_equal(s.method, want);
    json_t *o = json_pack("{s:o, s:I, s:I, s:o, s:o, s:f, s:s, s:f}", "a",
                          json_reals(a, nrows * ncols), "nrows", (json_int_t)nrows, "ncols",
                          (json_int_t)ncols, "b", json_reals(b, nrows), "x",
                          json_reals(s.x, ncols), "misfit", s.misfit, "method",
                          method_name(s.method), "condition", s.condition);
    assert_non_null(o);
    char *line = json_dumps(o, JSON_COMPACT);
    json_decref(o);
    assert_non_null(line);
    return line;
}

static void test_random_cases_solved_and_written_for_numpy(void **state) {
    (void)state;
    const char *folder = getenv("B") && *getenv("B") ? getenv("B") : "build";
    char dir[512], path[600], tmp[620];
    snprintf(dir, sizeof dir, "%s/tests", folder);
    snprintf(path, sizeof path, "%s/coil_cases.jsonl", dir);
    snprintf(tmp, sizeof tmp, "%s.part", path);
    make_folders(dir);
    FILE *f = fopen(tmp, "w");
    if (!f) fail_msg("cannot write %s", tmp);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 2718);
    for (size_t k = 0; k < NCASES; k++) {
        char *line = random_case(rng, case_shapes[k][0], case_shapes[k][1]);
        fprintf(f, "%s\n", line);
        free(line);
    }
    gsl_rng_free(rng);
    if (fclose(f) != 0) fail_msg("cannot write %s", tmp);
    /* Whole or not at all: the reference check never reads half a file. */
    if (rename(tmp, path) != 0) fail_msg("cannot rename %s to %s", tmp, path);
}

int main(void) {
    gsl_set_error_handler(count_gsl_error);
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_square_system_solved_exactly),
        cmocka_unit_test(test_rig_scaled_square_system_solved_exactly),
        cmocka_unit_test(test_tall_system_solved_by_least_squares),
        cmocka_unit_test(test_inconsistent_tall_system_has_its_residual_as_misfit),
        cmocka_unit_test(test_consistent_tall_system_has_zero_misfit),
        cmocka_unit_test(test_wide_system_solved_by_minimum_norm),
        cmocka_unit_test(test_wide_two_by_three_solution_is_orthogonal_to_the_null_space),
        cmocka_unit_test(test_square_with_equal_rows_refused_as_singular),
        cmocka_unit_test(test_zero_coil_refused_as_singular),
        cmocka_unit_test(test_rows_differing_by_1e_12_refused_as_ill_conditioned),
        cmocka_unit_test(test_rows_differing_by_1e_8_accepted_below_the_limit),
        cmocka_unit_test(test_tall_with_equal_columns_refused_as_singular),
        cmocka_unit_test(test_wide_with_proportional_rows_refused_as_singular),
        cmocka_unit_test(test_zero_coils_refused),
        cmocka_unit_test(test_zero_places_refused),
        cmocka_unit_test(test_sizes_past_memory_refused_before_reading_a),
        cmocka_unit_test(test_not_a_number_in_a_refused),
        cmocka_unit_test(test_infinite_target_refused),
        cmocka_unit_test(test_currents_beyond_doubles_refused),
        cmocka_unit_test(test_null_pointer_refused),
        cmocka_unit_test(test_random_cases_solved_and_written_for_numpy),
    };
    return cmocka_run_group_tests_name("coil solver", tests, NULL, NULL);
}
