"""Every command that takes --out keeps what lintext did not write, and says so in one line (exit 2)."""

from __future__ import annotations

import shutil

import pytest
from typer.testing import CliRunner

from lintext.cli import app

from ..conftest import write
from ..test_outputs import BEFORE, tree

runner = CliRunner()


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def one_line_error(result, *parts):
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: --out "), result.output
    for part in parts:
        assert part in lines[0], lines[0]


@pytest.fixture
def user_folder(tmp_path):
    folder = tmp_path / "important"
    write(folder / "notes.txt", "my notes")
    return folder


@pytest.fixture
def old_model(tmp_path):
    return shutil.copytree(BEFORE / "vocabulary", tmp_path / "model")


def commands(data, model, out):
    """Every command with --out, pointed at ``out``."""
    return {
        "train": ["train", data, "--out", out, "--epochs", "1", "--quiet"],
        "sweep": ["sweep", data, "--out", out, "--optimizers", "sgd", "--learning-rates", "0.1", "--epochs", "1",
                  "--quiet"],
        "probe": ["probe", data, "--out", out, "--steps-per-rung", 10, "--quiet"],
        "predict": ["predict", model, data, "--out", out, "--quiet"],
        "compare": ["compare", model, "--out", out, "--quiet"],
    }


@pytest.mark.parametrize("command", ["train", "sweep", "probe", "predict", "compare"])
def test_a_user_file_in_an_existing_out_folder_survives(tiny_csv, old_model, user_folder, command):
    before = tree(user_folder)
    result = run(*commands(tiny_csv, old_model, user_folder)[command])
    if command in ("predict", "compare"):
        one_line_error(result, "is a folder; give a file name")
    else:
        one_line_error(result, "is a folder lintext did not write (it holds notes.txt)", "--force")
    assert tree(user_folder) == before
    assert sorted(p.name for p in user_folder.parent.iterdir() if p.name.startswith(".")) == []


@pytest.mark.parametrize("command", ["predict", "compare"])
def test_a_user_file_at_out_survives(tiny_csv, old_model, tmp_path, command):
    mine = write(tmp_path / "mine.txt", "my own file\n")
    result = run(*commands(tiny_csv, old_model, mine)[command])
    one_line_error(result, "lintext did not write", "--force")
    assert mine.read_text() == "my own file\n"


def test_probe_into_a_model_folder_is_refused(tiny_csv, old_model):
    before = tree(old_model)
    result = run(*commands(tiny_csv, old_model, old_model)["probe"])
    one_line_error(result, "is a lintext model folder, not a probe folder")
    assert tree(old_model) == before


@pytest.mark.parametrize("out", ["", "."])
def test_current_folder_is_never_replaced(tiny_csv, tmp_path, monkeypatch, out):
    work = tmp_path / "work"
    write(work / "keep.txt", "x")
    monkeypatch.chdir(work)
    result = run("train", tiny_csv, "--out", out, "--epochs", "1", "--force", "--quiet")
    one_line_error(result, "lintext never replaces it")
    assert tree(work) == {"keep.txt": b"x"}


def test_the_corpus_folder_is_never_replaced(tmp_path):
    corpus = tmp_path / "corpus"
    for label in ("a", "b"):
        for i in range(3):
            write(corpus / label / f"{i}.txt", f"{label} text number {i}")
    before = tree(corpus)
    result = run("train", corpus, "--out", corpus, "--force", "--epochs", "1", "--dev-fraction", "0", "--quiet")
    one_line_error(result, "which this command reads")
    assert tree(corpus) == before


def test_symlink_to_a_user_folder_is_refused(tiny_csv, user_folder, tmp_path):
    link = tmp_path / "link"
    link.symlink_to(user_folder)
    result = run("train", tiny_csv, "--out", link, "--epochs", "1", "--quiet")
    one_line_error(result, "did not write")
    assert tree(user_folder) == {"notes.txt": b"my notes"}


@pytest.mark.slow
def test_old_model_is_replaced_and_force_replaces_a_user_folder(tiny_csv, old_model, user_folder):
    result = run("train", tiny_csv, "--out", old_model, "--epochs", "1", "--dev-fraction", "0", "--quiet")
    assert result.exit_code == 0, result.output
    assert ".lintext.json" in tree(old_model)
    result = run("train", tiny_csv, "--out", user_folder, "--epochs", "1", "--dev-fraction", "0", "--force", "--quiet")
    assert result.exit_code == 0, result.output
    assert "notes.txt" not in tree(user_folder) and "model.json" in tree(user_folder)


def test_predictions_file_is_replaced_by_the_next_predictions(tiny_csv, old_model, tmp_path):
    target = tmp_path / "pred.csv"
    for _ in range(2):
        result = run("predict", old_model, tiny_csv, "--out", target, "--quiet")
        assert result.exit_code == 0, result.output
    assert target.read_text().splitlines()[0] == "row,label,probability"


def test_out_below_a_file_is_refused_before_training(tiny_csv, tmp_path):
    blocker = write(tmp_path / "file", "x")
    result = run("train", tiny_csv, "--out", blocker / "sub", "--epochs", "1", "--quiet")
    one_line_error(result, f"{blocker} is a file, not a folder")


def test_no_output_before_an_input_error(old_model, tmp_path):
    # The error is on the last line: nothing may reach standard output before it is found.
    rows = ["text"] + [f"water pressure {i}" for i in range(50)]
    bad = write(tmp_path / "bad.csv", "\n".join(rows) + "\n" + '"unclosed\n')
    result = runner.invoke(app, ["predict", str(old_model), str(bad)])
    assert result.exit_code == 2
    assert result.stdout == "" and result.stderr.startswith(f"error: {bad}")


def test_usage_errors_are_one_line_with_exit_2(tiny_csv):
    for args, problem in ((["train", tiny_csv, "--no-such-option"], "No such option: --no-such-option"),
                          (["train"], "Missing argument 'DATA'"),
                          (["train", tiny_csv, "--out", "m", "--epochs", "many"], "Invalid value for '--epochs'")):
        result = run(*args)
        assert result.exit_code == 2
        lines = result.output.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error: ") and problem in lines[0], result.output
        assert lines[0].endswith(" train --help')")  # (see 'lintext train --help'); the test runner says 'root'


def test_help_shows_arguments_by_name_and_values_by_kind():
    text = run("predict", "--help").output
    assert "MODEL_DIR" in text and "DATA" in text and "--force" in text
    assert "<int>" not in text and "<float>" not in text and "{DATA}" not in text
    assert "INTEGER" not in text and "--top-labels N" in " ".join(text.split())


def test_report_refuses_a_folder_in_place_of_report_html_before_writing(old_model):
    (old_model / "report.html").mkdir()
    result = run("report", old_model, "--quiet")
    assert result.exit_code == 2
    assert result.output.strip() == f"error: {old_model / 'report.html'}: is not a file; lintext writes its report there"
    assert not (old_model / "features.csv").exists()  # nothing was written before the refusal


def test_a_full_disk_names_the_output_and_keeps_the_old_model(tiny_csv, old_model, monkeypatch):
    import errno

    from lintext.text.featurizer import Featurizer

    from ..test_outputs import tree

    before = tree(old_model)

    def full(self, path):  # the disk fills up while the new model is being written
        raise OSError(errno.ENOSPC, "No space left on device", str(path))

    monkeypatch.setattr(Featurizer, "save_vocabulary", full)
    result = run("train", tiny_csv, "--out", old_model, "--epochs", "1", "--dev-fraction", "0", "--quiet")
    assert result.exit_code == 2
    assert result.output.strip() == f"error: --out {old_model}: No space left on device (while writing vocabulary.tsv)"
    assert tree(old_model) == before
    assert sorted(p.name for p in old_model.parent.iterdir() if p.name.startswith(".")) == []


def test_a_batch_size_beyond_any_array_is_refused_before_work(tiny_csv, tmp_path):
    result = run("train", tiny_csv, "--out", tmp_path / "m", "--batch-size", str(2**63))
    assert result.exit_code == 2 and "--batch-size=9223372036854775808: must be at most 2147483648" in result.output
    assert not (tmp_path / "m").exists()
