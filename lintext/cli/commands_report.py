"""``lintext report``, ``compare`` and ``inspect``: what a trained model learnt."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.table import Table
from rich.text import Text

from ..errors import ConfigError
from .app import command, out, status
from .options import ForceOpt, ModelPath, QuietOpt

TopOpt = Annotated[int, typer.Option("--top", help="Features shown per label.")]
RareRowsOpt = Annotated[int, typer.Option("--rare-rows", help="Rows of the table of rare features with large weights (and of --errors).")]


@command
def report(
    model_dir: ModelPath,
    top: TopOpt = 10,
    rare_rows: RareRowsOpt = 15,
    quiet: QuietOpt = False,
):
    """Write features.csv and report.html (self-contained, printable) into a model directory.

    Example: lintext report models/demo
    """
    from ..model import open_model
    from ..report.writer import write_report

    model = open_model(model_dir)
    with status("Writing the report", quiet):
        written = write_report(model, model_dir, top=top, rare_rows=rare_rows)
    if not quiet:
        out.print(f"report written to {written['report']}", markup=False)
        out.print(f"feature table written to {written['features']}", markup=False)


@command
def compare(
    model_dirs: Annotated[list[Path], typer.Argument(metavar="MODEL_DIR", help="Model directories to show side by side.")],
    out_file: Annotated[Path, typer.Option("--out", metavar="FILE", help="HTML file to write (only a lintext page there is replaced).")],
    name: Annotated[Optional[list[str]], typer.Option("--name", help="Display name of each model, in order (repeat the option).")] = None,
    force: ForceOpt = False,
    quiet: QuietOpt = False,
):
    """Write one page comparing models: update magnitude per frequency bin and learning curves on shared axes.

    Example: lintext compare models/sgd models/adagrad models/adam --out compare.html
    """
    from ..outputs import check_output_file
    from ..report.writer import write_comparison

    check_output_file(out_file, "page", force, inputs=list(model_dirs))
    if name and len(name) != len(model_dirs):
        raise ConfigError("--name", ", ".join(name), f"give one name per model directory ({len(model_dirs)})")
    with status(f"Comparing {len(model_dirs)} models", quiet):
        where = write_comparison(model_dirs, out_file, names=name or None, force=force)
    if not quiet:
        out.print(f"comparison written to {where}", markup=False)


@command
def inspect(
    model_dir: ModelPath,
    label: Annotated[Optional[str], typer.Option("--label", help="Only this label.")] = None,
    rare: Annotated[bool, typer.Option("--rare", help="Show rare features (in at most 2 training documents) with large weights.")] = False,
    errors: Annotated[bool, typer.Option("--errors", help="Show the dev documents misclassified with the highest confidence.")] = False,
    top: TopOpt = 10,
    rare_rows: RareRowsOpt = 10,
):
    """Print a model's strongest features per label (or, with --rare, its likely memorised ones; with --errors, its
    most confident dev errors) and its frequency bins.

    Example: lintext inspect models/demo --label billing --top 15
    """
    from ..model import open_model
    from ..report.layout import fmt, pct
    from ..report.stats import check_label, feature_table, frequency_bins, rare_heavy, top_features

    model = open_model(model_dir)
    check_label(model, label)
    if top < 1:
        raise ConfigError("--top", top, "must be at least 1")
    if rare_rows < 1:
        raise ConfigError("--rare-rows", rare_rows, "must be at least 1")
    if errors:
        from .commands_explain import print_errors

        print_errors(model, rows=rare_rows)
        return
    table = feature_table(model)
    if rare:
        print_rare(rare_heavy(model, top=rare_rows, label=label, table=table), len(table["column"]), label)
    else:
        for name_, rows in top_features(model, top=top, label=label, table=table).items():
            grid = Table(title=Text(f"strongest features toward {name_} (weights centred across labels)"))
            for col in ("feature", "weight", "document frequency"):
                grid.add_column(col, justify="left" if col == "feature" else "right")
            for r in rows:
                grid.add_row(Text(r["feature"]), fmt(r["weight"], 3), f"{r['document_frequency']:,}")
            out.print(grid)
    grid = Table(title="features per document-frequency bin (weight norms centred across labels)")
    for col in ("document frequency", "features", "share", "share of |Δw|", "median weight norm", "median sum |Δw|",
                "median effective step"):
        grid.add_column(col, justify="right")
    for b in frequency_bins(table):
        grid.add_row(b["label"], f"{b['features']:,}", pct(b["feature_share"]), pct(b["update_share"]), fmt(b["median_weight_norm"], 3), fmt(b["median_update"], 3), fmt(b["median_effective_step"], 3))
    out.print(grid)


def print_rare(rows: list, n_features: int, label: str | None) -> None:
    """The rare-but-heavy features as a narrow table, then their training documents one per line
    (cut to the terminal's width): reads at 80 columns."""
    from rich import box

    from ..evidence import snippet
    from ..report.layout import fmt
    from ..report.stats import RARE_DF

    title = (f"rare features (in at most {RARE_DF} training documents), largest weight norm first"
             + (f", strongest toward {label}" if label else ""))
    grid = Table(title=Text(title), box=box.SIMPLE_HEAD, pad_edge=False,
                 caption="norm: of the weights with their mean across labels removed (what the loss sees); "
                         f"rank among all {n_features:,} features", caption_justify="left")
    for col, right in (("#", True), ("feature", False), ("docs", True), ("norm", True), ("raw", True), ("rank", True),
                       ("strongest label (weight)", False)):
        grid.add_column(col, justify="right" if right else "left", no_wrap=col != "feature", overflow="fold")
    for k, r in enumerate(rows, start=1):
        grid.add_row(str(k), Text(r["feature"]), str(r["document_frequency"]), fmt(r["weight_norm"], 3),
                     fmt(r["raw_weight_norm"], 3), f"{r['norm_rank']:,}", Text(f"{r['max_weight_label']} ({fmt(r['max_weight'], 3)})"))
    out.print(grid)
    if rows and not any(r["documents"] for r in rows):
        out.print("training documents not recorded for this model", markup=False)
        return
    for k, r in enumerate(rows, start=1):
        if not r["documents"]:
            continue
        out.print(Text(f"{k}. {r['feature']}", style="bold"), no_wrap=True, overflow="ellipsis")
        for d in r["documents"]:
            where = f"   {d.get('source', '')}" + (f" ({d['label']})" if d.get("label") else "") + ": "
            room = max(20, out.width - len(where))  # the snippet re-centred on the feature to fit the line
            out.print(Text(where + snippet(d.get("snippet", ""), r["feature"].split(" | "), width=room)),
                      no_wrap=True, overflow="ellipsis")
