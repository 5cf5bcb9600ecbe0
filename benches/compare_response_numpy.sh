#!/usr/bin/env bash
# Whole-process comparison: `ampnote response` against benches/response_numpy.py on the same
# 10 s, 96 kHz sweep and capture. Prints the median wall time of each over RUNS runs and the ratio.
# Needs python3 with numpy and scipy (pip install numpy scipy).
set -euo pipefail
cd "$(dirname "$0")/.."
RUNS=${RUNS:-9}
cargo build --release -q
[ -f bench-data/sweep-10s-96k-capture.wav ] || cargo run --release -q --example make_bench_sweep -- bench-data
CAP=bench-data/sweep-10s-96k-capture.wav
STIM=bench-data/sweep-10s-96k.wav
# The sweep's parameters for the numpy script, from ampnote's own description of the stimulus.
read -r F1 F2 L < <(python3 - "$STIM" <<'PY'
import json, struct, sys
b = open(sys.argv[1], "rb").read()
i = b.index(b"ampn")
n = struct.unpack("<I", b[i + 4:i + 8])[0]
d = json.loads(b[i + 8:i + 8 + n])
print(d["start_hz"], d["stop_hz"], d["rate_s"])
PY
)

source benches/timing.sh

a=$(median_ms ./target/release/ampnote response "$CAP" --stimulus "$STIM" --json)
p=$(median_ms python3 benches/response_numpy.py "$CAP" "$STIM" "$F1" "$F2" "$L")
echo "ampnote response:       ${a} ms (median of $RUNS)"
echo "numpy/scipy script:     ${p} ms (median of $RUNS)"
awk -v a="$a" -v p="$p" 'BEGIN {printf "ratio (numpy / ampnote): %.1fx\n", p / a}'
./target/release/ampnote response "$CAP" --stimulus "$STIM" --json 2>/dev/null > /tmp/ampnote-resp.json
python3 benches/response_numpy.py "$CAP" "$STIM" "$F1" "$F2" "$L" > /tmp/numpy-resp.json
python3 - <<'PY'
import json
a = json.load(open("/tmp/ampnote-resp.json"))
n = json.load(open("/tmp/numpy-resp.json"))
print(f"  latency ms   {a['latency_ms']:.4f} | {n['latency_ms']:.4f}")
print(f"  -3 dB low    {a['low_3db_hz']:.2f} | {n['low_3db_hz']:.2f} Hz (numpy: nearest point)")
print(f"  -3 dB high   {a['high_3db_hz']:.0f} | {n['high_3db_hz']:.0f} Hz")
PY
