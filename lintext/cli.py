"""Command line: one thin function per command over the library.

Errors from the library become one line on stderr and exit status 2; anything
unexpected is exit status 1 (set LINTEXT_DEBUG=1 for the traceback).
"""

from __future__ import annotations

import contextlib
import functools
import os
import sys
from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.console import Console
from rich.table import Table

from . import __version__
from .errors import ConfigError, LinTextError
from .features import FeaturizerConfig, corpus_stats, parse_range
from .io import read_corpus

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    help="Train, explain and use sparse linear text classifiers.",
)
out = Console(highlight=False)
err = Console(stderr=True, highlight=False)


def command(func):
    """Register a command whose library errors print one line and exit 2."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except LinTextError as exc:
            err.print(f"error: {exc}", markup=False, soft_wrap=True)
            raise typer.Exit(exc.exit_code) from None
        except KeyboardInterrupt:
            err.print("interrupted", markup=False)
            raise typer.Exit(130) from None
        except (typer.Exit, typer.Abort):
            raise
        except Exception as exc:  # an internal fault, not bad input
            if os.environ.get("LINTEXT_DEBUG"):
                raise
            err.print(f"internal error: {type(exc).__name__}: {exc}", markup=False, soft_wrap=True)
            raise typer.Exit(1) from None

    return app.command()(wrapper)


def show_progress(quiet: bool) -> bool:
    """Progress goes to a terminal only, and never with --quiet."""
    return not quiet and err.is_terminal


def status(message: str, quiet: bool):
    return err.status(message) if show_progress(quiet) else contextlib.nullcontext()


# ------------------------------------------------------------------ shared options

DataPath = Annotated[Path, typer.Argument(help="Labelled data: a CSV/TSV/JSON Lines file or a folder with one sub-folder per label.")]
FormatOpt = Annotated[Optional[str], typer.Option("--format", help="folder, csv, tsv or jsonl (default: from the path).")]
TextColumnOpt = Annotated[str, typer.Option("--text-column", help="Column or field holding the text.")]
LabelColumnOpt = Annotated[str, typer.Option("--label-column", help="Column or field holding the label.")]
NgramsOpt = Annotated[str, typer.Option("--ngrams", help="Word n-gram range, e.g. 1-2.")]
CharNgramsOpt = Annotated[Optional[str], typer.Option("--char-ngrams", help="Character n-grams inside words, e.g. 3-5 (off by default).")]
MinDfOpt = Annotated[str, typer.Option("--min-df", help="Keep features in at least this many documents (or this share, if < 1).")]
MaxDfOpt = Annotated[str, typer.Option("--max-df", help="Drop features in more than this share of documents (or count, if > 1).")]
MaxFeaturesOpt = Annotated[Optional[int], typer.Option("--max-features", help="Keep only the most frequent features.")]
WeightingOpt = Annotated[str, typer.Option("--weighting", help="binary, count, log (1 + ln count) or tfidf.")]
NormalizeOpt = Annotated[bool, typer.Option("--normalize/--no-normalize", help="Scale every document to unit length.")]
LowercaseOpt = Annotated[bool, typer.Option("--lowercase/--keep-case", help="Lower-case texts before tokenizing.")]
HashBitsOpt = Annotated[Optional[int], typer.Option("--hash-bits", help="Hash features into 2^BITS columns instead of keeping a vocabulary.")]
QuietOpt = Annotated[bool, typer.Option("--quiet", "-q", help="No progress display.")]


def _number(option: str, text: str) -> float | int:
    """A count when written as a whole number, a share when written with a point."""
    try:
        value = float(text)
    except ValueError:
        raise ConfigError(option, text, "expected a number") from None
    return int(value) if value.is_integer() and "." not in text else value


def featurizer_config(ngrams, char_ngrams, min_df, max_df, max_features, weighting, normalize, lowercase, hash_bits):
    """Build and validate a featurizer configuration from command-line values."""
    return FeaturizerConfig(
        ngrams=parse_range("--ngrams", ngrams),
        char_ngrams=None if char_ngrams is None else parse_range("--char-ngrams", char_ngrams),
        min_df=_number("--min-df", min_df),
        max_df=_number("--max-df", max_df),
        max_features=max_features,
        weighting=weighting,
        normalize=normalize,
        lowercase=lowercase,
        hash_bits=hash_bits,
    ).validate()


# ------------------------------------------------------------------ commands


def _version(value: bool):
    if value:
        out.print(f"lintext {__version__}")
        raise typer.Exit()


@app.callback()
def main(
    version: Annotated[bool, typer.Option("--version", callback=_version, is_eager=True, help="Print the version.")] = False,
):
    """Train, explain and use sparse linear text classifiers."""


@command
def stats(
    data: DataPath,
    fmt: FormatOpt = None,
    text_column: TextColumnOpt = "text",
    label_column: LabelColumnOpt = "label",
    ngrams: NgramsOpt = "1-2",
    char_ngrams: CharNgramsOpt = None,
    min_df: MinDfOpt = "1",
    max_df: MaxDfOpt = "1.0",
    max_features: MaxFeaturesOpt = None,
    weighting: WeightingOpt = "tfidf",
    normalize: NormalizeOpt = True,
    lowercase: LowercaseOpt = True,
    hash_bits: HashBitsOpt = None,
    quiet: QuietOpt = False,
):
    """Describe a labelled corpus: documents, labels, and the feature space it gives.

    Example: lintext stats data/demo/train.csv --ngrams 1-2 --min-df 2
    """
    config = featurizer_config(ngrams, char_ngrams, min_df, max_df, max_features, weighting, normalize, lowercase, hash_bits)
    with status(f"Reading {data}", quiet):
        corpus = read_corpus(data, fmt, text_column, label_column)
    with status("Featurizing", quiet):
        info = corpus_stats(corpus, config)
    table = Table(title=f"{data}: {info['documents']} documents, {len(info['labels'])} labels")
    table.add_column("label")
    table.add_column("documents", justify="right")
    table.add_column("share", justify="right")
    for label, count in sorted(info["labels"].items(), key=lambda kv: (-kv[1], kv[0])):
        table.add_row(label, str(count), f"{count / info['documents']:.1%}")
    out.print(table)
    out.print(f"features: {info['features']:,} (columns {info['columns']:,})")
    out.print(f"non-zeros: {info['nonzeros']:,} ({info['nonzeros_per_document']:.1f} per document)")
    out.print(f"features in 1 document: {info['share_df1']:.1%}; in 2 documents: {info['share_df2']:.1%}")


def run():  # pragma: no cover - console entry point
    app(prog_name="lintext")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(run())
