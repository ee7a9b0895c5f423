#!/usr/bin/env bash
# Puts the JPL DE421 planetary ephemeris (SPK/DAF binary) at
# tests/reference/data/de421.bsp, where the ephemeris tests look for it.
#
# Source: the PyPI package skyfield-data 7.0.0, which carries de421.bsp.
# It is fetched with pip (no other tool needed) and unpacked with Python's
# zipfile module. The file is large (16.8 MB) and is never committed.
#
# Usage: bash tests/reference/fetch-de421.sh
# Safe to run again: it does nothing when the file is already in place and
# matches the expected size and SHA-256.
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
dest_dir="$here/data"
dest="$dest_dir/de421.bsp"

package="skyfield-data==7.0.0"
member="skyfield_data/data/de421.bsp"
# Size and digest as seen in skyfield_data-7.0.0-py2.py3-none-any.whl.
expected_size=16788480
expected_sha256="a20a7139da04cbc462454634918e9a9ca69127044e2cc9d4f9c16e238d2deedc"

sha256_of() {
    python3 - "$1" <<'PY'
import hashlib, sys
h = hashlib.sha256()
with open(sys.argv[1], "rb") as f:
    for block in iter(lambda: f.read(1 << 20), b""):
        h.update(block)
print(h.hexdigest())
PY
}

if [[ -f "$dest" ]]; then
    size="$(wc -c <"$dest" | tr -d ' ')"
    if [[ "$size" == "$expected_size" ]] && [[ "$(sha256_of "$dest")" == "$expected_sha256" ]]; then
        echo "de421.bsp already in place: $dest"
        exit 0
    fi
    echo "existing $dest has the wrong size or digest; fetching it again" >&2
fi

tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT

python3 -m pip download --quiet --no-deps --only-binary=:all: -d "$tmp" "$package"

wheel="$(find "$tmp" -maxdepth 1 -name 'skyfield_data-*.whl' | head -n 1)"
if [[ -z "$wheel" ]]; then
    echo "pip download of $package produced no wheel in $tmp" >&2
    exit 1
fi

mkdir -p "$dest_dir"
python3 - "$wheel" "$member" "$tmp/de421.bsp" <<'PY'
import shutil, sys, zipfile
wheel, member, out = sys.argv[1:4]
with zipfile.ZipFile(wheel) as z, z.open(member) as src, open(out, "wb") as dst:
    shutil.copyfileobj(src, dst)
PY

size="$(wc -c <"$tmp/de421.bsp" | tr -d ' ')"
digest="$(sha256_of "$tmp/de421.bsp")"
if [[ "$size" != "$expected_size" || "$digest" != "$expected_sha256" ]]; then
    echo "unexpected de421.bsp from $package: size $size, sha256 $digest" >&2
    echo "expected size $expected_size, sha256 $expected_sha256" >&2
    exit 1
fi

# Move into place only once verified, so a failed run never leaves a bad file.
mv "$tmp/de421.bsp" "$dest"
echo "wrote $dest"
