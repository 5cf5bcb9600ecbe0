#!/usr/bin/env bash
# CPU use of `ampnote watch` on a live rig at 96 kHz (target: under half of one core at 8
# readings a second or more). Starts a JACK server with the dummy backend at 96 kHz, watches a
# self-patched loopback for 10 s, prints ampnote's own count of readings per second and CPU, then
# stops the server. Needs jackd2 and a build with the live feature.
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release -q --features live
jackd --no-realtime -d dummy -r 96000 -p 1024 -C 2 -P 2 > /dev/null 2>&1 < /dev/null &
pid=$!
trap 'kill $pid 2> /dev/null || true' EXIT
for _ in $(seq 1 200); do jack_lsp > /dev/null 2>&1 && break; sleep 0.05; done
for refresh in 8 20; do
  echo "== --refresh $refresh"
  target/release/ampnote watch --rig card --host jack --self-patch --outputs 1 --inputs 1 \
    --rate 96000 --refresh "$refresh" --seconds 10 --captures-dir "$(mktemp -d)" 2>&1 > /dev/null | tail -1
done
