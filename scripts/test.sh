#!/usr/bin/env bash
# Installs everything needed and runs the whole test suite (slow end-to-end tests included).
# The report test renders HTML in Debian's headless Chromium; it is installed here when missing.
set -euo pipefail
source "$(dirname "${BASH_SOURCE[0]}")/setup.sh"
cd "$top"
if [ ! -x /usr/bin/chromium ] && command -v apt-get >/dev/null 2>&1 && [ "$(id -u)" = 0 ]; then
  echo "installing Debian's chromium for the report rendering test" >&2
  apt-get update -qq >/dev/null && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null
fi
python -m pytest "$@"
