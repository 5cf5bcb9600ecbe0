#!/usr/bin/env bash
# Opens the demo's report in headless Chromium (Debian's package): the page must load with no
# console errors and its charts must be in the DOM; a screenshot is kept in ci-artifacts/.
set -euo pipefail
cd "$(dirname "$0")/.."
if ! command -v chromium > /dev/null; then
  echo "== installing Debian's chromium for the report check"
  apt-get update -qq
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium > /dev/null
fi
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
# The demo .ci/run already made (AMPNOTE_CI_DEMO), or one of our own when run alone.
if [ -n "${AMPNOTE_CI_DEMO:-}" ] && [ -f "$AMPNOTE_CI_DEMO/demo/report/report.html" ]; then
  demo="$AMPNOTE_CI_DEMO/demo"
else
  cargo run --release -q -- demo --out "$work/demo" > /dev/null
  demo="$work/demo"
fi
page="file://$demo/report/report.html"
flags=(--headless --no-sandbox --disable-gpu --disable-quic --no-first-run --disable-background-networking
       --disable-component-update --disable-sync --user-data-dir="$work/profile")
mkdir -p ci-artifacts
timeout 120 chromium "${flags[@]}" --enable-logging=stderr --v=0 --window-size=900,3200 \
  --screenshot=ci-artifacts/report.png "$page" 2> "$work/chromium.log" > /dev/null || true
timeout 120 chromium "${flags[@]}" --dump-dom "$page" > "$work/dom.html" 2> /dev/null || true
if grep -i "CONSOLE" "$work/chromium.log" | grep -qi "error"; then
  echo "the report logged console errors:"; grep -i "CONSOLE" "$work/chromium.log"; exit 1
fi
svgs=$(grep -o "<svg" "$work/dom.html" | wc -l)
[ "$svgs" -ge 5 ] || { echo "the report shows $svgs charts, expected at least 5"; exit 1; }
for title in "THD against output power" "Frequency response" "Harmonic profile"; do
  grep -q "$title" "$work/dom.html" || { echo "the report lacks the chart \"$title\""; exit 1; }
done
[ -s ci-artifacts/report.png ] || { echo "no screenshot was written"; exit 1; }
# The page opens on the summary (before the bench and every chart).
summary=$(grep -bo "Summary: " "$work/dom.html" | head -1 | cut -d: -f1)
first_svg=$(grep -bo "<svg" "$work/dom.html" | head -1 | cut -d: -f1)
[ -n "$summary" ] && [ "$summary" -lt "$first_svg" ] || { echo "the report does not open on its summary"; exit 1; }
# Printed (Chromium's default paper): it must print, in a sane number of pages; the PDF is kept.
timeout 120 chromium "${flags[@]}" --no-pdf-header-footer --print-to-pdf=ci-artifacts/report.pdf "$page" \
  2> /dev/null > /dev/null || true
pages=$(python3 -c "import re,sys; print(len(re.findall(rb'/Type\s*/Page(?!s)', open(sys.argv[1],'rb').read())))" ci-artifacts/report.pdf 2>/dev/null || echo 0)
[ "$pages" -ge 1 ] && [ "$pages" -le 20 ] || { echo "the printed report has $pages pages (expected 1 to 20)"; exit 1; }
echo "report check: $svgs charts, opens on the summary, prints on $pages pages, no console errors, screenshot and PDF in ci-artifacts/"
