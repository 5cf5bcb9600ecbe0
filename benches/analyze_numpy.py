#!/usr/bin/env python3
"""The steady-tone analysis as a user would write it with numpy and scipy, for the whole-process
speed comparison with `ampnote analyze` (benches/compare_numpy.sh).

Same choices as ampnote: the 7-term Blackman-Harris window over the whole capture (one rfft per
channel), harmonics H2..H10, mains lines 50/60 Hz x 1..4, band 20 Hz - 20 kHz, THD_F, AES17
THD+N, noise with every line removed. Lines are measured the usual hand-written way: the power in
the main-lobe bins around each line (window power-normalised), the frequency by parabolic
interpolation of the log spectrum, the phase from the bin nearest each harmonic.

Usage: python3 benches/analyze_numpy.py CAPTURE.wav   (prints JSON)
"""
import json
import sys

import numpy as np
from scipy.io import wavfile

BH7 = [0.27105140069342, 0.43329793923448, 0.21812299954311, 0.06592544638803,
       0.01081174209837, 0.00077658482522, 0.00001388721735]
HALF = 8  # main-lobe half-width (7 bins) plus one


def window(n):
    k = np.arange(n) * (2 * np.pi / n)
    w = np.zeros(n)
    for m, a in enumerate(BH7):
        w += (-1) ** m * a * np.cos(m * k)
    return w


def line_power(p, k):
    k = int(round(k))
    return float(np.sum(p[max(k - HALF, 0):k + HALF + 1])), slice(max(k - HALF, 0), k + HALF + 1)


def analyze(x, fs):
    n = len(x)
    x = x - x.mean()
    w = window(n)
    spec = np.fft.rfft(x * w)
    p = 2 * np.abs(spec) ** 2 / (n * np.sum(w * w))
    bin_hz = fs / n
    lo, hi = 20.0, min(20000.0, fs / 2)
    kmin, kmax = 2 * HALF, len(p) - HALF - 1
    k0 = kmin + int(np.argmax(p[kmin:kmax]))
    a, b, c = np.log(p[k0 - 1:k0 + 2])
    f0 = (k0 + 0.5 * (a - c) / (a - 2 * b + c)) * bin_hz
    p1, s1 = line_power(p, f0 / bin_hz)
    mask = np.zeros(len(p), dtype=bool)
    mask[s1] = True
    ph1 = np.angle(spec[int(round(f0 / bin_hz))])
    harmonics = []
    hp = 0.0
    for order in range(2, 11):
        fk = order * f0
        if fk / bin_hz > kmax:
            break
        ph, sl = line_power(p, fk / bin_hz)
        mask[sl] = True
        if lo <= fk <= hi:
            hp += ph
        phase = np.degrees(np.angle(spec[int(round(fk / bin_hz))]) + np.pi / 2 - order * (ph1 + np.pi / 2))
        harmonics.append({"order": order, "frequency_hz": fk, "level_dbc": 10 * np.log10(ph / p1),
                          "phase_deg": float((phase + 180) % 360 - 180)})
    best = None
    for mains in (50.0, 60.0):
        lines = [(mains * k,) + line_power(p, mains * k / bin_hz) for k in range(1, 5)]
        total = sum(l[1] for l in lines)
        if best is None or total > best[0]:
            best = (total, lines)
    hum = []
    for fh, ph, sl in best[1]:
        mask[sl] = True
        hum.append({"frequency_hz": fh, "level_dbc": 10 * np.log10(ph / p1)})
    f = np.arange(len(p)) * bin_hz
    band = (f >= lo) & (f <= hi)
    total = np.sum(p[band])
    thdn = np.sqrt((total - p1) / total)
    noise = np.sum(p[band & ~mask])
    return {
        "fundamental_hz": f0, "fundamental_dbfs": 10 * np.log10(p1 / 0.5),
        "thd_percent": 100 * np.sqrt(hp / p1), "thdn_percent": 100 * thdn,
        "noise_dbfs": 10 * np.log10(noise / 0.5), "harmonics": harmonics, "hum": hum,
    }


def main():
    fs, data = wavfile.read(sys.argv[1])
    if data.dtype == np.int16:
        x = data.astype(np.float64) / 32768
    elif data.dtype == np.int32:
        x = data.astype(np.float64) / 2**31  # scipy returns 24-bit data left-justified in int32
    else:
        x = data.astype(np.float64)
    if x.ndim == 1:
        x = x[:, None]
    out = [dict(channel=c + 1, **analyze(x[:, c], fs)) for c in range(x.shape[1])]
    print(json.dumps({"sample_rate_hz": fs, "channels": out}, indent=1, default=float))


if __name__ == "__main__":
    main()
