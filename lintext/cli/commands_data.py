"""``lintext stats`` and ``featurize``: what a labelled corpus holds, and its feature store."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.table import Table

from ..errors import ConfigError
from ..text.config import FeaturizerConfig
from ..text.readers import ReaderOptions
from .app import command, out, show_progress, status
from .display import Display
from .options import (ClusterOpt, DataPath, DevFractionOpt, DevOpt, ForceOpt, JobsOpt, QuietOpt, featurizer_options,
                      reader_options)

SHARD_ROWS_DEFAULT = 100_000  # = lintext.text.store.SHARD_ROWS (a test ties them; not imported: --help loads no library)


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


@command
@featurizer_options
@reader_options
def featurize(
    data: Annotated[Path, typer.Argument(metavar="DATA", help="Labelled data (CSV/TSV/JSON Lines or a folder per label); "
                                                              "labels are optional with --featurizer-from.")],
    out_dir: Annotated[Path, typer.Option("--out", metavar="STORE", help="Feature store to write (replaced atomically).")],
    dev: DevOpt = None,
    dev_fraction: DevFractionOpt = 0.1,
    seed: Annotated[int, typer.Option("--seed", help="Seed of the dev split (as train's --seed).")] = 0,
    featurizer_from: Annotated[Optional[Path], typer.Option(
        "--featurizer-from", metavar="MODEL_DIR|STORE",
        help="Transform with this model's (or store's) fitted featurizer instead of fitting one: a store to "
             "evaluate or predict with that model. No dev split.")] = None,
    shard_rows: Annotated[int, typer.Option("--shard-rows", help="Rows per shard; training reads one shard at a time.")] = SHARD_ROWS_DEFAULT,
    cluster: ClusterOpt = None,
    reader: ReaderOptions = None,
    featurizer: FeaturizerConfig = None,
    jobs: JobsOpt = 1,
    force: ForceOpt = False,
    quiet: QuietOpt = False,
):
    """Featurize labelled data once into a feature store that train, sweep, probe, evaluate and predict read as DATA.

    The corpus is read in chunks (memory bounded by a chunk and the vocabulary) and the matrix written
    in shards of memory-mappable .npy arrays, with the labels, where each row came from, the featurizer
    and a fingerprint of the source files: a store whose source changed is refused.

    Example: lintext featurize data/demo/train.csv --dev data/demo/dev.csv --out stores/demo
    """
    from ..from_store import featurize as write_store
    from ..outputs import check_output_folder
    from ..tuning.cluster import featurize_mapper

    if featurizer is not None and featurizer_from is not None:
        raise ConfigError("--featurizer-from", str(featurizer_from), "takes the featurizer as fitted; drop the featurizer options")
    check_output_folder(out_dir, "store", force, inputs=[data, dev, featurizer_from])
    display = Display(show_progress(quiet))
    try:
        with featurize_mapper(cluster, featurizer) as mapper:
            store = write_store(data, out_dir, dev=dev, dev_fraction=dev_fraction, featurizer=featurizer,
                                featurizer_from=featurizer_from, seed=seed, reader=reader, shard_rows=shard_rows,
                                n_jobs=jobs, map_chunks=mapper, progress=display, force=force)
    finally:
        display.close()
    parts = ", ".join(f"{name} {store.rows(name):,} rows in {len(store.shards(name))} shard(s)"
                      for name in ("data", "dev") if store.has(name))
    out.print(f"{parts}; {store.n_features:,} columns", markup=False, soft_wrap=True)
    out.print(f"feature store written to {store.path}", markup=False, soft_wrap=True)
