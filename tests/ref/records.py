# records.py: reference check of the shot records. Reads the run test_store
# leaves in $B/tests/store-run (B default build) with h5py and checks every
# record against run-format.md: root attributes and their types, units,
# the /pulse and /signal soft links, the /events compound table, chunked
# gzip sample datasets, and the samples themselves (a known sine, recomputed
# with numpy); the journal's sha256 and the plan's against hashlib.
# Not for the journal's key order or the writer's errors (test_store.c).
# Run from the repository root after test_store:
#   /usr/bin/python3 tests/ref/records.py          Exit 0 when all agree.
import glob
import hashlib
import json
import os
import re
import sys

import h5py
import numpy

RUN = os.path.join(os.environ.get("B") or "build", "tests", "store-run")
MIN_RECORDS = 3
CHUNK_MAX = 65536
ISO_UTC = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{6}Z$")
ROOT_STR = ["format", "run", "kind", "status", "started_utc", "driver", "precess_version",
            "plan_sha256"]
ROOT_INT = ["format_version", "shot", "attempt", "point", "average"]
EVENT_FIELDS = ["step", "label", "kind", "planned", "actual"]
# The events test_store.c writes into every record (label, kind).
EVENTS = [("polarize", "coil"), ("pulse 1", "pulse"), ("acquire", "acquire")]

# Samples are float32 of a double computed by C's sin; numpy's sin may differ
# in the last bit of the double, which can move the float32 rounding by one
# float32 step (2^-23 of the value, at most 2^-22 of the amplitude). Allow
# twice that: 2^-21 of the amplitude.
SAMPLE_ATOL = 2.0 ** -21

failures = []


def fail(message):
    failures.append(message)
    print("FAIL: " + message)


def is_int(value):
    return isinstance(value, (int, numpy.integer)) and not isinstance(value, bool)


def is_float(value):
    return isinstance(value, (float, numpy.floating))


def is_str(value):
    return isinstance(value, str)


def check_root(where, f, failed, plan_sha):
    attrs = f.attrs
    # source: h5py (reference library)
    for name in ROOT_STR:
        if name not in attrs or not is_str(attrs[name]):
            fail("%s: root attribute %s missing or not a string" % (where, name))
    for name in ROOT_INT:
        if name not in attrs or not is_int(attrs[name]):
            fail("%s: root attribute %s missing or not an integer" % (where, name))
    if attrs.get("format") != "precess-shot" or attrs.get("format_version") != 1:
        fail("%s: format %r version %r" % (where, attrs.get("format"),
                                           attrs.get("format_version")))
    if attrs.get("status") != ("failed" if failed else "ok"):
        fail("%s: status %r" % (where, attrs.get("status")))
    if failed != ("error" in attrs) or (failed and not is_str(attrs["error"])):
        fail("%s: error attribute %s" % (where, "missing" if failed else "on an ok record"))
    if not ISO_UTC.match(str(attrs.get("started_utc", ""))):
        fail("%s: started_utc %r is not ISO 8601 UTC with microseconds"
             % (where, attrs.get("started_utc")))
    if attrs.get("plan_sha256") != plan_sha:
        fail("%s: plan_sha256 %r, hashlib %r" % (where, attrs.get("plan_sha256"), plan_sha))


def check_scalars(where, f, group, units):
    # source: h5py (reference library)
    if group not in f or not isinstance(f[group], h5py.Group) or len(f[group]) == 0:
        fail("%s: /%s missing or empty" % (where, group))
        return {}
    values = {}
    for name, d in f[group].items():
        if not isinstance(d, h5py.Dataset) or d.shape != () or d.dtype != numpy.float64:
            fail("%s: /%s/%s is not a scalar float64" % (where, group, name))
            continue
        want = units.get(name) if isinstance(units, dict) else units
        if d.attrs.get("units") != want:
            fail("%s: /%s/%s units %r, want %r" % (where, group, name, d.attrs.get("units"),
                                                   want))
        values[name] = float(d[()])
    return values


def check_link(where, f, name, target):
    # source: h5py (reference library)
    link = f.get(name, getlink=True)
    if not isinstance(link, h5py.SoftLink) or link.path != target:
        fail("%s: /%s is not a soft link to %s" % (where, name, target))
    elif f.get(name) is None or f[name] != f[target]:
        fail("%s: /%s does not resolve to %s" % (where, name, target))


def numbered(where, f, group):
    """The members of a group named 1..K, in order; fails on gaps."""
    if group not in f or not isinstance(f[group], h5py.Group):
        fail("%s: /%s missing" % (where, group))
        return []
    names = sorted(f[group].keys(), key=lambda k: int(k) if k.isdigit() else -1)
    if names != [str(k) for k in range(1, len(names) + 1)]:
        fail("%s: /%s members %r are not 1..K" % (where, group, names))
    return [f[group][k] for k in names]


def check_pulses(where, f):
    pulses = numbered(where, f, "pulses")
    for k, p in enumerate(pulses, 1):
        a = p.attrs
        # source: h5py (reference library)
        if not (is_str(a.get("coil")) and is_str(a.get("shape")) and is_float(a.get("duration"))
                and is_float(a.get("amplitude")) and is_int(a.get("polarity"))
                and a.get("polarity") in (1, -1)):
            fail("%s: /pulses/%d attributes %r" % (where, k, dict(a)))
        angles = [n for n in a if n.startswith("angle_")]
        if not angles or not all(is_float(a[n]) for n in angles):
            fail("%s: /pulses/%d has no float angle_NUCLEUS" % (where, k))
    if pulses:
        check_link(where, f, "pulse", "/pulses/1")
    return len(pulses)


def check_events(where, f):
    d = f.get("events")
    # source: h5py (reference library)
    if not isinstance(d, h5py.Dataset) or d.dtype.names is None:
        fail("%s: /events is not a compound table" % where)
        return
    if list(d.dtype.names) != EVENT_FIELDS:
        fail("%s: /events fields %r, want %r" % (where, d.dtype.names, EVENT_FIELDS))
        return
    t = d.dtype
    if (t["step"].kind != "i" or t["planned"] != numpy.float64 or t["actual"] != numpy.float64
            or h5py.check_string_dtype(t["label"]) is None
            or h5py.check_string_dtype(t["kind"]) is None):
        fail("%s: /events field types %r" % (where, t))
    if d.attrs.get("units") != "s":
        fail("%s: /events units %r" % (where, d.attrs.get("units")))
    rows = d[()]
    text = lambda v: v.decode() if isinstance(v, bytes) else v
    got = [(text(r["label"]), text(r["kind"])) for r in rows]
    if got != EVENTS or list(rows["step"]) != list(range(len(EVENTS))):
        fail("%s: /events rows %r, want %r" % (where, got, EVENTS))


def expected_samples(input_name, d, params):
    t = d.attrs["t0"] + numpy.arange(d.shape[0]) / d.attrs["sample_rate"]
    w = 2 * numpy.pi * params["frequency"] * t
    if input_name == "mag":
        return params["amplitude"], params["amplitude"] * numpy.sin(w)
    return params["ref_amplitude"], params["ref_amplitude"] * numpy.cos(w)


def check_channel(where, name, d, params):
    # source: h5py (reference library)
    if not isinstance(d, h5py.Dataset) or d.dtype != numpy.float32 or d.ndim != 1:
        fail("%s: %s is not 1-D float32" % (where, name))
        return 0
    if d.chunks is None or d.chunks[0] > CHUNK_MAX or d.compression != "gzip" or \
            d.compression_opts != 1:
        fail("%s: %s chunks %r compression %r level %r" % (where, name, d.chunks, d.compression,
                                                           d.compression_opts))
    a = d.attrs
    if not (is_str(a.get("units")) and is_float(a.get("sample_rate")) and is_float(a.get("t0"))
            and is_int(a.get("adc_bits")) and is_float(a.get("volts_per_count"))
            and is_int(a.get("receiver_sign")) and a.get("receiver_sign") in (1, -1)):
        fail("%s: %s attributes %r" % (where, name, dict(a)))
        return 0
    amplitude, want = expected_samples(name.rsplit("/", 1)[1], d, params)
    # source: numpy (reference library), numpy.sin / numpy.cos on the same times
    worst = float(numpy.max(numpy.abs(d[()].astype(numpy.float64) - want.astype(numpy.float32))))
    if not worst <= SAMPLE_ATOL * amplitude:
        fail("%s: %s differs from the sine by %.3g (amplitude %.3g)" % (where, name, worst,
                                                                       amplitude))
    return d.shape[0]


def check_acquisitions(where, f, params):
    samples = 0
    for k, g in enumerate(numbered(where, f, "acquisitions"), 1):
        if not isinstance(g, h5py.Group) or len(g) == 0:
            fail("%s: /acquisitions/%d is not a group of inputs" % (where, k))
            continue
        for input_name, d in g.items():
            samples += check_channel(where, "/acquisitions/%d/%s" % (k, input_name), d, params)
    if samples:
        check_link(where, f, "signal", "/acquisitions/1")
    return samples


def check_record(path, failed, plan_sha):
    where = os.path.relpath(path, RUN)
    with h5py.File(path, "r") as f:
        check_root(where, f, failed, plan_sha)
        name = os.path.basename(path)
        want = "%06d-a%d.h5" % (f.attrs["shot"], f.attrs["attempt"]) if failed else \
            "%06d.h5" % f.attrs["shot"]
        if name != want:
            fail("%s: named %s, its shot and attempt say %s" % (where, name, want))
        # the units test_store gives each parameter
        params = check_scalars(where, f, "parameters",
                               {"amplitude": "T", "frequency": "Hz", "ref_amplitude": "T"})
        check_scalars(where, f, "currents", "A")
        check_scalars(where, f, "fields", "T")
        npulses = check_pulses(where, f)
        check_events(where, f)
        samples = check_acquisitions(where, f, params) if params else 0
        if not failed and (npulses == 0 or samples == 0):
            fail("%s: an ok record of the test has pulses and samples" % where)
        return samples


def sha256(path):
    with open(path, "rb") as f:
        # source: hashlib (reference library), SHA-256
        return hashlib.sha256(f.read()).hexdigest()


def check_journal():
    """Every ok shot line's file exists with the journal's sha256."""
    with open(os.path.join(RUN, "journal.jsonl")) as f:
        lines = [json.loads(line) for line in f]
    shots = [o for o in lines if o.get("event") == "shot"]
    for o in shots:
        if o.get("status") != "ok":
            continue
        path = os.path.join(RUN, o["file"])
        if not os.path.exists(path) or sha256(path) != o.get("sha256"):
            fail("journal: %s missing or its sha256 differs" % o["file"])
    return len(shots)


def main():
    ok = sorted(glob.glob(os.path.join(RUN, "records", "*.h5")))
    failed = sorted(glob.glob(os.path.join(RUN, "records", "failed", "*.h5")))
    if not os.path.isdir(RUN) or len(ok) < MIN_RECORDS:
        print("FAIL: %s holds %d records, want at least %d (run test_store first, with the "
              "same B)" % (RUN, len(ok), MIN_RECORDS))
        return 1
    plan_sha = sha256(os.path.join(RUN, "plan.yaml"))
    samples = 0
    for path, is_failed in [(p, False) for p in ok] + [(p, True) for p in failed]:
        try:
            samples += check_record(path, is_failed, plan_sha)
        except (KeyError, TypeError, ValueError, OSError) as e:
            fail("%s: cannot check: %r" % (os.path.relpath(path, RUN), e))
    try:
        lines = check_journal()
    except (KeyError, ValueError, OSError) as e:
        fail("journal.jsonl: cannot check: %r" % e)
        lines = 0
    if failures:
        print("records: %d failure(s)" % len(failures))
        return 1
    print("records: %d ok and %d failed records, %d journal shot lines and %d samples agree "
          "with h5py, numpy and hashlib" % (len(ok), len(failed), lines, samples))
    return 0


if __name__ == "__main__":
    sys.exit(main())
