#!/usr/bin/env bash
# Makes the Python venv that runs the tests' real SMTP server
# (tests/reference/smtp_server.py) at tests/reference/data/smtp-venv.
#
# Source: the PyPI package aiosmtpd 1.4.6 with its two dependencies, which
# it leaves unpinned, pinned here to what resolved for it (atpublic 9.0.0,
# attrs 26.1.0) so every clone runs the same server. Installed with the
# venv's own pip, so the system Python stays untouched.
# The venv lives under tests/reference/data/, which is never committed.
#
# Usage: bash tests/reference/setup-smtp.sh
# Safe to run again: it does nothing when the venv was finished and
# imports aiosmtpd 1.4.6; an unfinished, broken or different one is made
# anew.
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
venv="$here/data/smtp-venv"
python="$venv/bin/python"
# Written last; tests/common/smtp.rs looks for it before it starts a server.
marker="$venv/perihelix-ready"

package="aiosmtpd==1.4.6"
dependencies=("atpublic==9.0.0" "attrs==26.1.0")
expected_version="1.4.6"

installed_version() {
    "$python" - <<'PY' 2>/dev/null
import importlib.metadata
import aiosmtpd.controller  # the part smtp_server.py uses must import, too
print(importlib.metadata.version("aiosmtpd"))
PY
}

if [[ -f "$marker" ]] && [[ -x "$python" ]] && [[ "$(installed_version || true)" == "$expected_version" ]]; then
    echo "aiosmtpd $expected_version already in place: $venv"
    exit 0
fi

if [[ -e "$venv" ]]; then
    echo "existing $venv is unfinished or lacks $package; making it anew" >&2
fi

# Made in place (a venv records its own path in its scripts, so it cannot be
# built elsewhere and moved), and marked ready only once it imports: an
# interrupted run leaves no marker, and the next run starts over.
rm -rf "$venv"
mkdir -p "$here/data"
python3 -m venv "$venv"
"$python" -m pip install --quiet --disable-pip-version-check "$package" "${dependencies[@]}"

version="$(installed_version || true)"
if [[ "$version" != "$expected_version" ]]; then
    echo "the venv at $venv does not import aiosmtpd $expected_version (got '$version')" >&2
    exit 1
fi
echo "$package" >"$marker"
echo "wrote $venv (aiosmtpd $version)"
