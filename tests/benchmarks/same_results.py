"""Whether a change left every analysis the same to the last digit.

Runs ``ringdown.analyze_file`` on every WAV and CSV file under ``example_signals/`` and
``ringdown.analyze`` on the first records and noise records of the detection benchmark
(``tests/benchmarks/detection.py``'s invented population, seeds 20261201 and 7), and writes
``json.dumps(to_dict())`` of each (or the error it raised) to a JSON file. Given a second file
from before the change, it compares the two text for text and names the analyses that differ
(with the first place where they do). Deterministic: two runs of the same code give the same file.

Run: ``python tests/benchmarks/same_results.py AFTER.json [--against BEFORE.json] [--records N] [--noise M]``
(default 60 records and 40 noise records per seed; about a minute on a loaded 2-core machine).
Exit status 1 when an analysis differs.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def _text(fn, *args) -> str:
    import ringdown

    try:
        return json.dumps(fn(*args).to_dict(), sort_keys=True, default=repr)
    except ringdown.RingdownError as exc:
        return f"error: {type(exc).__name__}: {exc}"


def snapshot(n_records: int, n_noise: int) -> dict[str, str]:
    """``json.dumps(to_dict())`` of every analysis, by name (see the module docstring)."""
    import numpy as np

    import ringdown

    sys.path.insert(0, str(ROOT / "tests" / "benchmarks"))
    import detection

    out: dict[str, str] = {}
    files = sorted((ROOT / "example_signals").rglob("*.wav")) + sorted((ROOT / "example_signals").rglob("*.csv"))
    os.chdir(ROOT)  # relative paths: the JSON holds the path, the same for any checkout
    for p in files:
        rel = str(p.relative_to(ROOT))
        out[rel] = _text(ringdown.analyze_file, rel)
    for seed in (20261201, 7):
        rng = np.random.default_rng(seed)
        for i in range(n_records):
            x, fs, _ = detection.make_record(rng)
            out[f"seed {seed} record {i}"] = _text(ringdown.analyze, x, fs)
        for i in range(n_noise):
            x, fs = detection.noise_record(rng)
            out[f"seed {seed} noise {i}"] = _text(ringdown.analyze, x, fs)
    return out


def compare(before: dict[str, str], after: dict[str, str]) -> list[str]:
    """One line per analysis whose text differs (or is only in one of the two)."""
    lines = []
    for key in sorted(set(before) | set(after)):
        a, b = before.get(key), after.get(key)
        if a == b:
            continue
        if a is None or b is None:
            lines.append(f"{key}: only {'after' if a is None else 'before'}")
            continue
        i = next((k for k in range(min(len(a), len(b))) if a[k] != b[k]), min(len(a), len(b)))
        lines.append(
            f"{key}: first difference at character {i}: ...{a[max(0, i - 80) : i + 40]}... -> ...{b[max(0, i - 80) : i + 40]}..."
        )
    return lines


def main() -> int:
    # one BLAS thread, as the benchmarks run (set before numpy loads)
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out")
    ap.add_argument("--against")
    ap.add_argument("--records", type=int, default=60)
    ap.add_argument("--noise", type=int, default=40)
    args = ap.parse_args()
    out = Path(args.out).resolve()
    before = Path(args.against).resolve() if args.against else None
    after = snapshot(args.records, args.noise)
    out.write_text(json.dumps(after, indent=0))
    print(f"{len(after)} analyses written to {args.out}")
    if before is not None:
        diff = compare(json.loads(before.read_text()), after)
        print(f"{len(diff)} of {len(after)} differ from {args.against}")
        print("\n".join(diff[:20]))
        return 1 if diff else 0
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
