/* store: the run folder (run-format.md) and its shot records: creating the
 * folder; building each record as an HDF5 file image in memory, writing it
 * under a temporary name, fsync, rename, fsync of the folder, journal line;
 * all on writer threads behind a bounded queue: two builders making the
 * images (record_image.c), one committer putting them on the disk.
 * Not for the journal's line format (journal.c) nor for what a record holds. */
#include "store.h"

#include <errno.h>
#include <fcntl.h>
#include <inttypes.h>
#include <jansson.h>
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

/* Built images waiting for the committer: room for a group being gathered
 * while both builders go on. */
#define STAGE_DEPTH 16
/* Records committed together when the next is already being built: their
 * folder fsync'd once and their journal lines written at once. */
#define GROUP 8
/* Record builders: the CPU a record takes, HDF5's share one at a time, the
 * compression side by side (one builder alone was the run's slowest stage). */
#define BUILDERS 2
/* How far the record builders sit below the run's own priority (nice),
 * unless the writer goes first (store_writer_first). */
#define BUILD_NICE 10

struct store {
    char *dir;
    int dirfd, recordsfd, failedfd, journalfd;
    pthread_mutex_t journal_lock;   /* the journal's own: any thread appends */
    pthread_mutex_t lock;           /* everything below */
    pthread_cond_t work;            /* a record was queued, or stop */
    pthread_cond_t room;            /* the queue half empty, all written, or a failure */
    store_record **queue;
    record_packing **packing;       /* each queued record's samples, if packed ahead */
    size_t capacity, head, count;
    /* The submitter's own compressor, when the writer goes first: a
     * submitter that finds the queue full compresses its record's samples
     * before it waits, on a core the builders leave it while one of them
     * waits its turn for HDF5. */
    record_imager *ahead;
    bool ahead_busy;
    size_t packed_ahead;            /* records so packed, for the tests */
    /* Records built into file images, waiting for the committer: building
     * (CPU) and committing (fsync, mostly waiting for the disk) overlap.
     * Each record taken from the queue gets the next ticket, and its image
     * the stage's slot ticket % STAGE_DEPTH once the committer has taken
     * every ticket up to STAGE_DEPTH before it: whichever builder finishes
     * first, the committer takes them in the order they were queued. */
    pthread_cond_t built, built_room;
    struct built_record *stage[STAGE_DEPTH];    /* NULL in a filled slot: dropped */
    bool filled[STAGE_DEPTH];
    uint64_t tickets, stage_base;   /* the next ticket given; the next to commit */
    size_t awaited;                 /* the slot after the base the committer waits for */
    size_t inflight;                /* taken from queue, not yet committed */
    int builders;                   /* builder threads still running (0: all built) */
    int build_nice;                 /* how far they sit below the caller: BUILD_NICE, or 0
                                     * (then the caller goes down once they are made) */
    bool started, stopping, failed;
    size_t ok, nfailed, lost;       /* lost: dropped after the writer failed */
    size_t unjournalled;            /* after the failure: in place, but without a line */
    uint64_t fail_ticket;           /* the ticket of the record it failed at; UINT64_MAX */
    uint64_t no_memory_at;          /* tests: the builder finds no memory for this ticket */
    char error[640];
    pthread_t builder[BUILDERS], committer;
};

/* A record's file image, made by the builder for the committer. */
typedef struct built_record {
    store_record *r;
    record_packing *packing;        /* r's samples packed ahead, or NULL */
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

static int write_file_at(int dirfd, const char *name, const void *bytes, size_t len);

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
    for (size_t i = 0; s->packing && i < s->capacity; i++) record_packing_free(s->packing[i]);
    free(s->packing);
    free(s->queue);
    record_imager_free(s->ahead);
    free(s->dir);
    free(s);
}

static store *store_alloc(const char *dir) {
    store *s = calloc(1, sizeof *s);
    if (!s) return NULL;
    s->dirfd = s->recordsfd = s->failedfd = s->journalfd = -1;
    s->build_nice = BUILD_NICE;
    s->fail_ticket = s->no_memory_at = UINT64_MAX;
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

/* A shot's journal line as an object (without event and time), or NULL
 * out of memory. */
static json_t *shot_line(const store_record *r, bool failed, const char *file,
                         const char *sha) {
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
        return NULL;
    }
    return o;
}

/* tmp in dirfd removed, errno as it was (it says why tmp is not kept). */
/* Whether errno e says the disk (or the file size limit, or a quota) has
 * no room, rather than that it failed. */
static bool out_of_room(int e) { return e == ENOSPC || e == EDQUOT || e == EFBIG; }

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

/* Second half: fsync'd and closed; NULL, or what failed with the temporary
 * file removed. */
static const char *sync_file(int dirfd, int fd, const char *tmp) {
    const char *what = fsync(fd) != 0 ? "fsync" : NULL;
    int saved = errno;
    if (close(fd) != 0 && !what) what = "close";
    else if (what) errno = saved;       /* the fsync's reason, not close's */
    if (what) drop_tmp(dirfd, tmp);
    return what;
}

/* Last: renamed to name; NULL, or what failed with the temporary file
 * removed. */
static const char *place_file(int dirfd, const char *tmp, const char *name) {
    if (renameat(dirfd, tmp, dirfd, name) == 0) return NULL;
    drop_tmp(dirfd, tmp);
    return "rename";
}

/* name in dirfd, whole or not at all, as a record is placed: temporary
 * file, fsync, rename. 0, or -1 with errno. */
static int write_file_at(int dirfd, const char *name, const void *bytes, size_t len) {
    char tmp[64];
    const char *what;
    snprintf(tmp, sizeof tmp, ".%s.tmp", name);
    int fd = start_file(dirfd, tmp, bytes, len, &what);
    return fd < 0 || sync_file(dirfd, fd, tmp) || place_file(dirfd, tmp, name) ? -1 : 0;
}

/* The builder's half: r as the bytes of its file, and their sha256. */
static void build_record(record_imager *w, built_record *b) {
    const store_record *r = b->r;
    b->failed = record_failed(r);
    if (b->failed)
        snprintf(b->name, sizeof b->name, "%06" PRIu32 "-a%" PRIu32 ".h5", r->shot, r->attempt);
    else
        snprintf(b->name, sizeof b->name, "%06" PRIu32 ".h5", r->shot);
    snprintf(b->tmp, sizeof b->tmp, ".%s.tmp", b->name);
    snprintf(b->rel, sizeof b->rel, "records/%s%s", b->failed ? "failed/" : "", b->name);
    char why[320] = "out of memory for its builder";
    b->rc = w && record_image_build(w, b->name, r, b->packing, b->failed, &b->image, &b->len,
                                    why, sizeof why) == 0 ? 0 : -1;
    record_packing_free(b->packing);
    b->packing = NULL;
    if (b->rc != 0)
        snprintf(b->err, sizeof b->err, "record %s not written: it could not be built (%s)",
                 b->rel, why);
    else if (!b->failed)
        store_sha256_hex(b->image, b->len, b->sha);     /* the very bytes written */
}

/* The folder a built record goes to. */
static int folder_of(const store *s, const built_record *b) {
    return b->failed ? s->failedfd : s->recordsfd;
}

/* The committer's half, for the n images the stage held: each into place
 * (fsync'd, renamed), each folder that took one fsync'd once, then their
 * journal lines in order, in one write and one fsync. A failure to place
 * one stops there: the images placed before it are still made durable and
 * journalled. Returns how many were journalled, k; fewer than n means err
 * says why record k was not (the first, when the journal itself failed:
 * then none of the batch is journalled). *on_disk: how many were placed,
 * journalled or not. */

static size_t commit_batch(store *s, built_record *const *b, size_t n, size_t *on_disk,
                           char *err, size_t errlen) {
    int fd[STAGE_DEPTH];
    size_t started = 0, placed = 0;
    const char *what = NULL;    /* what failed, of the record where the batch stops */
    for (; started < n && b[started]->rc == 0; started++) {
        const built_record *r = b[started];
        fd[started] = start_file(folder_of(s, r), r->tmp, r->image, r->len, &what);
        if (fd[started] < 0) break;
    }
    int saved = errno;
    /* Every file fsync'd before any is renamed: a rename dirties the folder
     * (and the renamed inode) again, and the next file's fsync would write
     * them out once more (ext4 without a journal syncs a new file's folder
     * with it). */
    size_t synced = 0;
    for (; synced < started; synced++) {
        const built_record *r = b[synced];
        const char *failed = sync_file(folder_of(s, r), fd[synced], r->tmp);
        if (failed) {
            what = failed;
            saved = errno;
            for (size_t i = synced + 1; i < started; i++) {     /* started, never synced */
                close(fd[i]);
                drop_tmp(folder_of(s, b[i]), b[i]->tmp);
            }
            break;
        }
    }
    bool sync_records = false, sync_failed = false;
    for (; placed < synced; placed++) {
        const built_record *r = b[placed];
        const char *failed = place_file(folder_of(s, r), r->tmp, r->name);
        if (failed) {
            what = failed;
            saved = errno;
            for (size_t i = placed + 1; i < synced; i++)        /* synced, never placed */
                drop_tmp(folder_of(s, b[i]), b[i]->tmp);
            break;
        }
        *(r->failed ? &sync_failed : &sync_records) = true;
    }
    if (placed < n && what)
        snprintf(err, errlen, "record %s not written (%s of %s: %s; the temporary file was "
                 "removed); %s, then resume the run", b[placed]->rel, what, b[placed]->tmp,
                 strerror(saved), out_of_room(saved) ? "free disk space" : "check the disk");
    else if (placed < n)
        snprintf(err, errlen, "%s", b[placed]->err);    /* HDF5 could not build it */
    char why[256];
    *on_disk = placed;
    if ((sync_records && fsync(s->recordsfd) != 0) || (sync_failed && fsync(s->failedfd) != 0)) {
        snprintf(err, errlen, "record %s written but not journalled (fsync of its folder: %s)",
                 b[0]->rel, strerror(errno));
        return 0;
    }
    /* their lines in one write and one fsync, all of them or none (those
     * made, should memory run out for one: never a line before its record) */
    void *lines[STAGE_DEPTH];
    size_t made = 0;
    while (made < placed &&
           (lines[made] = shot_line(b[made]->r, b[made]->failed, b[made]->rel, b[made]->sha)))
        made++;
    if (made < placed)
        snprintf(err, errlen, "record %s written but not journalled (journal line: out of "
                 "memory)", b[made]->rel);
    if (made && journal_append_lines(s, "shot", lines, made, why, sizeof why) != 0) {
        snprintf(err, errlen, "record %s written but not journalled (%s)", b[0]->rel, why);
        return 0;
    }
    return made;
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

void store_test_no_memory_at(store *s, uint64_t record) { s->no_memory_at = record; }

size_t store_test_packed_ahead(store *s) {
    pthread_mutex_lock(&s->lock);
    size_t n = s->packed_ahead;
    pthread_mutex_unlock(&s->lock);
    return n;
}

int store_writer_first(store *s) {
    if (s->started) return -1;      /* its builders already run niced */
    s->build_nice = 0;
    return 0;
}

/* With s->lock held: the ticket's slot on the stage, once the committer
 * has room for it, filled with b (NULL: the record was dropped). */
static void place_built(store *s, uint64_t ticket, built_record *b) {
    while (ticket >= s->stage_base + STAGE_DEPTH) pthread_cond_wait(&s->built_room, &s->lock);
    s->stage[ticket % STAGE_DEPTH] = b;
    s->filled[ticket % STAGE_DEPTH] = true;
    if (ticket == s->stage_base + s->awaited) pthread_cond_signal(&s->built);
}

/* With s->lock held: a full queue's submitter waits until no more than
 * this many records are left in it: one less than full in a run that keeps
 * time (each shot held at rest only as long as the disk needs), half of it
 * when the writer goes first (one wake-up for half a queue of shots; the
 * submitter compresses its record's samples first, and seldom waits). */
static size_t low_water(const store *s) {
    return s->build_nice == 0 ? s->capacity / 2 : s->capacity - 1;
}

/* With s->lock held: how many slots from the stage's base are filled. */
static size_t filled_run(const store *s) {
    size_t n = 0;
    while (n < STAGE_DEPTH && s->filled[(s->stage_base + n) % STAGE_DEPTH]) n++;
    return n;
}

/* A builder: records from the queue to file images on the stage. A record
 * it cannot take memory for fails the writer like a disk error. */
static void *builder_main(void *arg) {
    store *s = arg;
    /* Building is CPU work nothing waits on at once: niced, it leaves a core
     * to the scheduler's thread and to the committer the moment either needs
     * one (the committer to start the next write as soon as the disk answers).
     * When the writer goes first, the scheduler's thread is the niced one:
     * HDF5 goes one builder at a time, and a builder holding it is the last
     * thread to keep from a core. */
    lower_priority(s->build_nice);
    pthread_setname_np(pthread_self(), "precess-build");    /* named once it is niced */
    record_imager *w = record_imager_new();     /* NULL: each record fails for memory */
    pthread_mutex_lock(&s->lock);
    for (;;) {
        while (s->count == 0 && !s->stopping) pthread_cond_wait(&s->work, &s->lock);
        if (s->count == 0) break;
        store_record *r = s->queue[s->head];
        record_packing *packing = s->packing[s->head];
        s->packing[s->head] = NULL;
        s->head = (s->head + 1) % s->capacity;
        s->count--;
        s->inflight++;
        uint64_t ticket = s->tickets++;
        bool skip = s->failed;
        if (s->count <= low_water(s)) pthread_cond_broadcast(&s->room);   /* what a submitter awaits */
        pthread_mutex_unlock(&s->lock);
        built_record *b = skip || ticket == s->no_memory_at ? NULL : calloc(1, sizeof *b);
        if (b) {
            b->r = r;
            b->packing = packing;
            build_record(w, b);
        } else {
            record_packing_free(packing);
            store_record_free(r);
        }
        pthread_mutex_lock(&s->lock);
        if (!b) {
            s->inflight--;
            if (skip || s->failed) {    /* failed meanwhile: dropped after the failure */
                s->lost++;
            } else {
                s->failed = true;
                s->fail_ticket = ticket;
                snprintf(s->error, sizeof s->error, "record writer: out of memory");
            }
            pthread_cond_broadcast(&s->room);
        }
        place_built(s, ticket, b);
    }
    if (--s->builders == 0) pthread_cond_signal(&s->built);
    pthread_mutex_unlock(&s->lock);
    record_imager_free(w);
    return NULL;
}

/* The committer: images from the stage into the folder, in the order they
 * were queued, all the stage holds in a row at a time: when the disk is the
 * slower, one folder fsync serves several records. */
static void *committer_main(void *arg) {
    store *s = arg;
    pthread_setname_np(pthread_self(), "precess-commit");
    char err[sizeof s->error];
    built_record *batch[STAGE_DEPTH];
    pthread_mutex_lock(&s->lock);
    for (;;) {
        while (!s->filled[s->stage_base % STAGE_DEPTH] && s->builders > 0)
            pthread_cond_wait(&s->built, &s->lock);
        if (!s->filled[s->stage_base % STAGE_DEPTH]) break;    /* all built, all taken */
        /* The next record is being built: wait for it, and one folder fsync
         * and one journal write serve both. Never a wait for a shot still
         * to be taken: in real time each record is alone, at once. */
        for (size_t run; (run = filled_run(s)) < GROUP && s->inflight > run && s->builders > 0;) {
            s->awaited = run;
            pthread_cond_wait(&s->built, &s->lock);
        }
        s->awaited = 0;
        size_t n = 0, keep = 0;
        for (size_t i = 0; i < STAGE_DEPTH && s->filled[s->stage_base % STAGE_DEPTH]; i++) {
            uint64_t ticket = s->stage_base++;
            size_t slot = ticket % STAGE_DEPTH;
            /* what came before the failure is still committed, what came
             * after it is dropped (a dropped record's slot is NULL) */
            if (s->stage[slot] && ticket < s->fail_ticket && keep == n) keep++;
            if (s->stage[slot]) batch[n++] = s->stage[slot];
            s->stage[slot] = NULL;
            s->filled[slot] = false;
        }
        pthread_cond_broadcast(&s->built_room);
        pthread_mutex_unlock(&s->lock);
        size_t placed = 0;
        size_t done = keep ? commit_batch(s, batch, keep, &placed, err, sizeof err) : 0;
        size_t nfailed = 0;
        for (size_t i = 0; i < n; i++) {
            if (i < done && batch[i]->failed) nfailed++;
            built_free(batch[i]);
        }
        pthread_mutex_lock(&s->lock);
        s->inflight -= n;
        s->ok += done - nfailed;
        s->nfailed += nfailed;
        if (done < keep) {      /* record done is the one err names: it is the error */
            /* a builder's failure, at a later record, named until now: that
             * record is one of those dropped after this one */
            if (s->failed) s->lost++;
            s->failed = true;
            if (s->fail_ticket > s->stage_base) s->fail_ticket = s->stage_base;
            memcpy(s->error, err, sizeof s->error);
            s->unjournalled += placed > done ? placed - done - 1 : 0;
            s->lost += keep - (placed > done + 1 ? placed : done + 1);
        }
        s->lost += n - keep;
        if (s->failed || (s->count == 0 && s->inflight == 0)) pthread_cond_broadcast(&s->room);
    }
    pthread_mutex_unlock(&s->lock);
    return NULL;
}

/* With s->lock held: the writer's failure as a message, with any records
 * dropped after it counted, so none goes missing unreported. */
static int report_failure(store *s, char *err, size_t errlen) {
    if (!s->failed) return 0;
    char on_disk[160] = "", lost[96] = "";
    if (s->unjournalled)
        snprintf(on_disk, sizeof on_disk, "; %zu record(s) after it are in place but not "
                 "journalled (they do not count as done)", s->unjournalled);
    if (s->lost)
        snprintf(lost, sizeof lost, "; %zu record(s) queued after it were not written either",
                 s->lost);
    snprintf(err, errlen, "%s%s%s", s->error, on_disk, lost);
    return -1;
}

int store_start(store *s, size_t capacity, char *err, size_t errlen) {
    if (s->started || capacity == 0) {
        snprintf(err, errlen, s->started ? "the record writer is already running"
                                         : "the record queue needs room for at least one record");
        return -1;
    }
    s->queue = calloc(capacity, sizeof *s->queue);
    s->packing = calloc(capacity, sizeof *s->packing);
    if (!s->queue || !s->packing) return snprintf(err, errlen, "record queue: out of memory"), -1;
    s->capacity = capacity;
    /* The writer takes no signals: they stay with the threads that handle them. */
    sigset_t all, old;
    sigfillset(&all);
    pthread_sigmask(SIG_SETMASK, &all, &old);
    s->builders = BUILDERS;
    int rc = pthread_create(&s->committer, NULL, committer_main, s), made = 0;
    bool committing = rc == 0;
    while (rc == 0 && made < BUILDERS &&
           (rc = pthread_create(&s->builder[made], NULL, builder_main, s)) == 0)
        made++;
    if (rc != 0 && committing) {    /* the builders made stop at once, then the committer */
        pthread_mutex_lock(&s->lock);
        s->stopping = true;
        s->builders -= BUILDERS - made;
        pthread_cond_broadcast(&s->work);
        pthread_cond_signal(&s->built);
        pthread_mutex_unlock(&s->lock);
        for (int i = 0; i < made; i++) pthread_join(s->builder[i], NULL);
        pthread_join(s->committer, NULL);
    }
    pthread_sigmask(SIG_SETMASK, &old, NULL);
    if (rc != 0) {
        snprintf(err, errlen, "cannot start the record writer: %s", strerror(rc));
        return -1;
    }
    s->started = true;
    if (s->build_nice == 0) lower_priority(BUILD_NICE);    /* once the writer has its own */
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
    record_packing *packed = NULL;
    bool tried = false;
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
            s->packing[(s->head + s->count) % s->capacity] = packed;
            packed = NULL;
            s->count++;
            pthread_cond_signal(&s->work);
            rc = 0;
        } else if (wait && s->build_nice == 0 && !tried && !s->ahead_busy) {
            /* the writer goes first and is behind: r's samples compressed
             * here, where the thread would only have waited */
            tried = s->ahead_busy = true;
            pthread_mutex_unlock(&s->lock);
            if (!s->ahead) s->ahead = record_imager_new();
            packed = s->ahead ? record_pack(s->ahead, r) : NULL;
            pthread_mutex_lock(&s->lock);
            s->ahead_busy = false;
            s->packed_ahead += packed != NULL;
            continue;
        } else if (wait) {
            /* until the low water mark: when the writer goes first, half the
             * queue, filled again in a row */
            while (s->started && !s->stopping && !s->failed && s->count > low_water(s))
                pthread_cond_wait(&s->room, &s->lock);
            continue;
        }
        break;
    }
    pthread_mutex_unlock(&s->lock);
    record_packing_free(packed);        /* not queued */
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
        for (int i = 0; i < BUILDERS; i++) pthread_join(s->builder[i], NULL);
        pthread_join(s->committer, NULL);
    }
    *lost = s->lost + s->unjournalled;     /* shots the journal does not list */
    int rc = report_failure(s, err, errlen);
    store_free(s);
    return rc;
}
