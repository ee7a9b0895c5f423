#!/usr/bin/env bash
# Makes sure a headless-capable Chromium is on the machine for the page test
# (tests/page_browser.rs), the way fetch-de421.sh puts the ephemeris in place.
#
# Source: Debian's `chromium` package (/usr/bin/chromium), installed with
# apt-get when missing. The test itself drives it over the DevTools protocol;
# nothing else (no chromedriver, no Node.js) is needed.
#
# Usage: bash tests/reference/setup-chromium.sh
# Safe to run again: it does nothing when a working chromium is found.
# Set PERIHELIX_CHROMIUM to use another binary (it is checked, not installed).
set -euo pipefail

works() {
    "$1" --headless --no-sandbox --disable-gpu --version >/dev/null 2>&1
}

if [[ -n "${PERIHELIX_CHROMIUM:-}" ]]; then
    if works "$PERIHELIX_CHROMIUM"; then
        echo "chromium from PERIHELIX_CHROMIUM: $("$PERIHELIX_CHROMIUM" --version)"
        exit 0
    fi
    echo "PERIHELIX_CHROMIUM=$PERIHELIX_CHROMIUM does not run" >&2
    exit 1
fi

for candidate in chromium chromium-browser; do
    if path="$(command -v "$candidate")" && works "$path"; then
        echo "chromium already in place: $path ($("$path" --version))"
        exit 0
    fi
done

how="Install Debian's chromium package (apt-get install chromium) or set PERIHELIX_CHROMIUM to a Chromium or Chrome binary."
bash "$(dirname "${BASH_SOURCE[0]}")/apt-install.sh" chromium chromium "$how"

if works /usr/bin/chromium; then
    echo "installed: $(/usr/bin/chromium --version)"
else
    echo "apt-get installed chromium but /usr/bin/chromium does not run. $how" >&2
    exit 1
fi
