/* test_plan: every refusal of the plan reader, as the user sees it: the
 * exact line, column and text of each diagnostic (plan-language.md, "What
 * check refuses"), and bad input that must never crash the reader.
 * Plans are read from memory as tests/plans/case.yaml, so `rig: bench.yaml`
 * is tests/plans/bench.yaml. Not for scan order (test_scan.c). */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>
#include <cmocka.h>

#include "plan.h"

#define CASE_FILE "tests/plans/case.yaml"

/* "LINE:COL: severity: message\n" for every diagnostic of d, sorted. */
static char *render(diag_list *d) {
    static const char *const sev[] = {"error", "warning", "note"};
    diag_sort(d);
    size_t cap = 1, used = 0;
    for (size_t i = 0; i < d->n; i++) cap += strlen(d->items[i].message) + 64;
    char *out = malloc(cap);
    assert_non_null(out);
    out[0] = '\0';
    for (size_t i = 0; i < d->n; i++)
        used += (size_t)snprintf(out + used, cap - used, "%d:%d: %s: %s\n", d->items[i].line,
                                 d->items[i].col, sev[d->items[i].severity],
                                 d->items[i].message);
    return out;
}

/* Reads yaml as a plan and compares all its diagnostics with expected. */
static void expect_diags(const char *yaml, const char *expected) {
    diag_list d;
    diag_init(&d);
    plan *p = plan_read_bytes(CASE_FILE, yaml, strlen(yaml), &d);
    char *got = render(&d);
    assert_string_equal(got, expected);
    if (d.errors) assert_null(p);
    else assert_non_null(p);
    for (size_t i = 0; i < d.n; i++) assert_string_equal(d.items[i].file, CASE_FILE);
    free(got);
    plan_free(p);
    diag_free(&d);
}

static void test_refuses_angular_frequency(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - acquire: {for: 1 s, rate: 6000 rad/s}\n",
    "4:31: error: 'rate': expected a frequency (Hz), got an angular frequency (rad/s); write frequencies in Hz (cycles per second)\n");
}

static void test_refuses_a_line_noise_of_zero(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - acquire: {for: 1 s, rate: 1 kHz}\n"
    "analysis: {line_noise: 0 Hz}\n",
    "5:24: error: 'line_noise' must be greater than zero\n");
}

static void test_refuses_bad_choice(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "order: random\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "3:8: error: 'order' is as-written, reversed or shuffled, got 'random'\n");
}

static void test_refuses_bad_version(void **state) {
    (void)state;
    expect_diags(
    "version: 2\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "1:10: error: 'version' must be 1 (this precess reads version 1 files), got '2'\n");
}

static void test_refuses_count_not_whole(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "averages: 2.5\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "3:11: error: 'averages' is a count: a plain whole number such as 4, got '2.5'\n");
}

static void test_refuses_duplicate_key(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "averages: 2\n"
    "averages: 3\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "4:1: error: duplicate key 'averages' (first given at line 3, column 1)\n");
}

static void test_refuses_empty(void **state) {
    (void)state;
    expect_diags(
    "\n",
    "1:1: error: empty file: expected a plan (with shot:) or a rig (with coils:)\n");
}

static void test_refuses_inline_rig_bad(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: sim\n"
    "  coils:\n"
    "    main: {output: 0, amps_per_volt: 1 A/V, max_current: 1 A, max_slew: 1 A/s, resistance: 1 ohm, inductance: 1 mH}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "7:11: error: coil main needs 'compliance'\n");
}

static void test_refuses_input_line_set(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - line: {name: interlock, state: on}\n",
    "4:18: error: line interlock is an input; a step can set only output lines\n");
}

static void test_refuses_log_range_through_zero(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "vary:\n"
    "  b: {from: -1 uT, to: 2 uT, steps: 3, spacing: log}\n"
    "shot:\n"
    "  - field: {sample: b}\n",
    "4:49: error: log spacing needs both ends non-zero and of one sign (from -1 uT to 2 uT)\n");
}

static void test_refuses_many_errors(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "averages: lots\n"
    "shot:\n"
    "  - wait: {for: 1 T}\n"
    "  - pulse: {coil: nope, angle: 1 s}\n",
    "3:11: error: 'averages' is a count: a plain whole number such as 4, got 'lots'\n"
    "5:17: error: 'for': expected a time (s), got a magnetic field (T)\n"
    "6:19: error: 'nope' is not a coil of rig test-bench; its coils are prepol, main, bias, tip\n"
    "6:32: error: 'angle': expected an angle (rad), got a time (s)\n");
}

static void test_refuses_missing_key(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "1:1: error: the plan needs 'rig'\n");
}

static void test_refuses_missing_step_key(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - acquire: {rate: 10 kHz}\n",
    "4:14: error: acquire needs 'for'\n");
}

static void test_refuses_not_a_coil(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - pulse: {coil: tipp, angle: 90 deg}\n",
    "4:19: error: 'tipp' is not a coil of rig test-bench; did you mean 'tip'?\n");
}

static void test_refuses_not_a_line(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - line: {name: valve, state: on}\n",
    "4:18: error: 'valve' is not a line of rig test-bench; its lines are shuttle, interlock\n");
}

static void test_refuses_not_a_magnet(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - polarize: {magnet: halbach, for: 1 s}\n",
    "4:24: error: 'halbach' is not a magnet of rig test-bench; its magnets are premag\n");
}

static void test_refuses_not_a_mapping(void **state) {
    (void)state;
    expect_diags(
    "- just\n"
    "- a list\n",
    "1:1: error: expected a mapping of keys (version:, title:, ...) at the top of the file\n");
}

static void test_refuses_not_a_place(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - field: {smaple: 10 uT}\n",
    "4:13: error: 'smaple' is neither a place of rig test-bench nor a key of field (settle, ramp, expect, label); did you mean 'sample'?\n");
}

static void test_refuses_not_an_input(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - acquire: {for: 1 s, rate: 1 kHz, inputs: [squid]}\n",
    "4:47: error: 'squid' is not an input of rig test-bench; its inputs are sensor\n");
}

static void test_refuses_range_one_step(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "vary:\n"
    "  b: {from: 1 uT, to: 2 uT, steps: 1}\n"
    "shot:\n"
    "  - field: {sample: b}\n",
    "4:36: error: a range has both ends, so 'steps' is at least 2, got 1\n");
}

static void test_refuses_rig_unreadable(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: no-such-rig.yaml\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "2:6: error: rig tests/plans/no-such-rig.yaml: cannot read the file: No such file or directory\n");
}

static void test_refuses_shuffled_no_seed(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "order: shuffled\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "3:8: error: order: shuffled needs 'seed' (a whole number) so the order can be repeated\n");
}

static void test_refuses_together_unequal(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "combine: together\n"
    "vary:\n"
    "  b: [1 uT, 2 uT, 3 uT]\n"
    "  t: [1 ms, 2 ms]\n"
    "shot:\n"
    "  - field: {sample: b}\n"
    "  - wait: {for: t}\n",
    "6:3: error: combine: together walks the lists side by side, so they need one length: 't' has 2 values, 'b' has 3\n");
}

static void test_refuses_tune_not_sensor(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - field: {sample: tune}\n",
    "4:21: error: 'tune' sets the detector's own field, so it applies only to a sensor place (a place named like an input); sample is not one\n");
}

static void test_refuses_undefined_variable(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "vary:\n"
    "  t_relax: [1 ms, 2 ms]\n"
    "shot:\n"
    "  - wait: {for: t_relx}\n",
    "4:3: warning: scan variable 't_relax' is not used by any step or let\n"
    "6:17: error: 'for': undefined name 't_relx'; did you mean 't_relax'?\n");
}

static void test_refuses_unit_as_name(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "vary:\n"
    "  ms: [1 ms]\n"
    "shot:\n"
    "  - wait: {for: ms}\n",
    "4:3: error: 'ms' cannot be a variable name: it is a unit symbol\n"
    "6:17: error: 'for': 'ms' is a unit: write a number before it, as in '1 ms'\n");
}

static void test_refuses_unknown_key(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "titel: x\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "3:1: error: unknown key 'titel' in the plan; did you mean 'title'?\n");
}

static void test_refuses_unknown_nucleus(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "sample: {nuclei: [1H, 14Q]}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "3:23: error: 'nuclei': unknown nucleus '14Q'; known nuclei are 1H 2H 3He 7Li 13C 15N 19F 23Na 31P 129Xe\n");
}

static void test_refuses_unknown_step_key(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - polarize: {magnet: premag, fore: 1 s}\n",
    "4:15: error: polarize needs 'for'\n"
    "4:32: error: unknown key 'fore' in polarize; did you mean 'for'?\n");
}

static void test_refuses_unused_variable(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "let:\n"
    "  spare: 2 ms\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "4:3: warning: let 'spare' is not used by any step or let\n");
}

static void test_refuses_wrong_dimension(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - wait: {for: 3 mT}\n",
    "4:17: error: 'for': expected a time (s), got a magnetic field (T)\n");
}

static void test_refuses_yaml_syntax(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig: bench.yaml\n"
    "shot:\n"
    "  - wait: {for: 1 s\n"
    "  - wait: {for: 2 s}\n",
    "5:9: error: YAML syntax: did not find expected ',' or '}' while parsing a flow mapping (from line 4)\n");
}
static void test_refuses_rig_comedi_without_device(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: comedi\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "5:11: error: a comedi rig needs 'device', e.g. /dev/comedi0\n");
}

static void test_refuses_rig_duplicate_output(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: sim\n"
    "  coils:\n"
    "    main: {output: 0, amps_per_volt: 1 A/V, max_current: 1 A, max_slew: 1 A/s, resistance: 1 ohm, inductance: 1 mH, compliance: 5 V}\n"
    "    bias: {output: 0, amps_per_volt: 1 A/V, max_current: 1 A, max_slew: 1 A/s, resistance: 1 ohm, inductance: 1 mH, compliance: 5 V}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "8:5: error: coil bias uses output 0, already used by coil main\n");
}

static void test_refuses_rig_geometry_and_field(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: sim\n"
    "  coils:\n"
    "    main: {output: 0, amps_per_volt: 1 A/V, max_current: 1 A, max_slew: 1 A/s, resistance: 1 ohm, inductance: 1 mH, compliance: 5 V, field_per_current: 1 mT/A, turns: 10, radius: 1 cm, length: 5 cm}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "7:153: error: coil main: give field_per_current or its geometry (turns, radius, length or helmholtz), not both\n");
}

static void test_refuses_rig_geometry_incomplete(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: sim\n"
    "  coils:\n"
    "    main: {output: 0, amps_per_volt: 1 A/V, max_current: 1 A, max_slew: 1 A/s, resistance: 1 ohm, inductance: 1 mH, compliance: 5 V, turns: 10}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "7:11: error: coil main: a coil given by geometry needs 'turns', 'radius' and 'length' (or 'helmholtz: true')\n");
}

static void test_rig_geometry_gives_a_note(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: sim\n"
    "  coils:\n"
    "    main: {output: 0, amps_per_volt: 1 A/V, max_current: 1 A, max_slew: 1 A/s, resistance: 1 ohm, inductance: 1 mH, compliance: 5 V, turns: 100, radius: 2 cm, length: 10 cm}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "7:11: note: coil main: field per current at the centre from its geometry (finite solenoid, 100 turns): 1.167 mT/A\n");
}

static void test_refuses_rig_input_range_empty(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: sim\n"
    "  inputs:\n"
    "    sensor: {channel: 0, range: {from: 5 V, to: 1 V}, field_per_volt: 1 nT/V}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "7:33: error: input sensor: the range is empty\n");
}

static void test_refuses_rig_missing_driver(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "3:3: error: the rig needs 'driver'\n");
}

static void test_refuses_rig_place_unknown_coil(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: sim\n"
    "  coils:\n"
    "    main: {output: 0, amps_per_volt: 1 A/V, max_current: 1 A, max_slew: 1 A/s, resistance: 1 ohm, inductance: 1 mH, compliance: 5 V}\n"
    "  places:\n"
    "    sample: {mian: 100 uT/A}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "9:14: error: 'mian' is not a coil of rig inline; did you mean 'main'?\n");
}

static void test_refuses_rig_place_wrong_dimension(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: sim\n"
    "  coils:\n"
    "    main: {output: 0, amps_per_volt: 1 A/V, max_current: 1 A, max_slew: 1 A/s, resistance: 1 ohm, inductance: 1 mH, compliance: 5 V}\n"
    "  places:\n"
    "    sample: {main: 100 uT}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "9:20: error: 'main': expected a field per current (T/A), got a magnetic field (T)\n");
}

static void test_refuses_rig_require_on_output(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: sim\n"
    "  lines:\n"
    "    door: {channel: 1, require: high}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "7:33: error: line door: 'require' applies to input lines (direction: input)\n");
}

static void test_refuses_rig_residual_unknown_place(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: sim\n"
    "  places: {}\n"
    "  residual: {sample: 3 nT}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "7:14: error: 'sample' is not a place of rig inline; it has no places\n");
}

static void test_refuses_rig_residual_vector_length(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: sim\n"
    "  coils:\n"
    "    main: {output: 0, amps_per_volt: 1 A/V, max_current: 1 A, max_slew: 1 A/s, resistance: 1 ohm, inductance: 1 mH, compliance: 5 V}\n"
    "  places:\n"
    "    sample: {main: 100 uT/A}\n"
    "  residual: {sample: [1 nT, 2 nT]}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "10:22: error: a residual vector has three fields [x, y, z], got 2\n");
}

static void test_refuses_rig_sim_only_on_comedi(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: comedi\n"
    "  device: /dev/comedi0\n"
    "  environment: {mains: 50 Hz}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "7:16: error: 'environment' applies to simulated rigs (driver: sim) only\n");
}

static void test_refuses_rig_unknown_coil_key(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: sim\n"
    "  coils:\n"
    "    main: {output: 0, amps_per_volt: 1 A/V, max_current: 1 A, max_slew: 1 A/s, resistance: 1 ohm, inductance: 1 mH, compliance: 5 V, max_curent: 2 A}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "7:134: error: unknown key 'max_curent' in coil main; did you mean 'max_current'?\n");
}

static void test_refuses_rig_variable_in_rig(void **state) {
    (void)state;
    expect_diags(
    "version: 1\n"
    "rig:\n"
    "  version: 1\n"
    "  name: inline\n"
    "  driver: sim\n"
    "  coils:\n"
    "    main: {output: 0, amps_per_volt: 1 A/V, max_current: 1 A, max_slew: 1 A/s, resistance: 1 ohm, inductance: 1 mH, compliance: 5 V, max_power: x}\n"
    "shot:\n"
    "  - wait: {for: 1 s}\n",
    "7:145: error: 'max_power': a rig takes constants, not variables (undefined name 'x')\n");
}

static void test_refuses_seed_past_32_bits(void **state) {
    (void)state;
    expect_diags("version: 1\nrig: bench.yaml\norder: shuffled\nseed: 4294967296\n"
                 "shot:\n  - wait: {for: 1 s}\n",
                 "4:7: error: 'seed' is at most 4294967295 (32 bits), got 4294967296\n");
}

static void test_accepts_the_largest_seed(void **state) {
    (void)state;
    expect_diags("version: 1\nrig: bench.yaml\norder: shuffled\nseed: 4294967295\n"
                 "shot:\n  - wait: {for: 1 s}\n", "");
}

static void test_refuses_a_count_past_int(void **state) {
    (void)state;
    expect_diags("version: 1\nrig: bench.yaml\naverages: 99999999999\n"
                 "shot:\n  - wait: {for: 1 s}\n",
                 "3:11: error: 'averages' is at most 2147483647, got 99999999999\n");
}

#define GEOMETRY_RIG                                                             \
    "version: 1\nrig:\n  version: 1\n  name: inline\n  driver: sim\n  coils:\n" \
    "    c: {output: 0, amps_per_volt: 1 A/V, max_current: 1 A, max_slew: 1 A/s, "   \
    "resistance: 1 ohm, inductance: 1 mH, compliance: 5 V, "

static void test_refuses_rig_negative_coil_length(void **state) {
    (void)state;
    expect_diags(GEOMETRY_RIG "turns: 10, radius: 1 cm, length: -5 cm}\n"
                 "shot:\n  - wait: {for: 1 s}\n",
                 "7:164: error: coil c: 'length' cannot be negative\n");
}

static void test_refuses_rig_helmholtz_with_length(void **state) {
    (void)state;
    expect_diags(GEOMETRY_RIG "turns: 10, radius: 1 cm, helmholtz: true, length: 5 cm}\n"
                 "shot:\n  - wait: {for: 1 s}\n",
                 "7:181: error: coil c: a Helmholtz pair is given by turns and radius; 'length' "
                 "does not apply\n");
}

/* ---- bad input never crashes the reader ------------------------------ */

static void expect_bytes(const char *bytes, size_t len, const char *expected) {
    diag_list d;
    diag_init(&d);
    plan *p = plan_read_bytes(CASE_FILE, bytes, len, &d);
    assert_null(p);
    char *got = render(&d);
    assert_string_equal(got, expected);
    free(got);
    diag_free(&d);
}

static void test_refuses_binary_junk(void **state) {
    (void)state;
    static const char junk[] = "\x89PNG\r\n\x1a\n\x00\x00\x00\x0dIHDR";
    expect_bytes(junk, sizeof junk - 1,
                 "1:1: error: invalid leading UTF-8 octet (byte 0x89); the file must be UTF-8 "
                 "text\n");
}

static void test_refuses_non_utf8_text(void **state) {
    (void)state;
    static const char latin1[] = "version: 1\ntitle: caf\xe9 au lait\n";
    expect_bytes(latin1, sizeof latin1 - 1,
                 "2:11: error: invalid UTF-8 sequence starting with byte 0xe9; the file must be "
                 "UTF-8 text\n");
}

static void test_refuses_control_characters(void **state) {
    (void)state;
    static const char nul[] = "version: 1\n\x01junk\n";
    expect_bytes(nul, sizeof nul - 1,
                 "2:1: error: control characters are not allowed (byte 0x01); the file must be "
                 "UTF-8 text\n");
}

static void test_refuses_a_ten_megabyte_file(void **state) {
    (void)state;
    size_t len = 10u * 1024 * 1024;
    char *big = malloc(len);
    assert_non_null(big);
    memset(big, '#', len);
    expect_bytes(big, len, "0:0: error: file is 10485760 bytes; plans and rigs are limited "
                           "to 1048576 bytes\n");
    /* The same from disk stops reading past the limit. */
    char path[] = "/tmp/precess-big-XXXXXX";
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    FILE *f = fdopen(fd, "wb");
    assert_int_equal(fwrite(big, 1, len, f), len);
    fclose(f);
    diag_list d;
    diag_init(&d);
    assert_null(plan_read_file(path, &d));
    assert_int_equal(d.n, 1);
    assert_int_equal(d.items[0].line, 0);
    assert_string_equal(d.items[0].message, "file is larger than 1048576 bytes; plans and "
                                            "rigs are limited to 1 MiB");
    diag_free(&d);
    unlink(path);
    free(big);
}

static void test_refuses_deep_nesting(void **state) {
    (void)state;
    char text[512] = "version: 1\nshot: ";
    size_t n = strlen(text);
    for (int i = 0; i < 100; i++) text[n++] = '[';
    for (int i = 0; i < 100; i++) text[n++] = ']';
    text[n++] = '\n';
    expect_bytes(text, n, "2:70: error: nesting deeper than 64 levels\n");
}

static void test_refuses_alias_expansion_bomb(void **state) {
    (void)state;
    char text[4096];
    size_t n = (size_t)snprintf(text, sizeof text,
                                "version: 1\nshot: []\na0: &a0 [x, x, x, x, x, x, x, x, x, x]\n");
    for (int i = 1; i < 10; i++) {
        n += (size_t)snprintf(text + n, sizeof text - n, "a%d: &a%d [", i, i);
        for (int k = 0; k < 10; k++)
            n += (size_t)snprintf(text + n, sizeof text - n, "%s*a%d", k ? ", " : "", i - 1);
        n += (size_t)snprintf(text + n, sizeof text - n, "]\n");
    }
    expect_bytes(text, n,
                 "7:45: error: aliases expand past 100000 nodes; refusing to expand further\n");
}

static void test_refuses_alias_to_undefined_anchor(void **state) {
    (void)state;
    static const char text[] = "version: 1\nshot: *steps\n";
    expect_bytes(text, sizeof text - 1,
                 "2:7: error: alias '*steps' names no anchor defined before it\n");
}

static void test_aliases_within_limits_are_read(void **state) {
    (void)state;
    static const char text[] =
        "version: 1\nrig: bench.yaml\n"
        "shot:\n  - &w wait: {for: 1 s}\n  - wait: {for: 2 s}\n";
    diag_list d;
    diag_init(&d);
    plan *p = plan_read_bytes(CASE_FILE, text, sizeof text - 1, &d);
    assert_non_null(p);
    assert_int_equal(p->shot.n, 2);
    plan_free(p);
    diag_free(&d);
}

static void test_refuses_a_second_document(void **state) {
    (void)state;
    static const char text[] = "version: 1\n---\nversion: 1\n";
    expect_bytes(text, sizeof text - 1,
                 "3:1: error: a file holds one YAML document; remove the second\n");
}

static void test_refuses_unreadable_plan_file(void **state) {
    (void)state;
    diag_list d;
    diag_init(&d);
    assert_null(plan_read_file("tests/plans/there-is-no-such-plan.yaml", &d));
    assert_int_equal(d.n, 1);
    assert_string_equal(d.items[0].file, "tests/plans/there-is-no-such-plan.yaml");
    assert_string_equal(d.items[0].message, "cannot read the file: No such file or directory");
    diag_free(&d);
}

int main(void) {
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_refuses_angular_frequency),
        cmocka_unit_test(test_refuses_a_line_noise_of_zero),
        cmocka_unit_test(test_refuses_bad_choice),
        cmocka_unit_test(test_refuses_bad_version),
        cmocka_unit_test(test_refuses_count_not_whole),
        cmocka_unit_test(test_refuses_duplicate_key),
        cmocka_unit_test(test_refuses_empty),
        cmocka_unit_test(test_refuses_inline_rig_bad),
        cmocka_unit_test(test_refuses_input_line_set),
        cmocka_unit_test(test_refuses_log_range_through_zero),
        cmocka_unit_test(test_refuses_many_errors),
        cmocka_unit_test(test_refuses_missing_key),
        cmocka_unit_test(test_refuses_missing_step_key),
        cmocka_unit_test(test_refuses_not_a_coil),
        cmocka_unit_test(test_refuses_not_a_line),
        cmocka_unit_test(test_refuses_not_a_magnet),
        cmocka_unit_test(test_refuses_not_a_mapping),
        cmocka_unit_test(test_refuses_not_a_place),
        cmocka_unit_test(test_refuses_not_an_input),
        cmocka_unit_test(test_refuses_range_one_step),
        cmocka_unit_test(test_refuses_rig_unreadable),
        cmocka_unit_test(test_refuses_shuffled_no_seed),
        cmocka_unit_test(test_refuses_together_unequal),
        cmocka_unit_test(test_refuses_tune_not_sensor),
        cmocka_unit_test(test_refuses_undefined_variable),
        cmocka_unit_test(test_refuses_unit_as_name),
        cmocka_unit_test(test_refuses_unknown_key),
        cmocka_unit_test(test_refuses_unknown_nucleus),
        cmocka_unit_test(test_refuses_unknown_step_key),
        cmocka_unit_test(test_refuses_unused_variable),
        cmocka_unit_test(test_refuses_wrong_dimension),
        cmocka_unit_test(test_refuses_yaml_syntax),        cmocka_unit_test(test_refuses_rig_comedi_without_device),
        cmocka_unit_test(test_refuses_rig_duplicate_output),
        cmocka_unit_test(test_refuses_rig_geometry_and_field),
        cmocka_unit_test(test_refuses_rig_geometry_incomplete),
        cmocka_unit_test(test_rig_geometry_gives_a_note),
        cmocka_unit_test(test_refuses_rig_input_range_empty),
        cmocka_unit_test(test_refuses_rig_missing_driver),
        cmocka_unit_test(test_refuses_rig_place_unknown_coil),
        cmocka_unit_test(test_refuses_rig_place_wrong_dimension),
        cmocka_unit_test(test_refuses_rig_require_on_output),
        cmocka_unit_test(test_refuses_rig_residual_unknown_place),
        cmocka_unit_test(test_refuses_rig_residual_vector_length),
        cmocka_unit_test(test_refuses_rig_sim_only_on_comedi),
        cmocka_unit_test(test_refuses_rig_unknown_coil_key),
        cmocka_unit_test(test_refuses_rig_variable_in_rig),
        cmocka_unit_test(test_refuses_seed_past_32_bits),
        cmocka_unit_test(test_accepts_the_largest_seed),
        cmocka_unit_test(test_refuses_a_count_past_int),
        cmocka_unit_test(test_refuses_rig_negative_coil_length),
        cmocka_unit_test(test_refuses_rig_helmholtz_with_length),
        cmocka_unit_test(test_refuses_binary_junk),
        cmocka_unit_test(test_refuses_non_utf8_text),
        cmocka_unit_test(test_refuses_control_characters),
        cmocka_unit_test(test_refuses_a_ten_megabyte_file),
        cmocka_unit_test(test_refuses_deep_nesting),
        cmocka_unit_test(test_refuses_alias_expansion_bomb),
        cmocka_unit_test(test_refuses_alias_to_undefined_anchor),
        cmocka_unit_test(test_aliases_within_limits_are_read),
        cmocka_unit_test(test_refuses_a_second_document),
        cmocka_unit_test(test_refuses_unreadable_plan_file),
    };
    return cmocka_run_group_tests_name("plan and rig refusals", tests, NULL, NULL);
}
