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
