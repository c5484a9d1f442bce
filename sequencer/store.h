/* store: what a run leaves on disk (run-format.md): the run folder with
 * the plan and rig as given, points.json, the append-only journal, and one
 * HDF5 record per shot, written by a writer thread behind a bounded queue
 * so the disk never delays the next shot; each record temp -> flush ->
 * fsync -> rename -> fsync(folder) -> journal line.
 * Not for deciding what to record (the scheduler and the CLI do). */
#ifndef PRECESS_STORE_H
#define PRECESS_STORE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include "arena.h"

/* ---- one shot record ---------------------------------------------------- */

typedef struct {
    const char *coil, *shape;
    double duration, amplitude;
    double start, end;          /* s from shot start: first and last edge */
    int polarity;
    size_t nangles;
    const char **nuclei;        /* "1H", ...: attribute angle_<NUCLEUS> */
    double *angles;             /* rad */
} store_pulse;

typedef struct {
    int step;
    const char *label, *kind;
    double planned, actual;     /* s from shot start */
} store_event;

typedef struct {
    const char *input;          /* dataset name under /acquisitions/K/ */
    float *samples;
    size_t n;
    const char *units;          /* "T" */
    double sample_rate, t0;     /* Hz; s from shot start of the first sample */
    int adc_bits;
    double volts_per_count;
    int receiver_sign;          /* +1 or -1 */
} store_channel;

typedef struct {
    size_t nchannels;
    store_channel *channels;
} store_acquisition;

/* A record and everything it points to live in its own arena, so the
 * writer can take it whole and free it after writing. */
typedef struct {
    arena *arena;
    const char *run, *kind, *status, *started_utc, *driver, *precess_version, *plan_sha256;
    uint32_t shot, attempt, point, average;
    const char *error;          /* failed attempts: why */
    size_t nparameters, ncoils, nplaces, npulses, nevents, nacquisitions;
    const char **parameter_names;
    double *parameters;
    const char **parameter_units;   /* each one's SI unit ("T", "s", "1"); NULL: all "1" */
    const char **coil_names;
    double *currents;           /* A, during the first acquisition */
    const char **place_names;
    double *fields;             /* T, during the first acquisition */
    store_pulse *pulses;
    store_event *events;
    store_acquisition *acquisitions;
} store_record;

/* A new empty record with its own arena; store_record_free frees it all. */
store_record *store_record_new(void);
void store_record_free(store_record *r);

/* ---- the run folder ----------------------------------------------------- */

typedef struct store store;

typedef struct {
    const char *plan_bytes, *rig_bytes;
    size_t plan_len, rig_len;
    const char *points_json;    /* the compiled scan, as JSON text */
} store_files;

/* Create the run folder dir (it must not exist; its parent must), with
 * plan.yaml, rig.yaml, points.json, records/ and records/failed/, each file
 * written and fsync'd. Returns 0 and *out, or -1 with err. */
int store_create(const char *dir, const store_files *files, store **out, char *err,
                 size_t errlen);
/* Start the writer with a queue of capacity records: three threads, two
 * builders ("precess-build", niced 10 below the caller: CPU work that
 * nothing waits on at once) and the committer ("precess-commit", at the
 * caller's priority: it waits on the disk and starts the next write when it
 * answers). */
int store_start(store *s, size_t capacity, char *err, size_t errlen);
/* Before store_start: the writer goes first. The thread that starts it goes
 * down 10 instead of the builders (once store_start has made them at its
 * priority), and a submitter waiting on a full queue waits until half of it
 * is free: for a thread whose pace the writer sets anyway (the scheduler
 * under run --fast). -1 once the writer has started (nothing changes). */
int store_writer_first(store *s);
/* For tests, before store_start: the builder finds no memory for the
 * record-th record handed over (from 0), as if malloc had failed. */
void store_test_no_memory_at(store *s, uint64_t record);
/* For tests: how many records a submitter has compressed ahead. */
size_t store_test_packed_ahead(store *s);
/* Hand a record to the writer (it takes ownership). When the queue is full
 * it returns 1 at once without taking it unless wait is true, in which case
 * it waits for room; when the writer goes first, it first compresses the
 * record's samples itself (for the builders), queues it at once if room has
 * opened meanwhile, and otherwise waits for half the queue.
 * Returns 0 when queued, -1 when the writer has failed
 * (err then says why: e.g. the disk is full). */
int store_submit(store *s, store_record *r, bool wait, char *err, size_t errlen);
/* Wait until every queued record is written (and journalled). */
int store_flush(store *s, char *err, size_t errlen);
/* Records written so far as ok, and failed. */
void store_counts(store *s, size_t *ok, size_t *failed);

/* Stop the writer (after writing what is queued) and free everything. */
int store_close(store *s, char *err, size_t errlen);
/* The same, with *lost set to the records dropped unwritten because the
 * writer had failed before them (counted once the writer has stopped). */
int store_finish(store *s, size_t *lost, char *err, size_t errlen);
const char *store_dir(const store *s);

/* ---- the journal (journal.c) --------------------------------------------- */

/* Append one JSON object line (a jansson json_t *, as void * to keep jansson
 * out of this header) with "event" and "time" put first, fsync'd. Safe from
 * any thread. The object is consumed. */
int journal_append(store *s, const char *event, void *object, char *err, size_t errlen);
/* n such lines of one event in one write and one fsync: all of them or, on
 * failure, none. Every object is consumed. */
int journal_append_lines(store *s, const char *event, void **objects, size_t n, char *err,
                         size_t errlen);
/* The current time as ISO 8601 UTC with microseconds. */
void journal_time_now(char *buf, size_t n);

/* ---- a record as the bytes of its file (record_image.c) ------------------- */

/* A builder of shot records' HDF5 file images, one per thread; it keeps its
 * HDF5 types and buffers from one record to the next. NULL: out of memory. */
typedef struct record_imager record_imager;
typedef struct record_packing record_packing;
record_imager *record_imager_new(void);
void record_imager_free(record_imager *w);
/* r as the bytes of a complete HDF5 file (run-format.md's layout; failed:
 * an attempt's partial record) in *image, malloc'd, of *len bytes; its
 * samples from packed when not NULL (record_pack of this r). Several
 * imagers may build at once on their own threads: they compress the samples
 * side by side and take turns for HDF5. 0, or -1 with err. */
int record_image_build(record_imager *w, const char *name, const store_record *r,
                       const record_packing *packed, bool failed, void **image, size_t *len,
                       char *err, size_t errlen);
/* The samples of r compressed ahead of its image, by any thread with its
 * own imager (a submitter that would otherwise wait on a full queue), to be
 * handed to record_image_build as packed; NULL: out of memory (the
 * builder then compresses them itself). */
record_packing *record_pack(record_imager *w, const store_record *r);
void record_packing_free(record_packing *p);

/* ---- hashing ------------------------------------------------------------- */

/* SHA-256 of bytes as 64 lower-case hex digits and a NUL (FIPS 180-4). */
void store_sha256_hex(const void *bytes, size_t len, char out[65]);
int store_sha256_file(const char *path, char out[65]);

#endif
