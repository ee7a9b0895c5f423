#!/usr/bin/env bash
# Installs one Debian package for the tests' setup scripts
# (setup-chromium.sh, setup-systemd.sh): with apt-get, as root or through
# password-less sudo; anything else fails with a message saying how to
# get the tool by hand.
#
# Usage: bash tests/reference/apt-install.sh PACKAGE TOOL HOW
#   PACKAGE  the Debian package
#   TOOL     what the tests miss, for the messages
#   HOW      how else to get it, appended to every failure
set -euo pipefail

package="$1"
tool="$2"
how="$3"

if ! command -v apt-get >/dev/null 2>&1; then
    echo "no $tool found and no apt-get to install it. $how" >&2
    exit 1
fi
sudo=()
if [[ "$(id -u)" != 0 ]]; then
    if command -v sudo >/dev/null 2>&1; then
        sudo=(sudo -n)
    else
        echo "no $tool found, and installing it needs root. $how" >&2
        exit 1
    fi
fi

echo "installing Debian's $package package for $tool (once per machine)"
export DEBIAN_FRONTEND=noninteractive
"${sudo[@]}" apt-get update -qq
"${sudo[@]}" apt-get install -y -qq --no-install-recommends "$package" >/dev/null
