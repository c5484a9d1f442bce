#!/bin/sh
# precess run under signals, in real time on the simulated rig: SIGTERM
# mid-shot aborts it (exit 3) and SIGINT once lets the shot finish (exit 3);
# SIGINT twice aborts; SIGHUP is ignored. From the rig's command log: after
# the signal every coil ramped to zero and every line went inactive.
P=${PRECESS:-build/precess}
T=$(mktemp -d)
trap 'rm -rf "$T"' EXIT
fail() { echo "run_signals: $*" >&2; exit 1; }
plan=tests/plans/run-short.yaml

# The log's last safe_state is followed by a ramp to 0 of every coil and
# every line going inactive, and nothing else is commanded after it.
check_safe() {
    log=$1/rig-commands.log
    [ -s "$log" ] || fail "no command log in $1"
    tail_start=$(grep -n ' safe_state$' "$log" | tail -1 | cut -d: -f1)
    [ -n "$tail_start" ] || fail "no safe_state in $log"
    tail -n +"$tail_start" "$log" > "$T/tail"
    for coil in prepol main bias tip; do
        grep -qE " segment $coil ramp [^ ]+ 0 " "$T/tail" || fail "$coil not ramped to 0 in $1"
    done
    grep -q " line shuttle 0$" "$T/tail" || fail "shuttle not inactive in $1"
    grep -vE ' (safe_state|segment [a-z]+ ramp [^ ]+ 0 [^ ]+|line [a-z]+ 0)$' "$T/tail" \
        | grep -q . && fail "commands after the safe state in $1: $(cat "$T/tail")"
    return 0
}

# Waits (up to 10 s) until the run in folder $1 has loaded shot 1's
# polarizing ramp, then 0.15 s more: the coil then carries its 2 A.
in_shot() {
    for i in $(seq 1 100); do
        grep -q "segment prepol ramp 0 2 " "$1/rig-commands.log" 2>/dev/null && break
        sleep 0.1
    done
    sleep 0.15
}

# SIGTERM while the polarizing coil carries 2 A: abort now.
$P run $plan --out "$T/term" >"$T/out" 2>"$T/err" &
pid=$!
in_shot "$T/term"
kill -TERM $pid
wait $pid; rc=$?
[ $rc = 3 ] || fail "SIGTERM: exit $rc, want 3: $(cat "$T/err")"
check_safe "$T/term"
grep -q '"event":"stop".*"reason":"interrupted"' "$T/term/journal.jsonl" || fail "SIGTERM: stop line"
grep -q '"shot":1,"attempt":1.*"status":"failed"' "$T/term/journal.jsonl" \
    || fail "SIGTERM: the partial shot is not recorded as failed"
[ -f "$T/term/records/failed/000001-a1.h5" ] || fail "SIGTERM: no partial record"
grep -q '"status":"ok"' "$T/term/journal.jsonl" && fail "SIGTERM: a shot recorded ok"
grep -q "segment prepol ramp 2 0 " "$T/term/rig-commands.log" \
    || fail "SIGTERM: the energized prepol was not ramped down from 2 A"

# SIGINT once: the current shot ends normally, then the run stops.
$P run $plan --out "$T/int" >"$T/out" 2>"$T/err" &
pid=$!
in_shot "$T/int"
kill -INT $pid
wait $pid; rc=$?
[ $rc = 3 ] || fail "SIGINT: exit $rc, want 3"
check_safe "$T/int"
[ -f "$T/int/records/000001.h5" ] || fail "SIGINT: shot 1 was not finished"
[ -f "$T/int/records/000002.h5" ] && fail "SIGINT: shot 2 was started"
grep -q '"event":"stop".*"reason":"interrupted"' "$T/int/journal.jsonl" || fail "SIGINT: stop line"

# SIGINT twice: abort now.
$P run $plan --out "$T/int2" >"$T/out" 2>"$T/err" &
pid=$!
in_shot "$T/int2"
kill -INT $pid
sleep 0.1
kill -INT $pid
wait $pid; rc=$?
[ $rc = 3 ] || fail "SIGINT twice: exit $rc, want 3"
check_safe "$T/int2"
[ -f "$T/int2/records/000001.h5" ] && fail "SIGINT twice: shot 1 was finished"

# SIGHUP is ignored: the run goes on to the end.
$P run $plan --out "$T/hup" >"$T/out" 2>"$T/err" &
pid=$!
in_shot "$T/hup"
kill -HUP $pid
wait $pid; rc=$?
[ $rc = 0 ] || fail "SIGHUP: exit $rc, want 0: $(cat "$T/err")"
[ "$(ls "$T/hup/records" | grep -c '\.h5$')" = 4 ] || fail "SIGHUP: not every shot recorded"
check_safe "$T/hup"
# SIGKILL of a run on a rig that acts as hardware: the run cannot clean up,
# its supervisor must put the outputs in the safe state.
mkdir -p "$T/hw/rigs"
{ cat tests/plans/rigs/sim-quiet.yaml; echo "acts_as_hardware: true"; } > "$T/hw/rigs/sim-quiet.yaml"
cp $plan "$T/hw/plan.yaml"
$P run "$T/hw/plan.yaml" --yes --out "$T/kill" >"$T/out" 2>"$T/err" &
pid=$!
in_shot "$T/kill"
n_before=$(grep -c ' safe_state$' "$T/kill/rig-commands.log")
kill -KILL $pid
wait $pid 2>/dev/null
for i in 1 2 3 4 5 6 7 8 9 10; do
    [ "$(grep -c ' safe_state$' "$T/kill/rig-commands.log")" -gt "$n_before" ] && break
    sleep 0.2
done
[ "$(grep -c ' safe_state$' "$T/kill/rig-commands.log")" -gt "$n_before" ] \
    || fail "SIGKILL: the supervisor did not make the rig safe"
check_safe "$T/kill"
exit 0
