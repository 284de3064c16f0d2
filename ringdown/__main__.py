"""``python -m ringdown`` and the installed ``ringdown`` command: the command line of
:mod:`ringdown.cli`, loaded and built here so that a Ctrl-C during start-up (the imports and
typer's building of the command take about a second) exits 130 with one line instead of a
traceback. Once the command runs, click and the commands themselves handle Ctrl-C."""

from __future__ import annotations

import sys


def main() -> None:
    """Run the command line; Ctrl-C while it is still being imported or built exits 130."""
    try:
        from .cli import command

        run = command()
    except KeyboardInterrupt:
        sys.stderr.write("ringdown: error: interrupted while starting; nothing was done\n")
        raise SystemExit(130) from None
    run()


if __name__ == "__main__":
    main()
