#!/bin/sh
# Every key of the language is accepted: the plan and rig of the language
# specification as written there, and a plan and rig using every key once.
P=${PRECESS:-build/precess}
PY=${PYTHON:-/usr/bin/python3}
fail() { echo "every_key: $*" >&2; exit 1; }
for f in tests/plans/rigs/bench-a.yaml tests/plans/spec-plan.yaml \
         tests/plans/rigs/every-key.yaml tests/plans/every-key.yaml; do
    out=$($P check "$f" 2>&1) || fail "$f refused: $out"
    echo "$out" | grep -qE ": (error|warning): " && fail "$f: $out"
done
# The specification's plan: 1 warmup + 30 points x 4 averages + 3 reference shots.
$P check --json tests/plans/spec-plan.yaml | $PY -c '
import json, sys
d = json.load(sys.stdin)
assert d["valid"] and d["points"] == 30 and d["shots"] == 124, d["shots"]
kinds = [s[1] for s in d["shot_order"]]
assert kinds.count("warmup") == 1 and kinds.count("reference") == 3, kinds
' || fail "spec plan shots"
# Geometry-given coils report their field per current as notes.
$P check --json tests/plans/rigs/every-key.yaml | $PY -c '
import json, sys
d = json.load(sys.stdin)
notes = [n["message"] for n in d["notes"]]
assert any("Helmholtz pair, 20 turns" in n for n in notes), notes
assert any("finite solenoid, 300 turns" in n for n in notes), notes
' || fail "geometry notes"
exit 0
