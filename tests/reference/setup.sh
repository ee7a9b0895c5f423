#!/usr/bin/env bash
# Everything the tests need from the registries, once per machine; each
# script says what it fetches or installs and is safe to run again:
#   fetch-de421.sh     the JPL DE421 ephemeris (PyPI's skyfield-data wheel)
#   setup-smtp.sh      aiosmtpd in a venv, the alert tests' real SMTP server
#   setup-chromium.sh  Debian's chromium, for the page test
#   setup-systemd.sh   Debian's systemd, for systemd-analyze on deploy/
# Usage: bash tests/reference/setup.sh && cargo test
set -euo pipefail
here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
bash "$here/fetch-de421.sh"
bash "$here/setup-smtp.sh"
bash "$here/setup-chromium.sh"
bash "$here/setup-systemd.sh"
