"""One long sound file under the batch failure policy (ringdown.analysis.engine.iter_long_file).

The recording is the conftest signal (two analytic damped sinusoids, 440 Hz and 1250 Hz, written
by soundfile); its frequencies are the reference, not the code under test.
"""

from __future__ import annotations

import pytest

from ringdown.analysis.engine import iter_long_file
from ringdown.analysis.pipeline import analyze_file


def test_a_file_through_the_block_engine_is_one_result(two_mode_wav):
    seen: list[tuple[int, int | None]] = []
    ((pos, a),) = list(iter_long_file(two_mode_wav, progress=lambda done, total: seen.append((done, total))))
    assert pos == 0 and a.error is None
    # the two modes of the conftest signal, to 0.05 %
    assert [m.f_d_hz for m in a.modes] == pytest.approx([440.0, 1250.0], rel=5e-4)
    # a file no longer than one segment is analysed as the whole-file path does (DEVELOPERS.md)
    assert a.to_dict() == analyze_file(two_mode_wav).to_dict()
    # progress: samples read so far out of the file's 16000, rising to the end
    assert seen and seen[-1] == (16000, 16000) and [d for d, _ in seen] == sorted(d for d, _ in seen)


def test_any_failure_is_the_files_result(two_mode_wav, tmp_path):
    ((_, late),) = list(iter_long_file(two_mode_wav, start_s=5.0))  # the file lasts 1 s
    assert late.error is not None and late.path == two_mode_wav and "start" in late.error.message
    assert late.settings["start_s"] == 5.0  # the failed record keeps the settings asked for
    missing = str(tmp_path / "gone.wav")
    ((_, gone),) = list(iter_long_file(missing))
    assert gone.error is not None and gone.path == missing and "gone.wav" in gone.error.message
