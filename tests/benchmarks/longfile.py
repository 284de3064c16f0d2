"""Peak memory and time of long recordings through the block engine (ringdown/engine.py).

Invented test signals (tests/long_records.py, our own scenario): a monitoring session at a bench,
48 kHz 16-bit mono WAV, with a tap of two modes (800 Hz and 2100 Hz) every 2 s, or one tap only,
written block by block to a temporary folder. Each record is analysed by ``ringdown analyze`` in
a fresh process; the table gives the wall time, the peak resident memory of that process
(its own ``getrusage(RUSAGE_SELF).ru_maxrss`` as it exits, which includes the interpreter and its
libraries),
the taps found, and CPU time (user + system) per minute of record: linear in the length when it
stays the same, and less disturbed than the wall time by other work on the machine.
Asserts nothing.

Run: ``python tests/benchmarks/longfile.py [MINUTES ...]`` (default ``5 30``).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from long_records import write_long_record  # noqa: E402

FS = 48_000


#: The child prints its own peak resident memory (ru_maxrss, KiB on Linux) and CPU time (user +
#: system, s: what the analysis cost, whatever else the machine was running) as it exits.
_CHILD = (
    "import resource, sys\nfrom ringdown.cli import main\ntry:\n    main()\nfinally:\n"
    "    r = resource.getrusage(resource.RUSAGE_SELF)\n"
    "    sys.stderr.write(f'\\nMAXRSS {r.ru_maxrss} CPU {r.ru_utime + r.ru_stime}\\n')\n"
)


def _measure(path: Path) -> tuple[float, float, float, int, int]:
    """(wall s, CPU s, peak RSS MB, hits, modes) of ``ringdown analyze --json PATH`` in a fresh process."""
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
    t0 = time.perf_counter()
    out = subprocess.run(
        [sys.executable, "-c", _CHILD, "analyze", "--json", str(path)], capture_output=True, text=True, env=env
    )
    dt = time.perf_counter() - t0
    if out.returncode != 0:
        raise SystemExit(f"analyze failed on {path}: {out.stderr.strip()}")
    tail = out.stderr.rsplit("MAXRSS", 1)[1].split()
    peak_kib, cpu = int(tail[0]), float(tail[2])
    rec = json.loads(out.stdout)["recordings"][0]
    return dt, cpu, peak_kib / 1024.0, len(rec["hits"]), len(rec["modes"])


def main(minutes: list[float]) -> None:
    print(
        "| record | length | taps written | hits found | modes | wall time [s] | CPU time [s] | CPU s per minute "
        "| peak RSS [MB] |"
    )
    print("|---|---|---|---|---|---|---|---|---|")
    with tempfile.TemporaryDirectory(prefix="ringdown-long-") as tmp:
        for kind, period in (("one tap", None), ("tap every 2 s", 2.0)):
            for m in sorted(minutes):
                path = Path(tmp) / f"{kind.replace(' ', '_')}_{m:g}min.wav"
                taps = write_long_record(path, duration_s=60.0 * m, sample_rate=FS, period_s=period)
                dt, cpu, rss, hits, modes = _measure(path)
                print(
                    f"| {kind} | {m:g} min | {len(taps)} | {hits} | {modes} | {dt:.1f} | {cpu:.1f} | {cpu / m:.2f} | "
                    f"{rss:.0f} |",
                    flush=True,
                )
                path.unlink()


if __name__ == "__main__":
    main([float(a) for a in sys.argv[1:]] or [5.0, 30.0])
