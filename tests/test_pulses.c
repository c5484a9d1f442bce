/* test_pulses: the pulse calculator's contract, as cmocka tests: tip angles
 * against the rotation formula and the rotating-wave approximation, the
 * search for the flat length of an angle, its refusals, durations and the
 * current profile. Not for where pulses sit in a timeline (compile). */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <math.h>
#include <string.h>

#include <gsl/gsl_errno.h>

#include "compile.h"
#include "expr.h"

#define PI 3.14159265358979323846
#define DEG (PI / 180)

static void check_close(double got, double want, double tol, const char *what) {
    if (!(fabs(got - want) <= tol))
        fail_msg("%s: got %.17g, want %.17g (off by %.3g, tolerance %.3g)", what, got, want,
                 got - want, tol);
}

static double gamma_of(const char *token) {
    const nuc_info *n = nuc_find(token, strlen(token));
    if (n == NULL) fail_msg("nucleus %s is not in the table", token);
    return n->gamma;
}

/* A dc pulse along x in a static field along z. */
static pulse_shape dc_shape(double b0, double amplitude, double rise, double flat) {
    pulse_shape s = {{0, 0, b0}, {1, 0, 0}, amplitude, rise, flat, 0, 0, 0, 1};
    return s;
}

/* A resonant pulse along x in a static field along z, on resonance. */
static pulse_shape resonant_shape(double b0, double b1, double gamma, double phase,
                                  double length) {
    pulse_shape s = {{0, 0, b0}, {1, 0, 0}, b1, 0, length, 1, fabs(gamma) * b0 / (2 * PI),
                     phase, 1};
    return s;
}

static void test_gyromagnetic_ratios_match_codata_and_iupac(void **state) {
    (void)state;
    /* source: CODATA 2018, proton gyromagnetic ratio gamma_p =
     * 2.675 221 8744e8 rad s^-1 T^-1 (value from memory) */
    check_close(gamma_of("1H"), 2.6752218744e8, 1e-12 * 2.6752218744e8, "gamma 1H");
    /* source: IUPAC recommendations 2001, NMR nomenclature, Pure Appl. Chem.
     * 73, 1795: 13C 6.728284e7 rad s^-1 T^-1 (value from memory) */
    check_close(gamma_of("13C"), 6.728284e7, 1e-12 * 6.728284e7, "gamma 13C");
}

static void test_tip_without_static_field_is_gamma_b_t(void **state) {
    (void)state;
    const char *nuclei[] = {"1H", "13C"};
    const double fields[] = {1e-6, 1e-4, 1e-2};
    const double turns[] = {0.05, 1.0, 2.0, 3.0, 4.0}; /* |gamma| B t, rad */
    for (int n = 0; n < 2; n++)
        for (int f = 0; f < 3; f++)
            for (int k = 0; k < 5; k++) {
                double gamma = gamma_of(nuclei[n]);
                double t = turns[k] / (fabs(gamma) * fields[f]);
                pulse_shape s = dc_shape(0, fields[f], 0, t);
                /* source: rotation formula: with b0 = 0 the magnetization
                 * (along z) turns about the pulse axis by theta = |gamma| B t,
                 * seen from its start as 2 pi - theta past pi */
                double phi = fabs(gamma) * fields[f] * t;
                double want = phi <= PI ? phi : 2 * PI - phi;
                check_close(pulse_tip_angle(&s, gamma), want, 1e-12 * phi, nuclei[n]);
            }
}

static void test_pulse_along_the_static_field_does_not_tip(void **state) {
    (void)state;
    double gamma = gamma_of("1H");
    pulse_shape s = {{0, 3e-5, 4e-5}, {0, 0.6, 0.8}, 2e-4, 1e-5, 3e-5, 0, 0, 0, -1};
    /* source: rotation formula: a rotation about m leaves m where it is */
    check_close(pulse_tip_angle(&s, gamma), 0, 1e-12, "tip along b0");
}

/* cos(theta) = cos^2(alpha) + sin^2(alpha) cos(phi), written with half
 * angles: sin(theta/2) = sin(alpha) |sin(phi/2)|, well conditioned at both
 * ends. */
static void check_rodrigues(const char *token, const double b0_dir[3], const double axis[3]) {
    const double alphas[] = {5 * DEG, 20 * DEG, 45 * DEG, 70 * DEG, 88 * DEG};
    const double phis[] = {0.2, 1.0, 2.5, PI, 4.0, 6.0};
    double gamma = gamma_of(token), b0 = 1e-5;
    for (int a = 0; a < 5; a++)
        for (int p = 0; p < 6; p++) {
            double bp = b0 * tan(alphas[a]), total = hypot(b0, bp);
            pulse_shape s = {{0}, {axis[0], axis[1], axis[2]}, bp, 0,
                             phis[p] / (fabs(gamma) * total), 0, 0, 0, 1};
            for (int i = 0; i < 3; i++) s.b0[i] = b0 * b0_dir[i];
            /* source: rotation (Rodrigues) formula: cos(theta) = cos^2(alpha)
             * + sin^2(alpha) cos(phi), tan(alpha) = |B_p| / |b0|,
             * phi = |gamma| |b0 + B_p| t */
            double want = sin(alphas[a]) * fabs(sin(phis[p] / 2));
            double got = sin(pulse_tip_angle(&s, gamma) / 2);
            check_close(got, want, 1e-12, token);
        }
}

static void test_tip_in_perpendicular_static_field_follows_rodrigues(void **state) {
    (void)state;
    const double z[3] = {0, 0, 1}, x[3] = {1, 0, 0};
    const double tilted[3] = {0, 0.6, 0.8}, across[3] = {0, 0.8, -0.6};
    check_rodrigues("1H", z, x);
    check_rodrigues("13C", z, x);
    check_rodrigues("1H", tilted, across);
    check_rodrigues("13C", tilted, x);
}

static void test_resonant_pulse_on_resonance_tips_by_half_gamma_b1_t(void **state) {
    (void)state;
    const char *nuclei[] = {"1H", "13C"};
    const double ratios[] = {1e-2, 1e-3};            /* B1 / b0 */
    const double angles[] = {0.5, PI / 2, 2.5};      /* gamma B1 t / 2 */
    double b0 = 2e-5;
    for (int n = 0; n < 2; n++)
        for (int r = 0; r < 2; r++)
            for (int k = 0; k < 3; k++)
                for (double phase = 0; phase < 2; phase += 1.3) {
                    double gamma = gamma_of(nuclei[n]), b1 = ratios[r] * b0;
                    pulse_shape s = resonant_shape(b0, b1, gamma, phase,
                                                   2 * angles[k] / (fabs(gamma) * b1));
                    /* source: rotating-wave approximation (any NMR text, e.g.
                     * Levitt, Spin Dynamics): on resonance the co-rotating half
                     * of the linear field, B1 / 2, nutates m by |gamma| B1 t / 2.
                     * The counter-rotating half, B1 / 2 turning at 2 f in the
                     * rotating frame, moves m off that path by an angle of
                     * order B1 / (4 b0), and its Bloch-Siegert shift
                     * |gamma| B1^2 / (16 b0) tilts the nutation axis by
                     * B1 / (8 b0): tolerance B1 / b0 rad, shrinking with B1
                     * (the integration itself is good to about 1e-6 rad). */
                    check_close(pulse_tip_angle(&s, gamma), angles[k], ratios[r], nuclei[n]);
                }
}

/* Sets the angle and checks it round-trips through pulse_tip_angle. */
static void check_set_angle(pulse_shape s, double gamma, double angle, const char *what) {
    double reach = 0;
    if (pulse_set_angle(&s, gamma, angle, &reach) != 0)
        fail_msg("%s: %.6g deg refused, reach %.9g deg", what, angle / DEG, reach / DEG);
    check_close(pulse_tip_angle(&s, gamma), angle, 1e-9, what);
    check_close(reach, angle, 1e-9, what);
}

static void test_set_angle_gives_90_and_180_degrees(void **state) {
    (void)state;
    double gamma = gamma_of("1H");
    check_set_angle(dc_shape(0, 1e-4, 0, 0), gamma, 90 * DEG, "90, no b0, no edges");
    check_set_angle(dc_shape(0, 1e-4, 1e-5, 0), gamma, 90 * DEG, "90, no b0, edges");
    check_set_angle(dc_shape(1e-5, 2e-4, 2e-5, 0), gamma, 90 * DEG, "90, b0, edges");
    check_set_angle(dc_shape(5e-5, 1e-3, 2e-5, 0), gamma, 90 * DEG, "90, long edges");
    check_set_angle(dc_shape(0, 1e-4, 0, 0), gamma, 180 * DEG, "180, no b0, no edges");
    check_set_angle(dc_shape(0, 1e-4, 1e-5, 0), gamma, 180 * DEG, "180, no b0, edges");
    check_set_angle(dc_shape(1e-5, 2e-4, 2e-5, 0), gamma, 150 * DEG, "150, b0, edges");
    check_set_angle(dc_shape(0, 1e-4, 0, 0), gamma, 0, "0, no edges");
}

static double flat_for(pulse_shape s, double gamma, double angle) {
    double reach = 0;
    if (pulse_set_angle(&s, gamma, angle, &reach) != 0)
        fail_msg("%.6g deg refused, reach %.9g deg", angle / DEG, reach / DEG);
    return s.flat;
}

static void test_edges_shorten_the_flat_top(void **state) {
    (void)state;
    double gamma = gamma_of("1H");
    double without = flat_for(dc_shape(1e-5, 2e-4, 0, 0), gamma, 90 * DEG);
    double with = flat_for(dc_shape(1e-5, 2e-4, 2e-5, 0), gamma, 90 * DEG);
    if (!(with < without)) fail_msg("flat with edges %.9g s, without %.9g s", with, without);
    /* the edges are worth about a rise time of flat top between them */
    check_close(without - with, 2e-5, 2e-7, "flat saved by the edges");
}

static void test_edges_count_as_half_a_rectangle_each_without_static_field(void **state) {
    (void)state;
    double gamma = gamma_of("1H"), b = 1e-4, rise = 1.5e-5;
    /* source: rotation formula: about one fixed axis rotations add, so
     * theta = |gamma| times the pulse's area, |gamma| B (flat + rise) */
    pulse_shape s = dc_shape(0, b, rise, 4e-5);
    check_close(pulse_tip_angle(&s, gamma), fabs(gamma) * b * (4e-5 + rise), 1e-12, "tip");
    double without = flat_for(dc_shape(0, b, 0, 0), gamma, 90 * DEG);
    double with = flat_for(dc_shape(0, b, rise, 0), gamma, 90 * DEG);
    check_close(with + rise, without, 1e-12 * without, "flat + rise");
}

static void test_negative_polarity_gives_the_same_tip(void **state) {
    (void)state;
    double gamma = gamma_of("1H");
    pulse_shape plus = dc_shape(1e-5, 2e-4, 2e-5, 3e-5), minus = plus;
    minus.sign = -1;
    check_close(pulse_tip_angle(&minus, gamma), pulse_tip_angle(&plus, gamma), 1e-12, "tip");
    double a = flat_for(plus, gamma, 90 * DEG), b = flat_for(minus, gamma, 90 * DEG);
    check_close(b, a, 1e-12 * a, "flat for 90 deg");
}

static void test_carbon_pulse_is_longer_by_the_gamma_ratio(void **state) {
    (void)state;
    double gh = gamma_of("1H"), gc = gamma_of("13C"), rise = 1e-5;
    /* source: rotation formula: with b0 = 0, theta = |gamma| B (flat + rise),
     * so equal angles take lengths in the inverse ratio of gamma */
    double h = flat_for(dc_shape(0, 1e-4, 0, 0), gh, 90 * DEG);
    double c = flat_for(dc_shape(0, 1e-4, 0, 0), gc, 90 * DEG);
    check_close(c / h, gh / gc, 1e-12 * gh / gc, "no edges");
    h = flat_for(dc_shape(0, 1e-4, rise, 0), gh, 90 * DEG) + rise;
    c = flat_for(dc_shape(0, 1e-4, rise, 0), gc, 90 * DEG) + rise;
    check_close(c / h, gh / gc, 1e-12 * gh / gc, "with edges");
}

static void test_weak_pulse_in_strong_static_field_cannot_reach_90_degrees(void **state) {
    (void)state;
    double gamma = gamma_of("1H"), b0 = 1e-4, bp = 1e-5, reach = 0;
    double alpha = atan(bp / b0);
    pulse_shape s = dc_shape(b0, bp, 0, 7e-6);
    assert_int_equal(pulse_set_angle(&s, gamma, 90 * DEG, &reach), -1);
    /* source: rotation (Rodrigues) formula: cos(theta) = cos^2(alpha) +
     * sin^2(alpha) cos(phi) is smallest at phi = pi, where theta = 2 alpha */
    check_close(reach, 2 * alpha, 1e-9, "reach, no edges");
    check_close(s.flat, 7e-6, 0, "flat left alone");
    /* the largest angle, asked for, is given */
    check_set_angle(s, gamma, reach, "the reach itself");

    s = dc_shape(b0, bp, 1e-6, 0); /* short edges barely change it */
    assert_int_equal(pulse_set_angle(&s, gamma, 90 * DEG, &reach), -1);
    check_close(reach, 2 * alpha, 1e-3, "reach, short edges");
    check_set_angle(s, gamma, reach, "the reach itself, edges");
    assert_int_equal(pulse_set_angle(&s, gamma, PI + 0.1, &reach), -1);
}

static void test_a_hair_above_the_largest_angle_counts_as_reaching_it(void **state) {
    (void)state;
    double gamma = gamma_of("1H"), reach = 0;
    pulse_shape s = dc_shape(1e-4, 1e-5, 2e-6, 0);
    assert_int_equal(pulse_set_angle(&s, gamma, 90 * DEG, &reach), -1);
    double largest = reach;
    /* within 1e-9 rad: the top of the largest angle is given */
    assert_int_equal(pulse_set_angle(&s, gamma, largest + 5e-10, &reach), 0);
    check_close(pulse_tip_angle(&s, gamma), largest, 1e-15, "tip at the top");
    assert_int_equal(pulse_set_angle(&s, gamma, largest + 2e-9, &reach), -1);
    check_close(reach, largest, 1e-15, "reach");
}

static void test_edges_alone_too_long_are_refused_with_their_angle(void **state) {
    (void)state;
    double gamma = gamma_of("1H"), b = 1e-4, rise = 1e-4, reach = 0;
    pulse_shape s = dc_shape(0, b, rise, 5e-6);
    assert_int_equal(pulse_set_angle(&s, gamma, 90 * DEG, &reach), -1);
    /* source: rotation formula: two linear edges turn by |gamma| B rise */
    check_close(reach, fabs(gamma) * b * rise, 1e-12, "edge angle");
    check_close(s.flat, 5e-6, 0, "flat left alone");
    assert_int_equal(pulse_set_angle(&s, gamma, -1, &reach), -1);
    check_close(reach, fabs(gamma) * b * rise, 1e-12, "edge angle for a negative angle");
}

static void test_resonant_set_angle_round_trips_near_the_rotating_wave_length(void **state) {
    (void)state;
    double gamma = gamma_of("1H"), b0 = 2e-5, b1 = 2e-7;
    pulse_shape s = resonant_shape(b0, b1, gamma, 0.4, 0);
    check_set_angle(s, gamma, 90 * DEG, "resonant 90");
    double flat = flat_for(s, gamma, 90 * DEG), rwa = PI / (fabs(gamma) * b1);
    check_close(flat, rwa, 0.01 * rwa, "resonant 90 length"); /* B1 / b0, as above */
}

static void test_resonant_180_degrees_falls_short_by_the_counter_rotating_wobble(void **state) {
    (void)state;
    double gamma = gamma_of("1H"), b0 = 2e-5, b1 = 2e-7, reach = 0;
    pulse_shape s = resonant_shape(b0, b1, gamma, 0, 0);
    /* the counter-rotating field keeps m off the exact -z, by about
     * B1 / (4 b0): refused, with a reach the pulse does give */
    assert_int_equal(pulse_set_angle(&s, gamma, PI, &reach), -1);
    if (!(reach < PI && reach > PI - b1 / b0)) fail_msg("reach %.12g", reach);
    check_set_angle(s, gamma, reach, "resonant reach");
}

static void test_set_duration_refuses_less_than_one_rise_time(void **state) {
    (void)state;
    pulse_shape s = dc_shape(0, 1e-4, 1e-5, 3e-5);
    assert_int_equal(pulse_set_duration(&s, 0.9e-5), -1);
    assert_int_equal(pulse_set_duration(&s, NAN), -1);
    check_close(s.flat, 3e-5, 0, "flat left alone");
    assert_int_equal(pulse_set_duration(&s, 1e-5), 0);
    check_close(s.flat, 0, 0, "one rise time: no flat top");
    assert_int_equal(pulse_set_duration(&s, 5e-5), 0);
    check_close(s.flat, 4e-5, 1e-20, "flat");
    check_close(pulse_duration(&s), 5e-5, 1e-20, "duration");

    pulse_shape r = resonant_shape(1e-5, 1e-7, gamma_of("1H"), 0, 1e-3);
    r.rise = 1e-4; /* ignored */
    check_close(pulse_duration(&r), 1e-3, 0, "resonant duration");
    assert_int_equal(pulse_set_duration(&r, 5e-5), 0);
    check_close(r.flat, 5e-5, 0, "resonant flat");
    assert_int_equal(pulse_set_duration(&r, -1e-6), -1);
    check_close(r.flat, 5e-5, 0, "resonant flat left alone");
}

static void test_current_follows_the_trapezoid_and_polarity(void **state) {
    (void)state;
    pulse_shape s = dc_shape(0, 1e-4, 1e-5, 3e-5);
    const double times[] = {-1e-6, 0, 2.5e-6, 1e-5, 2e-5, 4e-5, 4.5e-5, 5e-5, 6e-5};
    const double want[] = {0, 0, 0.5, 2, 2, 2, 1, 0, 0};
    for (int sign = 1; sign >= -1; sign -= 2) {
        s.sign = sign;
        for (int i = 0; i < 9; i++)
            check_close(pulse_current_at(&s, 2, times[i]), sign * want[i], 1e-12, "current");
    }
    s = dc_shape(0, 1e-4, 0, 3e-5); /* no edges: a rectangle */
    check_close(pulse_current_at(&s, 2, 0), 2, 0, "start");
    check_close(pulse_current_at(&s, 2, 3e-5), 2, 0, "end");
    check_close(pulse_current_at(&s, 2, 3.1e-5), 0, 0, "after");
}

static void test_resonant_current_follows_the_cosine(void **state) {
    (void)state;
    pulse_shape s = {{0, 0, 1e-5}, {1, 0, 0}, 1e-7, 1e-5, 1e-3, 1, 1000, 0.5, -1};
    for (double t = 0; t <= 1e-3; t += 1.7e-4)
        check_close(pulse_current_at(&s, 3, t), -3 * cos(2 * PI * 1000 * t + 0.5), 1e-12, "cos");
    check_close(pulse_current_at(&s, 3, -1e-6), 0, 0, "before");
    check_close(pulse_current_at(&s, 3, 1.001e-3), 0, 0, "after");
}

static void test_invalid_shapes_give_nan_and_are_refused(void **state) {
    (void)state;
    double gamma = gamma_of("1H"), reach = 0;
    pulse_shape bad[5];
    for (int i = 0; i < 5; i++) bad[i] = dc_shape(1e-5, 1e-4, 1e-5, 1e-5);
    bad[0].axis[0] = 0;
    bad[1].flat = -1e-6;
    bad[2].amplitude = NAN;
    bad[3].rise = -1e-6;
    bad[4].resonant = 1, bad[4].frequency = INFINITY;
    for (int i = 0; i < 5; i++) {
        if (!isnan(pulse_tip_angle(&bad[i], gamma))) fail_msg("shape %d has a tip angle", i);
        if (i == 1) continue; /* the flat length is what set_angle sets */
        assert_int_equal(pulse_set_angle(&bad[i], gamma, PI / 2, &reach), -1);
        if (!isnan(reach)) fail_msg("shape %d reaches %g", i, reach);
    }
    pulse_shape s = dc_shape(1e-5, 1e-4, 1e-5, 1e-5);
    assert_int_equal(pulse_set_angle(&s, gamma, NAN, &reach), -1);
    assert_int_equal(pulse_set_angle(&s, NAN, PI / 2, NULL), -1);
    check_close(s.flat, 1e-5, 0, "flat left alone");
    /* an edge needing more than 1e8 substeps is not integrated */
    s = dc_shape(1, 1, 10, 0);
    if (!isnan(pulse_tip_angle(&s, gamma))) fail_msg("10 s edges at 1 T have a tip angle");
}

static int handler_calls;
static void counting_handler(const char *reason, const char *file, int line, int err) {
    (void)reason, (void)file, (void)line, (void)err;
    handler_calls++;
}

static void test_gsl_error_handler_is_neither_called_nor_changed(void **state) {
    (void)state;
    double gamma = gamma_of("1H"), reach;
    gsl_error_handler_t *old = gsl_set_error_handler(counting_handler);
    handler_calls = 0;
    pulse_shape shapes[] = {dc_shape(0, 1e-4, 0, 0), dc_shape(0, 1e-4, 1e-5, 0),
                            dc_shape(1e-4, 1e-5, 0, 0), dc_shape(0, 1e-4, 1e-4, 0),
                            dc_shape(1e-5, 2e-4, 2e-5, 0), resonant_shape(2e-5, 2e-7, gamma, 0, 0)};
    const double angles[] = {0, 30 * DEG, 90 * DEG, PI, 4, -1, NAN};
    for (size_t i = 0; i < sizeof shapes / sizeof shapes[0]; i++)
        for (size_t k = 0; k < sizeof angles / sizeof angles[0]; k++) {
            pulse_shape s = shapes[i];
            (void)pulse_set_angle(&s, gamma, angles[k], &reach);
        }
    gsl_error_handler_t *now = gsl_set_error_handler(old);
    assert_int_equal(handler_calls, 0);
    assert_true(now == counting_handler);
}

int main(void) {
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_gyromagnetic_ratios_match_codata_and_iupac),
        cmocka_unit_test(test_tip_without_static_field_is_gamma_b_t),
        cmocka_unit_test(test_pulse_along_the_static_field_does_not_tip),
        cmocka_unit_test(test_tip_in_perpendicular_static_field_follows_rodrigues),
        cmocka_unit_test(test_resonant_pulse_on_resonance_tips_by_half_gamma_b1_t),
        cmocka_unit_test(test_set_angle_gives_90_and_180_degrees),
        cmocka_unit_test(test_edges_shorten_the_flat_top),
        cmocka_unit_test(test_edges_count_as_half_a_rectangle_each_without_static_field),
        cmocka_unit_test(test_negative_polarity_gives_the_same_tip),
        cmocka_unit_test(test_carbon_pulse_is_longer_by_the_gamma_ratio),
        cmocka_unit_test(test_weak_pulse_in_strong_static_field_cannot_reach_90_degrees),
        cmocka_unit_test(test_a_hair_above_the_largest_angle_counts_as_reaching_it),
        cmocka_unit_test(test_edges_alone_too_long_are_refused_with_their_angle),
        cmocka_unit_test(test_resonant_set_angle_round_trips_near_the_rotating_wave_length),
        cmocka_unit_test(test_resonant_180_degrees_falls_short_by_the_counter_rotating_wobble),
        cmocka_unit_test(test_set_duration_refuses_less_than_one_rise_time),
        cmocka_unit_test(test_current_follows_the_trapezoid_and_polarity),
        cmocka_unit_test(test_resonant_current_follows_the_cosine),
        cmocka_unit_test(test_invalid_shapes_give_nan_and_are_refused),
        cmocka_unit_test(test_gsl_error_handler_is_neither_called_nor_changed),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
