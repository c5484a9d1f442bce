#!/bin/sh
# precess run on a simulated rig that acts as hardware, with faults: the
# confirmation, the interlock (exit 4), a lost device (exit 4), a read error
# retried into a good shot, on_fault: stop, and a plan refused before any
# output is touched (exit 2, no folder).
P=${PRECESS:-build/precess}
T=$(mktemp -d)
trap 'rm -rf "$T"' EXIT
fail() { echo "run_faults: $*" >&2; exit 1; }
mkdir -p "$T/rigs"

# A rig acting as hardware with the faults given, and the short plan on it.
rig_with() {
    { cat tests/plans/rigs/sim-quiet.yaml; echo "acts_as_hardware: true"; echo "faults: $1"; } \
        > "$T/rigs/sim-quiet.yaml"
    sed -e "s/^retries: .*//" tests/plans/run-short.yaml > "$T/plan.yaml"
    [ -n "$2" ] && echo "$2" >> "$T/plan.yaml"
    return 0
}

# Hardware needs a yes; with no terminal, --yes.
rig_with "[]"
$P run "$T/plan.yaml" --fast --out "$T/noyes" </dev/null >/dev/null 2>"$T/err"; rc=$?
[ $rc = 2 ] || fail "no --yes: exit $rc, want 2"
grep -q "add --yes" "$T/err" || fail "no --yes: message"
[ -e "$T/noyes" ] && fail "no --yes: a folder was made"

# Interlock on shot 2: shot 1 ok, then exit 4, outputs safe.
rig_with "[{shot: 2, kind: interlock}]"
$P run "$T/plan.yaml" --fast --yes --out "$T/lock" >/dev/null 2>"$T/err"; rc=$?
[ $rc = 4 ] || fail "interlock: exit $rc, want 4: $(cat "$T/err")"
grep -q "interlock: line interlock left its required state" "$T/err" || fail "interlock message"
[ -f "$T/lock/records/000001.h5" ] || fail "interlock: shot 1 missing"
grep -q '"reason":"fault"' "$T/lock/journal.jsonl" || fail "interlock: stop reason"
tail -1 "$T/lock/rig-commands.log" | grep -q " line shuttle 0$" || fail "interlock: not safe"

# The device is lost on shot 3: exit 4.
rig_with "[{shot: 3, kind: device_gone}]"
$P run "$T/plan.yaml" --fast --yes --out "$T/gone" >/dev/null 2>"$T/err"; rc=$?
[ $rc = 4 ] || fail "device_gone: exit $rc, want 4: $(cat "$T/err")"
grep -q "device gone" "$T/err" || fail "device_gone message"

# A read error on shot 2 is retried (retries: 1 is the default): all ok, exit 0.
rig_with "[{shot: 2, kind: read_error}]"
$P run "$T/plan.yaml" --fast --yes --out "$T/retry" >/dev/null 2>"$T/err"; rc=$?
[ $rc = 0 ] || fail "read_error: exit $rc, want 0: $(cat "$T/err")"
[ -f "$T/retry/records/failed/000002-a1.h5" ] || fail "read_error: failed attempt not kept"
[ -f "$T/retry/records/000002.h5" ] || fail "read_error: the retry is missing"
grep -q '"shot":2,"attempt":2.*"status":"ok"' "$T/retry/journal.jsonl" || fail "read_error: journal"

# No retries and on_fault: stop: the run ends after the failed shot, exit 1.
rig_with "[{shot: 2, kind: overrun}]" "retries: 0
on_fault: stop"
$P run "$T/plan.yaml" --fast --yes --out "$T/stop" >/dev/null 2>"$T/err"; rc=$?
[ $rc = 1 ] || fail "on_fault stop: exit $rc, want 1: $(cat "$T/err")"
[ -f "$T/stop/records/000003.h5" ] && fail "on_fault stop: shot 3 was run"
grep -q "acquisition overrun" "$T/stop/journal.jsonl" || fail "on_fault stop: error in journal"

# A plan the compiler refuses touches nothing.
sed -e 's/b_detect: \[10 uT/b_detect: [900 uT/' tests/plans/run-short.yaml > "$T/bad.yaml"
cp tests/plans/rigs/sim-quiet.yaml "$T/rigs/sim-quiet.yaml"
$P run "$T/bad.yaml" --fast --out "$T/bad" >/dev/null 2>"$T/err"; rc=$?
[ $rc = 2 ] || fail "bad plan: exit $rc, want 2"
grep -q "bad.yaml:[0-9]*:[0-9]*: error: point 1: " "$T/err" || fail "bad plan: message"
[ -e "$T/bad" ] && fail "bad plan: a folder was made"

# --fast is for simulated rigs; an existing folder is never reused.
mkdir "$T/exists"
$P run tests/plans/run-short.yaml --fast --out "$T/exists" >/dev/null 2>"$T/err"; rc=$?
[ $rc != 0 ] || fail "an existing folder was reused"
exit 0
