#!/usr/bin/env bash
# Install the Debian library the CF checker needs (UDUNITS-2), only when missing.
set -euo pipefail
if ! ldconfig -p 2>/dev/null | grep -q libudunits2; then
    if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
    echo "installing libudunits2-0 (needed by the CF checker)"
    $SUDO apt-get update -qq
    DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq libudunits2-0 >/dev/null
fi
