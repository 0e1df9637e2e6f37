"""Start-up: ``lintext --help`` and ``lintext COMMAND --help`` load none of the heavy libraries.

Each command imports what it needs inside its function, so asking for help costs only Python,
typer and rich (not even NumPy: the engine's registries reach it through ``engine/lazy.py``).
The check runs the real app in a fresh interpreter and reads ``sys.modules`` there (Python's own
record of what was imported); timings live in scripts/bench_end_to_end.py.
Importing ``lintext.pipeline`` (every predict and evaluate) loads neither numba nor scikit-learn:
the compiled kernels and the vectorizers load when training or featurizing first needs them.
"""

from __future__ import annotations

import json
import subprocess
import sys

from lintext.cli import app

from ..conftest import ROOT

HEAVY = ("numpy", "sklearn", "scipy", "numba", "matplotlib")

CHECK = r"""
import json, sys
from lintext.__main__ import main  # the installed command's entry point
argument_lists, heavy = json.loads(sys.argv[1]), json.loads(sys.argv[2])
for args in argument_lists:
    sys.argv = ["lintext", *args]
    try:
        main()
    except SystemExit as exc:
        assert exc.code in (0, None), (args, exc.code)
print("\nloaded: " + json.dumps(sorted({name.split(".")[0] for name in sys.modules} & set(heavy))))
"""


def commands() -> list[str]:
    return sorted(c.name or c.callback.__name__ for c in app.registered_commands)


def loaded_by(argument_lists: list[list[str]]) -> list[str]:
    out = subprocess.run([sys.executable, "-c", CHECK, json.dumps(argument_lists), json.dumps(HEAVY)],
                         capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout.rsplit("loaded: ", 1)[1])


def test_help_imports_no_heavy_library():
    assert loaded_by([["--help"]]) == []


def test_every_command_help_imports_no_heavy_library():
    names = commands()
    assert {"train", "predict", "report", "sweep"} <= set(names)  # the app registered its commands
    assert loaded_by([[name, "--help"] for name in names]) == []


def test_the_check_sees_a_heavy_import():
    # the same check with scikit-learn imported before the help: it must report it
    out = subprocess.run([sys.executable, "-c", CHECK.replace("for args in", "import sklearn\nfor args in"),
                          json.dumps([["--help"]]), json.dumps(HEAVY)], capture_output=True, text=True, cwd=ROOT,
                         timeout=120)
    assert "sklearn" in json.loads(out.stdout.rsplit("loaded: ", 1)[1])


def test_importing_the_pipeline_loads_neither_numba_nor_scikit_learn():
    check = ("import json, sys, lintext.pipeline; "
             "print('\\nloaded: ' + json.dumps(sorted({n.split('.')[0] for n in sys.modules} & {'numba', 'sklearn'})))")
    out = subprocess.run([sys.executable, "-c", check], capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout.rsplit("loaded: ", 1)[1]) == []


def test_featurize_shard_rows_default_is_the_stores():
    # The command line keeps a copy of the store's default (importing lintext.text.store would load the
    # library for --help); the copy must equal the library's, which featurize_store and from_store use.
    import inspect

    from lintext.cli.commands_data import SHARD_ROWS_DEFAULT, featurize
    from lintext.text import store, streaming

    assert inspect.signature(featurize).parameters["shard_rows"].default == SHARD_ROWS_DEFAULT
    assert SHARD_ROWS_DEFAULT == store.SHARD_ROWS
    assert inspect.signature(streaming.featurize_store).parameters["shard_rows"].default == store.SHARD_ROWS
