#!/usr/bin/env bash
# Whole-process comparison: `ampnote analyze` against benches/analyze_numpy.py on the same
# 10 s, 96 kHz, 24-bit stereo capture. Prints the median wall time of each over RUNS runs, the
# ratio, ampnote's peak resident memory against the decoded samples, and the two programs'
# figures side by side. Needs python3 with numpy and scipy (pip install numpy scipy).
set -euo pipefail
cd "$(dirname "$0")/.."
RUNS=${RUNS:-15}
CAP=bench-data/tone-10s-96k-24bit-stereo.wav
cargo build --release -q
[ -f "$CAP" ] || cargo run --release -q --example make_bench_capture -- "$CAP"

source benches/timing.sh

a=$(median_ms ./target/release/ampnote analyze "$CAP" --json)
p=$(median_ms python3 benches/analyze_numpy.py "$CAP")
echo "ampnote analyze:        ${a} ms (median of $RUNS)"
echo "numpy/scipy script:     ${p} ms (median of $RUNS)"
awk -v a="$a" -v p="$p" 'BEGIN {printf "ratio (numpy / ampnote): %.1fx\n", p / a}'

rss_kb=$(/usr/bin/time -f '%M' ./target/release/ampnote analyze "$CAP" --json 2>&1 >/dev/null | tail -1)
decoded_kb=$(( 960000 * 2 * 8 / 1024 ))
awk -v r="$rss_kb" -v d="$decoded_kb" 'BEGIN {printf "ampnote peak RSS: %.1f MB = %.2fx the decoded samples (%.1f MB as f64)\n", r/1024, r/d, d/1024}'

echo
echo "figures (channel 1): ampnote | numpy script"
./target/release/ampnote analyze "$CAP" --json --channel 1 2>/dev/null > /tmp/ampnote-bench.json
python3 benches/analyze_numpy.py "$CAP" > /tmp/numpy-bench.json
python3 - <<'PY'
import json
a = json.load(open("/tmp/ampnote-bench.json"))["channels"][0]
n = json.load(open("/tmp/numpy-bench.json"))["channels"][0]
for k in ["fundamental_hz", "fundamental_dbfs", "thd_percent", "thdn_percent", "noise_dbfs"]:
    print(f"  {k:18s} {a[k]:.6f} | {n[k]:.6f}")
for ha, hn in zip(a["harmonics"][:3], n["harmonics"][:3]):
    print(f"  H{ha['order']} dBc / phase    {ha['level_dbc']:.3f} / {ha['phase_deg']:.1f} | {hn['level_dbc']:.3f} / {hn['phase_deg']:.1f}")
PY
