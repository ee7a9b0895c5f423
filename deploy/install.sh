#!/usr/bin/env bash
# Installs a release build of perihelix as a systemd service.
# Run from the repository root as root: bash deploy/install.sh
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --locked
install -Dm0755 target/release/perihelix /usr/bin/perihelix
install -Dm0644 deploy/perihelix.service /etc/systemd/system/perihelix.service
install -Dm0644 deploy/perihelix.sysusers /usr/lib/sysusers.d/perihelix.conf
install -Dm0644 deploy/perihelix.tmpfiles /usr/lib/tmpfiles.d/perihelix.conf
install -Dm0644 README.md /usr/share/doc/perihelix/README.md
systemd-sysusers /usr/lib/sysusers.d/perihelix.conf
systemd-tmpfiles --create /usr/lib/tmpfiles.d/perihelix.conf
if [ ! -e /etc/perihelix/config.toml ]; then
  install -Dm0640 -o root -g perihelix config/example.toml /etc/perihelix/config.toml
  install -Dm0640 -o root -g perihelix config/stations.toml /etc/perihelix/stations.toml
  echo "installed /etc/perihelix/config.toml from the example: edit it, then"
fi
/usr/bin/perihelix check-config /etc/perihelix/config.toml
systemctl daemon-reload
echo "start with: systemctl enable --now perihelix"
