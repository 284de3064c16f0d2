"""Batches on a Dask LocalCluster (2 worker processes, one per module): the same results as the
local batch, the same failure policy, and no result lost when a worker process dies.

The reference is ringdown's own local path (``analyze_many(jobs=1)``, ``iter_check_files(jobs=1)``):
the cluster path must give identical ``to_dict()`` records, bit for bit, since the same code runs
on the same numbers (only where it runs changes). Recordings are the invented example files of
example_signals/ (written by its make_*.py scripts, numpy/scipy/soundfile only).
"""

from __future__ import annotations

import json
import os
import sys
import time
from functools import partial
from pathlib import Path

import cloudpickle
import dask
import distributed  # noqa: F401 (loads its config defaults before dask.config.set below)
import pytest
import typer
from typer.testing import CliRunner

import ringdown
from ringdown.base.cluster import ClusterExecutor, connect, iter_results, open_client
from ringdown.base.errors import ClusterError
from ringdown.cli import analyze as analyze_cli
from ringdown.cli import limits as limits_cli
from ringdown.inspection.check import iter_check_files

EXAMPLES = Path(__file__).resolve().parents[1] / "example_signals"
LINE = sorted(str(p) for p in (EXAMPLES / "line").glob("*.wav"))
# One of each kind of example (text, short electrical, gear blanks good and bad, before/after a
# treatment), plus every good gear blank for learning limits: 14 files.
FILES = sorted(
    [
        str(EXAMPLES / "bracket_tap.csv"),
        str(EXAMPLES / "lc_tank.wav"),
        *LINE[:9],
        str(EXAMPLES / "line" / "soft_heat_treat.wav"),
        str(EXAMPLES / "treatment" / "before_1.wav"),
        str(EXAMPLES / "treatment" / "after_1.wav"),
    ]
)

app = typer.Typer()
app.callback()(lambda: None)  # a group, so that "analyze" is a subcommand as in ringdown's CLI
analyze_cli.register(app)
limits_cli.register(app)
runner = CliRunner()
# The workers cannot import this test module: send its functions by value.
cloudpickle.register_pickle_by_value(sys.modules[__name__])


@pytest.fixture(scope="module")
def client():
    # One worker death per task is allowed before Dask gives the task up (default 3), so that the
    # "dies every time" test below needs two deaths, not four.
    with dask.config.set({"distributed.scheduler.allowed-failures": 1}):
        cl, cluster = open_client("local:2")
    assert len(cl.scheduler_info()["workers"]) == 2
    # a worker holds only the task it runs, so a worker's death counts against that task alone
    assert cl.run_on_scheduler(lambda dask_scheduler: dask_scheduler.WORKER_SATURATION) == 1.0
    yield cl
    cl.close()
    cluster.close()


@pytest.fixture(scope="module")
def local():
    return ringdown.analyze_many(FILES, jobs=1)


@pytest.fixture(scope="module")
def local_results(local):
    return {a.path: a.to_dict() for a in local}


def test_cluster_results_identical_to_local(client, local_results):
    assert len(FILES) == 14
    got = ringdown.analyze_many(FILES, client=client)
    assert [a.path for a in got] == FILES  # in the order given, whatever the completion order
    for a in got:
        assert a.error is None, a.error
        assert a.to_dict() == local_results[a.path]
    assert sum(len(a.modes) for a in got) >= 14 * 2


def test_bad_files_are_their_own_errors_the_rest_kept(client, tmp_path, local_results):
    garbage = tmp_path / "garbage.wav"
    garbage.write_bytes(b"RIFF....not a wav file at all")
    missing = str(tmp_path / "not_there.wav")
    paths = [LINE[0], str(garbage), LINE[1], missing, LINE[2]]
    got = ringdown.analyze_many(paths, client=client)
    assert [a.path for a in got] == paths
    for i in (0, 2, 4):
        assert got[i].to_dict() == local_results[paths[i]]
    # the unreadable recording: exactly the local batch's error
    assert got[1].error == ringdown.analyze_many([str(garbage)], jobs=1)[0].error
    assert got[1].error.code == "input"
    # a path the worker cannot see: that file's error, naming the worker
    assert got[3].error.code == "input"
    assert "not_there.wav" in got[3].error.message and "on the Dask worker tcp://" in got[3].error.message
    assert "readable by every worker" in got[3].error.message


def _boom(item):
    if item == 2:
        raise ZeroDivisionError("division by zero in a test task")
    return item * 10


def _failed(item, exc):
    return ("failed", item, exc.code, str(exc))


def test_any_exception_is_that_items_result(client):
    got = dict(iter_results(client, _boom, [0, 1, 2, 3], on_error=_failed))
    # the local batch's wording (ringdown.base.batch.as_ringdown_error)
    assert got == {
        0: 0,
        1: 10,
        3: 30,
        2: ("failed", 2, "internal", "internal error ZeroDivisionError: division by zero in a test task"),
    }


def _slow(seconds):
    import time

    time.sleep(seconds)
    return seconds


def test_cluster_executor_interface(client):
    # the interface a generic batch runner drives: submit, as_completed, result, shutdown
    ex = ClusterExecutor(client, retries=0)
    futs = {ex.submit(_boom, i): i for i in range(4)}
    got = {}
    for f in ex.as_completed(futs):
        try:
            got[futs[f]] = f.result()
        except ZeroDivisionError as exc:
            got[futs[f]] = str(exc)
    ex.shutdown()
    assert got == {0: 0, 1: 10, 2: "division by zero in a test task", 3: 30}
    # shutdown(cancel=True) drops what has not finished, without waiting for it
    slow = [ex.submit(_slow, 4.0) for _ in range(4)]  # 2 workers: 8 s if they all ran
    t0 = time.monotonic()
    ex.shutdown(cancel=True)
    for f in slow:
        # cancelled: no result; dask's cancellation error derives from asyncio.CancelledError, a BaseException
        with pytest.raises(BaseException):  # noqa: B017
            f.result(timeout=4.0)
    assert time.monotonic() - t0 < 4.0  # sooner than one task would have taken


def test_check_on_cluster_matches_local(client, local, tmp_path):
    lim = ringdown.learn_limits([a for a in local if "/line/good_0" in a.path])
    parts = [p for p in FILES if Path(p).stem in ("crack", "good_01", "good_08", "soft_heat_treat")]
    paths = [*parts, str(tmp_path / "gone.wav")]
    local_checks = dict(iter_check_files(paths, lim, jobs=1))
    remote = dict(iter_check_files(paths, lim, client=client))
    assert sorted(remote) == list(range(len(paths)))
    for i in range(len(parts)):
        assert remote[i].to_dict() == local_checks[i].to_dict()
    # README "Parts off a line": crack and soft_heat_treat fail, good_01 and good_08 pass
    assert [remote[i].verdict for i in range(len(parts))] == ["fail", "pass", "pass", "fail"]
    assert remote[len(parts)].verdict == "error" and "on the Dask worker" in remote[len(parts)].reasons[0].message
    # the same through the CLI, on the scheduler's address, into a Parquet dataset
    lim_path = tmp_path / "limits.toml"
    ringdown.write_limits(lim, str(lim_path))
    r = runner.invoke(
        app,
        [
            "check",
            "--limits",
            str(lim_path),
            *parts,
            "--json",
            "--no-store",
            "--scheduler",
            client.scheduler.address,
            "--parquet",
            str(tmp_path / "ds"),
        ],
    )
    assert r.exit_code == 1, r.output  # failures, no error
    doc = json.loads(r.stdout)
    assert [res["verdict"] for res in doc["results"]] == ["fail", "pass", "pass", "fail"]
    from ringdown.inspection.parquet import read_dataset

    rows = read_dataset(tmp_path / "ds").to_pylist()
    assert {(x["file"], x["verdict"]) for x in rows} == {(res["path"], res["verdict"]) for res in doc["results"]}


def test_cli_analyze_on_a_scheduler_address(client, local_results):
    # the CLI connects to the running scheduler by its address, as it would to a real cluster's
    addr = client.scheduler.address
    r = runner.invoke(app, ["analyze", *LINE[:4], "--json", "--scheduler", addr])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert [rec for rec in doc["recordings"]] == [local_results[p] for p in LINE[:4]]


def test_cli_scheduler_errors_are_one_line(monkeypatch):
    r = runner.invoke(app, ["analyze", LINE[0], "--scheduler", "local:two"])
    assert r.exit_code == 2
    assert r.stderr.strip().splitlines() == [
        "ringdown: error: --scheduler 'local:two': local:N needs a whole number "
        "of worker processes N >= 1 (e.g. local:4)"
    ]
    monkeypatch.setattr("ringdown.base.cluster.CONNECT_TIMEOUT_S", 1.0)
    r = runner.invoke(app, ["analyze", LINE[0], "--scheduler", "tcp://127.0.0.1:9"])  # loopback, nothing listens
    assert r.exit_code == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(
        "ringdown: error: cannot reach a Dask scheduler at 'tcp://127.0.0.1:9' within 1 s"
    )
    with pytest.raises(ClusterError):
        connect("tcp://127.0.0.1:9")


def test_workers_of_another_version_are_refused(client, monkeypatch):
    monkeypatch.setattr(
        "ringdown.base.cluster.worker_versions",
        lambda c: {"tcp://worker-a:4000": "0.0.1", "tcp://worker-b:4000": ringdown.__version__},
    )
    with pytest.raises(ClusterError) as info:
        connect(client.scheduler.address)
    assert str(info.value) == (
        f"1 Dask worker(s) run ringdown 0.0.1 (first tcp://worker-a:4000), this process "
        f"{ringdown.__version__}; install the same version everywhere so results agree"
    )


def _dies_once(marker: str, path: str) -> dict:
    """Kills its own worker process the first time it sees the middle file, then analyses normally."""
    if path.endswith("good_03.wav") and not os.path.exists(marker):
        Path(marker).write_text(str(os.getpid()))
        os._exit(1)  # the worker process dies mid-batch; its nanny starts a new one
    return ringdown.analyze_file(path).to_dict()


def _dies_always(path: str) -> dict:
    if path.endswith("good_02.wav"):
        os._exit(1)
    return ringdown.analyze_file(path).to_dict()


def _as_error(path, exc):
    return {"path": path, "error": {"code": exc.code, "message": str(exc)}}


def test_a_killed_worker_loses_no_result(client, tmp_path, local_results):
    marker = tmp_path / "killed.txt"
    paths = LINE[:6]
    got = dict(iter_results(client, partial(_dies_once, str(marker)), paths, on_error=_as_error))
    assert marker.exists()  # the worker did die
    assert sorted(got) == list(range(len(paths)))
    for i, p in enumerate(paths):
        assert got[i] == local_results[p]


def test_a_file_that_kills_every_worker_is_its_own_error(client, local_results):
    paths = LINE[:4]
    got = dict(iter_results(client, _dies_always, paths, on_error=_as_error))
    bad = [i for i, p in enumerate(paths) if p.endswith("good_02.wav")]
    assert sorted(got) == [0, 1, 2, 3] and len(bad) == 1
    assert got[bad[0]]["error"]["code"] == "cluster"
    assert "workers running it died each time" in got[bad[0]]["error"]["message"]
    for i in set(range(4)) - set(bad):
        assert got[i] == local_results[paths[i]]


def test_missing_extra_is_one_line(monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # as if dask[distributed] were not installed
    r = runner.invoke(app, ["analyze", LINE[0], "--scheduler", "local:1"])
    assert r.exit_code == 2
    assert r.stderr.strip().splitlines() == [
        "ringdown: error: --scheduler needs the optional 'cluster' extra "
        "(dask[distributed], pyarrow); install it with: pip install "
        "'ringdown[cluster]'"
    ]
