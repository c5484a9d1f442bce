#!/bin/sh
# preview --diagram as a user meets it: a shot's timing diagram as PNG and
# SVG, refused for other file kinds and for shots the plan does not have.
# Not a check of what the picture shows (that is looked at by eye).
P=${PRECESS:-build/precess}
PY=${PYTHON:-/usr/bin/python3}
PLAN=plans/t1-dispersion.yaml
T=$(mktemp -d)
trap 'rm -rf "$T"' EXIT
fail() { echo "diagram: $*" >&2; exit 1; }

# PNG: exit 0, a non-empty file that starts with the PNG signature.
$P preview "$PLAN" --diagram "$T/d.png" --shot 2 >"$T/out" 2>"$T/err" \
    || fail "png refused: $(cat "$T/err")"
[ -s "$T/d.png" ] || fail "no PNG written"
sig=$(od -An -tx1 -N8 "$T/d.png" | tr -d ' \n')
[ "$sig" = "89504e470d0a1a0a" ] || fail "not a PNG (starts $sig)"

# SVG: exit 0, an SVG document.
$P preview "$PLAN" --diagram "$T/d.svg" --shot 2 >"$T/out" 2>"$T/err" \
    || fail "svg refused: $(cat "$T/err")"
grep -q "<svg" "$T/d.svg" || fail "no <svg in the SVG"

# Another extension: a usage error with a message, and no file left.
$P preview "$PLAN" --diagram "$T/d.gif" --shot 2 >"$T/out" 2>"$T/err"; rc=$?
[ $rc = 2 ] || fail ".gif exited $rc"
[ -s "$T/err" ] || fail ".gif refused without a message"
[ -e "$T/d.gif" ] && fail ".gif left a file"

# Shots the plan does not have: 0 and one past the last; the last is fine.
n=$($P check --json "$PLAN" | $PY -c 'import json, sys; print(json.load(sys.stdin)["shots"])') \
    || fail "cannot count the plan's shots"
for s in 0 $((n + 1)); do
    $P preview "$PLAN" --diagram "$T/s.png" --shot $s >"$T/out" 2>"$T/err"; rc=$?
    [ $rc = 2 ] || fail "--shot $s of $n exited $rc"
    [ -s "$T/err" ] || fail "--shot $s refused without a message"
done
$P preview "$PLAN" --diagram "$T/last.png" --shot "$n" >"$T/out" 2>"$T/err" \
    || fail "--shot $n (the last) refused: $(cat "$T/err")"
[ -s "$T/last.png" ] || fail "no PNG for the last shot"
exit 0
