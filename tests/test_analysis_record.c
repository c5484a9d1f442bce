/* test_analysis_record: shot records read back by an_record_read (analysis.h)
 * as cmocka tests: a record the store module writes (sequencer/store.h), small
 * files written by hand with one part left out at a time, and files that are
 * no record at all. Not for what is done with the samples (test_analysis.c). */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <ftw.h>
#include <hdf5.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "analysis.h"
#include "store.h"

static void check_close(double got, double want, double tol, const char *what) {
    if (!(fabs(got - want) <= tol)) fail_msg("%s: got %.12g, want %.12g (+-%.3g)", what, got, want,
                                             tol);
}

static const char *build_dir(void) {
    const char *b = getenv("B");
    return b && *b ? b : "build";
}

static int remove_entry(const char *path, const struct stat *st, int flag, struct FTW *ftw) {
    (void)st, (void)flag, (void)ftw;
    return remove(path);
}

static const char **names(arena *a, size_t n, const char *const *list) {
    const char **out = arena_alloc(a, (n + 1) * sizeof *out);
    for (size_t i = 0; i < n; i++) out[i] = arena_strdup(a, list[i]);
    return out;
}

/* A record as the sequencer hands it to the store: two parameters given
 * out of name order, two coils, one place, two pulses, two inputs. */
static store_record *store_shot(size_t n) {
    store_record *r = store_record_new();
    arena *a = r->arena;
    static const char *const pars[] = {"t_relax", "b_detect"}, *const coils[] = {"main", "tip"};
    static const char *const places[] = {"sample"}, *const nuclei[] = {"1H"};
    r->run = "0123456789abcdef0123456789abcdef";
    r->kind = "scan";
    r->status = "ok";
    r->started_utc = "2026-01-02T03:04:05.678901Z";
    r->driver = "sim";
    r->precess_version = "test";
    r->plan_sha256 = "0";
    r->shot = 7, r->attempt = 2, r->point = 4, r->average = 3;
    r->nparameters = 2, r->parameter_names = names(a, 2, pars);
    r->parameters = arena_alloc(a, 2 * sizeof(double));
    r->parameters[0] = 0.25, r->parameters[1] = 1e-5;
    r->ncoils = 2, r->coil_names = names(a, 2, coils);
    r->currents = arena_alloc(a, 2 * sizeof(double));
    r->currents[0] = 1.5, r->currents[1] = 0;
    r->nplaces = 1, r->place_names = names(a, 1, places);
    r->fields = arena_alloc(a, sizeof(double));
    r->fields[0] = 1e-5;
    r->npulses = 2;
    r->pulses = arena_alloc(a, 2 * sizeof *r->pulses);
    for (size_t k = 0; k < 2; k++)
        r->pulses[k] = (store_pulse){"tip", "dc", 1e-4, 1e-4, 3.0 + k, 3.0001 + k,
                                     k ? -1 : 1, 1, names(a, 1, nuclei), NULL};
    r->pulses[0].angles = r->pulses[1].angles = arena_alloc(a, sizeof(double));
    r->pulses[0].angles[0] = M_PI / 2;
    r->nacquisitions = 1;
    r->acquisitions = arena_alloc(a, sizeof *r->acquisitions);
    r->acquisitions[0].nchannels = 2;
    store_channel *c = r->acquisitions[0].channels = arena_alloc(a, 2 * sizeof *c);
    for (size_t k = 0; k < 2; k++) {
        c[k] = (store_channel){k ? "reference" : "sensor", NULL, n, k ? "V" : "T", 1000, 3.0102,
                               16, 1e-3, -1};
        c[k].samples = arena_alloc(a, (n + 1) * sizeof(float));
        for (size_t i = 0; i < n; i++) c[k].samples[i] = (float)(k + 1) * (float)i * 1e-12f;
    }
    return r;
}

static void write_store_run(const char *dir, store_record *r) {
    char err[600] = "";
    nftw(dir, remove_entry, 16, FTW_DEPTH | FTW_PHYS);
    store_files files = {"plan: x\n", "rig: y\n", 8, 7, "{}"};
    store *s = NULL;
    if (store_create(dir, &files, &s, err, sizeof err) || store_start(s, 2, err, sizeof err) ||
        store_submit(s, r, true, err, sizeof err) || store_close(s, err, sizeof err))
        fail_msg("store: %s", err);
}

static void test_record_written_by_the_store_reads_back(void **state) {
    (void)state;
    char dir[600], path[700], err[600] = "";
    snprintf(dir, sizeof dir, "%s/tests", build_dir());
    mkdir(build_dir(), 0777);
    mkdir(dir, 0777);
    snprintf(dir, sizeof dir, "%s/tests/analysis-run", build_dir());
    write_store_run(dir, store_shot(20000));
    snprintf(path, sizeof path, "%s/records/000007.h5", dir);
    an_record r;
    if (an_record_read(path, &r, err, sizeof err)) fail_msg("an_record_read: %s", err);
    assert_string_equal(r.run, "0123456789abcdef0123456789abcdef");
    assert_string_equal(r.kind, "scan");
    assert_string_equal(r.status, "ok");
    assert_string_equal(r.started_utc, "2026-01-02T03:04:05.678901Z");
    assert_int_equal(r.shot, 7), assert_int_equal(r.attempt, 2);
    assert_int_equal(r.point, 4), assert_int_equal(r.average, 3);
    assert_int_equal(r.nparameters, 2);
    /* in the file's order, which is by name */
    assert_string_equal(r.parameters[0].name, "b_detect");
    check_close(an_named_value(r.parameters, r.nparameters, "t_relax"), 0.25, 0, "t_relax");
    check_close(an_named_value(r.parameters, r.nparameters, "b_detect"), 1e-5, 0, "b_detect");
    assert_true(isnan(an_named_value(r.parameters, r.nparameters, "nothing")));
    assert_int_equal(r.ncurrents, 2);
    check_close(an_named_value(r.currents, r.ncurrents, "main"), 1.5, 0, "current");
    assert_int_equal(r.nfields, 1);
    check_close(an_named_value(r.fields, r.nfields, "sample"), 1e-5, 0, "field");
    check_close(r.pulse_end, 3.0001, 0, "the first pulse's end");
    /* the first input (by name: 'reference' before 'sensor') */
    assert_string_equal(r.input, "reference");
    assert_string_equal(r.units, "V");
    check_close(r.rate, 1000, 0, "rate");
    check_close(r.t0, 3.0102, 0, "t0");
    assert_int_equal(r.receiver_sign, -1);
    assert_int_equal(r.n, 20000);
    for (size_t i = 0; i < r.n; i++)
        if (r.samples[i] != 2.0f * (float)i * 1e-12f) fail_msg("sample %zu differs", i);
    an_record_free(&r);
    assert_null(r.samples);
    /* no pulse: pulse_end NAN */
    store_record *nopulse = store_shot(100);
    nopulse->npulses = 0;
    write_store_run(dir, nopulse);
    if (an_record_read(path, &r, err, sizeof err)) fail_msg("an_record_read: %s", err);
    assert_true(isnan(r.pulse_end));
    an_record_free(&r);
    nftw(dir, remove_entry, 16, FTW_DEPTH | FTW_PHYS);
}

/* A small HDF5 file by hand, with what a record has, less what is left out. */
typedef enum { WHOLE, NO_FORMAT, NO_END, NO_ACQUISITION, NO_RATE, BAD_SIGN, OLD_VERSION } damage;

static void h5_attr(hid_t loc, const char *name, hid_t type, const void *value) {
    hid_t space = H5Screate(H5S_SCALAR), a = H5Acreate2(loc, name, type, space, H5P_DEFAULT,
                                                      H5P_DEFAULT);
    H5Awrite(a, type, value);
    H5Aclose(a);
    H5Sclose(space);
}

static void h5_string(hid_t loc, const char *name, const char *value) {
    hid_t t = H5Tcopy(H5T_C_S1);
    H5Tset_size(t, strlen(value) + 1);     /* fixed-length, unlike precess's own */
    h5_attr(loc, name, t, value);
    H5Tclose(t);
}

static void write_by_hand(const char *path, damage d) {
    hid_t f = H5Fcreate(path, H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
    int one = 1, two = 2, sign = d == BAD_SIGN ? 0 : -1, version = d == OLD_VERSION ? 2 : 1;
    double rate = 100, t0 = 0.5, end = 0.4;
    if (d != NO_FORMAT) h5_string(f, "format", "precess-shot");
    h5_attr(f, "format_version", H5T_NATIVE_INT, &version);
    const char *strings[][2] = {{"run", "r"}, {"kind", "scan"}, {"status", "ok"},
                                {"started_utc", "2026-01-01T00:00:00Z"}};
    for (size_t i = 0; i < 4; i++) h5_string(f, strings[i][0], strings[i][1]);
    const char *ints[] = {"shot", "attempt", "point", "average"};
    for (size_t i = 0; i < 4; i++) h5_attr(f, ints[i], H5T_NATIVE_INT, i ? &one : &two);
    const char *groups[] = {"parameters", "currents", "fields", "pulses", "pulses/1"};
    for (size_t i = 0; i < 5; i++) H5Gclose(H5Gcreate2(f, groups[i], H5P_DEFAULT, H5P_DEFAULT,
                                                      H5P_DEFAULT));
    hid_t p = H5Gopen2(f, "pulses/1", H5P_DEFAULT);
    if (d != NO_END) h5_attr(p, "end", H5T_NATIVE_DOUBLE, &end);
    H5Gclose(p);
    if (d != NO_ACQUISITION) {
        H5Gclose(H5Gcreate2(f, "acquisitions", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT));
        hid_t g = H5Gcreate2(f, "acquisitions/1", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
        float x[32] = {0};
        hsize_t dims[1] = {32};
        hid_t space = H5Screate_simple(1, dims, NULL);
        hid_t ds = H5Dcreate2(g, "mag", H5T_IEEE_F32LE, space, H5P_DEFAULT, H5P_DEFAULT,
                              H5P_DEFAULT);
        H5Dwrite(ds, H5T_NATIVE_FLOAT, H5S_ALL, H5S_ALL, H5P_DEFAULT, x);
        if (d != NO_RATE) h5_attr(ds, "sample_rate", H5T_NATIVE_DOUBLE, &rate);
        h5_attr(ds, "t0", H5T_NATIVE_DOUBLE, &t0);
        h5_attr(ds, "receiver_sign", H5T_NATIVE_INT, &sign);
        h5_string(ds, "units", "T");
        H5Dclose(ds);
        H5Sclose(space);
        H5Gclose(g);
    }
    H5Fclose(f);
}

static void check_refused(const char *path, const char *message) {
    an_record r;
    char err[600] = "";
    assert_int_equal(an_record_read(path, &r, err, sizeof err), -1);
    if (!strstr(err, path) || !strstr(err, message))
        fail_msg("message '%s' should name %s and say '%s'", err, path, message);
    assert_null(r.samples);
    assert_null(r.parameters);
}

static void test_record_by_hand_reads_and_each_gap_is_named(void **state) {
    (void)state;
    char path[600];
    snprintf(path, sizeof path, "%s/tests/analysis-hand.h5", build_dir());
    an_record r;
    char err[600] = "";
    write_by_hand(path, WHOLE);
    if (an_record_read(path, &r, err, sizeof err)) fail_msg("whole record: %s", err);
    check_close(r.pulse_end, 0.4, 0, "end");
    assert_int_equal(r.shot, 2);
    assert_int_equal(r.nparameters, 0);
    assert_string_equal(r.input, "mag");
    an_record_free(&r);
    write_by_hand(path, NO_END);
    if (an_record_read(path, &r, err, sizeof err)) fail_msg("no end: %s", err);
    check_close(r.pulse_end, 0.5, 0, "the acquisition's start for a pulse without end");
    an_record_free(&r);
    write_by_hand(path, NO_FORMAT);
    check_refused(path, "not a shot record");
    write_by_hand(path, OLD_VERSION);
    check_refused(path, "format_version 2");
    write_by_hand(path, NO_ACQUISITION);
    check_refused(path, "/acquisitions/1 is missing");
    write_by_hand(path, NO_RATE);
    check_refused(path, "'sample_rate'");
    write_by_hand(path, BAD_SIGN);
    check_refused(path, "receiver_sign 0");
    unlink(path);
}

static void test_a_file_that_is_not_a_record_is_refused(void **state) {
    (void)state;
    char path[600];
    snprintf(path, sizeof path, "%s/tests/analysis-not-a-record.h5", build_dir());
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    fputs("plan: not a record\n", f);
    fclose(f);
    check_refused(path, "not a shot record");
    unlink(path);
    check_refused(path, "cannot be read");
}

int main(void) {
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_record_written_by_the_store_reads_back),
        cmocka_unit_test(test_record_by_hand_reads_and_each_gap_is_named),
        cmocka_unit_test(test_a_file_that_is_not_a_record_is_refused),
    };
    return cmocka_run_group_tests_name("analysis records", tests, NULL, NULL);
}
