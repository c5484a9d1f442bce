# mains_ref.py: reference check of the line-noise removal. Reads the cases
# test_mains wrote ($B/tests/mains_cases.jsonl, B default build) and for each
# one redoes the linear least squares at our refined fundamental with numpy
# on the explicit design matrix (amplitudes and cleaned trace must agree), and
# checks with scipy that our fundamental is where the explained power is
# largest, near it and over the whole search range. Not for the refusals or
# the noise levels (test_mains). Run from the repository root after
# test_mains: /usr/bin/python3 tests/ref/mains_ref.py. Exit 0 when all agree.
import json
import math
import os
import sys

import numpy
import scipy.optimize

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "common"))
from cases import cases_path, read_cases  # noqa: E402

CASES = cases_path("mains_cases.jsonl")
MIN_CASES = 4

# Tolerances. Amplitudes relative to the largest (a harmonic that is only
# noise has an amplitude near zero, so relative to itself means nothing), the
# cleaned trace relative to the comb removed. Measured on Debian 12 (GSL 2.7,
# numpy 1.24): the largest differences are printed in the summary line, near
# 1e-12; 1e-6 is what the task asks and leaves room for other builds while
# still catching a wrong fit. The fundamental: within 1e-4 / (H T) of scipy's
# maximum (our search stops at a phase of 1e-5 rad at the top harmonic,
# 3e-6 / (H T)), and explaining no less than scipy's maximum, to 1e-9.
REL_AMPLITUDE = 1e-6
REL_CLEANED = 1e-6
LOBE_FRACTION = 1e-4
REL_POWER = 1e-9
GRID_PER_LOBE = 4   # the global search: steps of 1 / (4 H T), then scipy from the best

failures = []


def fail(message):
    failures.append(message)
    print("FAIL: " + message)


def design(f, n, rate, nh):
    """cos and sin of each harmonic at t = i / rate (our code puts the time
    origin at the middle of the trace: the fit must not depend on it)."""
    t = numpy.arange(n) / rate
    phase = 2 * math.pi * f * numpy.outer(t, numpy.arange(1, nh + 1))
    return numpy.hstack([numpy.cos(phase), numpy.sin(phase)])


def fit(y, f, rate, nh):
    """The least-squares comb at f: (cosine and sine coefficients, model)."""
    x = design(f, len(y), rate, nh)
    # source: numpy (reference library), numpy.linalg.lstsq
    beta = numpy.linalg.lstsq(x, y, rcond=None)[0]
    return beta, x @ beta


def explained(y, f, rate, nh):
    """E(f): the power of the least-squares comb, |X beta|^2."""
    model = fit(y, f, rate, nh)[1]
    return float(model @ model)


def expected_harmonics(case):
    highest, rate = case["nominal"] + case["search"], case["rate"]
    nh = 0
    while nh < 32 and (nh + 1) * highest < 0.45 * rate:
        nh += 1
    return max(nh, 1)


def check_fit(where, case, y, worst):
    """Amplitudes, cleaned trace and rms removed at our fundamental."""
    f, rate, nh = case["fundamental"], case["rate"], case["nharmonics"]
    beta, model = fit(y, f, rate, nh)
    want = numpy.hypot(beta[:nh], beta[nh:])
    got = numpy.asarray(case["amplitude"], dtype=float)
    if got.shape != want.shape:
        fail("%s: %d amplitudes, want %d" % (where, len(got), len(want)))
        return
    da = float(numpy.max(numpy.abs(got - want)) / numpy.max(want))
    if not da <= REL_AMPLITUDE:
        fail("%s: amplitudes differ from numpy's by %.3g of the largest" % (where, da))
    cleaned = numpy.asarray(case["cleaned"], dtype=float)
    dc = float(numpy.linalg.norm(cleaned - (y - model)) / numpy.linalg.norm(model))
    if not dc <= REL_CLEANED:
        fail("%s: cleaned trace differs from numpy's by %.3g of the comb" % (where, dc))
    rms = math.sqrt(float(model @ model) / len(y))
    dr = abs(case["rms_removed"] - rms) / rms
    if not dr <= REL_CLEANED:
        fail("%s: rms removed %.9g, numpy %.9g" % (where, case["rms_removed"], rms))
    worst["amplitude"] = max(worst["amplitude"], da)
    worst["cleaned"] = max(worst["cleaned"], dc)


def best_near(y, rate, nh, centre, half, lo, hi):
    """scipy's maximum of E within centre +- half and within [lo, hi]."""
    a, b = max(lo, centre - half), min(hi, centre + half)
    # source: scipy (reference library), scipy.optimize.minimize_scalar (bounded)
    r = scipy.optimize.minimize_scalar(lambda f: -explained(y, f, rate, nh), bounds=(a, b),
                                       method="bounded", options={"xatol": half * 1e-6})
    # The bounded method never tries the ends themselves.
    ends = [(explained(y, x, rate, nh), x) for x in (a, b)]
    best = max(ends + [(-float(r.fun), float(r.x))])
    return best[1], best[0]


def check_fundamental(where, case, y, worst):
    f, rate, nh = case["fundamental"], case["rate"], case["nharmonics"]
    lobe = 1.0 / (nh * len(y) / rate)      # 1 / (H T): the top harmonic's lobe
    ours = explained(y, f, rate, nh)
    lo, hi = case["nominal"] - case["search"], case["nominal"] + case["search"]
    # Near ours: the maximum within half a lobe.
    f_near, e_near = best_near(y, rate, nh, f, 0.5 * lobe, lo, hi)
    if not abs(f_near - f) <= LOBE_FRACTION * lobe:
        fail("%s: fundamental %.9f Hz, scipy's maximum nearby %.9f Hz" % (where, f, f_near))
    # Over the search range: a grid, then scipy around its best point.
    grid = numpy.linspace(lo, hi, int(math.ceil((hi - lo) * GRID_PER_LOBE / lobe)) + 1)
    values = [explained(y, g, rate, nh) for g in grid]
    step = float(grid[1] - grid[0])
    # The two highest maxima of the grid, each refined by scipy: without a
    # comb, peaks of nearly equal height may swap places on the grid.
    peaks = [k for k in range(len(values))
             if (k == 0 or values[k] >= values[k - 1])
             and (k == len(values) - 1 or values[k] >= values[k + 1])]
    peaks = sorted(peaks, key=lambda k: -values[k])[:2]
    f_all, e_all = max((best_near(y, rate, nh, float(grid[k]), step, lo, hi) for k in peaks),
                       key=lambda p: p[1])
    e_best = max(e_near, e_all, max(values))
    if not ours >= e_best * (1 - REL_POWER):
        fail("%s: E(%.9f Hz) = %.12g, but E(%.9f Hz) = %.12g" % (where, f, ours, f_all, e_all))
    worst["fundamental"] = max(worst["fundamental"], abs(f_near - f) / lobe)


def main():
    cases = read_cases(CASES, "test_mains", MIN_CASES)
    if cases is None:
        return 1
    worst = {"amplitude": 0.0, "cleaned": 0.0, "fundamental": 0.0}
    for number, case in enumerate(cases, 1):
        where = "case %d (%s)" % (number, case.get("name", "?"))
        try:
            y = numpy.asarray(case["trace"], dtype=float)
            if len(case["cleaned"]) != len(y):
                fail("%s: %d samples cleaned of %d" % (where, len(case["cleaned"]), len(y)))
                continue
            if case["nharmonics"] != expected_harmonics(case):
                fail("%s: %d harmonics, want %d" % (where, case["nharmonics"],
                                                    expected_harmonics(case)))
                continue
            check_fit(where, case, y, worst)
            check_fundamental(where, case, y, worst)
        except (KeyError, TypeError, ValueError, numpy.linalg.LinAlgError) as e:
            fail("%s: cannot check: %r" % (where, e))
    if failures:
        print("mains_ref: %d failure(s) in %d cases" % (len(failures), len(cases)))
        return 1
    print("mains_ref: %d cases agree with numpy and scipy; largest difference of amplitudes "
          "%.3g, cleaned trace %.3g, fundamental %.3g of 1/(H T)"
          % (len(cases), worst["amplitude"], worst["cleaned"], worst["fundamental"]))
    return 0


if __name__ == "__main__":
    sys.exit(main())
