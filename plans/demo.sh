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
echo "== precess analyze (spectra, line fits, the main coil's calibration, plots)"
"$PRECESS" analyze "$out/field-ramp-run"
echo
echo "== precess calibrate (a corrected copy of the rig, next to a copy of it)"
cp rigs/sim-bench.yaml "$out/sim-bench.yaml"
rm -f "$out/sim-bench-calibrated.yaml"
"$PRECESS" calibrate "$out/field-ramp-run" --rig "$out/sim-bench.yaml"
echo
echo "== precess export --to jcamp --shot 2"
"$PRECESS" export "$out/field-ramp-run" --to jcamp --shot 2
echo
echo "== done."
run=$(cd "$out" && pwd)/field-ramp-run
echo "   the field-ramp run (records, journal):  $run"
echo "   its analysis (shots.csv, points.csv, fits.csv):  $run/analysis"
echo "   plots: the spectral map $run/analysis/map.png,"
echo "          the calibration $run/analysis/calibration.png,"
echo "          each point's record and spectrum $run/analysis/points/point-NNN.png (and .svg)"
echo "   the timing diagram of shot 2 of the T1 dispersion study:"
echo "   $(cd "$out" && pwd)/t1-dispersion-shot2.png (and .svg)"
