#!/usr/bin/env bash
# Run lintext's main job on the bundled, invented demo corpus (data/demo):
# train with early stopping on the dev split, evaluate on the test split, write the report.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
source "$root/scripts/env.sh" ""  # no extra (a bare `source` would hand it this script's arguments)
cd "$root"
out=${1:-runs/demo}          # a folder of results: the model in $out/model, predictions beside it
model=$out/model
lintext stats data/demo/train.csv
lintext train data/demo/train.csv --dev data/demo/dev.csv --test data/demo/test.csv --out "$model"
lintext evaluate "$model" data/demo/test.csv
lintext predict "$model" data/demo/test.csv --top-labels 2 --min-probability 0.8 --out "$out/test-predictions.csv"
lintext explain "$model" --text "the meter reading on my last bill is wrong" --top 5
echo
case "$out" in /*) shown=$out ;; *) shown=$root/$out ;; esac
echo "Results in $shown:"
echo "  model/report.html  the report: learning curves, feature frequency against update size, top and rare features,"
echo "                     calibration, routing by confidence and the most confident dev errors"
echo "  model/features.csv one row per feature: document frequency, updates, sum of |change|, weight norm"
echo "  model/             the model directory: model.json, weights.npz, vocabulary.tsv (lintext predict / evaluate read it)"
echo "  test-predictions.csv predictions for data/demo/test.csv (rows below probability 0.8 left for review)"
