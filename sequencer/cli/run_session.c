/* run_session: one `precess run` from the open driver to the last line:
 * the run folder and journal, the supervisor that makes a hardware rig
 * safe if this process dies, the scheduler, the progress line per shot and
 * the closing summary with the timing errors.
 * Not for parsing options (cmd_run.c) nor for timing (schedule.h). */
#include "cli.h"
#include "run_cli.h"
#include "analysis.h"

#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

int run_open(run_session *r) {
    const plan_rig *rig = &r->c->plan->rig;
    r->ops = drv_find(rig->driver);
    if (!r->ops) {
        fprintf(stderr, "precess run: driver '%s' is not available in this build\n", rig->driver);
        return CLI_FAILED;
    }
    if (r->fast && strcmp(rig->driver, "sim") != 0)
        return cli_usage_error("run", "--fast runs in simulated time: for simulated rigs only");
    run_new_id(r->run_id, &r->seed);
    if (r->out) snprintf(r->dir, sizeof r->dir, "%s", r->out);
    else if (run_default_dir(r->c, r->dir, sizeof r->dir)) {
        fprintf(stderr, "precess run: cannot find a free folder name under runs/\n");
        return CLI_FAILED;
    }
    snprintf(r->log_path, sizeof r->log_path, "%s/rig-commands.log", r->dir);
    bool sim = strcmp(rig->driver, "sim") == 0;
    r->ctx = (drv_context){rig, r->c, r->seed, r->fast != 0, sim ? r->log_path : NULL};
    r->is_hardware = !sim || rig->acts_as_hardware;
    r->clock = clock_new(r->fast != 0);
    r->supervisor = -1;
    r->supervisor_pipe = -1;
    return r->clock ? CLI_OK : CLI_FAILED;
}

/* ---- the supervisor ------------------------------------------------------ */

/* A child that waits on a pipe; if the run dies without saying goodbye it
 * opens the rig anew and puts it in the safe state. */
static void start_supervisor(run_session *r) {
    int fds[2];
    if (pipe(fds)) return;
    pid_t pid = fork();
    if (pid < 0) {
        close(fds[0]);
        close(fds[1]);
        return;
    }
    if (pid == 0) {
        close(fds[1]);
        signal(SIGINT, SIG_IGN);
        signal(SIGTERM, SIG_IGN);
        char byte = 0;
        ssize_t got = read(fds[0], &byte, 1);
        if (got == 1 && byte == 'x') _exit(0);
        drv *d = NULL;
        char err[256];
        if (r->ops->open(&r->ctx, &d, err, sizeof err) == 0) {
            sched_clock *c = clock_new(r->fast != 0);
            r->ops->safe_state(d, c ? clock_now(c) : 0, err, sizeof err);
            clock_free(c);
            r->ops->close(d);
        }
        _exit(1);
    }
    close(fds[0]);
    r->supervisor = pid;
    r->supervisor_pipe = fds[1];
}

static void stop_supervisor(run_session *r) {
    if (r->supervisor <= 0) return;
    char byte = 'x';
    if (write(r->supervisor_pipe, &byte, 1) != 1) {
    }
    close(r->supervisor_pipe);
    waitpid(r->supervisor, NULL, 0);
    r->supervisor = -1;
}

/* ---- progress ------------------------------------------------------------ */

static void clock_text(double s, char *buf, size_t n) {
    long t = (long)(s < 0 ? 0 : s + 0.5);
    if (t >= 3600) snprintf(buf, n, "%ld:%02ld:%02ld", t / 3600, t / 60 % 60, t % 60);
    else snprintf(buf, n, "%ld:%02ld", t / 60, t % 60);
}

/* The mains the progress line looks past: the plan's analysis line_noise,
 * else a simulated rig's own mains; 0 when neither is given. */
static double progress_mains(const plan *p) {
    if (p->analysis.line_noise > 0) return p->analysis.line_noise;
    return p->rig.environment.present ? p->rig.environment.mains : 0;
}

/* The strongest line of the shot's first acquisition away from the mains,
 * as the progress line shows it: "425.8 Hz, SNR 57"; below an SNR of
 * PROGRESS_MIN_SNR (the highest bin of noise alone is about 3) "no line
 * above SNR 5, 426 Hz planned" (without the planned frequency when it is
 * below one bin: zero field); the planned frequency alone when there are
 * no samples to look at. */
#define PROGRESS_MIN_SNR 5.0
static void last_line(run_session *r, const sched_shot_result *res, const compile_timeline *t,
                      char *buf, size_t n) {
    char f[32];
    const store_record *rec = res->record;
    an_line line;
    if (rec && rec->nacquisitions && rec->acquisitions[0].nchannels) {
        const store_channel *ch = &rec->acquisitions[0].channels[0];
        double guard = fmax(10.0, 20.0 * ch->sample_rate / (double)(ch->n ? ch->n : 1));
        if (!r->quick) r->quick = an_work_new();
        an_quick_opts o = {guard, progress_mains(r->c->plan), t->frequency};
        if (an_quick_line(r->quick, ch->samples, ch->n, ch->sample_rate, ch->receiver_sign, &o,
                          &line) == 0) {
            if (line.snr >= PROGRESS_MIN_SNR) {
                units_format(line.frequency, UNITS_FREQUENCY, f, sizeof f);
                snprintf(buf, n, "%s, SNR %.0f", f, line.snr);
                return;
            }
            units_format(t->frequency, UNITS_FREQUENCY, f, sizeof f);
            /* at zero field the solved field's rounding plans a line of
             * attohertz: below one bin of the spectrum, none is planned */
            if (t->frequency >= ch->sample_rate / (double)ch->n)
                snprintf(buf, n, "no line above SNR %.0f, %s planned", PROGRESS_MIN_SNR, f);
            else
                snprintf(buf, n, "no line above SNR %.0f", PROGRESS_MIN_SNR);
            return;
        }
    }
    /* below a millihertz is zero field's rounding, not a frequency */
    units_format(t->frequency < 1e-3 ? 0 : t->frequency, UNITS_FREQUENCY, f, sizeof f);
    snprintf(buf, n, "%s planned", f);
}

/* Closes the store, keeping how many records it dropped; true when it
 * reports a failure. */
static bool store_close_keep(run_session *r, char *err, size_t errlen) {
    bool bad = store_finish(r->st, &r->lost, err, errlen) != 0;
    r->st = NULL;
    return bad;
}

static void progress(run_session *r, const sched_shot_result *res) {
    const compiled *c = r->c;
    const compile_timeline *t = compile_shot_timeline(c, res->shot);
    double elapsed = clock_now(r->clock) - r->started;
    double left = c->duration - (c->shot_start[res->shot - 1] + t->duration);
    char e[32], l[32], f[64];
    clock_text(elapsed, e, sizeof e);
    clock_text(left, l, sizeof l);
    last_line(r, res, t, f, sizeof f);
    if (r->progress_tty)
        fprintf(stderr, "\rshot %u/%zu  elapsed %s  remaining %s  last shot %s: %s\033[K",
                res->shot, r->total, e, l, res->ok ? "ok" : "FAILED", f);
    else
        fprintf(stderr, "shot %u/%zu attempt %u %s  elapsed %s  remaining %s  %s%s%s\n",
                res->shot, r->total, res->attempt, res->ok ? "ok" : "failed", e, l, f,
                res->ok ? "" : ": ", res->ok ? "" : res->error);
}

static int on_record(void *ctx, sched_shot_result *res) {
    run_session *r = ctx;
    char err[256];
    if (!r->started_set) {
        r->started = res->start;
        r->started_set = true;
    }
    progress(r, res);
    if (!res->record) return -1;
    int q = store_submit(r->st, res->record, false, err, sizeof err);
    if (q == 1) {
        /* Said at most once a minute: under --fast the disk sets the pace
         * of every shot, and one line a shot would bury the progress. */
        struct timespec now;
        clock_gettime(CLOCK_MONOTONIC, &now);
        double t = (double)now.tv_sec + 1e-9 * (double)now.tv_nsec;
        if (r->disk_notice == 0 || t - r->disk_notice >= 60) {
            fprintf(stderr, "%sprecess run: waiting for the disk, holding the rig at rest%s\n",
                    r->progress_tty ? "\n" : "",
                    r->fast ? " (under --fast the disk sets the pace)" : "");
            r->disk_notice = t;
        }
        q = store_submit(r->st, res->record, true, err, sizeof err);
    }
    res->record = NULL;
    if (q) {
        snprintf(res->error, sizeof res->error, "recording failed: %.200s", err);
        return -1;
    }
    return 0;
}

/* ---- the run --------------------------------------------------------------- */

static int open_folder(run_session *r) {
    const plan *p = r->c->plan;
    char err[512];
    store_sha256_hex(p->bytes, p->nbytes, r->plan_sha);
    static const char inline_rig[] = "# the rig is written inline in plan.yaml\n";
    const char *rig = p->rig.bytes && !p->rig_inline ? p->rig.bytes : inline_rig;
    size_t rig_len = p->rig.bytes && !p->rig_inline ? p->rig.nbytes : strlen(inline_rig);
    store_sha256_hex(rig, rig_len, r->rig_sha);
    char *points = run_points_json(r->c, r->plan_sha);
    store_files files = {p->bytes, rig, p->nbytes, rig_len, points};
    int rc = points ? store_create(r->dir, &files, &r->st, err, sizeof err) : -1;
    free(points);
    /* In simulated time nothing waits for a deadline: the writer sets the
     * pace, and gets a core first. */
    if (rc == 0 && r->fast) rc = store_writer_first(r->st);    /* not yet started: 0 */
    if (rc == 0) rc = store_start(r->st, 16, err, sizeof err);
    if (rc) fprintf(stderr, "precess run: %s: %s\n", r->dir, points ? err : "out of memory");
    return rc;
}

static void journal_start(run_session *r) {
    char host[256] = "";
    gethostname(host, sizeof host - 1);
    json_t *o = json_pack("{s:s, s:s, s:s, s:I, s:s, s:s, s:s}", "run", r->run_id,
                          "plan_sha256", r->plan_sha, "rig_sha256", r->rig_sha, "shots",
                          (json_int_t)r->c->scan->nshots, "driver", r->c->plan->rig.driver,
                          "version", PRECESS_VERSION, "host", host);
    char err[256];
    if (journal_append(r->st, "start", o, err, sizeof err))
        fprintf(stderr, "precess run: journal: %s\n", err);
}

static const char *reason_of(sched_status s) {
    return s == SCHED_OK || s == SCHED_FAILED ? "done"
           : s == SCHED_INTERRUPTED          ? "interrupted"
           : s == SCHED_LIMIT                ? "limit"
                                             : "fault";
}

/* A run whose records could not be written stopped on a fault of the
 * recording, whatever the scheduler says. */
static void journal_stop(run_session *r, const sched_summary *sum, bool recording_failed) {
    json_t *timing = json_pack("{s:I, s:f, s:f, s:f}", "events", (json_int_t)sum->nevents,
                               "p50_us", sum->p50 * 1e6, "p99_us", sum->p99 * 1e6, "max_us",
                               sum->max * 1e6);
    json_t *o = json_pack("{s:s, s:o}", "reason",
                          recording_failed ? "fault" : reason_of(sum->status), "timing", timing);
    if (sum->status == SCHED_FAULT || sum->status == SCHED_FAILED || sum->status == SCHED_LIMIT) {
        if (sum->error[0]) json_object_set_new(o, "error", json_string(sum->error));
    }
    char err[256];
    if (journal_append(r->st, "stop", o, err, sizeof err))
        fprintf(stderr, "precess run: journal: %s\n", err);
}

static int exit_status(sched_status s) {
    return s == SCHED_OK ? CLI_OK : s == SCHED_INTERRUPTED ? CLI_INTERRUPTED
                                : s == SCHED_FAULT         ? CLI_FAULT
                                                           : CLI_FAILED;
}

int run_execute(run_session *r) {
    char err[256];
    if (open_folder(r)) return CLI_FAILED;
    if (r->ops->open(&r->ctx, &r->driver, err, sizeof err)) {
        fprintf(stderr, "precess run: cannot open rig %s: %s\n", r->c->plan->rig.name, err);
        store_close(r->st, err, sizeof err);
        r->st = NULL;
        return CLI_FAULT;
    }
    if (r->is_hardware) start_supervisor(r);
    r->total = r->c->scan->nshots;
    r->progress_tty = isatty(STDERR_FILENO);
    fprintf(stderr, "precess run: %s -> %s (%zu shots%s)\n", r->c->plan->title, r->dir,
            r->total, r->fast ? ", simulated time" : "");
    journal_start(r);
    sched_run_args a = {r->c, r->ops, r->driver, r->clock, r->run_id, r->c->plan->rig.driver,
                        r->plan_sha, r->stop, r->abort, on_record, r, NULL};
    sched_summary sum;
    sched_run(&a, &sum);
    if (r->progress_tty) fputc('\n', stderr);
    bool recording_failed = store_flush(r->st, err, sizeof err) != 0;
    if (recording_failed && sum.status == SCHED_OK) {
        sum.status = SCHED_FAILED;
        snprintf(sum.error, sizeof sum.error, "%s", err);
    }
    journal_stop(r, &sum, recording_failed);
    size_t ok = 0, failed = 0;
    store_counts(r->st, &ok, &failed);
    bool store_failed = store_close_keep(r, err, sizeof err);
    if (store_failed && sum.status == SCHED_OK) sum.status = SCHED_FAILED;
    /* the record the writer failed on, and every one dropped after it */
    size_t lost = r->lost + (recording_failed ? 1 : 0);
    stop_supervisor(r);
    if (sum.error[0]) fprintf(stderr, "precess run: %s\n", sum.error);
    char lost_text[160] = "";
    if (lost)
        snprintf(lost_text, sizeof lost_text, ", %zu shot%s run but not recorded (the writer had "
                 "failed; the journal does not list them)", lost, lost == 1 ? "" : "s");
    printf("run %s: %zu shots recorded ok, %zu failed attempts%s, %s; timing of %zu soft "
           "events: p50 %.1f us, p99 %.1f us, max %.1f us\n", r->dir, ok, failed, lost_text,
           recording_failed ? "stopped: records could not be written" : reason_of(sum.status),
           sum.nevents, sum.p50 * 1e6, sum.p99 * 1e6, sum.max * 1e6);
    return exit_status(sum.status);
}

void run_close(run_session *r) {
    char err[256];
    if (r->st) store_close(r->st, err, sizeof err);
    stop_supervisor(r);
    if (r->driver) r->ops->close(r->driver);
    clock_free(r->clock);
    an_work_free(r->quick);
}
