#!/bin/sh
# precess preview as a user meets it: the table and its total, --timeline,
# and --json as json-output.md gives it, consistent with check --json and
# with the physics it reports (Larmor frequency of the field, angles).
P=${PRECESS:-build/precess}
PY=${PYTHON:-/usr/bin/python3}
T=$(mktemp -d)
trap 'rm -rf "$T"' EXIT
fail() { echo "preview: $*" >&2; exit 1; }
plan=plans/t1-dispersion.yaml

$P preview $plan >"$T/table" 2>"$T/err" || fail "preview of $plan failed: $(cat "$T/err")"
grep -q "^point  b_relax" "$T/table" || fail "table header"
[ "$(grep -cE '^ +[0-9]+  ' "$T/table")" = 30 ] || fail "the table has not 30 point rows"
grep -q "^ *ref1 " "$T/table" || fail "reference variants are not listed"
grep -qE "^total .*; started now it would end " "$T/table" || fail "no total and finish line"

$P preview $plan --timeline 2 >"$T/tl" || fail "--timeline 2"
grep -q "^shot 2 (point 5, average 2, scan)" "$T/tl" || fail "timeline header: $(head -1 "$T/tl")"
grep -q "pulse    tip .*polarity -1" "$T/tl" || fail "alternate pulse of average 2 has polarity -1"
$P preview $plan --timeline 0 2>/dev/null; [ $? = 2 ] || fail "--timeline 0 must be refused"
$P preview $plan --timeline 64 2>"$T/err"; [ $? = 2 ] || fail "--timeline past the end"
grep -q "the plan has 63 shots" "$T/err" || fail "--timeline past the end message"
$P preview 2>/dev/null; [ $? = 2 ] || fail "preview without a plan"

$P preview --json $plan >"$T/p.json" || fail "preview --json"
$P check --json $plan >"$T/c.json" || fail "check --json"
$PY - "$T" <<'CHECK' || fail "json"
import json, math, sys
t = sys.argv[1]
p = json.load(open(t + "/p.json"))
c = json.load(open(t + "/c.json"))
assert p["title"] == "Sandstone core T1 dispersion"
assert p["points"] == c["points"] == 30 and p["shots"] == c["shots"] == 63
assert abs(p["duration"] - c["duration"]) < 1e-9, (p["duration"], c["duration"])
shots = p["shot_list"]
assert [s["shot"] for s in shots] == list(range(1, 64))
assert [[s["shot"], s["kind"], s["point"], s["average"]] for s in shots] == c["shot_order"]
keys = {"shot", "point", "average", "kind", "parameters", "start", "duration", "currents",
        "fields", "frequency", "pulse", "steps"}
gamma = 2.6752218744e8   # source: CODATA 2018 proton gyromagnetic ratio (value from memory)
for a, b in zip(shots, shots[1:]):
    assert abs(a["start"] + a["duration"] - b["start"]) < 1e-9, (a["shot"], b["shot"])
for s in shots:
    assert keys <= set(s), set(s) ^ keys
    assert set(s["currents"]) == {"prepol", "main", "bias", "tip"}
    assert set(s["fields"]) == {"sample", "sensor"}
    # read out at field_for(1H, 1 kHz): the frequency is |gamma| |B| / 2 pi of the field,
    # the sample's z field plus its residual (2 nT along z here).
    # source: Larmor relation with the CODATA 2018 gamma (value from memory)
    assert abs(s["frequency"] - 1000.0) < 1e-6, s["frequency"]
    assert abs(gamma * s["fields"]["sample"] / (2 * math.pi) - s["frequency"]) < 1e-6
    pu = s["pulse"]
    assert pu["coil"] == "tip" and pu["shape"] == "dc"
    assert abs(pu["angles"]["1H"] - math.pi / 2) < 1e-9, pu["angles"]
    assert pu["polarity"] == (-1 if s["average"] % 2 == 0 else 1), (s["shot"], pu)
    steps = s["steps"]
    assert [st["kind"] for st in steps] == ["polarize", "field", "wait", "field", "pulse",
                                            "acquire", "wait"], steps
    for x, y in zip(steps, steps[1:]):
        assert abs(x["start"] + x["duration"] - y["start"]) < 1e-12
    assert steps[-1]["label"] == "recovery"
    assert abs(steps[2]["duration"] - s["parameters"]["t_relax"]) < 1e-12
ref = [s for s in shots if s["kind"] == "reference"]
assert len(ref) == 3 and all(abs(s["parameters"]["t_relax"] - 3.0) < 1e-12 for s in ref)
total = sum(s["duration"] for s in shots)
assert p["duration"] >= total - 1e-9
CHECK
exit 0
