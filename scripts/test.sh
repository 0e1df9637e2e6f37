#!/usr/bin/env bash
# Run the test suite in the project's virtual environment (created on first use).
# Usage: scripts/test.sh [--fast] [pytest args]   (--fast skips the tests marked slow: under a minute)
# LINTEXT_EXTRAS=test,cluster also installs Dask, so the cluster tests run (CI does; without it they skip).
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
source "$root/scripts/env.sh" "${LINTEXT_EXTRAS:-test}"
cd "$root"
if [ "${1:-}" = "--fast" ]; then
  shift
  exec python -m pytest -m "not slow" "$@"
fi
exec python -m pytest "$@"
