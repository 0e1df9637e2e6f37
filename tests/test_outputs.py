"""What lintext may replace: markers, the output-path guard, files recognised by content, leftovers.

The rule under test is the project's own (issue 15, "never delete what lintext did not write"):
each case builds the situation on disk and checks, byte for byte, what is left afterwards.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

from lintext.errors import OutputError
from lintext.files import atomic_directory, atomic_file
from lintext.outputs import (MARKER, check_output_file, check_output_folder, clean_leftovers, leftover_prefix,
                             output_kind, read_marker, short_name)

BEFORE = Path(__file__).resolve().parent / "data" / "before-layout"


def tree(folder: Path) -> dict:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def fill_with(name: str, text: str):
    return lambda folder: (folder / name).write_text(text)


def test_marker_names_kind_and_files(tmp_path):
    out = atomic_directory(tmp_path / "m", lambda d: ((d / "a.txt").write_text("a"), (d / "sub").mkdir(),
                                                     (d / "sub" / "b.txt").write_text("b")), kind="model")
    marker = read_marker(out)
    assert marker["kind"] == "model" and marker["files"] == ["a.txt", "sub/b.txt"]
    assert output_kind(out) == "model"


def test_user_folder_is_refused_and_kept(tmp_path):
    user = tmp_path / "important"
    user.mkdir()
    (user / "notes.txt").write_text("mine")
    for kind in ("model", "sweep", "probe", "store"):
        with pytest.raises(OutputError) as info:
            atomic_directory(user, fill_with("model.json", "{}"), kind=kind)
        message = str(info.value)
        assert message.startswith(f"--out {user}: is a folder lintext did not write (it holds notes.txt)")
        assert "--force" in message and "\n" not in message
    assert tree(user) == {"notes.txt": b"mine"}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["important"]


def test_force_replaces_a_user_folder(tmp_path):
    user = tmp_path / "scratch"
    user.mkdir()
    (user / "old.txt").write_text("old")
    atomic_directory(user, fill_with("model.json", "{}"), kind="model", force=True)
    assert sorted(tree(user)) == [MARKER, "model.json"]


def test_same_kind_is_replaced_other_kind_refused(tmp_path):
    out = atomic_directory(tmp_path / "m", fill_with("model.json", "1"), kind="model")
    atomic_directory(out, fill_with("model.json", "2"), kind="model")
    assert (out / "model.json").read_text() == "2"
    with pytest.raises(OutputError, match="is a lintext model folder, not a probe folder"):
        atomic_directory(out, fill_with("probe.csv", ""), kind="probe")
    assert (out / "model.json").read_text() == "2"


def test_a_user_file_inside_a_lintext_folder_is_not_lost(tmp_path):
    out = atomic_directory(tmp_path / "m", fill_with("model.json", "1"), kind="model")
    (out / "my-notes.txt").write_text("keep me")
    with pytest.raises(OutputError, match="holds my-notes.txt, which lintext did not write"):
        atomic_directory(out, fill_with("model.json", "2"), kind="model")
    assert (out / "my-notes.txt").read_text() == "keep me"
    # report.html and features.csv may be added later by `lintext report`: still lintext's
    (out / "my-notes.txt").unlink()
    (out / "report.html").write_text("<html>")
    atomic_directory(out, fill_with("model.json", "3"), kind="model")
    assert sorted(tree(out)) == [MARKER, "model.json"]


def test_empty_folder_is_used(tmp_path):
    (tmp_path / "empty").mkdir()
    atomic_directory(tmp_path / "empty", fill_with("a", "x"), kind="sweep")
    assert read_marker(tmp_path / "empty")["kind"] == "sweep"


@pytest.mark.parametrize("kind", ["vocabulary", "hashing"])
def test_models_written_before_markers_are_recognised(tmp_path, kind):
    old = shutil.copytree(BEFORE / kind, tmp_path / "old")
    assert output_kind(old) == "model"
    assert check_output_folder(old, "model") == old.resolve()
    with pytest.raises(OutputError, match="lintext model folder, not a sweep folder"):
        check_output_folder(old, "sweep")
    (old / "extra.txt").write_text("user")
    with pytest.raises(OutputError, match="holds extra.txt"):
        check_output_folder(old, "model")


def test_symlink_to_a_user_folder_is_refused(tmp_path):
    user = tmp_path / "data"
    user.mkdir()
    (user / "a.txt").write_text("a")
    (tmp_path / "link").symlink_to(user)
    with pytest.raises(OutputError, match="did not write"):
        atomic_directory(tmp_path / "link", fill_with("m", "x"), kind="model")
    assert tree(user) == {"a.txt": b"a"} and (tmp_path / "link").is_symlink()


def test_symlink_to_a_lintext_model_replaces_the_model_behind_it(tmp_path):
    real = atomic_directory(tmp_path / "v1", fill_with("model.json", "1"), kind="model")
    (tmp_path / "current").symlink_to(real)
    atomic_directory(tmp_path / "current", fill_with("model.json", "2"), kind="model")
    assert (tmp_path / "current").is_symlink() and (real / "model.json").read_text() == "2"


@pytest.mark.parametrize("where", ["cwd", "parent-of-cwd", "home", "root"])
def test_protected_folders_are_refused_even_forced(tmp_path, monkeypatch, where):
    work = tmp_path / "work"
    work.mkdir()
    monkeypatch.chdir(work)
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    (tmp_path / "home").mkdir()
    target = {"cwd": ".", "parent-of-cwd": "..", "home": str(tmp_path / "home"), "root": "/"}[where]
    with pytest.raises(OutputError, match="lintext never replaces it"):
        check_output_folder(target, "model", force=True)
    with pytest.raises(OutputError, match="is an empty path"):
        check_output_folder("", "model", force=True)


def test_an_input_is_never_replaced(tmp_path):
    corpus = tmp_path / "corpus"
    (corpus / "a").mkdir(parents=True)
    (corpus / "a" / "1.txt").write_text("x")
    for target in (corpus, tmp_path):
        with pytest.raises(OutputError, match="which this command reads"):
            check_output_folder(target, "model", force=True, inputs=[corpus / "a" / "1.txt"])
    data = tmp_path / "test.csv"
    data.write_text("text\nx\n")
    with pytest.raises(OutputError, match="which this command reads"):
        check_output_file(data, "predictions", force=True, inputs=[data])


def test_path_problems_are_found_before_any_work(tmp_path):
    (tmp_path / "file").write_text("x")
    with pytest.raises(OutputError, match=r"file is a file, not a folder"):
        check_output_folder(tmp_path / "file" / "sub", "model")
    with pytest.raises(OutputError, match="is a folder; give a file name"):
        check_output_file(tmp_path, "predictions", force=True)
    with pytest.raises(OutputError, match="longer than 255 bytes"):
        check_output_folder(tmp_path / ("n" * 256), "model")
    with pytest.raises(OutputError, match="not a regular file"):
        check_output_file("/dev/null", "predictions", force=True)


def test_a_250_character_name_is_written(tmp_path):
    # The temporary name beside the target is shortened (short_name), so a legal target name
    # (at most 255 bytes) never fails for the length of the temporary one.
    name = "m" * 250
    out = atomic_directory(tmp_path / name, fill_with("a", "x"), kind="model")
    assert out.name == name and len(short_name(name)) < 200
    assert sorted(p.name for p in tmp_path.iterdir()) == [name]


def test_unwritable_parent_is_refused_up_front(tmp_path, monkeypatch):
    # Root can write anywhere, so the refusal of the operating system is simulated: the
    # guard's probe (a temporary folder in the parent) fails as it would on a read-only parent.
    import lintext.outputs as outputs

    def read_only(*args, **kwargs):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(outputs.tempfile, "mkdtemp", read_only)
    with pytest.raises(OutputError, match=r"cannot write in .* \(Permission denied\)"):
        check_output_folder(tmp_path / "m", "model")


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into read-only folders")
def test_read_only_parent_for_real(tmp_path):
    parent = tmp_path / "ro"
    parent.mkdir()
    parent.chmod(0o555)
    try:
        with pytest.raises(OutputError, match="Permission denied"):
            check_output_folder(parent / "m", "model")
    finally:
        parent.chmod(0o755)


def test_files_are_replaced_only_when_lintext_wrote_them(tmp_path):
    mine = tmp_path / "mine.csv"
    mine.write_text("name,phone\nann,123\n")
    with pytest.raises(OutputError, match="not a predictions CSV"):
        atomic_file(mine, lambda fh: fh.write("row,label,probability\n"), kind="predictions")
    assert mine.read_text() == "name,phone\nann,123\n"
    ours = tmp_path / "pred.csv"
    atomic_file(ours, lambda fh: fh.write("row,label,probability\n1,a,0.5\n"), kind="predictions")
    atomic_file(ours, lambda fh: fh.write("row,label,score\n"), kind="predictions")
    assert ours.read_text() == "row,label,score\n"
    atomic_file(mine, lambda fh: fh.write("row,label,score\n"), kind="predictions", force=True)
    assert mine.read_text() == "row,label,score\n"
    page = tmp_path / "page.html"
    page.write_text("<html>my page</html>")
    with pytest.raises(OutputError, match="not a lintext page"):
        atomic_file(page, lambda fh: fh.write("x"), kind="page")
    assert page.read_text() == "<html>my page</html>"


def test_leftovers_of_dead_runs_are_cleaned_and_live_ones_kept(tmp_path):
    target = tmp_path / "m"
    atomic_directory(target, fill_with("a", "1"), kind="model")
    dead = tmp_path / ".m.tmp-999999999-abc"  # no such process: pid above the kernel's limit
    dead.mkdir()
    older = tmp_path / ".m.tmp-abcdef"  # written before names carried the process id
    older.write_text("half")
    live = tmp_path / f".m.tmp-{os.getppid()}-xyz"  # the parent process is alive
    live.mkdir()
    clean_leftovers(target)
    assert sorted(p.name for p in tmp_path.iterdir()) == [live.name, "m"]


def test_set_aside_copy_is_restored_when_the_target_is_missing(tmp_path):
    # The state a run killed between the two renames of the fallback leaves: the old model
    # set aside, the new one complete in its temporary folder, nothing at the target.
    target = tmp_path / "m"
    atomic_directory(target, fill_with("model.json", "old"), kind="model")
    os.rename(target, tmp_path / ".m.old-999999999-aa")
    atomic_directory(tmp_path / "other", fill_with("model.json", "new"), kind="model")
    os.rename(tmp_path / "other", tmp_path / ".m.tmp-999999999-bb")
    assert clean_leftovers(target) == [target]
    assert (target / "model.json").read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m"]


def test_prefix_carries_the_process_id():
    assert leftover_prefix("model", "tmp") == f".model.tmp-{os.getpid()}-"
