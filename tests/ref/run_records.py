# What `precess run --fast` leaves, read back with h5py as any user would:
# the folder of run-format.md, the journal, points.json, every record's
# layout and values against `preview --json`, each signal's spectral peak at
# |gamma| B / 2 pi of its field (numpy.fft) and its amplitude at the
# prediction of the sample model within the noise (scipy's curve_fit).
import hashlib
import json
import math
import os
import subprocess
import sys
import tempfile

import h5py
import numpy as np
from scipy.optimize import curve_fit

P = os.environ.get("PRECESS", "build/precess")
PLAN = "tests/plans/run-short.yaml"
GAMMA_1H = 2.6752218744e8   # source: CODATA 2018 proton gyromagnetic ratio (value from memory)
PREPOL_PER_AMP = 7.4935e-3  # sim-quiet's prepol: 400 turns, r 15 mm, L 60 mm (finite solenoid)
T1, T2, SIGNAL_PER_FIELD = 2.0, 0.5, 1e-9


def fail(msg):
    print("run_records: " + msg)
    sys.exit(1)


def sha(path):
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


def predicted_polarization(shot):
    """Integrate dP/dt = (|B| - P)/T1 over the shot's polarize step and the
    time to the pulse's end (source: Bloch, Phys. Rev. 70, 460 (1946),
    longitudinal relaxation; value of the solenoid from the handbook formula
    B = mu0 N I / sqrt(L^2 + 4 R^2))."""
    steps = shot["steps"]
    pol, pulse = steps[0], next(s for s in steps if s["kind"] == "pulse")
    ramp = 2.0 / 400.0                     # 2 A at 400 A/s
    t_end = pulse["start"] + pulse["duration"]
    t = np.linspace(0.0, t_end, 200001)
    i = np.interp(t, [0, ramp, pol["duration"] - ramp, pol["duration"]], [0, 2, 2, 0])
    b = np.abs(i * PREPOL_PER_AMP) + np.where(t > steps[2]["start"], shot["fields"]["sample"], 2e-9)
    p = 0.0
    dt = t[1] - t[0]
    for bk in b:
        p += (bk - p) * (1 - math.exp(-dt / T1))
    return p


def main():
    tmp = tempfile.mkdtemp()
    run = os.path.join(tmp, "run")
    r = subprocess.run([P, "run", PLAN, "--fast", "--out", run], capture_output=True, text=True)
    if r.returncode != 0:
        fail("run exited %d: %s" % (r.returncode, r.stderr))
    # One plain progress line per shot when stderr is not a terminal.
    import re
    prog = [l for l in r.stderr.splitlines() if l.startswith("shot ")]
    if len(prog) != 4 or not all(re.match(r"shot %d/4 attempt 1 ok  elapsed [0-9:]+  remaining "
                                          r"[0-9:]+  [0-9.]+ k?Hz, SNR [0-9]+$" % (k + 1), l)
                                 for k, l in enumerate(prog)):
        fail("progress lines: %s" % prog)
    prev = json.loads(subprocess.run([P, "preview", "--json", PLAN], capture_output=True,
                                     text=True, check=True).stdout)
    chk = json.loads(subprocess.run([P, "check", "--json", PLAN], capture_output=True,
                                    text=True, check=True).stdout)
    # The folder and its files, as given.
    for name in ["plan.yaml", "rig.yaml", "points.json", "journal.jsonl", "records"]:
        if not os.path.exists(os.path.join(run, name)):
            fail("missing " + name)
    if open(os.path.join(run, "plan.yaml"), "rb").read() != open(PLAN, "rb").read():
        fail("plan.yaml is not the plan as given")
    if open(os.path.join(run, "rig.yaml"), "rb").read() != \
            open("tests/plans/rigs/sim-quiet.yaml", "rb").read():
        fail("rig.yaml is not the rig as given")
    points = json.load(open(os.path.join(run, "points.json")))
    if points["plan_sha256"] != sha(PLAN):
        fail("points.json's plan_sha256")
    if [[s["shot"], s["kind"], s["point"], s["average"]] for s in points["shot_list"]] \
            != chk["shot_order"]:
        fail("points.json's shots differ from check --json")
    lines = [json.loads(l) for l in open(os.path.join(run, "journal.jsonl"))]
    start, shots, stop = lines[0], lines[1:-1], lines[-1]
    if list(start)[:2] != ["event", "time"] or start["event"] != "start":
        fail("journal start line: %s" % start)
    for k in ["run", "plan_sha256", "rig_sha256", "shots", "driver", "version", "host"]:
        if k not in start:
            fail("journal start line lacks " + k)
    if start["plan_sha256"] != sha(PLAN) or start["shots"] != 4:
        fail("journal start values")
    if stop["event"] != "stop" or stop["reason"] != "done" or "timing" not in stop:
        fail("journal stop line: %s" % stop)
    if [s["shot"] for s in shots] != [1, 2, 3, 4] or any(s["status"] != "ok" for s in shots):
        fail("journal shot lines: %s" % shots)
    for line, ps in zip(shots, prev["shot_list"]):
        path = os.path.join(run, line["file"])
        if sha(path) != line["sha256"]:
            fail("sha256 of " + line["file"])
        check_record(path, ps, start["run"])
    print("run_records: 4 records match preview; peaks and amplitudes as the model predicts")


def check_record(path, ps, run_id):
    f = h5py.File(path, "r")   # source: h5py (reference library)
    a = f.attrs
    want = {"format": "precess-shot", "format_version": 1, "run": run_id, "shot": ps["shot"],
            "attempt": 1, "point": ps["point"], "average": ps["average"], "kind": ps["kind"],
            "status": "ok", "driver": "sim"}
    for k, v in want.items():
        if a[k] != v:
            fail("%s: attribute %s is %r, not %r" % (path, k, a[k], v))
    for k in ["started_utc", "precess_version", "plan_sha256"]:
        if k not in a:
            fail("%s: no attribute %s" % (path, k))
    if abs(f["parameters/b_detect"][()] - ps["parameters"]["b_detect"]) > 1e-18:
        fail("parameter b_detect")
    # a field swept in uT is kept in its SI unit, the tesla
    if f["parameters/b_detect"].attrs["units"] != "T":
        fail("%s: /parameters/b_detect units %r, not 'T'" % (path,
                                                             f["parameters/b_detect"].attrs["units"]))
    for coil, i in ps["currents"].items():
        if abs(f["currents/" + coil][()] - i) > 1e-12 or f["currents/" + coil].attrs["units"] != "A":
            fail("current of " + coil)
    for place, b in ps["fields"].items():
        if abs(f["fields/" + place][()] - b) > 1e-18:
            fail("field at " + place)
    pu = f["pulse"].attrs
    if pu["coil"] != "tip" or abs(pu["duration"] - ps["pulse"]["duration"]) > 1e-12 or \
            abs(pu["angle_1H"] - math.pi / 2) > 1e-9 or pu["polarity"] != 1:
        fail("pulse attributes: %s" % dict(pu))
    step = next(s for s in ps["steps"] if s["kind"] == "pulse")
    if abs(pu["start"] - step["start"]) > 1e-9 or \
            not pu["start"] + pu["duration"] <= pu["end"] <= step["start"] + step["duration"] + 1e-9:
        fail("pulse start/end %g/%g against its step %s" % (pu["start"], pu["end"], step))
    ev = f["events"][:]
    if list(ev.dtype.names) != ["step", "label", "kind", "planned", "actual"]:
        fail("events fields: %s" % (ev.dtype.names,))
    sig = f["signal/sensor"]
    x = sig[:].astype(float) * sig.attrs["receiver_sign"]
    rate = sig.attrs["sample_rate"]
    if sig.dtype != np.float32 or sig.compression != "gzip" or sig.chunks is None:
        fail("sample dataset storage")
    # source: numpy (reference library), numpy.fft: the peak at |gamma| |B| / 2 pi.
    spec = np.abs(np.fft.rfft(x - x.mean()))
    freqs = np.fft.rfftfreq(len(x), 1 / rate)
    f_expect = GAMMA_1H * math.hypot(ps["fields"]["sample"], 0) / (2 * math.pi)
    if abs(freqs[spec.argmax()] - f_expect) > rate / len(x):
        fail("peak at %.2f Hz, want %.2f Hz" % (freqs[spec.argmax()], f_expect))
    # source: scipy (reference library), scipy.optimize.curve_fit of a damped cosine
    t = np.arange(len(x)) / rate
    model = lambda t, A, phi: A * np.exp(-t / T2) * np.cos(2 * math.pi * f_expect * t + phi)
    (amp, phi), cov = curve_fit(model, t, x, p0=[np.abs(x[:20]).max(), 0.0])
    amp, err = abs(amp), math.sqrt(cov[0, 0])
    want_amp = SIGNAL_PER_FIELD * predicted_polarization(ps)
    # Within 3 standard errors of the fit and 1 % of the model's own integration.
    if abs(amp - want_amp) > 3 * err + 0.01 * want_amp:
        fail("shot %d: amplitude %.4g T +- %.2g, the model predicts %.4g T" %
             (ps["shot"], amp, err, want_amp))


main()
