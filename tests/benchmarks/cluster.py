"""Files per second of a batch: the local process pool against a Dask LocalCluster of 1 and 2 workers.

Recordings: symbolic links, in a temporary folder, to the invented example files of
example_signals/line/ and example_signals/treatment/ (17 files of 1-1.5 s), repeated to
``N_FILES`` (default 200) names. Every batch analyses all of them with the default options
(``ringdown.analyze_many``) and is timed from submission to the last result; starting the
LocalCluster is timed on its own line. Prints a markdown table; asserts nothing.

The machine this runs on may be shared: figures are noisy (the load average is printed with
them), compare rows of one run only.

Run: ``python tests/benchmarks/cluster.py [N_FILES]`` (needs the extra ``ringdown[cluster]``).
"""

from __future__ import annotations

import os

# One BLAS thread per process, as in speed.py (small matrices; oversubscription slows them).
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import sys
import tempfile
import time
from pathlib import Path

import ringdown
from ringdown.base.cluster import open_client

ROOT = Path(__file__).resolve().parents[2] / "example_signals"


def _files(folder: Path, n: int) -> list[str]:
    sources = sorted([*ROOT.glob("line/*.wav"), *ROOT.glob("treatment/*.wav")])
    out = []
    for i in range(n):
        src = sources[i % len(sources)]
        link = folder / f"{i:04d}_{src.name}"
        link.symlink_to(src)
        out.append(str(link))
    return out


def _timed(fn) -> tuple[float, list]:
    t0 = time.perf_counter()
    res = fn()
    return time.perf_counter() - t0, res


def main(n_files: int = 200) -> None:
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        paths = _files(Path(tmp), n_files)
        ringdown.analyze_file(paths[0])  # warm-up: imports and caches of this process
        for jobs in (1, 2):
            dt, res = _timed(lambda jobs=jobs: ringdown.analyze_many(paths, jobs=jobs))
            assert all(a.error is None for a in res)
            label = "this process (jobs=1)" if jobs == 1 else f"local process pool (jobs={jobs})"
            rows.append((label, dt, None))
        for n in (1, 2):
            t_start, (client, cluster) = _timed(lambda n=n: open_client(f"local:{n}"))
            try:
                client.run(ringdown.analyze_file, paths[0])  # warm-up of each worker, not timed
                dt, res = _timed(lambda client=client: ringdown.analyze_many(paths, client=client))
                assert all(a.error is None for a in res)
            finally:
                client.close()
                cluster.close()
            rows.append((f"LocalCluster, {n} worker process{'es' if n > 1 else ''} x 1 thread", dt, t_start))
    load = os.getloadavg()
    print(
        f"{n_files} files (links to 17 example recordings), {os.cpu_count()} cores, load average "
        f"{load[0]:.1f} / {load[1]:.1f} / {load[2]:.1f} (1/5/15 min): a shared machine, figures are noisy.\n"
    )
    print("| batch | time s | files/s | start-up s |")
    print("|---|---:|---:|---:|")
    for label, dt, start in rows:
        print(f"| {label} | {dt:.1f} | {n_files / dt:.1f} | {'-' if start is None else f'{start:.1f}'} |")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 200)
