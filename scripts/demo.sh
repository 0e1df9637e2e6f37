#!/usr/bin/env bash
# Run lintext's main job on the bundled, invented demo corpus (data/demo):
# train with early stopping on the dev split, evaluate on the test split, write the report.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
source "$root/scripts/env.sh" ""  # no extra (a bare `source` would hand it this script's arguments)
cd "$root"
out=${1:-runs/demo}
lintext stats data/demo/train.csv
lintext train data/demo/train.csv --dev data/demo/dev.csv --test data/demo/test.csv --out "$out"
lintext evaluate "$out" data/demo/test.csv
lintext predict "$out" data/demo/test.csv --top-labels 2 --min-probability 0.8 --out "$out/test-predictions.csv"
lintext explain "$out" --text "the meter reading on my last bill is wrong" --top 5
echo
echo "Results in $root/$out:"
echo "  report.html      the report: learning curves, feature frequency against update size, top and rare features,"
echo "                   calibration, routing by confidence and the most confident dev errors"
echo "  features.csv     one row per feature: document frequency, updates, sum of |change|, weight norm"
echo "  model.json, weights.npz, vocabulary.tsv   the model (lintext predict / evaluate read it)"
echo "  test-predictions.csv                      predictions for data/demo/test.csv (rows below probability 0.8 left for review)"
