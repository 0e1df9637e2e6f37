"""The typer app, its error handling and the two consoles.

Errors from the library become one line on stderr and exit status 2; anything unexpected is
exit status 1 (set ``LINTEXT_DEBUG=1`` for the traceback); Ctrl-C is exit status 130.
"""

from __future__ import annotations

import contextlib
import functools
import os
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


_plain_help()
app = typer.Typer(
    add_completion=False,
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
        try:
            return func(*args, **kwargs)
        except LinTextError as exc:
            err.print(f"error: {exc}", markup=False, soft_wrap=True)
            raise typer.Exit(exc.exit_code) from None
        except KeyboardInterrupt:
            err.print("interrupted", markup=False)
            raise typer.Exit(130) from None
        except (typer.Exit, typer.Abort):
            raise
        except Exception as exc:  # an internal fault, not bad input
            if os.environ.get("LINTEXT_DEBUG"):
                raise
            err.print(f"internal error: {type(exc).__name__}: {exc}", markup=False, soft_wrap=True)
            raise typer.Exit(1) from None

    return app.command()(wrapper)


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


@app.callback()
def main(
    version: Annotated[bool, typer.Option("--version", callback=_version, is_eager=True, help="Print the version.")] = False,
):
    """Train, explain and use sparse linear text classifiers."""
