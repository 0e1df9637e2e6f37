"""The report's sections on confidence: calibration, routing by a probability threshold, and the
dev documents the model got wrong most confidently. Each returns the HTML body of a section and
says plainly what is absent from a model written without it."""

from __future__ import annotations

from html import escape

from ..confidence import COVERAGE_THRESHOLDS, coverage_rows, ece_of
from ..explanation import errors_record
from . import confidence_figures
from .layout import figure_block, fmt, pct, table

GUIDE = {
    "reliability": "Documents are grouped by the probability of their predicted label into 15 equal-width bins; each "
                   "point is one bin, placed at its mean probability and at the share of its documents that were "
                   "right (point size: documents in the bin). Points on the dotted diagonal mean the probabilities can "
                   "be taken at their word; points below it mean the model is more sure than it is right.",
    "coverage": "Left: decide automatically only the documents whose best probability reaches a threshold, and leave "
                "the rest for a person; moving right, the threshold rises, fewer documents are decided and those "
                "decided are right more often (rings mark thresholds 0.5, 0.8, 0.9 and 0.95). Right: the same two "
                "numbers against the threshold.",
}
ERROR_ROWS = 12


def _sets(metrics: dict) -> list:
    return [(name, metrics[name]) for name in ("dev", "test") if isinstance(metrics.get(name), dict)]


def calibration_section(model) -> str:
    """Temperature, dev NLL and ECE before and after, and the reliability diagrams."""
    cal = model.calibration
    metrics = model.info.get("metrics") or {}
    if cal is None:
        then = ("its probabilities are the plain softmax of its scores, and nobody has checked them against the dev set"
                if model.has_probabilities else "this hinge-loss model gives scores, not probabilities")
        return ('<p class="note">Calibration: absent. This model was written without a fitted temperature (by a '
                f"lintext that did not fit one, or trained without a dev set), so {then}.</p>")
    intro = ("<p>Probabilities are <b>calibrated by temperature scaling</b> (Guo, Pleiss, Sun &amp; Weinberger 2017): "
             f"the scores are divided by one number, <b>T = {fmt(cal['temperature'])}</b>, fitted after training "
             f"by minimising the negative log-likelihood of the {fmt(cal.get('documents'))} dev documents, before "
             "the softmax. Dividing by T never changes which label is predicted, only how sure the model says it is "
             "(T above 1 softens overconfident probabilities, below 1 sharpens timid ones).</p>")
    if model.loss == "hinge":
        intro += ('<p class="note">This model was trained with the hinge loss, whose scores are not probabilities: '
                  "its probabilities are the softmax of the scores divided by the same fitted temperature.</p>")
    if cal.get("separated"):
        intro += ('<p class="note">Every dev document was classified right with room to spare, so the dev '
                  "likelihood only rises as T falls and no temperature can be fitted: T is left at 1 and the "
                  "probabilities are the plain softmax. A larger or harder dev set would pin it down.</p>")
    elif cal.get("at_bound"):
        intro += (f'<p class="note">The fitted temperature lies on the edge of the range searched '
                  f"({fmt(cal['bounds'][0])} to {fmt(cal['bounds'][1])}): the dev set did not pin it down.</p>")
    rows = [["dev", fmt(cal.get("nll_before")), fmt(cal.get("nll_after")), fmt(cal.get("ece_before")),
             fmt(cal.get("ece_after"))]]
    test = metrics.get("test") if isinstance(metrics.get("test"), dict) else {}
    if test.get("ece") is not None:
        rows.append(["test", fmt(test.get("nll_uncalibrated")), fmt(test.get("nll")), fmt(test.get("ece_uncalibrated")),
                     fmt(test.get("ece"))])
    numbers = table(["set", "NLL before", "NLL after", "ECE before", "ECE after"], rows, {1, 2, 3, 4})
    numbers += ('<p class="muted">NLL: mean negative log-likelihood of the true label. ECE: expected calibration '
                "error (Naeini, Cooper &amp; Hauskrecht 2015), the documents' share-weighted gap between accuracy and "
                "mean probability over 15 equal-width bins of the predicted label's probability. Lower is better for "
                "both; the dev set is the one T was fitted on, so the test row is the fair check.</p>")
    before = [("dev", cal.get("reliability_before"))]
    after = [("dev", cal.get("reliability_after"))]
    reliability = (test.get("reliability") or {})
    if reliability.get("uncalibrated") and reliability.get("calibrated"):
        before.append(("test", reliability["uncalibrated"]))
        after.append(("test", reliability["calibrated"]))
    label = lambda name, t: f"{name} (ECE {fmt(ece_of(t) if t else None, 3)})"  # noqa: E731
    svg = confidence_figures.reliability([
        ("Before: softmax of the scores (T = 1)", [(label(n, t), t) for n, t in before]),
        (f"After: softmax of the scores / {fmt(cal['temperature'], 3)}", [(label(n, t), t) for n, t in after]),
    ])
    return intro + numbers + figure_block(svg, GUIDE["reliability"], "The calibration record holds no reliability tables.")


def coverage_section(model) -> str:
    """The share decided against the accuracy on it, per threshold, as a table and a figure."""
    sets = [(name, m["coverage"]) for name, m in _sets(model.info.get("metrics") or {}) if m.get("coverage")]
    if not sets:
        return ('<p class="note">No routing table: this model was written before lintext recorded one, has no '
                "probabilities (a hinge model without calibration) or was evaluated on no dev or test set.</p>")
    intro = ("<p>To route documents, decide automatically those whose best probability is at least a threshold and "
             "leave the rest for review (<code>lintext predict --min-probability P</code>); "
             "<code>lintext evaluate --target-accuracy A</code> finds the lowest threshold that reaches an accuracy. "
             "Choose the threshold on dev data and check it on test data.</p>")
    head = ["threshold"] + [f"{escape(name)}: {h}" for name, _ in sets for h in ("decided", "accuracy")]
    per_set = [coverage_rows(curve, COVERAGE_THRESHOLDS) for _, curve in sets]
    rows = []
    for i, t in enumerate(COVERAGE_THRESHOLDS):
        row = [fmt(t)]
        for rows_of_set in per_set:
            r = rows_of_set[i]
            row += [f"{fmt(r['decided'])} ({pct(r['coverage'])})", fmt(r["accuracy"])]
        rows.append(row)
    svg = confidence_figures.coverage(sets)
    return intro + figure_block(svg, GUIDE["coverage"], "Nothing to draw.") + \
        table(head, rows, set(range(1, len(head))))


def errors_section(model) -> str:
    """The dev documents misclassified with the highest confidence, with their top contributions."""
    record = errors_record(model)
    if record is None:
        return ('<p class="note">Errors: not recorded. This model was trained without a dev set, or written before '
                "lintext recorded its dev errors; <code>lintext explain MODEL_DIR DEV_FILE</code> shows why each "
                "document got its label.</p>")
    by = record["ranked_by"]
    intro = (f"<p><b>{fmt(record['errors'])}</b> of {fmt(record['documents'])} dev documents are misclassified. "
             f"In <b>{fmt(record['hinge_on_rare'])}</b> of them a rare feature (in at most {record['rare_df']} training "
             f"documents) is among the {record['hinge_top']} largest contributions: those errors hinge on something "
             "the model saw once or twice.</p>")
    rows = []
    for e in record["shown"][:ERROR_ROWS]:
        feats = "".join(
            f"<div>{escape(f['feature'] or '–')} <span class=\"muted nowrap\">{f['contribution']:+.3f}</span>"
            + (' <b class="rare">rare</b>' if f["rare"] else "") + "</div>" for f in e["features"])
        strength = e["probability"] if by == "probability" else e["margin"]
        text = f'<div class="source">{escape(e["source"])}</div>{escape(e["snippet"])}'
        labels = f'<div>{escape(e["true_label"])}</div><div class="muted">predicted</div><div>{escape(e["label"])}</div>'
        rows.append([(text, "docs wide"), labels, fmt(strength, 3), (feats, "feature contributions")])
    if not rows:
        return intro
    intro += (f"<p>The errors the model was most sure of (by {escape(by)}), with each feature's contribution "
              "(value × weight) to the predicted label's score:</p>")
    return intro + table(["document", "true label / predicted", by, "top contributions"], rows, {2})

