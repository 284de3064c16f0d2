"""Tests of ringdown.io.read.read_recording.

Every fixture file is written here with the standard library (``wave``, ``csv``, plain text) or
with soundfile, never by ringdown. Signals are invented decaying sinusoids.
"""

from __future__ import annotations

import csv
import hashlib
import os
import re
import wave

import numpy as np
import pytest
import soundfile as sf
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from ringdown.base.errors import InputError, ParameterError, RingdownError
from ringdown.io.read import MAX_TIMING_JITTER, MIN_SAMPLES, read_recording
from ringdown.io.recording import Recording

FS = 8000.0  # Hz, invented
N = 2000


def ringdown_signal(n=N, fs=FS, f=440.0, beta=20.0, amp=0.45, phase=0.0):
    """A decaying sinusoid amp*exp(-beta t) cos(2 pi f t + phase), all invented."""
    t = np.arange(n) / fs
    return amp * np.exp(-beta * t) * np.cos(2 * np.pi * f * t + phase)


def r(value) -> str:
    """Shortest text that reads back as exactly the same float64 (Python's repr)."""
    return repr(float(value))


def sha256_of(path) -> str:
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


def name_re(path) -> str:
    """Regex matching the file name as messages quote it (Python repr, as Recording does)."""
    return re.escape(repr(os.fspath(path)))


def write_text(path, text: str, encoding="utf-8"):
    with open(path, "w", encoding=encoding, newline="") as f:
        f.write(text)
    return path


# ------------------------------------------------------------------------------------------
# sound files

# Quantisation step of each integer subtype when read as float: libsndfile (and so soundfile)
# maps an n-bit integer k to k / 2**(n-1) (soundfile.read docs: float data "in the range -1.0
# to 1.0"; libsndfile's sf_read_double with normalisation). One step is 2**-(n-1).
# Writing float data truncates or rounds onto that grid, so a round trip errs by < 1 step.
# FLOAT stores float32: relative rounding 2**-24 (IEEE 754 binary32), so < 2**-24 for |x| < 1.
# DOUBLE stores float64 exactly.
SUBTYPES = [
    ("WAV", "PCM_16", 2.0**-15, 1.0),
    ("WAV", "PCM_24", 2.0**-23, 1.0),
    ("WAV", "PCM_32", 2.0**-31, 1.0),
    ("WAV", "FLOAT", 2.0**-24, None),
    ("WAV", "DOUBLE", 0.0, None),
    ("FLAC", "PCM_16", 2.0**-15, 1.0),
    ("FLAC", "PCM_24", 2.0**-23, 1.0),
]


@pytest.mark.parametrize("n_channels", [1, 3])
@pytest.mark.parametrize("fmt,subtype,step,full_scale", SUBTYPES)
def test_sound_round_trip(tmp_path, fmt, subtype, step, full_scale, n_channels):
    x = np.column_stack([ringdown_signal(phase=0.7 * k, f=300.0 + 100 * k) for k in range(n_channels)])
    path = tmp_path / f"tap_{subtype}.{fmt.lower()}"
    sf.write(path, x, int(FS), format=fmt, subtype=subtype)
    for ch in range(1, n_channels + 1):
        rec = read_recording(path, channel=ch)
        assert isinstance(rec, Recording)
        assert rec.channel == str(ch)
        assert rec.sample_rate == FS
        assert rec.samples.dtype == np.float64 and rec.samples.shape == (N,)
        np.testing.assert_allclose(rec.samples, x[:, ch - 1], rtol=0, atol=step)
        assert rec.full_scale == full_scale
        assert rec.timing_jitter is None
        assert rec.sha256 == sha256_of(path)
        assert rec.path == os.fspath(path)


def test_default_channel_is_first_and_string_channel(tmp_path):
    x = np.column_stack([ringdown_signal(amp=a) for a in (0.1, 0.2, 0.3)])
    path = tmp_path / "three.wav"
    sf.write(path, x, int(FS), subtype="DOUBLE")
    np.testing.assert_array_equal(read_recording(path).samples, x[:, 0])
    np.testing.assert_array_equal(read_recording(path, channel="2").samples, x[:, 1])
    # column is the same choice under its text-file name
    np.testing.assert_array_equal(read_recording(path, column=3).samples, x[:, 2])


def test_integer_samples_exact(tmp_path):
    # Integer data written as integers: read back exactly as k / 2**(bits-1) (see SUBTYPES).
    rng = np.random.default_rng(1)
    k16 = rng.integers(-(2**15), 2**15, size=500, dtype=np.int16)
    sf.write(tmp_path / "i16.wav", k16, 48000, subtype="PCM_16")
    np.testing.assert_array_equal(read_recording(tmp_path / "i16.wav").samples, k16 / 2.0**15)
    k32 = rng.integers(-(2**31), 2**31, size=500, dtype=np.int32)
    sf.write(tmp_path / "i32.wav", k32, 48000, subtype="PCM_32")
    np.testing.assert_array_equal(read_recording(tmp_path / "i32.wav").samples, k32 / 2.0**31)
    # PCM_24 keeps the top 24 bits of an int32 sample
    k24 = (rng.integers(-(2**23), 2**23, size=500) * 256).astype(np.int32)
    sf.write(tmp_path / "i24.wav", k24, 48000, subtype="PCM_24")
    np.testing.assert_array_equal(read_recording(tmp_path / "i24.wav").samples, k24 / 2.0**31)


def test_stdlib_wave_file(tmp_path):
    # 16-bit stereo written by the standard library's wave module (little-endian int16 frames)
    rng = np.random.default_rng(2)
    frames = rng.integers(-30000, 30000, size=(300, 2)).astype("<i2")
    path = tmp_path / "stdlib.wav"
    with wave.open(os.fspath(path), "wb") as w:
        w.setnchannels(2)
        w.setsampwidth(2)
        w.setframerate(22050)
        w.writeframes(frames.tobytes())
    rec = read_recording(path, channel=2)
    assert rec.sample_rate == 22050.0 and rec.full_scale == 1.0 and rec.channel == "2"
    np.testing.assert_array_equal(rec.samples, frames[:, 1] / 2.0**15)
    assert rec.sha256 == sha256_of(path)


def test_ogg_vorbis(tmp_path):
    x = ringdown_signal(n=8000, fs=48000.0, f=1000.0, beta=5.0)
    path = tmp_path / "tap.ogg"
    try:
        sf.write(path, x, 48000, format="OGG", subtype="VORBIS")
    except Exception as exc:  # pragma: no cover - depends on the libsndfile build
        pytest.skip(f"soundfile cannot write OGG here: {exc}")
    rec = read_recording(path)
    assert rec.sample_rate == 48000.0 and rec.full_scale is None  # lossy float decode: no full scale
    n = min(rec.n_samples, x.size)
    assert abs(rec.n_samples - x.size) < 2048  # Vorbis frames pad the end (from memory)
    # Lossy codec: only require the waveform to survive (error < 10 % of the signal RMS; common
    # practice, no source - Vorbis at default quality is far better than this).
    err = np.sqrt(np.mean((rec.samples[:n] - x[:n]) ** 2)) / np.sqrt(np.mean(x[:n] ** 2))
    assert err < 0.1


def test_sound_file_with_odd_extension(tmp_path):
    # anything soundfile opens is read as sound, whatever the name
    x = ringdown_signal()
    path = tmp_path / "capture.bin"
    sf.write(path, x, int(FS), format="WAV", subtype="DOUBLE")
    np.testing.assert_array_equal(read_recording(path).samples, x)


# ------------------------------------------------------------------------------------------
# delimited text


def test_csv_comma_with_header(tmp_path):
    x = ringdown_signal()
    t = np.arange(N) / FS
    path = tmp_path / "scope.csv"
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["time", "signal"])
        w.writerows(zip(map(r, t), map(r, x)))
    rec = read_recording(path)
    np.testing.assert_array_equal(rec.samples, x)  # repr() round-trips float64 exactly
    # 1 / mean step, the mean step from the end points; floating-point rounding only
    np.testing.assert_allclose(rec.sample_rate, FS, rtol=1e-12)
    assert rec.channel == "signal"
    assert rec.full_scale is None
    assert rec.timing_jitter is not None and rec.timing_jitter < 1e-9
    assert rec.sha256 == sha256_of(path)


def test_semicolon_decimal_comma_german_header(tmp_path):
    x = ringdown_signal()
    t = np.arange(N) / FS
    rows = "\n".join(f"{a:.9f};{b:.9f}".replace(".", ",") for a, b in zip(t, x))
    path = write_text(tmp_path / "messung.csv", "Zeit [s];Spannung [V]\n" + rows + "\n")
    rec = read_recording(path)
    np.testing.assert_allclose(rec.samples, x, rtol=0, atol=5e-10)  # printed to 9 decimals
    np.testing.assert_allclose(rec.sample_rate, FS, rtol=1e-9)
    assert rec.channel == "Spannung [V]"


def test_tab_separated(tmp_path):
    x = ringdown_signal()
    t = np.arange(N) / FS
    path = tmp_path / "run.tsv"
    with open(path, "w", newline="") as f:
        w = csv.writer(f, delimiter="\t")
        w.writerow(["t", "accel"])
        w.writerows(zip(map(r, t), map(r, x)))
    rec = read_recording(path)
    np.testing.assert_array_equal(rec.samples, x)
    np.testing.assert_allclose(rec.sample_rate, FS, rtol=1e-12)
    assert rec.channel == "accel"


def test_space_separated_with_units(tmp_path):
    x = ringdown_signal()
    t = np.arange(N) / FS
    rows = "\n".join(f"  {r(a)}   {r(b)}" for a, b in zip(t, x))
    path = write_text(tmp_path / "log.txt", "Time [s] Volts [V]\n" + rows + "\n")
    rec = read_recording(path)
    np.testing.assert_array_equal(rec.samples, x)
    assert rec.channel == "Volts [V]"
    np.testing.assert_allclose(rec.sample_rate, FS, rtol=1e-12)


@pytest.mark.parametrize(
    "header,per_second",
    [
        ("Time [ms]", 1e3),
        ("t_us", 1e6),
        ("t [µs]", 1e6),
        ("time (s)", 1.0),
        ("t/ms", 1e3),
        ("Zeit in ms", 1e3),
        ("TIME_NS", 1e9),
        ("t", 1.0),
    ],
)
def test_time_units_from_header(tmp_path, header, per_second):
    # SI prefixes: ms = 1e-3 s, us = 1e-6 s, ns = 1e-9 s
    x = ringdown_signal()
    t = np.arange(N) / FS * per_second
    rows = "\n".join(f"{r(a)},{r(b)}" for a, b in zip(t, x))
    path = write_text(tmp_path / "units.csv", f"{header},x\n{rows}\n")
    rec = read_recording(path)
    np.testing.assert_allclose(rec.sample_rate, FS, rtol=1e-9)
    np.testing.assert_array_equal(rec.samples, x)


def test_comment_lines_and_crlf(tmp_path):
    x = ringdown_signal()
    t = np.arange(N) / FS
    lines = ["# invented demo: a struck bracket", "% exported by hand", "// units SI", "time,x"]
    for k, (a, b) in enumerate(zip(t, x)):
        if k == 100:
            lines += ["# a note in the middle", ""]
        lines.append(f"{r(a)},{r(b)}")
    path = write_text(tmp_path / "notes.csv", "\r\n".join(lines) + "\r\n")
    rec = read_recording(path)
    np.testing.assert_array_equal(rec.samples, x)
    assert rec.channel == "x"


def test_header_in_comment_line(tmp_path):
    # numpy.savetxt-style "# name,name" header above the data
    x = ringdown_signal()
    rows = "\n".join(f"{r(a)},{r(b)}" for a, b in zip(np.arange(N) * 1e3 / FS, x))
    path = write_text(tmp_path / "saved.csv", "# t_ms,force\n" + rows + "\n")
    rec = read_recording(path)
    assert rec.channel == "force"
    np.testing.assert_allclose(rec.sample_rate, FS, rtol=1e-9)


def test_no_header_time_first_column(tmp_path):
    x = ringdown_signal()
    rows = "\n".join(f"{r(a)} {r(b)}" for a, b in zip(np.arange(N) / FS, x))
    rec = read_recording(write_text(tmp_path / "plain.dat", rows + "\n"))
    np.testing.assert_allclose(rec.sample_rate, FS, rtol=1e-12)
    assert rec.channel == "column 1"  # first data column (time not counted)
    np.testing.assert_array_equal(rec.samples, x)


def test_single_column_needs_sample_rate(tmp_path):
    x = ringdown_signal()
    path = write_text(tmp_path / "one.txt", "\n".join(map(r, x)) + "\n")
    rec = read_recording(path, sample_rate=FS)
    np.testing.assert_array_equal(rec.samples, x)
    assert rec.sample_rate == FS and rec.channel == "column 1" and rec.timing_jitter is None
    with pytest.raises(InputError, match=name_re(path) + ".*no time column.*--sample-rate"):
        read_recording(path)


def test_index_column_is_not_time(tmp_path):
    # a first column counting 0, 1, 2, ... is a sample index, not time in seconds
    x = ringdown_signal()
    rows = "\n".join(f"{k},{r(b)}" for k, b in enumerate(x))
    path = write_text(tmp_path / "indexed.csv", rows + "\n")
    with pytest.raises(InputError, match="no time column"):
        read_recording(path)
    rec = read_recording(path, sample_rate=FS)
    np.testing.assert_array_equal(rec.samples, x)  # default skips the index column


def test_choose_column_by_index_and_name(tmp_path):
    a, b = ringdown_signal(amp=0.1), ringdown_signal(amp=0.2, f=700.0)
    t = np.arange(N) / FS
    rows = "\n".join(f"{r(p)},{r(q)},{r(s)}" for p, q, s in zip(t, a, b))
    path = write_text(tmp_path / "two.csv", "Time [s],Force [N],Voltage [V]\n" + rows + "\n")
    np.testing.assert_array_equal(read_recording(path).samples, a)
    np.testing.assert_array_equal(read_recording(path, column=2).samples, b)
    np.testing.assert_array_equal(read_recording(path, column="2").samples, b)
    np.testing.assert_array_equal(read_recording(path, column="voltage [v]").samples, b)
    rec = read_recording(path, column="voltage")  # name without its unit
    np.testing.assert_array_equal(rec.samples, b)
    assert rec.channel == "Voltage [V]"
    np.testing.assert_array_equal(read_recording(path, channel=1).samples, a)


def test_sample_rate_agreeing_with_time_column(tmp_path):
    x = ringdown_signal()
    rows = "\n".join(f"{r(a)},{r(b)}" for a, b in zip(np.arange(N) / FS, x))
    path = write_text(tmp_path / "both.csv", "time,x\n" + rows + "\n")
    assert read_recording(path, sample_rate=FS).sample_rate == pytest.approx(FS, rel=1e-12)
    with pytest.raises(ParameterError, match=name_re(path) + ".*implies 8000 Hz"):
        read_recording(path, sample_rate=2 * FS)


def test_small_jitter_accepted_and_reported(tmp_path):
    rng = np.random.default_rng(3)
    steps = (1 + 4e-4 * rng.standard_normal(N - 1)) / FS
    t = np.concatenate([[0.0], np.cumsum(steps)])
    x = ringdown_signal()
    rows = "\n".join(f"{r(a)},{r(b)}" for a, b in zip(t, x))
    path = write_text(tmp_path / "jitter.csv", "time,x\n" + rows + "\n")
    rec = read_recording(path)
    # reference: RMS deviation of the steps from their mean, over the mean step (Recording docs)
    d = np.diff(t)
    expected = np.sqrt(np.mean((d - d.mean()) ** 2)) / d.mean()
    assert 2e-4 < expected < MAX_TIMING_JITTER  # the fixture really is jittery but acceptable
    np.testing.assert_allclose(rec.timing_jitter, expected, rtol=1e-6)
    np.testing.assert_allclose(rec.sample_rate, (N - 1) / (t[-1] - t[0]), rtol=1e-12)


def test_rounded_time_column_accepted(tmp_path):
    # 48 kHz time printed with 6 decimals: steps of 20.833 us print as 20 or 21 us (jitter ~2 %),
    # but every step is within one printed digit (1 us) of the mean, so the file is uniform.
    fs = 48000.0
    t = np.arange(N) / fs
    rows = "\n".join(f"{a:.6f},{b:.6f}" for a, b in zip(t, ringdown_signal(fs=fs)))
    path = write_text(tmp_path / "rounded.csv", "time,x\n" + rows + "\n")
    rec = read_recording(path)
    assert rec.timing_jitter > MAX_TIMING_JITTER
    # endpoint error <= 0.5 us over (N-1) steps
    np.testing.assert_allclose(rec.sample_rate, fs, rtol=1e-3)


def test_irregular_steps_rejected(tmp_path):
    rng = np.random.default_rng(4)
    t = np.concatenate([[0.0], np.cumsum((1 + 0.12 * rng.standard_normal(N - 1)) / FS)])
    rows = "\n".join(f"{r(a)},{r(b)}" for a, b in zip(t, ringdown_signal()))
    path = write_text(tmp_path / "irregular.csv", "time,x\n" + rows + "\n")
    with pytest.raises(InputError, match=name_re(path) + r".*vary by 1\d % RMS.*resample"):
        read_recording(path)


def test_non_increasing_time_rejected(tmp_path):
    t = np.arange(N) / FS
    t[500] = t[499]
    rows = "\n".join(f"{r(a)},{r(b)}" for a, b in zip(t, ringdown_signal()))
    path = write_text(tmp_path / "repeat.csv", "time,x\n" + rows + "\n")
    # header is line 1, so row 500 (0-based) is line 502
    with pytest.raises(InputError, match=name_re(path) + ".*does not increase at line 502"):
        read_recording(path)


def test_latin1_and_trailing_delimiter(tmp_path):
    x = ringdown_signal()
    rows = "\n".join(f"{r(a)};{r(b)};" for a, b in zip(np.arange(N) * 1e6 / FS, x))
    path = write_text(tmp_path / "latin.csv", "Zeit [µs];Kraft [N];\n" + rows + "\n", encoding="latin-1")
    rec = read_recording(path)
    assert rec.channel == "Kraft [N]"
    np.testing.assert_allclose(rec.sample_rate, FS, rtol=1e-9)


def test_one_named_column_of_decimal_commas(tmp_path):
    # "0,5" could be two comma-separated columns; a single header name says it is one column
    x = np.round(ringdown_signal(), 6)
    rows = "\n".join(f"{v:.6f}".replace(".", ",") for v in x)
    path = write_text(tmp_path / "einzeln.csv", "Spannung\n" + rows + "\n")
    rec = read_recording(path, sample_rate=FS)
    assert rec.channel == "Spannung"
    np.testing.assert_allclose(rec.samples, x, rtol=0, atol=5e-7)  # printed to 6 decimals


def test_utf16_text(tmp_path):
    x = ringdown_signal()
    rows = "\n".join(f"{r(a)},{r(b)}" for a, b in zip(np.arange(N) / FS, x))
    path = write_text(tmp_path / "wide_chars.csv", "time,x\n" + rows + "\n", encoding="utf-16")
    np.testing.assert_array_equal(read_recording(path).samples, x)


def test_sound_file_named_csv(tmp_path):
    # the leading bytes win over the name: a WAV called .csv is read as sound
    x = ringdown_signal()
    path = tmp_path / "misnamed.csv"
    sf.write(path, x, int(FS), format="WAV", subtype="DOUBLE")
    np.testing.assert_array_equal(read_recording(path).samples, x)


# ------------------------------------------------------------------------------------------
# bad input: one InputError / ParameterError naming the file


def test_missing_file(tmp_path):
    path = tmp_path / "nowhere.wav"
    with pytest.raises(InputError, match=name_re(path) + " does not exist"):
        read_recording(path)


def test_directory(tmp_path):
    with pytest.raises(InputError, match=name_re(tmp_path) + " is a directory"):
        read_recording(tmp_path)


@pytest.mark.parametrize("fname", ["empty.wav", "empty.csv"])
def test_empty_file(tmp_path, fname):
    path = tmp_path / fname
    path.write_bytes(b"")
    with pytest.raises(InputError, match=name_re(path) + r" is empty \(0 bytes\)"):
        read_recording(path)


@pytest.mark.parametrize("fname", ["junk.bin", "junk.csv", "junk.wav"])
def test_binary_junk(tmp_path, fname):
    path = tmp_path / fname
    path.write_bytes(np.random.default_rng(5).integers(0, 256, 4000, dtype=np.uint8).tobytes())
    with pytest.raises(InputError, match=name_re(path) + " is neither a sound file .* nor text"):
        read_recording(path)


@pytest.mark.parametrize("keep", [12, 30])
def test_truncated_wav_header(tmp_path, keep):
    whole = tmp_path / "whole.wav"
    sf.write(whole, ringdown_signal(), int(FS), subtype="PCM_16")
    path = tmp_path / "cut.wav"
    path.write_bytes(whole.read_bytes()[:keep])  # the canonical WAV header alone is 44 bytes
    with pytest.raises(InputError, match=name_re(path) + " starts like a WAV file .*truncated"):
        read_recording(path)


def test_text_only_csv(tmp_path):
    path = write_text(tmp_path / "words.csv", "time,signal\nno,data\nhere,either\n")
    with pytest.raises(InputError, match=name_re(path) + " holds text but no rows of numbers"):
        read_recording(path)


@pytest.mark.parametrize("content", ["# only a comment\n\n", ",,,\n;;\n", "\n\n  \n"])
def test_no_columns(tmp_path, content):
    path = write_text(tmp_path / "hollow.csv", content)
    with pytest.raises(InputError, match=name_re(path) + " holds no columns of data"):
        read_recording(path)


def test_nan_cell(tmp_path):
    rows = [f"{k / FS!r},{r(v)}" for k, v in enumerate(ringdown_signal())]
    rows[9] = f"{9 / FS!r},nan"
    path = write_text(tmp_path / "nan.csv", "time,volts\n" + "\n".join(rows) + "\n")
    with pytest.raises(InputError, match=name_re(path) + r" line 11, column 2 \('volts'\) holds NaN"):
        read_recording(path)


def test_blank_cell(tmp_path):
    rows = [f"{k / FS!r},{r(v)}" for k, v in enumerate(ringdown_signal())]
    rows[19] = f"{19 / FS!r},"
    path = write_text(tmp_path / "blank.csv", "time,volts\n" + "\n".join(rows) + "\n")
    with pytest.raises(InputError, match=name_re(path) + r" line 21, column 2 \('volts'\) is blank"):
        read_recording(path)


def test_non_numeric_cell_and_ragged_row(tmp_path):
    rows = [f"{k / FS!r},{r(v)}" for k, v in enumerate(ringdown_signal())]
    bad = rows.copy()
    bad[29] = f"{29 / FS!r},oops"
    path = write_text(tmp_path / "word.csv", "time,volts\n" + "\n".join(bad) + "\n")
    with pytest.raises(InputError, match=name_re(path) + r" line 31, column 2 .*'oops' is not a number"):
        read_recording(path)
    ragged = rows.copy()
    ragged[39] += ",1.0"
    path = write_text(tmp_path / "ragged.csv", "time,volts\n" + "\n".join(ragged) + "\n")
    with pytest.raises(InputError, match=name_re(path) + " line 41 has 3 fields but the rows above have 2"):
        read_recording(path)


def test_too_few_samples(tmp_path):
    rows = "\n".join(f"{k / FS!r},{r(v)}" for k, v in enumerate(ringdown_signal(n=10)))
    path = write_text(tmp_path / "short.csv", "time,x\n" + rows + "\n")
    with pytest.raises(InputError, match=name_re(path) + f" has 10 samples; at least {MIN_SAMPLES}"):
        read_recording(path)
    wav = tmp_path / "short.wav"
    sf.write(wav, ringdown_signal(n=MIN_SAMPLES - 1), int(FS), subtype="PCM_16")
    with pytest.raises(InputError, match=name_re(wav) + f" has {MIN_SAMPLES - 1} samples"):
        read_recording(wav)
    sf.write(wav, ringdown_signal(n=MIN_SAMPLES), int(FS), subtype="PCM_16")
    assert read_recording(wav).n_samples == MIN_SAMPLES  # the limit itself is accepted


@pytest.mark.parametrize("rate", [0, -8000.0, float("nan"), float("inf"), "fast", True])
def test_bad_sample_rate(tmp_path, rate):
    path = write_text(tmp_path / "rate.txt", "\n".join(map(r, ringdown_signal())) + "\n")
    with pytest.raises(ParameterError, match="sample rate for " + name_re(path) + " must be a finite number > 0 Hz"):
        read_recording(path, sample_rate=rate)


def test_sample_rate_conflicts_with_sound_file(tmp_path):
    path = tmp_path / "rate.wav"
    sf.write(path, ringdown_signal(), int(FS), subtype="PCM_16")
    with pytest.raises(ParameterError, match=name_re(path) + " states 8000 Hz"):
        read_recording(path, sample_rate=44100)
    assert read_recording(path, sample_rate=FS).sample_rate == FS


def test_channel_out_of_range(tmp_path):
    path = tmp_path / "three.wav"
    sf.write(path, np.zeros((200, 3)), int(FS), subtype="PCM_16")
    for bad in (4, 0, "7"):
        with pytest.raises(ParameterError, match=name_re(path) + " has 3 channels; pick 1 to 3"):
            read_recording(path, channel=bad)
    with pytest.raises(ParameterError, match="channel 'left' of " + name_re(path) + " is not a channel number"):
        read_recording(path, channel="left")
    with pytest.raises(ParameterError, match="both channel=1 and column=2 given for " + name_re(path)):
        read_recording(path, channel=1, column=2)


def test_column_errors(tmp_path):
    rows = "\n".join(f"{k / FS!r},{r(v)},{r(v)}" for k, v in enumerate(ringdown_signal()))
    path = write_text(tmp_path / "cols.csv", "time,a,b\n" + rows + "\n")
    with pytest.raises(
        ParameterError,
        match=r"column 3 is out of range: " + name_re(path) + r" has 2 data columns \(not counting the time column\)",
    ):
        read_recording(path, column=3)
    with pytest.raises(ParameterError, match="no column named 'c' in " + name_re(path) + ".*'a', 'b'"):
        read_recording(path, column="c")
    with pytest.raises(ParameterError, match="'Time' is the time column of " + name_re(path)):
        read_recording(path, column="Time")


def test_only_time_column(tmp_path):
    path = write_text(tmp_path / "clock.csv", "time\n" + "\n".join(repr(k / FS) for k in range(N)) + "\n")
    with pytest.raises(InputError, match=name_re(path) + " has only a time column"):
        read_recording(path)


def test_file_too_large_refused_before_reading(tmp_path):
    path = tmp_path / "huge.wav"
    with open(path, "wb") as f:  # sparse: no disk used, nothing readable
        f.truncate(64 << 30)
    with pytest.raises(InputError, match=name_re(path) + r" is 64\.0 GiB, more than the .* allowed"):
        read_recording(path, max_bytes=1 << 30)
    # default limit: a quarter of physical memory, so 64 GiB is refused unless RAM >= 256 GiB
    if (os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")) // 4 >= 64 << 30:
        pytest.skip("this machine has enough memory to accept the file")
    with pytest.raises(InputError, match=name_re(path) + r" is 64\.0 GiB, .* allowed \(a quarter of physical memory\)"):
        read_recording(path)


def test_decoded_sound_too_large(tmp_path):
    # PCM_16 file of ~4 KB decodes to 2000 frames x 3 channels x 8 bytes = 48000 bytes
    path = tmp_path / "dense.wav"
    sf.write(path, np.zeros((N, 3)), int(FS), subtype="PCM_16")
    size = os.path.getsize(path)
    with pytest.raises(InputError, match=name_re(path) + r" decodes to 2000 frames x 3 channels = 46\.9 KiB"):
        read_recording(path, max_bytes=size + 100)


def test_text_too_large_to_parse(tmp_path):
    rows = "\n".join(f"{k / FS!r},{r(v)}" for k, v in enumerate(ringdown_signal()))
    path = write_text(tmp_path / "wide.csv", "time,x\n" + rows + "\n")
    size = os.path.getsize(path)
    with pytest.raises(InputError, match=name_re(path) + " is .* of text; parsing it needs about"):
        read_recording(path, max_bytes=size + 1)


@pytest.mark.parametrize("bad", [0, -1, 1.5, "many"])
def test_bad_max_bytes(tmp_path, bad):
    path = write_text(tmp_path / "ok.txt", "\n".join(map(r, ringdown_signal())) + "\n")
    with pytest.raises(ParameterError, match="max_bytes for " + name_re(path) + " must be a whole number"):
        read_recording(path, sample_rate=FS, max_bytes=bad)


# ------------------------------------------------------------------------------------------
# no raw exception on any input


_CELL = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-(10**6), 10**6).map(str),
    st.sampled_from(["", " ", "time", "t [ms]", "nan", "1,5", "#", "%", "//", '"', "µs", "x"]),
)
_ROW = st.lists(_CELL, max_size=4).flatmap(
    lambda cells: st.sampled_from([",", ";", "\t", " ", "  "]).map(lambda d: d.join(cells))
)
_STRUCTURED = st.lists(_ROW, max_size=120).map("\n".join)


@pytest.fixture(scope="module")
def fuzz_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz")


def _only_ringdown_errors(directory, payload: bytes, **options) -> None:
    path = os.path.join(directory, "fuzz.csv")
    with open(path, "wb") as f:
        f.write(payload)
    try:
        rec = read_recording(path, **options)
    except RingdownError as exc:
        assert "\n" not in str(exc)  # one-line messages
        assert repr(path) in str(exc)  # every message names the file
    else:
        assert rec.samples.ndim == 1 and rec.n_samples >= MIN_SAMPLES
        assert np.all(np.isfinite(rec.samples)) and rec.sample_rate > 0


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(text=st.one_of(st.text(max_size=2000), _STRUCTURED), rate=st.sampled_from([None, 1000.0]))
def test_random_text_gives_only_ringdown_errors(fuzz_dir, text, rate):
    _only_ringdown_errors(fuzz_dir, text.encode("utf-8", "surrogatepass"), sample_rate=rate)


@settings(max_examples=150, deadline=None)
@given(blob=st.binary(max_size=4000), rate=st.sampled_from([None, 1000.0]))
def test_random_bytes_give_only_ringdown_errors(fuzz_dir, blob, rate):
    _only_ringdown_errors(fuzz_dir, blob, sample_rate=rate)
