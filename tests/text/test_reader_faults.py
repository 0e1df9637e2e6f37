"""Inputs that are not what they claim: each gives one error naming file, line and problem.

The cases are issue 15's fault hunt: those that already behaved (kept here so they keep
behaving) and those that did not (huge JSON numbers, deep nesting, lone surrogates, read
errors). The expected messages are lintext's own; where a byte offset or a line is named it
is counted by hand in the comment.
"""

from __future__ import annotations

import errno
import json
import os
import threading

import pytest

from lintext.errors import InputError
from lintext.text.readers import read_corpus

from ..conftest import write


def error_of(path, **kwargs) -> str:
    with pytest.raises(InputError) as info:
        read_corpus(path, **kwargs)
    message = str(info.value)
    assert "\n" not in message
    return message


@pytest.mark.parametrize("name, content, message", [
    # 5000 digits: more than Python reads as an integer (sys.get_int_max_str_digits(), 4300)
    ("big.jsonl", '{"text": "a", "label": "x"}\n{"text": "b", "label": ' + "7" * 5000 + "}\n",
     "big.jsonl, line 2: malformed JSON: a number too long to read"),
    ("deep.jsonl", '{"text": "a", "label": "x"}\n' + "[" * 100000 + "]" * 100000 + "\n",
     "deep.jsonl, line 2: malformed JSON: nested too deeply"),
    # \ud800 is half of a UTF-16 pair: not a character, cannot be written as UTF-8 (character 5 of "bad \ud800")
    ("text.jsonl", '{"text": "a", "label": "x"}\n{"text": "bad \\ud800", "label": "y"}\n',
     "text.jsonl, line 2: field 'text' holds a lone surrogate (\\ud800) at character 5"),
    ("label.jsonl", '{"text": "a", "label": "x"}\n{"text": "b", "label": "\\udfff"}\n',
     "label.jsonl, line 2: field 'label' holds a lone surrogate (\\udfff) at character 1"),
    # kept from before: a Latin-1 e-acute (0xe9) after "text,label\ncaf" = 11 + 3 bytes
    ("latin1.csv", b"text,label\ncaf\xe9,x\n", "latin1.csv, line 2: invalid UTF-8 byte 0xe9 at byte offset 14"),
    ("utf16.csv", "text,label\na,x\n".encode("utf-16"), "utf16.csv, line 1: starts with a UTF-16 byte-order mark"),
    ("binary.csv", bytes(range(128, 256)), "binary.csv, line 1: invalid UTF-8 byte 0x80 at byte offset 0"),
    ("empty.csv", b"", "empty.csv: empty file"),
    ("nocolumn.csv", b"body,label\nx,a\n", "nocolumn.csv, line 1: no column 'text'"),
])
def test_bad_inputs_name_file_line_and_problem(tmp_path, name, content, message):
    path = write(tmp_path / name, content)
    assert error_of(path).startswith(f"{tmp_path}/{message}")


@pytest.mark.parametrize("content", [
    "\ufefftext,label\na b,x\nc d,y\n",  # a UTF-8 byte-order mark is dropped
    "text,label\r\na b,x\r\nc d,y\r\n",  # CRLF line ends
    "text,label\na\0b,x\nc d,y\n",  # a NUL inside a text is a character like any other
])
def test_inputs_that_keep_working(tmp_path, content):
    corpus = read_corpus(write(tmp_path / "ok.csv", content))
    assert corpus.labels == ["x", "y"] and corpus.texts[1] == "c d"


def test_symlink_loop_and_fifo(tmp_path):
    os.symlink(tmp_path / "b.csv", tmp_path / "a.csv")
    os.symlink(tmp_path / "a.csv", tmp_path / "b.csv")
    assert error_of(tmp_path / "a.csv") == f"{tmp_path / 'a.csv'}: no such file or folder"
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    writer = threading.Thread(target=lambda: fifo.write_text("text,label\nab,x\ncd,y\n"))
    writer.start()
    assert read_corpus(fifo).texts == ["ab", "cd"]  # a pipe reads like a file (as `<(...)` does)
    writer.join()


class FailingFile:
    """A file that gives two lines, then fails as a disk with a bad sector does (EIO)."""

    def __init__(self, lines):
        self.lines = list(lines)

    def __iter__(self):
        yield from self.lines
        raise OSError(errno.EIO, "Input/output error")

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False


def test_read_error_names_the_line(tmp_path, monkeypatch):
    import builtins

    path = write(tmp_path / "disk.csv", "text,label\na,x\nb,y\n")
    real_open = builtins.open
    monkeypatch.setattr(builtins, "open", lambda p, *a, **k: FailingFile([b"text,label\n", b"a,x\n"])
                        if str(p) == str(path) else real_open(p, *a, **k))
    assert error_of(path) == f"{path}, line 3: cannot be read (Input/output error)"


def test_unreadable_document_in_a_folder(tmp_path, monkeypatch):
    from pathlib import Path

    for label in ("a", "b"):
        write(tmp_path / "corpus" / label / "1.txt", f"text of {label}")
    secret = tmp_path / "corpus" / "b" / "1.txt"
    real = Path.read_bytes

    def refuse(self):
        if self == secret:
            raise PermissionError(errno.EACCES, "Permission denied", str(self))
        return real(self)

    monkeypatch.setattr(Path, "read_bytes", refuse)  # root reads anything: the refusal is simulated
    assert error_of(tmp_path / "corpus") == f"{secret}: cannot be read (Permission denied)"


def test_valid_json_lines_still_read(tmp_path):
    lines = [json.dumps({"text": "caf\u00e9 \U0001f600", "label": "x"}), json.dumps({"text": "b", "label": 7})]
    corpus = read_corpus(write(tmp_path / "ok.jsonl", "\n".join(lines) + "\n"))
    assert corpus.texts[0] == "caf\u00e9 \U0001f600" and corpus.labels == ["x", "7"]
