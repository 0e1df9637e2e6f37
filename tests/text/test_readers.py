"""Readers and the dev split. Quoting cases follow RFC 4180 section 2; JSON Lines
cases follow the JSON Lines format description (one UTF-8 JSON value per line,
'\\n' separated, a trailing newline allowed)."""

from __future__ import annotations

import json

import numpy as np
import pytest

from lintext.errors import ConfigError, InputError
from lintext.text.readers import ReaderOptions, iter_chunks, read_corpus
from lintext.text.split import split_dev

from ..conftest import write


def test_csv_rfc4180_quoting(tmp_path):
    # RFC 4180 §2 rules 5-7: fields may be enclosed in double quotes; quoted fields may hold
    # commas and line breaks (CRLF); a double quote inside is escaped by doubling it.
    content = (
        'text,label\r\n'
        '"comma, inside",a\r\n'
        '"line\r\nbreak",b\r\n'
        '"say ""hi""",a\r\n'
        'plain,b\r\n'
    )
    corpus = read_corpus(write(tmp_path / "q.csv", content.encode("utf-8")))
    assert corpus.texts == ["comma, inside", "line\r\nbreak", 'say "hi"', "plain"]
    assert corpus.labels == ["a", "b", "a", "b"]
    # the record after a two-line field starts on physical line 5
    assert corpus.sources[1].endswith(":3") and corpus.sources[2].endswith(":5")


def test_csv_last_record_without_newline_and_column_order(tmp_path):
    # RFC 4180 §2 rule 2: the last record may or may not end with a line break.
    corpus = read_corpus(write(tmp_path / "o.csv", "label,id,text\nx,1,first\ny,2,second"))
    assert corpus.texts == ["first", "second"] and corpus.label_names == ["x", "y"]


def test_tsv_has_no_quoting(tmp_path):
    # IANA text/tab-separated-values: fields hold no tab or line break and no quoting, so quotes are text
    path = write(tmp_path / "q.tsv", 'art\t"critic" said the dog\nart\tplain "quote\nlaw\tx\n')
    corpus = read_corpus(path, ReaderOptions(header=False, text_column="2", label_column="1"))
    assert corpus.texts == ['"critic" said the dog', 'plain "quote', "x"]


def test_tsv_and_custom_columns(tmp_path):
    path = write(tmp_path / "d.tsv", "body\tteam\nhello there\tx\nbye now\ty\n")
    corpus = read_corpus(path, ReaderOptions(text_column="body", label_column="team"))
    assert corpus.texts == ["hello there", "bye now"] and corpus.labels == ["x", "y"]


def test_jsonl_fields_blank_lines_and_unicode(tmp_path):
    # JSON Lines: each line a valid JSON value, UTF-8; we also skip blank lines.
    lines = [json.dumps({"text": "café – €5", "label": "a", "id": 1}, ensure_ascii=False), "", json.dumps({"text": "x\ny", "label": "b"})]
    corpus = read_corpus(write(tmp_path / "d.jsonl", "\n".join(lines)))
    assert corpus.texts == ["café – €5", "x\ny"]
    assert corpus.sources[1].endswith(":3")


def test_folder_per_label(tmp_path):
    for label, docs in {"billing": ["one", "two"], "outage": ["three"]}.items():
        for i, d in enumerate(docs):
            write(tmp_path / "tree" / label / f"{i}.txt", d)
    write(tmp_path / "tree" / ".hidden" / "x.txt", "ignored")
    corpus = read_corpus(tmp_path / "tree")
    assert sorted(zip(corpus.labels, corpus.texts)) == [("billing", "one"), ("billing", "two"), ("outage", "three")]


def test_format_can_be_forced(tmp_path):
    path = write(tmp_path / "data.dat", "text\tlabel\na\tx\nb\ty\n")
    with pytest.raises(InputError, match="cannot tell the format"):
        read_corpus(path)
    path = write(tmp_path / "data.txt", "text\tlabel\na\tx\nb\ty\n")
    with pytest.raises(InputError, match="plain text .* has no labels"):  # .txt is one document per line
        read_corpus(path)
    assert read_corpus(path, ReaderOptions(format="tsv")).labels == ["x", "y"]


@pytest.mark.parametrize(
    "name, content, message, line",
    [
        ("empty.csv", "", "empty file", None),
        ("nocol.csv", "body,label\nx,a\n", "no column 'text'", 1),
        ("nolabel.csv", "text,label\nx,a\ny,\n", "empty label", 3),
        ("fields.csv", "text,label\nx,a,extra\n", "3 fields where the header has 2", 2),
        ("quote.csv", 'text,label\n"open,a\n', "unexpected end of data", None),
        ("onlyhead.csv", "text,label\n", "no records", None),
        ("bad.jsonl", '{"text": "a", "label": "x"}\n{"text": "b", label: "y"}\n', "malformed JSON", 2),
        ("nofield.jsonl", '{"text": "a"}\n', "no field 'label'", 1),
        ("notobj.jsonl", '["a", "x"]\n', "expected a JSON object", 1),
        ("one.csv", "text,label\na,x\nb,x\n", "a classifier needs at least 2", None),
    ],
)
def test_bad_input_names_file_line_and_problem(tmp_path, name, content, message, line):
    path = write(tmp_path / name, content)
    with pytest.raises(InputError, match=message) as info:
        read_corpus(path)
    text = str(info.value)
    assert text.startswith(str(path)) and "\n" not in text
    if line is not None:
        assert f"line {line}:" in text


def test_invalid_utf8_names_line_and_byte_offset(tmp_path):
    raw = "text,label\nok,a\n".encode() + b"bad \xff byte,b\n"
    with pytest.raises(InputError) as info:
        read_corpus(write(tmp_path / "u.csv", raw))
    # "text,label\n" is 11 bytes, "ok,a\n" 5, "bad " 4: the bad byte is at offset 20, on line 3
    assert "line 3" in str(info.value) and "byte offset 20" in str(info.value) and "0xff" in str(info.value)


def test_folder_errors(tmp_path):
    (tmp_path / "flat").mkdir()
    write(tmp_path / "flat" / "a.txt", "x")
    with pytest.raises(InputError, match="no label sub-folders"):
        read_corpus(tmp_path / "flat")
    write(tmp_path / "tree" / "a" / "1.txt", b"\xc3\x28")
    write(tmp_path / "tree" / "b" / "1.txt", "fine")
    with pytest.raises(InputError, match=r"1\.txt, line 1: invalid UTF-8"):
        read_corpus(tmp_path / "tree")
    with pytest.raises(InputError, match="no such file"):
        read_corpus(tmp_path / "missing.csv")


def test_chunks_stream_without_labels(tmp_path):
    path = write(tmp_path / "p.csv", "text\n" + "".join(f"doc {i}\n" for i in range(25)))
    chunks = list(iter_chunks(path, chunk_size=10))
    assert [len(c) for c in chunks] == [10, 10, 5]
    assert chunks[2].texts[-1] == "doc 24" and chunks[0].labels[0] is None


def test_dev_split_is_stratified_and_seeded(tmp_path):
    rows = ["text,label"] + [f"a{i},a" for i in range(40)] + [f"b{i},b" for i in range(10)]
    corpus = read_corpus(write(tmp_path / "s.csv", "\n".join(rows)))
    train, dev = split_dev(corpus, 0.2, seed=3)
    assert dev.label_counts() == {"a": 8, "b": 2} and train.label_counts() == {"a": 32, "b": 8}
    assert not set(train.texts) & set(dev.texts)
    assert split_dev(corpus, 0.2, seed=3)[1].texts == dev.texts
    assert split_dev(corpus, 0.2, seed=4)[1].texts != dev.texts


def test_dev_split_errors(tmp_path):
    corpus = read_corpus(write(tmp_path / "s.csv", "text,label\na,x\nb,x\nc,y\n"))
    with pytest.raises(InputError, match="label 'y' has only 1 document"):
        split_dev(corpus, 0.1)
    with pytest.raises(ConfigError, match="--dev-fraction"):
        split_dev(corpus, 1.5)


def test_label_indices_reject_unknown_label(tmp_path):
    corpus = read_corpus(write(tmp_path / "s.csv", "text,label\na,x\nb,y\nc,z\n"))
    assert np.array_equal(corpus.label_indices(["z", "y", "x"]), [2, 1, 0])
    with pytest.raises(InputError, match=r"s\.csv:4: label 'z' does not occur"):
        corpus.label_indices(["x", "y"])
