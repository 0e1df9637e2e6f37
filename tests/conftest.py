"""Shared fixtures: small corpora written to temporary files."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "data" / "demo"


def write(path: Path, content, mode="w") -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8")
    return path


@pytest.fixture
def tiny_csv(tmp_path) -> Path:
    rows = ["text,label"] + [f"ferry {i} was late,transport" for i in range(6)] + [f"bill {i} too high,billing" for i in range(6)]
    return write(tmp_path / "tiny.csv", "\n".join(rows) + "\n")


@pytest.fixture
def tiny_jsonl(tmp_path) -> Path:
    lines = [json.dumps({"text": f"meter {i} reading", "label": "meter"}) for i in range(4)]
    lines += [json.dumps({"text": f"power cut {i} tonight", "label": "outage"}) for i in range(4)]
    return write(tmp_path / "tiny.jsonl", "\n".join(lines) + "\n")


def small_corpus_rows(n_per_label: int = 40, seed: int = 0) -> list[tuple[str, str]]:
    """Three invented labels with overlapping vocabularies, shuffled deterministically."""
    import random

    rng = random.Random(seed)
    topics = {
        "billing": "invoice charge refund payment overdue tariff direct debit statement".split(),
        "outage": "power cut dark blackout restore lines storm flicker".split(),
        "water": "tap brown pressure leak pipe cloudy taste boil".split(),
    }
    common = "please help today again my house the street since morning urgent thanks".split()
    rows = []
    for label, words in topics.items():
        for _ in range(n_per_label):
            doc = rng.sample(words, 3) + rng.sample(common, 3) + [rng.choice(topics[rng.choice(list(topics))])]
            rng.shuffle(doc)
            rows.append((" ".join(doc), label))
    rng.shuffle(rows)
    return rows


def write_csv(path: Path, rows) -> Path:
    import csv

    path.parent.mkdir(parents=True, exist_ok=True)
    with open(path, "w", encoding="utf-8", newline="") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(["text", "label"])
        writer.writerows(rows)
    return path


@pytest.fixture
def small_split(tmp_path) -> dict:
    rows = small_corpus_rows()
    return {
        "train": write_csv(tmp_path / "train.csv", rows[:90]),
        "dev": write_csv(tmp_path / "dev.csv", rows[90:105]),
        "test": write_csv(tmp_path / "test.csv", rows[105:]),
    }


def many_label_rows(n_labels: int = 58, per_label: int = 30, group: int = 3, seed: int = 0) -> list[tuple[str, str]]:
    """An invented corpus with many labels, confusable in groups of ``group``.

    Each label has six words of its own, each group of labels six words it shares; a document
    is two own words, two group words and two common words, so labels of one group are
    confused with each other and seldom with the rest.
    """
    import random

    rng = random.Random(seed)
    syllables = "ka lo mi nu pe ra si to vu xe ba de fi go hu".split()

    def word(k: int, kind: str) -> str:
        return kind + "".join(syllables[(k // 15**p) % 15] for p in range(3))

    common = [word(k, "c") for k in range(20)]
    rows = []
    for label in range(n_labels):
        own = [word(label * 6 + k, "w") for k in range(6)]
        shared = [word((label // group) * 6 + k, "g") for k in range(6)]
        name = f"topic-{label:02d}"
        for _ in range(per_label):
            doc = rng.sample(own, 1) + rng.sample(shared, 3) + rng.sample(common, 2)
            rng.shuffle(doc)
            rows.append((" ".join(doc), name))
    rng.shuffle(rows)
    return rows
