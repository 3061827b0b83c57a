#!/usr/bin/env bash
# Install the Debian packages the tests need, each only when missing: UDUNITS-2 (CF checker), Chromium (report),
# chromedriver (the review page's browser test drives Chromium through it with Selenium).
set -euo pipefail
if ! ldconfig -p 2>/dev/null | grep -q libudunits2; then
    if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
    echo "installing libudunits2-0 (needed by the CF checker)"
    $SUDO apt-get update -qq
    DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq libudunits2-0 >/dev/null
fi
# Headless Chromium for the report's browser test (tests/report/test_browser.py), only when missing.
if ! command -v chromium >/dev/null 2>&1; then
    if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
    echo "installing chromium (needed by the report's browser test)"
    $SUDO apt-get update -qq
    DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq chromium >/dev/null
fi
# Debian's chromedriver for the review page's browser test (tests/review/test_browser.py), only when missing.
if ! command -v chromedriver >/dev/null 2>&1; then
    if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
    echo "installing chromium-driver (needed by the review page's browser test)"
    $SUDO apt-get update -qq
    DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq chromium-driver >/dev/null
fi
