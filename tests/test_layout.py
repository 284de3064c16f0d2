"""The package layout: imports flow one way, cli -> render -> uses -> analysis -> io -> base.

Every ``import`` and ``from ... import`` of every module under ``ringdown/`` is read with
:mod:`ast` (imports inside functions too, which is where the lazy ones are), resolved to the room
it reaches, and checked against the ranks below. A room may import from itself and from any room
of lower rank; the three use rooms (treatment, inspection, materials) share a rank and do not
import each other. DEVELOPERS.md ("Module map") describes the rooms.
"""

from __future__ import annotations

import ast
import shutil
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "ringdown"

#: rank of each room; the top-level ``_version`` module counts as base, ``__main__`` (the command's
#: entry point, which only loads the CLI) above the CLI
RANKS = {
    "_version": 0,
    "base": 0,
    "io": 1,
    "analysis": 2,
    "treatment": 3,
    "inspection": 3,
    "materials": 3,
    "render": 4,
    "cli": 5,
    "__main__": 6,
}

#: The one named exception: a result's notebook view (``Analysis._repr_html_``) is drawn by the one
#: HTML module, imported inside that method only when a notebook shows the result.
EXEMPT = {("ringdown.analysis.results", "ringdown.render.report")}


def _module_name(path: Path, root: Path) -> tuple[str, bool]:
    """Dotted name of ``path`` under ``root`` (the package folder) and whether it is a package."""
    parts = list(path.relative_to(root.parent).with_suffix("").parts)
    is_pkg = parts[-1] == "__init__"
    if is_pkg:
        parts = parts[:-1]
    return ".".join(parts), is_pkg


def _targets(path: Path, root: Path) -> list[tuple[int, str]]:
    """(line, absolute module name) of every ringdown module that ``path`` imports."""
    name, is_pkg = _module_name(path, root)
    package = name if is_pkg else name.rpartition(".")[0]
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found += [(node.lineno, a.name) for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = ".".join(base[: len(base) - node.level + 1])
                mod = f"{base}.{node.module}" if node.module else base
            else:
                mod = node.module or ""
            # `from . import plots`: the names may be modules themselves
            subs = [f"{mod}.{a.name}" for a in node.names]
            modules = [
                s
                for s in subs
                if (root.parent / Path(*s.split("."))).with_suffix(".py").exists()
                or (root.parent / Path(*s.split("."))).is_dir()
            ]
            found += [(node.lineno, s) for s in modules] if modules else [(node.lineno, mod)]
        elif (
            isinstance(node, ast.Call)
            and node.args
            and isinstance(node.args[0], ast.Constant)
            and isinstance(node.args[0].value, str)
            and getattr(node.func, "attr", getattr(node.func, "id", "")) in ("import_module", "lazy_module")
        ):
            found.append((node.lineno, node.args[0].value))
    return [(line, mod) for line, mod in found if mod == "ringdown" or mod.startswith("ringdown.")]


def _room(module: str) -> str | None:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else None  # None: the package root (the public API)


def import_violations(root: Path = PACKAGE) -> list[str]:
    """Every import under ``root`` that goes against the one-way flow, as 'file:line: a -> b'."""
    bad = []
    for path in sorted(root.rglob("*.py")):
        source, _ = _module_name(path, root)
        src_room = _room(source)
        if src_room is None:
            continue  # ringdown/__init__.py re-exports the public API from every room
        assert src_room in RANKS, f"{path}: a module outside the rooms; add its room to RANKS"
        for line, target in _targets(path, root):
            dst_room = _room(target)
            ok = dst_room is not None and (dst_room in (src_room, "_version") or RANKS[dst_room] < RANKS[src_room])
            if not ok and (source, target) not in EXEMPT:
                bad.append(f"{path.relative_to(root.parent)}:{line}: {source} -> {target}")
    return bad


def test_every_module_is_in_a_room():
    tops = {p.name for p in PACKAGE.iterdir() if p.name != "__pycache__" and not p.name.startswith(".")}
    rooms = {p.name for p in PACKAGE.iterdir() if p.is_dir() and p.name != "__pycache__"}
    assert rooms == set(RANKS) - {"_version", "__main__"}
    assert tops - rooms == {"__init__.py", "__main__.py", "_version.py", "py.typed"}


def test_imports_flow_one_way():
    assert import_violations() == []


def test_the_check_sees_the_package_imports():
    # the checker reads what it should: a known import of each kind is among its targets
    pipeline = {m for _, m in _targets(PACKAGE / "analysis" / "pipeline.py", PACKAGE)}
    assert "ringdown.io.read" in pipeline  # a lazy import inside analyze_file
    assert "ringdown.base.errors" in pipeline
    render_cli = {m for _, m in _targets(PACKAGE / "cli" / "render.py", PACKAGE)}
    assert "ringdown.render.plots" in render_cli  # `from ..render import plots`


@pytest.mark.parametrize(
    "room_file, planted",
    [
        # a lazy import inside a function, upward from analysis to render
        ("analysis/results.py", "\n\ndef _planted():\n    from ..render import plots\n    return plots\n"),
        # a top-level absolute import, upward from io to analysis
        ("io/recording.py", "\nimport ringdown.analysis.pipeline\n"),
        # one use room importing another
        ("inspection/check.py", "\nfrom ..treatment.compare import compare as _c\n"),
        # a room importing the package root (which imports every room)
        ("base/numfmt.py", "\nfrom .. import analyze as _a\n"),
        # a string handed to importlib
        ("io/read.py", "\nimport importlib\n_m = importlib.import_module('ringdown.cli.analyze')\n"),
    ],
)
def test_a_planted_upward_import_fails(tmp_path, room_file, planted):
    copy = tmp_path / "ringdown"
    shutil.copytree(PACKAGE, copy, ignore=shutil.ignore_patterns("__pycache__"))
    assert import_violations(copy) == []
    with open(copy / room_file, "a", encoding="utf-8") as fh:
        fh.write(planted)
    bad = import_violations(copy)
    assert len(bad) == 1 and bad[0].startswith(f"ringdown/{room_file}:"), bad
