/* test_analysis: the per-shot analysis (analysis.h: spectra, damped-sinusoid
 * fits, an_reduce, averaging) as cmocka tests on synthetic damped sinusoids
 * in seeded white noise. It also writes $B/tests/analysis_cases.jsonl, traces
 * with our spectra and fits, which tests/ref/analysis_fit.py checks against
 * numpy and scipy. Not for reading records (test_analysis_record.c), line
 * noise removal (mains.c), series fits, plots or export. */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <gsl/gsl_errno.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "analysis.h"

/* Set by the GSL error handler main installs: the analysis must never make
 * GSL report an error (its default handler aborts the process). */
static int gsl_errors;

static void count_gsl_error(const char *reason, const char *file, int line, int gsl_errno) {
    (void)reason, (void)file, (void)line, (void)gsl_errno;
    gsl_errors++;
}

/* ---- synthetic records -------------------------------------------------------- */

typedef struct {
    double frequency, amplitude, phase, linewidth;
} truth;

/* sum_k A_k exp(-pi W_k tau) cos(2 pi f_k tau + phi_k) at tau = t0 + i / rate
 * - t_ref, plus Gaussian noise of rms sigma. */
static void synth(double *y, size_t n, double rate, double t0, double t_ref, const truth *l,
                  size_t nl, double sigma, gsl_rng *rng) {
    for (size_t i = 0; i < n; i++) {
        double tau = t0 + (double)i / rate - t_ref, v = 0;
        for (size_t k = 0; k < nl; k++)
            v += l[k].amplitude * exp(-M_PI * l[k].linewidth * tau) *
                 cos(2 * M_PI * l[k].frequency * tau + l[k].phase);
        y[i] = v + (sigma > 0 ? gsl_ran_gaussian_ziggurat(rng, sigma) : 0);
    }
}

/* A record as an_record_read would give it (samples owned, freed by
 * an_record_free): t0 and pulse_end as given, receiver_sign +1. */
static an_record make_record(size_t n, double rate, double t0, double pulse_end,
                             const truth *l, size_t nl, double sigma, unsigned long seed) {
    an_record r;
    memset(&r, 0, sizeof r);
    r.shot = 1;
    r.rate = rate;
    r.t0 = t0;
    r.pulse_end = pulse_end;
    r.receiver_sign = 1;
    r.n = n;
    r.samples = malloc(n * sizeof *r.samples);
    double *y = malloc(n * sizeof *y);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);
    synth(y, n, rate, t0, isnan(pulse_end) ? t0 : pulse_end, l, nl, sigma, rng);
    for (size_t i = 0; i < n; i++) r.samples[i] = (float)y[i];
    gsl_rng_free(rng);
    free(y);
    return r;
}

static void check_close(double got, double want, double tol, const char *what) {
    if (!(fabs(got - want) <= tol)) fail_msg("%s: got %.12g, want %.12g (+-%.3g)", what, got, want,
                                             tol);
}

/* Phase difference folded into (-pi, pi]. */
static double phase_diff(double a, double b) { return remainder(a - b, 2 * M_PI); }

/* Every parameter of a fitted line within k sigma of the truth. */
static void check_line(const an_line_fit *l, const truth *t, double k, const char *what) {
    char name[160];
    snprintf(name, sizeof name, "%s frequency", what);
    check_close(l->frequency, t->frequency, k * l->frequency_err, name);
    snprintf(name, sizeof name, "%s amplitude", what);
    check_close(l->amplitude, t->amplitude, k * l->amplitude_err, name);
    snprintf(name, sizeof name, "%s phase", what);
    check_close(phase_diff(l->phase, t->phase), 0, k * l->phase_err, name);
    snprintf(name, sizeof name, "%s linewidth", what);
    check_close(l->linewidth, t->linewidth, k * l->linewidth_err, name);
    assert_true(l->amplitude >= 0);
    assert_true(l->phase > -M_PI && l->phase <= M_PI);
}

static an_line_fit start_near(const truth *t, double df, double da, double dphi, double dw) {
    an_line_fit s = {0};
    s.frequency = t->frequency + df;
    s.amplitude = t->amplitude * (1 + da);
    s.phase = t->phase + dphi;
    s.linewidth = t->linewidth + dw;
    return s;
}

static an_shot reduce(const an_record *r, const an_settings *s) {
    an_work *w = an_work_new();
    an_shot out;
    char err[300] = "";
    gsl_errors = 0;
    if (an_reduce(w, r, s, &out, err, sizeof err) != 0) fail_msg("an_reduce: %s", err);
    if (gsl_errors) fail_msg("GSL reported %d error(s)", gsl_errors);
    an_work_free(w);
    return out;
}

/* ---- spectra ----------------------------------------------------------------- */

static void test_cosine_on_a_bin_has_its_amplitude_there(void **state) {
    (void)state;
    size_t n = 1000;
    double rate = 1000, y[1000];
    truth l = {125, 0.75, 0.3, 0};
    synth(y, n, rate, 0, 0, &l, 1, 0, NULL);
    an_work *w = an_work_new();
    an_spectrum s;
    assert_int_equal(an_spectrum_of(w, y, n, rate, 0, 1, &s), 0);
    assert_int_equal(s.n, n / 2 + 1);
    check_close(s.df, 1.0, 1e-12, "df");
    check_close(s.scale, 2.0 / 1000, 1e-18, "scale");
    /* source: the DFT of A cos(2 pi k i / n + phi) is (n A / 2) e^{i phi} at
     * bin k and 0 elsewhere (by hand) */
    check_close(s.scale * hypot(s.re[125], s.im[125]), 0.75, 1e-12, "height");
    check_close(atan2(s.im[125], s.re[125]), 0.3, 1e-12, "phase");
    check_close(s.scale * hypot(s.re[124], s.im[124]), 0, 1e-12, "next bin");
    an_work_free(w);
}

static void test_zero_filling_goes_to_a_fast_length(void **state) {
    (void)state;
    double y[1021] = {0};
    an_work *w = an_work_new();
    an_spectrum s;
    /* 1021 is prime; the next 2^a 3^b 5^c 7^d is 1024 (by hand) */
    assert_int_equal(an_spectrum_of(w, y, 1021, 1024, 0, 1, &s), 0);
    assert_int_equal(s.n, 513);
    check_close(s.df, 1.0, 1e-12, "df of 1024 points");
    check_close(s.scale, 2.0 / 1021, 1e-18, "scale of the unfilled length");
    /* 3 x 1000 = 3000 = 2^3 3 5^3 is fast already */
    assert_int_equal(an_spectrum_of(w, y, 1000, 1000, 0, 3, &s), 0);
    assert_int_equal(s.n, 1501);
    /* a refusal: no samples */
    assert_int_equal(an_spectrum_of(w, y, 0, 1000, 0, 1, &s), -1);
    an_work_free(w);
}

static void test_apodization_adds_its_linewidth(void **state) {
    (void)state;
    size_t n = 2000;
    double rate = 1000, y[2000], z[2000];
    truth l = {101.3, 1, 0.2, 1.5}, broad = l;
    broad.linewidth += 4;
    synth(y, n, rate, 0, 0, &l, 1, 0, NULL);
    synth(z, n, rate, 0, 0, &broad, 1, 0, NULL);
    an_work *w = an_work_new();
    an_spectrum s;
    double re[2001], im[2001];
    assert_int_equal(an_spectrum_of(w, z, n, rate, 0, 2, &s), 0);
    memcpy(re, s.re, s.n * sizeof *re);
    memcpy(im, s.im, s.n * sizeof *im);
    /* source: exp(-pi LB t) exp(-pi W t) = exp(-pi (W + LB) t), by hand */
    assert_int_equal(an_spectrum_of(w, y, n, rate, 4, 2, &s), 0);
    for (size_t k = 0; k < s.n; k++) {
        check_close(s.re[k], re[k], 1e-9, "apodized re");
        check_close(s.im[k], im[k], 1e-9, "apodized im");
    }
    an_work_free(w);
}

static void test_peaks_come_strongest_first_between_bins(void **state) {
    (void)state;
    size_t n = 4000;
    double rate = 1000, y[4000], f[8], h[8];
    truth l[] = {{100.37, 0.5, 0, 0.3}, {250.81, 1.0, 1, 0.3}, {252.5, 0.3, 2, 0.3},
                 {0.8, 2.0, 0, 0}};
    synth(y, n, rate, 0, 0, l, 4, 0, NULL);
    an_work *w = an_work_new();
    an_spectrum s;
    assert_int_equal(an_spectrum_of(w, y, n, rate, 0, 4, &s), 0);
    /* the 0.8 Hz line and its first sidelobes are inside the 5 Hz guard (a
     * 2 Hz guard lets the one at 2.15 Hz through); 252.5 Hz is within 3 Hz
     * of a stronger peak; a 0.05 floor keeps the skirts' ripples out */
    size_t found = an_find_peaks(&s, 0.05, 3, 5, 8, f, h);
    assert_int_equal(found, 2);
    check_close(f[0], 250.81, 0.01, "strongest peak");
    check_close(f[1], 100.37, 0.01, "second peak");
    assert_true(h[0] > h[1]);
    /* without the separation the third line is found too, after the others */
    found = an_find_peaks(&s, 0.05, 0.5, 5, 8, f, h);
    assert_true(found >= 3);
    check_close(f[2], 252.5, 0.1, "third peak (on the stronger one's skirt)");
    assert_true(an_find_peaks(&s, 0.05, 0.5, 2, 8, f, h) > found);
    /* max and min_height bound the answer */
    assert_int_equal(an_find_peaks(&s, 0.05, 3, 5, 1, f, h), 1);
    assert_int_equal(an_find_peaks(&s, 10, 3, 5, 8, f, h), 0);
    an_work_free(w);
}

static void test_noise_rms_of_white_noise(void **state) {
    (void)state;
    size_t n = 16384;
    double rate = 1000, sigma = 0.3, *y = malloc(n * sizeof *y);
    truth l = {200, 5, 0, 1};
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 7);
    synth(y, n, rate, 0, 0, &l, 1, sigma, rng);
    an_work *w = an_work_new();
    an_spectrum s;
    assert_int_equal(an_spectrum_of(w, y, n, rate, 0, 2, &s), 0);
    /* source: Parseval's theorem: white noise of variance sigma^2 gives
     * E|X_k|^2 = n sigma^2 per bin, so (2/n)|X| has rms 2 sigma / sqrt(n)
     * (by hand) */
    double want = 2 * sigma / sqrt((double)n), centre = 200, exclude = 20;
    check_close(an_noise_rms(&s, &centre, &exclude, 1, 1), want, 0.03 * want, "noise rms");
    /* the line left in raises it */
    assert_true(an_noise_rms(&s, NULL, NULL, 0, 1) > 1.5 * want);
    /* nothing left to measure */
    exclude = 1000;
    assert_true(isnan(an_noise_rms(&s, &centre, &exclude, 1, 0)));
    gsl_rng_free(rng);
    free(y);
    an_work_free(w);
}

static void test_prepare_cuts_the_window_removes_dc_and_applies_the_sign(void **state) {
    (void)state;
    float samples[100];
    for (size_t i = 0; i < 100; i++) samples[i] = (float)(5.0 + (i % 2 ? 1.0 : -1.0));
    an_work *w = an_work_new();
    an_trace t;
    /* 1000 Hz: from 10 ms to 50 ms is samples 10..49 */
    assert_int_equal(an_prepare(w, samples, 100, 1000, 2.0, -1, 0.010, 0.050, &t), 0);
    assert_int_equal(t.n, 40);
    check_close(t.t_first, 2.010, 1e-12, "t_first");
    check_close(t.dc, 5.0, 1e-12, "dc");
    check_close(t.y[0], 1.0, 1e-12, "sample 10, sign -1");
    check_close(t.y[1], -1.0, 1e-12, "sample 11, sign -1");
    assert_int_equal(an_prepare(w, samples, 100, 1000, 2.0, 1, 0, 0, &t), 0);
    assert_int_equal(t.n, 100);
    check_close(t.y[0], -1.0, 1e-12, "sample 0, sign +1");
    /* fewer than 16 samples left */
    assert_int_equal(an_prepare(w, samples, 100, 1000, 2.0, 1, 0.090, 0, &t), -1);
    assert_int_equal(an_prepare(w, samples, 100, 1000, 2.0, 1, 0, 0.010, &t), -1);
    an_work_free(w);
}

/* ---- fits ------------------------------------------------------------------------- */

static an_line_fit fit_one(const double *y, size_t n, double rate, double t_start,
                           const an_line_fit *start) {
    an_line_fit out;
    double rms;
    gsl_errors = 0;
    if (an_fit_lines(y, n, rate, t_start, start, 1, &out, &rms) != 0) fail_msg("fit failed");
    if (gsl_errors) fail_msg("GSL reported %d error(s)", gsl_errors);
    return out;
}

static void test_fit_finds_a_damped_sinusoid_within_three_sigma(void **state) {
    (void)state;
    size_t n = 4096;
    double rate = 2000, y[4096];
    truth l = {312.25, 2.5e-11, -2.0, 3.0};
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 11);
    synth(y, n, rate, 0, 0, &l, 1, 2e-12, rng);
    an_line_fit start = start_near(&l, 0.3, -0.2, 0.3, 1.0);
    an_line_fit got = fit_one(y, n, rate, 0, &start);
    check_line(&got, &l, 3, "fit");
    /* and the errors are errors: of the order the noise allows (by hand:
     * sigma_A ~ sigma sqrt(2 / n_eff), n_eff = rate / (pi W) samples) */
    double n_eff = rate / (M_PI * l.linewidth) / 2;
    assert_true(got.amplitude_err > 0.3 * 2e-12 * sqrt(2 / n_eff));
    assert_true(got.amplitude_err < 3 * 2e-12 * sqrt(2 / n_eff));
    gsl_rng_free(rng);
}

/* Over many noise draws, (fit - truth) / error has mean 0 and rms 1: the
 * errors are one sigma, neither too small nor too large. */
static void test_fit_errors_are_one_sigma_over_many_draws(void **state) {
    (void)state;
    enum { DRAWS = 60 };
    size_t n = 2048;
    double rate = 1000, y[2048], sum[4] = {0}, sum2[4] = {0};
    truth l = {123.4, 1.0, 0.5, 2.0};
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 12345);
    for (int d = 0; d < DRAWS; d++) {
        synth(y, n, rate, 0, 0, &l, 1, 0.1, rng);
        an_line_fit start = start_near(&l, 0.1, 0.1, -0.1, 0.5);
        an_line_fit g = fit_one(y, n, rate, 0, &start);
        double pull[4] = {(g.frequency - l.frequency) / g.frequency_err,
                          (g.amplitude - l.amplitude) / g.amplitude_err,
                          phase_diff(g.phase, l.phase) / g.phase_err,
                          (g.linewidth - l.linewidth) / g.linewidth_err};
        for (int j = 0; j < 4; j++) sum[j] += pull[j], sum2[j] += pull[j] * pull[j];
    }
    for (int j = 0; j < 4; j++) {
        double mean = sum[j] / DRAWS, rms = sqrt(sum2[j] / DRAWS);
        /* 3 sigma bands for 60 draws: mean 3/sqrt(60), rms 1 +- 3/sqrt(120) */
        if (fabs(mean) > 0.39 || rms < 0.73 || rms > 1.27)
            fail_msg("parameter %d: pulls have mean %.3f and rms %.3f", j, mean, rms);
    }
    gsl_rng_free(rng);
}

static void test_linewidth_is_one_over_pi_t2star(void **state) {
    (void)state;
    size_t n = 8192;
    double rate = 4000, y[8192], t2 = 0.05;
    /* source: a signal decaying as exp(-t / T2*) has a Lorentzian line of
     * full width at half height 1 / (pi T2*) Hz (any NMR text; value from
     * memory). The model's exp(-pi W t) is that with W = 1 / (pi T2*). */
    truth l = {440, 1, 0, 1 / (M_PI * t2)};
    for (size_t i = 0; i < n; i++) {
        double t = (double)i / rate;
        y[i] = exp(-t / t2) * cos(2 * M_PI * 440 * t);
    }
    an_line_fit start = start_near(&l, 0.5, 0.2, 0.2, -2);
    an_line_fit got = fit_one(y, n, rate, 0, &start);
    check_close(got.linewidth, 6.366197723675814, 1e-9, "W for T2* = 50 ms");
    check_close(1 / (M_PI * got.linewidth), t2, 1e-11, "T2* back");
    check_close(got.amplitude, 1, 1e-9, "amplitude");
    /* a noise-free fit leaves (almost) nothing */
    check_close(got.linewidth_err, 0, 1e-6, "error of a noise-free fit");
}

static void test_record_short_against_t2star_still_gives_t2star(void **state) {
    (void)state;
    /* T2* = 1 s, a record of 0.2 s: the line is much narrower than a bin
     * (5 Hz) and the decay over the record is 0.2 / 1 */
    double t2 = 1.0, rate = 5000, sum = 0, sum2 = 0;
    truth l = {731.3, 1e-11, 1.2, 1 / (M_PI * t2)};
    an_settings s;
    an_settings_default(&s);
    enum { DRAWS = 20 };
    for (int d = 0; d < DRAWS; d++) {
        an_record r = make_record(1000, rate, 0.01, 0.01, &l, 1, 2e-13, 100 + (unsigned)d);
        an_shot out = reduce(&r, &s);
        assert_int_equal(out.nlines, 1);
        check_line(&out.lines[0], &l, 4, "short record");
        double pull = (out.lines[0].linewidth - l.linewidth) / out.lines[0].linewidth_err;
        sum += pull, sum2 += pull * pull;
        an_record_free(&r);
    }
    if (fabs(sum / DRAWS) > 0.7 || sqrt(sum2 / DRAWS) > 1.5 || sqrt(sum2 / DRAWS) < 0.6)
        fail_msg("linewidth pulls: mean %.3f rms %.3f", sum / DRAWS, sqrt(sum2 / DRAWS));
}

static void test_fit_gives_positive_amplitude_and_phase_in_range(void **state) {
    (void)state;
    size_t n = 1024;
    double rate = 1000, y[1024];
    truth l = {80, 1, M_PI - 0.05, 1};
    synth(y, n, rate, 0, 0, &l, 1, 0, NULL);
    /* started with the amplitude's sign wrong and the phase off by pi */
    an_line_fit start = start_near(&l, 0.05, -2.0, M_PI + 0.1, 0.2);
    an_line_fit got = fit_one(y, n, rate, 0, &start);
    check_close(got.amplitude, 1, 1e-9, "amplitude");
    check_close(got.phase, M_PI - 0.05, 1e-9, "phase");
    /* started many turns away, the phase still comes back in range */
    start = start_near(&l, 0.05, 0.2, 6 * M_PI + 0.1, 0.2);
    got = fit_one(y, n, rate, 0, &start);
    check_close(got.phase, M_PI - 0.05, 1e-9, "phase from three turns away");
}

static void test_fit_refuses_what_it_cannot_fit(void **state) {
    (void)state;
    double y[64] = {0}, rms;
    truth l = {10, 1, 0, 1};
    an_line_fit start[AN_MAX_LINES + 1], out[AN_MAX_LINES + 1];
    for (size_t k = 0; k <= AN_MAX_LINES; k++) start[k] = start_near(&l, (double)k, 0, 0, 0);
    synth(y, 64, 100, 0, 0, &l, 1, 0, NULL);
    gsl_errors = 0;
    assert_int_equal(an_fit_lines(y, 64, 100, 0, start, 0, out, &rms), -1);
    assert_int_equal(an_fit_lines(y, 64, 100, 0, start, AN_MAX_LINES + 1, out, &rms), -1);
    assert_int_equal(an_fit_lines(y, 5, 100, 0, start, 1, out, &rms), -1);
    assert_int_equal(an_fit_lines(y, 64, 0, 0, start, 1, out, &rms), -1);
    start[0].frequency = NAN;
    assert_int_equal(an_fit_lines(y, 64, 100, 0, start, 1, out, &rms), -1);
    /* all zeros: nothing to fit */
    double zero[64] = {0};
    start[0].frequency = 10;
    assert_int_equal(an_fit_lines(zero, 64, 100, 0, start, 1, out, &rms), -1);
    assert_int_equal(gsl_errors, 0);
}

/* ---- the per-shot pipeline ------------------------------------------------------- */

static void test_settings_default_as_documented(void **state) {
    (void)state;
    an_settings s;
    memset(&s, 0xff, sizeof s);
    an_settings_default(&s);
    check_close(s.window_from, 0, 0, "window_from");
    check_close(s.window_to, 0, 0, "window_to");
    check_close(s.line_noise, 0, 0, "line_noise");
    check_close(s.apodization, 0, 0, "apodization");
    assert_int_equal(s.zero_fill, 2);
    assert_int_equal(s.max_lines, 4);
    check_close(s.min_snr, 5, 0, "min_snr");
}

static void test_amplitude_is_measured_at_the_end_of_the_pulse(void **state) {
    (void)state;
    /* the pulse ends 30 ms before the acquisition starts: at 4 Hz of
     * linewidth the signal has fallen by exp(-pi 4 0.03) = 0.69 by then */
    truth l = {1000.5, 8e-12, 0.4, 4};
    an_record r = make_record(8192, 8192, 2.030, 2.000, &l, 1, 1e-12, 21);
    an_settings s;
    an_settings_default(&s);
    an_shot out = reduce(&r, &s);
    assert_int_equal(out.nlines, 1);
    check_line(&out.lines[0], &l, 3, "at the pulse end");
    check_close(out.t_ref, 2.000, 0, "t_ref");
    check_close(out.t_first, 2.030, 1e-12, "t_first");
    assert_int_equal(out.n, 8192);
    check_close(out.rate, 8192, 0, "rate");
    check_close(out.mains.fundamental, 0, 0, "no mains removed");
    /* without a pulse the fit's t = 0 is the first sample */
    an_record_free(&r);
    r = make_record(8192, 8192, 2.030, NAN, &l, 1, 1e-12, 21);
    out = reduce(&r, &s);
    assert_int_equal(out.nlines, 1);
    check_close(out.t_ref, 2.030, 1e-12, "t_ref without a pulse");
    check_line(&out.lines[0], &l, 3, "without a pulse");
    an_record_free(&r);
}

static void test_two_lines_are_resolved_strongest_first(void **state) {
    (void)state;
    truth l[] = {{402.0, 3e-12, -1.0, 1.5}, {410.0, 6e-12, 2.0, 2.5}};
    an_record r = make_record(16384, 4096, 0.05, 0.04, l, 2, 5e-13, 31);
    an_settings s;
    an_settings_default(&s);
    an_shot out = reduce(&r, &s);
    assert_int_equal(out.nlines, 2);
    check_line(&out.lines[0], &l[1], 3, "stronger line");
    check_line(&out.lines[1], &l[0], 3, "weaker line");
    /* max_lines 1 keeps the stronger only */
    s.max_lines = 1;
    out = reduce(&r, &s);
    assert_int_equal(out.nlines, 1);
    /* (pulled a little by the line it leaves out) */
    check_close(out.lines[0].frequency, 410.0, 1, "the one line kept");
    an_record_free(&r);
}

/* A line broad against the record's band: its skirt covers every bin, so
 * no band is free of signal; and a broad line beside a strong narrow one,
 * whose skirts and sidelobes fill the bands the specification's SNR uses. */
static void test_broad_lines_are_found_where_skirts_fill_the_band(void **state) {
    (void)state;
    truth broad = {600, 3e-9, 0.5, 60};      /* +-10 W = +-600 Hz: past 0 and Nyquist */
    an_record r = make_record(256, 2000, 1.0, 0.995, &broad, 1, 1e-12, 91);
    an_settings s;
    an_settings_default(&s);
    an_shot out = reduce(&r, &s);
    assert_int_equal(out.nlines, 1);
    check_line(&out.lines[0], &broad, 3, "band-filling line");
    /* the noise then comes from the fit's residual: 2 sigma / sqrt(n)
     * (Parseval, by hand) */
    check_close(out.noise, 2e-12 / 16, 0.15 * 2e-12 / 16, "noise from the residual");
    an_record_free(&r);
    truth pair[] = {{290.6, 1.06e-9, 1, 0.5}, {120.4, 1.19e-9, 0.3, 19.5}};
    r = make_record(1024, 1058.1, 1.0, 0.995, pair, 2, 1e-12, 92);
    out = reduce(&r, &s);
    assert_int_equal(out.nlines, 2);
    check_line(&out.lines[0], &pair[1], 3, "broad line");
    check_line(&out.lines[1], &pair[0], 3, "narrow line");
    an_record_free(&r);
}

static void test_window_and_receiver_sign_are_applied(void **state) {
    (void)state;
    truth l = {250.25, 1, 0.7, 2};
    an_record r = make_record(4096, 2048, 1.0, 0.995, &l, 1, 0.02, 41);
    /* a glitch in the first 5 ms, a record taken with the receiver inverted */
    for (size_t i = 0; i < 10; i++) r.samples[i] += 50.0f;
    for (size_t i = 0; i < r.n; i++) r.samples[i] = -r.samples[i];
    r.receiver_sign = -1;
    an_settings s;
    an_settings_default(&s);
    /* from 5 ms: the first sample at or after it is sample 11 (10.24) */
    s.window_from = 0.005;
    an_shot out = reduce(&r, &s);
    assert_int_equal(out.nlines, 1);
    check_line(&out.lines[0], &l, 3, "windowed, sign -1");
    check_close(out.t_first, 1.0 + 11.0 / 2048, 1e-12, "t_first after the window");
    assert_int_equal(out.n, 4096 - 11);
    /* window_to cuts the end: samples 11 to 2047 */
    s.window_to = 1.0;
    out = reduce(&r, &s);
    assert_int_equal(out.n, 2048 - 11);
    check_line(&out.lines[0], &l, 3, "window to 1 s");
    an_record_free(&r);
}

static void test_noise_alone_gives_no_line_and_its_rms(void **state) {
    (void)state;
    an_record r = make_record(16384, 1000, 0, 0, NULL, 0, 0.5, 51);
    an_settings s;
    an_settings_default(&s);
    an_shot out = reduce(&r, &s);
    assert_int_equal(out.nlines, 0);
    /* source: Parseval, as in test_noise_rms_of_white_noise (by hand) */
    double want = 2 * 0.5 / sqrt(16384.0);
    check_close(out.noise, want, 0.03 * want, "noise");
    check_close(out.rms, 0.5, 0.02, "rms of the trace");
    an_record_free(&r);
}

static void test_snr_is_the_line_height_over_the_noise(void **state) {
    (void)state;
    size_t n = 16384;
    double rate = 2048, sigma = 1e-12, w = 1.0;
    truth l = {500, 2e-11, 0, w};
    an_record r = make_record(n, rate, 0, 0, &l, 1, sigma, 61);
    an_settings s;
    an_settings_default(&s);
    an_shot out = reduce(&r, &s);
    assert_int_equal(out.nlines, 1);
    /* by hand: the unapodized spectrum's height of a line on a bin is A
     * times the mean of its decay over the record, (1 - e^-x) / x with x =
     * pi W T; the noise is 2 sigma / sqrt(n) (Parseval) */
    double x = M_PI * w * (double)n / rate, height = 2e-11 * (1 - exp(-x)) / x;
    double want = height / (2 * sigma / sqrt((double)n));
    check_close(out.lines[0].snr, want, 0.1 * want, "snr");
    /* (the Lorentzian's tail beyond 10 linewidths adds a few per cent at
     * this SNR: the definition's, not an error) */
    check_close(out.noise, 2 * sigma / sqrt((double)n), 0.1 * 2 * sigma / sqrt((double)n),
                "noise");
    /* a line below min_snr is not reported */
    s.min_snr = 2 * want;
    out = reduce(&r, &s);
    assert_int_equal(out.nlines, 0);
    an_record_free(&r);
}

static void test_reduce_refuses_with_a_message(void **state) {
    (void)state;
    truth l = {100, 1, 0, 1};
    an_record r = make_record(1000, 1000, 0, 0, &l, 1, 0.01, 71);
    an_settings s;
    an_settings_default(&s);
    an_work *w = an_work_new();
    an_shot out;
    char err[300] = "";
    s.window_from = 0.99;
    assert_int_equal(an_reduce(w, &r, &s, &out, err, sizeof err), -1);
    assert_non_null(strstr(err, "fewer than 16"));
    an_settings_default(&s);
    s.max_lines = AN_MAX_LINES + 1;
    assert_int_equal(an_reduce(w, &r, &s, &out, err, sizeof err), -1);
    assert_non_null(strstr(err, "max_lines"));
    an_settings_default(&s);
    s.zero_fill = 0;
    assert_int_equal(an_reduce(w, &r, &s, &out, err, sizeof err), -1);
    assert_non_null(strstr(err, "zero_fill"));
    an_settings_default(&s);
    r.samples[500] = NAN;
    assert_int_equal(an_reduce(w, &r, &s, &out, err, sizeof err), -1);
    assert_non_null(strstr(err, "not finite"));
    an_record_free(&r);
    memset(&r, 0, sizeof r);
    an_settings_default(&s);
    assert_int_equal(an_reduce(w, &r, &s, &out, err, sizeof err), -1);
    assert_non_null(strstr(err, "no samples"));
    an_work_free(w);
}

/* ---- averaging ------------------------------------------------------------------------ */

static void test_average_of_alternated_signs_recovers_the_signal(void **state) {
    (void)state;
    enum { SHOTS = 8 };
    truth l = {333.3, 1e-12, 0.9, 2};
    an_average a;
    an_average_init(&a);
    char err[300] = "";
    for (int k = 0; k < SHOTS; k++) {
        an_record r = make_record(4096, 2048, 0.1, 0.1, &l, 1, 1e-12, 81 + (unsigned)k);
        /* odd shots taken with the pulse reversed: the signal inverted */
        if (k % 2) {
            for (size_t i = 0; i < r.n; i++) r.samples[i] = -r.samples[i];
            r.receiver_sign = -1;
        }
        r.shot = k + 1;
        assert_int_equal(an_average_add(&a, &r, err, sizeof err), 0);
        an_record_free(&r);
    }
    assert_int_equal(an_average_finish(&a), 0);
    an_record avg = a.sum;
    an_average_free(&a);        /* leaves the finished record to us */
    assert_int_equal(avg.receiver_sign, 1);
    assert_int_equal(avg.n, 4096);
    an_record clean = make_record(4096, 2048, 0.1, 0.1, &l, 1, 0, 1);
    double rms = 0;
    for (size_t i = 0; i < avg.n; i++) rms += pow(avg.samples[i] - clean.samples[i], 2);
    rms = sqrt(rms / (double)avg.n);
    /* the noise left is 1e-12 / sqrt(8) (by hand) */
    check_close(rms, 1e-12 / sqrt(SHOTS), 0.05e-12, "noise of the average");
    an_settings s;
    an_settings_default(&s);
    an_shot out = reduce(&avg, &s);
    assert_int_equal(out.nlines, 1);
    check_line(&out.lines[0], &l, 3, "average");
    an_record_free(&avg);
    an_record_free(&clean);
}

static void test_average_refuses_records_that_differ(void **state) {
    (void)state;
    truth l = {50, 1, 0, 1};
    an_record r = make_record(1000, 1000, 0.5, 0.5, &l, 1, 0, 1);
    an_record shorter = make_record(999, 1000, 0.5, 0.5, &l, 1, 0, 1);
    an_record slower = make_record(1000, 999, 0.5, 0.5, &l, 1, 0, 1);
    an_record later = make_record(1000, 1000, 0.501, 0.5, &l, 1, 0, 1);
    shorter.shot = 2, slower.shot = 3, later.shot = 4;
    an_average a;
    an_average_init(&a);
    char err[400] = "";
    assert_int_equal(an_average_finish(&a), -1);     /* empty */
    assert_int_equal(an_average_add(&a, &r, err, sizeof err), 0);
    assert_int_equal(an_average_add(&a, &shorter, err, sizeof err), -1);
    assert_non_null(strstr(err, "shot 2: 999 samples"));
    assert_int_equal(an_average_add(&a, &slower, err, sizeof err), -1);
    assert_non_null(strstr(err, "shot 3"));
    assert_int_equal(an_average_add(&a, &later, err, sizeof err), -1);
    assert_non_null(strstr(err, "shot 4"));
    assert_int_equal(a.count, 1);
    an_average_free(&a);        /* unfinished: frees everything */
    an_record_free(&r);
    an_record_free(&shorter);
    an_record_free(&slower);
    an_record_free(&later);
}

static const char *build_dir(void) {
    const char *b = getenv("B");
    return b && *b ? b : "build";
}

/* ---- cases for the reference check (tests/ref/analysis_fit.py) ------------------------ */

static json_t *reals(const double *v, size_t n) {
    json_t *a = json_array();
    for (size_t i = 0; i < n; i++) json_array_append_new(a, json_real(v[i]));
    return a;
}

static json_t *lines_json(const an_line_fit *l, size_t n, bool errors) {
    json_t *a = json_array();
    for (size_t k = 0; k < n; k++) {
        double v[] = {l[k].frequency, l[k].amplitude, l[k].phase, l[k].linewidth};
        double e[] = {l[k].frequency_err, l[k].amplitude_err, l[k].phase_err,
                      l[k].linewidth_err};
        json_array_append_new(a, reals(errors ? e : v, 4));
    }
    return a;
}

typedef struct {
    const char *name;
    size_t n;
    double rate, t_start, sigma, apodization;
    int zero_fill;
    size_t nlines;
    truth l[2];
    bool well_conditioned;
} ref_case;

/* One case: the trace, our spectrum of it, and our fit from a start near
 * the truth, as one JSON line. */
static char *case_line(an_work *w, const ref_case *c, unsigned long seed) {
    double *y = malloc(c->n * sizeof *y);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);
    synth(y, c->n, c->rate, c->t_start, 0, c->l, c->nlines, c->sigma, rng);
    an_line_fit start[2], fit[2];
    for (size_t k = 0; k < c->nlines; k++)
        start[k] = start_near(&c->l[k], 0.2 * c->l[k].linewidth + 0.01, 0.1, 0.1,
                              0.3 * c->l[k].linewidth + 0.05);
    double rms;
    gsl_errors = 0;
    if (an_fit_lines(y, c->n, c->rate, c->t_start, start, c->nlines, fit, &rms))
        fail_msg("case %s: fit failed", c->name);
    assert_int_equal(gsl_errors, 0);
    for (size_t k = 0; k < c->nlines; k++) check_line(&fit[k], &c->l[k], 4, c->name);
    an_spectrum s;
    assert_int_equal(an_spectrum_of(w, y, c->n, c->rate, c->apodization, c->zero_fill, &s), 0);
    json_t *o = json_pack("{s:s, s:f, s:f, s:f, s:i, s:I, s:f, s:f, s:b, s:o, s:o, s:o, s:o, "
                          "s:o, s:o, s:f}", "name", c->name, "rate", c->rate, "t_start",
                          c->t_start, "apodization", c->apodization, "zero_fill", c->zero_fill,
                          "bins", (json_int_t)s.n, "df", s.df, "scale", s.scale,
                          "well_conditioned", c->well_conditioned, "y", reals(y, c->n), "re",
                          reals(s.re, s.n), "im", reals(s.im, s.n), "start",
                          lines_json(start, c->nlines, false), "fit",
                          lines_json(fit, c->nlines, false), "err",
                          lines_json(fit, c->nlines, true), "rms", rms);
    assert_non_null(o);
    char *line = json_dumps(o, JSON_COMPACT);
    json_decref(o);
    gsl_rng_free(rng);
    free(y);
    return line;
}

static void test_cases_written_for_numpy_and_scipy(void **state) {
    (void)state;
    static const ref_case cases[] = {
        {"one line", 2048, 1000, 0, 0.1, 0, 2, 1, {{123.4, 1, 0.5, 2}}, true},
        {"apodized, zero filled to 3x", 1500, 1000, 0, 0.1, 1.5, 3, 1, {{77.7, 2, -1, 1}}, true},
        {"prime length", 1021, 800, 0, 0.05, 0, 1, 1, {{200.2, 1, 3, 5}}, true},
        {"in tesla, t = 0 before the record", 4096, 4096, 0.02, 1e-12, 0, 2, 1,
         {{1500.3, 8e-12, 0.4, 4}}, true},
        {"short record, T2* = 5 record lengths", 1000, 5000, 0.01, 2e-13, 0, 2, 1,
         {{731.3, 1e-11, 1.2, 1 / (M_PI * 1.0)}}, false},
        {"two lines", 4096, 2048, 0.01, 0.05, 0, 2, 2, {{402, 0.5, -1, 1.5}, {410, 1, 2, 2.5}},
         true},
        {"weak line, SNR 6", 2048, 1000, 0, 0.3, 0, 2, 1, {{300, 0.5, 0, 1}}, true},
        /* a line at the noise (SNR 2), determined to ~3 sigma: the minimum is
         * flat, and Gauss-Newton steps converge slowly there */
        {"line at the noise", 2048, 1000, 0, 1, 0, 2, 1, {{300, 0.5, 0, 1}}, false},
        {"broad line", 2048, 1000, 0, 0.05, 0, 2, 1, {{250, 1, -2.5, 30}}, true},
    };
    const char *folder = build_dir();
    char dir[512], path[600], tmp[620];
    snprintf(dir, sizeof dir, "%s/tests", folder);
    mkdir(folder, 0777);
    mkdir(dir, 0777);
    snprintf(path, sizeof path, "%s/analysis_cases.jsonl", dir);
    snprintf(tmp, sizeof tmp, "%s.part", path);
    FILE *f = fopen(tmp, "w");
    if (!f) fail_msg("cannot write %s", tmp);
    an_work *w = an_work_new();
    for (size_t k = 0; k < sizeof cases / sizeof *cases; k++)
        for (unsigned long seed = 1; seed <= 3; seed++) {
            char *line = case_line(w, &cases[k], 1000 * k + seed);
            fprintf(f, "%s\n", line);
            free(line);
        }
    an_work_free(w);
    if (fclose(f) != 0) fail_msg("cannot write %s", tmp);
    /* whole or not at all: the reference check never reads half a file */
    if (rename(tmp, path) != 0) fail_msg("cannot rename %s to %s", tmp, path);
}

int main(void) {
    gsl_set_error_handler(count_gsl_error);
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_cosine_on_a_bin_has_its_amplitude_there),
        cmocka_unit_test(test_zero_filling_goes_to_a_fast_length),
        cmocka_unit_test(test_apodization_adds_its_linewidth),
        cmocka_unit_test(test_peaks_come_strongest_first_between_bins),
        cmocka_unit_test(test_noise_rms_of_white_noise),
        cmocka_unit_test(test_prepare_cuts_the_window_removes_dc_and_applies_the_sign),
        cmocka_unit_test(test_fit_finds_a_damped_sinusoid_within_three_sigma),
        cmocka_unit_test(test_fit_errors_are_one_sigma_over_many_draws),
        cmocka_unit_test(test_linewidth_is_one_over_pi_t2star),
        cmocka_unit_test(test_record_short_against_t2star_still_gives_t2star),
        cmocka_unit_test(test_fit_gives_positive_amplitude_and_phase_in_range),
        cmocka_unit_test(test_fit_refuses_what_it_cannot_fit),
        cmocka_unit_test(test_settings_default_as_documented),
        cmocka_unit_test(test_amplitude_is_measured_at_the_end_of_the_pulse),
        cmocka_unit_test(test_two_lines_are_resolved_strongest_first),
        cmocka_unit_test(test_broad_lines_are_found_where_skirts_fill_the_band),
        cmocka_unit_test(test_window_and_receiver_sign_are_applied),
        cmocka_unit_test(test_noise_alone_gives_no_line_and_its_rms),
        cmocka_unit_test(test_snr_is_the_line_height_over_the_noise),
        cmocka_unit_test(test_reduce_refuses_with_a_message),
        cmocka_unit_test(test_average_of_alternated_signs_recovers_the_signal),
        cmocka_unit_test(test_average_refuses_records_that_differ),
        cmocka_unit_test(test_cases_written_for_numpy_and_scipy),
    };
    return cmocka_run_group_tests_name("analysis", tests, NULL, NULL);
}
