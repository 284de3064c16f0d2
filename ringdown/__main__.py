"""``python -m ringdown`` and the installed ``ringdown`` command: the command line of
:mod:`ringdown.cli`, loaded here so that a Ctrl-C during start-up (the imports take about a
second) exits 130 with one line instead of a traceback from inside an import."""

from __future__ import annotations

import sys


def main() -> None:
    """Run the command line; Ctrl-C while it is still being imported exits 130."""
    try:
        from .cli import main as run
    except KeyboardInterrupt:
        sys.stderr.write("ringdown: error: interrupted while starting; nothing was done\n")
        raise SystemExit(130) from None
    run()


if __name__ == "__main__":
    main()
