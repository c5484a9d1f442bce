/* test_schedule_limit: a command the driver refuses as past a limit of the
 * rig ends the run, with no retry, in the safe state, as SCHED_LIMIT (the
 * journal's stop reason `limit`). The simulated rig is driven by the
 * scheduler itself; one shot's ramps are made to ask for far more current
 * than the coil's max_current, as a compiler's slip would, so that the
 * driver's own check (defence in depth) is what stops it. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>
#include <cmocka.h>

#include "compile.h"
#include "driver.h"
#include "schedule.h"
#include "sim/sim.h"
#include "store.h"

#define BAD_SHOT 2u
#define SETUP 0u                /* the shot the scheduler is at during setup */

static const char PLAN[] =
    "version: 1\ntitle: limit test\nrig: %s/plans/rigs/sim-bench.yaml\n"
    "sample: {nuclei: [1H], model: {t1: 1 s, t2: 0.4 s, signal_per_field: 1e-9}}\n"
    "vary:\n  b: {from: 5 uT, to: 40 uT, steps: 4}\n"
    "retries: 2\n"
    "setup:\n  - field: {sample: 10 uT, settle: 1 s}\n"
    "shot:\n"
    "  - field: {sample: b, sensor: tune}\n"
    "  - pulse: {coil: tip, angle: 90 deg}\n"
    "  - acquire: {for: 100 ms, rate: 10 kHz}\n";

static const drv_ops *real;
static uint32_t shot_now, bad_shot, attempts[8];

static int begin_shot(drv *d, uint32_t shot, uint32_t attempt, const compile_timeline *t,
                      double start, char *err, size_t errlen) {
    shot_now = shot;
    if (shot < 8) attempts[shot]++;
    return real->begin_shot(d, shot, attempt, t, start, err, errlen);
}

/* The ramps of shot bad_shot (SETUP: of the setup) ask for 100 times their
 * current. */
static int load_segment(drv *d, const drv_segment *s, char *err, size_t errlen) {
    drv_segment bad = *s;
    if (shot_now == bad_shot && !s->pulse && s->to != 0) bad.to = 100 * s->to;
    return real->load_segment(d, &bad, err, errlen);
}

static int on_record(void *ctx, sched_shot_result *r) {
    (void)ctx;
    store_record_free(r->record);
    r->record = NULL;
    return 0;
}

/* Runs the plan with the ramps of shot bad made to ask too much; the
 * summary in *sum, every coil checked at zero after it. */
static sched_status run_with_bad(uint32_t bad, sched_summary *sum) {
    char cwd[2048], text[4096];
    assert_non_null(getcwd(cwd, sizeof cwd));
    snprintf(text, sizeof text, PLAN, cwd);
    diag_list d = {0};
    plan *p = plan_read_bytes("limit-test.yaml", text, strlen(text), &d);
    assert_non_null(p);
    scan *sc = scan_expand(p, &d);
    assert_non_null(sc);
    compiled *c = compile_plan(p, sc, &d);
    for (size_t i = 0; !c && i < d.n; i++)
        fprintf(stderr, "%s:%d:%d: %s\n", d.items[i].file, d.items[i].line, d.items[i].col,
                d.items[i].message);
    assert_non_null(c);
    real = drv_find("sim");
    assert_non_null(real);
    drv_ops limited = *real;
    limited.begin_shot = begin_shot;
    limited.load_segment = load_segment;
    shot_now = 0;
    bad_shot = bad;
    memset(attempts, 0, sizeof attempts);
    drv_context ctx = {&p->rig, c, 7, true, NULL};
    drv *dv = NULL;
    char err[256];
    assert_int_equal(real->open(&ctx, &dv, err, sizeof err), 0);
    sched_clock *clock = clock_new(true);
    volatile sig_atomic_t stop = 0, abort_now = 0;
    sched_run_args a = {c, &limited, dv, clock, "limit-test", "sim", "0", &stop, &abort_now,
                        on_record, NULL, NULL};
    sched_status st = sched_run(&a, sum);
    for (size_t k = 0; k < p->rig.ncoils; k++)
        assert_true(sim_current_at(dv, (int)k, clock_now(clock) + 1) == 0);
    real->close(dv);
    clock_free(clock);
    compile_free(c);
    scan_free(sc);
    plan_free(p);
    diag_free(&d);
    return st;
}

static void test_a_refused_limit_stops_the_run_safe_without_retry(void **state) {
    (void)state;
    sched_summary sum;
    assert_int_equal(run_with_bad(BAD_SHOT, &sum), SCHED_LIMIT);
    assert_int_equal(sum.shots_ok, BAD_SHOT - 1);
    assert_int_equal(attempts[BAD_SHOT], 1);         /* no retry: it would ask the same */
    assert_int_equal(attempts[BAD_SHOT + 1], 0);     /* and nothing after it */
    assert_non_null(strstr(sum.error, "max_current"));
}

/* In setup it is a limit too, not a hardware fault; no shot runs. */
static void test_a_refused_limit_in_setup_stops_the_run_as_a_limit(void **state) {
    (void)state;
    sched_summary sum;
    assert_int_equal(run_with_bad(SETUP, &sum), SCHED_LIMIT);
    assert_int_equal(sum.shots_ok, 0);
    assert_int_equal(attempts[1], 0);
    assert_non_null(strstr(sum.error, "setup:"));
    assert_non_null(strstr(sum.error, "max_current"));
}

int main(void) {
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_a_refused_limit_stops_the_run_safe_without_retry),
        cmocka_unit_test(test_a_refused_limit_in_setup_stops_the_run_as_a_limit),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
