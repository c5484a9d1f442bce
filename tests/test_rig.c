/* test_rig: coils given by their geometry, as cmocka tests: the field per
 * current of a finite solenoid and of a Helmholtz pair against the handbook
 * formulas and their limits, and rig files whose coils are given that way.
 * Not for the rest of the rig reader (places, lines, inputs) nor for how a
 * coil's field is used in a shot (compile). */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "plan.h"

/* mu0 in N/A^2. source: CODATA 2018 (value from memory) */
#define MU0_CODATA_2018 1.25663706212e-6

static void check_close(double got, double want, double rel, const char *what) {
    if (!(fabs(got - want) <= rel * fabs(want)))
        fail_msg("%s: got %.17g, want %.17g", what, got, want);
}

/* ---- the formulas ----------------------------------------------------- */

/* Field at the centre of a finite solenoid per ampere:
 * B / I = mu0 N / sqrt(L^2 + 4 R^2).
 * source: electromagnetism handbook formula (value from memory) */
static double handbook_solenoid(double turns, double radius, double length) {
    double half_diagonal = sqrt((length / 2) * (length / 2) + radius * radius);
    /* mu0 N / (2 * half diagonal): the same formula, written from the
     * cosines of the half angle the coil subtends at its centre. */
    return MU0_CODATA_2018 * turns / (2 * half_diagonal);
}

/* Field at the centre of a Helmholtz pair (N turns per coil) per ampere:
 * B / I = (4/5)^(3/2) mu0 N / R, and (4/5)^(3/2) = 8 / (5 sqrt 5).
 * source: electromagnetism handbook formula (value from memory) */
static double handbook_helmholtz(double turns, double radius) {
    return 8.0 / (5.0 * sqrt(5.0)) * MU0_CODATA_2018 * turns / radius;
}

static void test_solenoid_matches_handbook_formula(void **state) {
    (void)state;
    const struct { int turns; double radius, length; } c[] = {
        {200, 0.02, 0.10}, {1, 0.05, 0.05}, {1500, 0.0125, 0.3}, {37, 0.4, 0.01},
        {10000, 1e-3, 2e-2},
    };
    for (size_t i = 0; i < sizeof c / sizeof c[0]; i++) {
        char what[64];
        snprintf(what, sizeof what, "solenoid %d turns, R %g m, L %g m", c[i].turns,
                 c[i].radius, c[i].length);
        /* source: electromagnetism handbook formula (value from memory) */
        check_close(rig_solenoid_field_per_current(c[i].turns, c[i].radius, c[i].length),
                    handbook_solenoid(c[i].turns, c[i].radius, c[i].length), 1e-13, what);
    }
}

static void test_solenoid_of_200_turns_gives_about_2_3_mT_per_ampere(void **state) {
    (void)state;
    /* 200 turns, R = 2 cm, L = 10 cm: sqrt(0.01 + 0.0016) = 0.107703... m,
     * mu0 * 200 / 0.1077032961 = 2.33353...e-3 T/A.
     * source: electromagnetism handbook formula (value from memory) */
    double want = 1.25663706212e-6 * 200 / 0.10770329614269007;
    check_close(rig_solenoid_field_per_current(200, 0.02, 0.10), want, 1e-12, "200 turns");
    check_close(want, 2.3335e-3, 1e-4, "the arithmetic above");
}

static void test_long_solenoid_tends_to_mu0_n_over_length(void **state) {
    (void)state;
    /* R / L = 1e-4: sqrt(L^2 + 4R^2) = L (1 + 2 (R/L)^2 + ...), so the field
     * is mu0 N / L to 2e-8 relative.
     * source: electromagnetism handbook formula (value from memory) */
    double n = 5000, radius = 1e-4, length = 1.0;
    double b = rig_solenoid_field_per_current((int)n, radius, length);
    check_close(b, MU0_CODATA_2018 * n / length, 3e-8, "long solenoid");
    assert_true(b < MU0_CODATA_2018 * n / length);   /* from below */
}

static void test_short_solenoid_tends_to_flat_coil_mu0_n_over_2r(void **state) {
    (void)state;
    /* L / R = 1e-4: the flat coil's field at its centre, mu0 N / 2R, to
     * (L/2R)^2 / 2 = 1.25e-9 relative.
     * source: electromagnetism handbook formula (value from memory) */
    double n = 50, radius = 0.1, length = 1e-5;
    double b = rig_solenoid_field_per_current((int)n, radius, length);
    check_close(b, MU0_CODATA_2018 * n / (2 * radius), 2e-9, "flat coil");
    assert_true(b < MU0_CODATA_2018 * n / (2 * radius));
    /* Length zero is exactly the flat coil. */
    check_close(rig_solenoid_field_per_current(50, 0.1, 0.0), MU0_CODATA_2018 * 50 / 0.2,
                1e-15, "zero length");
}

static void test_helmholtz_matches_handbook_formula(void **state) {
    (void)state;
    const struct { int turns; double radius; } c[] = {
        {1, 1.0}, {100, 0.1}, {25, 0.035}, {320, 0.75},
    };
    for (size_t i = 0; i < sizeof c / sizeof c[0]; i++) {
        char what[64];
        snprintf(what, sizeof what, "Helmholtz %d turns, R %g m", c[i].turns, c[i].radius);
        /* source: electromagnetism handbook formula (value from memory) */
        check_close(rig_helmholtz_field_per_current(c[i].turns, c[i].radius),
                    handbook_helmholtz(c[i].turns, c[i].radius), 1e-14, what);
    }
}

static void test_helmholtz_of_one_turn_per_coil_and_one_metre(void **state) {
    (void)state;
    /* (4/5)^(3/2) = 0.71554175279993..., times mu0: 8.9917...e-7 T/A.
     * source: electromagnetism handbook formula (value from memory) */
    check_close(rig_helmholtz_field_per_current(1, 1.0), 0.71554175279993272 * 1.25663706212e-6,
                1e-14, "one turn, one metre");
}

static void test_helmholtz_is_0_716_of_two_flat_coils_alone(void **state) {
    (void)state;
    /* Each coil alone gives mu0 N / 2R at its own centre; at the pair's
     * centre, R/2 from each, the two together give (4/5)^(3/2) mu0 N / R,
     * i.e. 0.7155 of what the two flat coils would give at their centres.
     * source: electromagnetism handbook formula (value from memory) */
    double pair = rig_helmholtz_field_per_current(80, 0.05);
    double two_flat = 2 * rig_solenoid_field_per_current(80, 0.05, 0.0);
    check_close(pair / two_flat, 0.7155417527999327, 1e-14, "ratio");
}

/* ---- rig files -------------------------------------------------------- */

typedef struct {
    diag_list d;
    arena *a;
    char dir[64];
    char path[128];
    plan_rig rig;
} fixture;

static int setup(void **state) {
    fixture *f = calloc(1, sizeof *f);
    if (!f) return -1;
    diag_init(&f->d);
    f->a = arena_new();
    snprintf(f->dir, sizeof f->dir, "/tmp/test_rig.XXXXXX");
    if (!f->a || !mkdtemp(f->dir)) return -1;
    snprintf(f->path, sizeof f->path, "%s/rig.yaml", f->dir);
    *state = f;
    return 0;
}

static int teardown(void **state) {
    fixture *f = *state;
    unlink(f->path);
    rmdir(f->dir);
    arena_free(f->a);
    diag_free(&f->d);
    free(f);
    return 0;
}

#define RIG_HEAD "version: 1\nname: geometry-bench\ndriver: sim\ncoils:\n"
/* A coil's required keys; geometry or field_per_current follow. */
#define COIL_LIMITS "output: 0, amps_per_volt: 1 A/V, max_current: 2 A, max_slew: 10 A/s, " \
                    "resistance: 2 ohm, inductance: 5 mH, compliance: 20 V"

/* Writes RIG_HEAD + coils into the fixture's file and reads it. */
static int read_rig(fixture *f, const char *coils) {
    FILE *fp = fopen(f->path, "w");
    assert_non_null(fp);
    fputs(RIG_HEAD, fp);
    fputs(coils, fp);
    fclose(fp);
    return rig_read_file(f->a, f->path, &f->rig, &f->d);
}

static void read_rig_ok(fixture *f, const char *coils) {
    if (read_rig(f, coils) != 0 || f->d.errors) {
        const char *m = f->d.n ? f->d.items[0].message : "(no diagnostic)";
        fail_msg("rig refused: %s", m);
    }
}

static const rig_coil *coil(const fixture *f, const char *name) {
    int i = rig_find_coil(&f->rig, name, strlen(name));
    if (i < 0) fail_msg("no coil %s", name);
    return &f->rig.coils[i];
}

static void test_rig_coil_given_by_solenoid_geometry_gets_its_field(void **state) {
    fixture *f = *state;
    read_rig_ok(f, "  prepol: {" COIL_LIMITS ",\n"
                   "           turns: 400, radius: 15 mm, length: 12 cm}\n");
    const rig_coil *c = coil(f, "prepol");
    assert_true(c->from_geometry);
    assert_true(c->has_field_per_current);
    assert_false(c->helmholtz);
    assert_int_equal(c->turns, 400);
    check_close(c->radius, 0.015, 1e-15, "radius");
    check_close(c->length, 0.12, 1e-15, "length");
    /* source: electromagnetism handbook formula (value from memory) */
    check_close(c->field_per_current, handbook_solenoid(400, 0.015, 0.12), 1e-12,
                "field per current");
    /* The computed value is reported as a note on the coil. */
    size_t notes = 0;
    for (size_t i = 0; i < f->d.n; i++)
        if (f->d.items[i].severity == DIAG_NOTE && strstr(f->d.items[i].message, "prepol"))
            notes++;
    assert_int_equal(notes, 1);
}

static void test_rig_helmholtz_coil_gets_its_field(void **state) {
    fixture *f = *state;
    read_rig_ok(f, "  tip: {" COIL_LIMITS ", axis: x,\n"
                   "        turns: 60, radius: 4 cm, helmholtz: true}\n");
    const rig_coil *c = coil(f, "tip");
    assert_true(c->from_geometry);
    assert_true(c->has_field_per_current);
    assert_true(c->helmholtz);
    assert_int_equal(c->turns, 60);
    assert_int_equal(c->axis, AXIS_X);
    /* source: electromagnetism handbook formula (value from memory) */
    check_close(c->field_per_current, handbook_helmholtz(60, 0.04), 1e-12,
                "field per current");
}

static void test_rig_coil_with_field_per_current_is_not_from_geometry(void **state) {
    fixture *f = *state;
    read_rig_ok(f, "  main: {" COIL_LIMITS ", field_per_current: 4.5 mT/A}\n");
    const rig_coil *c = coil(f, "main");
    assert_false(c->from_geometry);
    assert_true(c->has_field_per_current);
    check_close(c->field_per_current, 4.5e-3, 1e-15, "given");
}

static void test_rig_refuses_both_field_per_current_and_geometry(void **state) {
    fixture *f = *state;
    assert_int_equal(read_rig(f, "  main: {" COIL_LIMITS ", field_per_current: 4.5 mT/A,\n"
                                 "         turns: 10, radius: 1 cm, length: 5 cm}\n"),
                     -1);
    assert_true(f->d.errors > 0);
}

static void test_rig_refuses_solenoid_without_length(void **state) {
    fixture *f = *state;
    assert_int_equal(read_rig(f, "  main: {" COIL_LIMITS ", turns: 10, radius: 1 cm}\n"), -1);
    assert_true(f->d.errors > 0);
}

static void test_rig_refuses_geometry_without_turns(void **state) {
    fixture *f = *state;
    assert_int_equal(read_rig(f, "  main: {" COIL_LIMITS ", radius: 1 cm, helmholtz: true}\n"),
                     -1);
    assert_true(f->d.errors > 0);
}

static void test_rig_refuses_zero_radius(void **state) {
    fixture *f = *state;
    assert_int_equal(read_rig(f, "  main: {" COIL_LIMITS ", turns: 10, radius: 0 m,\n"
                                 "         helmholtz: true}\n"),
                     -1);
    assert_true(f->d.errors > 0);
}

static void test_rig_refuses_a_mains_of_zero(void **state) {
    fixture *f = *state;
    assert_int_equal(read_rig(f, "  main: {" COIL_LIMITS ", field_per_current: 1 mT/A}\n"
                                 "environment: {mains: 0 Hz, mains_field: 1 pT}\n"),
                     -1);
    assert_int_equal(f->d.errors, 1);
    assert_string_equal(f->d.items[0].message, "'mains' must be greater than zero");
    assert_int_equal(f->d.items[0].line, 6);
    assert_int_equal(f->d.items[0].col, 22);
}

static void test_rig_refuses_radius_that_is_not_a_length(void **state) {
    fixture *f = *state;
    assert_int_equal(read_rig(f, "  main: {" COIL_LIMITS ", turns: 10, radius: 1 mT,\n"
                                 "         length: 5 cm}\n"),
                     -1);
    assert_true(f->d.errors > 0);
}

int main(void) {
    const struct CMUnitTest formulas[] = {
        cmocka_unit_test(test_solenoid_matches_handbook_formula),
        cmocka_unit_test(test_solenoid_of_200_turns_gives_about_2_3_mT_per_ampere),
        cmocka_unit_test(test_long_solenoid_tends_to_mu0_n_over_length),
        cmocka_unit_test(test_short_solenoid_tends_to_flat_coil_mu0_n_over_2r),
        cmocka_unit_test(test_helmholtz_matches_handbook_formula),
        cmocka_unit_test(test_helmholtz_of_one_turn_per_coil_and_one_metre),
        cmocka_unit_test(test_helmholtz_is_0_716_of_two_flat_coils_alone),
    };
    const struct CMUnitTest files[] = {
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
        T(test_rig_coil_given_by_solenoid_geometry_gets_its_field),
        T(test_rig_helmholtz_coil_gets_its_field),
        T(test_rig_coil_with_field_per_current_is_not_from_geometry),
        T(test_rig_refuses_both_field_per_current_and_geometry),
        T(test_rig_refuses_solenoid_without_length),
        T(test_rig_refuses_geometry_without_turns),
        T(test_rig_refuses_zero_radius),
        T(test_rig_refuses_a_mains_of_zero),
        T(test_rig_refuses_radius_that_is_not_a_length),
#undef T
    };
    int failed = cmocka_run_group_tests_name("rig formulas", formulas, NULL, NULL);
    failed += cmocka_run_group_tests_name("rig files", files, NULL, NULL);
    return failed;
}
