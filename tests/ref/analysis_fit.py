# analysis_fit.py: reference check of the per-shot analysis. Reads the cases
# test_analysis wrote ($B/tests/analysis_cases.jsonl, B default build): each a
# trace, our spectrum of it and our damped-sinusoid fit from a given start.
# The spectrum must agree with numpy.fft.rfft of the same (apodized, zero
# filled) trace, and the fit with scipy.optimize.curve_fit started from the
# same point. Not for peak picking or SNR (the cmocka tests). Run from the
# repository root after test_analysis: /usr/bin/python3 tests/ref/analysis_fit.py.
# Exit 0 when all agree.
import json
import math
import os
import sys

import numpy
import scipy.optimize

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "common"))
from cases import cases_path, read_cases  # noqa: E402

CASES = cases_path("analysis_cases.jsonl")
MIN_CASES = 20

# Tolerances. Spectra: both are FFTs of the same doubles, so they differ by
# rounding only (~1e-15 of the largest bin; 1e-12 leaves room for other
# builds). Fits: where the problem is well conditioned the two least-squares
# minima agree to 1e-6 relative (the phase: 1e-6 rad). Both stop once a step
# changes the cost below rounding, a small fraction of a standard error, so
# where the value itself is near 0 (a linewidth of a record much shorter than
# T2*, a line at the noise) the parameters are compared in units of their
# error instead. The errors (sqrt of the covariance's diagonal, both scaled
# by the residual variance) agree to 1e-6, or 1e-4 where the minimum itself
# is that loosely determined.
REL_SPECTRUM = 1e-12
REL_FIT = 1e-6
ABS_PHASE = 1e-6
SIGMA_FIT = 1e-3
REL_ERR = 1e-6
REL_ERR_LOOSE = 1e-4

NAMES = ("frequency", "amplitude", "phase", "linewidth")

failures = []


def fail(message):
    failures.append(message)
    print("FAIL: " + message)


def fast_length(n):
    """The smallest 2^a 3^b 5^c 7^d >= n, as FFTW does fast."""
    m = max(n, 2)
    while True:
        r = m
        for p in (2, 3, 5, 7):
            while r % p == 0:
                r //= p
        if r == 1:
            return m
        m += 1


def check_spectrum(where, case, y, worst):
    n, rate = len(y), case["rate"]
    m = fast_length(case["zero_fill"] * n)
    if case["bins"] != m // 2 + 1:
        fail("%s: %d bins, want %d (FFT length %d)" % (where, case["bins"], m // 2 + 1, m))
        return
    if abs(case["df"] - rate / m) > 1e-12 * rate / m or abs(case["scale"] - 2.0 / n) > 1e-15 / n:
        fail("%s: df %r and scale %r, want %r and %r" % (where, case["df"], case["scale"],
                                                         rate / m, 2.0 / n))
    t = numpy.arange(n) / rate
    x = y * numpy.exp(-math.pi * case["apodization"] * t)
    # source: numpy (reference library), numpy.fft.rfft with zero padding to m
    want = numpy.fft.rfft(x, m)
    got = numpy.array(case["re"]) + 1j * numpy.array(case["im"])
    d = numpy.max(numpy.abs(got - want)) / numpy.max(numpy.abs(want))
    if not d <= REL_SPECTRUM:
        fail("%s: spectrum differs from numpy.fft.rfft by %.3g of its largest bin" % (where, d))
    worst["spectrum"] = max(worst["spectrum"], d)


def model(t, *p):
    v = numpy.zeros_like(t)
    for k in range(len(p) // 4):
        a, phi, f, w = p[4 * k:4 * k + 4]
        v = v + a * numpy.exp(-math.pi * w * t) * numpy.cos(2 * math.pi * f * t + phi)
    return v


def jacobian(t, *p):
    """d model / d (A, phi, f, W) of each line, written out from the model."""
    j = numpy.zeros((len(t), len(p)))
    for k in range(len(p) // 4):
        a, phi, f, w = p[4 * k:4 * k + 4]
        e = numpy.exp(-math.pi * w * t)
        c = e * numpy.cos(2 * math.pi * f * t + phi)
        s = e * numpy.sin(2 * math.pi * f * t + phi)
        j[:, 4 * k] = c
        j[:, 4 * k + 1] = -a * s
        j[:, 4 * k + 2] = -a * s * 2 * math.pi * t
        j[:, 4 * k + 3] = -a * math.pi * t * c
    return j


def scipy_fit(case, y):
    """scipy's fit from our start: (lines as [f, A, phi, W], their errors)."""
    n, rate = len(y), case["rate"]
    t = case["t_start"] + numpy.arange(n) / rate
    ys = math.sqrt(numpy.mean(y * y))      # the same problem, in units of order one
    p0 = []
    for f, a, phi, w in case["start"]:
        p0 += [a / ys, phi, f, w]
    # source: scipy (reference library), scipy.optimize.curve_fit (MINPACK's
    # Levenberg-Marquardt), covariance scaled by the residual variance. With
    # the Jacobian written out: from finite differences MINPACK stops about
    # 1e-5 of an error short of the minimum, too far for 1e-6.
    p, cov = scipy.optimize.curve_fit(model, t, y / ys, p0=p0, jac=jacobian, method="lm",
                                      ftol=1e-15, xtol=1e-15, gtol=1e-15, maxfev=100000)
    e = numpy.sqrt(numpy.diag(cov))
    lines, errs = [], []
    for k in range(len(p) // 4):
        a, phi, f, w = p[4 * k:4 * k + 4]
        ea, ephi, ef, ew = e[4 * k:4 * k + 4]
        if a < 0:
            a, phi = -a, phi + math.pi
        phi = math.remainder(phi, 2 * math.pi)
        if phi <= -math.pi:
            phi += 2 * math.pi
        lines.append([f, a * ys, phi, w])
        errs.append([ef, ea * ys, ephi, ew])
    return lines, errs


def check_fit(where, case, y, worst):
    want, want_err = scipy_fit(case, y)
    for k, (line, err, ref, ref_err) in enumerate(zip(case["fit"], case["err"], want, want_err)):
        for j, name in enumerate(NAMES):
            label = "%s line %d %s" % (where, k + 1, name)
            d = line[j] - ref[j]
            if j == 2:
                d = math.remainder(d, 2 * math.pi)
            if case["well_conditioned"]:
                tol = ABS_PHASE if j == 2 else REL_FIT * abs(ref[j])
                worst["fit"] = max(worst["fit"], abs(d) / (tol / REL_FIT if j == 2 else
                                                           abs(ref[j]) or 1))
            else:
                tol = SIGMA_FIT * ref_err[j]
                worst["sigma"] = max(worst["sigma"], abs(d) / ref_err[j])
            if not abs(d) <= tol:
                fail("%s: ours %.15g, scipy %.15g (difference %.3g, allowed %.3g)"
                     % (label, line[j], ref[j], d, tol))
            de = abs(err[j] - ref_err[j]) / ref_err[j]
            worst["err"] = max(worst["err"], de if case["well_conditioned"] else 0)
            if not de <= (REL_ERR if case["well_conditioned"] else REL_ERR_LOOSE):
                fail("%s error: ours %.10g, scipy %.10g" % (label, err[j], ref_err[j]))


def main():
    cases = read_cases(CASES, "test_analysis", MIN_CASES)
    if cases is None:
        return 1
    worst = {"spectrum": 0.0, "fit": 0.0, "sigma": 0.0, "err": 0.0}
    for number, case in enumerate(cases, 1):
        where = "case %d (%s)" % (number, case.get("name", "?"))
        try:
            y = numpy.array(case["y"], dtype=float)
            check_spectrum(where, case, y, worst)
            check_fit(where, case, y, worst)
        except (KeyError, TypeError, ValueError, RuntimeError) as e:
            fail("%s: cannot check: %r" % (where, e))
    if failures:
        print("analysis_fit: %d failure(s) in %d cases" % (len(failures), len(cases)))
        return 1
    print("analysis_fit: %d cases agree with numpy.fft.rfft and scipy curve_fit; largest "
          "differences: spectrum %.3g of the largest bin, fits %.3g relative, %.3g sigma "
          "where ill conditioned, errors %.3g relative (where well conditioned)"
          % (len(cases), worst["spectrum"], worst["fit"], worst["sigma"], worst["err"]))
    return 0


if __name__ == "__main__":
    sys.exit(main())
