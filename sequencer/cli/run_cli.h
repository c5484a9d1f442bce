/* run_cli: the pieces of `precess run` behind cmd_run.c: opening the rig's
 * driver, the run folder and its journal, the progress shown per shot, the
 * supervisor of hardware runs. Not a library: CLI only. */
#ifndef PRECESS_RUN_CLI_H
#define PRECESS_RUN_CLI_H

#include <signal.h>
#include "analysis.h"
#include "compile.h"
#include "driver.h"
#include "schedule.h"
#include "store.h"

typedef struct {
    const compiled *c;
    const char *out;            /* --out, or NULL for the default name */
    int fast;
    volatile sig_atomic_t *stop, *abort;
    /* filled by run_open and run_execute */
    const drv_ops *ops;
    drv_context ctx;
    char log_path[4200];
    drv *driver;
    bool is_hardware;
    char run_id[33];
    uint64_t seed;
    char dir[4096];
    char plan_sha[65], rig_sha[65];
    store *st;
    sched_clock *clock;
    double started;             /* clock time at the first shot */
    bool started_set;
    size_t done, total;
    int progress_tty;
    pid_t supervisor;
    int supervisor_pipe;
    an_work *quick;             /* the progress line's spectra */
    size_t lost;                /* records the store dropped after failing */
    double disk_notice;         /* monotonic s of the last "waiting for the disk"; 0: none */
} run_session;

/* Finds and opens the driver (no folder yet). Returns a CLI exit status. */
int run_open(run_session *r);
/* Creates the folder, runs, journals, reports. Returns the exit status. */
int run_execute(run_session *r);
void run_close(run_session *r);

/* run_folder.c: the default folder name (title and start time, never an
 * existing run) and points.json. */
int run_default_dir(const compiled *c, char *out, size_t n);
char *run_points_json(const compiled *c, const char *plan_sha);
/* A random run id (32 hex digits) and the noise seed taken from it. */
void run_new_id(char id[33], uint64_t *seed);

#endif
