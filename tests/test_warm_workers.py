"""Batch workers start warm: the modules a task names are imported before its first item."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

from ringdown.base.batch import run_batch


class _SeesModule:
    """Says whether a module was already imported when the item ran (in the worker)."""

    preload = ("wave",)

    def __call__(self, item: int) -> tuple[int, bool, int]:
        return item, "wave" in sys.modules, os.getpid()

    def failed(self, item, exc):
        return item, None, None


def test_workers_have_the_preloaded_modules_before_the_first_item():
    task = _SeesModule()
    out = dict(run_batch(task, [1, 2, 3, 4], on_error=task.failed, jobs=2))
    assert sorted(out) == [0, 1, 2, 3]
    assert all(seen is True for _, seen, _ in out.values())
    assert all(pid != os.getpid() for _, _, pid in out.values())  # really in worker processes


def test_file_analysis_imports_nothing_after_the_warm_start(two_mode_wav):
    # in a fresh interpreter: after the preload, analysing a file imports no scipy module itself
    code = (
        "import sys, json\n"
        "from ringdown.analysis import pipeline\n"
        "from ringdown.base import batch\n"
        "batch.preload(pipeline.WORKER_PRELOAD)\n"
        "before = set(sys.modules)\n"
        f"a = pipeline.analyze_file({two_mode_wav!r})\n"
        "new = sorted(m for m in set(sys.modules) - before if m.split('.')[0] in ('scipy', 'soundfile', 'threadpoolctl'))\n"
        "print(json.dumps({'new': new, 'modes': len(a.modes)}))\n"
    )
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[1])}
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120, env=env)
    assert r.returncode == 0, r.stderr
    got = json.loads(r.stdout.strip().splitlines()[-1])
    assert got["modes"] == 2 and got["new"] == []


def test_every_start_method_runs_the_batch(two_mode_wav):
    # forkserver workers are children of the server, not of this process: they must not take
    # that for the death of their parent (the default start method on Linux from Python 3.14)
    import multiprocessing

    from ringdown.analysis import pipeline
    from ringdown.base.batch import ProcessExecutor

    for method in multiprocessing.get_all_start_methods():
        ctx = multiprocessing.get_context(method)
        task = pipeline._FileTask({})
        out = dict(
            run_batch(
                task,
                [two_mode_wav, two_mode_wav],
                on_error=task.failed,
                jobs=2,
                executor=lambda k, task=task, ctx=ctx: ProcessExecutor(k, preload=task.preload, context=ctx),
            )
        )
        assert [out[i].error for i in (0, 1)] == [None, None], method
        # the conftest signal's modes: 440 Hz and 1250 Hz
        assert [round(m.f_d_hz) for m in out[0].modes] == [440, 1250], method
