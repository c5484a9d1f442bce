/* test_mains: the line-noise removal (an_remove_mains in analysis.h) as
 * cmocka tests: a comb 100 times above a line 3 Hz away removed to the
 * noise with the line left as it was, a drifted fundamental found, a trace
 * without a comb left alone, the harmonics counted, every refusal. It also
 * writes $B/tests/mains_cases.jsonl, which tests/ref/mains_ref.py checks
 * against numpy and scipy. Not for the per-shot pipeline that calls it. */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <errno.h>
#include <fftw3.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <jansson.h>
#include <math.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "analysis.h"

/* Set by the GSL error handler main installs: an_remove_mains must never
 * get GSL to report an error (its default handler aborts the process). */
static int gsl_errors;

static void count_gsl_error(const char *reason, const char *file, int line, int gsl_errno) {
    (void)reason, (void)file, (void)line, (void)gsl_errno;
    gsl_errors++;
}

/* ---- scenes: a comb, a damped line and white noise ---------------------- */

typedef struct {
    double fundamental;     /* Hz; 0: no comb */
    size_t nharmonics;
    double amplitude[32], phase[32];
} comb;

typedef struct {
    size_t n;
    double rate;
    double *clean;      /* the line and the noise */
    double *trace;      /* clean + the comb */
    double noise;       /* rms of the noise per sample */
} scene;

/* The line: amplitude exp(-t / t2) cos(2 pi frequency t + 0.3), t = i / rate. */
typedef struct {
    double amplitude, frequency, t2;
} line;

static void scene_make(scene *s, size_t n, double rate, const comb *c, const line *l,
                       double noise, unsigned long seed) {
    s->n = n;
    s->rate = rate;
    s->noise = noise;
    s->clean = malloc(n * sizeof *s->clean);
    s->trace = malloc(n * sizeof *s->trace);
    assert_non_null(s->clean);
    assert_non_null(s->trace);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);
    for (size_t i = 0; i < n; i++) {
        double t = (double)i / rate, v = 0;
        if (l) v += l->amplitude * exp(-t / l->t2) * cos(2 * M_PI * l->frequency * t + 0.3);
        v += gsl_ran_gaussian_ziggurat(rng, noise);
        s->clean[i] = v;
        double m = 0;
        for (size_t h = 0; c && h < c->nharmonics; h++) {
            double w = 2 * M_PI * (double)(h + 1) * c->fundamental;
            m += c->amplitude[h] * cos(w * t + c->phase[h]);
        }
        s->trace[i] = v + m;
    }
    gsl_rng_free(rng);
}

static void scene_free(scene *s) {
    free(s->clean);
    free(s->trace);
}

/* A comb with amplitude top / h at harmonic h and phases drawn from seed. */
static comb falling_comb(double fundamental, size_t nharmonics, double top, unsigned long seed) {
    comb c = {fundamental, nharmonics, {0}, {0}};
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);
    for (size_t h = 0; h < nharmonics; h++) {
        c.amplitude[h] = top / (double)(h + 1);
        c.phase[h] = 2 * M_PI * gsl_rng_uniform(rng);
    }
    gsl_rng_free(rng);
    return c;
}

/* |DFT| of y (unscaled, bins rate / n apart), n / 2 + 1 values (malloc'd). */
static double *magnitude(const double *y, size_t n) {
    size_t nb = n / 2 + 1;
    double *in = fftw_malloc(n * sizeof *in), *mag = malloc(nb * sizeof *mag);
    fftw_complex *out = fftw_malloc(nb * sizeof *out);
    assert_true(in && mag && out);
    fftw_plan p = fftw_plan_dft_r2c_1d((int)n, in, out, FFTW_ESTIMATE);
    memcpy(in, y, n * sizeof *in);
    fftw_execute(p);
    for (size_t k = 0; k < nb; k++) mag[k] = hypot(out[k][0], out[k][1]);
    fftw_destroy_plan(p);
    fftw_free(in);
    fftw_free(out);
    return mag;
}

/* The largest |DFT| within +-half Hz of centre. */
static double largest_near(const double *mag, size_t n, double rate, double centre, double half) {
    double df = rate / (double)n, best = 0;
    for (size_t k = 0; k <= n / 2; k++) {
        double f = (double)k * df;
        if (fabs(f - centre) <= half && mag[k] > best) best = mag[k];
    }
    return best;
}

static double rms_difference(const double *a, const double *b, size_t n) {
    double sum = 0;
    for (size_t i = 0; i < n; i++) sum += (a[i] - b[i]) * (a[i] - b[i]);
    return sqrt(sum / (double)n);
}

static int remove_mains(double *y, size_t n, double rate, double nominal, double search,
                        an_mains *out) {
    gsl_errors = 0;
    int rc = an_remove_mains(y, n, rate, nominal, search, out);
    if (gsl_errors) fail_msg("GSL reported %d error(s)", gsl_errors);
    return rc;
}

/* The reference scene of the first tests: 4096 Hz, 16384 samples (4 s),
 * 32 harmonics of 50 Hz of 100 / h, a line of 1 at 53 Hz (T2 0.2 s),
 * noise 0.5 rms. */
#define RATE 4096.0
#define N 16384
static const line nmr = {1, 53, 0.2};

static void test_comb_100x_above_a_line_3_hz_away_is_removed_to_the_noise(void **state) {
    (void)state;
    comb c = falling_comb(50, 32, 100, 11);
    scene s;
    scene_make(&s, N, RATE, &c, &nmr, 0.5, 1);
    an_mains m;
    double *before = magnitude(s.trace, N);
    assert_int_equal(remove_mains(s.trace, N, RATE, 50, 0.5, &m), 0);
    double *after = magnitude(s.trace, N);
    /* White noise of rms sigma has |DFT| of rms sigma sqrt(n) in every bin
     * (Parseval; common practice, no source). */
    double bin_noise = s.noise * sqrt((double)N);
    for (size_t h = 1; h <= 32; h++) {
        double centre = 50.0 * (double)h;
        double was = largest_near(before, N, RATE, centre, 0.5);
        double left = largest_near(after, N, RATE, centre, 0.5);
        if (!(was > 100 * bin_noise)) fail_msg("harmonic %zu: the comb was not there", h);
        if (!(left < 5 * bin_noise))
            fail_msg("harmonic %zu: %.3g left near %.0f Hz, noise %.3g", h, left, centre, bin_noise);
    }
    free(before);
    free(after);
    scene_free(&s);
}

static void test_line_3_hz_from_the_comb_keeps_its_height_and_frequency(void **state) {
    (void)state;
    comb c = falling_comb(50, 32, 100, 11);
    scene s;
    scene_make(&s, N, RATE, &c, &nmr, 0.5, 2);
    an_mains m;
    assert_int_equal(remove_mains(s.trace, N, RATE, 50, 0.5, &m), 0);
    double *clean = magnitude(s.clean, N), *cleaned = magnitude(s.trace, N);
    double df = RATE / N, bin_noise = s.noise * sqrt((double)N);
    size_t peak_clean = (size_t)(52 / df), peak_cleaned = peak_clean;
    for (size_t k = peak_clean; k <= (size_t)(54 / df); k++) {
        if (clean[k] > clean[peak_clean]) peak_clean = k;
        if (cleaned[k] > cleaned[peak_cleaned]) peak_cleaned = k;
    }
    assert_int_equal(peak_cleaned, peak_clean);
    /* The same noise in both: the peaks fall in the same bin (the noise may
     * move it a bin or two from 53 Hz in both alike). */
    if (!(fabs((double)peak_clean * df - 53) <= 1))
        fail_msg("line at %.3f Hz", (double)peak_clean * df);
    if (!(fabs(cleaned[peak_cleaned] - clean[peak_clean]) < bin_noise))
        fail_msg("line height %.4g after removal, %.4g without a comb (noise %.3g)",
                 cleaned[peak_cleaned], clean[peak_clean], bin_noise);
    /* What was removed beyond the comb: the noise's projection on the 64
     * sinusoids, rms sigma sqrt(64 / n) (common practice, no source), and a
     * little of the line's tail at 50 Hz. */
    double projection = s.noise * sqrt(64.0 / N);
    double off = rms_difference(s.trace, s.clean, N);
    if (!(off < 2 * projection))
        fail_msg("cleaned trace %.3g rms from the clean one, noise projection %.3g", off,
                 projection);
    free(clean);
    free(cleaned);
    scene_free(&s);
}

static void test_fitted_amplitudes_are_the_combs_within_the_noise(void **state) {
    (void)state;
    comb c = falling_comb(50, 32, 100, 12);
    scene s;
    scene_make(&s, N, RATE, &c, &nmr, 0.5, 3);
    an_mains m;
    assert_int_equal(remove_mains(s.trace, N, RATE, 50, 0.5, &m), 0);
    assert_int_equal(m.nharmonics, 32);
    /* An amplitude fitted over n samples of noise sigma is uncertain by
     * sigma sqrt(2 / n) (common practice, no source); the fundamental also
     * takes up the line's tail, about 0.015 here. */
    double sigma = s.noise * sqrt(2.0 / N);
    for (size_t h = 0; h < 32; h++) {
        double allowed = 5 * sigma + (h == 0 ? 0.03 : 0);
        if (!(fabs(m.amplitude[h] - c.amplitude[h]) < allowed))
            fail_msg("harmonic %zu: %.6f fitted, %.6f in the comb", h + 1, m.amplitude[h],
                     c.amplitude[h]);
    }
    double comb_rms = 0;
    for (size_t h = 0; h < 32; h++) comb_rms += 0.5 * c.amplitude[h] * c.amplitude[h];
    assert_true(fabs(m.rms_removed - sqrt(comb_rms)) < 1e-3 * sqrt(comb_rms));
    scene_free(&s);
}

/* The fundamental found from a drifted comb of nh harmonics, within
 * fraction / T. */
static void check_drift(double truth, size_t nh, double nominal, double search, double fraction) {
    comb c = falling_comb(truth, nh, 100, 13);
    scene s;
    scene_make(&s, N, RATE, &c, &nmr, 0.5, 4);
    an_mains m;
    assert_int_equal(remove_mains(s.trace, N, RATE, nominal, search, &m), 0);
    double t = N / RATE;
    if (!(fabs(m.fundamental - truth) < fraction / t))
        fail_msg("fundamental %.9f Hz found, %.9f Hz in the trace (1/T = %.3g Hz)",
                 m.fundamental, truth, 1 / t);
    double off = rms_difference(s.trace, s.clean, N);
    assert_true(off < 2 * s.noise * sqrt(64.0 / N));
    scene_free(&s);
}

static void test_drifted_fundamental_49_9_is_found_within_1e_3_of_1_over_t(void **state) {
    (void)state;
    check_drift(49.9, 32, 50, 0.5, 1e-3);
}

static void test_fundamentals_across_the_search_range_are_found(void **state) {
    (void)state;
    check_drift(49.93, 32, 50, 0.5, 1e-3);
    check_drift(50.37, 32, 50, 0.5, 1e-3);
    check_drift(59.61, 30, 60, 0.5, 1e-3);     /* 30 x 60.5 < 1843 Hz <= 31 x 60.5 */
}

static void test_comb_of_odd_harmonics_without_fundamental_is_found(void **state) {
    (void)state;
    comb c = {50.21, 9, {0, 0, 40, 0, 25, 0, 10, 0, 5}, {0, 0, 1, 0, 2, 0, 3, 0, 4}};
    scene s;
    scene_make(&s, N, RATE, &c, &nmr, 0.5, 5);
    an_mains m;
    assert_int_equal(remove_mains(s.trace, N, RATE, 50, 0.5, &m), 0);
    assert_true(fabs(m.fundamental - 50.21) < 1e-3 * RATE / N);
    assert_true(fabs(m.amplitude[2] - 40) < 0.05);
    assert_true(m.amplitude[0] < 0.05);
    assert_true(rms_difference(s.trace, s.clean, N) < 2 * s.noise * sqrt(64.0 / N));
    scene_free(&s);
}

static void test_trace_without_comb_is_left_essentially_untouched(void **state) {
    (void)state;
    scene s;
    scene_make(&s, N, RATE, NULL, &nmr, 0.5, 6);
    an_mains m;
    assert_int_equal(remove_mains(s.trace, N, RATE, 50, 0.5, &m), 0);
    /* Only the noise's projection on the 64 sinusoids goes (the search
     * picks the fundamental that takes most, so up to about twice), and a
     * little of the line's tail. */
    double projection = s.noise * sqrt(64.0 / N);
    if (!(m.rms_removed < 2 * projection))
        fail_msg("%.3g rms removed from a trace without a comb, projection %.3g",
                 m.rms_removed, projection);
    assert_true(fabs(rms_difference(s.trace, s.clean, N) - m.rms_removed) < 1e-12);
    for (size_t h = 0; h < 32; h++) assert_true(m.amplitude[h] < 10 * s.noise * sqrt(2.0 / N));
    scene_free(&s);
}

/* Without noise the fit is exact but for how closely the fundamental is
 * refined: to a phase of 1e-5 rad at the top harmonic, which leaves at
 * most about 1e-5 of the comb. */
static void test_noise_free_comb_is_removed_to_1e_5_of_itself(void **state) {
    (void)state;
    comb c = falling_comb(50.13, 32, 1e-12, 14);     /* 1 pT: the scale of a record */
    scene s;
    scene_make(&s, 10000, RATE, &c, NULL, 0, 7);      /* not a multiple of 1024 */
    an_mains m;
    assert_int_equal(remove_mains(s.trace, s.n, RATE, 50, 0.5, &m), 0);
    if (!(fabs(m.fundamental - 50.13) < 1e-6)) fail_msg("fundamental %.9f", m.fundamental); /* 1/T = 0.41 Hz */
    double left = rms_difference(s.trace, s.clean, s.n);
    if (!(left < 1e-5 * m.rms_removed)) fail_msg("%.3g left of a %.3g comb", left, m.rms_removed);
    for (size_t h = 0; h < 32; h++)
        assert_true(fabs(m.amplitude[h] - c.amplitude[h]) < 1e-5 * c.amplitude[0]);
    scene_free(&s);
}

/* Traces of different lengths, each cleaned on its own thread over and
 * over while the others plan FFTs of their lengths: FFTW's planner is not
 * thread-safe, and every result must be the one the same trace gives alone. */
enum { WORKERS = 4, ROUNDS = 25 };

typedef struct {
    scene s;
    double *alone;          /* the trace cleaned with no other thread running */
    an_mains m_alone;
    int mismatches;         /* counted by the worker: cmocka asserts stay on main */
} mains_job;

static void *clean_over_and_over(void *arg) {
    mains_job *j = arg;
    double *y = malloc(j->s.n * sizeof *y);
    for (int r = 0; r < ROUNDS && y; r++) {
        memcpy(y, j->s.trace, j->s.n * sizeof *y);
        an_mains m;
        if (an_remove_mains(y, j->s.n, RATE, 50, 0.5, &m) != 0 ||
            m.fundamental != j->m_alone.fundamental ||
            memcmp(y, j->alone, j->s.n * sizeof *y) != 0)
            j->mismatches++;
    }
    if (!y) j->mismatches = -1;
    free(y);
    return NULL;
}

static void test_threads_cleaning_at_once_get_what_each_gets_alone(void **state) {
    (void)state;
    static const size_t lengths[WORKERS] = {10000, 9973, 12288, 8191};
    mains_job job[WORKERS];
    pthread_t t[WORKERS];
    for (int k = 0; k < WORKERS; k++) {
        comb c = falling_comb(50.07 + 0.01 * k, 12, 1e-12, 30 + (unsigned long)k);
        line l = {2e-12, 317.0 + k, 0.5};
        scene_make(&job[k].s, lengths[k], RATE, &c, &l, 1e-14, 40 + (unsigned long)k);
        job[k].alone = malloc(lengths[k] * sizeof(double));
        assert_non_null(job[k].alone);
        memcpy(job[k].alone, job[k].s.trace, lengths[k] * sizeof(double));
        assert_int_equal(remove_mains(job[k].alone, lengths[k], RATE, 50, 0.5, &job[k].m_alone),
                         0);
        job[k].mismatches = 0;
    }
    for (int k = 0; k < WORKERS; k++)
        assert_int_equal(pthread_create(&t[k], NULL, clean_over_and_over, &job[k]), 0);
    for (int k = 0; k < WORKERS; k++) pthread_join(t[k], NULL);
    for (int k = 0; k < WORKERS; k++) {
        if (job[k].mismatches != 0)
            fail_msg("length %zu: %d of %d rounds differ from the trace cleaned alone",
                     lengths[k], job[k].mismatches, ROUNDS);
        scene_free(&job[k].s);
        free(job[k].alone);
    }
}

static void test_silent_trace_has_nothing_removed(void **state) {
    (void)state;
    double y[1000] = {0};
    an_mains m;
    assert_int_equal(remove_mains(y, 1000, 1000, 50, 0.5, &m), 0);
    assert_true(m.rms_removed == 0);
    assert_true(m.fundamental >= 49.5 && m.fundamental <= 50.5);
    for (size_t h = 0; h < 32; h++) assert_true(m.amplitude[h] == 0);
    for (size_t i = 0; i < 1000; i++) assert_true(y[i] == 0);
}

static void test_two_and_a_half_cycles_are_enough(void **state) {
    (void)state;
    comb c = falling_comb(50, 8, 1, 15);
    scene s;
    scene_make(&s, 51, 1000, &c, NULL, 0, 8);        /* 2.55 cycles of 50 Hz */
    an_mains m;
    assert_int_equal(remove_mains(s.trace, s.n, 1000, 50, 0, &m), 0);
    assert_int_equal(m.nharmonics, 8);
    assert_true(rms_difference(s.trace, s.clean, s.n) < 1e-9);
    scene_free(&s);
}

static void test_search_zero_fits_at_nominal(void **state) {
    (void)state;
    comb c = falling_comb(50.2, 8, 1, 16);
    scene s;
    scene_make(&s, 4000, 1000, &c, NULL, 0.1, 9);
    an_mains m;
    assert_int_equal(remove_mains(s.trace, s.n, 1000, 50, 0, &m), 0);
    assert_true(m.fundamental == 50);
    scene_free(&s);
}

static void test_harmonics_are_those_below_0_45_rate_at_most_32(void **state) {
    (void)state;
    struct {
        double rate, nominal, search;
        size_t want;
    } cases[] = {
        {1000, 50, 0.5, 8},     /* 8 x 50.5 = 404 < 450 <= 9 x 50.5 */
        {1000, 60, 1, 7},       /* 7 x 61 = 427 < 450 <= 8 x 61 */
        {4096, 50, 0.5, 32},    /* 36 below 1843 Hz: at most 32 */
        {1000, 440, 1, 1},      /* 441 < 450: the fundamental only */
        {1000, 470, 1, 1},      /* above 0.45 rate: still the fundamental */
    };
    for (size_t k = 0; k < sizeof cases / sizeof *cases; k++) {
        scene s;
        comb c = falling_comb(cases[k].nominal, 1, 1, 17);
        scene_make(&s, 4000, cases[k].rate, &c, NULL, 0.01, 10 + k);
        an_mains m;
        assert_int_equal(remove_mains(s.trace, s.n, cases[k].rate, cases[k].nominal,
                                      cases[k].search, &m), 0);
        if (m.nharmonics != cases[k].want)
            fail_msg("%g Hz at %g Hz: %zu harmonics, want %zu", cases[k].nominal, cases[k].rate,
                     m.nharmonics, cases[k].want);
        if (!(fabs(m.amplitude[0] - 1) < 1e-3))
            fail_msg("%g Hz at %g Hz: amplitude %.6f at %.6f Hz", cases[k].nominal,
                     cases[k].rate, m.amplitude[0], m.fundamental);
        for (size_t h = m.nharmonics; h < 32; h++) assert_true(m.amplitude[h] == 0);
        scene_free(&s);
    }
}

/* ---- refusals: -1, the trace and the result untouched ------------------ */

static void check_refused(double *y, size_t n, double rate, double nominal, double search) {
    double copy[64];
    size_t keep = y && n <= 64 ? n : 0;
    if (keep) memcpy(copy, y, keep * sizeof *y);
    an_mains m;
    memset(&m, 0x5a, sizeof m);
    an_mains marked = m;
    assert_int_equal(remove_mains(y, n, rate, nominal, search, &m), -1);
    assert_memory_equal(&m, &marked, sizeof m);
    if (keep) assert_memory_equal(copy, y, keep * sizeof *y);
}

static void fill(double *y, size_t n) {
    for (size_t i = 0; i < n; i++) y[i] = sin(0.3 * (double)i);
}

static void test_nominal_at_or_above_nyquist_refused(void **state) {
    (void)state;
    double y[64];
    fill(y, 64);
    check_refused(y, 64, 100, 50, 0);
    check_refused(y, 64, 100, 60, 0);
    check_refused(y, 64, 100, INFINITY, 0);
}

static void test_trace_shorter_than_two_cycles_refused(void **state) {
    (void)state;
    double y[64];
    fill(y, 64);
    check_refused(y, 39, 1000, 50, 0);      /* 1.95 cycles */
    check_refused(y, 40, 1000, 50, 0.5);    /* 1.98 cycles of 49.5 Hz */
    check_refused(y, 0, 1000, 50, 0);
    an_mains m;
    assert_int_equal(remove_mains(y, 41, 1000, 50, 0.5, &m), 0);  /* 2.03 */
}

static void test_bad_arguments_refused(void **state) {
    (void)state;
    double y[64];
    fill(y, 64);
    an_mains m;
    assert_int_equal(remove_mains(NULL, 64, 1000, 50, 0, &m), -1);
    assert_int_equal(remove_mains(y, 64, 1000, 50, 0, NULL), -1);
    check_refused(y, 64, 0, 50, 0);
    check_refused(y, 64, -1000, 50, 0);
    check_refused(y, 64, NAN, 50, 0);
    check_refused(y, 64, INFINITY, 50, 0);
    check_refused(y, 64, 1000, 0, 0);
    check_refused(y, 64, 1000, -50, 0);
    check_refused(y, 64, 1000, NAN, 0);
    check_refused(y, 64, 1000, 50, -0.1);
    check_refused(y, 64, 1000, 50, NAN);
    check_refused(y, 64, 1000, 50, 25);     /* the search would reach 25 Hz */
    y[17] = NAN;
    check_refused(y, 64, 1000, 50, 0);
    y[17] = INFINITY;
    check_refused(y, 64, 1000, 50, 0);
}

/* ---- cases for tests/ref/mains_ref.py ---------------------------------- */

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

/* One case: the trace, what an_remove_mains made of it, as a JSON line
 * (the caller frees it). */
static char *reference_case(const char *name, size_t n, double rate, const comb *c,
                            double noise, unsigned long seed, double nominal, double search) {
    scene s;
    scene_make(&s, n, rate, c, &nmr, noise, seed);
    double *cleaned = malloc(n * sizeof *cleaned);
    assert_non_null(cleaned);
    memcpy(cleaned, s.trace, n * sizeof *cleaned);
    an_mains m;
    assert_int_equal(remove_mains(cleaned, n, rate, nominal, search, &m), 0);
    json_t *o = json_pack("{s:s, s:f, s:f, s:f, s:o, s:f, s:I, s:o, s:f, s:o}", "name", name,
                          "rate", rate, "nominal", nominal, "search", search, "trace",
                          json_reals(s.trace, n), "fundamental", m.fundamental, "nharmonics",
                          (json_int_t)m.nharmonics, "amplitude",
                          json_reals(m.amplitude, m.nharmonics), "rms_removed", m.rms_removed,
                          "cleaned", json_reals(cleaned, n));
    assert_non_null(o);
    char *text = json_dumps(o, JSON_COMPACT);
    json_decref(o);
    assert_non_null(text);
    free(cleaned);
    scene_free(&s);
    return text;
}

static void test_cases_written_for_numpy(void **state) {
    (void)state;
    const char *folder = getenv("B") && *getenv("B") ? getenv("B") : "build";
    char dir[512], path[600], tmp[620];
    snprintf(dir, sizeof dir, "%s/tests", folder);
    snprintf(path, sizeof path, "%s/mains_cases.jsonl", dir);
    snprintf(tmp, sizeof tmp, "%s.part", path);
    make_folders(dir);
    FILE *f = fopen(tmp, "w");
    if (!f) fail_msg("cannot write %s", tmp);
    comb strong = falling_comb(49.97, 17, 100, 21), drifted = falling_comb(49.9, 32, 30, 22);
    comb fast = falling_comb(50.08, 32, 10, 23), none = {0, 0, {0}, {0}};
    char *lines[] = {
        reference_case("comb and line", 4096, 2000, &strong, 0.5, 31, 50, 0.5),
        reference_case("drifted, 3000 samples", 3000, 1000, &drifted, 0.5, 32, 50, 0.5),
        reference_case("48 kHz, 4801 samples", 4801, 48000, &fast, 0.2, 33, 50, 0.5),
        reference_case("no comb", 2048, 1000, &none, 0.5, 34, 50, 0.5),
    };
    for (size_t k = 0; k < sizeof lines / sizeof *lines; k++) {
        fprintf(f, "%s\n", lines[k]);
        free(lines[k]);
    }
    if (fclose(f) != 0) fail_msg("cannot write %s", tmp);
    /* Whole or not at all: the reference check never reads half a file. */
    if (rename(tmp, path) != 0) fail_msg("cannot rename %s to %s", tmp, path);
}

int main(void) {
    gsl_set_error_handler(count_gsl_error);
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_comb_100x_above_a_line_3_hz_away_is_removed_to_the_noise),
        cmocka_unit_test(test_line_3_hz_from_the_comb_keeps_its_height_and_frequency),
        cmocka_unit_test(test_fitted_amplitudes_are_the_combs_within_the_noise),
        cmocka_unit_test(test_drifted_fundamental_49_9_is_found_within_1e_3_of_1_over_t),
        cmocka_unit_test(test_fundamentals_across_the_search_range_are_found),
        cmocka_unit_test(test_comb_of_odd_harmonics_without_fundamental_is_found),
        cmocka_unit_test(test_trace_without_comb_is_left_essentially_untouched),
        cmocka_unit_test(test_noise_free_comb_is_removed_to_1e_5_of_itself),
        cmocka_unit_test(test_silent_trace_has_nothing_removed),
        cmocka_unit_test(test_two_and_a_half_cycles_are_enough),
        cmocka_unit_test(test_search_zero_fits_at_nominal),
        cmocka_unit_test(test_harmonics_are_those_below_0_45_rate_at_most_32),
        cmocka_unit_test(test_nominal_at_or_above_nyquist_refused),
        cmocka_unit_test(test_trace_shorter_than_two_cycles_refused),
        cmocka_unit_test(test_bad_arguments_refused),
        cmocka_unit_test(test_cases_written_for_numpy),
        cmocka_unit_test(test_threads_cleaning_at_once_get_what_each_gets_alone),
    };
    return cmocka_run_group_tests_name("line-noise removal", tests, NULL, NULL);
}
