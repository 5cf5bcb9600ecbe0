#!/usr/bin/env python3
"""Long bench captures for benches/long_capture.sh, written block by block (never whole in memory).

    python3 benches/make_long_capture.py OUT_DIR [--seconds 600] [--rate 192000]

Writes 24-bit stereo WAVs (stdlib `wave` plus numpy):
  tone.wav      997 Hz at -6 dBFS with H2 -50 dBc, H3 -60 dBc, 50 Hz hum -100 dBFS, noise -110 dBFS,
                the level drifting by -0.5 dB over the file (a warming amplifier)
  noise.wav     noise -100 dBFS with 50/100/150 Hz hum
  twotone.wav   60 Hz and 7 kHz, 4:1 (SMPTE), with a little cubic distortion
Invented bench data: for timing and memory only, not a reference.
"""
import argparse
import wave
import numpy as np

ap = argparse.ArgumentParser()
ap.add_argument("out")
ap.add_argument("--seconds", type=float, default=600.0)
ap.add_argument("--rate", type=int, default=192000)
a = ap.parse_args()
fs, n = a.rate, int(a.seconds * a.rate)
rng = np.random.default_rng(7)
block = fs  # one second at a time


def sine(f, t, dbfs, phase=0.0):
    # dBFS re a full-scale sine (AES17): a 0 dBFS sine has peak 1.
    return 10 ** (dbfs / 20) * np.sin(2 * np.pi * f * t + phase)


def noise_dbfs(dbfs, k):
    return 10 ** (dbfs / 20) / np.sqrt(2) * rng.standard_normal(k)


def write(name, make):
    with wave.open(f"{a.out}/{name}", "wb") as w:
        w.setnchannels(2)
        w.setsampwidth(3)
        w.setframerate(fs)
        for start in range(0, n, block):
            t = np.arange(start, min(n, start + block)) / fs
            x = make(t)
            q = np.clip(np.round(x * 2**23), -(2**23), 2**23 - 1).astype("<i4")
            st = np.stack([q, q], axis=1).reshape(-1)
            b = st.view(np.uint8).reshape(-1, 4)[:, :3].tobytes()
            w.writeframes(b)


def tone(t):
    drift = -0.5 * t / 600  # -0.5 dB over ten minutes, whatever the length
    fund = sine(997, t, -6 + drift)
    return (fund + sine(2 * 997, t, -56) + sine(3 * 997, t, -66) + sine(50, t, -100)
            + noise_dbfs(-110, len(t)))


def noise(t):
    return (noise_dbfs(-100, len(t)) + sine(50, t, -95) + sine(100, t, -105)
            + sine(150, t, -110))


def twotone(t):
    x = 0.5 * (0.8 * np.sin(2 * np.pi * 60 * t) + 0.2 * np.sin(2 * np.pi * 7000 * t))
    return x + 0.01 * x**3 + noise_dbfs(-110, len(t))


write("tone.wav", tone)
write("noise.wav", noise)
write("twotone.wav", twotone)
