"""The command line: a typer app with one thin function per command over the library.

:mod:`~lintext.cli.app` holds the app, the error handling and the consoles;
:mod:`~lintext.cli.options` the options shared by several commands (declared once, each
turned into the library's option object); :mod:`~lintext.cli.display` the progress display
and tables. Commands, one module per family: :mod:`~lintext.cli.commands_data` (``stats``),
:mod:`~lintext.cli.commands_model` (``train``, ``predict``, ``evaluate``),
:mod:`~lintext.cli.commands_report` (``report``, ``compare``, ``inspect``),
:mod:`~lintext.cli.commands_explain` (``explain``),
:mod:`~lintext.cli.commands_tuning` (``sweep``, ``probe``). Command modules import the
library inside the command, so ``--help`` loads none of it. Only this package prints or exits.
"""

# imported in the order the commands are listed by --help
from . import commands_data, commands_model  # noqa: F401, I001
from . import commands_explain, commands_report, commands_tuning  # noqa: F401, I001
from .app import app

__all__ = ["app"]
