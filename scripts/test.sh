#!/usr/bin/env bash
# Run the test suite in the project's virtual environment (created on first use).
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
source "$root/scripts/env.sh" test
cd "$root"
exec python -m pytest "$@"
