"""``lintext explain``: why each document got its label, feature by feature; and the table of
dev errors that ``lintext inspect --errors`` prints."""

from __future__ import annotations

import itertools
import json
import os
import sys
from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.table import Table
from rich.text import Text

from ..text.readers import ReaderOptions
from .app import command, out, status
from .display import print_wide
from .options import ModelPath, QuietOpt, reader_options


@command
@reader_options
def explain(
    model_dir: ModelPath,
    data: Annotated[Optional[Path], typer.Argument(
        metavar="DATA", help="Texts to explain: CSV/TSV/JSON Lines or a folder (a label column is optional).")] = None,
    text: Annotated[Optional[list[str]], typer.Option("--text", metavar="TEXT", help="A text to explain (repeat the option for several).")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="One JSON object per document, one per line.")] = False,
    top: Annotated[int, typer.Option("--top", help="Features shown per document, largest contribution first (0 = all).")] = 10,
    reader: ReaderOptions = None,
    quiet: QuietOpt = False,
):
    """Show why each document got its label: score, probability, runner-up and the features that moved it.

    Each feature's contribution is its value in the document times its weight toward the label;
    the contributions plus the label's intercept add up to the score.

    Example: lintext explain models/demo --text "the tap water smells of bleach" --top 5
    """
    from ..explanation import iter_explanations
    from ..model import open_model

    model = open_model(model_dir)
    records = iter_explanations(model, data, text or (), reader=reader, top=top)
    with status(f"Explaining {data}" if data else "Explaining", quiet or out.is_terminal):  # the rows show progress on a terminal
        if as_json:
            try:
                for record in records:
                    typer.echo(json.dumps(record, ensure_ascii=False, allow_nan=False))
            except BrokenPipeError:  # the reader stopped early (| head): not an error
                os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
            return
        first = next(records, None)  # bad input is reported before anything is printed
        if model.calibration is None:
            what = "plain softmax of the scores" if model.has_probabilities else "none: a hinge model gives scores"
            out.print(f"calibration: absent (this model was written without one); probabilities: {what}",
                      markup=False, soft_wrap=True)
        else:
            out.print(f"probabilities calibrated with temperature {model.temperature:.4g} (fitted on the dev set)",
                      markup=False, soft_wrap=True)
        for record in itertools.chain([first] if first else [], records):
            print_record(record)


def print_record(r: dict) -> None:
    """One document: a heading line, its features as a table, and the sum that gives the score."""
    where = f" ({r['source']})" if r.get("source") else ""
    truth = f"  true label {r['true_label']}" if r.get("true_label") is not None else ""
    prob = "" if r["probability"] is None else f"  probability {r['probability']:.4f}"
    out.print(Text(f"\nrow {r['row']}{where}: {r['label']}  score {r['score']:.4f}{prob}  runner-up {r['runner_up']} "
                   f"(score {r['runner_up_score']:.4f}, margin {r['margin']:.4f}){truth}", style="bold"), soft_wrap=True)
    grid = Table(show_edge=False)
    for col, right in (("feature", False), ("column", True), ("value", True), (f"weight ({r['label']})", True),
                       (f"weight ({r['runner_up']})", True), ("contribution", True), ("documents", True), ("rare", False)):
        grid.add_column(col, justify="right" if right else "left")
    for f in r["features"]:
        grid.add_row(Text(f["feature"] or "–"), str(f["column"]), f"{f['value']:.4g}", f"{f['weight']:.4g}",
                     f"{f['runner_up_weight']:.4g}", f"{f['contribution']:+.4f}", f"{f['document_frequency']:,}",
                     "rare" if f["rare"] else "")
    print_wide(grid)
    listed = sum(f["contribution"] for f in r["features"])
    out.print(f"listed features {listed:+.4f}  +  {r['other_features']} other features {r['other_contribution']:+.4f}  "
              f"+  intercept {r['intercept']:+.4f}  =  score {r['score']:.4f}", markup=False, soft_wrap=True)


def print_errors(model, rows: int) -> None:
    """``inspect --errors``: the dev documents misclassified with the highest confidence."""
    from ..explanation import errors_record

    record = errors_record(model)
    if record is None:
        out.print("dev errors: not recorded for this model (trained without a dev set, or written before lintext "
                  "recorded them)", markup=False, soft_wrap=True)
        return
    out.print(f"dev errors: {record['errors']} of {record['documents']} dev documents misclassified; in "
              f"{record['hinge_on_rare']} of them a rare feature (in at most {record['rare_df']} training documents) "
              f"is among the {record['hinge_top']} largest contributions", markup=False, soft_wrap=True)
    out.print(f"the most confident errors (by {record['ranked_by']}):", markup=False)
    for k, e in enumerate(record["shown"][:rows], start=1):
        strength = e["probability"] if record["ranked_by"] == "probability" else e["margin"]
        out.print(Text(f"\n{k}. {e['source']}: true {e['true_label']}, predicted {e['label']} "
                       f"({record['ranked_by']} {strength:.3f}, runner-up {e['runner_up']})", style="bold"), soft_wrap=False)
        out.print(Text(f"   {e['snippet']}"))
        features = ", ".join(f"{f['feature']} {f['contribution']:+.3f}" + (" (rare)" if f["rare"] else "")
                             for f in e["features"])
        out.print(Text(f"   top contributions: {features}"))
