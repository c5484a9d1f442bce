#!/bin/sh
# make demo: checks every example plan and the rig in simulation and prints
# each one's summary. Later versions also preview, run and analyze a study.
set -e
cd "$(dirname "$0")"
: "${PRECESS:=../build/precess}"
echo "== precess $($PRECESS --version | cut -d' ' -f2): example plans (simulated rig)"
for f in rigs/*.yaml *.yaml; do
    "$PRECESS" check "$f"
done
echo "== all example plans are valid; try: build/precess check --json plans/t1-dispersion.yaml"
