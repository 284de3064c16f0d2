"""The package surface: __all__ matches what is exported, and start-up stays light."""

from __future__ import annotations

import subprocess
import sys

import ringdown


def test_all_lists_exactly_the_public_names():
    # STYLE.md: __init__ only re-exports the public API and lists it in __all__ (as httpx does)
    public = {n for n in vars(ringdown) if not n.startswith("_")} - {
        # submodules that Python binds on the package as a side effect of importing them
        name for name, obj in vars(ringdown).items() if type(obj).__name__ == "module"
    }
    assert set(ringdown.__all__) - {"__version__"} == public
    for name in ringdown.__all__:
        assert hasattr(ringdown, name)


def test_import_does_not_load_heavy_modules():
    # matplotlib (plots), scipy.stats (limits) and scipy.signal are loaded only when used, so
    # that `ringdown --help` and a plain analysis start fast (issue: plots must not slow analyze);
    # so are the readers of the data-acquisition formats (scipy.io, npTDMS, pyuff, h5py)
    code = (
        "import sys, ringdown, ringdown.cli; "
        "print(','.join(m for m in ('matplotlib', 'scipy.stats', 'scipy.signal', 'scipy.optimize', 'scipy.io', "
        "'nptdms', 'pyuff', 'h5py') if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.strip()
    assert out == ""
