#!/bin/sh
# The check command as a user meets it: exit statuses, the FILE:LINE:COL
# diagnostics on stderr, the summary on stdout, --json, help and --version.
P=${PRECESS:-build/precess}
PY=${PYTHON:-/usr/bin/python3}
T=$(mktemp -d)
trap 'rm -rf "$T"' EXIT
fail() { echo "cli_check: $*" >&2; exit 1; }

# --version agrees with VERSION; help lists every command of the design.
[ "$($P --version)" = "precess $(cat VERSION)" ] || fail "--version: $($P --version)"
for c in check preview run resume verify analyze calibrate export probe help; do
    $P help | grep -q "^  $c " || fail "help does not list $c"
done
$P help check | grep -q "^usage: precess check" || fail "help check shows no usage"
$P help frobnicate 2>/dev/null; [ $? = 2 ] || fail "help of an unknown command must exit 2"
$P 2>/dev/null >/dev/null; [ $? = 2 ] || fail "no command must exit 2"
$P frobnicate 2>"$T/err"; [ $? = 2 ] || fail "unknown command must exit 2"
grep -q "unknown command 'frobnicate'" "$T/err" || fail "unknown command message"
$P check 2>"$T/err"; [ $? = 2 ] || fail "check without files must exit 2"
grep -q "usage: precess check" "$T/err" || fail "check without files shows no usage"

# A valid plan: exit 0, one summary line on stdout, nothing on stderr.
cp tests/plans/bench.yaml "$T/bench.yaml"
cat > "$T/ok.yaml" <<'PLAN'
version: 1
title: Two-field check
rig: bench.yaml
vary:
  b: [5 uT, 10 uT]
averages: 3
shot:
  - polarize: {magnet: premag, for: 1 s}
  - field: {sample: b, sensor: tune, settle: 5 ms}
  - pulse: {coil: tip, angle: 90 deg}
  - acquire: {for: 500 ms, rate: 5 kHz}
PLAN
$P check "$T/ok.yaml" >"$T/out" 2>"$T/err" || fail "valid plan refused: $(cat "$T/err")"
[ "$(cat "$T/out")" = "$T/ok.yaml: ok: plan 'Two-field check' on rig test-bench: 2 points, 6 shots, 9.18 s" ] \
    || fail "summary: $(cat "$T/out")"
[ -s "$T/err" ] && fail "valid plan printed on stderr: $(cat "$T/err")"

# A plan with three mistakes: exit 2, all three reported, compiler style.
cat > "$T/bad.yaml" <<'PLAN'
version: 1
rig: bench.yaml
shot:
  - polarize: {magnet: premag, for: 1 T}
  - pulse: {coil: tipp, angle: 90 deg}
  - acquire: {for: 1 s, rate: 5 kHz, inputs: [squid]}
PLAN
$P check "$T/bad.yaml" >"$T/out" 2>"$T/err"; rc=$?
[ $rc = 2 ] || fail "invalid plan exited $rc"
[ -s "$T/out" ] && fail "invalid plan printed a summary"
[ "$(grep -c ": error: " "$T/err")" = 3 ] || fail "expected 3 errors: $(cat "$T/err")"
grep -qx "$T/bad.yaml:4:37: error: 'for': expected a time (s), got a magnetic field (T)" "$T/err" \
    || fail "dimension error line: $(cat "$T/err")"
grep -qx "$T/bad.yaml:5:19: error: 'tipp' is not a coil of rig test-bench; did you mean 'tip'?" "$T/err" \
    || fail "coil error line"
# Several files: one bad one makes the whole check fail, the good one still reports.
$P check "$T/ok.yaml" "$T/bad.yaml" >"$T/out" 2>/dev/null; [ $? = 2 ] || fail "mixed files exit"
grep -q ": ok: plan" "$T/out" || fail "good file of several not reported"

# --json: one document, as json-output.md gives it.
$P check --json "$T/ok.yaml" >"$T/ok.json" || fail "check --json on a valid plan"
$P check --json "$T/bad.yaml" >"$T/bad.json" 2>/dev/null; [ $? = 2 ] || fail "json invalid exit"
$P check --json tests/plans/bench.yaml >"$T/rig.json" || fail "check --json on a rig"
$PY - "$T" <<'CHECK' || fail "json documents"
import json, sys
t = sys.argv[1]
ok = json.load(open(t + "/ok.json"))
assert ok["kind"] == "plan" and ok["valid"] is True, ok
assert ok["points"] == 2 and ok["shots"] == 6, ok
assert ok["point_list"] == [{"point": 1, "parameters": {"b": 5e-06}},
                            {"point": 2, "parameters": {"b": 1e-05}}], ok["point_list"]
assert ok["shot_order"] == [[1, "scan", 1, 1], [2, "scan", 1, 2], [3, "scan", 1, 3],
                            [4, "scan", 2, 1], [5, "scan", 2, 2], [6, "scan", 2, 3]]
assert ok["errors"] == [] and ok["warnings"] == []
bad = json.load(open(t + "/bad.json"))
assert bad["valid"] is False and len(bad["errors"]) == 3, bad
e = bad["errors"][0]
assert (e["line"], e["col"]) == (4, 37) and e["file"].endswith("bad.yaml"), e
assert "points" not in bad
rig = json.load(open(t + "/rig.json"))
assert rig["kind"] == "rig" and rig["valid"] is True and rig["errors"] == [], rig
CHECK
$P check --json "$T/ok.yaml" "$T/bad.yaml" 2>/dev/null >/dev/null; [ $? = 2 ] \
    || fail "--json with two files must be a usage error"

# Neither a plan nor a rig; a command not yet available.
printf 'title: just a title\n' > "$T/neither.yaml"
$P check "$T/neither.yaml" 2>"$T/err"; [ $? = 2 ] || fail "neither file exit"
grep -q "neither a plan" "$T/err" || fail "neither file message"
$P resume "$T/ok.yaml" 2>"$T/err"; [ $? = 2 ] || fail "resume not yet available must exit 2"
grep -q "not available in this version yet" "$T/err" || fail "resume not yet available message"
exit 0
