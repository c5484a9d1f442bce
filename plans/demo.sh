#!/bin/sh
# make demo: checks every example plan and the rig in simulation, previews
# each plan (a table of its points, its duration), draws one shot's timing
# diagram and runs the field-ramp study on the simulated rig.
set -e
cd "$(dirname "$0")"
: "${PRECESS:=../build/precess}"
out=${DEMO_OUT:-../build/demo}
mkdir -p "$out"
echo "== precess $($PRECESS --version | cut -d' ' -f2): example plans on the simulated bench"
for f in rigs/*.yaml *.yaml; do
    "$PRECESS" check "$f" 2>&1
done
for f in *.yaml; do
    echo
    echo "== precess preview plans/$f"
    "$PRECESS" preview "$f" 2>&1
done
echo
"$PRECESS" preview t1-dispersion.yaml --timeline 2
echo
"$PRECESS" preview t1-dispersion.yaml --diagram "$out/t1-dispersion-shot2.png" --shot 2
"$PRECESS" preview t1-dispersion.yaml --diagram "$out/t1-dispersion-shot2.svg" --shot 2
echo
echo "== precess run plans/field-ramp.yaml --fast (the study in simulated time)"
rm -rf "$out/field-ramp-run"
"$PRECESS" run field-ramp.yaml --fast --out "$out/field-ramp-run"
echo
echo "== done."
echo "   the field-ramp run (records, journal):  $(cd "$out" && pwd)/field-ramp-run"
echo "   the timing diagram of shot 2 of the T1 dispersion study:"
echo "   $(cd "$out" && pwd)/t1-dispersion-shot2.png (and .svg)"
