"""The ``lintext`` command (and ``python -m lintext``): signal handlers first, then the app.

The handlers are installed before anything else is imported, so that Ctrl-C or SIGTERM
during the first second (while NumPy, scikit-learn and typer load) ends with one word and
exit status 130 / 143 instead of a traceback. SIGTERM and SIGHUP raise
:class:`~lintext.errors.Terminated` (a KeyboardInterrupt), so every clean-up written for
Ctrl-C runs for them too: temporary files are removed, worker processes stopped.

The installed command (:func:`run`) then leaves without the interpreter's final tidying:
freeing every object of a large run one by one (a vocabulary of 300,000 names, the texts)
took 0.5 s after a training had finished. Everything that tidying would do for the outside
world is done first: threads joined, exit handlers run, output flushed.
"""

import os
import signal
import sys


def _terminate(signum, frame):
    from .errors import Terminated

    raise Terminated(signum)


def install_signal_handlers() -> None:
    """SIGINT raises KeyboardInterrupt; SIGTERM and SIGHUP raise Terminated (main thread only)."""
    signal.signal(signal.SIGINT, signal.default_int_handler)
    for name in ("SIGTERM", "SIGHUP"):
        if hasattr(signal, name):
            signal.signal(getattr(signal, name), _terminate)


def main() -> None:
    install_signal_handlers()
    try:
        from .cli import app

        app(prog_name="lintext")
    except KeyboardInterrupt as exc:  # before a command started: while importing or parsing
        signum = getattr(exc, "signum", signal.SIGINT)
        try:
            print("interrupted" if signum == signal.SIGINT else "terminated", file=sys.stderr)
        except OSError:
            pass
        sys.exit(128 + signum)


def run() -> None:
    """The installed ``lintext`` command: :func:`main`, then :func:`quick_exit` with its status."""
    try:
        main()
    except SystemExit as exc:
        quick_exit(exc.code)
    except BaseException:  # a defect: the traceback Python would print, status 1
        sys.excepthook(*sys.exc_info())
        quick_exit(1)
    quick_exit(0)


def quick_exit(code) -> None:
    """Exit with ``sys.exit(code)``'s status after what interpreter shutdown does that others
    can see (non-daemon threads joined, ``atexit`` handlers run, stdout and stderr flushed),
    without freeing the remaining objects one by one."""
    import atexit
    import threading

    if code is None:
        status = 0
    elif isinstance(code, int):
        status = code
    else:  # sys.exit("message"): the message on stderr, status 1
        print(code, file=sys.stderr)
        status = 1
    try:
        getattr(threading, "_shutdown", lambda: None)()  # joins non-daemon threads, runs their exit hooks
        atexit._run_exitfuncs()
    finally:
        for stream in (sys.stdout, sys.stderr):
            try:
                stream.flush()
            except (OSError, ValueError):  # a closed pipe or stream: nothing more can be said there
                pass
        os._exit(status & 0xFF)


if __name__ == "__main__":
    run()
