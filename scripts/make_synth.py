#!/usr/bin/env python3
"""Synthetic labelled corpus for scale benchmarks.

Tokens are invented words made of consonant-vowel syllables; token frequencies
follow a Zipf-Mandelbrot law ``p(rank) ~ 1 / (rank + 2.7) ** zipf`` (Mandelbrot
1953's refinement of Zipf's law), so frequent words are short and a long tail
of rare words appears once or twice, as in real text.  Each label owns a set of
topic words; a share of each document's tokens is drawn from its label's topic
words, so the labels are learnable but not trivially separable.

Everything is vectorised with NumPy and driven by one seeded generator: the
same arguments give byte-identical output.

    python scripts/make_synth.py --documents 50000 --features 200000 --labels 50 \
        --length 20 --seed 0 --out /tmp/synth.csv
    python scripts/make_synth.py --shape large --out /tmp/large.csv

Named shapes (:data:`SHAPES`) fix every parameter at once; options given after
``--shape`` override it.  ``large`` is shaped like a real corpus of news-length
texts: about 50,000 documents and 60 labels that lintext's default featurizer
(word 1-2-grams, ``min_df=2``) turns into about 300,000 features and about 90
non-zeros per row, the word law steep enough (``zipf=1.25``) that the few most
frequent words occur in most documents (the top one in about nine in ten).

Output: CSV with the header ``text,label`` (``.tsv`` suffix: tab-separated,
same header), readable by ``lintext.io.read_corpus``.  Other scripts import
:func:`make_corpus` after ``sys.path.insert(0, <scripts folder>)``.
"""

from __future__ import annotations

import argparse
import csv
import sys
import time
from pathlib import Path

import numpy as np

_CONSONANTS = list("bdfgklmnprstvz") + ["ch", "sh", "th", "tr"]  # 18
_VOWELS = list("aeiou")  # 5
SYLLABLES = np.array([c + v for c in _CONSONANTS for v in _VOWELS])  # 90 syllables, two letters or more


# Named shapes: the parameters of make_corpus. "large" (measured with the default featurizer on
# the first 46,000 texts: 302,578 features, 93.8 non-zeros per row, the 5 most frequent
# features in 70-92% of the documents; 21 MB of CSV for 60,000 texts).
SHAPES = {
    "default": {"documents": 50_000, "features": 200_000, "labels": 50, "length": 20.0, "zipf": 1.07},
    "large": {"documents": 50_000, "features": 100_000, "labels": 60, "length": 70.0, "zipf": 1.25},
}


def invented_words(n: int, seed: int = 0) -> list[str]:
    """``n`` distinct invented words; shorter words come first (rank order).

    Rank ``r`` is written in base 90 with syllables: the first 90 ranks have one
    syllable, the next 8,100 two, and so on.  Within one length the ranks are
    shuffled by an affine bijection so that frequency does not follow the alphabet.
    """
    k = len(SYLLABLES)
    words = np.empty(n, dtype=object)
    start, length = 0, 1
    while start < n:
        size = k**length
        count = min(size, n - start)
        # offset -> (a * offset + c) mod size is a bijection because a is coprime with 90
        a, c = 7919, (seed * 104729 + length) % size
        codes = (np.arange(count, dtype=np.int64) * a + c) % size
        word = SYLLABLES[codes % k]
        for _ in range(1, length):
            codes //= k
            word = np.char.add(word, SYLLABLES[codes % k])
        words[start : start + count] = word
        start += count
        length += 1
    return words.tolist()


def make_corpus(
    documents: int = 50_000,
    features: int = 200_000,
    labels: int = 50,
    length: float = 20.0,
    seed: int = 0,
    zipf: float = 1.07,
    topic_share: float = 0.25,
    topic_words: int = 40,
) -> tuple[list[str], list[str]]:
    """Generate ``documents`` texts and their labels.

    Parameters
    ----------
    documents : number of texts.
    features : size of the invented vocabulary (distinct words that can occur).
    labels : number of labels; label ``k`` is named ``label_k`` (zero-padded),
        with shares proportional to ``1 / sqrt(k + 1)`` (mildly imbalanced).
    length : mean number of tokens per text (at least one token each; the
        count is negative-binomial, so lengths vary more than a Poisson count).
    seed : seed of the single NumPy generator driving everything.
    zipf : exponent of the Zipf-Mandelbrot law over word ranks.
    topic_share : expected share of a text's tokens drawn from its label's topic words.
    topic_words : topic words per label, drawn from the middle of the frequency ranks.

    Returns
    -------
    texts, labels : two lists of strings of length ``documents``.
    """
    if documents < 1 or features < 2 or labels < 1 or length < 1:
        raise ValueError("documents, labels and length must be >= 1 and features >= 2")
    rng = np.random.default_rng(seed)
    vocab = np.array(invented_words(features, seed), dtype=object)

    label_p = 1.0 / np.sqrt(np.arange(1, labels + 1))
    doc_label = rng.choice(labels, size=documents, p=label_p / label_p.sum())

    shape = 2.0
    lengths = 1 + rng.poisson(rng.gamma(shape, (length - 1) / shape, size=documents))
    total = int(lengths.sum())

    ranks = np.arange(features, dtype=np.float64)
    cdf = np.cumsum((ranks + 2.7) ** -zipf)
    cdf /= cdf[-1]
    token = np.searchsorted(cdf, rng.random(total), side="right").clip(0, features - 1)

    # topic words: per label, a seeded sample from the middle ranks, Zipf-weighted inside the topic
    band_lo = min(features // 100, 500)
    band = np.arange(band_lo, features)
    per_label = min(topic_words, band.size)
    topics = np.stack([rng.choice(band, size=per_label, replace=False) for _ in range(labels)])
    topic_cdf = np.cumsum(1.0 / np.arange(1, per_label + 1))
    topic_cdf /= topic_cdf[-1]
    token_label = np.repeat(doc_label, lengths)
    is_topic = rng.random(total) < topic_share
    pick = np.searchsorted(topic_cdf, rng.random(int(is_topic.sum())), side="right").clip(0, per_label - 1)
    token[is_topic] = topics[token_label[is_topic], pick]

    words = vocab[token].tolist()
    ends = np.cumsum(lengths).tolist()
    starts = [0] + ends[:-1]
    texts = [" ".join(words[a:b]) for a, b in zip(starts, ends)]
    width = len(str(labels - 1))
    names = [f"label_{k:0{width}d}" for k in range(labels)]
    return texts, [names[k] for k in doc_label.tolist()]


def write_corpus(path: str, texts: list[str], labels: list[str]) -> None:
    """Write ``text,label`` rows (tab-separated when the path ends in ``.tsv``); ``-`` is stdout."""
    delimiter = "\t" if str(path).endswith(".tsv") else ","
    if path == "-":
        _write(sys.stdout, delimiter, texts, labels)
        return
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    tmp = target.with_name(target.name + ".tmp")
    with open(tmp, "w", encoding="utf-8", newline="") as fh:
        _write(fh, delimiter, texts, labels)
    tmp.replace(target)


def _write(fh, delimiter, texts, labels):
    writer = csv.writer(fh, delimiter=delimiter, lineterminator="\n")
    writer.writerow(["text", "label"])
    writer.writerows(zip(texts, labels))


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0], formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--shape", choices=sorted(SHAPES), default="default",
                        help="named set of the parameters below (default: default); options override it")
    parser.add_argument("--documents", type=int, help="number of texts (default 50000)")
    parser.add_argument("--features", type=int, help="invented vocabulary size (default 200000)")
    parser.add_argument("--labels", type=int, help="number of labels (default 50)")
    parser.add_argument("--length", type=float, help="mean tokens per text (default 20)")
    parser.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    parser.add_argument("--zipf", type=float, help="Zipf-Mandelbrot exponent (default 1.07)")
    parser.add_argument("--topic-share", type=float, default=0.25, help="share of tokens from the label's topic words")
    parser.add_argument("--out", default="-", help="output file, .csv or .tsv; '-' for stdout (default)")
    args = parser.parse_args(argv)
    for name, value in SHAPES[args.shape].items():
        if getattr(args, name) is None:
            setattr(args, name, value)
    started = time.perf_counter()
    try:
        texts, labels = make_corpus(
            args.documents, args.features, args.labels, args.length, args.seed, args.zipf, args.topic_share
        )
    except ValueError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    write_corpus(args.out, texts, labels)
    if args.out != "-":
        print(f"{len(texts)} texts, {args.labels} labels -> {args.out} ({time.perf_counter() - started:.1f} s)", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
