#!/usr/bin/env bash
# Run lintext's main job on the bundled, invented demo corpus (data/demo):
# train with early stopping on the dev split, evaluate on the test split, write the report.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
source "$root/scripts/env.sh"
cd "$root"
out=${1:-runs/demo}
lintext stats data/demo/train.csv
lintext train data/demo/train.csv --dev data/demo/dev.csv --test data/demo/test.csv --out "$out"
lintext evaluate "$out" data/demo/test.csv
lintext predict "$out" data/demo/test.csv --top 2 --out "$out/test-predictions.csv"
echo
echo "Results: model directory $root/$out (model.json, weights.npz, vocabulary.tsv),"
echo "test-set predictions in $out/test-predictions.csv."
