# bench/analysis_ref.py RUN N: the per-shot pipeline of bench/analysis done
# the way a lab script would, with h5py, numpy and scipy, on the first N
# records of RUN: window from 2 ms, DC removal, receiver sign, 50 Hz comb
# removed by least squares at a fundamental refined with minimize_scalar,
# the spectrum (numpy.fft), the peaks above 5 times the noise, a damped
# cosine fitted per peak with scipy's curve_fit, SNR. Prints the seconds it
# took and how many records had a line. Not a test.
import sys
import time

import h5py
import numpy as np
from scipy.optimize import curve_fit, minimize_scalar

WINDOW_FROM = 2e-3
MAINS = 50.0


def design(t, f, rate):
    nh = min(32, int(0.45 * rate / f))
    cols = []
    for h in range(1, nh + 1):
        cols.append(np.cos(2 * np.pi * h * f * t))
        cols.append(np.sin(2 * np.pi * h * f * t))
    return np.array(cols).T


def remove_mains(y, t, rate):
    # The fundamental refined on the first five harmonics (cheap), then the
    # whole comb fitted and subtracted at it.
    def unexplained(f):
        a = design(t, f, rate)[:, :10]
        coef, res, _, _ = np.linalg.lstsq(a, y, rcond=None)
        return float(res[0]) if len(res) else float(np.sum((y - a @ coef) ** 2))
    best = minimize_scalar(unexplained, bounds=(MAINS - 0.5, MAINS + 0.5), method="bounded",
                           options={"xatol": 1e-4})
    a = design(t, best.x, rate)
    coef = np.linalg.lstsq(a, y, rcond=None)[0]
    return y - a @ coef, best.x


def model(t, a, f, phi, w):
    return a * np.exp(-np.pi * w * t) * np.cos(2 * np.pi * f * t + phi)


def reduce(path):
    with h5py.File(path, "r") as h:
        d = h["signal/sensor"]
        rate, t0, sign = d.attrs["sample_rate"], d.attrs["t0"], d.attrs["receiver_sign"]
        y = d[:].astype(np.float64)
        end = h["pulse"].attrs["end"]
    first = int(round(WINDOW_FROM * rate))
    y = sign * (y[first:] - y[first:].mean())
    t = (t0 + first / rate - end) + np.arange(len(y)) / rate
    y, fm = remove_mains(y, t, rate)
    spec = np.fft.rfft(y) * 2 / len(y)
    mag = np.abs(spec)
    df = rate / len(y)
    freqs = np.arange(len(mag)) * df
    noise = np.sqrt(np.mean(mag[3:] ** 2))
    lines = []
    for k in np.argsort(mag)[::-1][:8]:
        if k < 3 or mag[k] < 5 * noise or any(abs(freqs[k] - h * fm) < 3 * df for h in range(1, 33)):
            continue
        p0 = [mag[k], freqs[k], np.angle(spec[k]), 2 * df]
        try:
            p, cov = curve_fit(model, t, y, p0=p0, maxfev=2000)
            lines.append((p, np.sqrt(np.diag(cov))))
        except RuntimeError:
            pass
        break
    snr = [abs(p[0]) / noise for p, _ in lines]
    return len(lines) > 0, snr


def main():
    run, n = sys.argv[1], int(sys.argv[2])
    t0 = time.perf_counter()
    with_line = 0
    for k in range(1, n + 1):
        ok, _ = reduce("%s/records/%06d.h5" % (run, k))
        with_line += ok
    print("%.6f %d" % (time.perf_counter() - t0, with_line))


if __name__ == "__main__":
    main()
