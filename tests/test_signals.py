"""Signals at every step of replacing an output, during start-up, and during a parallel sweep.

The promise under test (issue 15, "faults never lose a model or leave debris"): whatever
signal arrives at whatever step, a complete output is at the target (the old one, or the new
one once it has been moved into place), SIGINT and SIGTERM end with exit status 130 and 143
and leave no temporary file, and what SIGKILL leaves behind is cleaned (or put back) by the
next run on the same target. Each case runs in its own process; a hook in lintext.files sends
the signal between two steps (``lintext.files.step_hook``).
"""

from __future__ import annotations

import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from lintext.files import atomic_directory
from lintext.outputs import MARKER, clean_leftovers

FILES = ("model.json", "weights.npz", "vocabulary.tsv")
REPLACE_SCRIPT = textwrap.dedent("""
    import os, signal, sys
    from pathlib import Path
    from lintext.__main__ import install_signal_handlers
    install_signal_handlers()
    import lintext.files as files

    target, step, name, exchange = sys.argv[1:5]
    files.use_exchange = exchange == "1"

    def hook(current):
        if current == step:
            os.kill(os.getpid(), getattr(signal, name))

    files.step_hook = hook

    def fill(folder):
        for file in {files!r}:
            (folder / file).write_text("new")

    try:
        files.atomic_directory(Path(target), fill, kind="model")
    except KeyboardInterrupt as exc:
        sys.exit(128 + getattr(exc, "signum", signal.SIGINT))
""").replace("{files!r}", repr(FILES))

EXCHANGE_STEPS = ("filled", "marked", "ready", "exchanged", "removed")
FALLBACK_STEPS = ("filled", "marked", "ready", "moved-aside", "renamed", "removed")
COMMITTED = {"exchanged", "removed", "moved-aside", "renamed"}  # the new output is (being) moved into place
# The fallback's cases run with the slow tests, but for its one gap (killed between the renames).
CASES = ([("exchange", step, sig) for step in EXCHANGE_STEPS for sig in ("SIGINT", "SIGTERM", "SIGKILL")]
         + [pytest.param("fallback", step, sig, marks=() if (step, sig) == ("moved-aside", "SIGKILL") else pytest.mark.slow)
            for step in FALLBACK_STEPS for sig in ("SIGINT", "SIGTERM", "SIGKILL")])


def content(folder: Path) -> str | None:
    """"old" or "new" when ``folder`` holds one complete output, else None."""
    if not folder.is_dir() or not (folder / MARKER).is_file():
        return None
    values = {(folder / name).read_text() if (folder / name).is_file() else None for name in FILES}
    return values.pop() if len(values) == 1 else None


def run_replace(target: Path, step: str, name: str, mode: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", REPLACE_SCRIPT, str(target), step, name, "1" if mode == "exchange" else "0"],
                          capture_output=True, text=True, timeout=60)


@pytest.mark.parametrize("mode, step, name", CASES)
def test_a_signal_at_every_step_of_a_replace(tmp_path, mode, step, name):
    target = tmp_path / "model"
    atomic_directory(target, lambda d: [(d / f).write_text("old") for f in FILES], kind="model")
    done = run_replace(target, step, name, mode)
    committed = step in COMMITTED
    if name == "SIGKILL":
        assert done.returncode == -signal.SIGKILL, done.stderr
        if mode == "exchange" or step != "moved-aside":
            # One atomic step: at every moment a complete model is at the target.
            assert content(target) == ("new" if committed else "old")
        else:
            assert not target.exists()  # the gap of the two-rename fallback ...
        clean_leftovers(target)  # ... which the next run on the same target repairs
        assert content(target) in (("new",) if committed and step != "moved-aside" else ("old",))
    else:
        # SIGINT / SIGTERM: before the point of no return the old output stays; after it the
        # signal is held until the new output is in place and the old copy removed.
        assert done.returncode == 128 + getattr(signal, name), done.stderr
        assert "Traceback" not in done.stderr
        assert content(target) == ("new" if committed else "old")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["model"]  # no debris


@pytest.mark.parametrize("step, name", [(s, n) for s in ("filled", "ready", "renamed") for n in ("SIGINT", "SIGTERM")])
def test_a_signal_while_writing_a_new_output(tmp_path, step, name):
    target = tmp_path / "model"
    done = run_replace(target, step, name, "exchange")
    assert done.returncode == 128 + getattr(signal, name), done.stderr
    assert content(target) == ("new" if step == "renamed" else None)
    assert sorted(p.name for p in tmp_path.iterdir()) == (["model"] if step == "renamed" else [])


# ---------------------------------------------------------------- the command line

START_SCRIPT = textwrap.dedent("""
    import os, signal, sys
    name, module = sys.argv[1], sys.argv[2]

    class Trip:  # sends the signal when ``module`` starts loading: the middle of start-up
        def find_spec(self, fullname, path=None, target=None):
            if fullname == module:
                sys.meta_path.remove(self)
                os.kill(os.getpid(), getattr(signal, name))
            return None

    sys.meta_path.insert(0, Trip())
    sys.argv = ["lintext"] + sys.argv[3:]
    from lintext.__main__ import main
    main()
""")


@pytest.mark.parametrize("name, module", [("SIGINT", "typer"), ("SIGTERM", "rich.console"), ("SIGINT", "numpy")])
def test_a_signal_during_start_up_gives_one_word_and_no_traceback(tmp_path, tiny_csv, name, module):
    done = subprocess.run([sys.executable, "-c", START_SCRIPT, name, module, "stats", str(tiny_csv)],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 128 + getattr(signal, name), done.stderr
    assert done.stderr.strip() in ("interrupted", "terminated") and done.stdout == ""


TRAIN_SCRIPT = textwrap.dedent("""
    import os, signal, sys
    import lintext.files as files
    step, name = sys.argv[1], sys.argv[2]

    def hook(current):
        if current == step:
            os.kill(os.getpid(), getattr(signal, name))

    files.step_hook = hook
    sys.argv = ["lintext"] + sys.argv[3:]
    from lintext.__main__ import main
    main()
""")


@pytest.mark.slow
@pytest.mark.parametrize("step, name", [("filled", "SIGTERM"), ("ready", "SIGINT"), ("exchanged", "SIGTERM")])
def test_train_replacing_a_model_under_a_signal(small_split, tmp_path, step, name):
    import lintext

    target = tmp_path / "model"
    base = ["train", str(small_split["train"]), "--out", str(target), "--epochs", "2", "--quiet", "--no-report"]
    first = subprocess.run([sys.executable, "-m", "lintext", *base], capture_output=True, text=True, timeout=300)
    assert first.returncode == 0, first.stderr
    before = (target / "model.json").read_bytes()
    done = subprocess.run([sys.executable, "-c", TRAIN_SCRIPT, step, name, *base, "--seed", "7"],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 128 + getattr(signal, name), done.stderr
    word = "interrupted" if name == "SIGINT" else "terminated"
    if step == "exchanged":  # the signal came after the point of no return: the new model is in place
        assert done.stderr.strip() == f"{word}; {target} had already been written"
        assert (target / "model.json").read_bytes() != before
    else:
        assert done.stderr.strip() == word and (target / "model.json").read_bytes() == before
    lintext.open_model(target)  # a complete model either way
    assert sorted(p.name for p in tmp_path.iterdir()) == ["dev.csv", "model", "test.csv", "train.csv"]


def descendants(pid: int) -> set[int]:
    """Process ids below ``pid`` (from /proc)."""
    children: dict[int, list[int]] = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
            except OSError:
                continue
            children.setdefault(int(fields[1]), []).append(int(entry.name))
    found, todo = set(), [pid]
    while todo:
        for child in children.get(todo.pop(), []):
            if child not in found:
                found.add(child)
                todo.append(child)
    return found


@pytest.mark.slow
@pytest.mark.skipif(not Path("/proc").is_dir(), reason="reads the process table from /proc")
def test_sigterm_stops_a_parallel_sweep_and_its_workers(tmp_path):
    import tempfile

    demo = Path(__file__).resolve().parents[1] / "data" / "demo" / "train.csv"
    process = subprocess.Popen([sys.executable, "-m", "lintext", "sweep", str(demo), "--out", str(tmp_path / "sweep"),
                                "--optimizers", "sgd,adam", "--learning-rates", "0.001,0.01", "--epochs", "200",
                                "--patience", "0", "--workers", "2", "--quiet"],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    workers: set[int] = set()
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and len(workers) < 2:  # wait until the runs have started
        time.sleep(0.5)
        workers = {p for p in descendants(process.pid) if b"loky" in Path(f"/proc/{p}/cmdline").read_bytes()} \
            if process.poll() is None else set()
    assert process.poll() is None and workers, "the sweep finished or never started its workers"
    shared = list(Path(tempfile.gettempdir()).glob(f"lintext-sweep-{process.pid}-*"))
    assert shared  # the shared arrays exist while the runs go on
    process.send_signal(signal.SIGTERM)
    out, err = process.communicate(timeout=60)  # returns only when no process holds the pipes
    assert process.returncode == 143, err
    assert err.strip() == "terminated"
    gone_by = time.monotonic() + 10
    while time.monotonic() < gone_by and any(Path(f"/proc/{p}").exists() for p in workers):
        time.sleep(0.2)
    assert not [p for p in workers if Path(f"/proc/{p}").exists()]
    assert not [p for p in shared if p.exists()]
    assert sorted(p.name for p in tmp_path.iterdir()) == []


@pytest.mark.slow
def test_a_closed_standard_output_ends_predict_quietly(tmp_path):
    # `lintext predict ... | head -1`: the reader goes away after one line (SIGPIPE is ignored by
    # Python, so the write fails with BrokenPipeError): no message, the status of a closed pipe.
    model = Path(__file__).resolve().parent / "data" / "before-layout" / "vocabulary"
    data = tmp_path / "many.csv"
    data.write_text("text\n" + "".join(f"the water pressure dropped again {i}\n" for i in range(20000)))
    process = subprocess.Popen([sys.executable, "-m", "lintext", "predict", str(model), str(data), "--top-labels", "3"],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    assert process.stdout.readline() == b"row,label,probability,label_2,probability_2,label_3,probability_3\n"
    process.stdout.close()
    assert process.wait(timeout=120) == 128 + signal.SIGPIPE
    assert process.stderr.read() == b""
