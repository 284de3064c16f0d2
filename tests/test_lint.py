"""The lint gate: ``ruff check``, ``ruff format --check`` and ``mypy`` pass on the tree.

This is how the suite (and so ``.ci/run``, which is exactly the README's test command) runs ruff
and mypy. Their configuration is ``[tool.ruff]`` and ``[tool.mypy]`` in pyproject.toml; both tools
are in the ``test`` extra. Each check runs the tool through ``sys.executable -m``, so the versions
are the ones installed beside the tests, and fails with the tool's own output: the file, line and
rule of every finding. The tests skip, saying so, only when the tool is not installed.
"""

from __future__ import annotations

import importlib.util
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

#: What each check runs (``python -m <tool> <args>``), in the project's root.
CHECKS = {
    "ruff check": ("ruff", ["check", "--output-format", "concise", "ringdown", "tests", "tools"]),
    "ruff format": ("ruff", ["format", "--check", "ringdown", "tests", "tools"]),
    "mypy": ("mypy", ["ringdown"]),
}


def _run(tool: str, args: list[str]) -> subprocess.CompletedProcess:
    if importlib.util.find_spec(tool) is None:
        pytest.skip(f"{tool} is not installed (it is in the 'test' extra: pip install -e '.[test]')")
    return subprocess.run(
        [sys.executable, "-m", tool, *args], cwd=ROOT, capture_output=True, text=True, timeout=480, check=False
    )


@pytest.mark.parametrize("name", list(CHECKS))
def test_tree_is_clean(name):
    tool, args = CHECKS[name]
    out = _run(tool, args)
    if out.returncode != 0:
        pytest.fail(
            f"`{tool} {' '.join(args)}` exited {out.returncode}:\n{out.stdout}{out.stderr}".rstrip(), pytrace=False
        )


def test_gate_fails_on_a_finding(tmp_path):
    # the gate is not vacuous: the same ruff command on a file with an unused import (rule F401,
    # pyflakes) and a badly formatted line exits non-zero and names the file and the rule
    bad = tmp_path / "bad.py"
    bad.write_text("import os\nx=( 1,2 )\n")
    found = _run("ruff", ["check", "--output-format", "concise", "--no-cache", str(bad)])
    assert found.returncode == 1 and "bad.py:1:8: F401" in found.stdout, found.stdout + found.stderr
    unformatted = _run("ruff", ["format", "--check", "--no-cache", str(bad)])
    assert unformatted.returncode == 1 and "bad.py" in unformatted.stdout + unformatted.stderr
    # and mypy on a file assigning a str to an int (its rule "assignment")
    typed = tmp_path / "typed.py"
    typed.write_text('x: int = "one"\n')
    wrong = _run("mypy", ["--no-incremental", "--config-file", "/dev/null", str(typed)])
    assert wrong.returncode == 1 and "typed.py:1: error" in wrong.stdout and "[assignment]" in wrong.stdout, (
        wrong.stdout
    )
