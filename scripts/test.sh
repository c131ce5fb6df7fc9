#!/usr/bin/env bash
# Installs everything needed and runs the whole test suite (slow end-to-end tests included).
# The report test renders HTML in Debian's headless Chromium and the Spark test needs Java 17; both
# are installed here from Debian's packages when missing.
set -euo pipefail
source "$(dirname "${BASH_SOURCE[0]}")/setup.sh"
cd "$top"
if [ ! -x /usr/bin/chromium ] && command -v apt-get >/dev/null 2>&1 && [ "$(id -u)" = 0 ]; then
  echo "installing Debian's chromium for the report rendering test" >&2
  apt-get update -qq >/dev/null && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null
fi
# The Spark engine test needs Java 17 or newer: Debian's headless runtime is installed when missing.
if ! java -version 2>&1 | grep -Eq 'version "(1[7-9]|[2-9][0-9])'; then
  if command -v apt-get >/dev/null 2>&1 && [ "$(id -u)" = 0 ]; then
    echo "installing Debian's openjdk-17-jre-headless for the Spark test" >&2
    apt-get update -qq >/dev/null && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq openjdk-17-jre-headless >/dev/null
  fi
fi
python -m pytest "$@"
