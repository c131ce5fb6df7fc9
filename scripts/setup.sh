#!/usr/bin/env bash
# Creates .venv (once) and installs pkasite with its test extras into it.
# Sourced by scripts/main.sh and scripts/test.sh; safe to run again.
set -euo pipefail
top=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
py=${PYTHON:-python3}
if [ ! -x "$top/.venv/bin/python" ]; then
  "$py" -m venv "$top/.venv"
fi
stamp="$top/.venv/.pkasite-installed"
if [ ! -f "$stamp" ] || [ "$top/pyproject.toml" -nt "$stamp" ] || [ "$top/scripts/constraints.txt" -nt "$stamp" ]; then
  "$top/.venv/bin/python" -m pip install --quiet --upgrade pip
  # constraints.txt pins the libraries that decide predicted values (see the file)
  "$top/.venv/bin/python" -m pip install --quiet -e "$top[test]" -c "$top/scripts/constraints.txt"
  touch "$stamp"
fi
# An offline mirror beside the checkout (as on CI) is used when no other is named.
if [ -z "${PKASITE_MIRROR:-}" ] && [ -d "$top/../shared/data" ]; then
  export PKASITE_MIRROR="$top/../shared/data"
fi
export PATH="$top/.venv/bin:$PATH"
