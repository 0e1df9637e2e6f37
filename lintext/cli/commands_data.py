"""``lintext stats``: what a labelled corpus holds and the feature space it gives."""

from __future__ import annotations

from rich.table import Table

from ..text.config import FeaturizerConfig
from ..text.readers import ReaderOptions
from .app import command, out, status
from .options import DataPath, QuietOpt, featurizer_options, reader_options


@command
@featurizer_options
@reader_options
def stats(
    data: DataPath,
    reader: ReaderOptions = None,
    featurizer: FeaturizerConfig = None,
    quiet: QuietOpt = False,
):
    """Describe a labelled corpus: documents, labels, and the feature space it gives.

    Example: lintext stats data/demo/train.csv --ngrams 1-2 --min-df 2
    """
    from ..text.featurizer import corpus_stats
    from ..text.readers import read_corpus

    with status(f"Reading {data}", quiet):
        corpus = read_corpus(data, reader)
    with status("Featurizing", quiet):
        info = corpus_stats(corpus, featurizer)
    table = Table(title=f"{data}: {info['documents']} documents, {len(info['labels'])} labels")
    table.add_column("label")
    table.add_column("documents", justify="right")
    table.add_column("share", justify="right")
    for label, count in sorted(info["labels"].items(), key=lambda kv: (-kv[1], kv[0])):
        table.add_row(label, str(count), f"{count / info['documents']:.1%}")
    out.print(table)
    out.print(f"features: {info['features']:,} (columns {info['columns']:,})")
    out.print(f"non-zeros: {info['nonzeros']:,} ({info['nonzeros_per_document']:.1f} per document)")
    before = info["before_filter"]
    out.print(f"before the document-frequency filter (--min-df, --max-df, --max-features): {before['features']:,} features, "
              f"{before['share_df1']:.1%} in 1 document, {before['share_df2']:.1%} in 2 documents", markup=False, soft_wrap=True)
    out.print(f"after it: {info['features']:,} features, {info['share_df1']:.1%} in 1 document, "
              f"{info['share_df2']:.1%} in 2 documents", markup=False, soft_wrap=True)
