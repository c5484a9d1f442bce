/* test_export: the export contract (an_export_* in analysis.h) as cmocka
 * tests: a FID, a spectrum and a CSV record written into $B/tests/export/
 * (B default build) and read back here, every refusal, and the promise that
 * nothing half-written is left. It also writes expected.json there, which
 * tests/ref/jcamp_read.py checks the files against. Not a JCAMP-DX reader. */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <dirent.h>
#include <errno.h>
#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "analysis.h"

#define FID_N 4096
#define SPEC_N 2049
#define CSV_N 1000
#define RATE 4000.0
#define T0 0.0125
#define LARMOR 425.7748          /* Hz: protons near 10 uT */
#define WHEN "2026-12-02T00:30:51.288294Z"

static char dir[4096];
static json_t *expected;        /* what jcamp_read.py compares the files with */

static const an_jcamp_meta META = {
    .title = "shot 12 (point 3): b_detect = 10 uT, a damped line of the first input, "
             "written by test_export",
    .origin = "ffaa2d1d9e92a17aa27cbb0edec95f1c",
    .owner = "test_export",
    .nucleus = "1H",
    .observe_frequency = LARMOR,
    .units = "T",
    .when = WHEN,
};

static void path_of(char *out, size_t len, const char *name) {
    snprintf(out, len, "%s/%s", dir, name);
}

static void mkdir_p(const char *path) {
    char buf[4096];
    snprintf(buf, sizeof buf, "%s", path);
    for (char *p = buf + 1; *p; p++) {
        if (*p != '/') continue;
        *p = '\0';
        mkdir(buf, 0755);
        *p = '/';
    }
    mkdir(buf, 0755);
}

/* The folder emptied of what an earlier run left (our own files only). */
static int group_setup(void **state) {
    (void)state;
    const char *b = getenv("B") && *getenv("B") ? getenv("B") : "build";
    snprintf(dir, sizeof dir, "%s/tests/export", b);
    mkdir_p(dir);
    DIR *d = opendir(dir);
    if (!d) return -1;
    struct dirent *e;
    char p[8192];
    while ((e = readdir(d))) {
        if (e->d_name[0] == '.' && (!e->d_name[1] || !strcmp(e->d_name, ".."))) continue;
        snprintf(p, sizeof p, "%s/%s", dir, e->d_name);
        if (unlink(p) != 0) rmdir(p);
    }
    closedir(d);
    expected = json_object();
    return expected ? 0 : -1;
}

static int group_teardown(void **state) {
    (void)state;
    char p[4200];
    path_of(p, sizeof p, "expected.json");
    int rc = json_dump_file(expected, p, JSON_REAL_PRECISION(17) | JSON_INDENT(0));
    json_decref(expected);
    return rc;
}

static json_t *json_doubles(const double *v, size_t n) {
    json_t *a = json_array();
    for (size_t i = 0; i < n; i++) json_array_append_new(a, json_real(v[i]));
    return a;
}

static char *slurp(const char *path) {
    FILE *f = fopen(path, "rb");
    if (!f) return NULL;
    fseek(f, 0, SEEK_END);
    long len = ftell(f);
    fseek(f, 0, SEEK_SET);
    char *s = malloc((size_t)len + 1);
    if (s && fread(s, 1, (size_t)len, f) != (size_t)len) len = 0;
    if (s) s[len] = '\0';
    fclose(f);
    return s;
}

/* The value after "##LABEL=" at the start of a line, or NULL. */
static const char *value_of(const char *text, const char *label) {
    size_t len = strlen(label);
    for (const char *p = text; p; p = strchr(p, '\n') ? strchr(p, '\n') + 1 : NULL) {
        if (!strncmp(p, label, len)) return p + len;
    }
    return NULL;
}

static void check_lines_fit(const char *text) {
    size_t line = 1;
    for (const char *p = text; *p; line++) {
        const char *nl = strchr(p, '\n');
        assert_non_null(nl);
        if (nl - p > 80) fail_msg("line %zu has %d characters", line, (int)(nl - p));
        for (const char *c = p; c < nl; c++)
            if (*c < 0x20 || *c > 0x7e) fail_msg("line %zu has byte 0x%02x", line, *c & 0xff);
        p = nl + 1;
    }
}

/* The writer's own AFFN table after label: each line's X must be x0_over +
 * index; returns the values times factor. */
static size_t read_table(const char *text, const char *label, double factor, double x0_over,
                         double *out, size_t max) {
    const char *p = value_of(text, label);
    assert_non_null(p);
    p = strchr(p, '\n') + 1;
    size_t n = 0;
    while (*p && strncmp(p, "##", 2) != 0) {
        char *end;
        double x = strtod(p, &end);
        if (fabs(x - (x0_over + (double)n)) > 1e-9 * fmax(1, fabs(x)))
            fail_msg("line X %.17g, want %.17g", x, x0_over + (double)n);
        p = end;
        while (*p == ' ') {
            long long q = strtoll(p, &end, 10);
            if (end == p + 1 || n >= max) fail_msg("bad or extra value near point %zu", n);
            out[n++] = (double)q * factor;
            p = end;
        }
        assert_int_equal(*p, '\n');
        p++;
    }
    return n;
}

static void check_close_all(const double *got, const double *want, size_t n, const char *what) {
    double top = 0;
    for (size_t i = 0; i < n; i++) top = fmax(top, fabs(want[i]));
    for (size_t i = 0; i < n; i++) {
        if (fabs(got[i] - want[i]) > 1e-9 * top)
            fail_msg("%s[%zu]: got %.17g, want %.17g", what, i, got[i], want[i]);
    }
}

static void fill_fid(double *y, size_t n) {
    for (size_t i = 0; i < n; i++) {
        double t = (double)i / RATE;
        y[i] = 1.2e-11 * exp(-t / 0.35) * cos(2 * M_PI * LARMOR * t + 0.4) + 3e-14;
    }
}

static void test_fid_has_every_label_and_reads_back(void **state) {
    (void)state;
    static double y[FID_N], back[FID_N];
    char p[4200], err[512] = "";
    fill_fid(y, FID_N);
    path_of(p, sizeof p, "fid.jdx");
    if (an_export_jcamp_fid(p, &META, y, FID_N, T0, 1 / RATE, err, sizeof err) != 0)
        fail_msg("%s", err);
    char *text = slurp(p);
    assert_non_null(text);
    check_lines_fit(text);
    assert_int_equal(strncmp(text, "##TITLE= shot 12", 16), 0);
    assert_non_null(strstr(text, "\n##JCAMP-DX= 5.01"));
    assert_non_null(strstr(text, "\n##DATA TYPE= NMR FID\n"));
    assert_non_null(strstr(text, "\n##.OBSERVE FREQUENCY= 0.0004257748\n"));
    assert_non_null(strstr(text, "\n##.OBSERVE NUCLEUS= ^1H\n"));
    assert_non_null(strstr(text, "\n##LONGDATE= 2026/12/02 00:30:51.288294 +0000\n"));
    assert_non_null(strstr(text, "\n##NPOINTS= 4096\n"));
    size_t len = strlen(text);
    assert_true(len > 7 && !strcmp(text + len - 7, "##END=\n"));
    double factor = strtod(value_of(text, "##YFACTOR="), NULL);
    /* nine significant digits: the largest |Y| is 999999999 */
    double top = 0;
    for (size_t i = 0; i < FID_N; i++) top = fmax(top, fabs(y[i]));
    assert_true(fabs(top / factor - 999999999.0) < 1);
    size_t n = read_table(text, "##XYDATA= (X++(Y..Y))", factor, T0 * RATE, back, FID_N);
    assert_int_equal(n, FID_N);
    check_close_all(back, y, FID_N, "y");
    free(text);
    json_t *o = json_pack("{s:s, s:s, s:s, s:s, s:s, s:f, s:s, s:s, s:f, s:f, s:o}", "file",
                          "fid.jdx", "title", META.title, "origin", META.origin, "owner",
                          META.owner, "nucleus", META.nucleus, "observe_frequency", LARMOR,
                          "units", META.units, "when", WHEN, "t0", T0, "dt", 1 / RATE, "y",
                          json_doubles(y, FID_N));
    json_object_set_new(expected, "fid", o);
}

static void fill_spectrum(double *re, double *im, double *df) {
    *df = RATE / (2.0 * (SPEC_N - 1));
    for (size_t k = 0; k < SPEC_N; k++) {
        double x = ((double)k * *df - LARMOR) / 1.8;
        re[k] = 4.5e-9 / (1 + x * x) - 2e-12;
        im[k] = 4.5e-9 * x / (1 + x * x);
    }
}

static void test_spectrum_has_two_pages_that_read_back(void **state) {
    (void)state;
    static double re[SPEC_N], im[SPEC_N], back[SPEC_N];
    double df;
    char p[4200], err[512] = "";
    fill_spectrum(re, im, &df);
    path_of(p, sizeof p, "spectrum.jdx");
    if (an_export_jcamp_spectrum(p, &META, re, im, SPEC_N, 0, df, err, sizeof err) != 0)
        fail_msg("%s", err);
    char *text = slurp(p);
    assert_non_null(text);
    check_lines_fit(text);
    assert_non_null(strstr(text, "\n##DATA TYPE= NMR SPECTRUM\n"));
    assert_non_null(strstr(text, "\n##NTUPLES= NMR SPECTRUM\n"));
    assert_non_null(strstr(text, "\n##PAGE= N=1\n##NPOINTS= 2049\n"));
    assert_non_null(strstr(text, "\n##PAGE= N=2\n##NPOINTS= 2049\n"));
    assert_non_null(strstr(text, "\n##END NTUPLES= NMR SPECTRUM\n##END=\n"));
    /* FACTOR: frequency step, then the real and imaginary factors */
    char *end;
    const char *f = value_of(text, "##FACTOR=");
    assert_non_null(f);
    double fx = strtod(f, &end), fr = strtod(end + 1, &end), fi = strtod(end + 1, &end);
    assert_true(fx == df);
    size_t n = read_table(text, "##DATA TABLE= (X++(R..R)), XYDATA", fr, 0, back, SPEC_N);
    assert_int_equal(n, SPEC_N);
    check_close_all(back, re, SPEC_N, "re");
    n = read_table(text, "##DATA TABLE= (X++(I..I)), XYDATA", fi, 0, back, SPEC_N);
    assert_int_equal(n, SPEC_N);
    check_close_all(back, im, SPEC_N, "im");
    free(text);
    json_t *o = json_pack("{s:s, s:s, s:s, s:s, s:f, s:s, s:f, s:f, s:o, s:o}", "file",
                          "spectrum.jdx", "title", META.title, "origin", META.origin, "nucleus",
                          META.nucleus, "observe_frequency", LARMOR, "when", WHEN, "f0", 0.0,
                          "df", df, "re", json_doubles(re, SPEC_N), "im",
                          json_doubles(im, SPEC_N));
    json_object_set_new(expected, "spectrum", o);
}

static void fill_record(an_record *r, float *samples) {
    memset(r, 0, sizeof *r);
    snprintf(r->run, sizeof r->run, "%s", META.origin);
    snprintf(r->kind, sizeof r->kind, "scan");
    snprintf(r->status, sizeof r->status, "ok");
    snprintf(r->started_utc, sizeof r->started_utc, WHEN);
    r->shot = 12, r->attempt = 1, r->point = 3, r->average = 2;
    snprintf(r->input, sizeof r->input, "magnetometer");
    snprintf(r->units, sizeof r->units, "T");
    r->rate = RATE, r->t0 = T0, r->receiver_sign = -1;
    r->n = CSV_N;
    r->samples = samples;
    for (size_t i = 0; i < CSV_N; i++)
        samples[i] = (float)(2.5e-11 * sin(2 * M_PI * LARMOR * (double)i / RATE) + 1e-13);
}

static void test_csv_has_header_then_time_value_per_sample(void **state) {
    (void)state;
    static float samples[CSV_N];
    an_record r;
    char p[4200], err[512] = "";
    fill_record(&r, samples);
    path_of(p, sizeof p, "record.csv");
    if (an_export_csv_record(p, &r, err, sizeof err) != 0) fail_msg("%s", err);
    char *text = slurp(p);
    assert_non_null(text);
    const char *head = "# precess record: run=ffaa2d1d9e92a17aa27cbb0edec95f1c shot=12 ";
    assert_int_equal(strncmp(text, head, strlen(head)), 0);
    const char *words[] = {" input=magnetometer ", " units=T ", " sample_rate=4000 ",
                           " t0=0.0125 "};
    char *body = strstr(text, "\ntime,value\n");
    assert_non_null(body);
    for (size_t i = 0; i < 4; i++) {
        char *w = strstr(text, words[i]);
        if (!w || w > body) fail_msg("header lacks '%s'", words[i]);
    }
    char *s = body + strlen("\ntime,value\n"), *end;
    for (size_t i = 0; i < CSV_N; i++) {
        double t = strtod(s, &end);
        assert_int_equal(*end, ',');
        float v = strtof(end + 1, &end);
        assert_int_equal(*end, '\n');
        s = end + 1;
        /* the same double and the same float32 come back */
        if (t != T0 + (double)i / RATE) fail_msg("time %zu: %.17g", i, t);
        if (v != samples[i]) fail_msg("value %zu: %.9g, want %.9g", i, v, samples[i]);
    }
    assert_int_equal(*s, '\0');
    free(text);
    double v[CSV_N];
    for (size_t i = 0; i < CSV_N; i++) v[i] = samples[i];
    json_t *o = json_pack("{s:s, s:s, s:i, s:s, s:s, s:f, s:f, s:o}", "file", "record.csv", "run",
                          r.run, "shot", r.shot, "input", r.input, "units", r.units,
                          "sample_rate", r.rate, "t0", r.t0, "values", json_doubles(v, CSV_N));
    json_object_set_new(expected, "csv", o);
}

static void test_zero_fid_is_written_with_unit_factor(void **state) {
    (void)state;
    double y[64] = {0};
    char p[4200], err[512] = "";
    an_jcamp_meta m = META;
    m.observe_frequency = 0;    /* not known */
    m.when = NULL;              /* no ##LONGDATE */
    path_of(p, sizeof p, "zero.jdx");
    if (an_export_jcamp_fid(p, &m, y, 64, 0, 1e-3, err, sizeof err) != 0) fail_msg("%s", err);
    char *text = slurp(p);
    assert_non_null(text);
    assert_non_null(strstr(text, "\n##YFACTOR= 1\n"));
    assert_non_null(strstr(text, "\n##.OBSERVE FREQUENCY= 0 $$ not known\n"));
    assert_null(strstr(text, "##LONGDATE="));
    free(text);
    json_t *o = json_pack("{s:s, s:s, s:s, s:s, s:s, s:f, s:s, s:n, s:f, s:f, s:o}", "file",
                          "zero.jdx", "title", m.title, "origin", m.origin, "owner", m.owner,
                          "nucleus", m.nucleus, "observe_frequency", 0.0, "units", m.units,
                          "when", "t0", 0.0, "dt", 1e-3, "y", json_doubles(y, 64));
    json_object_set_new(expected, "zero_fid", o);
}

/* Files in the folder whose name starts with prefix. */
static int count_files(const char *prefix) {
    DIR *d = opendir(dir);
    assert_non_null(d);
    int n = 0;
    struct dirent *e;
    while ((e = readdir(d))) n += strncmp(e->d_name, prefix, strlen(prefix)) == 0;
    closedir(d);
    return n;
}

static void test_missing_folder_is_refused_naming_path_and_reason(void **state) {
    (void)state;
    double y[16] = {1, 2, 3};
    char p[4200], err[512] = "";
    path_of(p, sizeof p, "no-such-folder/fid.jdx");
    assert_int_equal(an_export_jcamp_fid(p, &META, y, 16, 0, 1e-3, err, sizeof err), -1);
    assert_non_null(strstr(err, p));
    assert_non_null(strstr(err, strerror(ENOENT)));
    struct stat st;
    assert_int_not_equal(stat(p, &st), 0);
}

/* The rename is the last step: a directory in the way makes it fail after
 * the temporary file is whole, and that file must be gone again. */
static void test_failed_rename_leaves_no_temporary_file(void **state) {
    (void)state;
    static double re[SPEC_N], im[SPEC_N];
    static float samples[CSV_N];
    double df;
    an_record r;
    char p[4200], inner[4300], err[512] = "";
    fill_spectrum(re, im, &df);
    fill_record(&r, samples);
    path_of(p, sizeof p, "in-the-way.jdx");
    mkdir(p, 0755);
    snprintf(inner, sizeof inner, "%s/keep", p);
    FILE *f = fopen(inner, "w");
    assert_non_null(f);
    fclose(f);
    int rc = an_export_jcamp_spectrum(p, &META, re, im, SPEC_N, 0, df, err, sizeof err);
    assert_int_equal(rc, -1);
    assert_non_null(strstr(err, p));
    assert_non_null(strstr(err, "rename"));
    assert_int_equal(count_files(".in-the-way.jdx."), 0);
    assert_int_equal(an_export_csv_record(p, &r, err, sizeof err), -1);
    assert_non_null(strstr(err, p));
    assert_int_equal(count_files(".in-the-way.jdx."), 0);
    struct stat st;
    assert_int_equal(stat(inner, &st), 0);
}

static void test_refusal_leaves_an_existing_file_untouched(void **state) {
    (void)state;
    double y[32];
    char p[4200], err[512] = "";
    for (size_t i = 0; i < 32; i++) y[i] = sin((double)i);
    path_of(p, sizeof p, "kept.jdx");
    assert_int_equal(an_export_jcamp_fid(p, &META, y, 32, 0, 1e-3, err, sizeof err), 0);
    char *before = slurp(p);
    y[7] = NAN;
    assert_int_equal(an_export_jcamp_fid(p, &META, y, 32, 0, 1e-3, err, sizeof err), -1);
    assert_non_null(strstr(err, p));
    assert_non_null(strstr(err, "y[7]"));
    char *after = slurp(p);
    assert_string_equal(before, after);
    assert_int_equal(count_files(".kept.jdx."), 0);
    free(before);
    free(after);
}

static void check_refused(int rc, const char *err, const char *path, const char *fragment) {
    assert_int_equal(rc, -1);
    if (path && !strstr(err, path)) fail_msg("'%s' does not name %s", err, path);
    if (!strstr(err, fragment)) fail_msg("'%s' does not say '%s'", err, fragment);
    struct stat st;
    if (path && stat(path, &st) == 0) fail_msg("%s was written", path);
}

static void test_bad_arguments_are_refused(void **state) {
    (void)state;
    double y[16] = {0}, bad[16] = {0};
    static float s[CSV_N];
    char p[4200], e[512];
    an_jcamp_meta m = META;
    path_of(p, sizeof p, "refused.jdx");
    const size_t L = sizeof e;
    check_refused(an_export_jcamp_fid(p, &META, y, 1, 0, 1e-3, e, L), e, p, "at least 2");
    check_refused(an_export_jcamp_fid(p, &META, y, 16, 0, 0, e, L), e, p, "must be > 0");
    check_refused(an_export_jcamp_fid(p, &META, y, 16, 0, -1e-3, e, L), e, p, "must be > 0");
    check_refused(an_export_jcamp_fid(p, &META, y, 16, NAN, 1e-3, e, L), e, p, "must be > 0");
    check_refused(an_export_jcamp_fid(p, &META, NULL, 16, 0, 1e-3, e, L), e, p, "no y");
    bad[3] = INFINITY;
    check_refused(an_export_jcamp_fid(p, &META, bad, 16, 0, 1e-3, e, L), e, p, "y[3] is inf");
    check_refused(an_export_jcamp_fid(p, NULL, y, 16, 0, 1e-3, e, L), e, p, "no title");
    m.nucleus = "";
    check_refused(an_export_jcamp_fid(p, &m, y, 16, 0, 1e-3, e, L), e, p, "nucleus");
    m = META, m.observe_frequency = NAN;
    check_refused(an_export_jcamp_fid(p, &m, y, 16, 0, 1e-3, e, L), e, p, "observe frequency");
    m = META, m.when = "2 December 2026";
    check_refused(an_export_jcamp_spectrum(p, &m, y, y, 16, 0, 1, e, L), e, p, "2 December 2026");
    m.when = "2026-13-02T00:30:51Z";
    check_refused(an_export_jcamp_spectrum(p, &m, y, y, 16, 0, 1, e, L), e, p, "not ISO 8601");
    m.when = "2026-12-02T00:30:51+01:0";
    check_refused(an_export_jcamp_spectrum(p, &m, y, y, 16, 0, 1, e, L), e, p, "not ISO 8601");
    check_refused(an_export_jcamp_spectrum(p, &META, y, NULL, 16, 0, 1, e, L), e, p, "no im");
    check_refused(an_export_jcamp_spectrum(p, &META, y, bad, 16, 0, 1, e, L), e, p, "im[3]");
    check_refused(an_export_jcamp_fid(NULL, &META, y, 16, 0, 1e-3, e, L), e, NULL, "no path");
    char folder[4300];
    snprintf(folder, sizeof folder, "%s/", dir);
    assert_int_equal(an_export_jcamp_fid(folder, &META, y, 16, 0, 1e-3, e, L), -1);
    assert_non_null(strstr(e, folder));
    assert_non_null(strstr(e, "names a folder"));
    an_record r;
    fill_record(&r, s);
    r.n = 4, r.rate = 0;
    path_of(p, sizeof p, "refused.csv");
    check_refused(an_export_csv_record(p, &r, e, L), e, p, "sample rate");
    r.rate = RATE, r.samples = NULL;
    check_refused(an_export_csv_record(p, &r, e, L), e, p, "no samples");
    check_refused(an_export_csv_record(p, NULL, e, L), e, p, "no samples");
    assert_int_equal(count_files(".refused."), 0);
}

static void test_text_is_kept_printable_and_within_80_columns(void **state) {
    (void)state;
    double y[8] = {1, -1, 2, -2, 3, -3, 4, -4};
    char p[4200], err[512] = "", title[400];
    snprintf(title, sizeof title, "line one\nline two $$ not a comment ## not a label \xc2\xb5T "
             "and a long tail: %s", "0123456789 0123456789 0123456789 0123456789 0123456789 "
             "0123456789 0123456789 0123456789 0123456789 0123456789 0123456789");
    an_jcamp_meta m = META;
    m.title = title;
    m.when = "2026-12-02T01:30:51+01:00";
    path_of(p, sizeof p, "text.jdx");
    if (an_export_jcamp_fid(p, &m, y, 8, 0, 1e-3, err, sizeof err) != 0) fail_msg("%s", err);
    char *text = slurp(p);
    assert_non_null(text);
    check_lines_fit(text);
    char *jcamp = strstr(text, "\n##JCAMP-DX=");
    assert_non_null(jcamp);
    *jcamp = '\0';      /* the title's lines only */
    assert_null(strstr(text, "$$"));
    assert_null(strstr(text + 2, "##"));
    assert_non_null(strstr(text, "line one line two $ $ not a comment # # not a label ??T"));
    assert_true(strchr(text, '\n') != NULL);  /* wrapped onto a continuation line */
    assert_non_null(strstr(jcamp + 1, "\n##LONGDATE= 2026/12/02 01:30:51 +0100\n"));
    free(text);
}

int main(void) {
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_fid_has_every_label_and_reads_back),
        cmocka_unit_test(test_spectrum_has_two_pages_that_read_back),
        cmocka_unit_test(test_csv_has_header_then_time_value_per_sample),
        cmocka_unit_test(test_zero_fid_is_written_with_unit_factor),
        cmocka_unit_test(test_missing_folder_is_refused_naming_path_and_reason),
        cmocka_unit_test(test_failed_rename_leaves_no_temporary_file),
        cmocka_unit_test(test_refusal_leaves_an_existing_file_untouched),
        cmocka_unit_test(test_bad_arguments_are_refused),
        cmocka_unit_test(test_text_is_kept_printable_and_within_80_columns),
    };
    return cmocka_run_group_tests_name("export", tests, group_setup, group_teardown);
}
