"""The HTML pages: one model's report and a comparison of several models.

Layout, style and helpers are in :mod:`lintext.report.layout`; figures in
:mod:`lintext.report.figures`; numbers in :mod:`lintext.report.stats`.
"""

from __future__ import annotations

import math
from html import escape
from pathlib import Path

import numpy as np

from . import figures
from .confidence_page import calibration_section, coverage_section, errors_section
from .confusions import confusion_section, evaluated_set
from .layout import figure_block, fmt, kv, name_cell, page, pct, section, table
from .remedies import comparison_block, remedies_block, zero_column
from .stats import RARE_DF, frequency_bins, key_numbers, rare_heavy, top_features

CENTRED_NOTE = ("Weight norms and weights on this page are taken after removing each feature's mean weight across "
                "labels: softmax and the multiclass hinge ignore that mean (adding one amount to all of a feature's label "
                "weights changes no probability and no prediction), so only the centred weights are what the model uses. "
                "Plain SGD keeps the mean at zero; per-coordinate rules such as AdaGrad let it drift, and the raw norm "
                "would overstate such features. features.csv keeps the raw norm as raw_weight_norm.")

GUIDE = {
    "learning": "Read each panel left to right: train and dev loss should fall together, a dev loss that turns upward while "
                "the train loss keeps falling marks over-fitting, the dotted line is the best epoch whose weights were kept, "
                "and the right panel is the learning rate each epoch used.",
    "frequency": "Each dot is one feature (a random sample when there are many) placed by how many training documents "
                 "contain it, the line joins the median of each frequency bin and the band holds its middle half, so the "
                 "left panel shows how far each feature's weights travelled and the right one where they ended.",
    "steps": "Each point is the median final effective step of the features in one frequency bin (bars: middle half): the "
             "learning rate times the optimizer's per-feature scaling, how far one unit of gradient moves a weight; a line "
             "that falls from left to right means the optimizer gives rare features larger steps than frequent ones.",
    "compare_frequency": "One line per model, medians per document-frequency bin on shared log axes (band: middle half): "
                         "where a model's line lies higher at the rare end, that optimizer moved rare features further.",
    "compare_learning": "One colour per model, named in the legend below the panels: one loss panel per loss (softmax "
                        "and hinge losses are on different scales, so they never share an axis), solid lines train loss "
                        "and dashed dev loss, rings on the dev accuracy mark each model's best epoch, and the last panel "
                        "is the learning rate in effect.",
}


# ---------------------------------------------------------------- one model


def report_page(model, table_: dict, top: int = 10, rare_rows: int = 15, title: str | None = None) -> str:
    """The full HTML report of one model (see :func:`lintext.report.writer.write_report`)."""
    info = model.info or {}
    training = info.get("training") or {}
    history = info.get("history") or []
    data = info.get("data") or {}
    metrics = info.get("metrics") or {}
    bins = frequency_bins(table_)
    optimizer = training.get("optimizer", "unknown optimizer")
    recorded = bool(np.isfinite(table_["abs_update_sum"]).any())
    has_stats = recorded and float(np.nansum(table_["abs_update_sum"])) > 0
    why = ("This model has no update statistics (it was not trained by lintext's engine, or they were not saved)"
           if not recorded else f"No gradient steps were recorded for this model ({optimizer} updates all weights at once)")
    train_name = Path(str(data.get("train", "training data"))).name
    title = title or f"Report: {optimizer} on {train_name}"
    subtitle = escape(
        f"{len(model.labels)} labels, {fmt(int(len(table_['column'])))} features, {model.loss} loss, "
        f"best epoch {info.get('best_epoch', '–')} of {len(history)}"
    )

    sections = [section("summary", "Summary", _summary(model, info, training, history, data, metrics, table_))]

    learning = figures.learning_curves(history, info.get("best_epoch"), model.loss)
    sections.append(section("learning", "Learning curves",
                            figure_block(learning, GUIDE["learning"], "This model has no per-epoch history.")))

    body = [_key_numbers(key_numbers(table_)), f'<p class="muted">{escape(CENTRED_NOTE)}</p>'] if len(table_["column"]) else []
    body.append(figure_block(
        figures.frequency_updates(table_, bins), GUIDE["frequency"],
        f"{why}, and every weight is zero: there is nothing to plot."))
    sections.append(section("frequency", "Frequency and updates", "\n".join(body)))

    steps_missing = (f"{why}, so there are no effective steps to show." if not recorded else
                     f"The optimizer ({optimizer}) has no per-feature effective step (L-BFGS works on the whole "
                     "objective at once), so this figure is left out.")
    sections.append(section("steps", "Effective step per feature", figure_block(figures.effective_steps(bins), GUIDE["steps"], steps_missing)))
    sections.append(section("bins", "Per frequency bin", _bins_table(bins, has_stats, why, zero_column(model, table_, bins))))
    sections.append(section("labels", "Strongest features per label", _top_tables(model, table_, top)))
    sections.append(section("rare", "Rare features with large weights", _rare_table(model, table_, rare_rows)))

    which = evaluated_set(metrics)
    if which:
        body = confusion_section(metrics[which], model.labels, which)
    else:
        body = '<p class="note">No dev or test set was evaluated, so there is no confusion matrix.</p>'
    sections.append(section("confusion", "Confusions", body))
    sections.append(section("calibration", "Calibration", calibration_section(model)))
    sections.append(section("routing", "Routing by confidence", coverage_section(model)))
    sections.append(section("errors", "Most confident errors", errors_section(model)))

    nav = [("summary", "Summary"), ("learning", "Learning curves"), ("frequency", "Frequency and updates"),
           ("steps", "Effective step"), ("bins", "Bins"), ("labels", "Per label"), ("rare", "Rare features"),
           ("confusion", "Confusion"), ("calibration", "Calibration"), ("routing", "Routing"), ("errors", "Errors")]
    return page(title, subtitle, nav, sections)


def _summary(model, info, training, history, data, metrics, table_) -> str:
    feat = model.featurizer
    cfg = feat.config
    shown = model.labels if len(model.labels) <= 12 else model.labels[:12] + [f"… and {len(model.labels) - 12} more"]
    data_pairs = [("labels", f"{len(model.labels)}: " + escape(", ".join(shown))),
                  ("train", escape(str(data.get("train", "–")))), ("train documents", fmt(data.get("train_documents")))]
    if data.get("dev"):
        data_pairs += [("dev", escape(str(data["dev"]))), ("dev documents", fmt(data.get("dev_documents")))]
    else:
        data_pairs.append(("dev", "none (no early stopping)"))
    if data.get("test"):
        data_pairs += [("test", escape(str(data["test"]))),
                       ("test documents", fmt((metrics.get("test") or {}).get("documents")))]
    data_pairs += [("features", fmt(data.get("features", len(table_["column"])))), ("non-zeros", fmt(data.get("nonzeros")))]

    if cfg.hashing:
        space = f"hashing into {fmt(cfg.hash_space)} columns ({fmt(len(feat.used_columns))} used)"
    else:
        space = f"vocabulary of {fmt(len(feat.feature_names))}"
    feat_pairs = [
        ("feature space", space),
        ("word n-grams", "–".join(str(n) for n in cfg.ngrams)),
        ("character n-grams", "off" if cfg.char_ngrams is None else "–".join(str(n) for n in cfg.char_ngrams)),
        ("weighting", escape(cfg.weighting)),
        ("unit-length rows", fmt(bool(cfg.normalize))),
        ("lower-case", fmt(bool(cfg.lowercase))),
        ("document frequency", f"min {escape(str(cfg.min_df))}, max {escape(str(cfg.max_df))}"),
    ]
    if cfg.max_features:
        feat_pairs.append(("max features", fmt(cfg.max_features)))

    first_lr = history[0].get("learning_rate") if history else None
    lr = training.get("learning_rate")
    lr_text = fmt(lr) if lr is not None else (f"default ({fmt(first_lr)})" if first_lr is not None else "default")
    opt_pairs = [("optimizer", escape(str(training.get("optimizer", "–")))), ("loss", escape(model.loss)),
                 ("learning rate", lr_text)]
    shown = {"optimizer", "loss", "learning_rate"}
    for key in ("schedule", "batch_size", "epochs", "patience", "stop_metric", "min_improvement", "l2", "seed"):
        if key in training:
            value = training[key]
            number = isinstance(value, (int, float)) and not isinstance(value, bool)
            opt_pairs.append((key.replace("_", " "), fmt(value) if number else escape(str(value))))
            shown.add(key)
    # The rest as typed on the command line; a schedule's own numbers only where it uses them.
    unused = {"threads"} | ({"decay"} if training.get("schedule") not in ("inverse", "inverse-sqrt") else set()) \
        | ({"plateau_factor"} if training.get("schedule") != "plateau" else set())
    others = [f"--{escape(k.replace('_', '-'))} {escape(str(v))}" for k, v in training.items()
              if k not in shown | unused and v is not None]
    if others:
        opt_pairs.append(("other options", ", ".join(others)))

    seconds = sum(float(r.get("seconds") or 0) for r in history)
    outcome = [("epochs run", fmt(len(history))), ("best epoch", fmt(info.get("best_epoch"))),
               ("stopped early", fmt(bool(info.get("stopped_early", False)))), ("training time", f"{seconds:.2f} s")]

    cards = "".join(f'<div class="card"><h3>{name}</h3>{kv(pairs)}</div>' for name, pairs in
                    (("Data", data_pairs), ("Featurizer", feat_pairs), ("Optimizer", opt_pairs), ("Outcome", outcome)))
    rows = []
    for name in ("dev", "test"):
        m = metrics.get(name)
        if isinstance(m, dict):
            rows.append([name, fmt(m.get("documents")), fmt(m.get("accuracy")), fmt(m.get("macro_f1")), fmt(m.get("weighted_f1"))])
    scores = table(["set", "documents", "accuracy", "macro-F1", "weighted-F1"], rows, {1, 2, 3, 4}) if rows else \
        '<p class="muted">No dev or test set was evaluated.</p>'
    return f'<div class="cards">{cards}</div>\n{remedies_block(info)}\n<h3>Scores</h3>\n{scores}'


def _key_numbers(k: dict) -> str:
    moved = (f"; they received <b>{pct(k['rare_update_share'])}</b> of all weight movement (sum of |Δw|)"
             if math.isfinite(k["rare_update_share"]) else "")
    items = [
        f"Features in at most {k['rare_df']} training documents: <b>{fmt(k['rare_features'])}</b> of {fmt(k['features'])} "
        f"(<b>{pct(k['rare_share'])}</b>){moved}.",
        f"Median weight norm: <b>{fmt(k['rare_median_norm'], 3)}</b> for those rare features, "
        f"<b>{fmt(k['common_median_norm'], 3)}</b> for features in more than 8 documents.",
        f"Of the {fmt(k['top'])} largest weight norms, <b>{fmt(k['rare_in_top'])}</b> belong to rare features.",
    ]
    return '<ul class="numbers">' + "".join(f"<li>{i}</li>" for i in items) + "</ul>"


def _bins_table(bins: list, has_stats: bool, why: str, zeros: list) -> str:
    rows = []
    for r, zero in zip(bins, zeros):
        spread = f" ({fmt(r['update_q25'], 3)}–{fmt(r['update_q75'], 3)})" if math.isfinite(r["update_q25"]) else ""
        rows.append([escape(r["label"]), fmt(r["features"]), pct(r["feature_share"]), pct(r["update_share"]),
                     fmt(r["median_weight_norm"], 3), fmt(r["median_update"], 3) + spread,
                     fmt(r["median_update_count"], 3), fmt(r["median_effective_step"], 3), zero])
    head = ["document frequency", "features", "share of features", "share of total |Δw|", "median weight norm",
            "median sum |Δw| (middle half)", "median updates", "median effective step", "exactly zero"]
    intro = ('<p class="muted">Features grouped by the number of training documents containing them (log-spaced bins). '
             "Shares are of all features and of the total movement of the weights during training.</p>")
    if not has_stats:
        intro += f'<p class="note">{escape(why)}: only counts and weight norms are given.</p>'
    return intro + table(head, rows, set(range(1, 9)))


def _top_tables(model, table_: dict, top: int) -> str:
    per_label = top_features(model, top=top, table=table_)
    blocks = []
    for name, rows in per_label.items():
        body = table(["feature", "weight", "documents"],
                     [[name_cell(r["feature"]), fmt(r["weight"], 3), fmt(r["document_frequency"])] for r in rows], {1, 2})
        blocks.append(f"<div><h3>{escape(name)}</h3>{body}</div>")
    intro = (f'<p class="muted">The {top} features with the largest weight toward each label, with the number of '
             "training documents containing them.</p>")
    return intro + '<div class="labels">' + "".join(blocks) + "</div>"


def _rare_table(model, table_: dict, rare_rows: int) -> str:
    rows = rare_heavy(model, top=rare_rows, table=table_)
    intro = (f'<p class="muted">Features in at most {RARE_DF} training documents, largest weight norm first. '
             "A rare feature ranked among the largest weights of the whole model is likely memorised: it fits "
             "these few documents rather than a pattern that will recur. Norms are of the weights with their mean across "
             "labels removed (what the loss can see); the raw norm is shown beside them.</p>")
    if not rows:
        return intro + '<p class="note">No feature occurs in only one or two training documents.</p>'
    have_docs = any(r["documents"] for r in rows)
    out = []
    for r in rows:
        docs = "".join(
            f'<div><span class="source">{escape(d.get("source", ""))}</span>'
            + (f' <i>({escape(d["label"])})</i>' if d.get("label") else "")
            + f" {escape(d.get('snippet', ''))}</div>" for d in r["documents"]) or '<span class="muted">–</span>'
        out.append([name_cell(r["feature"]), fmt(r["document_frequency"]), fmt(r["weight_norm"], 3),
                    fmt(r["raw_weight_norm"], 3), f"{fmt(r['norm_rank'])} of {fmt(len(table_['column']))}",
                    f"{escape(r['max_weight_label'])} ({fmt(r['max_weight'], 3)})", (docs, "docs")])
    note = "" if have_docs else ('<p class="note">The training documents are not shown: this model was saved '
                                 "without the training-time extras that record them.</p>")
    return intro + note + table(["feature", "documents", "weight norm (centred)", "raw norm", "rank of norm among all features",
                                 "strongest label (weight)", "training documents"], out, {1, 2, 3, 4})


# ---------------------------------------------------------------- several models


def comparison_page(entries: list, title: str | None = None) -> str:
    """One page comparing models; ``entries`` is a list of ``(name, model, table)``."""
    names = [name for name, _, _ in entries]
    title = title or f"Comparison of {len(entries)} models"
    subtitle = escape(", ".join(names))
    bins_of = [(name, frequency_bins(tab)) for name, _, tab in entries]
    rows = []
    trained_on = set()
    for name, model, tab in entries:
        info = model.info or {}
        training = info.get("training") or {}
        history = info.get("history") or []
        metrics = info.get("metrics") or {}
        data = info.get("data") or {}
        trained_on.add((str(data.get("train")), data.get("train_documents")))
        lr = training.get("learning_rate")
        if lr is None and history:
            lr = history[0].get("learning_rate")
        dev, test = metrics.get("dev") or {}, metrics.get("test") or {}
        rows.append([escape(name), escape(str(training.get("optimizer", "–"))), fmt(lr), escape(str(training.get("schedule", "–"))),
                     escape(model.loss), fmt(training.get("batch_size")), fmt(len(history)), fmt(info.get("best_epoch")),
                     fmt(dev.get("accuracy")), fmt(dev.get("macro_f1")), fmt(test.get("accuracy")), fmt(test.get("macro_f1"))])
    summary = table(["model", "optimizer", "learning rate", "schedule", "loss", "batch", "epochs", "best epoch",
                     "dev accuracy", "dev macro-F1", "test accuracy", "test macro-F1"], rows, set(range(5, 12)))
    if len(trained_on) > 1:
        summary += ('<p class="note">These models were not trained on the same data '
                    f"({escape('; '.join(sorted(f'{t} ({fmt(n)} documents)' for t, n in trained_on)))}), "
                    "so their curves are not directly comparable.</p>")
    sections = [section("models", "Models", summary)]
    freq = figures.compare_frequency(bins_of)
    without = [name for name, bins in bins_of if not any(math.isfinite(r["median_update"]) and r["median_update"] > 0
                                                         for r in bins)]
    missing = (f'<p class="note">Not in this figure, for want of update statistics: {escape(", ".join(without))}.</p>'
               if without and freq is not None else "")
    sections.append(section("frequency", "Frequency and updates", figure_block(
        freq, GUIDE["compare_frequency"], "None of these models has update statistics.") + missing))
    series = [(name, (m.info or {}).get("history") or [], (m.info or {}).get("best_epoch"), m.loss) for name, m, _ in entries]
    sections.append(section("learning", "Learning curves", figure_block(
        figures.compare_learning(series), GUIDE["compare_learning"], "None of these models has a per-epoch history.")))
    sections.append(section("bins", "Per frequency bin", _compare_bins(bins_of)))
    sections.append(section("remedies", "Remedies side by side", comparison_block(entries)))
    nav = [("models", "Models"), ("frequency", "Frequency and updates"), ("learning", "Learning curves"), ("bins", "Bins"),
           ("remedies", "Remedies")]
    return page(title, subtitle, nav, sections)


def _compare_bins(bins_of: list) -> str:
    labels = {}
    for _, bins in bins_of:
        for r in bins:
            labels[r["bin"]] = r["label"]
    parts = []
    for key, heading, show in (("update_share", "Share of total |Δw|", pct),
                               ("median_weight_norm", "Median weight norm", lambda v: fmt(v, 3)),
                               ("median_effective_step", "Median effective step", lambda v: fmt(v, 3))):
        rows = []
        for k in sorted(labels):
            row = [escape(labels[k])]
            for _, bins in bins_of:
                match = [r for r in bins if r["bin"] == k]
                row.append(show(match[0][key]) if match else "–")
            rows.append(row)
        parts.append(f"<div><h3>{heading}</h3>" + table(["document frequency"] + [escape(n) for n, _ in bins_of], rows,
                                                        set(range(1, len(bins_of) + 1))) + "</div>")
    if len(bins_of) > 2:  # side by side, three tables of many models would hide columns behind a scroll bar
        return "".join(parts)
    return '<div class="labels">' + "".join(parts) + "</div>"
