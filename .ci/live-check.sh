#!/usr/bin/env bash
# The live rig's end-to-end tests through a real audio server on a headless machine: JACK with
# its dummy backend (no sound card), ampnote's outputs patched to its inputs by --self-patch.
# Installs what the `live` feature needs (Debian packages), lints and builds with it, starts
# jackd, runs tests/live.rs, and stops jackd by its PID.
set -euo pipefail
cd "$(dirname "$0")/.."
need=()
for p in jackd2 libjack-jackd2-dev libasound2-dev pkg-config; do
  dpkg -s "$p" > /dev/null 2>&1 || need+=("$p")
done
if [ ${#need[@]} -gt 0 ]; then
  echo "== installing ${need[*]}"
  apt-get update -qq
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends "${need[@]}" > /dev/null
fi

echo "== cargo clippy --all-targets --features live -- -D warnings"
cargo clippy --all-targets --features live -- -D warnings
echo "== building the live tests"
cargo test --features live --test live --no-run

log=$(mktemp -t jackd.XXXXXX.log)
jackd --no-realtime -d dummy -r 48000 -p 1024 -C 2 -P 2 > "$log" 2>&1 < /dev/null &
pid=$!
stop_jack() {
  kill "$pid" 2> /dev/null || true
  # A stopped daemon can linger as a zombie: wait until it is gone or in state Z.
  for _ in $(seq 1 100); do
    [ -e "/proc/$pid" ] || break
    grep -q '^[0-9]* ([^)]*) Z' "/proc/$pid/stat" 2> /dev/null && break
    sleep 0.05
  done
}
trap stop_jack EXIT
for _ in $(seq 1 200); do
  jack_lsp > /dev/null 2>&1 && break
  sleep 0.05
done
jack_lsp > /dev/null 2>&1 || { echo "jackd did not come up:"; cat "$log"; exit 1; }
echo "== jackd up (PID $pid): cargo test --features live --test live"
cargo test --features live --test live -- --test-threads=1
echo "live check done"
