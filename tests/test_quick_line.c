/* test_quick_line: the progress line's quick look at a shot (an_quick_line):
 * the strongest line and its SNR, looking past the harmonics of the mains
 * when it is given, so that a shot's mains pickup, often stronger than its
 * signal, is not reported as its line. Not for the analysis's own peak
 * picking and SNR (test_analysis.c, test_mains.c). */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdlib.h>

#include "analysis.h"

#define RATE 5000.0
#define N 5000            /* 1 s: bins of 1 Hz */
#define LINE 873.2        /* Hz: between the 17th and 18th harmonics of 50 Hz */
#define T2 0.4
#define SIGMA 0.01        /* per sample */
#define GUARD 20.0

/* an_quick_line with no line expected anywhere in particular. */
static int quick(an_work *w, const float *y, size_t n, double rate, int sign, double guard,
                 double mains, an_line *l) {
    an_quick_opts o = {guard, mains, 0};
    return an_quick_line(w, y, n, rate, sign, &o, l);
}

/* A decaying line of amplitude a, a mains comb of fundamental `mains` with
 * harmonics 1..5 of amplitude comb/k, and white noise of the given seed. */
static float *shot(double a, double comb, double mains, unsigned long seed) {
    float *y = malloc(N * sizeof *y);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    assert_non_null(y);
    assert_non_null(rng);
    gsl_rng_set(rng, seed);
    for (size_t i = 0; i < N; i++) {
        double t = (double)i / RATE, v = a * cos(2 * M_PI * LINE * t + 0.3) * exp(-t / T2);
        for (int k = 1; k <= 5; k++) v += comb / k * cos(2 * M_PI * k * mains * t + k);
        y[i] = (float)(v + gsl_ran_gaussian_ziggurat(rng, SIGMA));
    }
    gsl_rng_free(rng);
    return y;
}

static void test_without_the_mains_given_the_strongest_line_is_the_pickup(void **state) {
    (void)state;
    an_work *w = an_work_new();
    float *y = shot(0.3, 1.0, 50.0, 1);
    an_line l;
    assert_int_equal(quick(w, y, N, RATE, 1, GUARD, 0, &l), 0);
    assert_true(fabs(l.frequency - 50.0) <= 1.0);
    free(y);
    an_work_free(w);
}

static void test_with_the_mains_given_the_signal_is_found_past_its_harmonics(void **state) {
    (void)state;
    an_work *w = an_work_new();
    an_line l;
    /* the comb on its nominal frequency, and a mains 0.1 % off it (a grid
     * within its usual band) whose skirts spread into the neighbouring bins */
    for (int off = 0; off < 2; off++) {
        float *y = shot(0.3, 1.0, 50.0 + 0.05 * off, 2);
        assert_int_equal(quick(w, y, N, RATE, 1, GUARD, 50.0, &l), 0);
        if (!(fabs(l.frequency - LINE) <= 1.0))
            fail_msg("mains %.2f Hz: line at %.2f Hz, want %.1f", 50.0 + 0.05 * off,
                     l.frequency, LINE);
        assert_true(l.snr > 20);
        free(y);
    }
    an_work_free(w);
}

static void test_the_mains_bins_are_not_counted_as_noise(void **state) {
    (void)state;
    an_work *w = an_work_new();
    float *clean = shot(0.3, 0, 50.0, 3), *picked = shot(0.3, 1.0, 50.0, 3);
    an_line a, b;
    assert_int_equal(quick(w, clean, N, RATE, 1, GUARD, 50.0, &a), 0);
    assert_int_equal(quick(w, picked, N, RATE, 1, GUARD, 50.0, &b), 0);
    /* the same noise, with and without the comb: the same SNR; counting the
     * comb's bins as noise would lower it several times over */
    if (!(fabs(b.snr / a.snr - 1) < 0.02)) fail_msg("SNR %.2f with the comb, %.2f without",
                                                  b.snr, a.snr);
    assert_true(fabs(a.frequency - b.frequency) < 1e-9);
    free(clean);
    free(picked);
    an_work_free(w);
}

static void test_the_receiver_sign_does_not_move_the_line(void **state) {
    (void)state;
    an_work *w = an_work_new();
    float *y = shot(0.3, 1.0, 50.0, 4);
    an_line a, b;
    assert_int_equal(quick(w, y, N, RATE, 1, GUARD, 50.0, &a), 0);
    assert_int_equal(quick(w, y, N, RATE, -1, GUARD, 50.0, &b), 0);
    assert_true(a.frequency == b.frequency);
    assert_true(fabs(a.snr - b.snr) <= 1e-9 * a.snr);
    free(y);
    an_work_free(w);
}

static void test_noise_alone_stays_below_snr_5(void **state) {
    (void)state;
    an_work *w = an_work_new();
    an_line l;
    for (unsigned long seed = 10; seed < 20; seed++) {
        float *y = shot(0, 1.0, 50.0, seed);
        assert_int_equal(quick(w, y, N, RATE, 1, GUARD, 50.0, &l), 0);
        if (!(l.snr < 5)) fail_msg("seed %lu: noise alone at SNR %.2f", seed, l.snr);
        free(y);
    }
    an_work_free(w);
}

/* Samples of a line at f and a mains comb at `mains` (harmonics 1..hmax),
 * at rate, for 1 s. */
static float *comb_shot(double rate, double f, double a, double mains, int hmax) {
    size_t n = (size_t)rate;
    float *y = malloc(n * sizeof *y);
    assert_non_null(y);
    for (size_t i = 0; i < n; i++) {
        double t = (double)i / rate, v = a * cos(2 * M_PI * f * t) * exp(-t / T2);
        for (int k = 1; k <= hmax; k++) v += cos(2 * M_PI * k * mains * t + k) / k;
        y[i] = (float)v;
    }
    return y;
}

/* The quick look at 1 s of a line at f (amplitude a) and a comb of
 * harmonics 1..hmax of mains, sampled at rate, with mains given: the line
 * found within a bin of f. */
static void expect_line_past_the_comb(double rate, double f, double a, double mains, int hmax) {
    an_work *w = an_work_new();
    float *y = comb_shot(rate, f, a, mains, hmax);
    an_line l;
    assert_int_equal(quick(w, y, (size_t)rate, rate, 1, GUARD, mains, &l), 0);
    if (!(fabs(l.frequency - f) <= 1)) fail_msg("line at %.1f Hz, want %g", l.frequency, f);
    free(y);
    an_work_free(w);
}

/* Harmonics past the Nyquist frequency are sampled as their aliases: those
 * are left out too. 300 Hz at 2 kS/s: its 4th harmonic (1200 Hz) shows at
 * 800 Hz, stronger than the line at 555 Hz. */
static void test_harmonics_are_left_out_where_sampling_folds_them(void **state) {
    (void)state;
    expect_line_past_the_comb(2000, 555, 0.1, 300, 4);
}

/* Only the first harmonics are left out: a line far up the spectrum, past
 * where the widening bands of high harmonics would meet, is still seen. */
static void test_a_line_far_above_the_low_harmonics_is_seen(void **state) {
    (void)state;
    expect_line_past_the_comb(100000, 20013, 0.5, 50, 5);
}

/* A line planned within a couple of hertz of a harmonic: left out with that
 * harmonic when nothing is expected, found when it is expected there (a
 * field ramp passing a harmonic). 1 s at 2 kS/s, the line at 851.5 Hz, the
 * 17th harmonic at 850 Hz. */
static void test_the_harmonic_where_a_line_is_planned_is_kept(void **state) {
    (void)state;
    an_work *w = an_work_new();
    float *y = comb_shot(2000, 851.5, 1.0, 50, 5);
    an_line l;
    assert_int_equal(quick(w, y, 2000, 2000, 1, GUARD, 50, &l), 0);
    assert_true(fabs(l.frequency - 851.5) > 3);
    an_quick_opts o = {GUARD, 50, 851.5};
    assert_int_equal(an_quick_line(w, y, 2000, 2000, 1, &o, &l), 0);
    if (!(fabs(l.frequency - 851.5) <= 1)) fail_msg("line at %.1f Hz, want 851.5", l.frequency);
    /* the other harmonics are still left out */
    o.expect = 873.0;
    assert_int_equal(an_quick_line(w, y, 2000, 2000, 1, &o, &l), 0);
    assert_true(fabs(l.frequency - 851.5) > 3);
    free(y);
    an_work_free(w);
}

static void test_nothing_to_look_at_is_refused(void **state) {
    (void)state;
    an_work *w = an_work_new();
    float *y = shot(0.3, 0, 50.0, 5);
    an_line l;
    assert_int_equal(quick(w, y, 15, RATE, 1, GUARD, 0, &l), -1);
    /* 16 samples: 9 bins of 312.5 Hz, all within the guard the progress
     * line takes (20 bins) of the line or of 0 Hz: nothing to measure the
     * noise by, and no SNR of infinity */
    assert_int_equal(quick(w, y, 16, RATE, 1, 20 * RATE / 16, 0, &l), -1);
    /* 20 samples at 100 S/s: a mains of 10 Hz, its harmonics folded, leaves
     * no bin of 5 Hz clear */
    assert_int_equal(quick(w, y, 20, 100, 1, GUARD, 10.0, &l), -1);
    assert_int_equal(quick(NULL, y, N, RATE, 1, GUARD, 0, &l), -1);
    free(y);
    an_work_free(w);
}

int main(void) {
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_without_the_mains_given_the_strongest_line_is_the_pickup),
        cmocka_unit_test(test_with_the_mains_given_the_signal_is_found_past_its_harmonics),
        cmocka_unit_test(test_the_mains_bins_are_not_counted_as_noise),
        cmocka_unit_test(test_the_receiver_sign_does_not_move_the_line),
        cmocka_unit_test(test_noise_alone_stays_below_snr_5),
        cmocka_unit_test(test_harmonics_are_left_out_where_sampling_folds_them),
        cmocka_unit_test(test_a_line_far_above_the_low_harmonics_is_seen),
        cmocka_unit_test(test_the_harmonic_where_a_line_is_planned_is_kept),
        cmocka_unit_test(test_nothing_to_look_at_is_refused),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
