#!/usr/bin/env bash
# Installs what the test suite needs beyond the Rust toolchain: Debian's Chromium, which the
# browser test uses to open the generated report from disk. Safe to run again.
set -euo pipefail
if ! command -v chromium >/dev/null 2>&1; then
    SUDO=""
    [ "$(id -u)" -eq 0 ] || SUDO="sudo"
    $SUDO apt-get update -qq
    DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq chromium >/dev/null
fi
chromium --version
