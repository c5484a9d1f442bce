# check_examples.sh: every example a user is given must pass `precess check`.
# Runs `$PRECESS check` (default build/precess) on plans/*.yaml and
# plans/rigs/*.yaml, failing when one exits non-zero or prints an error;
# then `check --json` on each plan must be JSON with "valid": true.
# Not for what the plans do when run (other end-to-end tests). POSIX sh, run
# from the repository root: sh tests/e2e/check_examples.sh
PRECESS=${PRECESS:-build/precess}
PYTHON=/usr/bin/python3

if [ ! -x "$PRECESS" ]; then
    echo "check_examples: no precess binary at $PRECESS (set PRECESS or run make)" >&2
    exit 1
fi

out=$(mktemp) || exit 1
trap 'rm -f "$out"' EXIT
trap 'exit 2' INT TERM

failed=0
checked=0
fail() {
    echo "FAIL: $*" >&2
    failed=1
}

for f in plans/*.yaml plans/rigs/*.yaml; do
    [ -e "$f" ] || { fail "no file matches $f"; continue; }
    checked=$((checked + 1))
    "$PRECESS" check "$f" >"$out" 2>&1
    rc=$?
    [ "$rc" -eq 0 ] || fail "$PRECESS check $f exited $rc"
    if grep -q 'error:' "$out"; then
        fail "$PRECESS check $f printed an error:"
        sed 's/^/    /' "$out" >&2
    fi
done

for f in plans/*.yaml; do
    [ -e "$f" ] || continue
    "$PRECESS" check --json "$f" 2>/dev/null >"$out"
    rc=$?
    [ "$rc" -eq 0 ] || fail "$PRECESS check --json $f exited $rc"
    if ! "$PYTHON" -c 'import json,sys; json.load(sys.stdin)' <"$out" 2>/dev/null; then
        fail "$PRECESS check --json $f did not print one JSON document"
        continue
    fi
    "$PYTHON" -c 'import json,sys
d = json.load(sys.stdin)
sys.exit(0 if d.get("valid") is True and d.get("kind") == "plan" else 1)' <"$out" ||
        fail "$PRECESS check --json $f: not \"valid\": true for a plan"
done

if [ "$failed" -ne 0 ]; then
    echo "check_examples: FAILED" >&2
    exit 1
fi
echo "check_examples: $checked files ok"
