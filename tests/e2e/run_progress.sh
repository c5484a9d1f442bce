#!/bin/sh
# precess run's progress lines (stderr not a terminal: one line per attempt)
# on the simulated bench, whose mains pickup (1 pT at 50 Hz and harmonics)
# is stronger than a weakly polarized signal: each line names the signal's
# frequency near the planned one, never a mains harmonic; a shot with no
# line above the noise says so, with the planned frequency (none at zero
# field, where the planned one is below a bin).
P=${PRECESS:-build/precess}
# the simulated noise is seeded from the run id: a fixed one, a fixed noise
export PRECESS_RUN_ID=0000c0de00000000000000000000b0b5
T=$(mktemp -d)
trap 'rm -rf "$T"' EXIT
fail() { echo "run_progress: $*" >&2; exit 1; }
RIG=$(pwd)/plans/rigs/sim-bench.yaml

# 1 mT of polarization: a line of about 0.6 pT, under the mains, well over
# the noise. 2 uT and 3 uT of 1H: 85.2 Hz and 127.7 Hz.
plan() {
    cat <<PLAN
version: 1
title: Progress past the mains
rig: ${4:-$RIG}
sample: {nuclei: [1H], model: {t1: 1 s, t2: 0.4 s, signal_per_field: 1e-9}}
vary:
  b: [${2:-2 uT, 3 uT}]
shot:
  - polarize: {coil: prepol, field: $1, for: 1 s}
  - field: {sample: b, sensor: ${3:-tune}, settle: 5 ms}
  - pulse: {coil: tip, angle: 90 deg}
  - acquire: {for: 1 s, rate: 2 kHz}
PLAN
}

plan "1 mT" > "$T/weak.yaml"
$P run "$T/weak.yaml" --fast --out "$T/weak" >/dev/null 2>"$T/err" || fail "weak: $(cat "$T/err")"
cp "$T/err" "$T/err.weak"
lines=$(grep -c '^shot [12]/2 attempt 1 ok' "$T/err")
[ "$lines" = 2 ] || fail "weak: $lines progress lines, want 2: $(cat "$T/err")"
# the frequency shown, to the hertz, within 3 Hz of 85.2 and 127.7 (the
# sensor's tuning and the residual field move it a little)
for want in "1 85.2" "2 127.7"; do
    set -- $want
    got=$(sed -n "s|^shot $1/2 attempt 1 ok .*  \([0-9.]*\) Hz, SNR \([0-9]*\)\$|\1 \2|p" "$T/err")
    [ -n "$got" ] || fail "shot $1: no frequency and SNR in: $(grep "^shot $1/" "$T/err")"
    /usr/bin/python3 -c "import sys; f, s = map(float, '$got'.split());
sys.exit(0 if abs(f - $2) <= 3 and s >= 5 else 1)" \
        || fail "shot $1: '$got' (Hz, SNR), want about $2 Hz, SNR 5 or more"
done

# Runs $T/NAME.yaml; its progress lines must hold a line matching PATTERN.
expect_line() {
    $P run "$T/$1.yaml" --fast --out "$T/$1" >/dev/null 2>"$T/err.$1" \
        || fail "$1: $(cat "$T/err.$1")"
    grep -q "$2" "$T/err.$1" || fail "$1: $(cat "$T/err.$1")"
}

# Polarized only by the detection field: no line above the noise.
plan "2 uT" > "$T/none.yaml"
expect_line none '^shot 1/2 attempt 1 ok .*  no line above SNR 5, 85.15 Hz planned$'
# At zero field no Larmor line is planned: nothing is said to be planned.
plan "2 uT" "0 T, 0 T" "10 nT" > "$T/zero.yaml"
expect_line zero '^shot 1/2 attempt 1 ok .*  no line above SNR 5$'

# A failed attempt there shows the planned frequency as 0 Hz.
{ cat "$RIG"; echo "faults: [{shot: 1, kind: read_error}]"; } > "$T/faulty.yaml"
plan "2 uT" "0 T, 0 T" "10 nT" "$T/faulty.yaml" > "$T/zero-fault.yaml"
expect_line zero-fault '^shot 1/2 attempt 1 failed .*  0 Hz planned: '

# No line shown, in either run, is a mains harmonic (a multiple of 50 Hz).
cat "$T/err.weak" "$T/err.none" | sed -n 's|.*  \([0-9.]*\) Hz, SNR.*|\1|p' > "$T/shown"
/usr/bin/python3 -c "import sys
for f in map(float, open('$T/shown').read().split()):
    if abs(f / 50 - round(f / 50)) * 50 <= 3: sys.exit('a mains harmonic shown: %g Hz' % f)" \
    || fail "$(cat "$T/err.weak" "$T/err.none")"
exit 0
