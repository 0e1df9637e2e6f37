"""The typer app, its error handling and the two consoles.

Errors from the library become one line on stderr and exit status 2, and so do usage errors
(an unknown option, a missing argument); anything unexpected is exit status 1 (set
``LINTEXT_DEBUG=1`` for the traceback). A signal ends a command cleanly: Ctrl-C (SIGINT) with
exit status 130, SIGTERM with 143, SIGHUP with 129 (the handlers are installed by
:func:`lintext.__main__.main` before anything else is imported). A closed standard output
(``lintext predict ... | head -1``) ends the command quietly. When a command ends, worker
processes it started are stopped. Library warnings do not reach the terminal (they do with
``LINTEXT_DEBUG=1``).
"""

from __future__ import annotations

import contextlib
import functools
import os
import signal
import sys
import warnings
from typing import Annotated

import typer
from rich.console import Console

from .. import __version__
from ..errors import LinTextError

def _plain_help() -> None:
    """Show arguments by name and values by kind in help and usage lines.

    typer writes a required argument as ``{DATA}`` in usage lines and every value's Python type
    (``<int>``, ``<float>``); lintext writes ``DATA`` and ``MODEL_DIR``, and ``N``, ``NUMBER``,
    ``TEXT`` or ``PATH`` for a value without a name of its own. Skipped if typer changes shape.
    """
    from typer import core

    words = {int: "N", float: "NUMBER", str: "TEXT"}

    def usage_name(self):
        return self.display_name_raw + ("..." if self.nargs != 1 else "")

    def help_name(self):
        return self.display_name_raw + ("..." if self.nargs != 1 else "")

    def value_kind(self, ctx):
        if isinstance(self, core.TyperArgument):
            return ""
        annotation = self.type_descriptor.annotation
        return "PATH" if self.type_descriptor.is_path else words.get(annotation, "VALUE")

    if hasattr(core, "TyperArgument") and hasattr(core, "_TyperParameter"):
        core.TyperArgument._usage_display_name = usage_name
        core.TyperArgument._rich_display_name = help_name
        core._TyperParameter.display_type = value_kind


def _one_line_usage_errors() -> None:
    """Usage errors as one line, ``error: <problem> (see 'lintext train --help')``, exit status 2.

    Skipped if typer changes shape (the multi-line form of click is then shown).
    """
    from typer import core

    click = getattr(core, "_click", None) or getattr(core, "click", None)
    usage_error = getattr(getattr(click, "exceptions", None), "UsageError", None)
    if usage_error is None:
        return

    def show(self, file=None):
        hint = ""
        if self.ctx is not None:
            hint = f" (see '{self.ctx.command_path} --help')"
        message = " ".join(str(self.format_message()).split())
        print(f"error: {message}{hint}", file=file or sys.stderr)

    usage_error.show = show


_plain_help()
_one_line_usage_errors()
app = typer.Typer(
    add_completion=False,
    add_help_option=False,  # declared in main() below: see _help
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
    help="Train, explain and use sparse linear text classifiers.",
)
out = Console(highlight=False)
err = Console(stderr=True, highlight=False)


def command(func):
    """Register a command whose library errors print one line and exit 2."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        done_before = len(_written())
        try:
            with warnings.catch_warnings():
                if not os.environ.get("LINTEXT_DEBUG"):
                    warnings.simplefilter("ignore")
                return func(*args, **kwargs)
        except LinTextError as exc:
            err.print(f"error: {exc}", markup=False, soft_wrap=True)
            raise typer.Exit(exc.exit_code) from None
        except KeyboardInterrupt as exc:  # Ctrl-C, or SIGTERM / SIGHUP raised as Terminated
            signum = getattr(exc, "signum", signal.SIGINT)
            done = [str(path) for path in _written()[done_before:]]
            word = "interrupted" if signum == signal.SIGINT else "terminated"
            _say(f"{word}; {', '.join(done)} had already been written" if done else word)
            raise typer.Exit(128 + signum) from None
        except BrokenPipeError:  # the reader of standard output went away (| head)
            _quiet_stdout()
            raise typer.Exit(128 + signal.SIGPIPE) from None
        except (typer.Exit, typer.Abort):
            raise
        except OSError as exc:  # one that no reader or writer named: the file is still at fault, not lintext
            if os.environ.get("LINTEXT_DEBUG"):
                raise
            if not exc.filename:
                err.print(f"internal error: {type(exc).__name__}: {exc}", markup=False, soft_wrap=True)
                raise typer.Exit(1) from None
            err.print(f"error: {exc.filename}: {exc.strerror or exc}", markup=False, soft_wrap=True)
            raise typer.Exit(2) from None
        except Exception as exc:  # an internal fault, not bad input
            if os.environ.get("LINTEXT_DEBUG"):
                raise
            err.print(f"internal error: {type(exc).__name__}: {exc}", markup=False, soft_wrap=True)
            raise typer.Exit(1) from None
        finally:
            from ..resources import stop_worker_processes

            stop_worker_processes()

    return app.command()(wrapper)


def _written() -> list:
    """Outputs moved into place by this process (lintext.files, when it is loaded)."""
    files = sys.modules.get("lintext.files")
    return getattr(files, "written", [])


def _say(message: str) -> None:
    try:
        err.print(message, markup=False, soft_wrap=True)
    except OSError:
        pass


def _quiet_stdout() -> None:
    """Point standard output at /dev/null, so the flush at exit finds no broken pipe."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)
    except (OSError, ValueError):
        pass


def show_progress(quiet: bool) -> bool:
    """Progress goes to a terminal only, and never with --quiet."""
    return not quiet and err.is_terminal


def status(message: str, quiet: bool):
    """A spinner with ``message`` on the terminal while the block runs (nothing when quiet)."""
    return err.status(message) if show_progress(quiet) else contextlib.nullcontext()


def _version(value: bool):
    if value:
        out.print(f"lintext {__version__}")
        raise typer.Exit()


def _help(ctx: typer.Context, value: bool):
    """``lintext --help``, declared here rather than by typer: typer coerces its own help option's
    unset value (``None``) through pydantic, which ``lintext COMMAND --help`` then loads (50 ms)."""
    if value and not ctx.resilient_parsing:
        typer.echo(ctx.get_help(), color=ctx.color)
        raise typer.Exit()


@app.callback()
def main(
    version: Annotated[bool, typer.Option("--version", callback=_version, is_eager=True, help="Print the version.")] = False,
    show_help: Annotated[bool, typer.Option("--help", callback=_help, is_eager=True, help="Show this message and exit.")] = False,
):
    """Train, explain and use sparse linear text classifiers."""
