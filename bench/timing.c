/* bench/timing: how close soft events come to their planned times. A plan
 * of 2000 line toggles every 2 ms runs in real time on the simulated rig
 * through the scheduler, interleaved in one run with three loops doing the
 * same schedule: a C loop sleeping relative delays and a Python loop with
 * time.sleep (the way a hand-written lab script would; their drift counts),
 * and the best plain loop (absolute deadlines with clock_nanosleep). Errors
 * are actual - planned absolute times. Targets: scheduler p50 <= 2 us; p90
 * and p99 within 1.5x of the absolute-deadline loop; p50 at least 10x
 * better than the hand-written loops. Not a test: never in make check. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "bench.h"
#include <unistd.h>

#include "schedule.h"

#define EVENTS 2000
#define PERIOD 0.002
#define ROUNDS 2

typedef struct {
    double *e;
    size_t n, cap;
} errors;

static void add(errors *x, double v) {
    if (x->n == x->cap) {
        x->cap = x->cap ? 2 * x->cap : 4096;
        x->e = realloc(x->e, x->cap * sizeof *x->e);
    }
    x->e[x->n++] = v;
}

static const char PLAN[] =
    "version: 1\ntitle: timing benchmark\nrig: rigs/sim-bench.yaml\n"
    "shot:\n"
    "  - repeat:\n      times: 1000\n      steps:\n"
    "        - line: {name: shuttle, state: on}\n        - wait: {for: 2 ms}\n"
    "        - line: {name: shuttle, state: off}\n        - wait: {for: 2 ms}\n";

static int collect(void *ctx, sched_shot_result *r) {
    errors *x = ctx;
    for (size_t i = 0; r->record && i < r->record->nevents; i++)
        if (strcmp(r->record->events[i].kind, "line") == 0)
            add(x, r->record->events[i].actual - r->record->events[i].planned);
    store_record_free(r->record);
    r->record = NULL;
    return 0;
}

static int run_scheduler(const compiled *c, errors *x) {
    const drv_ops *ops = drv_find("sim");
    drv_context ctx = {&c->plan->rig, c, 1, false, NULL};
    drv *d = NULL;
    char err[256];
    if (!ops || ops->open(&ctx, &d, err, sizeof err)) return -1;
    sched_clock *clock = clock_new(false);
    volatile sig_atomic_t stop = 0, abort_now = 0;
    sched_run_args a = {c, ops, d, clock, "bench", "sim", "", &stop, &abort_now, collect, x,
                        NULL};
    sched_summary sum;
    sched_run(&a, &sum);
    clock_free(clock);
    ops->close(d);
    return sum.status == SCHED_OK ? 0 : -1;
}

static void relative_loop(errors *x) {
    double t0 = bench_now();
    for (int k = 1; k <= EVENTS; k++) {
        usleep((useconds_t)(PERIOD * 1e6));
        add(x, bench_now() - (t0 + k * PERIOD));
    }
}

static void absolute_loop(errors *x) {
    double t0 = bench_now() + 0.01;
    for (int k = 0; k < EVENTS; k++) {
        double t = t0 + k * PERIOD;
        struct timespec ts = {(time_t)t, (long)((t - floor(t)) * 1e9)};
        while (clock_nanosleep(CLOCK_MONOTONIC, TIMER_ABSTIME, &ts, NULL)) {
        }
        add(x, bench_now() - t);
    }
}

static int python_loop(errors *x) {
    FILE *f = popen("/usr/bin/python3 -c 'import time\n"
                    "t0 = time.monotonic()\n"
                    "for k in range(1, 2001):\n"
                    "    time.sleep(0.002)\n"
                    "    print(time.monotonic() - (t0 + k * 0.002))\n'", "r");
    if (!f) return -1;
    double v;
    while (fscanf(f, "%lf", &v) == 1) add(x, v);
    return pclose(f) == 0 ? 0 : -1;
}

static void report(const char *name, errors *x, double *p50, double *p90, double *p99) {
    double max;
    sched_percentiles(x->e, x->n, p50, p99, &max);
    *p90 = x->e[(size_t)ceil(0.90 * (double)(x->n - 1))];
    printf("  %-34s %6zu events  p50 %9.1f us  p90 %9.1f us  p99 %9.1f us  max %9.1f us\n",
           name, x->n, *p50 * 1e6, *p90 * 1e6, *p99 * 1e6, max * 1e6);
}

int main(void) {
    diag_list d;
    diag_init(&d);
    plan *p = plan_read_bytes("plans/bench-timing.yaml", PLAN, strlen(PLAN), &d);
    scan *s = p ? scan_expand(p, &d) : NULL;
    compiled *c = s ? compile_plan(p, s, &d) : NULL;
    if (!c) {
        for (size_t i = 0; i < d.n; i++) fprintf(stderr, "%s\n", d.items[i].message);
        return 1;
    }
    clock_tighten_slack();
    errors sched = {0}, rel = {0}, py = {0}, abs_ = {0};
    printf("bench/timing: %d line toggles every %.0f ms, %d rounds of the four loops "
           "interleaved\n", EVENTS, PERIOD * 1e3, ROUNDS);
    for (int r = 0; r < ROUNDS; r++) {
        if (run_scheduler(c, &sched) || python_loop(&py)) return 1;
        relative_loop(&rel);
        absolute_loop(&abs_);
    }
    double s50, s90, s99, r50, r90, r99, y50, y90, y99, a50, a90, a99;
    report("precess scheduler (sim rig)", &sched, &s50, &s90, &s99);
    report("C loop, relative sleeps", &rel, &r50, &r90, &r99);
    report("Python loop, time.sleep", &py, &y50, &y90, &y99);
    report("C loop, absolute clock_nanosleep", &abs_, &a50, &a90, &a99);
    printf("  scheduler p50 %.2f us (target <= 2 us)\n", s50 * 1e6);
    printf("  scheduler / absolute loop: p90 %.2fx, p99 %.2fx (target <= 1.5x)\n", s90 / a90,
           s99 / a99);
    printf("  hand-written loops / scheduler at p50: C %.0fx, Python %.0fx (target >= 10x)\n",
           r50 / fmax(s50, 1e-9), y50 / fmax(s50, 1e-9));
    compile_free(c);
    scan_free(s);
    plan_free(p);
    diag_free(&d);
    return 0;
}
