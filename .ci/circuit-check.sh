#!/usr/bin/env bash
# The circuit rig's tests against a real circuit simulator: installs Debian's ngspice when it is
# missing, lints with the `circuit` feature and runs its tests (tests/circuit.rs), which start
# ngspice as a child process for each case.
set -euo pipefail
cd "$(dirname "$0")/.."
if ! command -v ngspice > /dev/null; then
  echo "== installing Debian's ngspice"
  apt-get update -qq
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends ngspice > /dev/null
fi
echo "== $(ngspice --version 2> /dev/null | grep -m1 -o 'ngspice-[0-9.]*' || echo ngspice)"
echo "== cargo clippy --all-targets --features circuit -- -D warnings"
cargo clippy --all-targets --features circuit -- -D warnings
echo "== cargo test --features circuit --test circuit"
cargo test --features circuit --test circuit
echo "circuit check done"
