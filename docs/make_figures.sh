#!/usr/bin/env bash
# Re-make the figures shown in README.md from the shipped (invented) example signals.
# Needs ringdown on PATH (or RINGDOWN=/path/to/ringdown); the printed check report page also needs
# chromium and poppler-utils (pdftoppm), as .ci/run installs them.
set -euo pipefail
cd "$(dirname "$0")/.."
RINGDOWN=$(command -v "${RINGDOWN:-ringdown}")
"$RINGDOWN" analyze example_signals/bracket_tap.wav --plot docs > /dev/null
rm -f docs/bracket_tap_mode[2-9].png  # the README shows the overview and mode 1
"$RINGDOWN" analyze example_signals/switch_off.wav --plot docs > /dev/null
rm -f docs/switch_off_mode1.png  # the README shows the overview of the switched-off circuit

# a check report of three line parts, printed to PDF by headless Chromium; its first page as PNG
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
line=$PWD/example_signals/line
(cd "$tmp" && "$RINGDOWN" limits learn "$line"/good_0*.wav -o limits.toml 2> /dev/null > /dev/null)
(cd "$tmp" && "$RINGDOWN" check --limits limits.toml --db h.sqlite --report check.html \
  --title "Gear blank end-of-line check" --serial "LOT 2026-117" --station EOL-2 --operator "A. Tester" \
  --notes "Invented demo data: example_signals/line, tapped on the fixture, microphone 20 mm above." \
  "$line/crack.wav" "$line/good_warm.wav" "$line/good_01.wav" > /dev/null) || true  # exit 1: the crack fails
browser=$(command -v chromium || command -v chromium-browser || command -v google-chrome)
"$browser" --headless --no-sandbox --disable-gpu --no-first-run --disable-background-networking \
  --disable-component-update --disable-sync --disable-dev-shm-usage --user-data-dir="$tmp/profile" \
  --no-pdf-header-footer --print-to-pdf="$tmp/check.pdf" "file://$tmp/check.html" 2> /dev/null
pdftoppm -r 70 -f 1 -l 1 -png -singlefile "$tmp/check.pdf" docs/check_report_page1
