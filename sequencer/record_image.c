/* record_image: one shot record as the bytes of an HDF5 file, built in
 * memory in the layout run-format.md gives (root attributes, parameters,
 * currents, fields, pulses, events, acquisitions; samples as float32,
 * chunked, deflate-compressed). Several builders may work at once, each on
 * its own thread: they compress the samples side by side, and take turns
 * for HDF5 itself (Debian's is the serial build).
 * Not for putting the bytes on disk nor for the journal (store.c). */
#include "store.h"

#include <hdf5.h>
#include <libdeflate.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define CHUNK_SAMPLES 65536     /* samples per chunk of a sample dataset */
/* libdeflate's level 1: the zlib stream HDF5's deflate filter reads, made
 * in about a third of zlib's time at level 1 and a tenth smaller. */
#define DEFLATE_LEVEL 1

/* Debian's HDF5 is the serial build, unsafe from two threads at once: every
 * builder, of every store, takes turns through this lock. The one
 * process-wide state here, because the library's state is too. */
static pthread_mutex_t hdf5_lock = PTHREAD_MUTEX_INITIALIZER;

static const char *text(const char *s) { return s ? s : ""; }

/* One compressed chunk: where its bytes start in the packed buffer. */
typedef struct {
    size_t at, len;
} packed_chunk;

/* A record's chunks, compressed before HDF5 is taken, in the order
 * write_acquisitions hands them over (acquisition, input, chunk). */
struct record_packing {
    unsigned char *packed;
    size_t packed_len, packed_room;
    packed_chunk *chunks;
    size_t nchunks, chunks_room;
};

/* A builder's HDF5 objects and buffers, made on its first record and kept
 * for the rest: the same string type, scalar space and event row type serve
 * every record (each made afresh was a tenth of HDF5's calls). */
struct record_imager {
    bool ready;
    hid_t str;                  /* variable-length UTF-8 string type */
    hid_t scalar;               /* the scalar dataspace of every attribute */
    hid_t event;                /* /events' row type */
    struct libdeflate_compressor *deflate;
    record_packing own;         /* its buffers, kept from one record to the next */
    const record_packing *use;  /* the record's: own, or one packed ahead */
    size_t next_chunk;          /* the next of use's chunks to hand to HDF5 */
    char err[300];              /* the first failure, with HDF5's innermost reason */
};
typedef struct record_imager h5w;

static herr_t innermost(unsigned n, const H5E_error2_t *e, void *data) {
    if (n == 0 && e->desc) snprintf(data, 200, "%s", e->desc);
    return 0;
}

/* Notes the first failure with HDF5's innermost message. */
static int h5_fail(h5w *w, const char *what) {
    if (w->err[0]) return -1;
    char desc[200] = "";
    H5Ewalk2(H5E_DEFAULT, H5E_WALK_UPWARD, innermost, desc);
    snprintf(w->err, sizeof w->err, "%s: %s", what, desc[0] ? desc : "HDF5 error");
    return -1;
}

static int attr(h5w *w, hid_t loc, const char *name, hid_t type, const void *value) {
    hid_t a = H5Acreate2(loc, name, type, w->scalar, H5P_DEFAULT, H5P_DEFAULT);
    int rc = a < 0 || H5Awrite(a, type, value) < 0 ? h5_fail(w, name) : 0;
    if (a >= 0) H5Aclose(a);
    return rc;
}

static int attr_str(h5w *w, hid_t loc, const char *name, const char *value) {
    const char *v = text(value);
    return attr(w, loc, name, w->str, &v);
}

static int attr_int(h5w *w, hid_t loc, const char *name, int64_t value) {
    int32_t v = (int32_t)value;     /* check_record keeps every count in range */
    return attr(w, loc, name, H5T_STD_I32LE, &v);
}

static int attr_f64(h5w *w, hid_t loc, const char *name, double value) {
    return attr(w, loc, name, H5T_IEEE_F64LE, &value);
}

static int write_root(h5w *w, hid_t f, const store_record *r, bool failed) {
    int rc = attr_str(w, f, "format", "precess-shot");
    rc |= attr_int(w, f, "format_version", 1);
    rc |= attr_str(w, f, "run", r->run);
    rc |= attr_int(w, f, "shot", r->shot);
    rc |= attr_int(w, f, "attempt", r->attempt);
    rc |= attr_int(w, f, "point", r->point);
    rc |= attr_int(w, f, "average", r->average);
    rc |= attr_str(w, f, "kind", r->kind);
    rc |= attr_str(w, f, "status", failed ? "failed" : "ok");
    rc |= attr_str(w, f, "started_utc", r->started_utc);
    rc |= attr_str(w, f, "driver", r->driver);
    rc |= attr_str(w, f, "precess_version", r->precess_version);
    rc |= attr_str(w, f, "plan_sha256", r->plan_sha256);
    if (failed) rc |= attr_str(w, f, "error", r->error && *r->error ? r->error : "failed");
    return rc ? -1 : 0;
}

static hid_t group_new(h5w *w, hid_t parent, const char *name) {
    hid_t g = H5Gcreate2(parent, name, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    if (g < 0) h5_fail(w, name);
    return g;
}

/* /GROUP/NAME: scalar float64 datasets, each with its units: each[i], or
 * units for all when each is NULL. */
static int write_scalars(h5w *w, hid_t f, const char *group, size_t n, const char **names,
                         const double *values, const char *units, const char *const *each) {
    hid_t g = group_new(w, f, group);
    int rc = g < 0 ? -1 : 0;
    for (size_t i = 0; i < n && rc == 0; i++) {
        hid_t d = H5Dcreate2(g, names[i], H5T_IEEE_F64LE, w->scalar, H5P_DEFAULT, H5P_DEFAULT,
                             H5P_DEFAULT);
        if (d < 0 || H5Dwrite(d, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT,
                              &values[i]) < 0)
            rc = h5_fail(w, names[i]);
        if (rc == 0) rc = attr_str(w, d, "units", each && each[i] ? each[i] : units);
        if (d >= 0) H5Dclose(d);
    }
    if (g >= 0) H5Gclose(g);
    return rc;
}

static int write_pulse(h5w *w, hid_t pulses, size_t k, const store_pulse *p) {
    char name[32];
    snprintf(name, sizeof name, "%zu", k + 1);
    hid_t g = group_new(w, pulses, name);
    if (g < 0) return -1;
    int rc = attr_str(w, g, "coil", p->coil);
    rc |= attr_str(w, g, "shape", p->shape);
    rc |= attr_f64(w, g, "duration", p->duration);
    rc |= attr_f64(w, g, "amplitude", p->amplitude);
    rc |= attr_f64(w, g, "start", p->start);
    rc |= attr_f64(w, g, "end", p->end);
    rc |= attr_int(w, g, "polarity", p->polarity);
    for (size_t i = 0; i < p->nangles && rc == 0; i++) {
        char angle[160];
        snprintf(angle, sizeof angle, "angle_%s", p->nuclei[i]);
        rc |= attr_f64(w, g, angle, p->angles[i]);
    }
    H5Gclose(g);
    return rc ? -1 : 0;
}

static int write_pulses(h5w *w, hid_t f, const store_record *r) {
    hid_t g = group_new(w, f, "pulses");
    if (g < 0) return -1;
    int rc = 0;
    for (size_t k = 0; k < r->npulses && rc == 0; k++) rc = write_pulse(w, g, k, &r->pulses[k]);
    H5Gclose(g);
    if (rc == 0 && r->npulses > 0 &&
        H5Lcreate_soft("/pulses/1", f, "pulse", H5P_DEFAULT, H5P_DEFAULT) < 0)
        rc = h5_fail(w, "/pulse");
    return rc;
}

typedef struct {
    int32_t step;
    const char *label, *kind;
    double planned, actual;
} event_row;

static hid_t event_type(hid_t str) {
    hid_t t = H5Tcreate(H5T_COMPOUND, sizeof(event_row));
    if (t < 0 || H5Tinsert(t, "step", HOFFSET(event_row, step), H5T_NATIVE_INT32) < 0 ||
        H5Tinsert(t, "label", HOFFSET(event_row, label), str) < 0 ||
        H5Tinsert(t, "kind", HOFFSET(event_row, kind), str) < 0 ||
        H5Tinsert(t, "planned", HOFFSET(event_row, planned), H5T_NATIVE_DOUBLE) < 0 ||
        H5Tinsert(t, "actual", HOFFSET(event_row, actual), H5T_NATIVE_DOUBLE) < 0) {
        if (t >= 0) H5Tclose(t);
        return -1;
    }
    return t;
}

static void h5w_release(h5w *w) {
    if (w->event >= 0) H5Tclose(w->event);
    if (w->scalar >= 0) H5Sclose(w->scalar);
    if (w->str >= 0) H5Tclose(w->str);
    w->ready = false;
}

/* The kept objects, made once; 0, or -1 with w->err saying which failed. */
static int h5w_prepare(h5w *w) {
    if (w->ready) return 0;
    w->str = H5Tcopy(H5T_C_S1);
    w->scalar = H5Screate(H5S_SCALAR);
    w->event = -1;
    if (w->str < 0 || H5Tset_size(w->str, H5T_VARIABLE) < 0 ||
        H5Tset_cset(w->str, H5T_CSET_UTF8) < 0 || w->scalar < 0 ||
        (w->event = event_type(w->str)) < 0) {
        int rc = h5_fail(w, "the record's types");
        h5w_release(w);
        return rc;
    }
    w->ready = true;
    return 0;
}

static int write_events(h5w *w, hid_t f, const store_record *r) {
    event_row *rows = r->nevents ? calloc(r->nevents, sizeof *rows) : NULL;
    if (r->nevents && !rows) return snprintf(w->err, sizeof w->err, "/events: out of memory"), -1;
    for (size_t i = 0; i < r->nevents; i++) {
        const store_event *e = &r->events[i];
        rows[i] = (event_row){e->step, text(e->label), text(e->kind), e->planned, e->actual};
    }
    hsize_t dims[1] = {r->nevents};
    hid_t t = w->event, space = H5Screate_simple(1, dims, NULL), d = -1;
    /* A conversion buffer the size of the table, not HDF5's default 1 MB
     * (allocated and cleared for every record). */
    hid_t xfer = H5Pcreate(H5P_DATASET_XFER);
    size_t buffer = (r->nevents + 1) * 2 * sizeof(event_row);
    int rc = t < 0 || space < 0 || xfer < 0 || H5Pset_buffer(xfer, buffer, NULL, NULL) < 0
                 ? h5_fail(w, "/events")
                 : 0;
    if (rc == 0) d = H5Dcreate2(f, "events", t, space, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    if (rc == 0 && (d < 0 || (r->nevents && H5Dwrite(d, t, H5S_ALL, H5S_ALL, xfer, rows) < 0)))
        rc = h5_fail(w, "/events");
    if (xfer >= 0) H5Pclose(xfer);
    if (rc == 0) rc = attr_str(w, d, "units", "s");
    if (d >= 0) H5Dclose(d);
    if (space >= 0) H5Sclose(space);
    free(rows);
    return rc;
}

static int channel_attrs(h5w *w, hid_t d, const store_channel *c) {
    int rc = attr_str(w, d, "units", c->units);
    rc |= attr_f64(w, d, "sample_rate", c->sample_rate);
    rc |= attr_f64(w, d, "t0", c->t0);
    rc |= attr_int(w, d, "adc_bits", c->adc_bits);
    rc |= attr_f64(w, d, "volts_per_count", c->volts_per_count);
    rc |= attr_int(w, d, "receiver_sign", c->receiver_sign);
    return rc ? -1 : 0;
}

/* Samples per chunk of an input's dataset. */
static size_t chunk_samples(const store_channel *c) {
    return c->n == 0 ? 1 : c->n < CHUNK_SAMPLES ? c->n : CHUNK_SAMPLES;
}

/* Whether the samples go in as chunks compressed here (HDF5's direct chunk
 * write): they must already be the file's float32 little-endian. */
static bool packed_here(const store_channel *c) {
    return c->n > 0 && __BYTE_ORDER__ == __ORDER_LITTLE_ENDIAN__;
}

static void *grow(void *p, size_t *room, size_t need, size_t size) {
    if (need <= *room) return p;
    size_t more = *room ? *room : 8;
    while (more < need) more *= 2;
    void *q = realloc(p, more * size);
    if (q) *room = more;
    return q;
}

/* An input's samples, chunk by chunk, each compressed into the zlib stream
 * HDF5's deflate filter would have made; the last chunk padded with zeros
 * to the chunk's size, as HDF5 stores edge chunks. No HDF5 here: builders
 * compress side by side. */
static int pack_channel(h5w *w, record_packing *p, const store_channel *c) {
    size_t chunk = chunk_samples(c);
    size_t bound = libdeflate_zlib_compress_bound(w->deflate, chunk * sizeof(float));
    float *edge = NULL;
    const char *failed = NULL;
    for (size_t at = 0; at < c->n && !failed; at += chunk) {
        const float *from = c->samples + at;
        if (c->n - at < chunk) {
            if (!(edge = calloc(chunk, sizeof *edge))) {
                failed = "out of memory";
                break;
            }
            memcpy(edge, from, (c->n - at) * sizeof *edge);
            from = edge;
        }
        unsigned char *bytes = grow(p->packed, &p->packed_room, p->packed_len + bound, 1);
        if (bytes) p->packed = bytes;
        packed_chunk *list =
            bytes ? grow(p->chunks, &p->chunks_room, p->nchunks + 1, sizeof *list) : NULL;
        if (list) p->chunks = list;
        if (!list) {
            failed = "out of memory";
            break;
        }
        size_t len = libdeflate_zlib_compress(w->deflate, from, chunk * sizeof(float),
                                              p->packed + p->packed_len, bound);
        if (len == 0) failed = "the compressor found no room";
        p->chunks[p->nchunks++] = (packed_chunk){p->packed_len, len};
        p->packed_len += len;
    }
    free(edge);
    if (failed) snprintf(w->err, sizeof w->err, "%s: %s", c->input, failed);
    return failed ? -1 : 0;
}

/* Every input of the record packed into p, in the order HDF5 will take
 * them. */
static int pack_record(h5w *w, record_packing *p, const store_record *r) {
    p->packed_len = p->nchunks = 0;
    if (!w->deflate) return snprintf(w->err, sizeof w->err, "no memory for the compressor"), -1;
    for (size_t k = 0; k < r->nacquisitions; k++)
        for (size_t c = 0; c < r->acquisitions[k].nchannels; c++) {
            const store_channel *ch = &r->acquisitions[k].channels[c];
            if (packed_here(ch) && pack_channel(w, p, ch) != 0) return -1;
        }
    return 0;
}

/* An input's packed chunks into its dataset, as they are. */
static int write_chunks(h5w *w, hid_t d, const store_channel *c) {
    size_t chunk = chunk_samples(c);
    for (size_t at = 0; at < c->n; at += chunk) {
        if (w->next_chunk == w->use->nchunks)   /* packed from another record: a bug */
            return snprintf(w->err, sizeof w->err, "%s: chunks missing", c->input), -1;
        const packed_chunk *p = &w->use->chunks[w->next_chunk++];
        hsize_t offset[1] = {at};
        if (H5Dwrite_chunk(d, H5P_DEFAULT, 0, offset, p->len, w->use->packed + p->at) < 0)
            return h5_fail(w, c->input);
    }
    return 0;
}

/* One input's samples: float32, chunked, deflate-compressed. */
static int write_channel(h5w *w, hid_t g, const store_channel *c) {
    hsize_t dims[1] = {c->n}, max[1] = {c->n ? c->n : H5S_UNLIMITED};
    hsize_t chunk[1] = {chunk_samples(c)};
    hid_t space = H5Screate_simple(1, dims, max), plist = H5Pcreate(H5P_DATASET_CREATE), d = -1;
    int rc = space < 0 || plist < 0 || H5Pset_chunk(plist, 1, chunk) < 0 ||
                     H5Pset_fill_time(plist, H5D_FILL_TIME_NEVER) < 0 ||
                     H5Pset_deflate(plist, DEFLATE_LEVEL) < 0
                 ? h5_fail(w, c->input)
                 : 0;
    if (rc == 0) d = H5Dcreate2(g, c->input, H5T_IEEE_F32LE, space, H5P_DEFAULT, plist,
                                H5P_DEFAULT);
    if (rc == 0 && d < 0) rc = h5_fail(w, c->input);
    if (rc == 0 && packed_here(c)) rc = write_chunks(w, d, c);
    else if (rc == 0 && c->n &&
             H5Dwrite(d, H5T_NATIVE_FLOAT, H5S_ALL, H5S_ALL, H5P_DEFAULT, c->samples) < 0)
        rc = h5_fail(w, c->input);
    if (rc == 0) rc = channel_attrs(w, d, c);
    if (d >= 0) H5Dclose(d);
    if (plist >= 0) H5Pclose(plist);
    if (space >= 0) H5Sclose(space);
    return rc;
}

static int write_acquisitions(h5w *w, hid_t f, const store_record *r) {
    hid_t top = group_new(w, f, "acquisitions");
    if (top < 0) return -1;
    int rc = 0;
    for (size_t k = 0; k < r->nacquisitions && rc == 0; k++) {
        char name[32];
        snprintf(name, sizeof name, "%zu", k + 1);
        hid_t g = group_new(w, top, name);
        if (g < 0) rc = -1;
        for (size_t c = 0; c < r->acquisitions[k].nchannels && rc == 0; c++)
            rc = write_channel(w, g, &r->acquisitions[k].channels[c]);
        if (g >= 0) H5Gclose(g);
    }
    H5Gclose(top);
    if (rc == 0 && r->nacquisitions > 0 &&
        H5Lcreate_soft("/acquisitions/1", f, "signal", H5P_DEFAULT, H5P_DEFAULT) < 0)
        rc = h5_fail(w, "/signal");
    return rc;
}

/* In memory: HDF5's core driver without a backing store, so that a full disk
 * can never leave HDF5 holding a file it cannot close; growing by about the
 * record's size keeps the reallocations few. */
static hid_t memory_fapl(const store_record *r) {
    size_t bytes = 1 << 16;
    for (size_t k = 0; k < r->nacquisitions; k++)
        for (size_t c = 0; c < r->acquisitions[k].nchannels; c++)
            bytes += r->acquisitions[k].channels[c].n * sizeof(float);
    hid_t fapl = H5Pcreate(H5P_FILE_ACCESS);
    if (fapl >= 0 && H5Pset_fapl_core(fapl, bytes, 0) < 0) {
        H5Pclose(fapl);
        return -1;
    }
    return fapl;
}

static int write_contents(h5w *w, hid_t f, const store_record *r, bool failed) {
    int rc = write_root(w, f, r, failed);
    if (rc == 0)
        rc = write_scalars(w, f, "parameters", r->nparameters, r->parameter_names,
                           r->parameters, "1", r->parameter_units);
    if (rc == 0)
        rc = write_scalars(w, f, "currents", r->ncoils, r->coil_names, r->currents, "A", NULL);
    if (rc == 0)
        rc = write_scalars(w, f, "fields", r->nplaces, r->place_names, r->fields, "T", NULL);
    if (rc == 0) rc = write_pulses(w, f, r);
    if (rc == 0) rc = write_events(w, f, r);
    if (rc == 0) rc = write_acquisitions(w, f, r);
    return rc;
}

/* The whole record as the bytes of an HDF5 file (flushed, closed), in
 * *image (malloc'd, the caller frees) of *len bytes. */
static int build_image(h5w *w, const char *name, const store_record *r, bool failed,
                       void **image, size_t *len) {
    if (h5w_prepare(w) != 0) return -1;
    hid_t fapl = memory_fapl(r);
    /* HDF5 first tries to open the name as an existing file, even in memory:
     * under /dev/null no file can be, so a record of that name in the
     * current folder is never read. */
    char where[128];
    snprintf(where, sizeof where, "/dev/null/%s", name);
    hid_t f = fapl < 0 ? -1 : H5Fcreate(where, H5F_ACC_TRUNC, H5P_DEFAULT, fapl);
    int rc = f < 0 ? h5_fail(w, "create") : write_contents(w, f, r, failed);
    if (rc == 0 && w->next_chunk != w->use->nchunks) {     /* packed from another record */
        snprintf(w->err, sizeof w->err, "chunks left over");
        rc = -1;
    }
    if (rc == 0 && H5Fflush(f, H5F_SCOPE_GLOBAL) < 0) rc = h5_fail(w, "flush");
    ssize_t size = rc == 0 ? H5Fget_file_image(f, NULL, 0) : -1;
    if (rc == 0 && (size <= 0 || !(*image = malloc((size_t)size)) ||
                    H5Fget_file_image(f, *image, (size_t)size) != size))
        rc = h5_fail(w, "file image");
    if (f >= 0 && H5Fclose(f) < 0 && rc == 0) rc = h5_fail(w, "close");
    if (fapl >= 0) H5Pclose(fapl);
    if (rc != 0) {
        free(*image);
        *image = NULL;
    }
    *len = rc == 0 ? (size_t)size : 0;
    return rc;
}

/* ---- the builder ------------------------------------------------------------ */

record_imager *record_imager_new(void) {
    record_imager *w = calloc(1, sizeof *w);
    if (w && !(w->deflate = libdeflate_alloc_compressor(DEFLATE_LEVEL))) {
        free(w);
        w = NULL;
    }
    if (w) {
        pthread_mutex_lock(&hdf5_lock);
        H5Eset_auto2(H5E_DEFAULT, NULL, NULL);  /* failures come back as messages */
        pthread_mutex_unlock(&hdf5_lock);
    }
    return w;
}

void record_imager_free(record_imager *w) {
    if (!w) return;
    if (w->ready) {
        pthread_mutex_lock(&hdf5_lock);
        h5w_release(w);
        pthread_mutex_unlock(&hdf5_lock);
    }
    libdeflate_free_compressor(w->deflate);
    free(w->own.packed);
    free(w->own.chunks);
    free(w);
}

record_packing *record_pack(record_imager *w, const store_record *r) {
    record_packing *p = calloc(1, sizeof *p);
    if (p && pack_record(w, p, r) != 0) {
        record_packing_free(p);
        p = NULL;
    }
    return p;
}

void record_packing_free(record_packing *p) {
    if (!p) return;
    free(p->packed);
    free(p->chunks);
    free(p);
}

int record_image_build(record_imager *w, const char *name, const store_record *r,
                       const record_packing *packed, bool failed, void **image, size_t *len,
                       char *err, size_t errlen) {
    w->err[0] = '\0';
    *image = NULL;
    *len = 0;
    w->use = packed ? packed : &w->own;
    w->next_chunk = 0;
    int rc = packed ? 0 : pack_record(w, &w->own, r);   /* the CPU-heavy part, side by side */
    if (rc == 0) {
        pthread_mutex_lock(&hdf5_lock);
        rc = build_image(w, name, r, failed, image, len);
        pthread_mutex_unlock(&hdf5_lock);
    }
    w->use = &w->own;                   /* never the caller's, once it is done */
    if (rc != 0) snprintf(err, errlen, "%s", w->err);
    return rc;
}
