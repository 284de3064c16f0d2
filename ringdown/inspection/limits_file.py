"""The limits file: TOML written by :func:`write_limits` (a small writer for this fixed schema)
and read and checked by :func:`read_limits` / :func:`parse_limits` (schema in its docstring).

What the limits mean is in :mod:`ringdown.inspection.limits`.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import math
import sys
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from .._version import __version__
from ..base.errors import LimitsError
from .limits import (
    _ANALYSIS_KEYS,
    DEFAULT_MAX_UNIFORM_SHIFT,
    DEFAULT_TOLERANCE,
    DEFAULT_UNIFORM_SHIFT_TOLERANCE,
    FORMAT_VERSION,
    READER_KEYS,
    Limits,
    MahalanobisLimits,
    ModeLimits,
)

if sys.version_info >= (3, 11):
    import tomllib as _toml
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as _toml

__all__ = ["limits_to_toml", "parse_limits", "read_limits", "write_limits"]


# --------------------------------------------------------------------------------------------
# TOML writing (a small writer for this fixed schema) and reading


def _toml_value_ok(v: Any) -> bool:
    if v is None:
        return False
    if isinstance(v, (bool, int, float, str)):
        return not (isinstance(v, float) and not math.isfinite(v))
    if isinstance(v, (list, tuple)):
        return all(_toml_value_ok(x) for x in v)
    return False


def _toml_str(s: str) -> str:
    out = ['"']
    for ch in s:
        if ch == '"':
            out.append('\\"')
        elif ch == "\\":
            out.append("\\\\")
        elif ch == "\n":
            out.append("\\n")
        elif ch == "\t":
            out.append("\\t")
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04x}")
        else:
            out.append(ch)
    out.append('"')
    return "".join(out)


def _toml_val(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if not math.isfinite(v):
            raise LimitsError(f"cannot write a non-finite number ({v}) to a limits file")
        return repr(v)
    if isinstance(v, str):
        return _toml_str(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_val(x) for x in v) + "]"
    raise LimitsError(f"cannot write a value of type {type(v).__name__} to a limits file")


def _fmt(x: float) -> float:
    """Round to 10 significant digits so a hand-edited file stays readable."""
    return float(f"{x:.10g}")


def limits_to_toml(limits: Limits) -> str:
    """The TOML text of a limits file (hand-editable; comments explain each key)."""
    lines = _toml_check(limits) + _toml_options(limits) + _toml_modes(limits) + _toml_mahalanobis(limits)
    return "\n".join(lines) + "\n"


def _toml_check(limits: Limits) -> list[str]:
    """The file's head comments and versions, and its [check] and [settings] tables."""
    L: list[str] = []
    w = L.append
    w("# ringdown acceptance limits for one part type.")
    w("# Windows may be widened or narrowed by hand; keep [lo, hi] pairs with lo < hi.")
    w("# f_hz: damped frequency, Hz; zeta: damping ratio; ratio: f_d / f_d of mode 1.")
    w("# Caution: a pass means 'consistent with the good parts', not 'safe'; follow your standard.")
    w(f"format_version = {FORMAT_VERSION}")
    w(f"tool_version = {_toml_val(limits.tool_version or __version__)}")
    if limits.created_utc:
        w(f"created_utc = {_toml_val(limits.created_utc)}")
    w("")
    w("[check]")
    w("# relative distance within which a measured mode is matched to a reference mode")
    w(f"tolerance = {_toml_val(float(limits.tolerance))}")
    w("# absolute frequency windows are advisory when all ratios pass and every mode moved by the")
    w("# same fraction (spread <= uniform_shift_tolerance) of at most max_uniform_shift (temperature)")
    w(f"max_uniform_shift = {_toml_val(float(limits.max_uniform_shift))}")
    w(f"uniform_shift_tolerance = {_toml_val(float(limits.uniform_shift_tolerance))}")
    if limits.coverage is not None:
        w("")
        w("[settings]")
        w("# two-sided normal tolerance intervals, ISO 16269-6, exact k (Odeh & Owen)")
        w(f"coverage = {_toml_val(float(limits.coverage))}")
        if limits.confidence is not None:  # a hand-written file may give coverage alone
            w(f"confidence = {_toml_val(float(limits.confidence))}")
        if limits.k_factor is not None:
            w(f"k_factor = {_toml_val(_fmt(float(limits.k_factor)))}")
        w(f"n_parts = {int(limits.n_parts or 0)}")
        w('damping_model = "log(zeta) is normal"')
    if limits.notes:
        w(f"notes = {_toml_val(list(limits.notes))}")
    return L


def _toml_options(limits: Limits) -> list[str]:
    """The [analysis] and [reader] tables: how the good parts were analysed and read."""
    L: list[str] = []
    w = L.append
    if limits.analysis:
        w("")
        w("[analysis]")
        w("# options the good parts were analysed with; check analyses parts the same way")
        for key, v in limits.analysis.items():
            if _toml_value_ok(v):
                w(f"{_key(key)} = {_toml_val(v)}")
    w("")
    w("[reader]")
    w("# how the good parts were read (channel of a sound file, column and sample rate of a text file);")
    w("# check reads parts the same way unless --channel/--column/--sample-rate say otherwise")
    for key in READER_KEYS:
        v = limits.reader.get(key)
        if v is not None and _toml_value_ok(v):
            w(f"{key} = {_toml_val(v)}")
    return L


def _toml_modes(limits: Limits) -> list[str]:
    """The [[parts]] (name and SHA-256 of each good part) and the [[modes]] windows."""
    L: list[str] = []
    w = L.append
    for name, sha in limits.parts:
        w("")
        w("[[parts]]")
        w(f"name = {_toml_val(name)}")
        w(f"sha256 = {_toml_val(sha)}")
    for m in limits.modes:
        w("")
        w("[[modes]]")
        w(f"index = {m.index}")
        w(f"f_ref_hz = {_toml_val(_fmt(m.f_ref_hz))}")
        if m.f_hz is not None:
            w(f"f_hz = {_toml_val([_fmt(v) for v in m.f_hz])}")
        if m.zeta is not None:
            w(f"zeta = {_toml_val([_fmt(v) for v in m.zeta])}")
        if m.ratio is not None:
            w(f"ratio = {_toml_val([_fmt(v) for v in m.ratio])}")
        if m.stats:
            w(f"stats = {{ {', '.join(f'{k} = {_toml_val(_fmt(v))}' for k, v in m.stats.items())} }}")
    return L


def _toml_mahalanobis(limits: Limits) -> list[str]:
    """The [mahalanobis] table, when the limits have one."""
    if limits.mahalanobis is None:
        return []
    L: list[str] = []
    w = L.append
    mh = limits.mahalanobis
    w("")
    w("[mahalanobis]")
    w("# distance of the drift-free features from the good parts; threshold from")
    w("# T^2 ~ p(n+1)(n-1)/(n(n-p)) F(p, n-p) (Tracy, Young & Mason 1992). Delete this table to")
    w("# turn the multivariate check off.")
    w(f"features = {_toml_val(list(mh.features))}")
    w(f"mean = {_toml_val([float(v) for v in mh.mean])}")
    w("covariance = [")
    for row in mh.covariance:
        w(f"    {_toml_val([float(v) for v in row])},")
    w("]")
    w(f"threshold = {_toml_val(_fmt(mh.threshold))}")
    w(f"n_parts = {int(mh.n_parts)}")
    w(f"probability = {_toml_val(float(mh.probability))}")
    return L


def _key(k: str) -> str:
    if k and all(c.isalnum() or c in "_-" for c in k):
        return k
    return _toml_str(k)


def write_limits(limits: Limits, path: str | Path) -> str:
    """Write a limits file; return the SHA-256 of the bytes written.

    Raises
    ------
    LimitsError
        When the file cannot be written.
    """
    from ..base.errors import RingdownError
    from ..io.outputs import atomic_write

    text = limits_to_toml(limits)
    try:
        with atomic_write(path, "wb", what="limits file") as fh:  # never a 0-byte or half file
            fh.write(text.encode("utf-8"))
    except RingdownError as exc:
        raise LimitsError(str(exc)) from None
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def read_limits(path: str | Path) -> Limits:
    """Read a limits file (learned or hand-written).

    Raises
    ------
    LimitsError
        When the file is missing, unreadable or malformed; the message names the file and key.
    """
    p = Path(path)
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise LimitsError(
            f"limits file '{p}' not found; learn one with 'ringdown limits learn' or check the path"
        ) from None
    except OSError as exc:
        raise LimitsError(f"cannot read limits file '{p}': {exc.strerror or exc}") from exc
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise LimitsError(f"limits file '{p}' is not UTF-8 text; save it as UTF-8") from None
    lim = parse_limits(text, source=str(p))  # a UTF-8 byte-order mark is accepted there
    return replace(lim, sha256=hashlib.sha256(data).hexdigest())


def _window(src: str, where: str, key: str, v: Any, *, positive: bool = False) -> tuple[float, float] | None:
    if v is None:
        return None
    if not (
        isinstance(v, list) and len(v) == 2 and all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v)
    ):
        raise LimitsError(
            f"limits file '{src}': {where}.{key} must be a pair of numbers [lo, hi], got {v!r}; e.g. {key} = [1720.0, 1765.0]"
        )
    lo, hi = float(v[0]), float(v[1])
    if not (math.isfinite(lo) and math.isfinite(hi)) or not lo < hi:
        raise LimitsError(f"limits file '{src}': {where}.{key} = {v!r} needs finite lo < hi; swap or fix the numbers")
    if positive and lo < 0:
        raise LimitsError(f"limits file '{src}': {where}.{key} = {v!r} must not be negative; fix the lower end")
    return lo, hi


def _num(src: str, where: str, key: str, v: Any, default: float | None, *, lo: float, hi: float) -> float | None:
    if v is None:
        return default
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(float(v)) or not lo < float(v) < hi:
        raise LimitsError(f"limits file '{src}': {where}{key} must be a number between {lo} and {hi}, got {v!r}")
    return float(v)


def parse_limits(text: str, *, source: str = "<string>") -> Limits:
    """Parse the TOML text of a limits file.

    Schema (every key but ``[[modes]]`` is optional; ``f_hz`` or ``f_ref_hz`` is required per mode)::

        format_version = 1
        [check]
        tolerance = 0.1                 # mode matching, relative
        max_uniform_shift = 0.01        # uniform-shift rule, relative
        uniform_shift_tolerance = 0.002
        [[modes]]
        f_hz = [1720.0, 1765.0]         # damped frequency window, Hz
        zeta = [0.0002, 0.0009]         # damping ratio window (optional)
        ratio = [2.752, 2.761]          # f_d / f_d of mode 1 (optional, modes 2..)
        [mahalanobis]                   # optional: features, mean, covariance, threshold, n_parts
        [reader]                        # optional: channel = 2, column = "accel", sample_rate = 51200.0

    Raises
    ------
    LimitsError
        Naming the file, the key and the fix.
    """
    src = source
    doc = _load_toml(text, src)
    tolerance, mus, ust = _parse_check(src, doc)
    modes = _parse_modes(src, doc)
    mh = doc.get("mahalanobis")
    maha = None if mh is None else _parse_maha(src, mh, len(modes))
    st = doc.get("settings", {})
    if not isinstance(st, dict):
        raise LimitsError(f"limits file '{src}': [settings] must be a table")
    coverage = _num(src, "settings.", "coverage", st.get("coverage"), None, lo=0.0, hi=1.0)
    confidence = _num(src, "settings.", "confidence", st.get("confidence"), None, lo=0.0, hi=1.0)
    k_factor = _num(src, "settings.", "k_factor", st.get("k_factor"), None, lo=0.0, hi=1e6)
    n_parts = st.get("n_parts")
    if n_parts is not None and (isinstance(n_parts, bool) or not isinstance(n_parts, int) or n_parts < 0):
        raise LimitsError(f"limits file '{src}': settings.n_parts must be a whole number >= 0, got {n_parts!r}")
    parts = _parse_parts(src, doc)
    analysis = doc.get("analysis", {})
    if not isinstance(analysis, dict):
        raise LimitsError(f"limits file '{src}': [analysis] must be a table")
    reader = _parse_reader(src, doc)
    _check_analysis(src, analysis)
    notes = st.get("notes", doc.get("notes", []))
    if not isinstance(notes, list) or not all(isinstance(x, str) for x in notes):
        raise LimitsError(f"limits file '{src}': notes must be a list of strings")
    for key in ("tool_version", "created_utc"):
        if key in doc and not isinstance(doc[key], (str, _dt.datetime, _dt.date)):
            raise LimitsError(f"limits file '{src}': {key} must be a string, got {doc[key]!r}")
    return Limits(
        modes=tuple(modes),
        tolerance=tolerance,
        max_uniform_shift=mus,
        uniform_shift_tolerance=ust,
        mahalanobis=maha,
        coverage=coverage,
        confidence=confidence,
        k_factor=k_factor,
        n_parts=n_parts,
        parts=tuple(parts),
        analysis=dict(analysis),
        reader=dict(reader),
        tool_version=None if doc.get("tool_version") is None else str(doc["tool_version"]),
        created_utc=str(doc["created_utc"]) if "created_utc" in doc else None,
        notes=tuple(notes),
        source=source,
        sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(),
    )


def _load_toml(text: str, src: str) -> dict[str, Any]:
    """The TOML document of a limits file, its top-level keys and format version checked."""
    body = text[1:] if text.startswith("\ufeff") else text  # a byte-order mark some editors add
    try:
        doc = _toml.loads(body)
    except _toml.TOMLDecodeError as exc:
        raise LimitsError(f"limits file '{src}' is not valid TOML ({exc}); fix the line named") from None
    except RecursionError:
        raise LimitsError(
            f"limits file '{src}' nests arrays or tables too deeply to be a limits file; fix or relearn it"
        ) from None
    unknown = set(doc) - _TOP_KEYS
    if unknown:
        raise LimitsError(
            f"limits file '{src}' has unknown key(s) {sorted(unknown)}; allowed: "
            f"{', '.join(sorted(_TOP_KEYS))} (a misspelt key would be ignored silently)"
        )
    fv = doc.get("format_version", FORMAT_VERSION)
    if not isinstance(fv, int) or isinstance(fv, bool) or fv < 1:
        raise LimitsError(f"limits file '{src}': format_version must be a positive integer, got {fv!r}")
    if fv > FORMAT_VERSION:
        raise LimitsError(
            f"limits file '{src}' has format_version {fv}, newer than this ringdown reads "
            f"({FORMAT_VERSION}); upgrade ringdown"
        )
    return doc


def _num_or(src: str, where: str, key: str, v: Any, default: float, *, lo: float, hi: float) -> float:
    """:func:`_num` for a key with a default (so never None)."""
    x = _num(src, where, key, v, default, lo=lo, hi=hi)
    return default if x is None else x


def _parse_check(src: str, doc: dict[str, Any]) -> tuple[float, float, float]:
    """``[check]``: (tolerance, max_uniform_shift, uniform_shift_tolerance), defaults filled in."""
    chk = doc.get("check", {})
    if not isinstance(chk, dict):
        raise LimitsError(f"limits file '{src}': [check] must be a table")
    bad = set(chk) - {"tolerance", "max_uniform_shift", "uniform_shift_tolerance"}
    if bad:
        raise LimitsError(
            f"limits file '{src}': [check] has unknown key(s) {sorted(bad)}; "
            "allowed: tolerance, max_uniform_shift, uniform_shift_tolerance"
        )
    tolerance = _num_or(src, "check.", "tolerance", chk.get("tolerance"), DEFAULT_TOLERANCE, lo=0.0, hi=0.5)
    mus = _num_or(
        src, "check.", "max_uniform_shift", chk.get("max_uniform_shift"), DEFAULT_MAX_UNIFORM_SHIFT, lo=-1e-12, hi=0.5
    )
    ust = _num_or(
        src,
        "check.",
        "uniform_shift_tolerance",
        chk.get("uniform_shift_tolerance"),
        DEFAULT_UNIFORM_SHIFT_TOLERANCE,
        lo=-1e-12,
        hi=0.5,
    )
    return tolerance, mus, ust


def _parse_modes(src: str, doc: dict[str, Any]) -> list[ModeLimits]:
    """``[[modes]]``: one entry per reference mode, in ascending frequency."""
    raw_modes = doc.get("modes")
    if not isinstance(raw_modes, list) or not raw_modes:
        raise LimitsError(
            f"limits file '{src}': no [[modes]] entries; add at least one, e.g. [[modes]] f_hz = [1720.0, 1765.0]"
        )
    modes = [_parse_mode(src, i, m) for i, m in enumerate(raw_modes)]
    refs = [m.f_ref_hz for m in modes]
    if any(b <= a for a, b in zip(refs, refs[1:])):
        raise LimitsError(
            f"limits file '{src}': modes must be listed in ascending frequency; reorder the [[modes]] entries"
        )
    return modes


def _parse_mode(src: str, i: int, m: Any) -> ModeLimits:
    """Entry ``i`` (0-based) of ``[[modes]]``."""
    where = f"modes[{i + 1}]"
    if not isinstance(m, dict):
        raise LimitsError(f"limits file '{src}': {where} must be a table ([[modes]])")
    unknown = set(m) - {"index", "f_ref_hz", "f_hz", "zeta", "ratio", "stats"}
    if unknown:
        raise LimitsError(
            f"limits file '{src}': {where} has unknown key(s) {sorted(unknown)}; "
            "allowed: index, f_ref_hz, f_hz, zeta, ratio, stats"
        )
    fwin = _window(src, where, "f_hz", m.get("f_hz"), positive=True)
    zwin = _window(src, where, "zeta", m.get("zeta"), positive=True)
    rwin = _window(src, where, "ratio", m.get("ratio"), positive=True)
    fref = m.get("f_ref_hz")
    if fref is None:
        if fwin is None:
            raise LimitsError(
                f"limits file '{src}': {where} needs f_hz = [lo, hi] (or f_ref_hz); add the frequency window"
            )
        fref = 0.5 * (fwin[0] + fwin[1])
    f_ref_hz = _num_or(src, where + ".", "f_ref_hz", fref, math.nan, lo=0.0, hi=1e12)  # fref is set: no default
    if rwin is not None and i == 0:
        raise LimitsError(
            f"limits file '{src}': {where}.ratio given for the first mode; ratios are to mode 1, remove it"
        )
    stats_ = m.get("stats", {})
    if not isinstance(stats_, dict):
        raise LimitsError(f"limits file '{src}': {where}.stats must be a table")
    idx = m.get("index", i + 1)
    if idx != i + 1:
        raise LimitsError(f"limits file '{src}': {where}.index is {idx!r}, expected {i + 1}; list modes in order")
    return ModeLimits(
        index=i + 1,
        f_ref_hz=f_ref_hz,
        f_hz=fwin,
        zeta=zwin,
        ratio=rwin,
        stats={k: float(v) for k, v in stats_.items() if _is_number(v) and math.isfinite(float(v))},
    )


def _parse_parts(src: str, doc: dict[str, Any]) -> list[tuple[str, str]]:
    """``[[parts]]``: (name, sha256) of each good part the limits were learned from."""
    parts_ = doc.get("parts", []) or []
    if not isinstance(parts_, list):
        raise LimitsError(f"limits file '{src}': parts must be [[parts]] tables with name and sha256")
    parts = []
    for i, pt in enumerate(parts_):
        if (
            not isinstance(pt, dict)
            or not isinstance(pt.get("name", ""), str)
            or not isinstance(pt.get("sha256", ""), str)
        ):
            raise LimitsError(f"limits file '{src}': parts[{i + 1}] must be a table with name and sha256")
        parts.append((str(pt.get("name", "")), str(pt.get("sha256", ""))))
    return parts


def _parse_reader(src: str, doc: dict[str, Any]) -> dict[str, Any]:
    """``[reader]``: the reader options the good parts were read with."""
    reader = doc.get("reader", {})
    if not isinstance(reader, dict):
        raise LimitsError(f"limits file '{src}': [reader] must be a table")
    unknown = sorted(set(reader) - set(READER_KEYS))
    if unknown:
        raise LimitsError(
            f"limits file '{src}': [reader] has unknown key(s) {unknown}; allowed: {', '.join(READER_KEYS)}"
        )
    rate = reader.get("sample_rate")
    if rate is not None:
        _num(src, "reader.", "sample_rate", rate, None, lo=0.0, hi=1e12)
    for key in ("channel", "column"):
        v = reader.get(key)
        if v is not None and (isinstance(v, bool) or not isinstance(v, (int, str))):
            raise LimitsError(f"limits file '{src}': reader.{key} must be a number or a name, got {v!r}")
    return reader


#: Top-level keys of a limits file (anything else is a typo that would be ignored silently).
_TOP_KEYS = frozenset(
    {
        "format_version",
        "tool_version",
        "created_utc",
        "check",
        "modes",
        "mahalanobis",
        "settings",
        "parts",
        "analysis",
        "reader",
        "notes",
    }
)


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _is_finite_number(v: Any) -> bool:
    return _is_number(v) and math.isfinite(float(v))


def _check_analysis(src: str, analysis: dict) -> None:
    """The [analysis] table: every key known and every value of the right kind (check reuses them)."""
    where = f"limits file '{src}': [analysis]"
    known = set(_ANALYSIS_KEYS) | {"primary_method"}
    bad = set(analysis) - known
    if bad:
        raise LimitsError(f"{where} has unknown key(s) {sorted(bad)}; allowed: {', '.join(sorted(known))}")

    def fail(key: str, want: str) -> None:
        raise LimitsError(f"{where} {key} = {analysis[key]!r} must be {want}; fix it or relearn the limits")

    for key in ("method", "primary_method"):
        if key in analysis:
            from ..analysis.estimators import method_names

            names = set(method_names()) | {"auto"}
            if not isinstance(analysis[key], str) or analysis[key] not in names:
                fail(key, f"one of {', '.join(sorted(names))}")
    for key in ("min_snr_db", "min_hit_snr_db"):
        if key in analysis and not (_is_finite_number(analysis[key]) and analysis[key] >= 0):
            fail(key, "a finite number of dB >= 0")
    if "max_modes" in analysis and not (
        isinstance(analysis["max_modes"], int)
        and not isinstance(analysis["max_modes"], bool)
        and analysis["max_modes"] >= 1
    ):
        fail("max_modes", "a whole number >= 1")
    if "keep_double_hits" in analysis and not isinstance(analysis["keep_double_hits"], bool):
        fail("keep_double_hits", "true or false")
    if "sample_rate" in analysis and not (_is_finite_number(analysis["sample_rate"]) and analysis["sample_rate"] > 0):
        fail("sample_rate", "a finite number of Hz > 0")
    for key in ("channel", "column"):
        if key in analysis and not (
            isinstance(analysis[key], str) or (isinstance(analysis[key], int) and not isinstance(analysis[key], bool))
        ):
            fail(key, "a channel number or a column name")
    if "bands" in analysis:
        b = analysis["bands"]
        ok = isinstance(b, list) and all(
            isinstance(x, list) and len(x) == 2 and all(_is_finite_number(v) for v in x) and 0 <= x[0] < x[1] for x in b
        )
        if not ok:
            fail("bands", "a list of [low, high] pairs in Hz with 0 <= low < high")


def _parse_maha(src: str, mh: Any, n_modes: int) -> MahalanobisLimits:
    where = "mahalanobis"
    if not isinstance(mh, dict):
        raise LimitsError(f"limits file '{src}': [mahalanobis] must be a table; delete it to turn the check off")
    for key in ("features", "mean", "covariance", "threshold"):
        if key not in mh:
            raise LimitsError(
                f"limits file '{src}': {where}.{key} is missing; relearn the limits or delete [mahalanobis]"
            )
    feats = mh["features"]
    valid = {f"ratio_{j}" for j in range(2, n_modes + 1)} | {f"log_zeta_{j}" for j in range(1, n_modes + 1)}
    if not isinstance(feats, list) or not feats or any(f not in valid for f in feats):
        raise LimitsError(
            f"limits file '{src}': {where}.features must name ratio_J / log_zeta_J of the listed modes, "
            f"got {feats!r}; relearn the limits or delete [mahalanobis]"
        )
    bad = set(mh) - {"features", "mean", "covariance", "threshold", "n_parts", "probability"}
    if bad:
        raise LimitsError(
            f"limits file '{src}': [mahalanobis] has unknown key(s) {sorted(bad)}; allowed: features, "
            "mean, covariance, threshold, n_parts, probability"
        )
    if len(set(feats)) != len(feats):
        raise LimitsError(f"limits file '{src}': {where}.features names a feature twice; relearn the limits")
    p = len(feats)
    mean = mh["mean"]
    cov = mh["covariance"]
    if not (isinstance(mean, list) and len(mean) == p and all(_is_finite_number(v) for v in mean)):
        raise LimitsError(
            f"limits file '{src}': {where}.mean must hold {p} finite numbers, got {mean!r}; "
            "relearn the limits or delete [mahalanobis]"
        )
    if not (
        isinstance(cov, list)
        and len(cov) == p
        and all(isinstance(r, list) and len(r) == p and all(_is_finite_number(v) for v in r) for r in cov)
    ):
        raise LimitsError(
            f"limits file '{src}': {where}.covariance must be a {p}x{p} array of finite numbers; "
            "relearn the limits or delete [mahalanobis]"
        )
    c = np.asarray(cov, dtype=float)
    if not np.all(np.isfinite(c)) or not np.allclose(c, c.T, rtol=1e-6, atol=0) or np.any(np.linalg.eigvalsh(c) <= 0):
        raise LimitsError(
            f"limits file '{src}': {where}.covariance must be symmetric positive definite; relearn the limits"
        )
    thr = _num_or(src, where + ".", "threshold", mh["threshold"], math.nan, lo=0.0, hi=1e6)  # required: no default
    n = mh.get("n_parts", 0)
    if isinstance(n, bool) or not isinstance(n, int) or n < 0:
        raise LimitsError(f"limits file '{src}': {where}.n_parts must be a whole number >= 0, got {n!r}")
    prob = _num_or(src, where + ".", "probability", mh.get("probability"), 0.99, lo=0.0, hi=1.0)
    return MahalanobisLimits(
        features=tuple(feats),
        mean=tuple(float(v) for v in mean),
        covariance=tuple(tuple(float(v) for v in r) for r in cov),
        threshold=float(thr),
        n_parts=int(n),
        probability=float(prob),
    )
