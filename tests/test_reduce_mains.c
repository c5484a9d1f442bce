/* The per-shot pipeline with line noise: a strong line a few hertz from
 * where a drifting harmonic could reach must keep its frequency and
 * amplitude and raise no ghost lines; the comb itself is removed.
 * Not for the comb remover alone (test_mains.c). */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>

#include <cmocka.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "analysis.h"

#define RATE 10000.0
#define N 16384

/* A damped line (A, f, T2) from t = 0 at the pulse, a 50 Hz comb of five
 * harmonics of amplitude comb / h, white noise sigma. */
static an_record record_with(double a, double f, double t2, double comb, double mains,
                             double sigma, unsigned long seed) {
    an_record r;
    memset(&r, 0, sizeof r);
    r.shot = 1;
    r.rate = RATE;
    r.t0 = 0.01;
    r.pulse_end = 0.0;
    r.receiver_sign = 1;
    r.n = N;
    r.samples = malloc(N * sizeof *r.samples);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);
    for (size_t i = 0; i < N; i++) {
        double t = r.t0 + (double)i / RATE, v = a * exp(-t / t2) * cos(2 * M_PI * f * t + 0.4);
        for (int h = 1; h <= 5; h++) v += comb / h * cos(2 * M_PI * h * mains * t + h);
        r.samples[i] = (float)(v + gsl_ran_gaussian_ziggurat(rng, sigma));
    }
    gsl_rng_free(rng);
    return r;
}

static an_shot reduce(const an_record *r, double line_noise) {
    an_settings s;
    an_settings_default(&s);
    s.line_noise = line_noise;
    an_work *w = an_work_new();
    an_shot out;
    char err[256] = "";
    if (an_reduce(w, r, &s, &out, err, sizeof err) != 0) fail_msg("an_reduce: %s", err);
    an_work_free(w);
    return out;
}

/* 1163 Hz is 13 Hz from the 23rd harmonic of 50 Hz, and within reach of
 * it for a fundamental of 50.5 Hz; the line is 150 times the comb. */
static void test_strong_line_near_a_reachable_harmonic_is_kept_whole(void **state) {
    (void)state;
    double a = 1.5e-10, f = 1163.3, t2 = 0.3;
    an_record r = record_with(a, f, t2, 1e-12, 50.0, 5e-14, 3);
    an_shot with = reduce(&r, 50), without = reduce(&r, 0);
    assert_true(with.nlines >= 1);
    const an_line_fit *l = &with.lines[0];
    if (fabs(l->frequency - f) > 5 * l->frequency_err + 1e-3)
        fail_msg("line moved: %.5f Hz, want %.5f", l->frequency, f);
    if (fabs(l->amplitude - a) > 5 * l->amplitude_err)
        fail_msg("amplitude %.5g, want %.5g +- %.2g", l->amplitude, a, l->amplitude_err);
    if (fabs(l->linewidth - 1 / (M_PI * t2)) > 5 * l->linewidth_err)
        fail_msg("linewidth %.5f Hz, want %.5f", l->linewidth, 1 / (M_PI * t2));
    /* no ghost beside the line, and no harmonic left as a line */
    for (size_t k = 1; k < with.nlines; k++)
        fail_msg("a second line at %.3f Hz (amplitude %.3g)", with.lines[k].frequency,
                 with.lines[k].amplitude);
    assert_true(fabs(with.mains.fundamental - 50.0) < 0.01);
    /* without line-noise removal the comb's harmonics stand as lines */
    assert_true(without.nlines > 1);
    an_record_free(&r);
}

/* What plots and exports see (an_trace_of) is the record without its comb,
 * the strong line near a reachable harmonic intact: it differs from the
 * same record made without a comb by far less than the comb itself. */
static void test_trace_of_removes_the_comb_and_keeps_the_line(void **state) {
    (void)state;
    an_record with = record_with(1.5e-10, 1163.3, 0.3, 1e-12, 50.0, 5e-14, 3);
    an_record without = record_with(1.5e-10, 1163.3, 0.3, 0, 50.0, 5e-14, 3);
    an_settings s;
    an_settings_default(&s);
    s.line_noise = 50;
    an_work *w = an_work_new(), *w0 = an_work_new();
    an_trace tr, tr0;
    an_mains m, m0;
    char err[256] = "";
    assert_int_equal(an_trace_of(w, &with, &s, &tr, &m, err, sizeof err), 0);
    s.line_noise = 0;
    assert_int_equal(an_trace_of(w0, &without, &s, &tr0, &m0, err, sizeof err), 0);
    assert_int_equal(tr.n, tr0.n);
    double d = 0;
    for (size_t i = 0; i < tr.n; i++) d += (tr.y[i] - tr0.y[i]) * (tr.y[i] - tr0.y[i]);
    d = sqrt(d / (double)tr.n);
    if (!(d < 0.1 * m.rms_removed))
        fail_msg("the cleaned trace is %.3g from the comb-free one (comb rms %.3g)", d,
                 m.rms_removed);
    an_work_free(w);
    an_work_free(w0);
    an_record_free(&with);
    an_record_free(&without);
}

/* A drifted mains (49.8 Hz) under a weaker line: found and removed. */
static void test_drifted_comb_is_found_beside_a_line(void **state) {
    (void)state;
    an_record r = record_with(2e-12, 437.0, 0.5, 4e-12, 49.8, 5e-14, 5);
    an_shot out = reduce(&r, 50);
    assert_int_equal(out.nlines, 1);
    assert_true(fabs(out.lines[0].frequency - 437.0) < 0.05);
    assert_true(fabs(out.mains.fundamental - 49.8) < 0.01);
    an_record_free(&r);
}

int main(void) {
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_strong_line_near_a_reachable_harmonic_is_kept_whole),
        cmocka_unit_test(test_drifted_comb_is_found_beside_a_line),
        cmocka_unit_test(test_trace_of_removes_the_comb_and_keeps_the_line),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
