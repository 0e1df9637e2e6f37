"""The installed command's exit (``lintext.__main__.run``): the status ``sys.exit`` gives, and
everything interpreter shutdown does that can be seen from outside (Python's documented exit
sequence: non-daemon threads joined, ``atexit`` handlers run, buffered output flushed).

Each case runs in its own process, as the command does; the expected values are written out.
"""

from __future__ import annotations

import subprocess
import sys
import textwrap

import pytest

FAKE_MAIN = textwrap.dedent("""
    import atexit, sys, threading, time
    import lintext.__main__ as entry

    def fake_main():
        atexit.register(lambda: sys.stdout.write("|atexit ran"))
        def late():  # a non-daemon thread still working when the command returns
            time.sleep(0.3)
            with open(sys.argv[1], "w") as fh:
                fh.write("thread done")
        threading.Thread(target=late).start()
        sys.stdout.write("x" * 200_000)  # more than a pipe's buffer: flushed at exit
        how = sys.argv[2]
        if how == "raise":
            raise RuntimeError("a defect")
        if how != "return":
            sys.exit(int(how) if how.lstrip("-").isdigit() else how)

    entry.main = fake_main
    entry.run()
""")


@pytest.mark.parametrize("how, status", [("return", 0), ("0", 0), ("2", 2), ("-1", 255), ("a message", 1), ("raise", 1)])
def test_status_output_threads_and_exit_handlers(tmp_path, how, status):
    marker = tmp_path / "thread.txt"
    done = subprocess.run([sys.executable, "-c", FAKE_MAIN, str(marker), how], capture_output=True, text=True, timeout=60)
    assert done.returncode == status, done.stderr
    assert done.stdout == "x" * 200_000 + "|atexit ran"
    assert marker.read_text() == "thread done"
    if how == "a message":
        assert done.stderr == "a message\n"
    if how == "raise":
        assert done.stderr.startswith("Traceback") and done.stderr.rstrip().endswith("RuntimeError: a defect")


def test_the_command_keeps_its_statuses(tiny_csv, tmp_path):
    ok = subprocess.run([sys.executable, "-m", "lintext", "stats", str(tiny_csv)], capture_output=True, text=True, timeout=120)
    assert ok.returncode == 0, ok.stderr
    assert "transport" in ok.stdout and "billing" in ok.stdout
    missing = subprocess.run([sys.executable, "-m", "lintext", "stats", str(tmp_path / "nowhere.csv")],
                             capture_output=True, text=True, timeout=120)
    assert missing.returncode == 2
    assert len(missing.stderr.strip().splitlines()) == 1 and "nowhere.csv" in missing.stderr
