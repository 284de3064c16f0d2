"""Tests of the data-acquisition readers (ringdown/formats/): TDMS, UFF 58, MATLAB, HDF5.

Every fixture file is written by the format's own library, never by ringdown: npTDMS's
``TdmsWriter``, pyuff's ``write_sets``, ``scipy.io.savemat`` (MATLAB v5), hdf5storage (MATLAB
v7.3: MATLAB's HDF5 layout behind its 512-byte header) and h5py. The signal is an invented
two-mode ring-down (analytic damped cosines with seeded white noise, tests/conftest.py); the
reference is the same float64 samples in a WAV written by soundfile (subtype DOUBLE).
"""

from __future__ import annotations

import os
import re
import sys

import numpy as np
import pytest
import soundfile as sf
from typer.testing import CliRunner

h5py = pytest.importorskip("h5py")
hdf5storage = pytest.importorskip("hdf5storage")
nptdms = pytest.importorskip("nptdms")
pyuff = pytest.importorskip("pyuff")
scipy_io = pytest.importorskip("scipy.io")

from conftest import ringdown_modes  # noqa: E402

from ringdown import analyze_file, read_recording  # noqa: E402
from ringdown.base.errors import InputError, ParameterError  # noqa: E402
from ringdown.cli import app  # noqa: E402
from ringdown.cli._common import expand_inputs, parse_channel  # noqa: E402
from ringdown.cli.analyze import format_table  # noqa: E402
from ringdown.io.formats import find_reader  # noqa: E402

FS = 48000.0  # Hz: 1/FS = 2.0833...e-05 s is not exact in UFF's E13.5 increment (see test_uff_rate)
MODES = [(612.0, 11.5, 1.0), (1587.0, 22.0, 0.5, 0.3)]  # (f_d Hz, beta 1/s, amplitude[, phase]), invented
UNIT = "m/s^2"


@pytest.fixture(scope="module")
def signal():
    return ringdown_modes(MODES, sample_rate=FS, duration_s=0.5, snr_db=60.0, seed=18)


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    return tmp_path_factory.mktemp("formats")


@pytest.fixture(scope="module")
def wav_analysis(signal, folder):
    path = str(folder / "ref.wav")
    sf.write(path, signal, int(FS), subtype="DOUBLE")  # float64 samples, stored as they are
    return analyze_file(path)


# ------------------------------------------------------------------------------------------
# writers (each format's own library)


def write_tdms(path, channels, *, root_props=None):
    """channels: list of (group, channel, data, properties)."""
    from nptdms import ChannelObject, GroupObject, RootObject, TdmsWriter

    objects = [RootObject(properties=root_props or {})]
    for group in dict.fromkeys(g for g, *_ in channels):
        objects.append(GroupObject(group))
    objects += [ChannelObject(g, c, np.asarray(d), properties=p) for g, c, d, p in channels]
    with TdmsWriter(str(path)) as w:
        w.write_segment(objects)
    return str(path)


def uff58(data, *, id1, fs=FS, func_type=1, unit=UNIT, x=None, spacing=1, abscissa_type=17):
    x = np.arange(len(data)) / fs if x is None else x
    return pyuff.prepare_58(
        func_type=func_type,
        id1=id1,
        data=np.asarray(data),
        x=x,
        abscissa_spacing=spacing,
        ord_data_type=6 if np.iscomplexobj(data) else 4,
        rsp_node=3,
        rsp_dir=3,
        ref_node=1,
        ref_dir=3,
        abscissa_spec_data_type=abscissa_type,
        ordinate_spec_data_type=12,
        orddenom_spec_data_type=0,
        z_axis_spec_data_type=0,
        ordinate_axis_units_lab=unit,
        abscissa_axis_units_lab="s",
    )


def write_uff(path, sets):
    pyuff.UFF(str(path)).write_sets(sets, mode="overwrite")
    return str(path)


def write_h5(path, build):
    with h5py.File(str(path), "w") as f:
        build(f)
    return str(path)


def write_mat73(path, variables):
    # store_python_metadata=False: only MATLAB's own attributes (MATLAB_class...), as MATLAB writes
    hdf5storage.savemat(str(path), variables, format="7.3", matlab_compatible=True, store_python_metadata=False)
    return str(path)


def make(kind, folder, x):
    """The signal ``x`` in one format with its rate and unit; returns (path, channel label)."""
    p = folder / f"sig_{kind}"
    if kind == "tdms":
        return write_tdms(
            f"{p}.tdms", [("run1", "accel", x, {"wf_increment": 1 / FS, "unit_string": UNIT})]
        ), "run1/accel"
    if kind == "uff":
        return write_uff(f"{p}.uff", [uff58(x, id1="accel pt3 +Z")]), "accel pt3 +Z"
    if kind == "mat5":
        scipy_io.savemat(f"{p}.mat", {"accel": x, "fs": FS, "accel_unit": UNIT})
        return f"{p}.mat", "accel"
    if kind == "mat73":
        return write_mat73(f"{p}.mat", {"accel": x.reshape(-1, 1), "fs": FS, "accel_unit": UNIT}), "accel"
    if kind == "hdf5":

        def build(f):
            d = f.create_group("run1").create_dataset("accel", data=x)
            d.attrs["sample_rate"] = FS
            d.attrs["unit"] = UNIT

        return write_h5(f"{p}.h5", build), "run1/accel"
    raise AssertionError(kind)


KINDS = ["tdms", "uff", "mat5", "mat73", "hdf5"]


# ------------------------------------------------------------------------------------------
# the same modes as from the WAV


@pytest.mark.parametrize("kind", KINDS)
def test_same_modes_as_wav(kind, folder, signal, wav_analysis):
    path, label = make(kind, folder, signal)
    rec = read_recording(path)
    assert rec.sample_rate == FS and rec.n_samples == signal.size
    assert rec.channel == label and rec.unit == UNIT
    if kind == "uff":
        # dataset 58 stores real doubles as Fortran E20.12 (record 12, pyuff's dataset 58
        # description), i.e. 12 significant digits (pyuff writes "%20.11e"): each sample within
        # half a unit in the 12th digit, 5e-12 relative
        np.testing.assert_allclose(rec.samples, signal, rtol=5e-12, atol=1e-300)
    else:
        np.testing.assert_array_equal(rec.samples, signal)  # binary float64: the very same numbers
    a = analyze_file(path)
    ref = wav_analysis
    assert len(a.modes) == len(ref.modes) == 2
    # identical samples and rate give identical arithmetic; the UFF text rounding (5e-12 relative,
    # while the noise is 1e-3 of the signal at 60 dB SNR) moves results by far less than 1e-7 relative
    rtol = 1e-7 if kind == "uff" else 1e-12
    for m, r in zip(a.modes, ref.modes):
        for key in ("f_d_hz", "f_d_hz_u", "beta_per_s", "beta_per_s_u", "zeta", "q"):
            np.testing.assert_allclose(getattr(m, key), getattr(r, key), rtol=rtol, err_msg=f"{kind} {key}")
    # and they are the modes that were put in (tolerance: 5 standard uncertainties)
    for m, (f, beta, *_) in zip(a.modes, MODES):
        assert abs(m.f_d_hz - f) < 5 * m.f_d_hz_u + 1e-6 * f
        assert abs(m.beta_per_s - beta) < 5 * m.beta_per_s_u + 1e-4 * beta


@pytest.mark.parametrize("kind", KINDS)
def test_unit_and_channel_in_results(kind, folder, signal):
    path, label = make(kind, folder, signal)
    a = analyze_file(path)
    d = a.to_dict()
    assert d["channel"] == label and d["unit"] == UNIT
    assert f"channel {label} [{UNIT}]" in format_table(a).splitlines()[0]


def test_unit_key_is_none_for_audio(wav_analysis):
    d = wav_analysis.to_dict()
    assert "unit" in d and d["unit"] is None and d["channel"] == "1"
    assert "[" not in format_table(wav_analysis).splitlines()[0]


def test_report_shows_unit(folder, signal, tmp_path):
    from ringdown import write_report

    path, _ = make("tdms", folder, signal)
    out = tmp_path / "r.html"
    write_report([analyze_file(path)], str(out))
    html = out.read_text(encoding="utf-8")
    assert re.search(r"<t[hd][^>]*>unit</t[hd]>\s*<td[^>]*>m/s\^2</td>", html), "unit row missing"


# ------------------------------------------------------------------------------------------
# TDMS: several groups and channels


@pytest.fixture(scope="module")
def multi_tdms(folder, signal):
    inc = {"wf_increment": 1 / FS}
    return write_tdms(
        folder / "multi.tdms",
        [
            ("run1", "accel", signal, {**inc, "unit_string": UNIT}),
            ("run1", "force", 2 * signal, {**inc, "unit_string": "N"}),
            ("run2", "accel", 3 * signal, {**inc, "unit_string": UNIT}),
            ("run2", "mic", 4 * signal, {**inc, "unit_string": "Pa"}),
        ],
    )


@pytest.mark.parametrize(
    "choice, label, scale, unit",
    [
        (None, "run1/accel", 1, UNIT),
        ("run1/force", "run1/force", 2, "N"),
        ("force", "run1/force", 2, "N"),  # plain channel name, unique over the groups
        ("RUN2/Accel", "run2/accel", 3, UNIT),  # case-insensitive
        (4, "run2/mic", 4, "Pa"),  # 1-based index over every channel in file order
        ("3", "run2/accel", 3, UNIT),
    ],
)
def test_tdms_channel_by_name_and_index(multi_tdms, signal, choice, label, scale, unit):
    rec = read_recording(multi_tdms, channel=choice)
    assert rec.channel == label and rec.unit == unit and rec.n_channels == 4
    np.testing.assert_array_equal(rec.samples, scale * signal)


def test_tdms_ambiguous_and_unknown_channel(multi_tdms):
    with pytest.raises(ParameterError, match=r"'accel' is ambiguous .* 'run1/accel', 'run2/accel'; give the full name"):
        read_recording(multi_tdms, channel="accel")
    with pytest.raises(
        ParameterError,
        match=r"no channel named 'gyro' in .*multi.tdms'; its channels are "
        r"'run1/accel', 'run1/force', 'run2/accel', 'run2/mic'",
    ):
        read_recording(multi_tdms, channel="gyro")
    with pytest.raises(ParameterError, match=r"channel 5 is out of range: .* has 4 channels .*; pick 1 to 4"):
        read_recording(multi_tdms, channel=5)


def test_tdms_rate_from_group_and_missing_rate(folder, signal):
    # wf_increment on the group only (looked up channel -> group -> file)
    p = write_tdms(folder / "grouprate.tdms", [("g", "x", signal, {})])
    from nptdms import ChannelObject, GroupObject, TdmsWriter

    with TdmsWriter(p) as w:
        w.write_segment([GroupObject("g", properties={"wf_increment": 1 / FS}), ChannelObject("g", "x", signal)])
    assert read_recording(p).sample_rate == pytest.approx(FS, rel=1e-12)
    p2 = write_tdms(folder / "norate.tdms", [("g", "x", signal, {})])
    with pytest.raises(InputError, match=r"'g/x' in .*norate.tdms' carries no sample rate; pass the sample rate"):
        read_recording(p2)
    assert read_recording(p2, sample_rate=FS).sample_rate == FS
    p3 = write_tdms(folder / "rate.tdms", [("g", "x", signal, {"wf_increment": 1 / FS})])
    with pytest.raises(ParameterError, match=r"sample rate 44100 Hz given, but 'g/x' .* states 48000 Hz"):
        read_recording(p3, sample_rate=44100.0)
    assert read_recording(p3, sample_rate=FS * (1 + 5e-4)).sample_rate == pytest.approx(FS)  # within 0.1 %


def test_tdms_non_numeric_and_index_file(folder, signal):
    p = write_tdms(
        folder / "mixed.tdms", [("g", "when", np.array(["a", "b"]), {}), ("g", "x", signal, {"wf_increment": 1 / FS})]
    )
    assert read_recording(p).channel == "g/x"  # the default skips the text channel
    with pytest.raises(
        InputError, match=r"channel 'g/when' of .* holds .* values, not numbers; pick a numeric channel"
    ):
        read_recording(p, channel="when")
    # an index file repeats the lead-ins and metadata with the tag "TDSh" instead of "TDSm"
    # (npTDMS documentation, "TDMS index files"); made here from the data file
    idx = folder / "mixed.tdms_index"
    idx.write_bytes(b"TDSh" + open(p, "rb").read()[4:])
    with pytest.raises(InputError, match=r"is a TDMS index file .*; give the .tdms file beside it"):
        read_recording(str(idx))


# ------------------------------------------------------------------------------------------
# UFF 58


def test_uff_rate_and_channels(folder, signal):
    p = write_uff(folder / "two.uff", [uff58(signal, id1="accel pt3 +Z"), uff58(-signal, id1="mic", unit="Pa")])
    # record 7 prints 1/48000 s as 2.08333e-05 (E13.5): 1/that is 48000.08 Hz; the whole number
    # of hertz within the printed rounding is taken
    assert "2.08333e-05" in open(p).read()
    rec = read_recording(p, channel="MIC")
    assert rec.sample_rate == FS and rec.unit == "Pa" and rec.channel == "mic" and rec.n_channels == 2
    assert read_recording(p, channel=1).channel == "accel pt3 +Z"
    with pytest.raises(ParameterError, match=r"no dataset 58 named 'x' .*; its dataset 58s are 'accel pt3 \+Z', 'mic'"):
        read_recording(p, channel="x")


def test_uff_uneven_abscissa(folder, signal):
    x = np.arange(signal.size) / FS
    p = write_uff(folder / "uneven.uff", [uff58(signal, id1="a", x=x, spacing=0)])
    # the abscissa values are printed as E13.5 (record 12, case 6): 6 significant digits, 1e-6 s
    # at 0.5 s, so the steps scatter by 1.6 % RMS only through printing (accepted, as for a text
    # file's time column) and the rate (n - 1) / (t[-1] - t[0]) is good to 1e-6 s / 0.5 s = 2e-6
    assert read_recording(p).sample_rate == pytest.approx(FS, rel=5e-6)


def test_uff_refuses_spectra_and_complex(folder, signal):
    p = write_uff(folder / "frf.uff", [uff58(signal, id1="frf", func_type=4, abscissa_type=18)])
    with pytest.raises(InputError, match=r"is a frequency response function, not a time record"):
        read_recording(p)
    p = write_uff(folder / "cplx.uff", [uff58(signal * (1 + 1j), id1="c")])
    with pytest.raises(InputError, match=r"holds complex values"):
        read_recording(p)


def test_uff_without_dataset_58(folder):
    d = pyuff.prepare_151(
        model_name="bracket",
        description="invented",
        db_app="none",
        date_db_created="",
        time_db_created="",
        version_db1=1,
        version_db2=1,
        file_type=0,
        date_db_saved="",
        time_db_saved="",
        program="test",
        date_db_written="",
        time_db_written="",
    )
    p = write_uff(folder / "only151.uff", [d])
    with pytest.raises(InputError, match=r"holds UFF datasets 151 but no dataset 58"):
        read_recording(p)


# ------------------------------------------------------------------------------------------
# MATLAB and HDF5: names, rates, units


def test_mat5_variables_structs_and_columns(folder, signal):
    p = str(folder / "vars.mat")
    both = np.column_stack([signal, 2 * signal])  # MATLAB layout: a column per channel
    scipy_io.savemat(p, {"test": {"y": signal, "dt": 1 / FS, "units": "V"}, "pair": both, "fs": FS})
    rec = read_recording(p, channel="test.y")
    assert rec.sample_rate == pytest.approx(FS, rel=1e-12) and rec.unit == "V"
    rec = read_recording(p, channel="pair:2")
    np.testing.assert_array_equal(rec.samples, 2 * signal)
    assert rec.sample_rate == FS and rec.unit is None
    assert read_recording(p, channel="y").channel == "test.y"  # a field's own name, unique
    labels = {read_recording(p, channel=i).channel for i in (1, 2, 3)}
    assert labels == {"pair:1", "pair:2", "test.y"}
    with pytest.raises(ParameterError, match=r"'pair' is ambiguous .* 'pair:1', 'pair:2'"):
        read_recording(p, channel="pair")
    with pytest.raises(ParameterError, match=r"no signal named 'z' in .*vars.mat'; its signals are"):
        read_recording(p, channel="z")


def test_mat_time_vector_and_missing_rate(folder, signal):
    p = str(folder / "tvec.mat")
    scipy_io.savemat(p, {"t": np.arange(signal.size) / FS, "x": signal})
    assert read_recording(p).sample_rate == pytest.approx(FS, rel=1e-9)
    p = str(folder / "norate.mat")
    scipy_io.savemat(p, {"x": signal})
    with pytest.raises(InputError, match=r"'x' in .*norate.mat' carries no sample rate; pass the sample rate"):
        read_recording(p)
    assert read_recording(p, sample_rate=FS).sample_rate == FS
    p = str(folder / "clash.mat")
    scipy_io.savemat(p, {"x": signal, "fs": FS, "dt": 1 / 44100})
    with pytest.raises(InputError, match=r"states two sample rates for 'x'"):
        read_recording(p)


def test_mat73_struct_names_match_v5(folder, signal):
    p = write_mat73(folder / "s73.mat", {"test": {"y": signal, "dt": 1 / FS}, "fs": FS, "note": "invented"})
    assert open(p, "rb").read(10) == b"MATLAB 7.3"
    rec = read_recording(p, channel="test.y")
    assert rec.channel == "test.y" and rec.sample_rate == pytest.approx(FS, rel=1e-12)
    np.testing.assert_array_equal(rec.samples, signal)


def test_hdf5_rates_and_names(folder, signal):
    t = np.arange(signal.size) / FS

    def build(f):
        g = f.create_group("bench/run1")
        g.attrs["dt"] = 1 / FS
        g.create_dataset("accel", data=signal)
        g.create_dataset("mic", data=np.column_stack([signal, -signal]), compression="gzip")
        h = f.create_group("other")
        h.create_dataset("time", data=t)
        h.create_dataset("strain", data=signal).attrs["units"] = b"um/m"
        f.create_dataset("bare", data=signal)

    p = write_h5(folder / "tree.h5", build)
    assert read_recording(p, channel="accel").sample_rate == pytest.approx(FS, rel=1e-12)  # group attribute
    rec = read_recording(p, channel="bench/run1/mic:2")
    np.testing.assert_array_equal(rec.samples, -signal)
    rec = read_recording(p, channel="strain")
    assert rec.unit == "um/m" and rec.sample_rate == pytest.approx(FS, rel=1e-9)  # time vector beside it
    with pytest.raises(InputError, match=r"'bare' in .*tree.h5' carries no sample rate"):
        read_recording(p, channel="bare")


def test_complex_and_short_arrays(folder, signal):
    def build(f):
        f.create_dataset("z", data=signal * 1j).attrs["fs"] = FS
        f.create_dataset("x", data=signal).attrs["fs"] = FS
        f.create_dataset("few", data=signal[:10]).attrs["fs"] = FS

    p = write_h5(folder / "cplx.h5", build)
    assert read_recording(p).channel == "x"  # the first real signal
    with pytest.raises(InputError, match=r"'z' in .* holds complex values"):
        read_recording(p, channel="z")
    with pytest.raises(InputError, match=r"'few' in .* has 10 values, fewer than the 64 samples needed"):
        read_recording(p, channel="few")
    p = write_h5(folder / "cube.h5", lambda f: f.create_dataset("cube", data=np.zeros((100, 3, 2))))
    with pytest.raises(InputError, match=r"'cube' in .* is a 3-D array 100x3x2; ringdown reads vectors and 2-D"):
        read_recording(p, channel="cube")
    p = write_h5(folder / "empty.h5", lambda f: f.create_dataset("few", data=signal[:10]))
    with pytest.raises(InputError, match=r"is a HDF5 file with no numeric vector or matrix of at least 64 samples"):
        read_recording(p)


# ------------------------------------------------------------------------------------------
# broken files of each kind: one line naming the file, never a traceback


def _broken(kind, folder, signal, how):
    good, _ = make(kind, folder, signal)
    ext = os.path.splitext(good)[1]
    p = str(folder / f"broken_{kind}_{how}{ext}")
    data = open(good, "rb").read()
    if how == "truncated":
        data = data[: len(data) // 2]
    elif how == "junk":
        data = b"these are not the samples you are looking for\n" * 20
    elif how == "garbled":
        rng = np.random.default_rng(7)
        data = data[:16] + rng.integers(0, 256, 4000, dtype=np.uint8).tobytes()
    open(p, "wb").write(data)
    return p


BROKEN = {
    "tdms": {
        "truncated": r"is damaged or truncated \(npTDMS",
        "junk": r"cannot be read as TDMS",
        "garbled": r"(damaged or truncated|cannot be read as TDMS)",
    },
    "uff": {
        "truncated": r"(truncated|no complete dataset)",
        "junk": r"holds no Universal File dataset",
        "garbled": r"(truncated|no complete dataset|cannot be read)",
    },
    "mat5": {
        "truncated": r"cannot be read as a MATLAB file",
        "junk": r"cannot be read as a MATLAB file",
        "garbled": r"cannot be read as a MATLAB file",
    },
    "mat73": {
        "truncated": r"cannot be read as MATLAB v7.3",
        "junk": r"cannot be read as a MATLAB file",
        "garbled": r"cannot be read as (a )?MATLAB",
    },
    "hdf5": {
        "truncated": r"cannot be read as HDF5",
        "junk": r"cannot be read as HDF5",
        "garbled": r"cannot be read as HDF5",
    },
}


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("how", ["truncated", "junk", "garbled"])
def test_broken_files_are_refused_in_one_line(kind, how, folder, signal):
    p = _broken(kind, folder, signal, how)
    with pytest.raises(InputError) as info:
        read_recording(p)
    msg = str(info.value)
    assert "\n" not in msg and repr(p) in msg
    assert re.search(BROKEN[kind][how], msg), msg
    # the CLI: exit status 2, one error line, no traceback, and a good file beside it still analysed
    good, _ = make(kind, folder, signal)
    r = CliRunner().invoke(app, ["analyze", p, good, "--json", "--jobs", "1"])
    assert r.exit_code == 2 and "Traceback" not in r.output
    import json

    doc = json.loads(r.stdout)
    assert doc["recordings"][0]["error"]["code"] == "input" and doc["recordings"][1]["error"] is None


def test_missing_library_names_the_extra(folder, signal, monkeypatch):
    path, _ = make("tdms", folder, signal)
    monkeypatch.setitem(sys.modules, "nptdms", None)  # import nptdms now raises ImportError
    with pytest.raises(
        InputError, match=re.escape("reading TDMS needs the 'formats' extra: pip install 'ringdown[formats]'")
    ):
        read_recording(path)


# ------------------------------------------------------------------------------------------
# the registry and the CLI


def test_signature_first_extension_second(folder, signal, tmp_path):
    tdms, _ = make("tdms", folder, signal)
    renamed = tmp_path / "logger_output.dat"  # a text ending, TDMS content
    renamed.write_bytes(open(tdms, "rb").read())
    assert read_recording(str(renamed)).channel == "run1/accel"
    wav = tmp_path / "really_a_wav.tdms"
    sf.write(str(wav), signal, int(FS), subtype="DOUBLE", format="WAV")
    assert read_recording(str(wav)).channel == "1"  # RIFF content wins over the .tdms ending
    # a single column of integers starting -1 is text, not a Universal File
    txt = tmp_path / "counts.txt"
    txt.write_text("\n".join(str(int(v)) for v in np.r_[-1, 58, np.round(1000 * signal[:200])]) + "\n")
    assert find_reader(str(txt), txt.read_bytes()[:4096]) is None
    assert read_recording(str(txt), sample_rate=FS).n_samples == 202


def test_folders_expand_to_the_new_endings(folder, signal, tmp_path):
    for kind in KINDS:
        path, _ = make(kind, folder, signal)
        (tmp_path / os.path.basename(path)).write_bytes(open(path, "rb").read())
    found = sorted(os.path.basename(p) for p in expand_inputs([str(tmp_path)]))
    assert found == ["sig_hdf5.h5", "sig_mat5.mat", "sig_mat73.mat", "sig_tdms.tdms", "sig_uff.uff"]


def test_cli_channel_by_name(multi_tdms):
    import json

    r = CliRunner().invoke(app, ["analyze", multi_tdms, "--channel", "run2/mic", "--json"])
    assert r.exit_code == 0, r.output
    rec = json.loads(r.stdout)["recordings"][0]
    assert rec["channel"] == "run2/mic" and rec["unit"] == "Pa" and rec["settings"]["channel"] == "run2/mic"
    r = CliRunner().invoke(app, ["analyze", multi_tdms, "--channel", "2", "--json"])
    assert json.loads(r.stdout)["recordings"][0]["settings"]["channel"] == 2  # digits become an index
    r = CliRunner().invoke(app, ["analyze", multi_tdms, "--channel", "nope"])
    assert r.exit_code == 2 and "its channels are 'run1/accel', 'run1/force', 'run2/accel', 'run2/mic'" in r.output


def test_parse_channel():
    assert parse_channel(None) is None and parse_channel(" 3 ") == 3 and parse_channel("run1/accel") == "run1/accel"
    assert parse_channel("-1") == "-1"  # not digits: a name (and then unknown), never a negative index


def test_limits_learn_keeps_the_channel_for_check(tmp_path):
    # four invented good parts, each a TDMS file with a force channel first and the response
    # second: without --channel the force channel (first) would be analysed
    import json

    parts = []
    for k in range(4):
        x = ringdown_modes(
            [(612.0 * (1 + 1e-3 * k), 11.5, 1.0), (1587.0 * (1 + 1e-3 * k), 22.0, 0.5)],
            sample_rate=FS,
            duration_s=0.3,
            seed=100 + k,
        )
        inc = {"wf_increment": 1 / FS}
        parts.append(
            write_tdms(
                tmp_path / f"good_{k}.tdms",
                [("p", "force", np.zeros_like(x), inc), ("p", "response", x, {**inc, "unit_string": UNIT})],
            )
        )
    lim = tmp_path / "lim.toml"
    r = CliRunner().invoke(app, ["limits", "learn", *parts[:3], "-o", str(lim), "--channel", "response", "--jobs", "1"])
    assert r.exit_code == 0, r.output
    assert 'channel = "response"' in lim.read_text()
    r = CliRunner().invoke(app, ["check", "--limits", str(lim), parts[3], "--json", "--no-store", "--jobs", "1"])
    # the part passes: its response was analysed (the all-zero force channel would be an error)
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["summary"]["passed"] == 1
    r = CliRunner().invoke(app, ["limits", "learn", *parts[:3], "-o", str(tmp_path / "x.toml"), "--jobs", "1"])
    assert r.exit_code == 2 and "constant" in r.output  # without --channel: the force channel


def test_tdms_daqmx_raw_data_is_scaled(signal, tmp_path):
    # DAQmx raw data (int16 counts plus a linear scale in the properties): TdmsWriter cannot write
    # it, so the file is built with the helpers of npTDMS's own DAQmx tests (nptdms.test), which
    # lay out the segment as NI's DAQmx format does
    util = pytest.importorskip("nptdms.test.util")
    daqmx = pytest.importorskip("nptdms.test.test_daqmx")
    hexv, text = util.hexlify_value, util.string_hexlify

    def string(v):
        return hexv("<I", len(v.encode())) + text(v)

    counts = np.round(signal / np.abs(signal).max() * 30000).astype("<i2")
    slope = 2.5 / 30000  # V per count, invented
    # property type ids: 7 uint32, 10 double, 0x20 string (TDMS file format, data types)
    props = {
        "NI_Number_Of_Scales": (7, hexv("<I", 2)),
        "NI_Scale[1]_Scale_Type": (0x20, string("Linear")),
        "NI_Scale[1]_Linear_Slope": (10, hexv("<d", slope)),
        "NI_Scale[1]_Linear_Y_Intercept": (10, hexv("<d", 0.0)),
        "NI_Scale[1]_Linear_Input_Source": (7, hexv("<I", 0)),
        "wf_increment": (10, hexv("<d", 1 / FS)),
        "unit_string": (0x20, string("V")),
    }
    meta = util.segment_objects_metadata(
        util.root_metadata(),
        util.group_metadata(),
        daqmx.daqmx_channel_metadata("ai0", counts.size, [2], [daqmx.daqmx_scaler_metadata(0, 3, 0)], properties=props),
    )
    f = util.GeneratedFile()
    f.add_segment(daqmx.segment_toc(), meta, counts.tobytes(), binary_data=True)
    path = tmp_path / "daqmx.tdms"
    path.write_bytes(f.get_bytes_io_file().getvalue())
    rec = read_recording(str(path))
    assert rec.channel == "Group/ai0" and rec.unit == "V" and rec.sample_rate == FS
    np.testing.assert_allclose(rec.samples, counts * slope, rtol=1e-15)  # the linear scale, applied
    wav = tmp_path / "daqmx.wav"
    sf.write(str(wav), counts * slope, int(FS), subtype="DOUBLE")
    a, ref = analyze_file(str(path)), analyze_file(str(wav))
    assert len(a.modes) == len(ref.modes) == 2
    for m, r in zip(a.modes, ref.modes):
        np.testing.assert_allclose([m.f_d_hz, m.beta_per_s], [r.f_d_hz, r.beta_per_s], rtol=1e-12)


def test_decoded_size_is_checked_before_reading(tmp_path):
    # a compressed dataset far larger decoded than on disk: refused by its decoded size
    x = np.zeros(200_000)
    x[:1000] = np.sin(np.arange(1000))

    def build(f):
        f.create_dataset("x", data=x, compression="gzip").attrs["fs"] = FS

    p = write_h5(tmp_path / "packed.h5", build)
    size = os.path.getsize(p)
    assert size < 100_000 < x.nbytes
    with pytest.raises(InputError, match=r"'x' in .* decodes to 1.5 MiB, more than the 97.7 KiB allowed"):
        read_recording(p, max_bytes=100_000)
    p = str(tmp_path / "big.mat")
    scipy_io.savemat(p, {"x": x, "fs": FS}, do_compression=True)
    assert os.path.getsize(p) < 100_000
    with pytest.raises(InputError, match=r"holds 1.5 MiB of numbers, more than the 97.7 KiB allowed"):
        read_recording(p, max_bytes=100_000)


_PREFIXES = {
    "tdms": b"TDSm",
    "mat": b"MATLAB 5.0 MAT-file, invented".ljust(124) + b"\x00\x01IM",
    "h5": b"\x89HDF\r\n\x1a\n",
    "uff": b"    -1\n    58\n",
}


@pytest.mark.parametrize("ext", sorted(_PREFIXES))
def test_random_content_after_a_signature_gives_one_line_errors(ext, tmp_path):
    # a property over arbitrary bytes (Hypothesis): whatever follows a format's signature,
    # read_recording raises only ringdown's own one-line errors
    from hypothesis import HealthCheck, given, settings
    from hypothesis import strategies as st

    from ringdown.base.errors import RingdownError

    @settings(
        max_examples=25, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.function_scoped_fixture]
    )
    @given(tail=st.binary(min_size=0, max_size=600))
    def check(tail):
        p = tmp_path / f"x.{ext}"
        p.write_bytes(_PREFIXES[ext] + tail)
        try:
            read_recording(str(p), sample_rate=FS)
        except RingdownError as exc:
            assert str(exc) and "\n" not in str(exc)

    check()


def test_truncated_tdms_is_refused_quietly(folder, signal, capfd):
    # npTDMS logs a warning and reads what is left of a truncated file; ringdown refuses the file
    # in its one line and keeps npTDMS's console output off stderr
    p = _broken("tdms", folder, signal, "truncated")
    capfd.readouterr()
    with pytest.raises(
        InputError,
        match=r"is damaged or truncated \(npTDMS: Last segment of file has less data "
        r"than expected\); export or copy the file again",
    ):
        read_recording(p)
    out, err = capfd.readouterr()
    assert "nptdms" not in err.lower() and out == ""


def test_tdms_rate_from_a_time_channel(tmp_path, signal):
    t = np.arange(signal.size) / FS
    p = write_tdms(tmp_path / "timed.tdms", [("g", "Time", t, {"unit_string": "s"}), ("g", "accel", signal, {})])
    rec = read_recording(p)  # the default skips the time channel
    assert rec.channel == "g/accel" and rec.sample_rate == pytest.approx(FS, rel=1e-9)
    # timestamps: npTDMS's writer keeps whole microseconds, so a rate of 50 kHz (20 us steps)
    fs = 50000.0
    x = ringdown_modes(MODES, sample_rate=fs, duration_s=0.2, seed=5)
    stamps = np.datetime64("2026-01-01T00:00:00", "us") + np.arange(x.size) * np.timedelta64(20, "us")
    p = write_tdms(tmp_path / "stamped.tdms", [("g", "time", stamps, {}), ("g", "accel", x, {})])
    assert read_recording(p).sample_rate == pytest.approx(fs, rel=1e-12)
