"""The vocabulary file (vocabulary.tsv) read back: every name exactly, and a malformed line named.

Expected values are written out by hand beside each check.
"""

from __future__ import annotations

import numpy as np
import pytest

from lintext.errors import ModelFileError
from lintext.text.featurizer import Featurizer, FeaturizerConfig
from lintext.text.vocabulary import VOCAB_HEADER

STATE = {"config": FeaturizerConfig(ngrams=(1, 2)).to_json(), "n_documents": 9}


def test_names_with_tabs_breaks_and_backslashes_read_back(tmp_path):
    f = Featurizer(FeaturizerConfig(ngrams=(1, 2), min_df=1))
    # the vectorizer lower-cases and splits words; the names are set by hand to hold every escape
    f.feature_names = ["a\tb", "back\\slash", "line\nbreak", "carriage\rreturn", "naïve ☃", "plain", "t\\t"]
    f.document_frequency = np.array([1, 2, 3, 4, 5, 6, 7])
    f.n_documents = 9
    f.save_vocabulary(tmp_path / "v.tsv")
    # by hand: \t, \\, \n and \r written as two characters, so each name stays on one line
    lines = (tmp_path / "v.tsv").read_text(encoding="utf-8").split("\n")
    assert lines[1:3] == ["a\\tb\t0\t1", "back\\\\slash\t1\t2"] and len(lines) == 9 and lines[-1] == ""
    g = Featurizer.load(f.to_json(), tmp_path / "v.tsv")
    assert g.feature_names == f.feature_names
    assert g.document_frequency.tolist() == [1, 2, 3, 4, 5, 6, 7]


@pytest.mark.parametrize("body, message", [
    ("alpha\t0\t3\nbeta\t1\n", "line 3: expected 3 tab-separated fields, found 2"),
    ("alpha\t0\t3\n\nbeta\t1\t2\n", "line 3: expected 3 tab-separated fields, found 1"),
    ("alpha\t0\t3\nbeta\tone\t2\n", "line 3: column and document frequency must be integers"),
    ("alpha\t0\t3\nbeta\t1\t2\tgamma\n", "line 3: expected 3 tab-separated fields, found 4"),
])
def test_a_malformed_line_is_named(tmp_path, body, message):
    path = tmp_path / "vocabulary.tsv"
    path.write_text(VOCAB_HEADER + "\n" + body, encoding="utf-8")
    with pytest.raises(ModelFileError) as info:
        Featurizer.load(STATE, path)
    assert message in str(info.value)


def test_last_line_without_a_line_break_and_empty_vocabulary(tmp_path):
    path = tmp_path / "vocabulary.tsv"
    path.write_text(VOCAB_HEADER + "\nbeta\t1\t5\nalpha\t0\t7", encoding="utf-8")
    f = Featurizer.load(STATE, path)
    assert f.feature_names == ["alpha", "beta"] and f.document_frequency.tolist() == [7, 5]  # in column order
    path.write_text(VOCAB_HEADER + "\n", encoding="utf-8")
    assert Featurizer.load(STATE, path).feature_names == []


@pytest.mark.parametrize("body, names, columns, frequencies", [
    # by hand: leading zeros, the largest 18-digit number and a 19-digit one below 2**62
    ("a\t0\t007\nb\t1\t999999999999999999\nc\t2\t4611686018427387903\n", ["a", "b", "c"], [0, 1, 2],
     [7, 999999999999999999, 2**62 - 1]),
    ("a\t1\t2\r\nb\t0\t3\r\n", ["a", "b"], [1, 0], [2, 3]),  # Windows line ends: int() strips the \r
    ("x\\ty\t0\t1\n\t1\t1\n", ["x\ty", ""], [0, 1], [1, 1]),  # an escaped tab, an empty name
])
def test_columns_read_as_written(tmp_path, body, names, columns, frequencies):
    from lintext.text.vocabulary import read_vocabulary

    path = tmp_path / "vocabulary.tsv"
    path.write_bytes((VOCAB_HEADER + "\n" + body).encode("utf-8"))
    got_names, got_columns, got_frequencies = read_vocabulary(path)
    assert got_names == names
    assert got_columns.tolist() == columns and got_frequencies.tolist() == frequencies
    assert got_columns.dtype == np.int64 and got_frequencies.dtype == np.int64


def test_column_out_of_range_is_named(tmp_path):
    path = tmp_path / "vocabulary.tsv"
    path.write_text(VOCAB_HEADER + "\na\t0\t1\nb\t4611686018427387904\t1\n", encoding="utf-8")  # 2**62
    with pytest.raises(ModelFileError) as info:
        Featurizer.load(STATE, path)
    assert "line 3: column 4611686018427387904 out of range" in str(info.value)
