#!/usr/bin/env python3
"""Fuzz ampnote's untrusted inputs through the real binary: the stimulus description chunk, the
WAV header, and the other containers (FLAC, AIFF, RF64 from fixtures/formats: headers spoiled,
frames garbled, files cut). Each case writes one spoiled file, runs the command that reads it under a time
limit (20 s) and a memory limit (4 GiB of address space), and is counted as:

  ok      exit 0 (the spoiled value was harmless, or the field is not used)
  clear   exit 1 or 2 with an `error:` line and no panic
  panic   a Rust panic (exit 101 or "panicked" in the output)
  hang    the time limit passed
  crash   anything else (killed by a signal, out of memory)

Usage: python3 fuzz/fuzz_inputs.py [--cases N] [--seed S] [--bin target/release/ampnote]
Needs only the Python standard library. Prints the counts per input kind.
"""

import argparse
import json
import os
import random
import struct
import subprocess
import tempfile

HOSTILE_NUMBERS = [
    float("nan"), float("inf"), float("-inf"), 0.0, -1.0, 1e-300, 1e308, -1e308,
    7999.0, 24000.0, 30000.0, 1e9, 0.5, 2.0**63, -0.0,
]
HOSTILE_COUNTS = [0, 1, 2, 255, 65535, 2**32 - 1, 2**63 - 1, 10**12]


def run(cmd, timeout=20):
    pre = "ulimit -v 4194304; exec " + " ".join("'" + c.replace("'", "'\\''") + "'" for c in cmd)
    try:
        p = subprocess.run(["sh", "-c", pre], capture_output=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return "hang", ""
    out = (p.stdout + p.stderr).decode("utf-8", "replace")
    if "panicked" in out or p.returncode == 101:
        return "panic", out
    if p.returncode == 0:
        return "ok", out
    if p.returncode in (1, 2) and "error" in out:
        return "clear", out
    return "crash", out


def read_chunks(data):
    """RIFF chunks as (id, offset of body, length)."""
    out = []
    pos = 12
    while pos + 8 <= len(data):
        cid = data[pos:pos + 4]
        ln = struct.unpack("<I", data[pos + 4:pos + 8])[0]
        out.append((cid, pos + 8, ln))
        pos += 8 + ln + (ln & 1)
    return out


def with_description(data, desc_text):
    """The file with its `ampn` description chunk replaced (sizes fixed up)."""
    body = desc_text.encode()
    pieces = [data[:12]]
    for cid, off, ln in read_chunks(data):
        if cid == b"ampn":
            chunk = b"ampn" + struct.pack("<I", len(body)) + body + (b"\0" if len(body) & 1 else b"")
        else:
            chunk = data[off - 8:off + ln + (ln & 1)]
        pieces.append(chunk)
    out = b"".join(pieces)
    return out[:4] + struct.pack("<I", len(out) - 8) + out[8:]


def spoil_value(v, rng):
    if isinstance(v, bool):
        return not v
    if isinstance(v, int):
        return rng.choice(HOSTILE_COUNTS + [-1, -(2**40)])
    if isinstance(v, float):
        return rng.choice(HOSTILE_NUMBERS)
    if isinstance(v, str):
        return rng.choice(["", "x" * 1000, "sweep", "tone", "\u202e"])
    if isinstance(v, list):
        return rng.choice([[], v * 50, [None], v[:1]])
    return None


def spoil_json(d, rng):
    """Spoil one leaf (or a few) of the description."""
    paths = []

    def walk(x, path):
        if isinstance(x, dict):
            for k, v in x.items():
                walk(v, path + [k])
        elif isinstance(x, list) and x and isinstance(x[0], dict):
            for i, v in enumerate(x[:3]):
                walk(v, path + [i])
        else:
            paths.append(path)

    walk(d, [])
    for _ in range(rng.choice([1, 1, 1, 2, 3])):
        path = rng.choice(paths)
        tgt = d
        for k in path[:-1]:
            tgt = tgt[k]
        tgt[path[-1]] = spoil_value(tgt[path[-1]], rng)
    return d


def spoil_header(data, rng):
    """Spoil the fmt chunk's fields, its size, or add a second one, or cut the file."""
    chunks = read_chunks(data)
    fmt = next(c for c in chunks if c[0] == b"fmt ")
    off = fmt[1]
    b = bytearray(data)
    choice = rng.randrange(7)
    if choice == 0:  # a field of the fmt chunk
        field, size = rng.choice([(0, 2), (2, 2), (4, 4), (8, 4), (12, 2), (14, 2)])
        val = rng.choice([0, 1, 2, 3, 7, 8, 16, 17, 24, 32, 64, 0xFFFE, 0xFFFF, 2**31])
        b[off + field:off + field + size] = (val % (1 << (8 * size))).to_bytes(size, "little")
    elif choice == 1:  # the fmt size
        b[off - 4:off] = struct.pack("<I", rng.choice([0, 2, 14, 15, 18, 40, 2**31, 2**32 - 1]))
    elif choice == 2:  # a second fmt chunk
        dup = bytes(b[off - 8:off + fmt[2]])
        b = b[:off + fmt[2]] + dup + b[off + fmt[2]:]
    elif choice == 3:  # extensible tag in a short chunk
        b[off:off + 2] = struct.pack("<H", 0xFFFE)
    elif choice == 4:  # cut the file anywhere
        b = b[:rng.randrange(0, len(b))]
    elif choice == 5:  # a random byte in the first 200
        i = rng.randrange(0, min(200, len(b)))
        b[i] = rng.randrange(256)
    else:  # the data chunk's size
        data_chunk = next((c for c in chunks if c[0] == b"data"), None)
        if data_chunk:
            b[data_chunk[1] - 4:data_chunk[1]] = struct.pack(
                "<I", rng.choice([0, 1, 3, 2**31, 2**32 - 1]))
    return bytes(b)


def spoil_coded(data, rng):
    """A FLAC, AIFF or RF64 file with its header spoiled, a stretch garbled, or cut short."""
    b = bytearray(data)
    how = rng.randrange(4)
    if how == 0:  # header bytes
        for _ in range(rng.randint(1, 4)):
            b[rng.randrange(min(120, len(b)))] = rng.randrange(256)
    elif how == 1:  # a garbled stretch of audio
        at = rng.randrange(len(b))
        for k in range(at, min(len(b), at + rng.randint(1, 400))):
            b[k] = rng.randrange(256)
    elif how == 2:  # cut
        b = b[: rng.randrange(len(b))]
    else:  # a hostile 32-bit count somewhere in the header
        at = rng.randrange(0, min(100, len(b) - 4))
        b[at:at + 4] = struct.pack(">I", rng.choice(HOSTILE_COUNTS) & 0xFFFFFFFF)
    return bytes(b)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--cases", type=int, default=3000)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--bin", default="target/release/ampnote")
    ap.add_argument("--flags", action="store_true", help="also every numeric flag")
    ap.add_argument("--show-ok", action="store_true", help="print the flag cases that ran")
    a = ap.parse_args()
    rng = random.Random(a.seed)
    binary = os.path.abspath(a.bin)
    tmp = tempfile.mkdtemp(prefix="ampnote-fuzz-")
    base = {}
    for kind, args in [
        ("sweep", ["sweep", "--seconds", "1"]),
        ("twotone", ["twotone", "--seconds", "1"]),
        ("steps", ["steps", "--from", "-20", "--to", "-10", "--step", "5", "--dwell", "0.3",
                   "--settle", "0.1"]),
        ("tone", ["tone", "--seconds", "1"]),
        ("square", ["square", "--seconds", "1"]),
    ]:
        path = os.path.join(tmp, kind + ".wav")
        subprocess.run([binary, "generate"] + args + ["--out", path], check=True,
                       capture_output=True)
        base[kind] = open(path, "rb").read()
    command = {
        "sweep": lambda s, c: ["response", c, "--stimulus", s],
        "twotone": lambda s, c: ["imd", c, "--stimulus", s],
        "steps": lambda s, c: ["power", c, "--stimulus", s],
        "square": lambda s, c: ["square", c, "--stimulus", s],
    }
    here = os.path.dirname(os.path.abspath(__file__))
    coded = {}
    for name in ["tone-24.flac", "tone-24.aiff", "tone-24.rf64", "tone-16.flac"]:
        coded[name] = open(os.path.join(here, "..", "fixtures", "formats", name), "rb").read()
    counts = {"description": {}, "header": {}, "formats": {}}
    examples = {}
    for i in range(a.cases):
        if i % 3 == 2:
            name = rng.choice(list(coded))
            spoiled = spoil_coded(coded[name], rng)
            cap = os.path.join(tmp, "cap" + os.path.splitext(name)[1])
            open(cap, "wb").write(spoiled)
            sub = rng.choice([["analyze", cap], ["trend", cap, "--every", "0.1"], ["noise", cap]])
            outcome, out = run([binary] + sub)
            group = "formats"
        elif i % 2 == 0:
            kind = rng.choice(list(command))
            data = base[kind]
            desc_off = next(c for c in read_chunks(data) if c[0] == b"ampn")
            d = json.loads(data[desc_off[1]:desc_off[1] + desc_off[2]])
            text = json.dumps(spoil_json(d, rng))
            spoiled = with_description(data, text)
            stim = os.path.join(tmp, "stim.wav")
            open(stim, "wb").write(spoiled)
            cap = os.path.join(tmp, kind + ".wav")
            outcome, out = run([binary] + command[kind](stim, cap))
            group = "description"
        else:
            kind = "tone"
            spoiled = spoil_header(base[kind], rng)
            cap = os.path.join(tmp, "cap.wav")
            open(cap, "wb").write(spoiled)
            outcome, out = run([binary, "analyze", cap])
            group = "header"
        counts[group][outcome] = counts[group].get(outcome, 0) + 1
        if outcome in ("panic", "hang", "crash") and outcome not in examples:
            bad = os.path.join(tmp, f"{group}-{outcome}-{i}.wav")
            open(bad, "wb").write(spoiled)
            examples[outcome] = (bad, out[-400:])
    # Hostile numbers in every numeric flag of the measuring commands (on the simulated bench
    # or the generated files), one flag at a time.
    if a.flags:
        counts["flags"] = {}
        hostile = ["nan", "inf", "-inf", "0", "-1", "1e-300", "1e300", "-0", "7999", "1e9"]
        tone = os.path.join(tmp, "tone.wav")
        sw = os.path.join(tmp, "sweep.wav")
        st = os.path.join(tmp, "steps.wav")
        tt = os.path.join(tmp, "twotone.wav")
        caps = os.path.join(tmp, "caps")
        rig = ["--rig", "sim", "--channel", "1", "--captures-dir", caps]
        plans = [
            (["analyze"] + rig, ["--freq", "--level", "--seconds", "--rate", "--watts"]),
            (["analyze", tone], ["--harmonics", "--input-fs-vrms", "--attenuation", "--load-ohms"]),
            (["response"] + rig, ["--from", "--to", "--level", "--seconds", "--rate", "--smooth",
                                  "--points-per-octave", "--harmonics", "--reference"]),
            (["imd"] + rig, ["--level", "--seconds", "--rate"]),
            (["noise"] + rig, ["--seconds", "--rate"]),
            (["power"] + rig, ["--freq", "--from", "--step", "--stop-thd", "--max-w", "--rate",
                               "--dwell", "--settle"]),
            (["zout"] + rig, ["--rate", "--freq", "--level", "--watts"]),
            (["watch", "--rig", "sim", "--seconds", "0.3"], ["--freq", "--level", "--rate",
                                                              "--refresh", "--watts"]),
            (["generate", "sweep", "--out", sw + ".x"], ["--from", "--to", "--seconds", "--rate",
                                                         "--level", "--lead", "--tail", "--fade"]),
            (["generate", "steps", "--out", st + ".x"], ["--freq", "--from", "--to", "--step",
                                                         "--dwell", "--settle"]),
            (["generate", "twotone", "--out", tt + ".x"], ["--seconds", "--level"]),
            (["trend", tone], ["--every", "--harmonics"]),
            (["separation", tone, "--stimulus", sw], ["--driven"]),
            (["separation", "--rig", "sim", "--driven", "1", "--captures-dir", caps],
             ["--level", "--rate", "--watts", "--load-uf"]),
            (["separation", "--rig", "sim", "--captures-dir", caps], ["--driven"]),
            (["watch", "--rig", "sim", "--seconds", "0.3", "--json"], ["--refresh"]),
            (["square"] + rig, ["--freq", "--level", "--rate", "--load-uf"]),
            (["square", tone, "--stimulus", sw], ["--freq"]),
            (["generate", "square", "--out", tt + ".sq"], ["--freq", "--bandwidth", "--seconds",
                                                          "--level", "--rate"]),
        ]
        for base_cmd, flags in plans:
            for flag in flags:
                for v in hostile:
                    outcome, out = run([binary] + base_cmd + [flag + "=" + v], timeout=60)
                    counts["flags"][outcome] = counts["flags"].get(outcome, 0) + 1
                    if outcome in ("panic", "hang", "crash") or (a.show_ok and outcome == "ok"):
                        print(outcome, base_cmd, flag, v, out[-300:])
    for group, c in counts.items():
        total = sum(c.values())
        print(f"{group}: {total} tried, " + ", ".join(f"{k} {v}" for k, v in sorted(c.items())))
    for k, (path, out) in examples.items():
        print(f"first {k}: {path}\n{out}")


if __name__ == "__main__":
    main()
