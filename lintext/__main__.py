"""The ``lintext`` command (and ``python -m lintext``): signal handlers first, then the app.

The handlers are installed before anything else is imported, so that Ctrl-C or SIGTERM
during the first second (while NumPy, scikit-learn and typer load) ends with one word and
exit status 130 / 143 instead of a traceback. SIGTERM and SIGHUP raise
:class:`~lintext.errors.Terminated` (a KeyboardInterrupt), so every clean-up written for
Ctrl-C runs for them too: temporary files are removed, worker processes stopped.
"""

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


if __name__ == "__main__":
    main()
