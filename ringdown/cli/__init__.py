"""The ``ringdown`` command line: a thin typer layer over the public Python API.

Each command group lives in its own module with a ``register(app)`` function; the modules
named in ``_COMMAND_MODULES`` are registered in that order. Commands parse options, make one
library call, and render the result; they hold no numerics. Every ``RingdownError`` becomes
one line on stderr and a non-zero exit; ``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import importlib

import typer

__all__ = ["app", "main"]

_COMMAND_MODULES = ("analyze", "compare", "limits", "history", "moduli")

app = typer.Typer(
    name="ringdown",
    help="Measure the modes of ring-down recordings: frequency, decay rate, damping ratio, Q.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)


def _version_callback(value: bool) -> None:
    if value:
        from .._version import __version__

        typer.echo(f"ringdown {__version__}")
        raise typer.Exit(0)


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", help="Print the version and exit.", is_eager=True,
                                 callback=_version_callback),
) -> None:
    """Measure the modes of ring-down recordings: frequency, decay rate, damping ratio, Q."""


for _name in _COMMAND_MODULES:
    importlib.import_module(f"{__name__}.{_name}").register(app)


def main() -> None:
    """Console-script entry point."""
    app()
