#!/usr/bin/env bash
# Makes sure systemd's offline tools are on the machine for the deployment
# test (tests/deploy_unit.rs), the way setup-chromium.sh puts Chromium in
# place.
#
# Source: Debian's `systemd` package, which ships systemd-analyze,
# systemd-sysusers and systemd-tmpfiles; installed with apt-get when
# systemd-analyze is missing. The test only reads unit files under a
# staged --root (`systemd-analyze verify`, `systemd-analyze security
# --offline=true`), so systemd need not be running: a container without
# systemd as PID 1 is fine, and installing the package does not make it
# PID 1 or start anything.
#
# Usage: bash tests/reference/setup-systemd.sh
# Safe to run again: it does nothing when a working systemd-analyze is found.
set -euo pipefail

works() {
    "$1" --version >/dev/null 2>&1
}

if path="$(command -v systemd-analyze)" && works "$path"; then
    echo "systemd-analyze already in place: $path ($("$path" --version | head -n 1))"
    exit 0
fi

how="Install Debian's systemd package (apt-get install systemd), which ships systemd-analyze."
bash "$(dirname "${BASH_SOURCE[0]}")/apt-install.sh" systemd systemd-analyze "$how"

if works /usr/bin/systemd-analyze; then
    echo "installed: /usr/bin/systemd-analyze ($(/usr/bin/systemd-analyze --version | head -n 1))"
else
    echo "apt-get installed systemd but /usr/bin/systemd-analyze does not run. $how" >&2
    exit 1
fi
