#!/usr/bin/env bash
# Run lintext's main job on the bundled, invented demo corpus (data/demo).
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
source "$root/scripts/env.sh"
cd "$root"
lintext stats data/demo/train.csv
