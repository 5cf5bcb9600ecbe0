#!/usr/bin/env python3
"""The swept-sine response as a user would write it with numpy and scipy, for the whole-process
speed comparison with `ampnote response` (benches/compare_response_numpy.sh).

Same method as ampnote: spectral division of the capture by the stimulus (regularised, band
limited to the sweep), the linear impulse response windowed around its peak, the harmonic
responses L ln n earlier (Farina 2000; synchronized sweep, Novak et al. 2015), each transformed
at a 0.25 Hz resolution; magnitude re 1 kHz at 24 points per octave, -3 dB points, H2..H5 vs
frequency. The sweep parameters are passed on the command line (no description parsing).

Usage: python3 benches/response_numpy.py CAPTURE.wav SWEEP.wav F1 F2 L   (prints JSON)
"""
import json
import sys

import numpy as np
from scipy import fft as sfft
from scipy.io import wavfile


def read(path):
    fs, d = wavfile.read(path)
    if d.dtype == np.int32:
        x = d.astype(np.float64) / 2**31
    elif d.dtype == np.int16:
        x = d.astype(np.float64) / 32768
    else:
        x = d.astype(np.float64)
    return fs, (x if x.ndim == 1 else x[:, 0])


def main():
    cap_path, stim_path = sys.argv[1], sys.argv[2]
    f1, f2, L = float(sys.argv[3]), float(sys.argv[4]), float(sys.argv[5])
    fs, y = read(cap_path)
    _, x = read(stim_path)
    nmax = 5
    m = sfft.next_fast_len(len(x) + len(y) + int(L * np.log(nmax + 1) * fs) + 16, real=True)
    X = sfft.rfft(x, m)
    Y = sfft.rfft(y, m)
    f = np.arange(len(X)) * fs / m
    band = (f >= f1 / 4) & (f <= min(f2 * 2 ** (1 / 6), fs / 2))
    H = np.where(band, Y * np.conj(X) / (np.abs(X) ** 2 + 1e-14 * np.max(np.abs(X) ** 2)), 0)
    h = sfft.irfft(H, m)
    peak = int(np.argmax(np.abs(h)))
    nf = sfft.next_fast_len(int(fs / 0.25), real=True)

    def cut(centre, pre, post):
        idx = (np.arange(-int(pre), int(post) + 1) + int(centre)) % m
        w = np.ones(len(idx))
        w[: int(pre)] = 0.5 - 0.5 * np.cos(np.pi * np.arange(int(pre)) / max(int(pre), 1))
        fall = max(int(post) // 5, 1)
        w[-fall:] = 0.5 + 0.5 * np.cos(np.pi * np.arange(fall) / fall)
        buf = np.zeros(nf)
        seg = h[idx] * w
        buf[: int(post) + 1] = seg[int(pre):]
        buf[nf - int(pre):] = seg[: int(pre)]
        return sfft.rfft(buf)

    gap = lambda n: L * np.log((n + 1) / n) * fs
    g1 = cut(peak, min(0.5 * gap(1), 0.005 * fs), 0.5 * fs)
    gn = {n: cut(peak - L * np.log(n) * fs, 0.5 * gap(n), 0.5 * gap(n - 1)) for n in range(2, nmax + 1)}
    pts = f1 * 2 ** (np.arange(int(np.log2(f2 / f1) * 24) + 1) / 24)
    k = np.round(pts * nf / fs).astype(int)
    ref = np.abs(g1[int(round(1000 * nf / fs))])
    mag = 20 * np.log10(np.abs(g1[k]) / ref)
    harm = {}
    for n in range(2, nmax + 1):
        ok = n * pts <= f2
        kn = np.round(n * pts[ok] * nf / fs).astype(int)
        harm[n] = (20 * np.log10(np.abs(gn[n][kn]) / np.abs(g1[k[ok]]))).tolist()
    above = np.where(mag > -3)[0]
    print(json.dumps({
        "latency_ms": peak / fs * 1000,
        "low_3db_hz": float(pts[above[0]]), "high_3db_hz": float(pts[above[-1]]),
        "points": [{"frequency_hz": float(a), "magnitude_db": float(b)} for a, b in zip(pts, mag)],
        "harmonics": {str(n): v for n, v in harm.items()},
    }))


if __name__ == "__main__":
    main()
