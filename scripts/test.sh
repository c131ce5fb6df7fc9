#!/usr/bin/env bash
# Installs everything needed and runs the whole test suite (slow end-to-end tests included).
set -euo pipefail
source "$(dirname "${BASH_SOURCE[0]}")/setup.sh"
cd "$top"
python -m pytest "$@"
