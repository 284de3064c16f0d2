"""Write a rehearsal session of the invented end-of-line station: example_signals/line/ tapped in turn.

The scenario is invented (see make_line_examples.py): the eleven gear blanks of
``example_signals/line/`` tapped one after the other at the station, each recording followed by
``gap_s`` seconds of noise at the level of its own pre-trigger (seeded), so a tap comes every
1 + gap_s seconds. The session is one 16-bit mono WAV for ``ringdown listen --replay``; it is
not shipped, because it is made from the shipped files in a second.

Run: ``python example_signals/make_station_session.py [OUT.wav]`` (default ``station_session.wav``).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import soundfile as sf

LINE = Path(__file__).resolve().parent / "line"


def write_session(out, files=None, *, gap_s: float = 1.0, seed: int = 5) -> list[str]:
    """Write the session to ``out``; return the recordings in the order they were tapped."""
    files = [str(f) for f in (files if files is not None else sorted(LINE.glob("*.wav")))]
    rng = np.random.default_rng(seed)
    parts, rate = [], None
    for f in files:
        x, fs = sf.read(f)
        if rate is not None and fs != rate:
            raise ValueError(f"{f} is at {fs} Hz, the session at {rate} Hz")
        rate = fs
        parts += [x, float(np.std(x[:1000])) * rng.standard_normal(int(gap_s * fs))]
    sf.write(str(out), np.concatenate(parts), rate, subtype="PCM_16")
    return files


if __name__ == "__main__":
    out = Path(sys.argv[1]) if len(sys.argv) > 1 else Path("station_session.wav")
    used = write_session(out)
    print(f"wrote {out}: {len(used)} taps, one every 2 s ({', '.join(Path(f).stem for f in used)})")
