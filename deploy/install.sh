#!/usr/bin/env bash
# Installs perihelix as a systemd service: the binary, the unit, the
# sysusers and tmpfiles snippets, the documentation, and an example
# configuration that is never written over an existing one.
#
# Usage (from anywhere in the repository):
#   bash deploy/install.sh                  as root: build, install, make the
#                                           account and its directories
#   bash deploy/install.sh --root DIR       stage everything under DIR instead
#                                           of / (packaging, tests); needs no root
#   bash deploy/install.sh --binary FILE    install FILE instead of building with
#                                           cargo build --release --locked
# DESTDIR=DIR works as --root DIR.
#
# Where things go (under DIR with --root):
#   /usr/bin/perihelix                          the binary (the unit's ExecStart)
#   /usr/lib/systemd/system/perihelix.service   the unit; change it with a drop-in
#                                               (systemctl edit perihelix), which a
#                                               reinstall leaves alone
#   /usr/lib/sysusers.d/perihelix.conf          the perihelix account
#   /usr/lib/tmpfiles.d/perihelix.conf          /var/lib/perihelix and its directories
#   /usr/share/doc/perihelix/                   README.md, operations.md, example.toml
#   /etc/perihelix/config.toml, stations.toml   copied from config/ only when absent
#
# With --root nothing outside DIR is touched: no account is made, no owner
# is set (the files belong to whoever ran the script) and systemd is not
# asked to reload; the script says so.
set -euo pipefail

usage() {
    sed -n '6,13p' "$0" | sed 's/^# \{0,1\}//'
}

root="${DESTDIR:-}"
binary=""
while [[ $# -gt 0 ]]; do
    case "$1" in
        --root)
            [[ $# -ge 2 ]] || { echo "install.sh: --root needs a directory" >&2; exit 2; }
            root="$2"
            shift 2
            ;;
        --binary)
            [[ $# -ge 2 ]] || { echo "install.sh: --binary needs a file" >&2; exit 2; }
            binary="$2"
            shift 2
            ;;
        -h | --help)
            usage
            exit 0
            ;;
        *)
            echo "install.sh: unknown argument '$1'" >&2
            usage >&2
            exit 2
            ;;
    esac
done

repo="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"

staged=false
if [[ -n "$root" ]]; then
    staged=true
    mkdir -p "$root"
    root="$(cd "$root" && pwd)"
    if [[ "$root" == / ]]; then
        staged=false
        root=""
    fi
fi
if ! $staged && [[ "$(id -u)" != 0 ]]; then
    echo "install.sh: installing into / needs root; run it with sudo, or stage with --root DIR" >&2
    exit 1
fi

if [[ -n "$binary" ]]; then
    if [[ ! -x "$binary" ]]; then
        echo "install.sh: --binary $binary is not an executable file" >&2
        exit 1
    fi
else
    if ! command -v cargo >/dev/null 2>&1; then
        echo "install.sh: no cargo here (root often has none): build as yourself with" >&2
        echo "  cargo build --release --locked" >&2
        echo "then run: sudo bash deploy/install.sh --binary target/release/perihelix" >&2
        exit 1
    fi
    echo "building the release binary (cargo build --release --locked)"
    (cd "$repo" && cargo build --release --locked)
    binary="$repo/target/release/perihelix"
fi

# Installs one file, replacing what was there: these are the project's own
# files, not the operator's.
put() {
    local source="$1" dest="$2" mode="$3"
    install -D -m "$mode" "$source" "$root$dest"
    echo "installed $root$dest"
}

put "$binary" /usr/bin/perihelix 0755
put "$repo/deploy/perihelix.service" /usr/lib/systemd/system/perihelix.service 0644
put "$repo/deploy/perihelix.sysusers" /usr/lib/sysusers.d/perihelix.conf 0644
put "$repo/deploy/perihelix.tmpfiles" /usr/lib/tmpfiles.d/perihelix.conf 0644
put "$repo/README.md" /usr/share/doc/perihelix/README.md 0644
put "$repo/docs/operations.md" /usr/share/doc/perihelix/operations.md 0644
# The current example beside the operator's configuration, to compare with
# after an upgrade.
put "$repo/config/example.toml" /usr/share/doc/perihelix/example.toml 0644

if [[ -e "$root/etc/systemd/system/perihelix.service" ]]; then
    echo "note: $root/etc/systemd/system/perihelix.service exists and hides the unit just installed;"
    echo "      move your changes into a drop-in (systemctl edit perihelix) and remove that file"
fi

# The account first: the configuration below is given to its group.
if $staged; then
    echo "staged under $root: skipped systemd-sysusers and systemd-tmpfiles (no account or directories made)"
else
    systemd-sysusers /usr/lib/sysusers.d/perihelix.conf
    echo "made the perihelix account (systemd-sysusers)"
    systemd-tmpfiles --create /usr/lib/tmpfiles.d/perihelix.conf
    echo "made /var/lib/perihelix and its directories (systemd-tmpfiles)"
fi

# The configuration is the operator's: copied from the repository only
# when absent, never overwritten. Readable by the service's group, not by
# everyone (it may name secrets' files and the API token's).
if $staged; then
    install -d -m 0750 "$root/etc/perihelix"
else
    install -d -m 0750 -o root -g perihelix /etc/perihelix
fi
keep_or_copy() {
    local source="$1" dest="$root/etc/perihelix/$2"
    if [[ -e "$dest" ]]; then
        echo "kept $dest (it exists; not overwritten)"
    elif $staged; then
        install -m 0640 "$source" "$dest"
        echo "installed $dest from $(basename "$source")"
    else
        install -m 0640 -o root -g perihelix "$source" "$dest"
        echo "installed $dest from $(basename "$source")"
    fi
}
keep_or_copy "$repo/config/example.toml" config.toml
keep_or_copy "$repo/config/stations.toml" stations.toml

config_ok=true
if "$root/usr/bin/perihelix" check-config "$root/etc/perihelix/config.toml"; then
    :
else
    config_ok=false
    echo "the configuration has problems (listed above): fix them before starting the service" >&2
fi

reloaded=false
running=false
if $staged; then
    echo "staged under $root: skipped systemctl daemon-reload"
elif [[ -d /run/systemd/system ]]; then
    systemctl daemon-reload
    reloaded=true
    echo "reloaded systemd (systemctl daemon-reload)"
    if systemctl --quiet is-active perihelix.service; then
        running=true
    fi
else
    echo "systemd is not running here (a container?): skipped systemctl daemon-reload"
fi

echo
echo "next steps:"
echo "  edit /etc/perihelix/config.toml ([directories], [stations], [alerts]; docs/operations.md)"
echo "  perihelix check-config /etc/perihelix/config.toml"
if $staged; then
    echo "  on the target machine, as root:"
    echo "    systemd-sysusers /usr/lib/sysusers.d/perihelix.conf"
    echo "    systemd-tmpfiles --create /usr/lib/tmpfiles.d/perihelix.conf"
    echo "    chown -R root:perihelix /etc/perihelix"
fi
$reloaded || echo "  systemctl daemon-reload"
if $running; then
    echo "  systemctl restart perihelix    (it is still running the binary it started with)"
else
    echo "  systemctl enable --now perihelix"
fi
echo "  systemctl status perihelix; journalctl -u perihelix -f"
$config_ok
