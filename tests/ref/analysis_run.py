# `precess analyze`, `export` and `calibrate` on simulated runs, checked from
# outside: a relaxation series of known T1 fitted over several runs (each run
# its own noise), a known T2 seen as the linewidth 1/(pi T2), every shot's
# fit against scipy.optimize.curve_fit on the same record, the exported
# JCAMP-DX spectrum against numpy.fft.rfft of the same samples, and a
# calibration run giving back the simulated rig's true field per ampere.
import json
import math
import os
import shutil
import subprocess
import sys
import tempfile

import h5py
import numpy as np
from scipy.optimize import curve_fit

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import jcamp_read  # noqa: E402  (the independent JCAMP-DX reader beside this file)

P = os.environ.get("PRECESS", "build/precess")
ROOT = os.getcwd()
T1, T2 = 0.40, 0.30
RUNS = 6

RELAXATION = """version: 1
title: relaxation check
rig: %s/tests/plans/rigs/sim-quiet.yaml
sample: {nuclei: [1H], model: {t1: %g s, t2: %g s, signal_per_field: %g}}
vary:
  t_relax: [10 ms, 60 ms, 150 ms, 300 ms, 500 ms, 800 ms, 1 s]
shot:
  - polarize: {coil: prepol, field: 40 mT, for: 1.5 s}
  - field:    {sample: 20 uT, sensor: 0 T, settle: 2 ms}
  - wait:     {for: t_relax}
  - field:    {sample: 25 uT, sensor: tune, settle: 10 ms}
  - pulse:    {coil: tip, angle: 90 deg}
  - acquire:  {for: 1 s, rate: 5 kHz}
analysis: {fit: relaxation, against: t_relax}
"""


def fail(msg):
    print("analysis_run: FAIL: " + msg)
    sys.exit(1)


def run(args, **kw):
    r = subprocess.run([P] + args, capture_output=True, text=True, **kw)
    return r


def simulate(plan_text, tmp, name, seed=1):
    """A run whose simulated noise is fixed by its id (PRECESS_RUN_ID), so
    the check gives the same result every time."""
    plan = os.path.join(tmp, name + ".yaml")
    with open(plan, "w") as f:
        f.write(plan_text)
    out = os.path.join(tmp, name)
    env = dict(os.environ, PRECESS_RUN_ID="%08x%024x" % (0x5eed0000 + seed, 0))
    r = run(["run", plan, "--fast", "--out", out], env=env)
    if r.returncode != 0:
        fail("run %s: exit %d: %s" % (name, r.returncode, r.stderr[-400:]))
    return out


def analyze(folder):
    r = run(["analyze", folder, "--json"])
    if r.returncode != 0:
        fail("analyze %s: exit %d: %s" % (folder, r.returncode, r.stderr[-400:]))
    return json.loads(r.stdout)


def relaxation_coverage(tmp):
    """T1 within 3 errors in every run, within 1 in about two-thirds.
    source: the coverage of a one-sigma Gaussian interval, 68.3 % (value
    from memory); common practice, no source, for the 3-sigma bound."""
    within1 = 0
    for k in range(RUNS):
        doc = analyze(simulate(RELAXATION % (ROOT, T1, T2, 1.5e-9), tmp, "relax%d" % k, k + 1))
        fits = [f for f in doc["fits"] if f["fit"] == "relaxation" and f["fitted"]]
        if len(fits) != 1:
            fail("run %d: fits %s" % (k, doc["fits"]))
        f = fits[0]
        dev = abs(f["t1"] - T1) / f["t1_err"]
        if dev > 3:
            fail("run %d: T1 %.4f +- %.4f s is %.1f errors from %.3f s" % (k, f["t1"], f["t1_err"],
                                                                       dev, T1))
        within1 += dev <= 1
        snr = min(p["snr"] for p in doc["points"])
        if snr < 30:
            fail("run %d: a point's SNR is %.1f, the check needs 30 or more" % (k, snr))
    if within1 < 2:
        fail("T1 within one error in only %d of %d runs" % (within1, RUNS))
    return within1


def weak_points(tmp):
    """A series whose last delays fall below the peak threshold: those
    points are fitted at the series' line, and the fit still covers T1.
    common practice, no source."""
    doc = analyze(simulate(RELAXATION % (ROOT, T1, T2, 6e-11), tmp, "weak"))
    weak = sum(1 for p in doc["points"] if p["snr"] < 5)
    f = [f for f in doc["fits"] if f["fit"] == "relaxation"][0]
    if weak == 0 or f["points"] != 7 or not f["fitted"]:
        fail("weak series: %d points below SNR 5, fit %s" % (weak, f))
    if abs(f["t1"] - T1) > 3 * f["t1_err"]:
        fail("weak series: T1 %.4f +- %.4f s" % (f["t1"], f["t1_err"]))
    return weak


def linewidths(doc):
    """A line decaying as exp(-t/T2) has a Lorentzian of FWHM 1/(pi T2).
    source: Abragam, The Principles of Nuclear Magnetism (value from memory)."""
    want = 1 / (math.pi * T2)
    for p in doc["points"]:
        if abs(p["linewidth"] - want) > 4 * p["linewidth_err"] + 1e-3 * want:
            fail("point %d: linewidth %.4f +- %.4f Hz, 1/(pi T2) = %.4f Hz" %
                 (p["point"], p["linewidth"], p["linewidth_err"], want))
    return want


def model(t, a, f, phi, w):
    return a * np.exp(-np.pi * w * t) * np.cos(2 * np.pi * f * t + phi)


def against_curve_fit(folder, doc):
    """Every shot's line against curve_fit on the same samples, started from
    ours. source: scipy.optimize.curve_fit (reference library)."""
    worst = 0.0
    for s in doc["per_shot"]:
        with h5py.File(os.path.join(folder, "records/%06d.h5" % s["shot"]), "r") as h:
            d = h["signal/sensor"]
            rate, t0, sign = d.attrs["sample_rate"], d.attrs["t0"], d.attrs["receiver_sign"]
            y = sign * d[:].astype(np.float64)
            end = h["pulse"].attrs["end"]
        y = y - y.mean()
        t = t0 - end + np.arange(len(y)) / rate
        start = [s["amplitude"], s["frequency"], s["phase"], s["linewidth"]]
        got, _ = curve_fit(model, t, y, p0=start, xtol=1e-14, ftol=1e-14, gtol=1e-14,
                           maxfev=20000)
        for name, ours, ref in zip(["amplitude", "frequency", "phase", "linewidth"], start, got):
            # A phase near 0 is compared on the scale of its range, pi.
            scale = math.pi if name == "phase" else max(abs(ref), 1e-300)
            rel = abs(ours - ref) / scale
            worst = max(worst, rel)
            if rel > 1e-6:
                fail("shot %d: %s %.12g, curve_fit %.12g (relative %.1e)" %
                     (s["shot"], name, ours, ref, rel))
    return worst


def spectrum_export(folder):
    """The JCAMP-DX spectrum export against numpy.fft.rfft of the record.
    source: numpy.fft (reference library); the file read by jcamp_read.py,
    written from the JCAMP-DX standard."""
    r = run(["export", folder, "--to", "jcamp", "--shot", "3"])
    if r.returncode != 0:
        fail("export: exit %d: %s" % (r.returncode, r.stderr))
    files = r.stdout.split()
    spec = [p for p in files if p.endswith("-spectrum.jdx")]
    fid = [p for p in files if p.endswith("-fid.jdx")]
    if len(spec) != 1 or len(fid) != 1:
        fail("export printed %s" % files)
    labels, data = jcamp_read.read_file(spec[0])
    with h5py.File(os.path.join(folder, "records/000003.h5"), "r") as h:
        d = h["signal/sensor"]
        y = d.attrs["receiver_sign"] * d[:].astype(np.float64)
    y = y - y.mean()
    ref = np.fft.rfft(y) * 2 / len(y)
    re, im = data["R"], data["I"]
    if len(re) != len(ref):
        fail("spectrum of %d bins, numpy %d" % (len(re), len(ref)))
    scale = np.abs(ref).max()
    err = max(np.abs(re - ref.real).max(), np.abs(im - ref.imag).max()) / scale
    if err > 1e-6:
        fail("exported spectrum differs from numpy.fft.rfft by %.2g of its peak" % err)
    labels_fid, data_fid = jcamp_read.read_file(fid[0])
    return err


def calibration(tmp):
    """The field-ramp example on sim-bench, whose true field per ampere at
    the sample is 151.2 uT/A where the rig says 150 (its true_places)."""
    rig = os.path.join(tmp, "bench.yaml")
    shutil.copy(os.path.join(ROOT, "plans/rigs/sim-bench.yaml"), rig)
    with open(os.path.join(ROOT, "plans/field-ramp.yaml")) as f:
        text = f.read().replace("rig: rigs/sim-bench.yaml", "rig: " + rig)
    folder = simulate(text, tmp, "ramp")
    r = run(["calibrate", folder, "--rig", rig])
    if r.returncode != 0:
        fail("calibrate: exit %d: %s" % (r.returncode, r.stderr))
    new = r.stdout.split()[-1]
    if not os.path.exists(new) or new == rig:
        fail("calibrate printed %r" % r.stdout)
    c = run(["check", new])
    if c.returncode != 0:
        fail("the calibrated rig does not check: %s" % c.stderr)
    doc = analyze(folder)
    cal = [f for f in doc["fits"] if f["fit"] == "calibration" and f["fitted"]][0]
    k_true = 151.2 / 150
    if abs(cal["k"] - k_true) > 3 * cal["k_err"] + 2e-4:
        fail("k = %.6f +- %.1e, the simulated rig's %.6f" % (cal["k"], cal["k_err"], k_true))
    return cal["k"], cal["k_err"]


def main():
    tmp = tempfile.mkdtemp(prefix="precess-analysis-")
    try:
        n1 = relaxation_coverage(tmp)
        weak = weak_points(tmp)
        folder = os.path.join(tmp, "relax0")
        doc = analyze(folder)
        want = linewidths(doc)
        worst = against_curve_fit(folder, doc)
        serr = spectrum_export(folder)
        k, kerr = calibration(tmp)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    print("analysis_run: T1 within 3 errors in %d runs, within 1 in %d (and with %d points "
          "below SNR 5); linewidth 1/(pi T2) = "
          "%.4f Hz; fits agree with curve_fit to %.1e; exported spectrum with numpy.fft to "
          "%.1e; calibration k = %.5f +- %.1e (true 1.00800)" % (RUNS, n1, weak, want, worst, serr, k,
                                                                kerr))
    return 0


if __name__ == "__main__":
    sys.exit(main())
