#!/usr/bin/env bash
# The circuit rig's tests against a real circuit simulator: installs Debian's ngspice when it is
# missing, lints with the `circuit` feature and runs its tests (tests/circuit.rs), which start
# ngspice as a child process for each case, then runs the demo with the example circuits.
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
# The demo with ngspice present predicts the example circuits and sets them against the
# measured labels: the report must show that table for both versions.
echo "== the demo with the example circuits predicted"
# The demo .ci/run already made is used when ngspice was there for it (its output then has the
# predicted tables);
# otherwise (ngspice installed just now, or this script run alone) the demo runs here.
if [ -n "${AMPNOTE_CI_DEMO:-}" ] && grep -q "Predicted (ngspice" "$AMPNOTE_CI_DEMO/demo.log" 2> /dev/null; then
  demo="$AMPNOTE_CI_DEMO"
else
  demo=$(mktemp -d)
  trap 'rm -rf "$demo"' EXIT
  cargo run --release -q -- demo --out "$demo/demo" > "$demo/demo.log"
fi
grep -q "Predicted against measured" "$demo/demo/report/report.html" || {
  echo "the demo's report has no predicted-against-measured table"; tail -20 "$demo/demo.log"; exit 1; }
for label in "stock, predicted against stock" "driver reworked, predicted against driver reworked"; do
  grep -q "$label" "$demo/demo/report/report.html" || { echo "the report lacks \"$label\""; exit 1; }
done
grep -q "power at 1 % THD" "$demo/demo.log" || { echo "the demo printed no predicted power"; exit 1; }
echo "circuit check done"
