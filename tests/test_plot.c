/* test_plot: the plots' contract (an_plot_* in analysis.h) as cmocka tests:
 * each writes a whole PNG and SVG, axis labels carry SI-prefixed units,
 * NaN and single points are drawn, and every refusal leaves no file. It also
 * writes sample plots of realistic data to $B/tests/plots/ for a person to
 * look at. Not a check of how the plots look (that is for eyes). */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <dirent.h>
#include <errno.h>
#include <fftw3.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "analysis.h"

#define GAMMA_1H 42.577478518e6 /* Hz/T; source: CODATA 2018 (value from memory) */

/* ---- files ------------------------------------------------------------------ */

typedef struct {
    char dir[64];
    char base[128];
    char err[512];
} scratch;

static int scratch_setup(void **state) {
    scratch *s = calloc(1, sizeof *s);
    if (!s) return -1;
    snprintf(s->dir, sizeof s->dir, "/tmp/test_plot.XXXXXX");
    if (!mkdtemp(s->dir)) return -1;
    snprintf(s->base, sizeof s->base, "%s/plot", s->dir);
    *state = s;
    return 0;
}

static void remove_tree(const char *dir) {
    DIR *d = opendir(dir);
    if (!d) return;
    struct dirent *e;
    char path[512];
    while ((e = readdir(d))) {
        if (strcmp(e->d_name, ".") == 0 || strcmp(e->d_name, "..") == 0) continue;
        snprintf(path, sizeof path, "%s/%s", dir, e->d_name);
        struct stat st;
        if (lstat(path, &st) == 0 && S_ISDIR(st.st_mode)) remove_tree(path);
        else unlink(path);
    }
    closedir(d);
    rmdir(dir);
}

static int scratch_teardown(void **state) {
    scratch *s = *state;
    remove_tree(s->dir);
    free(s);
    return 0;
}

static size_t entries(const char *dir) {
    DIR *d = opendir(dir);
    size_t n = 0;
    if (!d) return 0;
    for (struct dirent *e; (e = readdir(d));)
        n += strcmp(e->d_name, ".") != 0 && strcmp(e->d_name, "..") != 0;
    closedir(d);
    return n;
}

static char *slurp(const char *path, size_t *len) {
    FILE *f = fopen(path, "rb");
    if (!f) return NULL;
    fseek(f, 0, SEEK_END);
    long size = ftell(f);
    fseek(f, 0, SEEK_SET);
    char *buf = size >= 0 ? malloc((size_t)size + 1) : NULL;
    if (buf) {
        *len = fread(buf, 1, (size_t)size, f);
        buf[*len] = '\0';
    }
    fclose(f);
    return buf;
}

/* A PNG of the given size in pixels, more than a blank page's bytes. */
static void check_png(const char *base, unsigned width, unsigned height) {
    char path[256];
    size_t len = 0;
    snprintf(path, sizeof path, "%s.png", base);
    unsigned char *png = (unsigned char *)slurp(path, &len);
    if (!png) fail_msg("no %s", path);
    /* source: PNG specification (ISO/IEC 15948), signature and IHDR layout */
    static const unsigned char signature[8] = {0x89, 'P', 'N', 'G', '\r', '\n', 0x1a, '\n'};
    assert_true(len > 24);
    assert_memory_equal(png, signature, 8);
    assert_memory_equal(png + 12, "IHDR", 4);
    unsigned w = (unsigned)png[16] << 24 | (unsigned)png[17] << 16 | png[18] << 8 | png[19];
    unsigned h = (unsigned)png[20] << 24 | (unsigned)png[21] << 16 | png[22] << 8 | png[23];
    assert_int_equal(w, width);
    assert_int_equal(h, height);
    if (len < 8000 || len > 3000000) fail_msg("%s is %zu bytes: not a drawn page", path, len);
    free(png);
}

/* An SVG document holding each of the NULL-ended texts. */
static void check_svg(const char *base, ...) {
    char path[256];
    size_t len = 0;
    snprintf(path, sizeof path, "%s.svg", base);
    char *svg = slurp(path, &len);
    if (!svg) fail_msg("no %s", path);
    assert_int_equal(strlen(svg), len);
    assert_true(strncmp(svg, "<?xml", 5) == 0 || strncmp(svg, "<svg", 4) == 0);
    assert_non_null(strstr(svg, "<svg"));
    assert_non_null(strstr(svg, "</svg>"));
    va_list ap;
    va_start(ap, base);
    for (const char *t; (t = va_arg(ap, const char *));)
        if (!strstr(svg, t)) fail_msg("%s lacks \"%s\"", path, t);
    va_end(ap);
    if (len > 8000000) fail_msg("%s is %zu bytes", path, len);
    free(svg);
}

/* ---- data --------------------------------------------------------------------- */

/* A shot: a damped line of amplitude a (T) at f Hz with T2* t2 and white
 * noise of rms noise, sampled at rate from t0 for duration, its fit (the
 * line without noise) and the magnitude spectra of both. */
typedef struct {
    double t[20000], y[20000], fit[20000];
    double f[10001], mag[10001], fit_mag[10001];
    double lines[2];
    an_plot_shot d;
} shot_data;

static void magnitude(const double *y, size_t n, double *mag) {
    double *in = fftw_malloc(n * sizeof *in);
    fftw_complex *out = fftw_malloc((n / 2 + 1) * sizeof *out);
    assert_non_null(in);
    assert_non_null(out);
    fftw_plan plan = fftw_plan_dft_r2c_1d((int)n, in, out, FFTW_ESTIMATE);
    memcpy(in, y, n * sizeof *in);
    fftw_execute(plan);
    for (size_t k = 0; k <= n / 2; k++) mag[k] = 2 * hypot(out[k][0], out[k][1]) / (double)n;
    fftw_destroy_plan(plan);
    fftw_free(in);
    fftw_free(out);
}

static void make_shot(shot_data *s, size_t n, double rate, const double *freq,
                      const double *amp, size_t nlines, double noise, gsl_rng *rng) {
    assert_true(n <= 20000 && n % 2 == 0);
    double t0 = 0.021, t2 = 0.25;
    for (size_t i = 0; i < n; i++) {
        double t = (double)i / rate, v = 0;
        for (size_t k = 0; k < nlines; k++)
            v += amp[k] * exp(-t / t2) * cos(2 * M_PI * freq[k] * t + 0.3 * (double)k);
        s->t[i] = t0 + t;
        s->fit[i] = v;
        s->y[i] = v + gsl_ran_gaussian_ziggurat(rng, noise);
    }
    magnitude(s->y, n, s->mag);
    magnitude(s->fit, n, s->fit_mag);
    for (size_t k = 0; k <= n / 2; k++) s->f[k] = (double)k * rate / (double)n;
    for (size_t k = 0; k < nlines; k++) s->lines[k] = freq[k];
    s->d = (an_plot_shot){.title = "shot 12 (point 3): b_detect = 23.5 µT", .units = "T",
                          .n = n, .t = s->t, .y = s->y, .fit = s->fit, .nspec = n / 2 + 1,
                          .f = s->f, .mag = s->mag, .fit_mag = s->fit_mag, .nlines = nlines,
                          .line_frequency = s->lines};
}

/* A relaxation curve: 8 delays from 5 ms to 3 s, 20 pT at T1 = 0.42 s over
 * an offset, with one-sigma errors, its fit and the residuals. */
typedef struct {
    double x[8], y[8], err[8], residual[8], cx[300], cy[300];
    an_plot_curve d;
} series_data;

static double relaxation(double x) { return 19.6e-12 * exp(-x / 0.42) + 0.8e-12; }

static void make_series(series_data *s, bool log_x, gsl_rng *rng) {
    for (size_t i = 0; i < 8; i++) {
        s->x[i] = 0.005 * pow(3.0 / 0.005, (double)i / 7);
        s->err[i] = 0.6e-12;
        s->y[i] = relaxation(s->x[i]) + gsl_ran_gaussian_ziggurat(rng, s->err[i]);
        s->residual[i] = s->y[i] - relaxation(s->x[i]);
    }
    for (size_t i = 0; i < 300; i++) {
        s->cx[i] = log_x ? 0.004 * pow(3.3 / 0.004, (double)i / 299) : 3.1 * (double)i / 299;
        s->cy[i] = relaxation(s->cx[i]);
    }
    s->d = (an_plot_curve){.title = "relaxation at b_relax = 5 µT: T1 = 0.42 ± 0.03 s",
                           .x_name = "relaxation delay", .x_unit = "s",
                           .y_name = "amplitude", .y_unit = "T", .n = 8, .x = s->x,
                           .y = s->y, .y_err = s->err, .ncurve = 300, .curve_x = s->cx,
                           .curve_y = s->cy, .residual = s->residual, .log_x = log_x};
}

/* A dispersion profile: R1 over 12 fields from 1 uT to 50 uT. */
typedef struct {
    double x[12], y[12], err[12];
    an_plot_profile_data d;
} profile_data;

static void make_profile(profile_data *s, gsl_rng *rng) {
    for (size_t i = 0; i < 12; i++) {
        s->x[i] = 1e-6 * pow(50.0, (double)i / 11);
        double r1 = 0.45 + 3.2 / (1 + pow(s->x[i] / 6e-6, 2));
        s->err[i] = 0.05 * r1;
        s->y[i] = r1 + gsl_ran_gaussian_ziggurat(rng, s->err[i]);
    }
    s->d = (an_plot_profile_data){.title = "dispersion of water, 1H", .x_name =
                                  "relaxation field", .x_unit = "T", .y_name = "R1",
                                  .y_unit = "1/s", .n = 12, .x = s->x, .y = s->y,
                                  .y_err = s->err};
}

/* A map: 8 fields from 2 uT to 49.3 uT, each row the normalized spectrum of
 * a proton line (85 Hz to 2.1 kHz) over noise, 0 to 2.5 kHz in 1 Hz bins;
 * log_spaced: fields from 1 uT to 50 uT even on a log axis, out of order.
 * rng NULL: a fixed ripple for noise. */
typedef struct {
    double y[8], magnitude[8 * 2501];
    an_plot_map_data d;
} map_data;

static void make_map(map_data *s, gsl_rng *rng, bool log_spaced) {
    for (size_t r = 0; r < 8; r++) {
        if (log_spaced) s->y[r] = 1e-6 * pow(50.0, (double)((r * 3) % 8) / 7);
        else s->y[r] = 2e-6 + (49.3e-6 - 2e-6) * (double)r / 7;
        double f0 = GAMMA_1H * s->y[r], top = 0, *row = s->magnitude + r * 2501;
        for (size_t c = 0; c < 2501; c++) {
            double df = ((double)c - f0) / 2.5;
            double noise = rng ? fabs(gsl_ran_gaussian_ziggurat(rng, 0.03)) : 0.01 * (c % 3);
            row[c] = 1 / sqrt(1 + df * df) + noise;
            if (row[c] > top) top = row[c];
        }
        for (size_t c = 0; c < 2501; c++) row[c] /= top;
    }
    s->d = (an_plot_map_data){.title = log_spaced ? "field scan, log-spaced: spectra of 8 points"
                                                  : "field scan: spectra of 8 points",
                              .y_name = "detection field", .y_unit = "T", .nrows = 8,
                              .ncols = 2501, .y = s->y, .f_min = 0, .f_max = 2500,
                              .magnitude = s->magnitude};
}

static gsl_rng *rng_new(void) {
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    assert_non_null(rng);
    gsl_rng_set(rng, 7);
    return rng;
}

/* ---- each plot writes both files --------------------------------------------- */

static void test_record_writes_png_and_svg_with_prefixed_labels(void **state) {
    scratch *s = *state;
    shot_data *d = malloc(sizeof *d);
    gsl_rng *rng = rng_new();
    double f[1] = {1000.3}, a[1] = {20e-12};
    make_shot(d, 10000, 10000, f, a, 1, 3e-12, rng);
    int rc = an_plot_record(s->base, &d->d, s->err, sizeof s->err);
    if (rc) fail_msg("%s", s->err);
    check_png(s->base, 1200, 900);
    check_svg(s->base, "signal (pT)", "magnitude (pT)", "time from shot start (s)",
              "frequency (Hz)", "1000.3 Hz", "b_detect = 23.5 µT", NULL);
    assert_int_equal(entries(s->dir), 2);
    gsl_rng_free(rng);
    free(d);
}

static void test_series_writes_png_and_svg_with_prefixed_labels(void **state) {
    scratch *s = *state;
    series_data d;
    gsl_rng *rng = rng_new();
    make_series(&d, false, rng);
    int rc = an_plot_series(s->base, &d.d, s->err, sizeof s->err);
    if (rc) fail_msg("%s", s->err);
    check_png(s->base, 1000, 820);
    check_svg(s->base, "amplitude (pT)", "relaxation delay (s)", "residual", NULL);
    assert_int_equal(entries(s->dir), 2);
    gsl_rng_free(rng);
}

static void test_series_without_residual_is_one_panel_high(void **state) {
    scratch *s = *state;
    series_data d;
    gsl_rng *rng = rng_new();
    make_series(&d, true, rng);
    d.d.residual = NULL;
    d.d.log_y = true;
    int rc = an_plot_series(s->base, &d.d, s->err, sizeof s->err);
    if (rc) fail_msg("%s", s->err);
    check_png(s->base, 1000, 680);
    check_svg(s->base, "amplitude (pT)", NULL);
    gsl_rng_free(rng);
}

static void test_profile_writes_png_and_svg_with_prefixed_labels(void **state) {
    scratch *s = *state;
    profile_data d;
    gsl_rng *rng = rng_new();
    make_profile(&d, rng);
    int rc = an_plot_profile(s->base, &d.d, s->err, sizeof s->err);
    if (rc) fail_msg("%s", s->err);
    check_png(s->base, 1000, 680);
    check_svg(s->base, "relaxation field (µT)", "R1 (1/s)", NULL);
    gsl_rng_free(rng);
}

static void test_map_writes_png_and_svg_with_prefixed_labels(void **state) {
    scratch *s = *state;
    map_data *d = malloc(sizeof *d);
    gsl_rng *rng = rng_new();
    make_map(d, rng, false);
    int rc = an_plot_map(s->base, &d->d, s->err, sizeof s->err);
    if (rc) fail_msg("%s", s->err);
    check_png(s->base, 1100, 800);
    check_svg(s->base, "detection field (µT)", "frequency (Hz)", "8 points", NULL);
    gsl_rng_free(rng);
    free(d);
}

static void test_map_of_log_spaced_fields_has_a_log_axis(void **state) {
    scratch *s = *state;
    map_data *d = malloc(sizeof *d);
    make_map(d, NULL, true);
    int rc = an_plot_map(s->base, &d->d, s->err, sizeof s->err);
    if (rc) fail_msg("%s", s->err);
    check_svg(s->base, "detection field (µT) up (log axis)", NULL);
    free(d);
}

static void test_map_of_even_fields_has_a_linear_axis(void **state) {
    scratch *s = *state;
    map_data *d = malloc(sizeof *d);
    make_map(d, NULL, false);
    int rc = an_plot_map(s->base, &d->d, s->err, sizeof s->err);
    if (rc) fail_msg("%s", s->err);
    check_svg(s->base, "detection field (µT) up;", NULL);
    free(d);
}

/* ---- prefixes ---------------------------------------------------------------- */

/* The y axis label of a two-point series of values around v in unit. */
static void check_y_label(scratch *s, double v, const char *unit, const char *label) {
    double x[2] = {0, 1}, y[2] = {v, 0.5 * v};
    an_plot_curve c = {.title = "prefix", .x_name = "delay", .x_unit = "s", .y_name = "amplitude",
                       .y_unit = unit, .n = 2, .x = x, .y = y};
    int rc = an_plot_series(s->base, &c, s->err, sizeof s->err);
    if (rc) fail_msg("%s", s->err);
    check_svg(s->base, label, NULL);
}

static void test_prefix_picks_pT_for_2e_11_T(void **state) {
    check_y_label(*state, 2e-11, "T", "amplitude (pT)");
}

static void test_prefix_follows_the_data_from_fT_to_mT(void **state) {
    scratch *s = *state;
    check_y_label(s, 7e-15, "T", "amplitude (fT)");
    check_y_label(s, 3e-9, "T", "amplitude (nT)");
    check_y_label(s, 49e-6, "T", "amplitude (µT)");
    check_y_label(s, 1e-6, "T", "amplitude (µT)");
    check_y_label(s, 12e-3, "T", "amplitude (mT)");
    check_y_label(s, 1.5, "T", "amplitude (T)");
    check_y_label(s, 0.25, "s", "amplitude (ms)");
    check_y_label(s, 5000, "Hz", "amplitude (Hz)");
    check_y_label(s, 50000, "Hz", "amplitude (kHz)");
    check_y_label(s, 3000, "s", "amplitude (s)");
}

static void test_unit_that_is_not_letters_keeps_no_prefix(void **state) {
    scratch *s = *state;
    check_y_label(s, 2e-3, "1/s", "amplitude (1/s)");
    check_y_label(s, 2e-6, "T/A", "amplitude (T/A)");
    check_y_label(s, 2e-6, "", "amplitude against");
}

/* ---- awkward data ------------------------------------------------------------ */

static void test_nan_points_are_left_out(void **state) {
    scratch *s = *state;
    double x[5] = {0.01, 0.02, NAN, 0.04, 0.05}, y[5] = {5e-12, NAN, 3e-12, 2e-12, 1e-12};
    double e[5] = {1e-13, 1e-13, 1e-13, NAN, 1e-13}, cx[3] = {0, NAN, 0.05};
    double cy[3] = {6e-12, 1, 1e-12};
    an_plot_curve c = {.title = "with gaps", .x_name = "delay", .x_unit = "s",
                       .y_name = "amplitude", .y_unit = "T", .n = 5, .x = x, .y = y,
                       .y_err = e, .ncurve = 3, .curve_x = cx, .curve_y = cy, .residual = y};
    int rc = an_plot_series(s->base, &c, s->err, sizeof s->err);
    if (rc) fail_msg("%s", s->err);
    check_png(s->base, 1000, 820);
    check_svg(s->base, "amplitude (pT)", "delay (ms)", NULL);
}

static void test_single_point_is_plotted(void **state) {
    scratch *s = *state;
    double x[1] = {2e-6}, y[1] = {1.7}, e[1] = {0.1};
    an_plot_profile_data p = {.title = "one field", .x_name = "field", .x_unit = "T",
                              .y_name = "R1", .y_unit = "1/s", .n = 1, .x = x, .y = y,
                              .y_err = e};
    int rc = an_plot_profile(s->base, &p, s->err, sizeof s->err);
    if (rc) fail_msg("%s", s->err);
    check_png(s->base, 1000, 680);
    check_svg(s->base, "field (µT)", NULL);
}

static void test_single_row_map_is_plotted(void **state) {
    scratch *s = *state;
    double y[1] = {10e-6}, m[4] = {0.1, 1, 0.2, 0.05};
    an_plot_map_data d = {.title = "one point", .y_name = "field", .y_unit = "T", .nrows = 1,
                          .ncols = 4, .y = y, .f_min = 0, .f_max = 1000, .magnitude = m};
    int rc = an_plot_map(s->base, &d, s->err, sizeof s->err);
    if (rc) fail_msg("%s", s->err);
    check_png(s->base, 1100, 800);
    check_svg(s->base, "field (µT)", "frequency (Hz)", NULL);
}

static void test_values_not_positive_are_left_out_on_a_log_axis(void **state) {
    scratch *s = *state;
    double x[4] = {1e-6, 2e-6, 0, 4e-6}, y[4] = {1, -2, 3, 0.5};
    an_plot_profile_data p = {.title = "partly positive", .x_name = "field", .x_unit = "T",
                              .y_name = "R1", .y_unit = "1/s", .n = 4, .x = x, .y = y};
    int rc = an_plot_profile(s->base, &p, s->err, sizeof s->err);
    if (rc) fail_msg("%s", s->err);
    check_svg(s->base, "R1 (1/s)", NULL);
}

static void test_title_text_is_escaped_for_svg(void **state) {
    scratch *s = *state;
    double x[2] = {1, 2}, y[2] = {1, 2};
    an_plot_curve c = {.title = "run #3 <b> & \"c\"", .x_name = "current", .x_unit = "A",
                       .y_name = "field", .y_unit = "T", .n = 2, .x = x, .y = y};
    int rc = an_plot_series(s->base, &c, s->err, sizeof s->err);
    if (rc) fail_msg("%s", s->err);
    check_svg(s->base, "<title>run #3 &lt;b&gt; &amp; &quot;c&quot;</title>", NULL);
}

static void test_existing_plots_are_replaced(void **state) {
    scratch *s = *state;
    char path[256];
    snprintf(path, sizeof path, "%s.svg", s->base);
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    fputs("old", f);
    fclose(f);
    check_y_label(s, 2e-11, "T", "amplitude (pT)");
    assert_int_equal(entries(s->dir), 2);
}

static void test_plots_get_the_mode_of_a_new_file(void **state) {
    scratch *s = *state;
    mode_t old = umask(022);
    check_y_label(s, 2e-11, "T", "amplitude (pT)");
    umask(old);
    const char *suffix[2] = {"png", "svg"};
    for (size_t k = 0; k < 2; k++) {
        char path[256];
        struct stat st;
        snprintf(path, sizeof path, "%s.%s", s->base, suffix[k]);
        assert_int_equal(stat(path, &st), 0);
        assert_int_equal(st.st_mode & 0777, 0644);
    }
}

/* ---- refusals ------------------------------------------------------------------ */

static void check_refused(scratch *s, int rc, const char *words) {
    assert_int_equal(rc, -1);
    if (!strstr(s->err, words)) fail_msg("message \"%s\" lacks \"%s\"", s->err, words);
    assert_int_equal(entries(s->dir), 0);
}

static void test_empty_series_refused_leaving_no_file(void **state) {
    scratch *s = *state;
    double x[1] = {0}, y[1] = {0};
    an_plot_curve c = {.title = "empty", .x_name = "delay", .x_unit = "s", .y_name = "a",
                       .y_unit = "T", .n = 0, .x = x, .y = y};
    check_refused(s, an_plot_series(s->base, &c, s->err, sizeof s->err), "nothing to plot");
    assert_non_null(strstr(s->err, s->base));
}

static void test_all_nan_series_refused_leaving_no_file(void **state) {
    scratch *s = *state;
    double x[2] = {NAN, 1}, y[2] = {1, NAN};
    an_plot_curve c = {.title = "nan", .x_name = "delay", .x_unit = "s", .y_name = "a",
                       .y_unit = "T", .n = 2, .x = x, .y = y};
    check_refused(s, an_plot_series(s->base, &c, s->err, sizeof s->err), "no point");
}

static void test_profile_of_values_not_positive_refused(void **state) {
    scratch *s = *state;
    double x[2] = {1e-6, 2e-6}, y[2] = {0, -1};
    an_plot_profile_data p = {.title = "negative", .x_name = "field", .x_unit = "T",
                              .y_name = "R1", .y_unit = "1/s", .n = 2, .x = x, .y = y};
    check_refused(s, an_plot_profile(s->base, &p, s->err, sizeof s->err), "positive");
}

static void test_empty_record_refused_leaving_no_file(void **state) {
    scratch *s = *state;
    double t[2] = {0, 1}, y[2] = {0, 1};
    an_plot_shot d = {.title = "empty", .units = "T", .n = 0, .t = t, .y = y, .nspec = 2,
                      .f = t, .mag = y};
    check_refused(s, an_plot_record(s->base, &d, s->err, sizeof s->err), "record");
    d.n = 2;
    d.nspec = 0;
    check_refused(s, an_plot_record(s->base, &d, s->err, sizeof s->err), "spectrum");
}

static void test_empty_map_refused_leaving_no_file(void **state) {
    scratch *s = *state;
    double y[2] = {1e-6, 2e-6}, m[4] = {NAN, NAN, NAN, NAN};
    an_plot_map_data d = {.title = "empty", .y_name = "field", .y_unit = "T", .nrows = 0,
                          .ncols = 2, .y = y, .f_min = 0, .f_max = 10, .magnitude = m};
    check_refused(s, an_plot_map(s->base, &d, s->err, sizeof s->err), "0 rows");
    d.nrows = 2;
    check_refused(s, an_plot_map(s->base, &d, s->err, sizeof s->err), "finite magnitude");
    m[1] = 1;
    d.f_max = 0;
    check_refused(s, an_plot_map(s->base, &d, s->err, sizeof s->err), "f_min < f_max");
}

static void test_missing_folder_refused_naming_the_path(void **state) {
    scratch *s = *state;
    char base[256];
    snprintf(base, sizeof base, "%s/no/such/folder/plot", s->dir);
    double x[2] = {1, 2}, y[2] = {1, 2};
    an_plot_curve c = {.title = "t", .x_name = "x", .x_unit = "s", .y_name = "y",
                       .y_unit = "T", .n = 2, .x = x, .y = y};
    assert_int_equal(an_plot_series(base, &c, s->err, sizeof s->err), -1);
    if (!strstr(s->err, base)) fail_msg("message \"%s\" does not name %s", s->err, base);
    assert_non_null(strstr(s->err, strerror(ENOENT)));
    assert_int_equal(entries(s->dir), 0);
}

/* The SVG's final name is taken by a folder: the PNG drawn first must not
 * be left behind either, nor any temporary file. */
static void test_failed_rename_leaves_neither_file(void **state) {
    scratch *s = *state;
    char path[256];
    snprintf(path, sizeof path, "%s.svg", s->base);
    assert_int_equal(mkdir(path, 0700), 0);
    char inside[300];
    snprintf(inside, sizeof inside, "%s/keep", path);
    FILE *f = fopen(inside, "w");
    assert_non_null(f);
    fclose(f);
    double x[2] = {1, 2}, y[2] = {1, 2};
    an_plot_curve c = {.title = "t", .x_name = "x", .x_unit = "s", .y_name = "y",
                       .y_unit = "T", .n = 2, .x = x, .y = y};
    assert_int_equal(an_plot_series(s->base, &c, s->err, sizeof s->err), -1);
    if (!strstr(s->err, path)) fail_msg("message \"%s\" does not name %s", s->err, path);
    assert_int_equal(entries(s->dir), 1);      /* the folder plot.svg alone */
}

/* ---- sample plots for a person to look at ------------------------------------- */

static void sample_base(char *buf, size_t n, const char *name) {
    const char *b = getenv("B") && *getenv("B") ? getenv("B") : "build";
    char dir[256];
    snprintf(dir, sizeof dir, "%s/tests", b);
    mkdir(dir, 0755);
    snprintf(dir, sizeof dir, "%s/tests/plots", b);
    mkdir(dir, 0755);
    snprintf(buf, n, "%s/%s", dir, name);
}

static void write_sample(int rc, const char *err, const char *base) {
    if (rc) fail_msg("%s: %s", base, err);
    char path[300];
    struct stat st;
    snprintf(path, sizeof path, "%s.png", base);
    assert_int_equal(stat(path, &st), 0);
    snprintf(path, sizeof path, "%s.svg", base);
    assert_int_equal(stat(path, &st), 0);
}

static void test_sample_plots_written_for_eyes(void **state) {
    (void)state;
    char base[300], err[512];
    gsl_rng *rng = rng_new();
    shot_data *shot = malloc(sizeof *shot);
    double f1[1] = {1000.3}, a1[1] = {20e-12};
    make_shot(shot, 10000, 10000, f1, a1, 1, 3e-12, rng);
    sample_base(base, sizeof base, "record");
    write_sample(an_plot_record(base, &shot->d, err, sizeof err), err, base);
    double f2[2] = {425.8, 431.2}, a2[2] = {12e-12, 7e-12};
    make_shot(shot, 8000, 4000, f2, a2, 2, 2e-12, rng);
    sample_base(base, sizeof base, "record_two_lines");
    write_sample(an_plot_record(base, &shot->d, err, sizeof err), err, base);
    series_data series;
    make_series(&series, false, rng);
    sample_base(base, sizeof base, "series");
    write_sample(an_plot_series(base, &series.d, err, sizeof err), err, base);
    make_series(&series, true, rng);
    sample_base(base, sizeof base, "series_log");
    write_sample(an_plot_series(base, &series.d, err, sizeof err), err, base);
    profile_data profile;
    make_profile(&profile, rng);
    sample_base(base, sizeof base, "profile");
    write_sample(an_plot_profile(base, &profile.d, err, sizeof err), err, base);
    map_data *map = malloc(sizeof *map);
    make_map(map, rng, false);
    sample_base(base, sizeof base, "map");
    write_sample(an_plot_map(base, &map->d, err, sizeof err), err, base);
    make_map(map, rng, true);
    sample_base(base, sizeof base, "map_log");
    write_sample(an_plot_map(base, &map->d, err, sizeof err), err, base);
    free(map);
    free(shot);
    gsl_rng_free(rng);
}

#define T(f) cmocka_unit_test_setup_teardown(f, scratch_setup, scratch_teardown)

int main(void) {
    const struct CMUnitTest tests[] = {
        T(test_record_writes_png_and_svg_with_prefixed_labels),
        T(test_series_writes_png_and_svg_with_prefixed_labels),
        T(test_series_without_residual_is_one_panel_high),
        T(test_profile_writes_png_and_svg_with_prefixed_labels),
        T(test_map_writes_png_and_svg_with_prefixed_labels),
        T(test_map_of_log_spaced_fields_has_a_log_axis),
        T(test_map_of_even_fields_has_a_linear_axis),
        T(test_prefix_picks_pT_for_2e_11_T),
        T(test_prefix_follows_the_data_from_fT_to_mT),
        T(test_unit_that_is_not_letters_keeps_no_prefix),
        T(test_nan_points_are_left_out),
        T(test_single_point_is_plotted),
        T(test_single_row_map_is_plotted),
        T(test_values_not_positive_are_left_out_on_a_log_axis),
        T(test_title_text_is_escaped_for_svg),
        T(test_existing_plots_are_replaced),
        T(test_plots_get_the_mode_of_a_new_file),
        T(test_empty_series_refused_leaving_no_file),
        T(test_all_nan_series_refused_leaving_no_file),
        T(test_profile_of_values_not_positive_refused),
        T(test_empty_record_refused_leaving_no_file),
        T(test_empty_map_refused_leaving_no_file),
        T(test_missing_folder_refused_naming_the_path),
        T(test_failed_rename_leaves_neither_file),
        cmocka_unit_test(test_sample_plots_written_for_eyes),
    };
    return cmocka_run_group_tests_name("plots", tests, NULL, NULL);
}
