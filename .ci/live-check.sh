#!/usr/bin/env bash
# The live rig's end-to-end tests through real audio servers on a headless machine (no sound
# card): JACK with its dummy backend (ampnote patches its own ports, --self-patch), then
# PulseAudio with a null sink (played to the sink, recorded from its monitor) through cpal's
# native PulseAudio client. Installs what the features need (Debian packages), lints and builds
# with them, starts each server, runs its tests, and stops it by its PID.
set -euo pipefail
cd "$(dirname "$0")/.."
need=()
for p in jackd2 libjack-jackd2-dev libasound2-dev pkg-config pulseaudio pulseaudio-utils; do
  dpkg -s "$p" > /dev/null 2>&1 || need+=("$p")
done
if [ ${#need[@]} -gt 0 ]; then
  echo "== installing ${need[*]}"
  apt-get update -qq
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends "${need[@]}" > /dev/null
fi

echo "== cargo check --features live; cargo clippy --all-targets --features pulseaudio -- -D warnings"
cargo check -q --features live
cargo clippy --all-targets --features pulseaudio -- -D warnings
echo "== building the live tests"
cargo test --features pulseaudio --test live --test live_pulse --no-run

# Stop a daemon by PID: it can linger as a zombie here, so wait until it is gone or in state Z
# (rather than trusting kill -0).
stop_pid() {
  kill "$1" 2> /dev/null || true
  for _ in $(seq 1 100); do
    [ -e "/proc/$1" ] || break
    grep -q '^[0-9]* ([^)]*) Z' "/proc/$1/stat" 2> /dev/null && break
    sleep 0.05
  done
}
wait_for() {
  for _ in $(seq 1 200); do "$@" > /dev/null 2>&1 && return 0; sleep 0.05; done
  return 1
}
pids=()
trap 'for p in "${pids[@]}"; do stop_pid "$p"; done' EXIT

log=$(mktemp -t jackd.XXXXXX.log)
jackd --no-realtime -d dummy -r 48000 -p 1024 -C 2 -P 2 > "$log" 2>&1 < /dev/null &
jack_pid=$!
pids+=("$jack_pid")
wait_for jack_lsp || { echo "jackd did not come up:"; cat "$log"; exit 1; }
echo "== jackd up (PID $jack_pid): cargo test --features pulseaudio --test live"
cargo test --features pulseaudio --test live -- --test-threads=1
stop_pid "$jack_pid"

export XDG_RUNTIME_DIR
XDG_RUNTIME_DIR=$(mktemp -d -t ampnote-pulse.XXXXXX)
chmod 700 "$XDG_RUNTIME_DIR"
log=$(mktemp -t pulse.XXXXXX.log)
pulseaudio -n --daemonize=no --exit-idle-time=-1 --disallow-exit --log-target=stderr \
  -L module-native-protocol-unix \
  -L "module-null-sink sink_name=loop rate=48000 format=float32le channels=2" > "$log" 2>&1 < /dev/null &
pulse_pid=$!
pids+=("$pulse_pid")
wait_for pactl info || { echo "pulseaudio did not come up:"; cat "$log"; exit 1; }
echo "== pulseaudio up (PID $pulse_pid): cargo test --features pulseaudio --test live_pulse"
cargo test --features pulseaudio --test live_pulse -- --test-threads=1
echo "live check done"
