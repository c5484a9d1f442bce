# A real-time run of a short plan on the simulated rig: every soft event
# happened, none before its deadline, none implausibly late, and the
# journal's stop line sums the same errors up (common practice, no source:
# a soft event on a desktop kernel lands within milliseconds).
import json
import os
import subprocess
import sys
import tempfile

import h5py

P = os.environ.get("PRECESS", "build/precess")


def fail(msg):
    print("run_timing: " + msg)
    sys.exit(1)


run = os.path.join(tempfile.mkdtemp(), "run")
r = subprocess.run([P, "run", "tests/plans/run-short.yaml", "--out", run], capture_output=True,
                   text=True)
if r.returncode != 0:
    fail("run exited %d: %s" % (r.returncode, r.stderr))
errors = []
for k in range(1, 5):
    ev = h5py.File(os.path.join(run, "records", "%06d.h5" % k), "r")["events"][:]
    kinds = sorted(e.decode() for e in ev["kind"])
    if kinds != ["acquire", "end", "line", "line"]:
        fail("shot %d: events %s" % (k, kinds))
    for e in ev:
        late = e["actual"] - e["planned"]
        if late < 0:
            fail("shot %d: a %s event %.1f us before its deadline" % (k, e["kind"], -late * 1e6))
        if late > 0.05:
            fail("shot %d: a %s event %.1f ms late" % (k, e["kind"], late * 1e3))
        errors.append(late)
stop = [json.loads(l) for l in open(os.path.join(run, "journal.jsonl"))][-1]
tm = stop["timing"]
if tm["events"] != len(errors):
    fail("the stop line counts %d events, the records %d" % (tm["events"], len(errors)))
if not (0 <= tm["p50_us"] <= tm["p99_us"] <= tm["max_us"]) or \
        abs(tm["max_us"] - max(errors) * 1e6) > 1:
    fail("stop line timing %s" % tm)
if "p50" not in r.stdout or "max" not in r.stdout:
    fail("the last output line has no timing: %s" % r.stdout)
print("run_timing: %d soft events, max %.1f us late, none early" % (len(errors), tm["max_us"]))
