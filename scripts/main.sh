#!/usr/bin/env bash
# The main job end to end on the built-in defaults; extra arguments go to `pkasite run`.
set -euo pipefail
source "$(dirname "${BASH_SOURCE[0]}")/setup.sh"
cd "$top"
[ -n "${PKASITE_MIRROR:-}" ] && echo "using data mirror $PKASITE_MIRROR" >&2
pkasite run "$@"
