/* record: a shot record (run-format.md, "A shot record") read back into an
 * an_record: the root attributes, /parameters, /currents, /fields, the first
 * pulse's end and the first acquisition's first input with its attributes.
 * Not for writing records (sequencer/store.c), nor for the events table,
 * later acquisitions or other inputs, which the per-shot analysis ignores.
 *
 * "First" is in creation order where a file tracks it; precess's records do
 * not, so it is the first by name (HDF5's own order), as for /parameters.
 * Like the store, this is serial HDF5: not to be called while another
 * thread of the process is in HDF5 (the store's writer takes a lock of its
 * own, which this module cannot see). */
#include "analysis.h"

#include <errno.h>
#include <hdf5.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* One read: the file, the record being filled and the first failure. */
typedef struct {
    const char *path;
    an_record *r;
    char *err;
    size_t errlen;
} reader;

static int fail(reader *rd, const char *fmt, ...) {
    if (!rd->err || !rd->errlen) return -1;
    int used = snprintf(rd->err, rd->errlen, "%s: ", rd->path);
    if (used < 0 || (size_t)used >= rd->errlen) return -1;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(rd->err + used, rd->errlen - (size_t)used, fmt, ap);
    va_end(ap);
    return -1;
}

static void copy_name(char *out, size_t cap, const char *s) {
    snprintf(out, cap, "%s", s ? s : "");
}

/* ---- attributes ------------------------------------------------------------ */

/* A string attribute, variable-length (as precess writes them) or fixed. */
static int attr_string(hid_t loc, const char *name, char *out, size_t cap) {
    hid_t a = H5Aopen(loc, name, H5P_DEFAULT);
    if (a < 0) return -1;
    hid_t ft = H5Aget_type(a), mt = -1;
    int rc = -1;
    if (ft >= 0 && H5Tget_class(ft) == H5T_STRING) {
        mt = H5Tcopy(H5T_C_S1);
        if (H5Tis_variable_str(ft) > 0) {
            char *s = NULL;
            if (mt >= 0 && H5Tset_size(mt, H5T_VARIABLE) >= 0 &&
                H5Tset_cset(mt, H5Tget_cset(ft)) >= 0 && H5Aread(a, mt, &s) >= 0) {
                copy_name(out, cap, s);
                rc = 0;
            }
            if (s) H5free_memory(s);
        } else {
            size_t size = H5Tget_size(ft);
            char *s = calloc(size + 2, 1);
            if (s && mt >= 0 && H5Tset_size(mt, size + 1) >= 0 &&
                H5Tset_strpad(mt, H5T_STR_NULLTERM) >= 0 && H5Aread(a, mt, s) >= 0) {
                copy_name(out, cap, s);
                rc = 0;
            }
            free(s);
        }
    }
    if (mt >= 0) H5Tclose(mt);
    if (ft >= 0) H5Tclose(ft);
    H5Aclose(a);
    return rc;
}

/* A scalar numeric attribute, as a double. */
static int attr_number(hid_t loc, const char *name, double *out) {
    hid_t a = H5Aopen(loc, name, H5P_DEFAULT);
    if (a < 0) return -1;
    hid_t ft = H5Aget_type(a), space = H5Aget_space(a);
    H5T_class_t c = ft >= 0 ? H5Tget_class(ft) : H5T_NO_CLASS;
    int rc = -1;
    if ((c == H5T_INTEGER || c == H5T_FLOAT) && space >= 0 &&
        H5Sget_simple_extent_npoints(space) == 1 &&
        H5Aread(a, H5T_NATIVE_DOUBLE, out) >= 0)
        rc = 0;
    if (space >= 0) H5Sclose(space);
    if (ft >= 0) H5Tclose(ft);
    H5Aclose(a);
    return rc;
}

static int attr_int(hid_t loc, const char *name, int *out) {
    double v;
    if (attr_number(loc, name, &v) || !(v == floor(v)) || fabs(v) > 2147483647.0) return -1;
    *out = (int)v;
    return 0;
}

static int need_string(reader *rd, hid_t loc, const char *where, const char *name, char *out,
                       size_t cap) {
    if (attr_string(loc, name, out, cap) == 0) return 0;
    return fail(rd, "%s has no string attribute '%s'", where, name);
}

static int need_int(reader *rd, hid_t loc, const char *where, const char *name, int *out) {
    if (attr_int(loc, name, out) == 0) return 0;
    return fail(rd, "%s has no whole-number attribute '%s'", where, name);
}

static int need_number(reader *rd, hid_t loc, const char *where, const char *name,
                       double *out) {
    if (attr_number(loc, name, out) == 0 && isfinite(*out)) return 0;
    return fail(rd, "%s has no finite numeric attribute '%s'", where, name);
}

/* ---- the root ----------------------------------------------------------------- */

static int read_root(reader *rd, hid_t f) {
    an_record *r = rd->r;
    char format[32];
    int version;
    if (attr_string(f, "format", format, sizeof format) || strcmp(format, "precess-shot") != 0)
        return fail(rd, "not a shot record (the root attribute 'format' is not "
                    "'precess-shot')");
    if (need_int(rd, f, "the root", "format_version", &version)) return -1;
    if (version != 1)
        return fail(rd, "format_version %d; this precess reads version 1 only", version);
    if (need_string(rd, f, "the root", "run", r->run, sizeof r->run) ||
        need_string(rd, f, "the root", "kind", r->kind, sizeof r->kind) ||
        need_string(rd, f, "the root", "status", r->status, sizeof r->status) ||
        need_string(rd, f, "the root", "started_utc", r->started_utc, sizeof r->started_utc) ||
        need_int(rd, f, "the root", "shot", &r->shot) ||
        need_int(rd, f, "the root", "attempt", &r->attempt) ||
        need_int(rd, f, "the root", "point", &r->point) ||
        need_int(rd, f, "the root", "average", &r->average))
        return -1;
    return 0;
}

/* ---- /parameters, /currents, /fields ---------------------------------------- */

typedef struct {
    reader *rd;
    const char *group;
    an_named *list;
    size_t n, cap;
    int failed;
} scalars;

static herr_t read_scalar(hid_t g, const char *name, const H5L_info_t *info, void *data) {
    (void)info;
    scalars *s = data;
    if (s->n >= s->cap) return 1;
    hid_t d = H5Dopen2(g, name, H5P_DEFAULT);
    hid_t space = d >= 0 ? H5Dget_space(d) : -1;
    double v = NAN;
    int ok = space >= 0 && H5Sget_simple_extent_npoints(space) == 1 &&
             H5Dread(d, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT, &v) >= 0;
    if (space >= 0) H5Sclose(space);
    if (d >= 0) H5Dclose(d);
    if (!ok) {
        fail(s->rd, "/%s/%s is not a scalar number", s->group, name);
        s->failed = 1;
        return -1;
    }
    copy_name(s->list[s->n].name, sizeof s->list[s->n].name, name);
    s->list[s->n++].value = v;
    return 0;
}

/* Every scalar dataset of /group, in the order of their names. */
static int read_scalars(reader *rd, hid_t f, const char *group, an_named **list, size_t *n) {
    hid_t g = H5Lexists(f, group, H5P_DEFAULT) > 0 ? H5Gopen2(f, group, H5P_DEFAULT) : -1;
    if (g < 0) return fail(rd, "no group /%s", group);
    H5G_info_t info;
    int rc = -1;
    if (H5Gget_info(g, &info) >= 0) {
        scalars s = {rd, group, calloc(info.nlinks + 1, sizeof *s.list), 0,
                     (size_t)info.nlinks, 0};
        if (!s.list) {
            fail(rd, "out of memory reading /%s", group);
        } else if (H5Literate(g, H5_INDEX_NAME, H5_ITER_INC, NULL, read_scalar, &s) < 0 ||
                   s.failed) {
            if (!s.failed) fail(rd, "cannot list /%s", group);
            free(s.list);
        } else {
            *list = s.list;
            *n = s.n;
            rc = 0;
        }
    } else {
        fail(rd, "cannot list /%s", group);
    }
    H5Gclose(g);
    return rc;
}

/* ---- the pulse and the samples ------------------------------------------------ */

static bool has_link(hid_t loc, const char *name) {
    return H5Lexists(loc, name, H5P_DEFAULT) > 0;
}

/* The first pulse's end; *found false when the shot has no pulse. */
static int read_pulse(reader *rd, hid_t f, bool *found, double *end) {
    *found = false;
    if (!has_link(f, "pulses")) return 0;
    hid_t pulses = H5Gopen2(f, "pulses", H5P_DEFAULT);
    if (pulses < 0) return fail(rd, "/pulses is not a group");
    int rc = 0;
    if (has_link(pulses, "1")) {
        hid_t p = H5Oopen(pulses, "1", H5P_DEFAULT);
        if (p < 0) {
            rc = fail(rd, "/pulses/1 cannot be opened");
        } else {
            *found = true;
            if (attr_number(p, "end", end) != 0) *end = NAN;
            else if (!isfinite(*end)) rc = fail(rd, "/pulses/1 attribute 'end' is not finite");
            H5Oclose(p);
        }
    }
    H5Gclose(pulses);
    return rc;
}

typedef struct {
    char name[AN_NAME];
    bool found;
} first_input;

static herr_t find_dataset(hid_t g, const char *name, const H5L_info_t *info, void *data) {
    first_input *fi = data;
    H5O_info_t oi;
    if (info->type != H5L_TYPE_HARD ||
        H5Oget_info_by_name2(g, name, &oi, H5O_INFO_BASIC, H5P_DEFAULT) < 0 ||
        oi.type != H5O_TYPE_DATASET)
        return 0;
    copy_name(fi->name, sizeof fi->name, name);
    fi->found = true;
    return 1;
}

/* The acquisition's first input: in creation order when the file tracks it,
 * else (as precess writes records) the first by name. */
static int first_dataset(hid_t g, char *name, size_t cap) {
    first_input fi = {"", false};
    if (H5Literate(g, H5_INDEX_CRT_ORDER, H5_ITER_INC, NULL, find_dataset, &fi) < 0 ||
        !fi.found) {
        fi.found = false;
        if (H5Literate(g, H5_INDEX_NAME, H5_ITER_INC, NULL, find_dataset, &fi) < 0) return -1;
    }
    if (!fi.found) return -1;
    copy_name(name, cap, fi.name);
    return 0;
}

static int read_channel_attrs(reader *rd, hid_t d, const char *where) {
    an_record *r = rd->r;
    if (need_number(rd, d, where, "sample_rate", &r->rate) ||
        need_number(rd, d, where, "t0", &r->t0) ||
        need_int(rd, d, where, "receiver_sign", &r->receiver_sign) ||
        need_string(rd, d, where, "units", r->units, sizeof r->units))
        return -1;
    if (!(r->rate > 0)) return fail(rd, "%s: sample_rate %g Hz is not positive", where, r->rate);
    if (r->receiver_sign != 1 && r->receiver_sign != -1)
        return fail(rd, "%s: receiver_sign %d is neither +1 nor -1", where, r->receiver_sign);
    return 0;
}

static int read_samples(reader *rd, hid_t d, const char *where) {
    an_record *r = rd->r;
    hid_t space = H5Dget_space(d), ft = H5Dget_type(d);
    int rc = 0;
    if (space < 0 || ft < 0 || H5Tget_class(ft) != H5T_FLOAT ||
        H5Sget_simple_extent_ndims(space) != 1) {
        rc = fail(rd, "%s is not a one-dimensional floating-point dataset", where);
    } else {
        hsize_t dims[1];
        H5Sget_simple_extent_dims(space, dims, NULL);
        r->n = (size_t)dims[0];
        r->samples = malloc((r->n ? r->n : 1) * sizeof *r->samples);
        if (!r->samples)
            rc = fail(rd, "out of memory for the %zu samples of %s", r->n, where);
        else if (r->n &&
                 H5Dread(d, H5T_NATIVE_FLOAT, H5S_ALL, H5S_ALL, H5P_DEFAULT, r->samples) < 0)
            rc = fail(rd, "the samples of %s cannot be read (a damaged file?)", where);
    }
    if (ft >= 0) H5Tclose(ft);
    if (space >= 0) H5Sclose(space);
    return rc;
}

static int read_acquisition(reader *rd, hid_t f) {
    an_record *r = rd->r;
    hid_t acq = has_link(f, "acquisitions") ? H5Gopen2(f, "acquisitions", H5P_DEFAULT) : -1;
    hid_t g = acq >= 0 && has_link(acq, "1") ? H5Gopen2(acq, "1", H5P_DEFAULT) : -1;
    if (acq >= 0) H5Gclose(acq);
    if (g < 0) return fail(rd, "no acquisition (/acquisitions/1 is missing)");
    int rc = 0;
    if (first_dataset(g, r->input, sizeof r->input) != 0) {
        rc = fail(rd, "/acquisitions/1 holds no input dataset");
    } else {
        char where[AN_NAME + 32];
        snprintf(where, sizeof where, "/acquisitions/1/%s", r->input);
        hid_t d = H5Dopen2(g, r->input, H5P_DEFAULT);
        if (d < 0) rc = fail(rd, "%s cannot be opened", where);
        else rc = read_channel_attrs(rd, d, where) || read_samples(rd, d, where) ? -1 : 0;
        if (d >= 0) H5Dclose(d);
    }
    H5Gclose(g);
    return rc;
}

/* ---- the whole record ----------------------------------------------------------- */

static int read_contents(reader *rd, hid_t f) {
    an_record *r = rd->r;
    bool pulse = false;
    double end = NAN;
    if (read_root(rd, f) ||
        read_scalars(rd, f, "parameters", &r->parameters, &r->nparameters) ||
        read_scalars(rd, f, "currents", &r->currents, &r->ncurrents) ||
        read_scalars(rd, f, "fields", &r->fields, &r->nfields) ||
        read_pulse(rd, f, &pulse, &end) || read_acquisition(rd, f))
        return -1;
    r->pulse_end = !pulse ? NAN : isnan(end) ? r->t0 : end;
    return 0;
}

int an_record_read(const char *path, an_record *r, char *err, size_t errlen) {
    if (!r) return -1;
    memset(r, 0, sizeof *r);
    reader rd = {path ? path : "(no path)", r, err, errlen};
    if (err && errlen) err[0] = '\0';
    if (!path) return fail(&rd, "no file given");
    /* Library code never prints: HDF5's own error printing is off while we
     * read, and put back as it was afterwards. */
    H5E_auto2_t old_func = NULL;
    void *old_data = NULL;
    H5Eget_auto2(H5E_DEFAULT, &old_func, &old_data);
    H5Eset_auto2(H5E_DEFAULT, NULL, NULL);
    int rc;
    FILE *probe = fopen(path, "rb");
    if (!probe) {
        rc = fail(&rd, "cannot be read: %s", strerror(errno));
    } else {
        fclose(probe);
        /* the core driver reads the whole file in one go: fewer, larger
         * reads than HDF5's many small ones (a record is tens of KiB) */
        hid_t fapl = H5Pcreate(H5P_FILE_ACCESS);
        if (fapl >= 0 && H5Pset_fapl_core(fapl, 1 << 16, 0) < 0) {
            H5Pclose(fapl);
            fapl = -1;
        }
        hid_t f = H5Fopen(path, H5F_ACC_RDONLY, fapl >= 0 ? fapl : H5P_DEFAULT);
        if (fapl >= 0) H5Pclose(fapl);
        if (f < 0) {
            rc = fail(&rd, "not a shot record (not an HDF5 file, or a damaged one)");
        } else {
            rc = read_contents(&rd, f);
            H5Fclose(f);
        }
    }
    H5Eset_auto2(H5E_DEFAULT, old_func, old_data);
    if (rc) an_record_free(r);
    return rc;
}

void an_record_free(an_record *r) {
    if (!r) return;
    free(r->parameters);
    free(r->currents);
    free(r->fields);
    free(r->samples);
    memset(r, 0, sizeof *r);
}

double an_named_value(const an_named *list, size_t n, const char *name) {
    if (!list || !name) return NAN;
    for (size_t i = 0; i < n; i++)
        if (strcmp(list[i].name, name) == 0) return list[i].value;
    return NAN;
}
