#!/usr/bin/env bash
# Run the test suite in the project's virtual environment (created on first use).
# Usage: scripts/test.sh [--fast] [pytest args]   (--fast skips the tests marked slow: under a minute)
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
source "$root/scripts/env.sh" test
cd "$root"
if [ "${1:-}" = "--fast" ]; then
  shift
  exec python -m pytest -m "not slow" "$@"
fi
exec python -m pytest "$@"
