# solver.py: reference check of the coil solver. Reads the random systems
# test_coils wrote ($B/tests/coil_cases.jsonl, B default build) and solves
# each again with numpy: solve (square), lstsq (tall), pinv (wide); the
# currents, the misfit and the condition number must agree. Not for building
# A and b from a rig (the compile tests). Run from the repository root after
# test_coils: /usr/bin/python3 tests/ref/solver.py. Exit 0 when all agree.
import json
import os
import sys

import numpy

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "common"))
from cases import cases_path, read_cases  # noqa: E402

CASES = cases_path("coil_cases.jsonl")
MIN_CASES = 20

# Tolerances. Currents relative to |x| (numpy's), misfits relative to |b|
# (an exact or minimum-norm misfit is rounding noise, ~1e-22 T, so relative
# to itself means nothing). Measured on Debian 12 (GSL 2.7, numpy 1.24): the
# largest differences are printed in the summary line; 1e-9 leaves room for
# other BLAS and LAPACK builds while still catching a wrong answer. The
# condition number goes through the smallest singular value, whose relative
# error grows with the condition itself, so it gets 1e-9 times the condition.
REL_X = 1e-9
REL_MISFIT = 1e-9
REL_CONDITION = 1e-9

METHOD = {"square": "exact", "tall": "least_squares", "wide": "min_norm"}

failures = []


def fail(message):
    failures.append(message)
    print("FAIL: " + message)


def reference(a, b, shape):
    """numpy's currents for one system."""
    if shape == "square":
        # source: numpy (reference library), numpy.linalg.solve
        return numpy.linalg.solve(a, b)
    if shape == "tall":
        # source: numpy (reference library), numpy.linalg.lstsq
        return numpy.linalg.lstsq(a, b, rcond=None)[0]
    # source: numpy (reference library), numpy.linalg.pinv
    return numpy.linalg.pinv(a) @ b


def check_case(number, case, worst):
    nrows, ncols = case["nrows"], case["ncols"]
    a = numpy.array(case["a"], dtype=float).reshape(nrows, ncols)
    b = numpy.array(case["b"], dtype=float)
    x = numpy.array(case["x"], dtype=float)
    where = "case %d (%d x %d)" % (number, nrows, ncols)
    if b.shape != (nrows,) or x.shape != (ncols,):
        fail("%s: b or x has the wrong length" % where)
        return
    shape = "square" if nrows == ncols else "tall" if nrows > ncols else "wide"
    if case["method"] != METHOD[shape]:
        fail("%s: method %s, want %s" % (where, case["method"], METHOD[shape]))
    want = reference(a, b, shape)
    # source: numpy (reference library), numpy.linalg.solve|lstsq|pinv
    dx = numpy.linalg.norm(x - want) / numpy.linalg.norm(want)
    if not dx <= REL_X:
        fail("%s: x %r, numpy %r (relative difference %.3g)"
             % (where, x.tolist(), want.tolist(), dx))
    # source: numpy (reference library), numpy.linalg.solve|lstsq|pinv
    misfit = numpy.linalg.norm(a @ want - b)
    dm = abs(case["misfit"] - misfit) / numpy.linalg.norm(b)
    if not dm <= REL_MISFIT:
        fail("%s: misfit %.17g, numpy %.17g" % (where, case["misfit"], misfit))
    # source: numpy (reference library), numpy.linalg.cond (2-norm, from the SVD)
    condition = numpy.linalg.cond(a)
    dc = abs(case["condition"] - condition) / condition
    if not dc <= REL_CONDITION * condition:
        fail("%s: condition %.17g, numpy %.17g" % (where, case["condition"], condition))
    worst[shape] = max(worst[shape], dx)
    worst["misfit"] = max(worst["misfit"], dm)
    worst["condition"] = max(worst["condition"], dc)


def main():
    cases = read_cases(CASES, "test_coils", MIN_CASES)
    if cases is None:
        return 1
    worst = {"square": 0.0, "tall": 0.0, "wide": 0.0, "misfit": 0.0, "condition": 0.0}
    counts = {"square": 0, "tall": 0, "wide": 0}
    for number, case in enumerate(cases, 1):
        try:
            check_case(number, case, worst)
        except (KeyError, TypeError, ValueError, numpy.linalg.LinAlgError) as e:
            fail("case %d: cannot check: %r" % (number, e))
            continue
        n, m = case["nrows"], case["ncols"]
        counts["square" if n == m else "tall" if n > m else "wide"] += 1
    if failures:
        print("solver: %d failure(s) in %d cases" % (len(failures), len(cases)))
        return 1
    print("solver: %d cases (%d square, %d tall, %d wide) agree with numpy; largest "
          "relative difference of x %.3g / %.3g / %.3g, misfit %.3g, condition %.3g"
          % (len(cases), counts["square"], counts["tall"], counts["wide"], worst["square"],
             worst["tall"], worst["wide"], worst["misfit"], worst["condition"]))
    return 0


if __name__ == "__main__":
    sys.exit(main())
