"""Speed of ringdown against the floor, a hand-written script, bare imports and longer records.

Invented test signals (our own scenario): a 2 s, 48 kHz mono WAV of three decaying modes
(440 Hz, 1370 Hz and 3120 Hz; decay rates 4, 9 and 20 1/s) after 50 ms of noise, written with
soundfile to a temporary directory; 100 such files with other noise for the batches; one tap
at 0.5 s in records of 2 s, 60 s and 300 s. One run prints, as markdown tables:

1. ``ringdown.analyze_file`` over the *floor* (``soundfile.read`` + one ``numpy.fft.rfft`` of
   the record, the least any analysis of the file must do), each in a fresh process: with the
   environment's default BLAS threads (no ``*_NUM_THREADS`` variable: what a user gets), with
   ``OPENBLAS_NUM_THREADS=1`` and friends, and with the library's own one-thread limit switched
   off (``ringdown.base._threads.THREADS = None``: what the limit buys). Floor and analysis are timed
   alternately, so a change of the machine's load hits both; medians of the repeats, of wall
   time and of the process's CPU time (user + system of all its threads: a BLAS pool spinning on
   a second core counts; the ratio of CPU times moves less with other load than that of wall
   times).
2. A hand-written scipy script on the same file (``_script``: spectral peaks, 4th-order
   Butterworth band-pass +-40 Hz run forwards and backwards, Hilbert envelope, log-linear fit
   from the envelope's peak down to 20 dB above the noise), over the same floor, and the error in
   beta of both against the simulated values.
3. ``ringdown analyze FILE --json`` against ``python -c "import numpy, scipy.signal, soundfile"``
   (both whole processes, interpreter start-up included; medians of the repeats, wall and CPU
   time), after ``python -m compileall`` of ringdown's modules, as an installation leaves them
   (with ``PYTHONDONTWRITEBYTECODE=1`` set and no cache, each start compiles every module again).
4. A 100-file batch through the CLI at ``--jobs 1`` and ``--jobs 2``: files per second and CPU
   seconds per file (user + system of the command and its workers).
5. Time and peak memory (``ru_maxrss`` of a fresh process, interpreter, imports and one warm-up
   analysis of the 2 s file included) of one analysis of a single-tap record 2 s, 60 s and 300 s long (the tap at 0.5 s).

Asserts nothing (numbers vary by +-20 % on a shared machine). Run:
``python tests/benchmarks/speed.py [REPEATS] [--quick]`` (``--quick``: no 300 s record, 20 files
a batch). Throughput on a Dask cluster is ``tests/benchmarks/cluster.py``.
"""

from __future__ import annotations

import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

FS = 48000
MODES = ((0.5, 4.0, 440.0, 0.1), (0.3, 9.0, 1370.0, 1.0), (0.2, 20.0, 3120.0, 2.0))
THREAD_VARS = (
    "OPENBLAS_NUM_THREADS",
    "OMP_NUM_THREADS",
    "MKL_NUM_THREADS",
    "BLIS_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NUMEXPR_NUM_THREADS",
)
HERE = Path(__file__).resolve()
ROOT = HERE.parents[2]


def _write(path: Path, *, seed: int = 0, duration_s: float = 2.0, tap_s: float = 0.05) -> None:
    import soundfile as sf

    n = int(round(duration_s * FS))
    n_pre = int(round(tap_s * FS))
    t = np.arange(n - n_pre) / FS
    x = np.zeros(n)
    x[n_pre:] = sum(a * np.exp(-b * t) * np.cos(2 * np.pi * f * t + p) for a, b, f, p in MODES)
    x += 1e-4 * np.random.default_rng(seed).standard_normal(n)
    sf.write(str(path), x, FS, subtype="PCM_24")


def _script(path: str) -> list[tuple[float, float]]:
    """What an engineer might write by hand: (f_hz, beta_per_s) of the strongest peaks."""
    import soundfile as sf
    from scipy import signal

    x, fs = sf.read(path)
    spec = np.abs(np.fft.rfft(x))
    f = np.fft.rfftfreq(x.shape[0], 1.0 / fs)
    peaks, _ = signal.find_peaks(spec, height=0.05 * spec.max(), distance=int(50.0 * x.shape[0] / fs))
    out = []
    noise = np.median(np.abs(x[: int(0.04 * fs)])) + 1e-300
    for k in peaks:
        sos = signal.butter(4, [f[k] - 40.0, f[k] + 40.0], btype="bandpass", fs=fs, output="sos")
        env = np.abs(signal.hilbert(signal.sosfiltfilt(sos, x)))
        i0 = int(np.argmax(env))
        below = np.flatnonzero(env[i0:] < 10.0 * noise)
        i1 = i0 + (int(below[0]) if below.size else env.shape[0] - i0)
        t = np.arange(i0, i1) / fs
        slope, _ = np.polyfit(t, np.log(env[i0:i1]), 1)
        out.append((float(f[k]), float(-slope)))
    return out


def _pct(e: float | None) -> str:
    return "not found" if e is None else f"{100 * e:.3f} %"


def _floor(path: str) -> None:
    import soundfile as sf

    x, _ = sf.read(path)
    np.fft.rfft(x)


def _alternate(fns: dict, repeats: int) -> dict[str, float]:
    """Median wall time (key) and CPU time of this process (key + "_cpu") of each function, s."""
    times: dict[str, list[float]] = {k: [] for k in fns}
    cpu: dict[str, list[float]] = {k: [] for k in fns}
    for _ in range(repeats):
        for k, fn in fns.items():
            c0, t0 = time.process_time(), time.perf_counter()
            fn()
            times[k].append(time.perf_counter() - t0)
            cpu[k].append(time.process_time() - c0)
    return {
        **{k: statistics.median(v) for k, v in times.items()},
        **{k + "_cpu": statistics.median(v) for k, v in cpu.items()},
    }


# ----------------------------------------------------------------------------------------------
# child processes (each measurement in a fresh interpreter with its own environment)


def _child_analyze(path: str, repeats: int, limit: str) -> None:
    import ringdown

    if limit == "off":
        try:
            from ringdown.base import _threads
        except ImportError:  # a version without the limit (for a comparison with older code)
            pass
        else:
            _threads.THREADS = None
    an = ringdown.analyze_file(path)  # warm-up: imports, caches
    if an.error is not None:
        raise SystemExit(f"analysis failed: {an.error.message}")
    _script(path)
    _floor(path)
    med = _alternate(
        {
            "floor": lambda: _floor(path),
            "ringdown": lambda: ringdown.analyze_file(path),
            "script": lambda: _script(path),
        },
        repeats,
    )

    def err(pairs):
        # relative error in beta of the found mode nearest each simulated one (within 5 Hz)
        out = {}
        for _, b, f, _ in MODES:
            near = [pb for pf, pb in pairs if abs(pf - f) < 5.0]
            out[str(f)] = min(abs(pb / b - 1.0) for pb in near) if near else None
        return out

    print(
        json.dumps(
            {
                **med,
                "n_modes": len(an.modes),
                "err_ringdown": err([(m.f_d_hz, m.beta_per_s) for m in an.modes]),
                "err_script": err(_script(path)),
            }
        )
    )


def _child_long(path: str, warm: str) -> None:
    import ringdown

    ringdown.analyze_file(warm)  # imports and caches first: the time is the analysis alone
    t0 = time.perf_counter()
    an = ringdown.analyze_file(path)
    dt = time.perf_counter() - t0
    rss_kib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # KiB on Linux
    print(
        json.dumps(
            {
                "time_s": dt,
                "rss_mib": rss_kib / 1024.0,
                "n_modes": len(an.modes),
                "error": None if an.error is None else an.error.message,
            }
        )
    )


def _env(*, one_thread: bool) -> dict:
    env = {k: v for k, v in os.environ.items() if k not in THREAD_VARS}
    env["PYTHONPATH"] = str(ROOT) + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    if one_thread:
        env.update({k: "1" for k in THREAD_VARS})
    return env


def _run_child(args: list[str], env: dict) -> dict:
    r = subprocess.run([sys.executable, str(HERE), *args], capture_output=True, text=True, env=env, timeout=1800)
    if r.returncode != 0:
        raise SystemExit(f"child {args} failed:\n{r.stderr}")
    return json.loads(r.stdout.strip().splitlines()[-1])


def _timed_process(cmd: list[str], env: dict) -> tuple[float, float]:
    """(wall s, CPU s of the process and its children) of one command."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    r = subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env, timeout=1800)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if r.returncode not in (0, 1):  # 1: a file failed its analysis, still timed
        raise SystemExit(f"{cmd[:4]} failed ({r.returncode}):\n{r.stderr.decode()[-2000:]}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


# ----------------------------------------------------------------------------------------------


def main(repeats: int = 7, quick: bool = False) -> None:
    t_start = time.perf_counter()
    cli = [sys.executable, "-c", "from ringdown.cli import main; main()"]
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        path = tmp / "three_modes.wav"
        _write(path)
        default_env, one_env = _env(one_thread=False), _env(one_thread=True)

        rows = [
            (
                "default BLAS threads (no variable set)",
                _run_child(["--child-analyze", str(path), str(repeats), "on"], default_env),
            ),
            ("OPENBLAS_NUM_THREADS=1 etc.", _run_child(["--child-analyze", str(path), str(repeats), "on"], one_env)),
            (
                "default threads, library limit off",
                _run_child(["--child-analyze", str(path), str(repeats), "off"], default_env),
            ),
        ]
        print(
            f"2 s, {FS} Hz, 3-mode WAV; medians of {repeats} alternating runs in a fresh process each; "
            f"{rows[0][1]['n_modes']} modes found.\n"
        )
        print(
            "| threads | floor ms | ringdown.analyze_file ms | / floor | hand-written script ms | / floor "
            "| CPU: ringdown / floor | CPU: script / floor |"
        )
        print("|---|---:|---:|---:|---:|---:|---:|---:|")
        for name, r in rows:
            print(
                f"| {name} | {1e3 * r['floor']:.2f} | {1e3 * r['ringdown']:.1f} | {r['ringdown'] / r['floor']:.1f} "
                f"| {1e3 * r['script']:.1f} | {r['script'] / r['floor']:.1f} "
                f"| {r['ringdown_cpu'] / r['floor_cpu']:.1f} | {r['script_cpu'] / r['floor_cpu']:.1f} |"
            )
        r = rows[0][1]
        print("\n| simulated mode | beta error, ringdown | beta error, hand-written script |")
        print("|---|---:|---:|")
        for _, b, f, _ in MODES:
            er, es = r["err_ringdown"][str(f)], r["err_script"][str(f)]
            print(f"| {f:g} Hz, beta {b:g} 1/s | {_pct(er)} | {_pct(es)} |")

        # 3. whole processes: the CLI on one file against the bare imports, with ringdown's modules
        # compiled to bytecode first as an installation does (numpy's and scipy's come compiled): with
        # PYTHONDONTWRITEBYTECODE=1 in the environment and no cache every start would compile them
        subprocess.run([sys.executable, "-m", "compileall", "-q", str(ROOT / "ringdown")], check=True)
        bare = [sys.executable, "-c", "import numpy, scipy.signal, soundfile"]
        one = cli + ["analyze", str(path), "--json"]
        _timed_process(one, default_env)  # warm the file system caches
        t_imp, t_cli = [], []
        for _ in range(max(3, repeats // 2)):
            t_imp.append(_timed_process(bare, default_env))
            t_cli.append(_timed_process(one, default_env))
        ti, tc = (statistics.median(w for w, _ in t) for t in (t_imp, t_cli))
        ci, cc = (statistics.median(c for _, c in t) for t in (t_imp, t_cli))
        print("\n| process | wall s | / bare imports | CPU s | / bare imports |")
        print("|---|---:|---:|---:|---:|")
        print(f"| python -c 'import numpy, scipy.signal, soundfile' | {ti:.2f} | 1 | {ci:.2f} | 1 |")
        print(f"| ringdown analyze FILE --json | {tc:.2f} | {tc / ti:.2f} | {cc:.2f} | {cc / ci:.2f} |")

        # 4. batches
        n_files = 20 if quick else 100
        folder = tmp / "batch"
        folder.mkdir()
        for i in range(n_files):
            _write(folder / f"part_{i:03d}.wav", seed=100 + i)
        print(f"\n| {n_files}-file batch (CLI, --json) | wall s | files/s | CPU s per file |")
        print("|---|---:|---:|---:|")
        for jobs in (1, 2):
            wall, cpu = _timed_process(cli + ["analyze", str(folder), "--json", "--jobs", str(jobs)], default_env)
            print(f"| --jobs {jobs} | {wall:.1f} | {n_files / wall:.1f} | {cpu / n_files:.3f} |")

        # 5. long records, one tap at 0.5 s
        print("\n| record (one tap at 0.5 s, 3 modes) | time s | / time of 2 s | length / 2 s | peak memory MiB |")
        print("|---|---:|---:|---:|---:|")
        t2 = None
        for dur in (2.0, 60.0) if quick else (2.0, 60.0, 300.0):
            p = tmp / f"tap_{int(dur)}s.wav"
            _write(p, seed=7, duration_s=dur, tap_s=0.5)
            r = _run_child(["--child-long", str(p), str(path)], default_env)
            p.unlink()
            t2 = r["time_s"] if t2 is None else t2
            note = "" if r["error"] is None else f" (error: {r['error']})"
            print(
                f"| {dur:g} s | {r['time_s']:.2f} | {r['time_s'] / t2:.0f} | {dur / 2.0:.0f} | {r['rss_mib']:.0f}{note} |"
            )
    print(f"\n({time.perf_counter() - t_start:.0f} s)")


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--child-analyze":
        _child_analyze(sys.argv[2], int(sys.argv[3]), sys.argv[4])
    elif len(sys.argv) > 1 and sys.argv[1] == "--child-long":
        _child_long(sys.argv[2], sys.argv[3])
    else:
        args = [a for a in sys.argv[1:] if not a.startswith("--")]
        main(int(args[0]) if args else 7, quick="--quick" in sys.argv[1:])
