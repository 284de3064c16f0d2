"""The package surface: __all__ matches what is exported, and start-up stays light."""

from __future__ import annotations

import subprocess
import sys

import pytest

import ringdown


def test_all_lists_exactly_the_public_names():
    # STYLE.md: __init__ only re-exports the public API and lists it in __all__ (as httpx does).
    # The names are imported on first use (PEP 562), so touch each one, then compare.
    for name in ringdown.__all__:
        assert hasattr(ringdown, name)
    public = {n for n in vars(ringdown) if not n.startswith("_")} - {
        # subpackages that Python binds on the package as a side effect of importing them
        name
        for name, obj in vars(ringdown).items()
        if type(obj).__name__ == "module"
    }
    assert set(ringdown.__all__) - {"__version__"} == public
    assert set(dir(ringdown)) >= set(ringdown.__all__)
    with pytest.raises(AttributeError, match="no attribute 'not_a_name'"):
        ringdown.not_a_name  # noqa: B018


def test_import_ringdown_imports_no_room():
    # `import ringdown` binds nothing but the version until a name is used (issue 13: cold start)
    code = "import sys, ringdown; print(sorted(m for m in sys.modules if m.startswith('ringdown')))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "['ringdown', 'ringdown._version']"


def test_public_names_and_submodules_do_not_collide():
    # `import ringdown.materials.moduli` must not turn `ringdown.moduli` (the function) into a
    # module, nor the other way round (the wart of the flat layout)
    import pkgutil

    import ringdown.inspection.check
    import ringdown.materials.moduli
    import ringdown.treatment.compare

    assert callable(ringdown.moduli) and type(ringdown.moduli).__name__ == "function"
    assert type(ringdown.compare).__name__ == "function" and type(ringdown.check).__name__ == "function"
    assert type(ringdown.treatment.compare).__name__ == "module"
    top = {m.name for m in pkgutil.iter_modules(ringdown.__path__)}
    assert top.isdisjoint(ringdown.__all__), top & set(ringdown.__all__)


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
