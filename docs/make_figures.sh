#!/usr/bin/env bash
# Re-make the figures shown in README.md from the shipped (invented) example signals.
set -euo pipefail
cd "$(dirname "$0")/.."
ringdown analyze example_signals/bracket_tap.wav --plot docs > /dev/null
rm -f docs/bracket_tap_mode[2-9].png  # the README shows the overview and mode 1
ringdown analyze example_signals/switch_off.wav --plot docs > /dev/null
rm -f docs/switch_off_mode1.png  # the README shows the overview of the switched-off circuit
