# ranges.py: reference check of scan ranges as `precess check --json` reports
# them. Linear and log ranges (positive, negative, decreasing, 1000 steps, in
# uT, nT, pT, ms, s, min, Hz, kHz, mA) are compared with numpy.linspace and
# geomspace on the same SI ends; the ends' units with the SI prefixes; and the
# points and shot order of grid plans with the plan language (section 3).
# Not for shuffled orders (test_scan.c checks those against GSL itself).
# Run from the repository root: /usr/bin/python3 tests/ref/ranges.py
# (PRECESS names the binary, default build/precess). Exit 0 when all agree.
import json
import os
import shutil
import subprocess
import sys
import tempfile

import numpy

PRECESS = os.path.abspath(os.environ.get("PRECESS", "build/precess"))
BENCH = os.path.abspath("tests/plans/bench.yaml")

# Relative tolerance of the spacing comparison (relative to the range's
# larger end). Measured on Debian 12 (numpy 1.24): linear ranges give
# numpy's very doubles; log ranges differ in the last bit at most (largest
# 1.8e-16, the 1000-step range in Hz), where C's pow and numpy's power round
# differently. 1e-12 leaves room for other libm versions, nothing more.
REL = 1e-12

# SI prefixes. source: BIPM SI Brochure 9th ed., Table 7 (value from memory)
PREFIX = {"p": 1e-12, "n": 1e-9, "u": 1e-6, "m": 1e-3, "": 1.0, "k": 1e3, "M": 1e6}

failures = []


def fail(message):
    failures.append(message)
    print("FAIL: " + message)


def check_plan(folder, name, body):
    """Writes a plan on the test bench into folder and returns its JSON."""
    path = os.path.join(folder, name + ".yaml")
    with open(path, "w") as f:
        f.write("version: 1\ntitle: %s\nrig: bench.yaml\n%sshot:\n  - wait: {for: 1 s}\n"
                % (name, body))
    run = subprocess.run([PRECESS, "check", "--json", path], capture_output=True, text=True)
    try:
        doc = json.loads(run.stdout)
    except ValueError:
        fail("%s: check --json printed no JSON (exit %d): %s" % (name, run.returncode,
                                                                 run.stderr.strip()))
        return None
    if run.returncode != 0 or not doc.get("valid") or doc.get("errors"):
        fail("%s: refused (exit %d): %s" % (name, run.returncode, run.stderr.strip()))
        return None
    return doc


# (name, from, to, steps, spacing, unit prefix, unit)
RANGES = [
    ("linear_uT", "5", "60", 6, "linear", "u", "T"),
    ("log_uT", "5", "60", 6, "log", "u", "T"),
    ("log_negative_nT", "-100", "-1", 9, "log", "n", "T"),
    ("log_negative_decreasing_nT", "-2.5", "-700", 13, "log", "n", "T"),
    ("linear_decreasing_ms", "3", "-0.3", 12, "linear", "m", "s"),
    ("log_decreasing_s", "2.5", "0.01", 7, "log", "", "s"),
    ("linear_1000_uT", "2.5", "7", 1000, "linear", "u", "T"),
    ("log_1000_Hz", "1", "10000", 1000, "log", "", "Hz"),
    ("log_1000_kHz", "0.05", "12.5", 1000, "log", "k", "Hz"),
    ("linear_kHz", "1.2", "-3.4", 24, "linear", "k", "Hz"),
    ("log_ms", "10", "640", 5, "log", "m", "s"),
    ("linear_two_steps_mA", "-600", "600", 2, "linear", "m", "A"),
    ("linear_pT_exponent", "1.5e3", "2.5e-1", 17, "linear", "p", "T"),
]


def check_range(folder, name, lo, hi, steps, spacing, prefix, unit):
    body = ("vary:\n  x: {from: %s %s%s, to: %s %s%s, steps: %d, spacing: %s}\n"
            % (lo, prefix, unit, hi, prefix, unit, steps, spacing))
    doc = check_plan(folder, name, body)
    if doc is None:
        return 0.0
    got = numpy.array([p["parameters"]["x"] for p in doc["point_list"]])
    if doc["points"] != steps or len(got) != steps:
        fail("%s: %d points, want %d" % (name, doc["points"], steps))
        return 0.0
    if [p["point"] for p in doc["point_list"]] != list(range(1, steps + 1)):
        fail("%s: points not numbered 1..%d" % (name, steps))

    # The ends in SI: the written number times the prefix.
    # source: BIPM SI Brochure 9th ed., Table 7 (value from memory)
    for which, written, value in (("from", lo, got[0]), ("to", hi, got[-1])):
        want = float(written) * PREFIX[prefix]
        if abs(value - want) > 1e-15 * abs(want):
            fail("%s: %s %s %s%s is %.17g in SI, want %.17g"
                 % (name, which, written, prefix, unit, value, want))

    # source: numpy (reference library), linspace/geomspace
    if spacing == "linear":
        want = numpy.linspace(got[0], got[-1], steps)
    else:
        want = numpy.geomspace(got[0], got[-1], steps)
    # Relative to the larger end, so a linear range through zero is fair.
    scale = max(abs(got[0]), abs(got[-1]))
    diff = numpy.abs(got - want) / scale
    worst = int(numpy.argmax(diff))
    if diff[worst] > REL:
        fail("%s: point %d is %.17g, numpy %s gives %.17g (relative %.3g)"
             % (name, worst + 1, got[worst], "linspace" if spacing == "linear" else
                "geomspace", want[worst], diff[worst]))
    # The ends are the written ends exactly (as numpy makes them), not
    # from + (steps - 1) * step: the same quantities read as a list.
    ends = check_plan(folder, name + "_ends", "vary:\n  x: [%s %s%s, %s %s%s]\n"
                      % (lo, prefix, unit, hi, prefix, unit))
    if ends is not None:
        written = [p["parameters"]["x"] for p in ends["point_list"]]
        if [got[0], got[-1]] != written:
            fail("%s: ends %.17g, %.17g; written %.17g, %.17g"
                 % (name, got[0], got[-1], written[0], written[1]))
    # Linear ranges are monotonic, log ranges keep one sign.
    if spacing == "log" and not (numpy.all(got > 0) or numpy.all(got < 0)):
        fail("%s: a log range changed sign" % name)
    step = numpy.diff(got)
    if not (numpy.all(step > 0) or numpy.all(step < 0)):
        fail("%s: not monotonic" % name)
    return float(diff[worst])


def check_minutes(folder):
    """A time range written in min: 60 s to the minute."""
    # source: BIPM SI Brochure 9th ed., Table 8 (value from memory)
    doc = check_plan(folder, "linear_min", "vary:\n  x: {from: 1 min, to: 3 min, steps: 3}\n")
    if doc is None:
        return
    got = [p["parameters"]["x"] for p in doc["point_list"]]
    # source: numpy (reference library), linspace/geomspace
    want = numpy.linspace(60.0, 180.0, 3)
    if not numpy.allclose(got, want, rtol=REL, atol=0):
        fail("linear_min: %s, want %s" % (got, list(want)))


def expected_shots(npoints, averages, warmup, every, order):
    """shot_order as plan-language.md section 3 says, for as-written or
    reversed order: warmup shots report point 1 with averages 1..W; the
    averages of a point run back to back; a reference shot (average 1)
    follows every `every`-th executed point and reports it."""
    run = list(range(1, npoints + 1))
    if order == "reversed":
        run.reverse()
    shots = [["warmup", 1, w + 1] for w in range(warmup)]
    for i, point in enumerate(run, start=1):
        shots += [["scan", point, a + 1] for a in range(averages)]
        if every and i % every == 0:
            shots.append(["reference", point, 1])
    return [[k + 1] + s for k, s in enumerate(shots)]


def check_grid(folder, order):
    a = ["1 ms", "2 ms", "3 ms"]
    a_si = [1e-3, 2e-3, 3e-3]
    body = ("vary:\n  t_a: [%s]\n  b_b: {from: 1 uT, to: 4 uT, steps: 4}\n"
            "  c_c: [7 mA, 8 mA]\n"
            "order: %s\naverages: 2\nwarmup: 3\nreference: {every: 5, with: {t_a: 9 ms}}\n"
            % (", ".join(a), order))
    name = "grid_" + order.replace("-", "_")
    doc = check_plan(folder, name, body)
    if doc is None:
        return
    npoints = 3 * 4 * 2
    if doc["points"] != npoints:
        fail("%s: %d points, want %d" % (name, doc["points"], npoints))
        return
    # source: numpy (reference library), linspace/geomspace
    b_si = numpy.linspace(1e-6, 4e-6, 4)
    # Grid: the first key of vary varies slowest, the last fastest.
    for k, p in enumerate(doc["point_list"]):
        i, j, l = k // 8, (k // 2) % 4, k % 2
        want = {"t_a": a_si[i], "b_b": b_si[j], "c_c": [7e-3, 8e-3][l]}
        if p["point"] != k + 1 or list(p["parameters"]) != ["t_a", "b_b", "c_c"] or any(
                abs(p["parameters"][key] - want[key]) > REL * abs(want[key]) for key in want):
            fail("%s: point %d is %s, want %s" % (name, k + 1, p, want))
            break
    want = expected_shots(npoints, 2, 3, 5, order)
    got = doc["shot_order"]
    if doc["shots"] != len(want) or got != want:
        first = next((k for k in range(min(len(got), len(want))) if got[k] != want[k]),
                     min(len(got), len(want)))
        fail("%s: %d shots, want %d (3 + 24 x 2 + 4); first difference at shot %d: %s, want %s"
             % (name, doc["shots"], len(want), first + 1,
                got[first] if first < len(got) else None,
                want[first] if first < len(want) else None))


def check_shuffled_is_a_permutation(folder):
    body = "vary:\n  x: {from: 1, to: 30, steps: 30}\norder: shuffled\nseed: 11\n"
    first = check_plan(folder, "shuffled_a", body)
    again = check_plan(folder, "shuffled_b", body)
    if first is None or again is None:
        return
    points = [s[2] for s in first["shot_order"]]
    if sorted(points) != list(range(1, 31)):
        fail("shuffled: shot_order is not a permutation of 1..30: %s" % points)
    if points == list(range(1, 31)):
        fail("shuffled: seed 11 left 30 points in written order")
    if first["shot_order"] != again["shot_order"]:
        fail("shuffled: the same seed gave two orders")
    if [s[0] for s in first["shot_order"]] != list(range(1, 31)):
        fail("shuffled: shots not numbered 1..30 in execution order")


def main():
    if not os.access(PRECESS, os.X_OK):
        print("FAIL: no precess binary at %s (set PRECESS or run make)" % PRECESS)
        return 1
    folder = tempfile.mkdtemp(prefix="precess-ranges-")
    try:
        shutil.copy(BENCH, os.path.join(folder, "bench.yaml"))
        worst = 0.0
        for r in RANGES:
            worst = max(worst, check_range(folder, *r))
        check_minutes(folder)
        for order in ("as-written", "reversed"):
            check_grid(folder, order)
        check_shuffled_is_a_permutation(folder)
    finally:
        shutil.rmtree(folder)
    print("ranges: %d ranges against numpy, largest relative difference %.3g; "
          "grid and shot order checked" % (len(RANGES), worst))
    if failures:
        print("ranges: %d failure(s)" % len(failures))
        return 1
    print("ranges: ok")
    return 0


if __name__ == "__main__":
    sys.exit(main())
