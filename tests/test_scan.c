/* test_scan: the scan module's contract, as cmocka tests: points as written
 * (grid, together), the order of execution (as-written, reversed, shuffled
 * against GSL itself), warmup, averages and reference shots, range ends.
 * Not for reading every key of a plan (the plan reader's tests) nor for
 * timing or physics (compile). Plans are read from strings; the name
 * tests/plans/scan-test.yaml only decides where `rig: bench.yaml` is found. */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plan.h"
#include "scan.h"

#define PLAN_FILE "tests/plans/scan-test.yaml"

/* What every test plan starts and ends with; the body goes between. */
#define PLAN_HEAD "version: 1\ntitle: scan test\nrig: bench.yaml\n"
#define PLAN_TAIL "shot:\n  - wait: {for: 1 s}\n"

typedef struct {
    diag_list d;
    plan *p;
    scan *s;
} fixture;

static int setup(void **state) {
    fixture *f = calloc(1, sizeof *f);
    if (!f) return -1;
    diag_init(&f->d);
    *state = f;
    return 0;
}

static int teardown(void **state) {
    fixture *f = *state;
    scan_free(f->s);
    plan_free(f->p);
    diag_free(&f->d);
    free(f);
    return 0;
}

static void fail_with_diags(const diag_list *d, const char *what) {
    char buf[2048] = "";
    size_t used = 0;
    for (size_t i = 0; i < d->n && used < sizeof buf - 1; i++) {
        int w = snprintf(buf + used, sizeof buf - used, "\n  %s:%d:%d: %s", d->items[i].file,
                         d->items[i].line, d->items[i].col, d->items[i].message);
        if (w < 0) break;
        used += (size_t)w;
    }
    fail_msg("%s%s", what, buf);
}

/* Reads PLAN_HEAD body PLAN_TAIL into f->p without expanding it. */
static plan *read_plan(fixture *f, const char *body) {
    char text[4096];
    int n = snprintf(text, sizeof text, "%s%s%s", PLAN_HEAD, body, PLAN_TAIL);
    assert_true(n > 0 && (size_t)n < sizeof text);
    return plan_read_bytes(PLAN_FILE, text, (size_t)n, &f->d);
}

/* Reads and expands a plan that must be valid. */
static scan *expand(fixture *f, const char *body) {
    f->p = read_plan(f, body);
    if (!f->p) fail_with_diags(&f->d, "plan refused:");
    f->s = scan_expand(f->p, &f->d);
    if (!f->s) fail_with_diags(&f->d, "scan refused:");
    assert_int_equal(f->d.errors, 0);
    return f->s;
}

/* The value of variable var (0-based, in vary's order) at point (from 1). */
static double value_at(const scan *s, size_t point, size_t var) {
    assert_true(point >= 1 && point <= s->npoints);
    assert_true(var < s->nvars);
    return s->values[(point - 1) * s->nvars + var];
}

static void check_close(double got, double want, double rel, const char *what) {
    if (!(fabs(got - want) <= rel * fabs(want)))
        fail_msg("%s: got %.17g, want %.17g", what, got, want);
}

/* The points run, in order, ignoring warmup and reference shots and taking
 * each point once (at its first average). out has s->npoints entries. */
static void executed_points(const scan *s, uint32_t *out) {
    size_t k = 0;
    for (size_t i = 0; i < s->nshots; i++)
        if (s->shots[i].kind == SHOT_SCAN && s->shots[i].average == 1) {
            assert_true(k < s->npoints);
            out[k++] = s->shots[i].point;
        }
    assert_int_equal(k, s->npoints);
}

/* ---- points as written ------------------------------------------------ */

static void test_grid_varies_first_key_slowest(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  t_wait: [1 ms, 2 ms, 3 ms]\n"
                        "  b_relax: [10 uT, 20 uT]\n");
    assert_int_equal(s->npoints, 6);
    assert_int_equal(s->nvars, 2);
    const double want[6][2] = {{1e-3, 10e-6}, {1e-3, 20e-6}, {2e-3, 10e-6},
                               {2e-3, 20e-6}, {3e-3, 10e-6}, {3e-3, 20e-6}};
    for (size_t k = 1; k <= 6; k++) {
        check_close(value_at(s, k, 0), want[k - 1][0], 1e-15, "t_wait");
        check_close(value_at(s, k, 1), want[k - 1][1], 1e-15, "b_relax");
    }
}

static void test_grid_of_three_keys_varies_last_key_fastest(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  x: [1, 2]\n"
                        "  y: [10, 20, 30]\n"
                        "  z: [100, 200]\n");
    assert_int_equal(s->npoints, 12);
    /* Point k (from 1) is x[i], y[j], z[l] with k - 1 = (i*3 + j)*2 + l. */
    for (size_t i = 0; i < 2; i++)
        for (size_t j = 0; j < 3; j++)
            for (size_t l = 0; l < 2; l++) {
                size_t k = (i * 3 + j) * 2 + l + 1;
                assert_true(value_at(s, k, 0) == (double)(i + 1));
                assert_true(value_at(s, k, 1) == (double)(10 * (j + 1)));
                assert_true(value_at(s, k, 2) == (double)(100 * (l + 1)));
            }
}

static void test_together_walks_lists_side_by_side(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "combine: together\n"
                        "vary:\n"
                        "  t_wait: [1 ms, 2 ms, 3 ms, 4 ms]\n"
                        "  b_relax: {from: 10 uT, to: 40 uT, steps: 4}\n");
    assert_int_equal(s->npoints, 4);
    assert_int_equal(s->nshots, 4);
    for (size_t k = 1; k <= 4; k++) {
        check_close(value_at(s, k, 0), 1e-3 * (double)k, 1e-15, "t_wait");
        check_close(value_at(s, k, 1), 10e-6 * (double)k, 1e-14, "b_relax");
    }
}

static void test_together_refuses_lists_of_unequal_length(void **state) {
    fixture *f = *state;
    f->p = read_plan(f, "combine: together\n"
                        "vary:\n"
                        "  t_wait: [1 ms, 2 ms, 3 ms]\n"
                        "  b_relax: [10 uT, 20 uT]\n");
    /* Refused by the reader or, failing that, by the expansion. */
    if (f->p) f->s = scan_expand(f->p, &f->d);
    assert_null(f->s);
    assert_true(f->d.errors > 0);
}

static void test_values_mapping_is_the_same_as_a_list(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  t_wait: {values: [5 ms, 1 ms, 3 ms]}\n");
    assert_int_equal(s->npoints, 3);
    check_close(value_at(s, 1, 0), 5e-3, 1e-15, "point 1");
    check_close(value_at(s, 2, 0), 1e-3, 1e-15, "point 2");
    check_close(value_at(s, 3, 0), 3e-3, 1e-15, "point 3");
}

static void test_list_of_one_value_gives_one_point(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  b_relax: [7 uT]\n"
                        "averages: 2\n");
    assert_int_equal(s->npoints, 1);
    assert_int_equal(s->nshots, 2);
    check_close(value_at(s, 1, 0), 7e-6, 1e-15, "b_relax");
}

static void test_plan_with_no_vary_has_one_point(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "averages: 3\n"
                        "warmup: 1\n");
    assert_int_equal(s->nvars, 0);
    assert_int_equal(s->npoints, 1);
    assert_int_equal(s->nshots, 4);
    for (size_t i = 0; i < s->nshots; i++) assert_int_equal(s->shots[i].point, 1);
}

/* ---- order of execution ----------------------------------------------- */

static void test_as_written_order_is_the_default(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  x: [1, 2, 3, 4, 5]\n");
    assert_int_equal(s->nshots, 5);
    for (size_t i = 0; i < 5; i++) assert_int_equal(s->shots[i].point, i + 1);
}

static void test_as_written_order_runs_points_as_numbered(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  x: [1, 2, 3]\n"
                        "  y: [1, 2]\n"
                        "order: as-written\n");
    uint32_t run[6];
    executed_points(s, run);
    for (size_t i = 0; i < 6; i++) assert_int_equal(run[i], i + 1);
}

static void test_reversed_order_runs_last_point_first(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  x: [1, 2, 3]\n"
                        "  y: [1, 2]\n"
                        "order: reversed\n");
    uint32_t run[6];
    executed_points(s, run);
    for (size_t i = 0; i < 6; i++) assert_int_equal(run[i], 6 - i);
    /* The order changes only execution, not the numbering of points. */
    assert_true(value_at(s, 1, 0) == 1 && value_at(s, 1, 1) == 1);
    assert_true(value_at(s, 6, 0) == 3 && value_at(s, 6, 1) == 2);
}

/* The order a plan with `order: shuffled` and this seed must run its npoints
 * points in, computed with GSL directly. */
static void gsl_order(unsigned long seed, size_t npoints, uint32_t *out) {
    for (size_t i = 0; i < npoints; i++) out[i] = (uint32_t)(i + 1);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    assert_non_null(rng);
    gsl_rng_set(rng, seed);
    gsl_ran_shuffle(rng, out, npoints, sizeof *out);
    gsl_rng_free(rng);
}

static void test_shuffled_order_equals_gsl_shuffle_of_point_numbers(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  x: [1, 2, 3, 4]\n"
                        "  y: {from: 1 ms, to: 13 ms, steps: 13}\n"
                        "order: shuffled\n"
                        "seed: 11\n");
    assert_int_equal(s->npoints, 52);
    uint32_t want[52], run[52];
    /* source: GSL (reference library), gsl_ran_shuffle with mt19937 */
    gsl_order(11, 52, want);
    executed_points(s, run);
    for (size_t i = 0; i < 52; i++)
        if (run[i] != want[i])
            fail_msg("executed point %zu is %u, GSL says %u", i + 1, run[i], want[i]);
}

static void test_shuffled_order_with_seed_zero_equals_gsl(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  x: {from: 1, to: 1000, steps: 1000}\n"
                        "order: shuffled\n"
                        "seed: 0\n");
    uint32_t *want = malloc(1000 * sizeof *want), *run = malloc(1000 * sizeof *run);
    assert_non_null(want);
    assert_non_null(run);
    /* source: GSL (reference library), gsl_ran_shuffle with mt19937 */
    gsl_order(0, 1000, want);
    executed_points(s, run);
    int same = memcmp(want, run, 1000 * sizeof *run) == 0;
    free(want);
    free(run);
    assert_true(same);
}

static void test_shuffled_order_is_reproducible_and_a_permutation(void **state) {
    fixture *f = *state;
    const char *body = "vary:\n"
                       "  x: [1, 2, 3, 4, 5, 6, 7, 8, 9, 10]\n"
                       "order: shuffled\n"
                       "seed: 123456\n"
                       "averages: 2\n";
    scan *s = expand(f, body);
    /* A second, independent reading of the same text. */
    diag_list d2;
    diag_init(&d2);
    char text[1024];
    int n = snprintf(text, sizeof text, "%s%s%s", PLAN_HEAD, body, PLAN_TAIL);
    plan *p2 = plan_read_bytes(PLAN_FILE, text, (size_t)n, &d2);
    scan *s2 = p2 ? scan_expand(p2, &d2) : NULL;
    /* Field by field: the struct's padding bytes are not part of the order. */
    int equal = s2 && s2->nshots == s->nshots;
    for (size_t i = 0; equal && i < s->nshots; i++)
        equal = s2->shots[i].shot == s->shots[i].shot &&
                s2->shots[i].point == s->shots[i].point &&
                s2->shots[i].average == s->shots[i].average &&
                s2->shots[i].kind == s->shots[i].kind;
    scan_free(s2);
    plan_free(p2);
    diag_free(&d2);
    assert_true(equal);

    uint32_t run[10];
    int seen[11] = {0};
    executed_points(s, run);
    for (size_t i = 0; i < 10; i++) {
        assert_true(run[i] >= 1 && run[i] <= 10);
        seen[run[i]]++;
    }
    for (size_t k = 1; k <= 10; k++) assert_int_equal(seen[k], 1);
}

static void test_shuffled_orders_differ_between_seeds(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  x: {from: 1, to: 20, steps: 20}\n"
                        "order: shuffled\n"
                        "seed: 1\n");
    uint32_t run[20], other[20];
    executed_points(s, run);
    /* source: GSL (reference library), gsl_ran_shuffle with mt19937 */
    gsl_order(2, 20, other);
    assert_true(memcmp(run, other, sizeof run) != 0);
}

static void test_shuffled_order_needs_a_seed(void **state) {
    fixture *f = *state;
    f->p = read_plan(f, "vary:\n"
                        "  x: [1, 2, 3]\n"
                        "order: shuffled\n");
    assert_null(f->p);
    assert_true(f->d.errors > 0);
}

/* ---- shots ------------------------------------------------------------ */

static void test_shot_count_is_warmup_plus_points_times_averages_plus_references(
    void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  x: [1, 2, 3, 4, 5, 6, 7]\n"
                        "  y: [1, 2]\n"
                        "averages: 3\n"
                        "warmup: 2\n"
                        "reference: {every: 4, with: {x: 9}}\n");
    /* 14 points: references after executed points 4, 8 and 12. */
    assert_int_equal(s->npoints, 14);
    assert_int_equal(s->nshots, 2 + 14 * 3 + 3);
    size_t kinds[3] = {0};
    for (size_t i = 0; i < s->nshots; i++) kinds[s->shots[i].kind]++;
    assert_int_equal(kinds[SHOT_WARMUP], 2);
    assert_int_equal(kinds[SHOT_SCAN], 42);
    assert_int_equal(kinds[SHOT_REFERENCE], 3);
}

static void test_shots_are_numbered_from_one_in_execution_order(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  x: [1, 2, 3, 4, 5]\n"
                        "order: shuffled\n"
                        "seed: 5\n"
                        "averages: 2\n"
                        "warmup: 3\n"
                        "reference: {every: 2}\n");
    for (size_t i = 0; i < s->nshots; i++) assert_int_equal(s->shots[i].shot, i + 1);
}

static void test_warmup_shots_report_point_one_and_count_their_averages(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  t_wait: [4 ms, 5 ms, 6 ms]\n"
                        "order: reversed\n"
                        "warmup: 3\n"
                        "averages: 2\n");
    assert_int_equal(s->nshots, 3 + 3 * 2);
    for (size_t i = 0; i < 3; i++) {
        const scan_shot *sh = &s->shots[i];
        assert_int_equal(sh->kind, SHOT_WARMUP);
        assert_int_equal(sh->point, 1);
        assert_int_equal(sh->average, i + 1);
        double v;
        scan_shot_values(s, sh, &v);
        check_close(v, 4e-3, 1e-15, "warmup value is point 1's as written");
    }
    /* The scan proper starts after the warmup with the reversed order. */
    assert_int_equal(s->shots[3].kind, SHOT_SCAN);
    assert_int_equal(s->shots[3].point, 3);
    assert_string_equal(scan_kind_name(SHOT_WARMUP), "warmup");
    assert_string_equal(scan_kind_name(SHOT_SCAN), "scan");
    assert_string_equal(scan_kind_name(SHOT_REFERENCE), "reference");
}

static void test_averages_of_a_point_are_consecutive(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  x: [1, 2, 3, 4]\n"
                        "order: shuffled\n"
                        "seed: 3\n"
                        "averages: 4\n");
    assert_int_equal(s->nshots, 16);
    for (size_t i = 0; i < 4; i++) {
        uint32_t point = s->shots[4 * i].point;
        for (size_t a = 0; a < 4; a++) {
            const scan_shot *sh = &s->shots[4 * i + a];
            assert_int_equal(sh->kind, SHOT_SCAN);
            assert_int_equal(sh->point, point);
            assert_int_equal(sh->average, a + 1);
        }
    }
}

/* Expected kinds and points of a plan of npoints points run as written with
 * averages 1 and a reference every `every` points. */
static void check_references(const scan *s, size_t npoints, size_t every) {
    size_t k = 0;
    for (size_t i = 1; i <= npoints; i++) {
        assert_true(k < s->nshots);
        assert_int_equal(s->shots[k].kind, SHOT_SCAN);
        assert_int_equal(s->shots[k].point, i);
        k++;
        if (i % every == 0) {
            assert_true(k < s->nshots);
            assert_int_equal(s->shots[k].kind, SHOT_REFERENCE);
            assert_int_equal(s->shots[k].point, i);
            assert_int_equal(s->shots[k].average, 1);
            k++;
        }
    }
    assert_int_equal(k, s->nshots);
}

static void test_reference_follows_last_point_when_it_falls_on_a_multiple(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  x: [1, 2, 3, 4, 5, 6]\n"
                        "reference: {every: 3, with: {x: 0}}\n");
    assert_int_equal(s->nshots, 8);
    assert_int_equal(s->shots[7].kind, SHOT_REFERENCE);
    check_references(s, 6, 3);
}

static void test_no_reference_after_last_point_off_a_multiple(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  x: [1, 2, 3, 4, 5, 6, 7]\n"
                        "reference: {every: 3, with: {x: 0}}\n");
    assert_int_equal(s->nshots, 9);
    assert_int_equal(s->shots[8].kind, SHOT_SCAN);
    check_references(s, 7, 3);
}

static void test_reference_follows_every_nth_executed_point_after_its_averages(
    void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  x: [1, 2, 3, 4, 5, 6, 7, 8]\n"
                        "order: shuffled\n"
                        "seed: 42\n"
                        "averages: 2\n"
                        "warmup: 1\n"
                        "reference: {every: 2, with: {x: 0}}\n");
    assert_int_equal(s->nshots, 1 + 8 * 2 + 4);
    uint32_t want[8];
    /* source: GSL (reference library), gsl_ran_shuffle with mt19937 */
    gsl_order(42, 8, want);
    size_t k = 1;   /* after the warmup shot */
    for (size_t i = 0; i < 8; i++) {
        for (uint32_t a = 1; a <= 2; a++, k++) {
            assert_int_equal(s->shots[k].kind, SHOT_SCAN);
            assert_int_equal(s->shots[k].point, want[i]);
            assert_int_equal(s->shots[k].average, a);
        }
        if ((i + 1) % 2 == 0) {
            assert_int_equal(s->shots[k].kind, SHOT_REFERENCE);
            assert_int_equal(s->shots[k].point, want[i]);
            assert_int_equal(s->shots[k].average, 1);
            k++;
        }
    }
    assert_int_equal(k, s->nshots);
}

static void test_reference_shot_puts_with_values_in_place(void **state) {
    fixture *f = *state;
    scan *s = expand(f, "vary:\n"
                        "  b_relax: [10 uT, 20 uT]\n"
                        "  t_relax: [10 ms, 40 ms]\n"
                        "  t_wait: [1 ms, 2 ms]\n"
                        "reference: {every: 1, with: {t_relax: 2.5 s, b_relax: 60 uT}}\n");
    assert_int_equal(s->nshots, 16);
    for (size_t i = 0; i < s->nshots; i += 2) {
        const scan_shot *run = &s->shots[i], *ref = &s->shots[i + 1];
        assert_int_equal(run->kind, SHOT_SCAN);
        assert_int_equal(ref->kind, SHOT_REFERENCE);
        assert_int_equal(ref->point, run->point);
        double own[3], with[3];
        scan_shot_values(s, run, own);
        scan_shot_values(s, ref, with);
        for (size_t v = 0; v < 3; v++) assert_true(own[v] == value_at(s, run->point, v));
        check_close(with[0], 60e-6, 1e-15, "b_relax from with");
        check_close(with[1], 2.5, 1e-15, "t_relax from with");
        assert_true(with[2] == own[2]);   /* not in with: the point's own value */
    }
}

/* ---- ranges ----------------------------------------------------------- */

/* The range as the scan module gives it, checked against the plan's ends. */
static void check_range(fixture *f, const char *body, double from, double to) {
    scan *s = expand(f, body);
    const plan_var *v = &f->p->vars[0];
    size_t n = v->n;
    assert_int_equal(s->npoints, n);
    /* The ends are the written values exactly, not from + (n-1) * step. */
    if (value_at(s, 1, 0) != v->from.value || value_at(s, n, 0) != v->to.value)
        fail_msg("ends %.17g, %.17g; written %.17g, %.17g", value_at(s, 1, 0),
                 value_at(s, n, 0), v->from.value, v->to.value);
    check_close(v->from.value, from, 1e-15, "from in SI");
    check_close(v->to.value, to, 1e-15, "to in SI");
    double *out = malloc(n * sizeof *out);
    assert_non_null(out);
    int rc = scan_var_values(f->p, v, out, &f->d);
    int same = rc == 0 && memcmp(out, s->values, n * sizeof *out) == 0;
    free(out);
    assert_true(same);
}

static void test_linear_range_ends_are_exact(void **state) {
    fixture *f = *state;
    check_range(f, "vary:\n  b: {from: 2 uT, to: 7 uT, steps: 7}\n", 2e-6, 7e-6);
    scan *s = f->s;
    for (size_t k = 1; k <= 7; k++)
        check_close(value_at(s, k, 0), 2e-6 + (double)(k - 1) * (5e-6 / 6), 1e-14,
                    "linear step");
}

static void test_linear_range_of_many_steps_ends_exactly(void **state) {
    fixture *f = *state;
    check_range(f, "vary:\n  b: {from: 2.5 uT, to: 7 uT, steps: 1000}\n", 2.5e-6, 7e-6);
    check_close(value_at(f->s, 500, 0), 2.5e-6 + 499 * (4.5e-6 / 999), 1e-13, "middle");
}

/* Stepping alone misses the end of the two ranges above, so they test that
 * the end is put in place rather than reached. */
static void test_ranges_above_miss_their_end_by_stepping(void **state) {
    (void)state;
    const struct { double from, to; int steps; } r[] = {{2e-6, 7e-6, 7}, {2.5e-6, 7e-6, 1000}};
    for (size_t i = 0; i < 2; i++) {
        double step = (r[i].to - r[i].from) / (r[i].steps - 1);
        assert_true(r[i].from + (r[i].steps - 1) * step != r[i].to);
    }
}

static void test_decreasing_linear_range_crosses_zero(void **state) {
    fixture *f = *state;
    check_range(f, "vary:\n  t: {from: 3 ms, to: -0.3 ms, steps: 12, spacing: linear}\n",
                3e-3, -3e-4);
    /* 3 ms down by 0.3 ms a step: point 11 is zero to rounding. */
    assert_true(fabs(value_at(f->s, 11, 0)) < 1e-18);
    check_close(value_at(f->s, 2, 0), 2.7e-3, 1e-13, "second step");
}

static void test_log_range_ends_are_exact(void **state) {
    fixture *f = *state;
    check_range(f, "vary:\n  b: {from: 3 uT, to: 70 uT, steps: 9, spacing: log}\n", 3e-6,
                70e-6);
    /* Geometric: a constant ratio, (70/3)^(1/8). */
    double ratio = pow(70.0 / 3.0, 1.0 / 8.0);
    for (size_t k = 2; k <= 9; k++)
        check_close(value_at(f->s, k, 0) / value_at(f->s, k - 1, 0), ratio, 1e-12, "ratio");
}

static void test_negative_log_range_keeps_its_sign(void **state) {
    fixture *f = *state;
    check_range(f, "vary:\n  b: {from: -100 nT, to: -1 nT, steps: 3, spacing: log}\n",
                -1e-7, -1e-9);
    check_close(value_at(f->s, 2, 0), -1e-8, 1e-13, "geometric middle");
}

static void test_range_of_one_step_is_refused(void **state) {
    fixture *f = *state;
    f->p = read_plan(f, "vary:\n  b: {from: 1 uT, to: 2 uT, steps: 1}\n");
    if (f->p) f->s = scan_expand(f->p, &f->d);
    assert_null(f->s);
    assert_true(f->d.errors > 0);
}

static void test_log_range_through_zero_is_refused(void **state) {
    fixture *f = *state;
    f->p = read_plan(f, "vary:\n  b: {from: -1 uT, to: 1 uT, steps: 3, spacing: log}\n");
    if (f->p) f->s = scan_expand(f->p, &f->d);
    assert_null(f->s);
    assert_true(f->d.errors > 0);
}

static void test_scan_var_values_refuses_a_log_range_through_zero(void **state) {
    fixture *f = *state;
    /* The reader refuses such a range first; the scan module must too. */
    plan_var v = {0};
    v.name = "b";
    v.loc = (plan_loc){PLAN_FILE, 3, 3};
    v.kind = SCAN_RANGE;
    v.n = 3;
    v.spacing = SPACING_LOG;
    v.from.value = 0;
    v.to.value = 1e-6;
    double out[3];
    assert_int_equal(scan_var_values(NULL, &v, out, &f->d), -1);
    assert_int_equal(f->d.errors, 1);
    v.spacing = SPACING_LINEAR;
    v.n = 1;
    assert_int_equal(scan_var_values(NULL, &v, out, &f->d), -1);
    assert_int_equal(f->d.errors, 2);
}

static void test_too_many_points_are_refused(void **state) {
    fixture *f = *state;
    f->p = read_plan(f, "vary:\n"
                        "  x: {from: 1, to: 2, steps: 100000}\n"
                        "  y: {from: 1, to: 2, steps: 10000}\n");
    assert_non_null(f->p);
    f->s = scan_expand(f->p, &f->d);
    assert_null(f->s);
    assert_int_equal(f->d.errors, 1);
    const diag *g = &f->d.items[f->d.n - 1];
    assert_string_equal(g->message, "the scan has 1000000000 points; at most 100000000 can "
                                    "be planned");
    assert_int_equal(g->line, f->p->vars[0].loc.line);
    assert_int_equal(g->col, f->p->vars[0].loc.col);
}

static void test_too_many_shots_are_refused(void **state) {
    fixture *f = *state;
    f->p = read_plan(f, "vary:\n"
                        "  x: {from: 1, to: 2, steps: 1000000}\n"
                        "averages: 1000\n");
    assert_non_null(f->p);
    f->s = scan_expand(f->p, &f->d);
    assert_null(f->s);
    assert_int_equal(f->d.errors, 1);
    const diag *g = &f->d.items[f->d.n - 1];
    assert_string_equal(g->message, "the plan has 1000000000 shots; at most 100000000 can be "
                                    "planned");
    assert_int_equal(g->line, 1);
    assert_int_equal(g->col, 1);
}

int main(void) {
    const struct CMUnitTest tests[] = {
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
        T(test_grid_varies_first_key_slowest),
        T(test_grid_of_three_keys_varies_last_key_fastest),
        T(test_together_walks_lists_side_by_side),
        T(test_together_refuses_lists_of_unequal_length),
        T(test_values_mapping_is_the_same_as_a_list),
        T(test_list_of_one_value_gives_one_point),
        T(test_plan_with_no_vary_has_one_point),
        T(test_as_written_order_is_the_default),
        T(test_as_written_order_runs_points_as_numbered),
        T(test_reversed_order_runs_last_point_first),
        T(test_shuffled_order_equals_gsl_shuffle_of_point_numbers),
        T(test_shuffled_order_with_seed_zero_equals_gsl),
        T(test_shuffled_order_is_reproducible_and_a_permutation),
        T(test_shuffled_orders_differ_between_seeds),
        T(test_shuffled_order_needs_a_seed),
        T(test_shot_count_is_warmup_plus_points_times_averages_plus_references),
        T(test_shots_are_numbered_from_one_in_execution_order),
        T(test_warmup_shots_report_point_one_and_count_their_averages),
        T(test_averages_of_a_point_are_consecutive),
        T(test_reference_follows_last_point_when_it_falls_on_a_multiple),
        T(test_no_reference_after_last_point_off_a_multiple),
        T(test_reference_follows_every_nth_executed_point_after_its_averages),
        T(test_reference_shot_puts_with_values_in_place),
        T(test_linear_range_ends_are_exact),
        T(test_linear_range_of_many_steps_ends_exactly),
        T(test_ranges_above_miss_their_end_by_stepping),
        T(test_decreasing_linear_range_crosses_zero),
        T(test_log_range_ends_are_exact),
        T(test_negative_log_range_keeps_its_sign),
        T(test_range_of_one_step_is_refused),
        T(test_log_range_through_zero_is_refused),
        T(test_scan_var_values_refuses_a_log_range_through_zero),
        T(test_too_many_points_are_refused),
        T(test_too_many_shots_are_refused),
#undef T
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
