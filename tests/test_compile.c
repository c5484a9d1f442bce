/* test_compile: the compiled timeline as the step-timing rules give it:
 * each step's start and length to the microsecond, the events, rest and
 * reference variants; every refusal of the compiler with its message and
 * location; and a property test that no compiled plan of many random ones
 * holds a current, slew, compliance or output voltage over a limit.
 * Plans are read from memory as tests/plans/compile.yaml. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <cmocka.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include "compile.h"

#define PLAN_FILE "tests/plans/compile.yaml"
#define US 1e-6

typedef struct {
    diag_list d;
    plan *p;
    scan *s;
    compiled *c;
} fixture;

static int setup(void **state) {
    fixture *f = calloc(1, sizeof *f);
    diag_init(&f->d);
    *state = f;
    return f ? 0 : -1;
}

static int teardown(void **state) {
    fixture *f = *state;
    compile_free(f->c);
    scan_free(f->s);
    plan_free(f->p);
    diag_free(&f->d);
    free(f);
    return 0;
}

/* Compile text (a plan on `rig`); NULL results leave the diagnostics. */
static compiled *try_compile(fixture *f, const char *rig, const char *body) {
    char text[8192];
    snprintf(text, sizeof text, "version: 1\nrig: %s\n%s", rig, body);
    f->p = plan_read_bytes(PLAN_FILE, text, strlen(text), &f->d);
    if (!f->p) return NULL;
    f->s = scan_expand(f->p, &f->d);
    if (!f->s) return NULL;
    f->c = compile_plan(f->p, f->s, &f->d);
    return f->c;
}

static const compiled *compile_ok(fixture *f, const char *body) {
    const compiled *c = try_compile(f, "bench.yaml", body);
    if (!c)
        for (size_t i = 0; i < f->d.n; i++)
            fprintf(stderr, "%d:%d: %s\n", f->d.items[i].line, f->d.items[i].col,
                    f->d.items[i].message);
    assert_non_null(c);
    return c;
}

static void near(double got, double want, double tol) {
    if (fabs(got - want) > tol) fail_msg("got %.12g, want %.12g (within %g)", got, want, tol);
}

static void step_is(const compile_timeline *t, size_t step, double start, double length) {
    assert_true(step >= 1 && step <= t->nsteps);
    near(t->steps[step - 1].start, start, US);
    near(t->steps[step - 1].length, length, US);
}

/* ---- step timing ---------------------------------------------------------- */

static void test_polarize_ramps_at_max_slew_holds_and_switches_off(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "shot:\n"
                                      "  - polarize: {coil: prepol, current: 2 A, for: 1 s}\n"
                                      "  - wait: {for: 500 ms}\n");
    const compile_timeline *t = &c->timelines[0];
    /* prepol slews at 200 A/s: 10 ms up, 1 s held, 10 ms down. */
    step_is(t, 1, 0, 1.020);
    step_is(t, 2, 1.020, 0.5);
    near(t->duration, 1.520, US);
    assert_int_equal(t->nevents, 2);
    assert_int_equal(t->events[0].kind, EV_RAMP);
    near(t->events[0].length, 0.010, US);
    near(t->events[0].to, 2.0, 1e-12);
    near(t->events[1].start, 1.010, US);
    near(t->events[1].to, 0.0, 1e-12);
}

static void test_polarize_by_field_uses_field_per_current(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "shot:\n"
                                      "  - polarize: {coil: prepol, field: 18 mT, for: 2 s, "
                                      "off: 40 ms}\n");
    const compile_timeline *t = &c->timelines[0];
    /* 18 mT at 4.5 mT/A is 4 A: 20 ms up at 200 A/s, 2 s, 40 ms off as asked. */
    step_is(t, 1, 0, 2.060);
    near(t->events[0].to, 4.0, 1e-12);
    near(t->events[1].length, 0.040, US);
}

static void test_polarize_in_a_magnet_only_holds(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "shot:\n  - polarize: {magnet: premag, for: 3 s}\n");
    step_is(&c->timelines[0], 1, 0, 3.0);
    assert_int_equal(c->timelines[0].nevents, 0);
}

static void test_field_ramps_every_coil_over_one_common_time_then_settles(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "shot:\n"
                                      "  - field: {sample: 12 uT, sensor: 0 T, settle: 5 ms}\n"
                                      "  - acquire: {for: 1 s, rate: 2 kHz}\n");
    const compile_timeline *t = &c->timelines[0];
    /* Exact 2 x 2 solve (Cramer): sample 120 uT/A main + 0.4 uT/A bias,
     * sensor 2.1 uT/A main + 55 uT/A bias. */
    double det = 120e-6 * 55e-6 - 0.4e-6 * 2.1e-6;
    double main = 12e-6 * 55e-6 / det, bias = -2.1e-6 * 12e-6 / det;
    near(t->currents[1], main, 1e-12);
    near(t->currents[2], bias, 1e-12);
    /* main limits the ramp: |main| / 5 A/s; bias follows over the same time. */
    double ramp = fabs(main) / 5.0;
    step_is(t, 1, 0, ramp + 0.005);
    step_is(t, 2, ramp + 0.005, 1.0);
    assert_int_equal(t->events[0].channel, 1);
    assert_int_equal(t->events[1].channel, 2);
    near(t->events[0].length, ramp, US);
    near(t->events[1].length, ramp, US);
    /* Back to rest, part of the shot, at the same rates. */
    near(t->duration, 2 * ramp + 1.005, US);
    near(t->fields[0], 12e-6, 1e-15);
}

static void test_field_with_a_longer_ramp_takes_it(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "shot:\n"
                                      "  - field: {sample: 12 uT, sensor: 0 T, ramp: 80 ms}\n"
                                      "  - acquire: {for: 250 ms, rate: 5 kHz}\n");
    const compile_timeline *t = &c->timelines[0];
    step_is(t, 1, 0, 0.080);
    step_is(t, 2, 0.080, 0.250);
}

static void test_one_place_for_two_coils_takes_the_minimum_norm(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "shot:\n  - field: {sample: 12 uT}\n"
                                      "  - acquire: {for: 10 ms, rate: 2 kHz}\n");
    /* x = A^T b / (A A^T) for A = [120e-6, 0.4e-6]. */
    double aa = 120e-6 * 120e-6 + 0.4e-6 * 0.4e-6;
    near(c->timelines[0].currents[1], 120e-6 * 12e-6 / aa, 1e-12);
    near(c->timelines[0].currents[2], 0.4e-6 * 12e-6 / aa, 1e-12);
}

static void test_dc_pulse_length_is_its_duration_plus_one_edge(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "shot:\n"
                                      "  - pulse: {coil: tip, angle: 90 deg}\n"
                                      "  - acquire: {for: 100 ms, rate: 1 kHz}\n");
    const compile_timeline *t = &c->timelines[0];
    const compile_pulse *pu = &t->pulses[0];
    /* At zero field theta = |gamma| B t: 90 deg at 80 uT (1 A x 80 uT/A).
     * source: rotation formula; gamma of 1H, CODATA 2018 (value from memory) */
    double duration = (M_PI / 2) / (2.6752218744e8 * 80e-6);
    near(pu->duration, duration, 1e-9);
    near(pu->rise, 1.0 / 50e3, 1e-12);
    near(pu->length, duration + 20e-6, 1e-9);
    step_is(t, 1, 0, duration + 20e-6);
    step_is(t, 2, duration + 20e-6, 0.100);
    near(pu->angles[0], M_PI / 2, 1e-9);
}

static void test_lines_switch_instantly_and_end_inactive(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "shot:\n"
                                      "  - line: {name: shuttle, state: on}\n"
                                      "  - wait: {for: 120 ms}\n");
    const compile_timeline *t = &c->timelines[0];
    step_is(t, 1, 0, 0);
    step_is(t, 2, 0, 0.120);
    assert_int_equal(t->nevents, 2);
    assert_int_equal(t->events[0].kind, EV_LINE);
    near(t->events[0].to, 1, 0);
    assert_int_equal(t->events[1].kind, EV_LINE);
    near(t->events[1].start, 0.120, US);
    near(t->events[1].to, 0, 0);
    assert_int_equal(t->events[1].step, 0);
}

static void test_repeat_expands_its_steps_in_order(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "shot:\n"
                                      "  - repeat: {times: 3, steps: [{wait: {for: 10 ms}}, "
                                      "{wait: {for: 5 ms}}]}\n");
    const compile_timeline *t = &c->timelines[0];
    assert_int_equal(t->nsteps, 6);
    for (size_t k = 0; k < 3; k++) {
        step_is(t, 2 * k + 1, 0.015 * k, 0.010);
        step_is(t, 2 * k + 2, 0.015 * k + 0.010, 0.005);
    }
    near(t->duration, 0.045, US);
}

static void test_shots_start_and_end_at_rest(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "rest: {sample: 6 uT, sensor: 0 T}\n"
                                      "shot:\n"
                                      "  - field: {sample: 12 uT, sensor: 0 T}\n"
                                      "  - wait: {for: 1 s}\n");
    double det = 120e-6 * 55e-6 - 0.4e-6 * 2.1e-6;
    double rest_main = 6e-6 * 55e-6 / det, main = 12e-6 * 55e-6 / det;
    near(c->rest_currents[1], rest_main, 1e-12);
    const compile_timeline *t = &c->timelines[0];
    near(t->events[0].from, rest_main, 1e-12);
    double ramp = (main - rest_main) / 5.0;
    step_is(t, 1, 0, ramp);
    near(t->duration, 2 * ramp + 1, US);
    /* The run starts from the safe state: setup ramps to rest, teardown back. */
    near(c->setup.duration, rest_main / 5.0, US);
    near(c->teardown.duration, rest_main / 5.0, US);
}

static void test_shots_follow_each_other_and_reference_shots_get_their_values(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "vary:\n  t: [100 ms, 200 ms, 300 ms]\n"
                                      "averages: 2\n"
                                      "reference: {every: 2, with: {t: 1 s}}\n"
                                      "shot:\n  - wait: {for: t}\n");
    /* shots: p1 p1 p2 p2 ref(p2) p3 p3 */
    assert_int_equal(c->scan->nshots, 7);
    assert_int_equal(c->ntimelines, 4);
    static const double starts[] = {0, 0.1, 0.2, 0.4, 0.6, 1.6, 1.9};
    for (uint32_t k = 1; k <= 7; k++) near(c->shot_start[k - 1], starts[k - 1], US);
    near(compile_shot_timeline(c, 5)->duration, 1.0, US);
    near(c->duration, 2.2, US);
}

/* ---- targets through the nuclei table and the detector ------------------- */

static void test_larmor_target_sets_the_field_for_that_frequency(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "shot:\n"
                                      "  - field: {sample: {larmor: 1 kHz}, sensor: 0 T}\n"
                                      "  - acquire: {for: 10 ms, rate: 5 kHz}\n"
                                      "  - field: {sample: {larmor: 200 Hz, nucleus: 13C}, "
                                      "sensor: 0 T}\n"
                                      "  - acquire: {for: 10 ms, rate: 5 kHz}\n");
    /* |B| = 2 pi f / |gamma|. source: Larmor relation; gamma of 1H CODATA 2018, of 13C
     * IUPAC 2001 (values from memory) */
    near(c->timelines[0].fields[0], 2 * M_PI * 1000 / 2.6752218744e8, 1e-15);
    near(c->timelines[0].frequency, 1000, 1e-9);
    double b13c = 2 * M_PI * 200 / 6.728284e7;
    /* The second field step (step 3) ramps main and bias to that field. */
    double cur[4] = {0};
    for (size_t k = 0; k < c->timelines[0].nevents; k++) {
        const compile_event *e = &c->timelines[0].events[k];
        if (e->step == 3 && e->kind == EV_RAMP) cur[e->channel] = e->to;
    }
    near(cur[1] * 120e-6 + cur[2] * 0.4e-6, b13c, 1e-15);
}

static void test_larmor_target_counts_the_transverse_residual(void **state) {
    fixture *f = *state;
    const compiled *c = try_compile(f, "tight-bench.yaml",
                                    "shot:\n  - field: {sample: {larmor: 1 kHz}}\n"
                                    "  - acquire: {for: 10 ms, rate: 5 kHz}\n");
    assert_non_null(c);
    double b = 2 * M_PI * 1000 / 2.6752218744e8;
    near(c->timelines[0].fields[0], sqrt(b * b - 30e-9 * 30e-9), 1e-15);
    near(c->timelines[0].frequency, 1000, 1e-9);
}

static void test_tune_sets_the_detector_resonance_to_the_signal(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "shot:\n"
                                      "  - field: {sample: 10 uT, sensor: tune}\n"
                                      "  - acquire: {for: 10 ms, rate: 5 kHz}\n");
    /* f = |gamma| B / 2 pi of 1H at 10 uT; the sensor's field f / (7.0 Hz/nT). */
    double signal = 2.6752218744e8 * 10e-6 / (2 * M_PI);
    near(c->timelines[0].fields[1], signal / 7.0e9, 1e-16);
}

static void test_tune_to_a_frequency_uses_the_gyromagnetic_ratio(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "shot:\n"
                                      "  - field: {sample: 10 uT, sensor: {tune: 2 kHz}}\n"
                                      "  - acquire: {for: 10 ms, rate: 5 kHz}\n");
    near(c->timelines[0].fields[1], 2000 / 7.0e9, 1e-16);
}

static void test_tune_follows_the_sign_of_the_sample_field(void **state) {
    fixture *f = *state;
    const compiled *c = compile_ok(f, "shot:\n"
                                      "  - field: {sample: -10 uT, sensor: {tune: 2 kHz}}\n"
                                      "  - acquire: {for: 10 ms, rate: 5 kHz}\n"
                                      "  - field: {sample: -10 uT, sensor: tune}\n"
                                      "  - acquire: {for: 10 ms, rate: 5 kHz}\n");
    /* sense 1: parallel to the sample's field, which points along -z here. */
    near(c->timelines[0].fields[1], -2000 / 7.0e9, 1e-16);
}

/* ---- no compiled plan holds anything over a limit ------------------------- */

static void assert_within(const plan_rig *rig, const compile_timeline *t, const double *rest) {
    double base[16] = {0};
    for (size_t c = 0; c < rig->ncoils; c++) base[c] = rest[c];
    for (size_t k = 0; k < t->nevents; k++) {
        const compile_event *e = &t->events[k];
        if (e->kind != EV_RAMP && e->kind != EV_PULSE) continue;
        const rig_coil *coil = &rig->coils[e->channel];
        double lim = 1 + 1e-9;
        if (e->kind == EV_RAMP) {
            double slew = e->length > 0 ? fabs(e->to - e->from) / e->length : 0;
            if (e->length <= 0) assert_true(e->to == e->from);
            assert_true(slew <= coil->max_slew * lim);
            double ends[2] = {e->from, e->to};
            for (int j = 0; j < 2; j++) {
                assert_true(fabs(ends[j]) <= coil->max_current * lim);
                assert_true(fabs(ends[j]) / coil->amps_per_volt <= rig->ao_range * lim);
                double s = e->length > 0 ? (e->to - e->from) / e->length : 0;
                assert_true(fabs(ends[j] * coil->resistance + coil->inductance * s) <=
                            coil->compliance * lim);
            }
            base[e->channel] = e->to;
        } else {
            const compile_pulse *pu = &t->pulses[e->index];
            double peak = fabs(base[e->channel]) + pu->current;
            double slew = pu->rise > 0 ? pu->current / pu->rise : 0;
            assert_true(pu->shape == SHAPE_RESONANT || pu->rise > 0);
            assert_true(peak <= coil->max_current * lim);
            assert_true(peak / coil->amps_per_volt <= rig->ao_range * lim);
            assert_true(slew <= coil->max_slew * lim);
            assert_true(peak * coil->resistance + coil->inductance * slew <=
                        coil->compliance * lim);
        }
    }
}

static void test_no_compiled_plan_exceeds_a_limit(void **state) {
    (void)state;
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 20261201);
    int compiled_ok = 0, refused = 0;
    for (int trial = 0; trial < 300; trial++) {
        fixture f = {0};
        diag_init(&f.d);
        char body[4096];
        double pol = gsl_ran_flat(rng, -6, 6), bs = gsl_ran_flat(rng, -80e-6, 80e-6);
        double bn = gsl_ran_flat(rng, -3e-6, 3e-6), amp = gsl_ran_flat(rng, 20e-6, 90e-6);
        double ramp = gsl_rng_uniform(rng) < 0.5 ? gsl_ran_flat(rng, 1e-4, 0.05) : -1;
        double off = gsl_rng_uniform(rng) < 0.5 ? gsl_ran_flat(rng, 1e-3, 0.05) : -1;
        char ramp_text[64] = "", off_text[64] = "";
        if (ramp > 0) snprintf(ramp_text, sizeof ramp_text, ", ramp: %.6g s", ramp);
        if (off > 0) snprintf(off_text, sizeof off_text, ", off: %.6g s", off);
        snprintf(body, sizeof body,
                 "vary:\n  b: [%.6g T, %.6g T]\n"
                 "shot:\n"
                 "  - polarize: {coil: prepol, current: %.6g A, for: 100 ms%s}\n"
                 "  - field: {sample: b, sensor: %.6g T%s}\n"
                 "  - pulse: {coil: tip, angle: %.4g deg, amplitude: %.6g T}\n"
                 "  - acquire: {for: 10 ms, rate: 20 kHz}\n",
                 bs, -bs / 2, pol, off_text, bn, ramp_text, gsl_ran_flat(rng, 10, 180), amp);
        const compiled *c = try_compile(&f, "bench.yaml", body);
        if (c) {
            compiled_ok++;
            for (size_t k = 0; k < c->ntimelines; k++)
                assert_within(&f.p->rig, &c->timelines[k], c->rest_currents);
        } else {
            refused++;
            assert_true(f.d.errors > 0);
        }
        compile_free(f.c);
        scan_free(f.s);
        plan_free(f.p);
        diag_free(&f.d);
    }
    gsl_rng_free(rng);
    print_message("%d random plans compiled and stayed within every limit, %d refused\n",
                  compiled_ok, refused);
    /* Both kinds must occur, or the property was not put to the test. */
    assert_true(compiled_ok >= 30);
    assert_true(refused >= 30);
}

/* ---- refusals and warnings, with their place ------------------------------ */

/* Compiles body on rig and compares every error and warning ("L:C: sev:
 * message", notes left out) with expected; the plan must compile exactly
 * when no error is expected. */
static void expect_compile(fixture *f, const char *rig, const char *body, const char *expected) {
    const compiled *c = try_compile(f, rig, body);
    static const char *const sev[] = {"error", "warning", "note"};
    char got[8192] = "";
    size_t used = 0;
    diag_sort(&f->d);
    for (size_t i = 0; i < f->d.n; i++) {
        const diag *g = &f->d.items[i];
        if (g->severity == DIAG_NOTE) continue;
        used += (size_t)snprintf(got + used, sizeof got - used, "%d:%d: %s: %s\n", g->line,
                                 g->col, sev[g->severity], g->message);
    }
    assert_string_equal(got, expected);
    if (strstr(expected, ": error: ")) assert_null(c);
    else assert_non_null(c);
}

static void test_refuses_compliance(void **state) {
    expect_compile(*state, "tight-bench.yaml",
        "vary:\n"
        "  b: [10 uT, 42 uT]\n"
        "shot:\n"
        "  - field: {sample: b}\n",
        "6:5: error: point 2: compliance of coil main exceeded: 10.75 V > 10 V; lower max_slew or the field step\n");
}

static void test_refuses_edges_too_long(void **state) {
    expect_compile(*state, "bench.yaml",
        "shot:\n"
        "  - pulse: {coil: tip, angle: 10 deg, amplitude: 80 uT}\n",
        "4:5: error: point 1: the edges alone of this pulse tip 1H by 24.52 deg, more than 10 deg: at coil tip's max_slew each edge takes 20 us at 80 uT; lower the amplitude\n");
}

static void test_warns_expect_adiabatic_but_sudden(void **state) {
    expect_compile(*state, "bench.yaml",
        "rest: {sample: 5 uT, sensor: 0 T}\n"
        "shot:\n"
        "  - field: {sample: -5 uT, sensor: 0 T, expect: adiabatic}\n",
        "5:5: warning: point 1: this field change is sudden (smallest ratio 0), not adiabatic as expected\n");
}

static void test_warns_expect_sudden_but_never_turns(void **state) {
    expect_compile(*state, "bench.yaml",
        "rest: {sample: 1 uT, sensor: 0 T}\n"
        "shot:\n"
        "  - field: {sample: 5 uT, sensor: 0 T, expect: sudden}\n",
        "5:5: warning: point 1: the field's direction never turns here, so the change is adiabatic, not sudden as expected\n");
}

static void test_refuses_larmor_below_residual(void **state) {
    expect_compile(*state, "tight-bench.yaml",
        "shot:\n"
        "  - field: {sample: {larmor: 1 Hz}}\n",
        "4:13: error: point 1: place sample cannot have a field of 23.49 nT: its transverse residual alone is 30 nT\n");
}

static void test_refuses_many_points_one_message(void **state) {
    expect_compile(*state, "bench.yaml",
        "vary:\n"
        "  b: [50 uT, 80 uT, 90 uT, 100 uT]\n"
        "shot:\n"
        "  - field: {sample: b, sensor: 0 T}\n",
        "6:5: error: point 2: max_current of coil main exceeded: 666.8 mA > 600 mA; lower the field or current asked (and at 2 more points)\n");
}

static void test_refuses_max_current(void **state) {
    expect_compile(*state, "bench.yaml",
        "shot:\n"
        "  - field: {sample: 100 uT, sensor: 0 T}\n",
        "4:5: error: point 1: max_current of coil main exceeded: 833.4 mA > 600 mA; lower the field or current asked\n");
}

static void test_refuses_max_duration(void **state) {
    expect_compile(*state, "bench.yaml",
        "limits: {max_duration: 1 s}\n"
        "shot:\n"
        "  - wait: {for: 2 s}\n",
        "3:24: error: the plan takes 2 s, longer than limits.max_duration (1 s); take fewer points or averages, or raise the limit\n");
}

static void test_warns_misfit_warning(void **state) {
    expect_compile(*state, "tight-bench.yaml",
        "shot:\n"
        "  - field: {sample: 6 uT, probe: 7.2 uT, mirror: 3.7 uT, far: 0.5 uT}\n",
        "4:5: warning: point 1: the coils cannot give every field asked here; the least-squares misfit is 89.44 nT\n");
}

static void test_refuses_no_field_per_current(void **state) {
    expect_compile(*state, "bench.yaml",
        "shot:\n"
        "  - polarize: {coil: main, field: 1 mT, for: 1 s}\n",
        "4:5: error: point 1: coil main has no field_per_current (nor geometry), so a field cannot be turned into its current; give 'current' instead\n");
}

static void test_refuses_nyquist(void **state) {
    expect_compile(*state, "bench.yaml",
        "shot:\n"
        "  - field: {sample: 50 uT, sensor: 0 T}\n"
        "  - acquire: {for: 1 s, rate: 1 kHz}\n",
        "5:5: error: point 1: the 1H signal at 2.129 kHz is at or above half the acquisition rate (1 kHz); raise rate above 4.258 kHz\n");
}

static void test_refuses_off_ramp_too_short(void **state) {
    expect_compile(*state, "bench.yaml",
        "shot:\n"
        "  - polarize: {coil: prepol, current: 4 A, for: 1 s, off: 2 ms}\n",
        "4:59: error: point 1: off ramp 2 ms is faster than coil prepol's max_slew allows (20 ms)\n");
}

static void test_refuses_output_voltage(void **state) {
    expect_compile(*state, "tight-bench.yaml",
        "shot:\n"
        "  - polarize: {coil: bias, current: 30 mA, for: 1 s}\n",
        "4:5: error: point 1: the output voltage of coil bias leaves the analog output range: 6 V > 5 V\n");
}

static void test_refuses_power(void **state) {
    expect_compile(*state, "tight-bench.yaml",
        "shot:\n"
        "  - polarize: {coil: prepol, current: 5 A, for: 5 s}\n"
        "  - wait: {for: 1 s}\n",
        "10:3: error: max_power of coil prepol exceeded: 20.07 W mean over 10 s > 10 W; shorten its hold, lower its current or add a wait\n");
}

static void test_refuses_power_per_shot(void **state) {
    expect_compile(*state, "tight-bench.yaml",
        "shot:\n"
        "  - polarize: {coil: twin, current: 350 mA, for: 1 s}\n",
        "17:3: error: point 1: max_power of coil twin exceeded: 1.35 W mean over the shot > 1 W\n");
}

static void test_refuses_pulse_too_short(void **state) {
    expect_compile(*state, "bench.yaml",
        "shot:\n"
        "  - pulse: {coil: tip, duration: 5 us}\n",
        "4:5: error: point 1: a pulse of 5 us is shorter than its edges at coil tip's max_slew (20 us); lower the amplitude\n");
}

static void test_refuses_ramp_too_short(void **state) {
    expect_compile(*state, "bench.yaml",
        "shot:\n"
        "  - field: {sample: 12 uT, sensor: 0 T, ramp: 1 ms}\n",
        "4:5: error: point 1: ramp 1 ms is shorter than coil main's max_slew allows (20 ms); lengthen the ramp or make the field step smaller\n");
}

static void test_refuses_resonant_slew(void **state) {
    expect_compile(*state, "bench.yaml",
        "shot:\n"
        "  - pulse: {coil: tip, duration: 1 ms, amplitude: 80 uT, shape: resonant, frequency: 10 kHz}\n",
        "4:5: error: point 1: max_slew of coil tip exceeded by the resonant pulse: 62.83 kA/s > 50 kA/s\n");
}

static void test_refuses_singular(void **state) {
    expect_compile(*state, "tight-bench.yaml",
        "shot:\n"
        "  - field: {probe: 10 uT, mirror: 5 uT}\n",
        "4:5: error: point 1: the coils main, bias, twin cannot set the fields at probe, mirror independently (their matrix is singular or ill-conditioned); check the rig's places\n");
}

static void test_refuses_tip_unreachable(void **state) {
    expect_compile(*state, "tight-bench.yaml",
        "shot:\n"
        "  - field: {sample: 40 uT}\n"
        "  - pulse: {coil: tip, angle: 90 deg, amplitude: 1 uT}\n",
        "5:5: error: point 1: the pulse cannot tip 1H by 90 deg at an amplitude of 1 uT; it reaches at most 2.864 deg in this static field (raise the amplitude or lower the field)\n");
}

static void test_refuses_resonant_compliance(void **state) {
    expect_compile(*state, "tight-bench.yaml",
        "shot:\n"
        "  - field: {sample: 20 uT}\n"
        "  - pulse: {coil: resonator, duration: 2 ms, amplitude: 80 uT, shape: resonant, "
        "frequency: 5 kHz}\n",
        "5:5: error: point 1: compliance of coil resonator exceeded by the resonant pulse: "
        "62.9 V > 24 V; lower its amplitude or frequency\n");
}

static void test_refuses_pulse_on_a_coil_without_field_per_current(void **state) {
    expect_compile(*state, "bench.yaml",
        "shot:\n"
        "  - pulse: {coil: main, angle: 90 deg}\n",
        "4:5: error: point 1: coil main has no field_per_current (nor geometry), so its pulse "
        "field is unknown\n");
}

int main(void) {
    const struct CMUnitTest tests[] = {
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
        T(test_polarize_ramps_at_max_slew_holds_and_switches_off),
        T(test_polarize_by_field_uses_field_per_current),
        T(test_polarize_in_a_magnet_only_holds),
        T(test_field_ramps_every_coil_over_one_common_time_then_settles),
        T(test_field_with_a_longer_ramp_takes_it),
        T(test_one_place_for_two_coils_takes_the_minimum_norm),
        T(test_dc_pulse_length_is_its_duration_plus_one_edge),
        T(test_lines_switch_instantly_and_end_inactive),
        T(test_repeat_expands_its_steps_in_order),
        T(test_shots_start_and_end_at_rest),
        T(test_shots_follow_each_other_and_reference_shots_get_their_values),
        T(test_larmor_target_sets_the_field_for_that_frequency),
        T(test_larmor_target_counts_the_transverse_residual),
        T(test_tune_sets_the_detector_resonance_to_the_signal),
        T(test_tune_to_a_frequency_uses_the_gyromagnetic_ratio),
        T(test_tune_follows_the_sign_of_the_sample_field),
        T(test_refuses_compliance),
        T(test_refuses_edges_too_long),
        T(test_warns_expect_adiabatic_but_sudden),
        T(test_warns_expect_sudden_but_never_turns),
        T(test_refuses_larmor_below_residual),
        T(test_refuses_many_points_one_message),
        T(test_refuses_max_current),
        T(test_refuses_max_duration),
        T(test_warns_misfit_warning),
        T(test_refuses_no_field_per_current),
        T(test_refuses_nyquist),
        T(test_refuses_off_ramp_too_short),
        T(test_refuses_output_voltage),
        T(test_refuses_power),
        T(test_refuses_power_per_shot),
        T(test_refuses_pulse_too_short),
        T(test_refuses_ramp_too_short),
        T(test_refuses_resonant_slew),
        T(test_refuses_singular),
        T(test_refuses_tip_unreachable),
        T(test_refuses_resonant_compliance),
        T(test_refuses_pulse_on_a_coil_without_field_per_current),
        cmocka_unit_test(test_no_compiled_plan_exceeds_a_limit),
    };
    return cmocka_run_group_tests_name("compiled timelines", tests, NULL, NULL);
}
