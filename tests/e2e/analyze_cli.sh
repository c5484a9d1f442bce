#!/bin/sh
# precess analyze, export and calibrate as a user runs them: what they
# write, a run cut off mid-shot analysed as far as it got, and every
# refusal with its message and exit status.
P=${PRECESS:-build/precess}
T=$(mktemp -d)
trap 'rm -rf "$T"' EXIT
fail() { echo "analyze_cli: $*" >&2; exit 1; }
mkdir -p "$T/rigs"
cp tests/plans/rigs/sim-quiet.yaml "$T/rigs/"
{ cat tests/plans/run-short.yaml; echo "analysis: {fit: calibration, against: b_detect}"; } \
    > "$T/plan.yaml"
$P run "$T/plan.yaml" --fast --out "$T/run" >/dev/null 2>&1 || fail "the run failed"

# The whole run: every file of RUN/analysis, one row per shot and point.
out=$($P analyze "$T/run" 2>"$T/err") || fail "analyze: exit $?: $(cat "$T/err")"
[ "$out" = "$T/run/analysis" ] || fail "analyze printed '$out'"
grep -q "4 of 4 planned shots recorded; 4 with a line" "$T/err" || fail "summary: $(cat "$T/err")"
grep -q "calibration: k = " "$T/err" || fail "no calibration in the summary"
for f in shots.csv points.csv fits.csv map.png map.svg calibration.png calibration.svg \
         points/point-001.png points/point-004.svg; do
    [ -s "$T/run/analysis/$f" ] || fail "analysis/$f missing"
done
[ "$(wc -l < "$T/run/analysis/shots.csv")" = 5 ] || fail "shots.csv: not 4 rows and a header"
[ "$(wc -l < "$T/run/analysis/points.csv")" = 5 ] || fail "points.csv: not 4 rows and a header"
head -1 "$T/run/analysis/shots.csv" | grep -q "^shot,point,average,kind,x,frequency," ||
    fail "shots.csv header"
grep -q "^calibration,,,4,1," "$T/run/analysis/fits.csv" || fail "fits.csv: $(cat "$T/run/analysis/fits.csv")"
ls "$T/run/analysis" | grep -q "^\." && fail "a temporary file was left in analysis/"
$P analyze "$T/run" --json > "$T/doc.json" 2>/dev/null || fail "analyze --json"
/usr/bin/python3 - "$T/doc.json" <<'EOF' || fail "analyze --json document"
import json, sys
d = json.load(open(sys.argv[1]))
assert d["shots"] == 4 and len(d["per_shot"]) == 4, d["shots"]
s = d["per_shot"][0]
for k in ["shot", "frequency", "amplitude", "linewidth", "snr", "phase", "lines"]:
    assert k in s, k
assert d["fits"][0]["fit"] == "calibration" and d["fits"][0]["fitted"]
EOF

# A run cut off: the journal's last line half written, its record gone.
cp -r "$T/run" "$T/cut"
rm -rf "$T/cut/analysis" "$T/cut/records/000004.h5"
head -n 4 "$T/run/journal.jsonl" > "$T/cut/journal.jsonl"
printf '{"event":"shot","time":"2026-' >> "$T/cut/journal.jsonl"
$P analyze "$T/cut" >/dev/null 2>"$T/err" || fail "analyze of a cut-off run: $(cat "$T/err")"
grep -q "3 of 4 planned shots recorded" "$T/err" || fail "cut-off run: $(cat "$T/err")"
[ "$(wc -l < "$T/cut/analysis/shots.csv")" = 4 ] || fail "cut-off run: shots.csv"

# A record the journal calls done but that cannot be read: kept, with why.
printf 'not hdf5' > "$T/cut/records/000002.h5"
$P analyze "$T/cut" >/dev/null 2>"$T/err" || fail "analyze with a bad record: exit $?"
grep -q "1 unreadable" "$T/err" || fail "bad record not counted: $(cat "$T/err")"
grep "^2,2,1,scan," "$T/cut/analysis/shots.csv" | grep -q "000002.h5" ||
    fail "shots.csv does not say why shot 2 was not read"

# Refusals.
$P analyze >/dev/null 2>"$T/err"; [ $? = 2 ] || fail "analyze without a folder: not 2"
$P analyze "$T/run" --bogus >/dev/null 2>"$T/err"; [ $? = 2 ] || fail "unknown option: not 2"
grep -q "unknown option '--bogus'" "$T/err" || fail "unknown option message"
$P analyze "$T/rigs" >/dev/null 2>"$T/err"; [ $? = 1 ] || fail "not a run folder: not 1"
grep -q "points.json: no such file: not a run folder" "$T/err" || fail "not a run: $(cat "$T/err")"

# Export: CSV and JCAMP-DX files, one shot or all, and what it refuses.
$P export "$T/run" --to csv > "$T/list" 2>"$T/err" || fail "export csv: $(cat "$T/err")"
[ "$(wc -l < "$T/list")" = 4 ] || fail "export csv: $(cat "$T/list")"
f=$T/run/analysis/export/shot-000003.csv
[ "$(grep -c '^[0-9]' "$f")" = 2500 ] || fail "shot 3's CSV has not 2500 samples"
grep -q "^time,value" "$f" || fail "CSV header"
$P export "$T/run" --to jcamp --shot 2 > "$T/list" 2>"$T/err" || fail "export jcamp: $(cat "$T/err")"
grep -q "shot-000002-fid.jdx" "$T/list" && grep -q "shot-000002-spectrum.jdx" "$T/list" ||
    fail "export jcamp printed $(cat "$T/list")"
head -1 "$T/run/analysis/export/shot-000002-fid.jdx" | grep -q "^##TITLE=" || fail "JCAMP title"
$P export "$T/run" >/dev/null 2>"$T/err"; [ $? = 2 ] || fail "export without --to: not 2"
$P export "$T/run" --to xml >/dev/null 2>"$T/err"; [ $? = 2 ] || fail "export --to xml: not 2"
$P export "$T/run" --to csv --shot 0 >/dev/null 2>"$T/err"; [ $? = 2 ] || fail "--shot 0: not 2"
$P export "$T/run" --to csv --shot 99 >/dev/null 2>"$T/err"; [ $? = 1 ] || fail "--shot 99: not 1"
grep -q "shot 99 has no ok record" "$T/err" || fail "--shot 99 message"

# Calibrate: a corrected copy next to the rig, never the rig itself.
cp "$T/rigs/sim-quiet.yaml" "$T/bench.yaml"
before=$(sha256sum < "$T/bench.yaml")
$P calibrate "$T/run" --rig "$T/bench.yaml" > "$T/out" 2>"$T/err" || fail "calibrate: $(cat "$T/err")"
[ "$(tail -1 "$T/out")" = "$T/bench-calibrated.yaml" ] || fail "calibrate printed $(tail -1 "$T/out")"
grep -q "^main at sample (uT/A)  *150 " "$T/out" || fail "old and new not side by side: $(cat "$T/out")"
[ "$(sha256sum < "$T/bench.yaml")" = "$before" ] || fail "calibrate changed the rig itself"
$P check "$T/bench-calibrated.yaml" >/dev/null 2>&1 || fail "the calibrated rig does not check"
$P calibrate "$T/run" --rig "$T/bench.yaml" > "$T/out" 2>&1 || fail "calibrate again"
[ "$(tail -1 "$T/out")" = "$T/bench-calibrated-2.yaml" ] || fail "calibrate overwrote its last copy"
# Against a coil's current: that coil's field per ampere (the quiet rig's
# true 150 uT/A, within half a percent).
{ cat tests/plans/run-short.yaml; echo "analysis: {fit: calibration, against: {current: main}}"; } \
    > "$T/current.yaml"
$P run "$T/current.yaml" --fast --out "$T/current" >/dev/null 2>&1 || fail "run against current"
$P calibrate "$T/current" --rig "$T/bench.yaml" > "$T/out" 2>"$T/err" ||
    fail "calibrate against a current: $(cat "$T/err")"
awk '/^main at sample/ { if ($5 < 149.25 || $5 > 150.75) exit 1; found = 1 } END { exit !found }' \
    "$T/out" || fail "calibrate against a current: $(cat "$T/out")"
sed -e '/^analysis:/d' tests/plans/run-short.yaml > "$T/nofit.yaml"
$P run "$T/nofit.yaml" --fast --out "$T/nofit" >/dev/null 2>&1 || fail "run without analysis"
$P calibrate "$T/nofit" --rig "$T/bench.yaml" >/dev/null 2>"$T/err"; [ $? = 2 ] ||
    fail "calibrate of a run without a calibration fit: not 2"
grep -q "asks for no calibration fit" "$T/err" || fail "no-fit message: $(cat "$T/err")"
$P calibrate "$T/run" >/dev/null 2>&1; [ $? = 2 ] || fail "calibrate without --rig: not 2"
$P calibrate "$T/run" --rig "$T/none.yaml" >/dev/null 2>"$T/err"; [ $? = 2 ] ||
    fail "calibrate with a missing rig: not 2"
grep -q "none.yaml" "$T/err" || fail "missing rig message"
exit 0
