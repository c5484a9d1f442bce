# series_ref.py: reference check of the fits across points (series.c). Reads
# the noisy curves test_series wrote ($B/tests/series_cases.jsonl, B default
# build) and fits each again with scipy.optimize.curve_fit, started near our
# result: the parameters, their errors and chi2_dof must agree. Not for
# choosing starting points (ours are tested in test_series). Run from the
# repository root after test_series: /usr/bin/python3 tests/ref/series_ref.py.
# Exit 0 when all agree.
import json
import os
import sys

import numpy
from scipy.optimize import curve_fit

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "common"))
from cases import cases_path, read_cases  # noqa: E402

CASES = cases_path("series_cases.jsonl")
MIN_CASES = 60
NPARAM = 3

# Tolerances. Parameters relative to scipy's value, errors and chi2_dof
# relative to scipy's. Both fits converge far below these (the largest
# differences are printed in the summary line); the parameters get 1e-6,
# the errors 1e-3 (they come from the Jacobian at two optima that differ
# by the parameters' own tolerance). A parameter consistent with zero (an
# offset, a residual field) is compared relative to its error instead of
# itself, where "relative" means nothing.
REL_PARAM = 1e-6
REL_ERROR = 1e-3
REL_CHI2 = 1e-6
TOL = dict(xtol=1e-14, ftol=1e-14, gtol=1e-14, maxfev=20000)

failures = []


def fail(message):
    failures.append(message)
    print("FAIL: " + message)


def relaxation(x, a, t1, c):
    return a * numpy.exp(-x / t1) + c


def relaxation_jac(x, a, t1, c):
    e = numpy.exp(-x / t1)
    return numpy.column_stack([e, a * e * x / t1**2, numpy.ones_like(x)])


def buildup(x, a, t1, c):
    return -a * numpy.expm1(-x / t1) + c


def buildup_jac(x, a, t1, c):
    e = numpy.exp(-x / t1)
    return numpy.column_stack([-numpy.expm1(-x / t1), -a * e * x / t1**2, numpy.ones_like(x)])


def calibration(gamma_hz):
    def f(x, k, b, q):
        return gamma_hz * numpy.sqrt((k * x + b) ** 2 + q)

    def jac(x, k, b, q):
        u = k * x + b
        m = numpy.sqrt(u**2 + q)
        return gamma_hz * numpy.column_stack([u * x / m, u / m, 0.5 / m])

    return f, jac


def reference_fit(model, jac, x, y, y_err, p0):
    """scipy's parameters and covariance under series.c's convention: with
    weights (every y_err > 0) the covariance from y_err, scaled by chi2_dof
    only when that is above 1; without, scaled by the residual variance."""
    weighted = bool(numpy.all(y_err > 0))
    # source: scipy (reference library), scipy.optimize.curve_fit (MINPACK lm)
    p, cov = curve_fit(model, x, y, p0=p0, sigma=y_err if weighted else None,
                       absolute_sigma=weighted, jac=jac, method="lm", **TOL)
    r = y - model(x, *p)
    dof = len(x) - NPARAM
    chi2_dof = float(numpy.sum((r / y_err) ** 2) if weighted else numpy.sum(r**2)) / dof
    if weighted and chi2_dof > 1:
        cov = cov * chi2_dof
    return p, numpy.sqrt(numpy.diag(cov)), chi2_dof, weighted


def compare(where, name, ours, ref, ref_err, rel, worst, key):
    scale = max(abs(ref), ref_err) if ref_err is not None else abs(ref)
    d = abs(ours - ref) / scale if scale > 0 else abs(ours - ref)
    if not d <= rel:
        fail("%s: %s %.17g, scipy %.17g (relative difference %.3g)" % (where, name, ours, ref, d))
    worst[key] = max(worst[key], d)


def check_decay(where, case, x, y, y_err, worst):
    fit = case["fit"]
    model, jac = ((relaxation, relaxation_jac) if case["model"] == "relaxation"
                  else (buildup, buildup_jac))
    p0 = [fit["amplitude"] * 1.01, fit["t1"] * 0.99, fit["offset"] + 0.01 * abs(fit["amplitude"])]
    p, err, chi2_dof, weighted = reference_fit(model, jac, x, y, y_err, p0)
    for j, name in enumerate(["amplitude", "t1", "offset"]):
        compare(where, name, fit[name], p[j], err[j], REL_PARAM, worst, "param")
        compare(where, name + "_err", fit[name + "_err"], err[j], None, REL_ERROR, worst, "error")
    compare(where, "chi2_dof", fit["chi2_dof"], chi2_dof, None, REL_CHI2, worst, "chi2")
    return weighted


def check_calibration(where, case, x, y, y_err, worst):
    """Fitted in q = b_perp^2, as series.c does; b_perp_err is the rise of
    b_perp for one sigma of q, so q's sigma is (b_perp + b_perp_err)^2 -
    b_perp^2, which is what is compared."""
    fit = case["fit"]
    model, jac = calibration(case["gamma_hz"])
    p0 = [fit["k"] * 1.01, fit["b_z"] + 0.01 * fit["b_z_err"], fit["b_perp"] ** 2 * 1.02]
    p, err, chi2_dof, weighted = reference_fit(model, jac, x, y, y_err, p0)
    if p[0] < 0:  # the mirror solution (-k, -b_z): series.c reports k >= 0
        p[0], p[1] = -p[0], -p[1]
    bp, bp_err = fit["b_perp"], fit["b_perp_err"]
    q_ours, sigma_q_ours = bp**2, (bp + bp_err) ** 2 - bp**2
    compare(where, "k", fit["k"], p[0], err[0], REL_PARAM, worst, "param")
    compare(where, "b_z", fit["b_z"], p[1], err[1], REL_PARAM, worst, "param")
    compare(where, "b_perp^2", q_ours, max(p[2], 0.0), err[2], REL_PARAM, worst, "param")
    compare(where, "k_err", fit["k_err"], err[0], None, REL_ERROR, worst, "error")
    compare(where, "b_z_err", fit["b_z_err"], err[1], None, REL_ERROR, worst, "error")
    compare(where, "sigma of b_perp^2", sigma_q_ours, err[2], None, REL_ERROR, worst, "error")
    compare(where, "chi2_dof", fit["chi2_dof"], chi2_dof, None, REL_CHI2, worst, "chi2")
    return weighted


def main():
    cases = read_cases(CASES, "test_series", MIN_CASES)
    if cases is None:
        return 1
    worst = {"param": 0.0, "error": 0.0, "chi2": 0.0}
    counts = {"relaxation": 0, "buildup": 0, "calibration": 0, "weighted": 0}
    for number, case in enumerate(cases, 1):
        where = "case %d (%s)" % (number, case.get("model"))
        try:
            x, y, y_err = (numpy.array(case[k], dtype=float) for k in ("x", "y", "y_err"))
            if not (len(x) == len(y) == len(y_err) > NPARAM):
                fail("%s: x, y, y_err of different or too few lengths" % where)
                continue
            check = check_calibration if case["model"] == "calibration" else check_decay
            weighted = check(where, case, x, y, y_err, worst)
        except (KeyError, TypeError, ValueError, RuntimeError) as e:
            fail("%s: cannot check: %r" % (where, e))
            continue
        counts[case["model"]] += 1
        counts["weighted"] += weighted
    if failures:
        print("series_ref: %d failure(s) in %d cases" % (len(failures), len(cases)))
        return 1
    print("series_ref: %d cases (%d relaxation, %d buildup, %d calibration; %d weighted) "
          "agree with scipy curve_fit; largest relative difference of parameters %.3g, "
          "errors %.3g, chi2_dof %.3g"
          % (len(cases), counts["relaxation"], counts["buildup"], counts["calibration"],
             counts["weighted"], worst["param"], worst["error"], worst["chi2"]))
    return 0


if __name__ == "__main__":
    sys.exit(main())
