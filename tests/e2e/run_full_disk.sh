#!/bin/sh
# precess run --fast into a disk that fills up: exit 1, the records that
# made it whole and journalled, no temporary file left, and the closing
# line counting the shots that ran but could not be recorded. Needs root
# (a 600 KiB tmpfs); without it the test says so and passes.
P=${PRECESS:-build/precess}
T=$(mktemp -d)
fail() { echo "run_full_disk: $*" >&2; umount "$T/disk" 2>/dev/null; rm -rf "$T"; exit 1; }
mkdir -p "$T/disk" "$T/rigs"
if ! mount -t tmpfs -o size=600k tmpfs "$T/disk" 2>/dev/null; then
    echo "run_full_disk: skipped: cannot mount a tmpfs (needs root)"
    rm -rf "$T"
    exit 0
fi
trap 'umount "$T/disk" 2>/dev/null; rm -rf "$T"' EXIT
cp tests/plans/rigs/sim-quiet.yaml "$T/rigs/"
sed -e 's/^vary:/averages: 12\nvary:/' tests/plans/run-short.yaml > "$T/plan.yaml"
$P run "$T/plan.yaml" --fast --out "$T/disk/run" > "$T/out" 2> "$T/err"; rc=$?
[ $rc = 1 ] || fail "a full disk: exit $rc, want 1: $(tail -3 "$T/err")"
grep -q "not written" "$T/err" || fail "no message naming the record not written: $(cat "$T/err")"
n=$(grep -c '"status":"ok"' "$T/disk/run/journal.jsonl")
ls "$T/disk/run/records" | grep -q '\.tmp$' && fail "a temporary record was left"
for f in $(grep "\"status\":\"ok\"" "$T/disk/run/journal.jsonl" | grep -o "records/[0-9]*\.h5"); do
    [ -s "$T/disk/run/$f" ] || fail "$f is journalled but missing"
done
[ "$n" -ge 1 ] && [ "$n" -lt 48 ] || fail "$n shots journalled of 48"
# Every shot that ran is recorded, failed, or counted as not recorded.
line=$(tail -1 "$T/out")
ok=$(echo "$line" | sed -n 's/.*: \([0-9]*\) shots recorded ok.*/\1/p')
[ "$ok" = "$n" ] || fail "closing line says $ok recorded, the journal $n: $line"
ran=$(grep -c '^shot [0-9]*/48 attempt' "$T/err")
lost=$(echo "$line" | sed -n 's/.*, \([0-9]*\) shots\{0,1\} run but not recorded.*/\1/p')
[ $((n + ${lost:-0})) = "$ran" ] ||
    fail "$ran shots ran, $n recorded, ${lost:-0} counted as not recorded: $line"
echo "$line" | grep -q "stopped: records could not be written" || fail "closing line: $line"
grep '"event":"stop"' "$T/disk/run/journal.jsonl" | grep -q '"reason":"fault"' ||
    [ "$(grep -c '"event":"stop"' "$T/disk/run/journal.jsonl")" = 0 ] ||
    fail "the journal's stop line does not say fault"
exit 0
