/* store: the run folder (run-format.md) and its shot records: creating the
 * folder; building each record as an HDF5 file image in memory, writing it
 * under a temporary name, fsync, rename, fsync of the folder, journal line;
 * all on one writer thread behind a bounded queue (the only HDF5 caller).
 * Not for the journal's line format (journal.c) nor for what a record holds. */
#include "store.h"

#include <errno.h>
#include <fcntl.h>
#include <hdf5.h>
#include <inttypes.h>
#include <jansson.h>
#include <libdeflate.h>
#include <libgen.h>
#include <limits.h>
#include <pthread.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <unistd.h>

#define STAGE_DEPTH 4          /* built images waiting for the committer */
#define CHUNK_SAMPLES 65536     /* samples per chunk of a sample dataset */
/* libdeflate's level 1: the zlib stream HDF5's deflate filter reads, made
 * in about a third of zlib's time at level 1 and a tenth smaller. */
#define DEFLATE_LEVEL 1

/* How far the record builder sits below the run's own priority (nice). */
#define BUILD_NICE 10

/* Debian's HDF5 is the serial build, unsafe from two threads at once: the
 * writers of two stores open together take turns through this lock. The
 * one process-wide state here, because the library's state is too. */
static pthread_mutex_t hdf5_lock = PTHREAD_MUTEX_INITIALIZER;

struct store {
    char *dir;
    int dirfd, recordsfd, failedfd, journalfd;
    pthread_mutex_t journal_lock;   /* the journal's own: any thread appends */
    pthread_mutex_t lock;           /* everything below */
    pthread_cond_t work;            /* a record was queued, or stop */
    pthread_cond_t room;            /* a record left the queue or was written */
    store_record **queue;
    size_t capacity, head, count;
    /* Records built into file images, waiting for the committer: building
     * (CPU) and committing (fsync, mostly waiting for the disk) overlap. */
    pthread_cond_t built, built_room;
    struct built_record *stage[STAGE_DEPTH];
    size_t stage_head, stage_count;
    size_t inflight;                /* taken from queue, not yet committed */
    bool started, stopping, building_done, failed;
    size_t ok, nfailed, lost;       /* lost: dropped after the writer failed */
    char error[640];
    pthread_t writer, committer;
};

/* A record's file image, made by the builder for the committer. */
typedef struct built_record {
    store_record *r;
    void *image;
    size_t len;
    bool failed;                    /* a failed attempt's partial record */
    int rc;                         /* -1: building failed, err says why */
    char name[64], tmp[80], rel[128], sha[65];
    char err[640];
} built_record;

/* ---- records -------------------------------------------------------------- */

store_record *store_record_new(void) {
    arena *a = arena_new();
    if (!a) return NULL;
    store_record *r = arena_alloc(a, sizeof *r);
    if (!r) {
        arena_free(a);
        return NULL;
    }
    r->arena = a;
    return r;
}

void store_record_free(store_record *r) {
    if (r) arena_free(r->arena);  /* r itself lives in its arena */
}

static bool record_failed(const store_record *r) {
    return (r->status && strcmp(r->status, "failed") == 0) || (r->error && *r->error);
}

static const char *text(const char *s) { return s ? s : ""; }

/* ---- the run folder --------------------------------------------------------- */

static int write_all(int fd, const void *bytes, size_t len) {
    const char *p = bytes;
    while (len > 0) {
        ssize_t put = write(fd, p, len);
        if (put < 0 && errno == EINTR) continue;
        if (put < 0) return -1;
        p += put;
        len -= (size_t)put;
    }
    return 0;
}

/* name in dirfd, whole or not at all: temporary file, fsync, rename. */
static int write_file_at(int dirfd, const char *name, const void *bytes, size_t len) {
    char tmp[64];
    snprintf(tmp, sizeof tmp, ".%s.tmp", name);
    int fd = openat(dirfd, tmp, O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, 0666);
    if (fd < 0) return -1;
    int rc = write_all(fd, bytes, len) != 0 || fsync(fd) != 0 ? -1 : 0;
    int saved = errno;
    if (close(fd) != 0 && rc == 0) rc = -1, saved = errno;
    if (rc == 0 && renameat(dirfd, tmp, dirfd, name) != 0) rc = -1, saved = errno;
    if (rc != 0) unlinkat(dirfd, tmp, 0);
    errno = saved;
    return rc;
}

static int fsync_path(const char *path) {
    int fd = open(path, O_RDONLY | O_DIRECTORY | O_CLOEXEC);
    if (fd < 0) return -1;
    int rc = fsync(fd);
    close(fd);
    return rc;
}

/* Takes back a half-made run folder so that the same name can be tried again. */
static void remove_folder(store *s) {
    static const char *files[] = {"plan.yaml", "rig.yaml", "points.json", "journal.jsonl"};
    if (s->dirfd >= 0) {
        for (size_t i = 0; i < sizeof files / sizeof *files; i++) unlinkat(s->dirfd, files[i], 0);
        unlinkat(s->dirfd, "records/failed", AT_REMOVEDIR);
        unlinkat(s->dirfd, "records", AT_REMOVEDIR);
    }
    rmdir(s->dir);
}

static void close_fds(store *s) {
    int *fds[] = {&s->dirfd, &s->recordsfd, &s->failedfd, &s->journalfd};
    for (size_t i = 0; i < 4; i++) {
        if (*fds[i] >= 0) close(*fds[i]);
        *fds[i] = -1;
    }
}

static void store_free(store *s) {
    close_fds(s);
    pthread_mutex_destroy(&s->journal_lock);
    pthread_mutex_destroy(&s->lock);
    pthread_cond_destroy(&s->work);
    pthread_cond_destroy(&s->room);
    pthread_cond_destroy(&s->built);
    pthread_cond_destroy(&s->built_room);
    free(s->queue);
    free(s->dir);
    free(s);
}

static store *store_alloc(const char *dir) {
    store *s = calloc(1, sizeof *s);
    if (!s) return NULL;
    s->dirfd = s->recordsfd = s->failedfd = s->journalfd = -1;
    s->dir = strdup(dir);
    if (!s->dir || pthread_mutex_init(&s->journal_lock, NULL) != 0) {
        free(s->dir);
        free(s);
        return NULL;
    }
    pthread_mutex_init(&s->lock, NULL);
    pthread_cond_init(&s->work, NULL);
    pthread_cond_init(&s->room, NULL);
    pthread_cond_init(&s->built, NULL);
    pthread_cond_init(&s->built_room, NULL);
    return s;
}

/* The files and folders inside dir; returns what failed, or NULL. */
static const char *fill_folder(store *s, const store_files *f) {
    if ((s->dirfd = open(s->dir, O_RDONLY | O_DIRECTORY | O_CLOEXEC)) < 0) return "the folder";
    if (write_file_at(s->dirfd, "plan.yaml", f->plan_bytes, f->plan_len) != 0) return "plan.yaml";
    if (write_file_at(s->dirfd, "rig.yaml", f->rig_bytes, f->rig_len) != 0) return "rig.yaml";
    if (write_file_at(s->dirfd, "points.json", f->points_json, strlen(f->points_json)) != 0)
        return "points.json";
    s->journalfd = openat(s->dirfd, "journal.jsonl",
                          O_WRONLY | O_CREAT | O_EXCL | O_APPEND | O_CLOEXEC, 0666);
    if (s->journalfd < 0) return "journal.jsonl";
    if (mkdirat(s->dirfd, "records", 0777) != 0 ||
        (s->recordsfd = openat(s->dirfd, "records", O_RDONLY | O_DIRECTORY | O_CLOEXEC)) < 0)
        return "records/";
    if (mkdirat(s->recordsfd, "failed", 0777) != 0 ||
        (s->failedfd = openat(s->recordsfd, "failed", O_RDONLY | O_DIRECTORY | O_CLOEXEC)) < 0)
        return "records/failed/";
    if (fsync(s->failedfd) != 0 || fsync(s->recordsfd) != 0 || fsync(s->dirfd) != 0)
        return "the folder (fsync)";
    char parent[PATH_MAX];
    snprintf(parent, sizeof parent, "%s", s->dir);
    if (fsync_path(dirname(parent)) != 0) return "the parent folder (fsync)";
    return NULL;
}

int store_create(const char *dir, const store_files *files, store **out, char *err,
                 size_t errlen) {
    *out = NULL;
    if (!dir || !*dir || !files || !files->points_json ||
        (files->plan_len && !files->plan_bytes) || (files->rig_len && !files->rig_bytes)) {
        snprintf(err, errlen, "cannot create a run folder: no folder, plan, rig or points given");
        return -1;
    }
    if (strlen(dir) > PATH_MAX - 64) {
        snprintf(err, errlen, "run folder name too long (%zu bytes); choose a shorter path",
                 strlen(dir));
        return -1;
    }
    if (mkdir(dir, 0777) != 0) {
        if (errno == EEXIST)
            snprintf(err, errlen, "run folder '%s' already exists; give a new folder for a "
                     "new run", dir);
        else
            snprintf(err, errlen, "cannot create run folder '%s': %s%s", dir, strerror(errno),
                     errno == ENOENT ? " (its parent folder must exist)" : "");
        return -1;
    }
    store *s = store_alloc(dir);
    if (!s) {
        rmdir(dir);
        snprintf(err, errlen, "cannot create run folder '%s': out of memory", dir);
        return -1;
    }
    const char *what = fill_folder(s, files);
    if (what) {
        snprintf(err, errlen, "cannot write %s in run folder '%s': %s; nothing was kept",
                 what, dir, strerror(errno));
        remove_folder(s);
        store_free(s);
        return -1;
    }
    *out = s;
    return 0;
}

const char *store_dir(const store *s) { return s->dir; }

/* For journal.c: the journal's descriptor, with its lock held. */
int store_journal_lock(store *s) {
    pthread_mutex_lock(&s->journal_lock);
    return s->journalfd;
}

void store_journal_unlock(store *s) { pthread_mutex_unlock(&s->journal_lock); }

/* ---- checking a record before it is queued -------------------------------- */

static bool bad_name(const char *name) {
    return !name || !*name || strchr(name, '/') || strcmp(name, ".") == 0;
}

/* The first bad or repeated name of a group, or NULL; *why says which. */
static const char *check_names(size_t n, const char *const *names, const char **why) {
    *why = "missing";
    if (n && !names) return "";
    for (size_t i = 0; i < n; i++) {
        *why = "empty, '.' or containing '/'";
        if (bad_name(names[i])) return text(names[i]);
        *why = "given twice";
        for (size_t j = 0; j < i; j++)
            if (strcmp(names[i], names[j]) == 0) return names[i];
    }
    return NULL;
}

static int refuse(const store_record *r, char *err, size_t errlen, const char *what,
                  const char *name, const char *why) {
    snprintf(err, errlen, "record of shot %" PRIu32 " attempt %" PRIu32 " refused: %s '%s' "
             "is %s", r->shot, r->attempt, what, name, why);
    return -1;
}

static int check_channels(const store_record *r, const store_acquisition *a, char *err,
                          size_t errlen) {
    if (a->nchannels && !a->channels) return refuse(r, err, errlen, "acquisition", "", "empty");
    for (size_t c = 0; c < a->nchannels; c++) {
        const char *input = a->channels[c].input;
        if (bad_name(input))
            return refuse(r, err, errlen, "input", text(input), "empty, '.' or containing '/'");
        if (a->channels[c].n && !a->channels[c].samples)
            return refuse(r, err, errlen, "input", input, "without samples");
        for (size_t d = 0; d < c; d++)
            if (strcmp(input, a->channels[d].input) == 0)
                return refuse(r, err, errlen, "input", input, "given twice");
    }
    return 0;
}

static int check_record(const store_record *r, char *err, size_t errlen) {
    const char *why, *name;
    if (r->shot < 1 || r->attempt < 1 || r->shot > INT32_MAX || r->attempt > INT32_MAX ||
        r->point > INT32_MAX || r->average > INT32_MAX)
        return refuse(r, err, errlen, "numbering", "shot/attempt/point/average",
                      "out of range (shot and attempt count from 1)");
    if (r->status && strcmp(r->status, "ok") != 0 && strcmp(r->status, "failed") != 0)
        return refuse(r, err, errlen, "status", r->status, "neither ok nor failed");
    if ((name = check_names(r->nparameters, r->parameter_names, &why)) ||
        (r->nparameters && !r->parameters))
        return refuse(r, err, errlen, "parameter", text(name), name ? why : "without a value");
    if ((name = check_names(r->ncoils, r->coil_names, &why)) || (r->ncoils && !r->currents))
        return refuse(r, err, errlen, "coil", text(name), name ? why : "without a current");
    if ((name = check_names(r->nplaces, r->place_names, &why)) || (r->nplaces && !r->fields))
        return refuse(r, err, errlen, "place", text(name), name ? why : "without a field");
    if ((r->npulses && !r->pulses) || (r->nevents && !r->events) ||
        (r->nacquisitions && !r->acquisitions))
        return refuse(r, err, errlen, "list", "pulses/events/acquisitions", "missing");
    for (size_t k = 0; k < r->npulses; k++) {
        const store_pulse *p = &r->pulses[k];
        if ((name = check_names(p->nangles, p->nuclei, &why)) || (p->nangles && !p->angles))
            return refuse(r, err, errlen, "nucleus", text(name), name ? why : "without angle");
    }
    for (size_t k = 0; k < r->nacquisitions; k++)
        if (check_channels(r, &r->acquisitions[k], err, errlen) != 0) return -1;
    return 0;
}

/* ---- HDF5 (writer thread only) -------------------------------------------- */

typedef struct {
    hid_t str;                  /* variable-length UTF-8 string type */
    struct libdeflate_compressor *deflate;  /* the builder's, kept across records */
    void *chunk;                /* a compressed chunk, deflate_room bytes */
    size_t deflate_room;
    char err[300];              /* the first failure, with HDF5's innermost reason */
} h5w;

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
    hid_t space = H5Screate(H5S_SCALAR);
    hid_t a = space < 0 ? -1 : H5Acreate2(loc, name, type, space, H5P_DEFAULT, H5P_DEFAULT);
    int rc = a < 0 || H5Awrite(a, type, value) < 0 ? h5_fail(w, name) : 0;
    if (a >= 0) H5Aclose(a);
    if (space >= 0) H5Sclose(space);
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
    hid_t g = group_new(w, f, group), space = H5Screate(H5S_SCALAR);
    int rc = g < 0 || space < 0 ? -1 : 0;
    for (size_t i = 0; i < n && rc == 0; i++) {
        hid_t d = H5Dcreate2(g, names[i], H5T_IEEE_F64LE, space, H5P_DEFAULT, H5P_DEFAULT,
                             H5P_DEFAULT);
        if (d < 0 || H5Dwrite(d, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT,
                              &values[i]) < 0)
            rc = h5_fail(w, names[i]);
        if (rc == 0) rc = attr_str(w, d, "units", each && each[i] ? each[i] : units);
        if (d >= 0) H5Dclose(d);
    }
    if (space >= 0) H5Sclose(space);
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

static hid_t event_type(h5w *w) {
    hid_t t = H5Tcreate(H5T_COMPOUND, sizeof(event_row));
    if (t < 0 || H5Tinsert(t, "step", HOFFSET(event_row, step), H5T_NATIVE_INT32) < 0 ||
        H5Tinsert(t, "label", HOFFSET(event_row, label), w->str) < 0 ||
        H5Tinsert(t, "kind", HOFFSET(event_row, kind), w->str) < 0 ||
        H5Tinsert(t, "planned", HOFFSET(event_row, planned), H5T_NATIVE_DOUBLE) < 0 ||
        H5Tinsert(t, "actual", HOFFSET(event_row, actual), H5T_NATIVE_DOUBLE) < 0) {
        if (t >= 0) H5Tclose(t);
        h5_fail(w, "/events type");
        return -1;
    }
    return t;
}

static int write_events(h5w *w, hid_t f, const store_record *r) {
    event_row *rows = r->nevents ? calloc(r->nevents, sizeof *rows) : NULL;
    if (r->nevents && !rows) return snprintf(w->err, sizeof w->err, "/events: out of memory"), -1;
    for (size_t i = 0; i < r->nevents; i++) {
        const store_event *e = &r->events[i];
        rows[i] = (event_row){e->step, text(e->label), text(e->kind), e->planned, e->actual};
    }
    hsize_t dims[1] = {r->nevents};
    hid_t t = event_type(w), space = H5Screate_simple(1, dims, NULL), d = -1;
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
    if (t >= 0) H5Tclose(t);
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

/* The samples chunk by chunk, each compressed here into the zlib stream
 * HDF5's deflate filter would have made and handed to HDF5 as it is (its
 * direct chunk write): the dataset's filter pipeline still says deflate,
 * and every reader decodes it so. The last chunk is padded with zeros to
 * the chunk's size, as HDF5 stores edge chunks. */
static int write_chunks(h5w *w, hid_t d, const store_channel *c, size_t chunk) {
    if (!w->deflate)
        return snprintf(w->err, sizeof w->err, "%s: no memory for the compressor", c->input), -1;
    size_t room = libdeflate_zlib_compress_bound(w->deflate, chunk * sizeof(float));
    if (room > w->deflate_room) {
        void *more = realloc(w->chunk, room);
        if (!more) return snprintf(w->err, sizeof w->err, "%s: out of memory", c->input), -1;
        w->chunk = more;
        w->deflate_room = room;
    }
    float *edge = NULL;
    int rc = 0;
    for (size_t at = 0; at < c->n && rc == 0; at += chunk) {
        const float *from = c->samples + at;
        if (c->n - at < chunk) {
            if (!(edge = calloc(chunk, sizeof *edge))) {
                snprintf(w->err, sizeof w->err, "%s: out of memory", c->input);
                rc = -1;
                break;
            }
            memcpy(edge, from, (c->n - at) * sizeof *edge);
            from = edge;
        }
        size_t len = libdeflate_zlib_compress(w->deflate, from, chunk * sizeof(float), w->chunk,
                                              w->deflate_room);
        hsize_t offset[1] = {at};
        if (len == 0 || H5Dwrite_chunk(d, H5P_DEFAULT, 0, offset, len, w->chunk) < 0)
            rc = h5_fail(w, c->input);
    }
    free(edge);
    return rc;
}

/* One input's samples: float32, chunked, deflate-compressed. */
static int write_channel(h5w *w, hid_t g, const store_channel *c) {
    hsize_t dims[1] = {c->n}, max[1] = {c->n ? c->n : H5S_UNLIMITED};
    hsize_t chunk[1] = {c->n == 0 ? 1 : c->n < CHUNK_SAMPLES ? c->n : CHUNK_SAMPLES};
    hid_t space = H5Screate_simple(1, dims, max), plist = H5Pcreate(H5P_DATASET_CREATE), d = -1;
    int rc = space < 0 || plist < 0 || H5Pset_chunk(plist, 1, chunk) < 0 ||
                     H5Pset_fill_time(plist, H5D_FILL_TIME_NEVER) < 0 ||
                     H5Pset_deflate(plist, DEFLATE_LEVEL) < 0
                 ? h5_fail(w, c->input)
                 : 0;
    if (rc == 0) d = H5Dcreate2(g, c->input, H5T_IEEE_F32LE, space, H5P_DEFAULT, plist,
                                H5P_DEFAULT);
    if (rc == 0 && d < 0) rc = h5_fail(w, c->input);
    bool as_in_file = __BYTE_ORDER__ == __ORDER_LITTLE_ENDIAN__;   /* float32 LE */
    if (rc == 0 && c->n && as_in_file) rc = write_chunks(w, d, c, (size_t)chunk[0]);
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
    w->err[0] = '\0';
    *image = NULL;
    w->str = H5Tcopy(H5T_C_S1);
    if (w->str < 0 || H5Tset_size(w->str, H5T_VARIABLE) < 0 ||
        H5Tset_cset(w->str, H5T_CSET_UTF8) < 0) {
        if (w->str >= 0) H5Tclose(w->str);
        return h5_fail(w, "string type");
    }
    hid_t fapl = memory_fapl(r);
    /* HDF5 first tries to open the name as an existing file, even in memory:
     * under /dev/null no file can be, so a record of that name in the
     * current folder is never read. */
    char where[128];
    snprintf(where, sizeof where, "/dev/null/%s", name);
    hid_t f = fapl < 0 ? -1 : H5Fcreate(where, H5F_ACC_TRUNC, H5P_DEFAULT, fapl);
    int rc = f < 0 ? h5_fail(w, "create") : write_contents(w, f, r, failed);
    if (rc == 0 && H5Fflush(f, H5F_SCOPE_GLOBAL) < 0) rc = h5_fail(w, "flush");
    ssize_t size = rc == 0 ? H5Fget_file_image(f, NULL, 0) : -1;
    if (rc == 0 && (size <= 0 || !(*image = malloc((size_t)size)) ||
                    H5Fget_file_image(f, *image, (size_t)size) != size))
        rc = h5_fail(w, "file image");
    if (f >= 0 && H5Fclose(f) < 0 && rc == 0) rc = h5_fail(w, "close");
    if (fapl >= 0) H5Pclose(fapl);
    H5Tclose(w->str);
    if (rc != 0) {
        free(*image);
        *image = NULL;
    }
    *len = rc == 0 ? (size_t)size : 0;
    return rc;
}

/* ---- one record to disk, then its journal line ------------------------------ */

static json_t *json_text(const char *s) {
    json_t *j = json_string(text(s));
    if (j) return j;
    char *copy = strdup(s);     /* not UTF-8: keep the ASCII, mark the rest */
    if (!copy) return NULL;
    for (char *p = copy; *p; p++)
        if ((unsigned char)*p >= 0x80) *p = '?';
    j = json_string(copy);
    free(copy);
    return j;
}

static int journal_shot(store *s, const store_record *r, bool failed, const char *file,
                        const char *sha, char *err, size_t errlen) {
    json_t *o = json_pack("{s:I,s:I,s:I,s:I,s:o,s:s}", "shot", (json_int_t)r->shot, "attempt",
                          (json_int_t)r->attempt, "point", (json_int_t)r->point, "average",
                          (json_int_t)r->average, "kind", json_text(r->kind), "status",
                          failed ? "failed" : "ok");
    int rc = o ? 0 : -1;
    if (o && !failed)
        rc = json_object_set_new(o, "file", json_text(file)) |
             json_object_set_new(o, "sha256", json_string(sha));
    else if (o)
        rc = json_object_set_new(o, "error",
                                 json_text(r->error && *r->error ? r->error : "failed"));
    if (rc != 0) {
        json_decref(o);
        snprintf(err, errlen, "journal line: out of memory");
        return -1;
    }
    return journal_append(s, "shot", o, err, errlen);
}

/* tmp in dirfd removed, errno as it was (it says why tmp is not kept). */
static void drop_tmp(int dirfd, const char *tmp) {
    int saved = errno;
    unlinkat(dirfd, tmp, 0);
    errno = saved;
}

/* Placing a file, first half: the image written into tmp in dirfd and its
 * writeback started, so that the fsyncs of a batch overlap on the disk.
 * Returns the open descriptor, or -1 with *what saying what failed (errno
 * why) and the temporary file removed. */
static int start_file(int dirfd, const char *tmp, const void *image, size_t len,
                      const char **what) {
    int fd = openat(dirfd, tmp, O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0666);
    *what = fd < 0 ? "create" : write_all(fd, image, len) != 0 ? "write" : NULL;
    if (!*what) {
        sync_file_range(fd, 0, 0, SYNC_FILE_RANGE_WRITE);   /* a hint: fsync makes sure */
        return fd;
    }
    if (fd >= 0) {
        int saved = errno;
        close(fd);
        errno = saved;
    }
    drop_tmp(dirfd, tmp);
    return -1;
}

/* Second half: fsync'd, closed, renamed to name; NULL, or what failed with
 * the temporary file removed. */
static const char *finish_file(int dirfd, int fd, const char *tmp, const char *name) {
    const char *what = fsync(fd) != 0 ? "fsync" : NULL;
    if (close(fd) != 0 && !what) what = "close";
    if (!what && renameat(dirfd, tmp, dirfd, name) != 0) what = "rename";
    if (what) drop_tmp(dirfd, tmp);
    return what;
}

/* The builder's half: r as the bytes of its file, and their sha256. */
static void build_record(h5w *w, built_record *b) {
    const store_record *r = b->r;
    b->failed = record_failed(r);
    if (b->failed)
        snprintf(b->name, sizeof b->name, "%06" PRIu32 "-a%" PRIu32 ".h5", r->shot, r->attempt);
    else
        snprintf(b->name, sizeof b->name, "%06" PRIu32 ".h5", r->shot);
    snprintf(b->tmp, sizeof b->tmp, ".%s.tmp", b->name);
    snprintf(b->rel, sizeof b->rel, "records/%s%s", b->failed ? "failed/" : "", b->name);
    pthread_mutex_lock(&hdf5_lock);
    int rc = build_image(w, b->name, r, b->failed, &b->image, &b->len);
    pthread_mutex_unlock(&hdf5_lock);
    b->rc = rc == 0 ? 0 : -1;
    if (rc != 0)
        snprintf(b->err, sizeof b->err, "record %s not written: HDF5 could not build it (%s)",
                 b->rel, w->err);
    else if (!b->failed)
        store_sha256_hex(b->image, b->len, b->sha);     /* the very bytes written */
}

/* The committer's half, for the n images the stage held: each into place
 * (fsync'd, renamed), each folder that took one fsync'd once, then their
 * journal lines in order, each fsync'd. A failure stops there: the images
 * placed before it are still made durable and journalled. Returns how many
 * were journalled; fewer than n means err says why the next one was not. */
/* The folder a built record goes to. */
static int folder_of(const store *s, const built_record *b) {
    return b->failed ? s->failedfd : s->recordsfd;
}

static size_t commit_batch(store *s, built_record *const *b, size_t n, char *err,
                           size_t errlen) {
    int fd[STAGE_DEPTH];
    size_t started = 0, placed = 0;
    const char *what = NULL;    /* what failed, of the record where the batch stops */
    for (; started < n && b[started]->rc == 0; started++) {
        const built_record *r = b[started];
        fd[started] = start_file(folder_of(s, r), r->tmp, r->image, r->len, &what);
        if (fd[started] < 0) break;
    }
    int saved = errno;
    bool sync_records = false, sync_failed = false;
    for (; placed < started; placed++) {
        const built_record *r = b[placed];
        const char *failed = finish_file(folder_of(s, r), fd[placed], r->tmp, r->name);
        if (failed) {
            what = failed;
            saved = errno;
            for (size_t i = placed + 1; i < started; i++) {     /* started, never placed */
                close(fd[i]);
                drop_tmp(folder_of(s, b[i]), b[i]->tmp);
            }
            break;
        }
        *(r->failed ? &sync_failed : &sync_records) = true;
    }
    if (placed < n && what)
        snprintf(err, errlen, "record %s not written (%s of %s: %s; the temporary file was "
                 "removed); free disk space, then resume the run", b[placed]->rel, what,
                 b[placed]->tmp, strerror(saved));
    else if (placed < n)
        snprintf(err, errlen, "%s", b[placed]->err);    /* HDF5 could not build it */
    char why[256];
    if ((sync_records && fsync(s->recordsfd) != 0) || (sync_failed && fsync(s->failedfd) != 0)) {
        snprintf(err, errlen, "record %s written but not journalled (fsync of its folder: %s)",
                 b[0]->rel, strerror(errno));
        return 0;
    }
    for (size_t i = 0; i < placed; i++)
        if (journal_shot(s, b[i]->r, b[i]->failed, b[i]->rel, b[i]->sha, why, sizeof why) != 0) {
            snprintf(err, errlen, "record %s written but not journalled (%s)", b[i]->rel, why);
            return i;
        }
    return placed;
}

static void built_free(built_record *b) {
    if (!b) return;
    free(b->image);
    store_record_free(b->r);
    free(b);
}

/* ---- the writer thread and its queue ------------------------------------- */

/* The calling thread's nice value raised by by (Linux keeps one per thread,
 * set through its thread id: Linux only, like the timerfd and eventfd the
 * run uses); where the system refuses, the thread stays as it was. */
static void lower_priority(int by) {
    errno = 0;
    int now = getpriority(PRIO_PROCESS, (id_t)gettid());
    if (now == -1 && errno != 0) return;
    (void)setpriority(PRIO_PROCESS, (id_t)gettid(), now + by > 19 ? 19 : now + by);
}

void store_yield_to_writer(void) { lower_priority(BUILD_NICE); }

/* The builder: records from the queue to file images on the stage. A
 * record it cannot take memory for fails the writer like a disk error. */
static void *writer_main(void *arg) {
    store *s = arg;
    /* Building is CPU work nothing waits on at once: niced, it leaves a core
     * to the scheduler's thread and to the committer the moment either needs
     * one (the committer to start the next write as soon as the disk answers). */
    lower_priority(BUILD_NICE);
    pthread_setname_np(pthread_self(), "precess-build");    /* named once it is niced */
    h5w w = {.deflate = libdeflate_alloc_compressor(DEFLATE_LEVEL)};
    pthread_mutex_lock(&hdf5_lock);
    H5Eset_auto2(H5E_DEFAULT, NULL, NULL);
    pthread_mutex_unlock(&hdf5_lock);
    pthread_mutex_lock(&s->lock);
    for (;;) {
        while (s->count == 0 && !s->stopping) pthread_cond_wait(&s->work, &s->lock);
        if (s->count == 0) break;
        store_record *r = s->queue[s->head];
        s->head = (s->head + 1) % s->capacity;
        s->count--;
        s->inflight++;
        bool skip = s->failed;
        pthread_cond_broadcast(&s->room);
        pthread_mutex_unlock(&s->lock);
        built_record *b = skip ? NULL : calloc(1, sizeof *b);
        if (b) {
            b->r = r;
            build_record(&w, b);
        } else {
            store_record_free(r);
        }
        pthread_mutex_lock(&s->lock);
        if (!b) {
            s->inflight--;
            if (skip) {
                s->lost++;
            } else {
                s->failed = true;
                snprintf(s->error, sizeof s->error, "record writer: out of memory");
            }
            pthread_cond_broadcast(&s->room);
            continue;
        }
        while (s->stage_count == STAGE_DEPTH) pthread_cond_wait(&s->built_room, &s->lock);
        s->stage[(s->stage_head + s->stage_count) % STAGE_DEPTH] = b;
        s->stage_count++;
        pthread_cond_signal(&s->built);
    }
    s->building_done = true;
    pthread_cond_signal(&s->built);
    pthread_mutex_unlock(&s->lock);
    libdeflate_free_compressor(w.deflate);
    free(w.chunk);
    return NULL;
}

/* The committer: images from the stage into the folder, in order, all the
 * stage holds at a time: when the disk is the slower, one folder fsync
 * serves several records. */
static void *committer_main(void *arg) {
    store *s = arg;
    pthread_setname_np(pthread_self(), "precess-commit");
    char err[sizeof s->error];
    built_record *batch[STAGE_DEPTH];
    pthread_mutex_lock(&s->lock);
    for (;;) {
        while (s->stage_count == 0 && !s->building_done) pthread_cond_wait(&s->built, &s->lock);
        if (s->stage_count == 0) break;
        size_t n = s->stage_count;
        for (size_t i = 0; i < n; i++) batch[i] = s->stage[(s->stage_head + i) % STAGE_DEPTH];
        s->stage_head = (s->stage_head + n) % STAGE_DEPTH;
        s->stage_count = 0;
        bool skip = s->failed;
        pthread_cond_signal(&s->built_room);
        pthread_mutex_unlock(&s->lock);
        size_t done = skip ? 0 : commit_batch(s, batch, n, err, sizeof err);
        size_t nfailed = 0;
        for (size_t i = 0; i < n; i++) {
            if (i < done && batch[i]->failed) nfailed++;
            built_free(batch[i]);
        }
        pthread_mutex_lock(&s->lock);
        s->inflight -= n;
        s->ok += done - nfailed;
        s->nfailed += nfailed;
        if (done < n && !skip) {
            s->failed = true;
            memcpy(s->error, err, sizeof s->error);
            s->lost += n - done - 1;    /* the one err names is not lost: it is the error */
        } else if (skip) {
            s->lost += n;
        }
        pthread_cond_broadcast(&s->room);
    }
    pthread_mutex_unlock(&s->lock);
    return NULL;
}

/* With s->lock held: the writer's failure as a message, with any records
 * dropped after it counted, so none goes missing unreported. */
static int report_failure(store *s, char *err, size_t errlen) {
    if (!s->failed) return 0;
    if (s->lost)
        snprintf(err, errlen, "%s; %zu record(s) queued after it were not written either",
                 s->error, s->lost);
    else
        snprintf(err, errlen, "%s", s->error);
    return -1;
}

int store_start(store *s, size_t capacity, char *err, size_t errlen) {
    if (s->started || capacity == 0) {
        snprintf(err, errlen, s->started ? "the record writer is already running"
                                         : "the record queue needs room for at least one record");
        return -1;
    }
    s->queue = calloc(capacity, sizeof *s->queue);
    if (!s->queue) return snprintf(err, errlen, "record queue: out of memory"), -1;
    s->capacity = capacity;
    /* The writer takes no signals: they stay with the threads that handle them. */
    sigset_t all, old;
    sigfillset(&all);
    pthread_sigmask(SIG_SETMASK, &all, &old);
    int rc = pthread_create(&s->committer, NULL, committer_main, s);
    if (rc == 0) {
        rc = pthread_create(&s->writer, NULL, writer_main, s);
        if (rc != 0) {      /* the committer ends at once: nothing will be built */
            pthread_mutex_lock(&s->lock);
            s->building_done = true;
            pthread_cond_signal(&s->built);
            pthread_mutex_unlock(&s->lock);
            pthread_join(s->committer, NULL);
        }
    }
    pthread_sigmask(SIG_SETMASK, &old, NULL);
    if (rc != 0) {
        snprintf(err, errlen, "cannot start the record writer: %s", strerror(rc));
        return -1;
    }
    s->started = true;
    return 0;
}

/* Takes the record except when it returns 1: on -1 (a refused record, a
 * stopped or failed writer) the record is freed here, after err names it. */
int store_submit(store *s, store_record *r, bool wait, char *err, size_t errlen) {
    if (!r) return snprintf(err, errlen, "no record given"), -1;
    if (check_record(r, err, errlen) != 0) {
        store_record_free(r);
        return -1;
    }
    pthread_mutex_lock(&s->lock);
    int rc = 1;
    for (;;) {
        if (!s->started || s->stopping) {
            snprintf(err, errlen, "the record writer is not running; record of shot %" PRIu32
                     " not written", r->shot);
            rc = -1;
        } else if (s->failed) {
            s->lost++;          /* this one too: its shot ran */
            rc = report_failure(s, err, errlen);
        } else if (s->count < s->capacity) {
            s->queue[(s->head + s->count) % s->capacity] = r;
            s->count++;
            pthread_cond_signal(&s->work);
            rc = 0;
        } else if (wait) {
            pthread_cond_wait(&s->room, &s->lock);
            continue;
        }
        break;
    }
    pthread_mutex_unlock(&s->lock);
    if (rc < 0) store_record_free(r);
    return rc;
}

int store_flush(store *s, char *err, size_t errlen) {
    pthread_mutex_lock(&s->lock);
    while (!s->failed && (s->count > 0 || s->inflight > 0)) pthread_cond_wait(&s->room, &s->lock);
    int rc = report_failure(s, err, errlen);
    pthread_mutex_unlock(&s->lock);
    return rc;
}

void store_counts(store *s, size_t *ok, size_t *failed) {
    pthread_mutex_lock(&s->lock);
    if (ok) *ok = s->ok;
    if (failed) *failed = s->nfailed;
    pthread_mutex_unlock(&s->lock);
}

int store_close(store *s, char *err, size_t errlen) {
    size_t lost;
    return store_finish(s, &lost, err, errlen);
}

int store_finish(store *s, size_t *lost, char *err, size_t errlen) {
    *lost = 0;
    if (!s) return 0;
    pthread_mutex_lock(&s->lock);
    s->stopping = true;
    pthread_cond_broadcast(&s->work);
    pthread_cond_broadcast(&s->room);
    pthread_mutex_unlock(&s->lock);
    if (s->started) {
        pthread_join(s->writer, NULL);
        pthread_join(s->committer, NULL);
    }
    *lost = s->lost;
    int rc = report_failure(s, err, errlen);
    store_free(s);
    return rc;
}
