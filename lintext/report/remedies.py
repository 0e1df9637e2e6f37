"""The report's account of the remedies for rare features: which were on, and what they did.

A *remedy* is a training option that changes how rare features are treated (iterate averaging,
AdaGrad's starting sum, an L1 penalty or FTRL, label and document weights). The single-model
report lists those that were on; the comparison page sets models with and without a remedy side
by side: the share of the weights' movement taken by features in at most two documents, the
features left at exactly zero per document-frequency bin, and the dev scores.
"""

from __future__ import annotations

import math
from html import escape

from ..engine.sparsity import zero_weights
from .layout import fmt, pct, table
from .stats import coef_rows, key_numbers


def remedies(info: dict) -> list[tuple[str, str]]:
    """Per remedy that was on in training (from ``model.json``'s options): a plain sentence (the
    report) and a few words (the comparison's narrow columns)."""
    training = info.get("training") or {}
    l1, l2 = training.get("l1"), training.get("l2")
    out = []
    if training.get("optimizer") == "ftrl":
        out.append((f"FTRL-Proximal (McMahan et al. 2013) with lambda_1 {fmt(training.get('l1', 0.0))}, "
                    f"lambda_2 {fmt(training.get('l2', 0.0))}, beta {fmt(training.get('beta') or 1.0)}",
                    f"FTRL λ1 {fmt(training.get('l1', 0.0))}"))
    elif l1:
        kind = "elastic net: cumulative L1 penalty" if l2 else "cumulative L1 penalty"
        out.append((f"{kind} {fmt(l1)} (Tsuruoka, Tsujii & Ananiadou 2009)" + (f", L2 {fmt(l2)}" if l2 else ""),
                    f"L1 {fmt(l1)}"))
    if training.get("average"):
        out.append((f"iterate averaging from epoch {training['average']}: the model is the mean of the weights "
                    "after every step since (Polyak & Juditsky 1992)", f"averaged from epoch {training['average']}"))
    if training.get("optimizer") == "adagrad" and training.get("initial_sum_sq"):
        out.append((f"AdaGrad's sum of squared gradients started at {fmt(training['initial_sum_sq'])}, so a rare "
                    "feature's first step scales with its gradient", f"AdaGrad start {fmt(training['initial_sum_sq'])}"))
    if training.get("label_weights"):
        weights = escape(str(training["label_weights"]))
        out.append((f"label weights {weights} (losses are weighted)", f"label weights {weights}"))
    column = (info.get("data") or {}).get("weight_column")
    if column:
        out.append((f"document weights from the column {escape(str(column))} (losses are weighted)", "document weights"))
    return out


def remedies_block(info: dict) -> str:
    """The report's paragraph on the remedies that were on (or that none was)."""
    items = [sentence for sentence, _ in remedies(info)]
    if not items:
        return '<p class="muted">Remedies for rare features: none (no averaging, no L1 penalty, no weights).</p>'
    return "<h3>Remedies for rare features</h3><ul>" + "".join(f"<li>{i}</li>" for i in items) + "</ul>"


def sparsity(model, table_: dict) -> dict:
    """Features with all weights exactly zero, per bin (:func:`lintext.engine.sparsity.zero_weights`)."""
    return zero_weights(coef_rows(model, table_["column"]), table_["document_frequency"])


def zero_column(model, table_: dict, bins: list) -> list[str]:
    """Per row of ``frequency_bins``: the features of that bin left at exactly zero."""
    by_bin = {r["bin"]: r for r in sparsity(model, table_)["by_bin"]}
    return [fmt(by_bin[b["label"]]["exactly_zero"]) if b["label"] in by_bin else "–" for b in bins]


def comparison_block(entries: list) -> str:
    """Side by side, one column per model: remedies, the share of total |Δw| taken by features in
    at most two documents, exactly-zero features (in all and per bin) and dev scores."""
    names = [escape(name) for name, _, _ in entries]
    rows = [["remedies"] + ["; ".join(words for _, words in remedies(m.info or {})) or "none" for _, m, _ in entries]]
    numbers = [key_numbers(tab) for _, _, tab in entries]
    rows.append([f"share of |Δw| in features of ≤ {numbers[0]['rare_df'] if numbers else 2} documents"]
                + [pct(k["rare_update_share"]) if math.isfinite(k["rare_update_share"]) else "–" for k in numbers])
    spars = [sparsity(m, tab) for _, m, tab in entries]
    rows.append(["features at exactly zero"] + [f"{fmt(s['exactly_zero'])} of {fmt(s['features'])}" for s in spars])
    for key, label in (("accuracy", "dev accuracy"), ("macro_f1", "dev macro-F1")):
        rows.append([label] + [fmt(((m.info or {}).get("metrics") or {}).get("dev", {}).get(key)) for _, m, _ in entries])
    summary = table(["", *names], rows, set(range(1, len(names) + 1)))
    labels = list(dict.fromkeys(r["bin"] for s in spars for r in s["by_bin"]))
    per_bin = []
    for label in labels:
        cells = []
        for s in spars:
            match = [r for r in s["by_bin"] if r["bin"] == label]
            cells.append(f"{fmt(match[0]['exactly_zero'])} of {fmt(match[0]['features'])}" if match else "–")
        per_bin.append([escape(label), *cells])
    zeros = table(["document frequency", *names], per_bin, set(range(1, len(names) + 1)))
    return (summary + "<h3>Features at exactly zero, per document-frequency bin</h3>" + zeros)
