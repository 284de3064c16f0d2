#!/usr/bin/env python3
"""Bring code written for the flat layout (before the rooms) onto the rooms, after a merge.

A branch started before the modules moved into rooms keeps importing them by their old names:
``from .errors import InputError`` inside ``ringdown/analysis/pipeline.py`` (git carried the
branch's edit over to the moved file, but not the meaning of its imports), a new module
``ringdown/engine.py`` written beside the old flat modules, or ``ringdown.pipeline.analyze_file``
in a test. This script

1. moves the files named with ``--move SRC DST`` (``git mv``; a new module has to be given a
   room, see DEVELOPERS.md "Module map"),
2. rewrites every relative import under ``ringdown/`` that no longer resolves: it is read as
   it was meant where the file used to be (the flat package) and pointed at the module's new
   home (:data:`MOVED`),
   and renames the few helpers renamed with the move (:data:`RENAMED`),
3. rewrites ``ringdown.OLD...`` names in ``tests/``, ``docs/``, ``example_signals/``, README.md
   and DEVELOPERS.md (imports, monkeypatch targets, docstrings), except where ``ringdown.OLD``
   is a public function of the same name used as one (``ringdown.compare(...)``).

Imports that resolve are left alone, so running it twice changes nothing. Then run
``.venv/bin/python -m pytest -q tests/test_layout.py`` (a module still outside a room, or an
import against the flow, is named there) and the whole suite.

Usage: tools/relayout.py [--move ringdown/engine.py ringdown/analysis/engine.py ...]
"""

from __future__ import annotations

import argparse
import ast
import re
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PKG = ROOT / "ringdown"

#: old module (under ringdown, dotted) -> its new home
MOVED = {
    "errors": "base.errors",
    "_lazy": "base._lazy",
    "batch": "base.batch",
    "cluster": "base.cluster",
    "matching": "base.matching",
    "numfmt": "base.numfmt",
    "recording": "io.recording",
    "io": "io.read",
    "outputs": "io.outputs",
    "formats": "io.formats",
    "condition": "analysis.condition",
    "peaks": "analysis.peaks",
    "detect": "analysis.detect",
    "bands": "analysis.bands",
    "pipeline": "analysis.pipeline",
    "results": "analysis.results",
    "quantities": "analysis.quantities",
    "crlb": "analysis.crlb",
    "estimators": "analysis.estimators",
    "compare": "treatment.compare",
    "tolerance": "inspection.tolerance",
    "limits": "inspection.limits",
    "check": "inspection.check",
    "store": "inspection.store",
    "parquet": "inspection.parquet",
    "moduli": "materials.moduli",
    "plots": "render.plots",
    "compare_plot": "render.compare_plot",
    "history_plot": "render.history_plot",
    "report": "render.report",
}
#: names renamed along with the move (old -> new), replaced as whole words in the package
RENAMED = {"_sha256_file": "sha256_file"}
#: names that left ``inspection.limits`` when it was split (name -> its module now)
SPLIT_NAMES = {
    "learn_limits": "inspection.learning",
    "limits_to_toml": "inspection.limits_file",
    "parse_limits": "inspection.limits_file",
    "read_limits": "inspection.limits_file",
    "write_limits": "inspection.limits_file",
}
#: old names that are also public functions of the package (``ringdown.compare(...)``)
PUBLIC_FUNCTIONS = {"compare", "moduli", "check"}
ROOMS = {"base", "io", "analysis", "treatment", "inspection", "materials", "render", "cli"}


def new_name(old: str) -> str:
    """The new dotted name (under ringdown) of old module ``old`` and of anything inside it."""
    parts = old.split(".")
    for i in range(len(parts), 0, -1):
        key = ".".join(parts[:i])
        if key in MOVED:
            return ".".join([MOVED[key]] + parts[i:])
    return old


#: modules moved by --move in this run: new dotted name -> the flat-layout name
MOVED_NOW: dict[str, str] = {}


def old_name(new: str) -> str:
    """The flat-layout name of module ``new`` (itself when it did not move)."""
    if new in MOVED_NOW:
        return MOVED_NOW[new]
    for old, moved in sorted(MOVED.items(), key=lambda kv: -len(kv[1])):
        if new == moved or new.startswith(moved + "."):
            return old + new[len(moved) :]
    return new


def exists(dotted: str) -> bool:
    """Whether ``ringdown.<dotted>`` is a module or package in the working tree."""
    path = PKG.joinpath(*dotted.split(".")) if dotted else PKG
    return path.with_suffix(".py").is_file() or (path / "__init__.py").is_file()


def _found_elsewhere(target: str) -> str:
    """``target`` in the room it was moved to by hand (a module name found once in the package)."""
    first, _, rest = target.partition(".")
    hits = [p for p in PKG.rglob(f"{first}.py") if "__pycache__" not in p.parts]
    hits += [p / "__init__.py" for p in PKG.rglob(first) if (p / "__init__.py").is_file()]
    if len(hits) != 1:
        return target
    found = module_of(hits[0])[0]
    return f"{found}.{rest}" if rest else found


def relative(from_pkg: str, target: str) -> str:
    a = [p for p in from_pkg.split(".") if p]
    b = [p for p in target.split(".") if p]
    c = 0
    while c < min(len(a), len(b)) and a[c] == b[c]:
        c += 1
    return "." * (len(a) - c + 1) + ".".join(b[c:])


def module_of(path: Path) -> tuple[str, bool]:
    parts = list(path.relative_to(PKG).with_suffix("").parts)
    is_pkg = parts[-1] == "__init__"
    if is_pkg:
        parts = parts[:-1]
    return ".".join(parts), is_pkg


def _base(package: str, level: int) -> str:
    parts = package.split(".") if package else []
    return ".".join(parts[: len(parts) - (level - 1)])


def fix_imports(path: Path) -> list[str]:
    """Rewrite the relative imports of one package file that no longer resolve; returns a line per change."""
    name, is_pkg = module_of(path)
    package = name if is_pkg else name.rpartition(".")[0]
    old = old_name(name)
    old_package = old if is_pkg else old.rpartition(".")[0]
    text = path.read_text(encoding="utf-8")
    lines = text.splitlines(keepends=True)
    edits: list[tuple[int, str]] = []
    notes_early: list[str] = []
    for node in ast.walk(ast.parse(text)):
        if not isinstance(node, ast.ImportFrom) or not node.level:
            continue
        here = _base(package, node.level)
        names = [a.name for a in node.names]
        if node.module:
            if exists(f"{here}.{node.module}".strip(".")):
                continue
            target = new_name(f"{_base(old_package, node.level)}.{node.module}".strip("."))
            if not exists(target) and node.level == 1:  # a module new on its branch: it was flat
                target = new_name(node.module)
        else:
            if all(exists(f"{here}.{n}".strip(".")) for n in names):
                continue
            old_base = _base(old_package, node.level)
            moved = [new_name(f"{old_base}.{n}".strip(".")) for n in names]
            if not any(exists(m) for m in moved) and node.level == 1:  # a module new on its branch: it was flat
                moved = [new_name(n) for n in names]
            if not any(exists(m) for m in moved):
                continue  # names defined in the package itself (from . import _UFF_START)
            homes = {m.rpartition(".")[0] for m in moved}
            if len(homes) != 1:
                notes_early.append(f"{path}:{node.lineno}: split this import by hand ({sorted(homes)})")
                continue
            target = homes.pop()
            leaves = [m.rpartition(".")[2] for m in moved]
            if leaves != names:  # a module renamed in its move (io -> io.read): keep the local name
                if node.end_lineno != node.lineno:
                    notes_early.append(f"{path}:{node.lineno}: import over several lines; fix by hand")
                    continue
                parts = [
                    f"{leaf} as {a.asname or a.name}" if leaf != (a.asname or a.name) else leaf
                    for leaf, a in zip(leaves, node.names)
                ]
                line = lines[node.lineno - 1]
                indent = line[: len(line) - len(line.lstrip())]
                tail = line[node.end_col_offset :]
                lines[node.lineno - 1] = f"{indent}from {relative(package, target)} import {', '.join(parts)}{tail}"
                notes_early.append(f"{path.relative_to(ROOT)}:{node.lineno}: now {lines[node.lineno - 1].strip()}")
                continue
        if target == "inspection.limits" and any(n in SPLIT_NAMES for n in names):
            notes_early.append(
                f"{path}:{node.lineno}: import {', '.join(n for n in names if n in SPLIT_NAMES)} from "
                f"{sorted({SPLIT_NAMES[n] for n in names if n in SPLIT_NAMES})} by hand"
            )
        if not exists(target):
            target = _found_elsewhere(target)
        if not exists(target):
            notes_early.append(f"{path}:{node.lineno}: no new home for {target!r}; fix by hand")
            continue
        edits.append((node.lineno, relative(package, target)))
    notes = notes_early
    for lineno, spec in sorted(edits, reverse=True):
        line = lines[lineno - 1]
        m = re.compile(r"from\s+(\.+[\w.]*)\s+import").search(line)
        if m is None:
            notes.append(f"{path}:{lineno}: import not on one line; fix by hand")
            continue
        if m.group(1) != spec:
            notes.append(f"{path.relative_to(ROOT)}:{lineno}: {m.group(1)} -> {spec}")
            lines[lineno - 1] = line[: m.start(1)] + spec + line[m.end(1) :]
    new = "".join(lines)
    for old_word, new_word in RENAMED.items():
        if re.search(rf"\b{old_word}\b", new):
            new = re.sub(rf"\b{old_word}\b", new_word, new)
            notes.append(f"{path.relative_to(ROOT)}: {old_word} -> {new_word}")
    if new != text:
        path.write_text(new, encoding="utf-8")
    return notes


_NAME = re.compile(r"\bringdown\.([a-z_]+(?:\.[A-Za-z_]+)*)")


_FROM_ROOT = re.compile(r"\bfrom ringdown import ([\w, ]+?)([ \t]*)(?=\\n|[\"';#\n]|$)", re.M)


def _split_from_root(m: re.Match) -> str:
    """``from ringdown import batch, analyze`` -> one import per room (joined by '; ', which works
    in code and inside ``python -c`` strings alike); public names stay imported from ringdown."""
    names = [n.strip() for n in m.group(1).split(",") if n.strip()]
    if not any(n in MOVED and n not in PUBLIC_FUNCTIONS for n in names):
        return m.group(0)
    groups: dict[str, list[str]] = {}
    for n in names:
        home = MOVED[n].rpartition(".")[0] if n in MOVED and n not in PUBLIC_FUNCTIONS else ""
        groups.setdefault(home, []).append(n.rpartition(".")[2] if not home else MOVED[n].rpartition(".")[2])
    return "; ".join(
        f"from ringdown{'.' + home if home else ''} import {', '.join(ns)}" for home, ns in groups.items()
    ) + m.group(2)


def fix_names(path: Path) -> int:
    """Rewrite ``ringdown.OLD...`` names in a test, script or document; returns how many."""
    text = path.read_text(encoding="utf-8")
    count = 0

    def one(line: str) -> str:
        is_import = (
            re.match(r"\s*(from|import)\s", line) is not None
            or re.search(r"[\"'](import|from) ringdown", line) is not None
        )

        def rep(m: re.Match) -> str:
            nonlocal count
            parts = m.group(1).split(".")
            if parts[0] in ROOMS and (len(parts) == 1 or exists(".".join(parts[:2]))):
                return m.group(0)  # already a new name
            moved = new_name(m.group(1))
            if moved == m.group(1):
                return m.group(0)
            if parts[0] in PUBLIC_FUNCTIONS and len(parts) == 1 and not is_import:
                return m.group(0)  # ringdown.compare(...): the public function
            count += 1
            return "ringdown." + moved

        return _NAME.sub(rep, line)

    new = "".join(one(line) for line in text.splitlines(keepends=True))
    new = _FROM_ROOT.sub(_split_from_root, new)
    if new != text:
        path.write_text(new, encoding="utf-8")
    return count


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument(
        "--move",
        nargs=2,
        action="append",
        default=[],
        metavar=("SRC", "DST"),
        help="git mv SRC DST first (give each new flat module its room)",
    )
    args = ap.parse_args(argv)
    for src, dst in args.move:
        Path(ROOT, dst).parent.mkdir(parents=True, exist_ok=True)
        subprocess.run(["git", "mv", src, dst], cwd=ROOT, check=True)
        MOVED_NOW[module_of(ROOT / dst)[0]] = module_of(ROOT / src)[0]
        MOVED[module_of(ROOT / src)[0]] = module_of(ROOT / dst)[0]
    notes = []
    for path in sorted(PKG.rglob("*.py")):
        notes += fix_imports(path)
    n = 0
    others = [
        p
        for d in ("tests", "docs", "example_signals")
        for p in (ROOT / d).rglob("*")
        if p.suffix in (".py", ".md", ".sh")
    ]
    for path in others + [ROOT / "README.md", ROOT / "DEVELOPERS.md"]:
        if path.is_file():
            n += fix_names(path)
    print("\n".join(notes) if notes else "no package import needed rewriting")
    print(f"{n} ringdown.<module> name(s) rewritten in tests, docs and scripts")
    flat = sorted(p.name for p in PKG.glob("*.py") if p.name not in ("__init__.py", "_version.py"))
    if flat:
        print(f"still outside a room: {', '.join(flat)}; move each with --move (see DEVELOPERS.md)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
