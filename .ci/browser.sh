#!/usr/bin/env bash
# Installs Debian's Chromium for the dashboard's browser tests (tests/e2e) when it is missing.
# Playwright drives this system binary (/usr/bin/chromium); `playwright install` is never run.
set -euo pipefail
if ! command -v chromium >/dev/null 2>&1 && [ ! -x /usr/bin/chromium ]; then
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -qq
    apt-get install -y -qq chromium
fi
chromium --version 2>/dev/null || /usr/bin/chromium --version
