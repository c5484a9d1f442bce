#!/bin/sh
# Runs every test binary given as argument (cmocka unit tests; test_e2e runs
# the end-to-end and reference checks) and exits non-zero if any failed.
# The output ends with cmocka's own summary lines.
failed=0
e2e=""
for t in "$@"; do
    case "$t" in */test_e2e) e2e="$t"; continue ;; esac
    "$t" || failed=1
done
# The end-to-end group last, so the closing lines are its summary.
if [ -n "$e2e" ]; then "$e2e" || failed=1; fi
exit $failed
