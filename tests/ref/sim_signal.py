# sim_signal.py: reference check of the simulated rig's signal. Reads the
# record test_sim wrote ($B/tests/sim-signal.json, B default build): the
# spectral peak must sit at the expected Larmor frequency within one bin, and
# a fit of the decaying line must give the expected amplitude and T2 within
# three standard deviations. Not for the physics of the expectation itself
# (test_sim computes it). Run from the repository root after test_sim:
# /usr/bin/python3 tests/ref/sim_signal.py. Exit 0 when both agree.
import json
import os
import sys

import numpy
import scipy.optimize

RECORD = os.path.join(os.environ.get("B") or "build", "tests", "sim-signal.json")


def main():
    if not os.path.exists(RECORD):
        print("FAIL: %s is missing; run test_sim first" % RECORD)
        return 1
    with open(RECORD) as f:
        doc = json.load(f)
    t = numpy.asarray(doc["time"], dtype=float)
    x = numpy.asarray(doc["samples"], dtype=float)
    rate, f0 = float(doc["rate"]), float(doc["frequency"])
    a0, t2, sigma = float(doc["amplitude"]), float(doc["t2"]), float(doc["noise_sigma"])
    if len(t) != len(x) or len(x) < 1000:
        print("FAIL: the record has %d times and %d samples" % (len(t), len(x)))
        return 1
    failures = 0

    # source: numpy (reference library), numpy.fft
    spectrum = numpy.abs(numpy.fft.rfft(x))
    freqs = numpy.fft.rfftfreq(len(x), d=1.0 / rate)
    spectrum[freqs < 1.0] = 0          # the DC bin says nothing of the line
    peak = freqs[numpy.argmax(spectrum)]
    width = rate / len(x)
    if abs(peak - f0) > width:
        print("FAIL: spectral peak at %.3f Hz, expected %.3f Hz within one bin (%.3f Hz)"
              % (peak, f0, width))
        failures += 1

    def line(tt, a, decay, f, phase):
        return a * numpy.exp(-tt / decay) * numpy.cos(2 * numpy.pi * f * tt + phase)

    # source: scipy (reference library), scipy.optimize.curve_fit
    p, cov = scipy.optimize.curve_fit(line, t, x, p0=[a0, t2, f0, 0.0],
                                      sigma=numpy.full(len(x), sigma), absolute_sigma=True)
    sd = numpy.sqrt(numpy.diag(cov))
    for name, got, want, s in (("amplitude", p[0], a0, sd[0]), ("T2", p[1], t2, sd[1])):
        if not abs(got - want) <= 3 * s:
            print("FAIL: fitted %s %.6g, expected %.6g within 3 sigma (%.3g)"
                  % (name, got, want, 3 * s))
            failures += 1
    print("sim_signal: peak %.3f Hz (expected %.3f), amplitude %.5g T (expected %.5g, "
          "sigma %.2g), T2 %.4f s (expected %.4f, sigma %.2g)"
          % (peak, f0, p[0], a0, sd[0], p[1], t2, sd[1]))
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
