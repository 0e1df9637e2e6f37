"""The command line through typer's test runner: output, messages and exit status."""

from __future__ import annotations

import pytest
from typer.testing import CliRunner

from lintext.cli import app

from .conftest import write

runner = CliRunner()


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def test_stats_reports_counts(tiny_csv):
    result = run("stats", tiny_csv, "--ngrams", "1-1")
    assert result.exit_code == 0, result.output
    # 12 documents; words: ferry, was, late, bill, too, high (df 6 each) + 12 numbers? no: single
    # digits are dropped by the default token pattern (two or more word characters).
    assert "12 documents, 2 labels" in result.output
    assert "features: 6 " in result.output
    assert "in 1 document: 0.0%" in result.output


BAD_INPUTS = [
    ("missing.csv", None, "no such file or folder"),
    ("empty.csv", "", "empty file"),
    ("nocol.csv", "body,label\nx,a\n", "line 1: no column 'text'"),
    ("nolabel.csv", "text,label\nx,a\ny, \n", "line 3: empty label"),
    ("utf8.csv", b"text,label\n\xfe,a\n", "line 2: invalid UTF-8 byte 0xfe at byte offset 11"),
    ("bad.jsonl", '{"text": "a", "label": "x"}\n{"text": \n', "line 2: malformed JSON"),
    ("field.jsonl", '{"body": "a", "label": "x"}\n', "line 1: no field 'text'"),
    ("one.jsonl", '{"text": "a", "label": "x"}\n', "found 1 label(s) ('x')"),
]


@pytest.mark.parametrize("name, content, message", BAD_INPUTS)
def test_bad_input_exits_2_with_one_line(tmp_path, name, content, message):
    path = tmp_path / name
    if content is not None:
        write(path, content)
    result = run("stats", path)
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1, result.output
    assert lines[0].startswith(f"error: {path}") and message in lines[0]
    assert "Traceback" not in result.output


def test_folder_without_label_folders(tmp_path):
    write(tmp_path / "flat" / "doc.txt", "hello")
    result = run("stats", tmp_path / "flat")
    assert result.exit_code == 2 and "no label sub-folders" in result.output


@pytest.mark.parametrize(
    "args, message",
    [
        (["--ngrams", "3-1"], "--ngrams='3-1'"),
        (["--weighting", "bm25"], "--weighting='bm25'"),
        (["--min-df", "lots"], "--min-df='lots'"),
        (["--format", "xml"], "--format='xml'"),
    ],
)
def test_bad_options_exit_2(tiny_csv, args, message):
    result = run("stats", tiny_csv, *args)
    assert result.exit_code == 2 and message in result.output


def test_version_and_help():
    assert run("--version").output.startswith("lintext ")
    result = run("stats", "--help")
    assert result.exit_code == 0 and "Example:" in result.output
