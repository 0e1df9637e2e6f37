"""Property-based tests (hypothesis): any bytes, and random CSV / JSON Lines fragments,
give either a corpus or our typed InputError, never another exception."""

from __future__ import annotations

import json
import tempfile
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from lintext.errors import InputError
from lintext.text.readers import read_corpus

SETTINGS = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])


def read_or_error(suffix: str, raw: bytes):
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / f"data{suffix}"
        path.write_bytes(raw)
        try:
            corpus = read_corpus(path)
        except InputError as exc:
            message = str(exc)
            assert message.startswith(str(path)) and "\n" not in message
            return None
        assert len(corpus) > 0 and len(corpus.label_names) >= 2
        assert all(isinstance(t, str) for t in corpus.texts)
        assert all(isinstance(lab, str) and lab.strip() for lab in corpus.labels)
        return corpus


@SETTINGS
@given(raw=st.binary(max_size=300), suffix=st.sampled_from([".csv", ".tsv", ".jsonl"]))
def test_random_bytes(raw, suffix):
    read_or_error(suffix, raw)


cell = st.text(alphabet=st.sampled_from(list('ab ,"\n\r\té€x\\')), max_size=8)


@SETTINGS
@given(rows=st.lists(st.lists(cell, min_size=0, max_size=4), min_size=0, max_size=6), header=st.booleans())
def test_random_csv_fragments(rows, header):
    lines = (["text,label"] if header else []) + [",".join(r) for r in rows]
    read_or_error(".csv", "\n".join(lines).encode("utf-8"))


json_value = st.recursive(
    st.none() | st.booleans() | st.integers() | st.text(max_size=5),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.sampled_from(["text", "label", "x"]), inner, max_size=3),
    max_leaves=6,
)


@SETTINGS
@given(values=st.lists(json_value, max_size=6), cut=st.integers(min_value=0, max_value=400))
def test_random_jsonl_fragments(values, cut):
    text = "\n".join(json.dumps(v) for v in values)
    read_or_error(".jsonl", text[: cut or None].encode("utf-8"))


@SETTINGS
@given(labels=st.lists(st.sampled_from(["a", "b", "c"]), min_size=2, max_size=8))
def test_valid_jsonl_always_reads(labels):
    lines = [json.dumps({"text": f"doc {i}", "label": lab}) for i, lab in enumerate(labels)]
    corpus = read_or_error(".jsonl", "\n".join(lines).encode())
    if len(set(labels)) >= 2:
        assert corpus is not None and corpus.labels == labels
    else:
        assert corpus is None
