"""The ``ringdown`` command line: a thin typer layer over the public Python API.

Each command group lives in its own module: its commands are module-level functions whose
options are declared in typer's ``Annotated`` style (options that several commands share come
from ``_options``), and its ``register(app)`` adds them; the modules named in
``_COMMAND_MODULES`` are registered in that order. Commands parse options, make one
library call, and render the result; they hold no numerics. Every ``RingdownError`` becomes
one line on stderr and a non-zero exit; ``--debug`` shows the traceback instead.

Exit statuses (``_common``): 0 done, 1 a part failed its limits, 2 an input or file could not be
used, 64 usage error (typer's own usage errors too, which would otherwise exit 2), 130 interrupted.
"""

from __future__ import annotations

import importlib
from typing import Annotated

import typer
from typer.core import TyperGroup

from ._common import EXIT_USAGE

__all__ = ["app", "command", "main"]

_COMMAND_MODULES = ("analyze", "compare", "limits", "history", "moduli", "listen")


class _Group(TyperGroup):
    """The command group: a usage error (bad option, missing argument) exits 64, not 2."""

    def make_context(self, *args, **kwargs):
        try:
            return super().make_context(*args, **kwargs)
        except typer.core._click.exceptions.UsageError as exc:
            exc.exit_code = EXIT_USAGE
            raise

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except typer.core._click.exceptions.UsageError as exc:
            exc.exit_code = EXIT_USAGE
            raise


app = typer.Typer(
    name="ringdown",
    cls=_Group,
    help="Measure the modes of ring-down recordings: frequency, decay rate, damping ratio, Q.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    # plain click help: flags show no '<bool>' type, and the text is the same on a terminal and in a pipe
    rich_markup_mode=None,
)


def _version_callback(value: bool) -> None:
    if value:
        from .._version import __version__

        typer.echo(f"ringdown {__version__}")
        raise typer.Exit(0)


Version = Annotated[
    bool, typer.Option("--version", help="Print the version and exit.", is_eager=True, callback=_version_callback)
]


@app.callback()
def _root(version: Version = False) -> None:
    """Measure the modes of ring-down recordings: frequency, decay rate, damping ratio, Q."""


for _name in _COMMAND_MODULES:
    importlib.import_module(f"{__name__}.{_name}").register(app)


def command():
    """The click command behind ``app``, built (typer inspects every option, about 0.2 s).

    Calling it is what ``app()`` does, less typer's pretty tracebacks, which ``app`` turns off.
    """
    return typer.main.get_command(app)


def main() -> None:
    """Console-script entry point."""
    command()()
