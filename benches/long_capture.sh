#!/usr/bin/env bash
# Time and peak memory of analyze, noise, imd (and trend) on a 10-minute, 192 kHz, 24-bit stereo
# capture against a 10 s one at the same rate (targets: peak under 1 GiB, time at most 90x the
# 10 s file's), then the CPU over wall time of `notebook reanalyze` on the demo notebook
# (target: at least 1.5 on two cores). The captures are made on the fly (about 2 GB in $DIR).
#   benches/long_capture.sh [DIR]      (needs python3 with numpy, and GNU time)
set -euo pipefail
cd "$(dirname "$0")/.."
dir=${1:-$(mktemp -d)}
[ -n "${BIN:-}" ] || cargo build --release -q
bin=${BIN:-target/release/ampnote}
mkdir -p "$dir/long" "$dir/short"
[ -f "$dir/long/tone.wav" ] || python3 benches/make_long_capture.py "$dir/long" --seconds 600
[ -f "$dir/short/tone.wav" ] || python3 benches/make_long_capture.py "$dir/short" --seconds 10
measure() { # label, command...: wall s, peak RSS MiB
  local label=$1; shift
  /usr/bin/time -f "%e %M" -o "$dir/time.txt" "$@" > /dev/null 2> "$dir/err.txt" || {
    echo "$label: failed: $(tail -2 "$dir/err.txt")"; return; }
  read -r wall kb < "$dir/time.txt"
  printf '%-34s %8.2f s %8.0f MiB\n' "$label" "$wall" "$((kb / 1024))"
  echo "$wall" > "$dir/last_wall.txt"
}
for cmd in analyze noise imd trend; do
  file=tone.wav
  [ "$cmd" = noise ] && file=noise.wav
  [ "$cmd" = imd ] && file=twotone.wav
  $bin "$cmd" --help > /dev/null 2>&1 || { echo "$cmd: not in this build"; continue; }
  measure "$cmd 10 s" $bin "$cmd" "$dir/short/$file" --json
  short=$(cat "$dir/last_wall.txt")
  measure "$cmd 600 s" $bin "$cmd" "$dir/long/$file" --json
  long=$(cat "$dir/last_wall.txt")
  awk -v s="$short" -v l="$long" 'BEGIN { printf "  600 s over 10 s: %.0fx (60x is linear)\n", l / s }'
done
echo "== notebook reanalyze of the demo notebook (CPU time over wall time)"
nb="$dir/demo-notebook"
rm -rf "$nb"
$bin demo --out "$nb" > /dev/null 2>&1
/usr/bin/time -f "%e %U %S" -o "$dir/time.txt" $bin notebook reanalyze "$nb/notebook" > /dev/null 2>&1
read -r wall user sys < "$dir/time.txt"
awk -v w="$wall" -v u="$user" -v s="$sys" 'BEGIN { printf "reanalyze: %.2f s wall, %.2f s CPU, ratio %.2f\n", w, u + s, (u + s) / w }'
