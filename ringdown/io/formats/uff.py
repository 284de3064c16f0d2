"""Universal File Format dataset 58 (measured functions at nodal DOF), read with pyuff.

Only dataset 58 (ASCII, and 58b binary) holds measured time data; a file may hold other datasets
too (units, nodes, ...), which are skipped. Each dataset 58 of the file is one channel, named by
its ID line 1 (the function description). Function type 1 (time response) and 0 (general) with a
time or unknown abscissa are read; spectra, FRFs and the rest are refused.

The sample rate is ``1 / abscissa increment`` (record 7, field 5) for even spacing; for uneven
spacing it comes from the stored abscissa values, which must be uniform as for a text time
column. Record 7 prints the increment as E13.5 (six significant digits, Universal Dataset 58
record 7, as pyuff's description of the dataset gives it): when a whole number of hertz lies
within that rounding of ``1 / increment``, it is taken as the rate (so 2.08333e-05 s reads as
48000 Hz, not 48000.08 Hz). The unit is the ordinate axis units label (record 9, field 6).
"""

from __future__ import annotations

import math
import re
from typing import Any

import numpy as np

from ...base.errors import InputError
from ..recording import Recording
from . import _UFF_START
from ._common import check_size, need, pick, rate_from_time, real_samples, reason, recording, resolve_rate

__all__ = ["read"]

# Function types (record 6, field 1) that hold a time record.
_TIME_FUNCTIONS = {0: "general or unknown", 1: "time response"}
_FUNCTION_NAMES = {
    2: "auto spectrum",
    3: "cross spectrum",
    4: "frequency response function",
    5: "transmissibility",
    6: "coherence",
    7: "auto correlation",
    8: "cross correlation",
    9: "power spectral density",
    10: "energy spectral density",
    11: "probability density function",
    12: "spectrum",
    13: "cumulative frequency distribution",
    14: "peaks valley",
    15: "stress/cycles",
    16: "strain/cycles",
    17: "orbit",
    18: "mode indicator function",
    19: "force pattern",
    20: "partial power",
    21: "partial coherence",
    22: "eigenvalue",
    23: "eigenvector",
    24: "shock response spectrum",
    25: "finite impulse response filter",
    26: "multiple coherence",
    27: "order function",
}
# A delimiter line as pyuff finds them: "    -1" alone on its line (blanks may follow).
_DELIMITER = re.compile(rb"(?m)^    -1 *\r?$")
# Abscissa specific data types (record 8, field 1) that can be time: 0 unknown, 17 time.
_TIME_ABSCISSA = (0, 17)


def read(name: str, *, channel: int | str | None = None, sample_rate: float | None = None, limit: int) -> Recording:
    """Read one dataset 58 of a Universal File as a :class:`~ringdown.io.recording.Recording`.

    Parameters
    ----------
    name : str
        The ``.uff``/``.unv`` file.
    channel : int, str or None
        1-based index among the file's datasets 58, or a dataset's ID line 1 (case-insensitive).
        Default: the first dataset 58.
    sample_rate : float or None, Hz
        Must agree with the abscissa increment within 0.1 % when given.
    limit : int, bytes
        Largest decoded size (float64) accepted for the dataset.

    Raises
    ------
    InputError
        pyuff missing, the file damaged, no dataset 58, a dataset that is not a real time record.
    ParameterError
        Unknown or ambiguous dataset, or a sample rate that contradicts the file.
    """
    uff, types = _open_checked(name)
    sets58 = [i for i, t in enumerate(types) if t == 58]
    if not sets58:
        raise InputError(
            f"{name!r} holds UFF datasets {', '.join(str(t) for t in sorted(set(types)))} but no dataset 58; "
            "ringdown reads measured time data from dataset 58 only: export the time records as dataset 58"
        )
    headers = [_read_set(uff, i, name, header_only=True) for i in sets58]
    k, label = _choose_dataset(headers, channel, name)
    head = headers[k]
    _check_time_record(head, label, name, limit)
    data = _read_set(uff, sets58[k], name)
    samples = real_samples(np.asarray(data.get("data", [])), name, label, limit)
    file_rate, source = _file_rate(head, data, samples, label, name)
    rate = resolve_rate(file_rate, source, sample_rate, name, label)
    return recording(samples, rate, label, head.get("ordinate_axis_units_lab"), name, len(sets58))


def _open_checked(name: str) -> tuple[Any, list[int]]:
    """The pyuff reader of ``name`` and its datasets' types; InputError for a damaged, empty or
    truncated file (pyuff would drop an unclosed last dataset silently)."""
    pyuff = need("pyuff", "UFF", name)
    try:
        uff = pyuff.UFF(name)
        types = [int(t) for t in uff.get_set_types()]
    except Exception as exc:  # pyuff raises bare Exception on damage
        raise InputError(f"{name!r} cannot be read as a Universal File ({reason(exc)}); export it again") from exc
    if not types:
        with open(name, "rb") as fh:
            opened = _UFF_START.match(fh.read(4096)) is not None
        if opened:
            raise InputError(
                f"{name!r} starts like a Universal File but holds no complete dataset (each is closed by a "
                "'    -1' line): it is truncated or damaged; export it again"
            )
        raise InputError(
            f"{name!r} holds no Universal File dataset (none opened and closed by '    -1' lines); export it "
            "again as UFF 58"
        )
    with open(name, "rb") as fh:
        delimiters = len(_DELIMITER.findall(fh.read()))
    if delimiters % 2:
        # pyuff pairs the delimiter lines and would drop an unclosed last dataset without a word
        raise InputError(
            f"the last dataset of {name!r} is not closed by a '    -1' line: the file is truncated; export it again"
        )
    return uff, types


def _choose_dataset(headers: list[dict], channel: int | str | None, name: str) -> tuple[int, str]:
    """(position among the datasets 58, label) of the one ``channel`` names: a 1-based number or
    ID line 1 (unique IDs are the labels; repeated or empty ones are numbered)."""
    ids = [str(h.get("id1", "") or "").strip() for h in headers]
    labels = []
    for k, id1 in enumerate(ids, start=1):
        unique = id1 and id1.upper() != "NONE" and ids.count(id1) == 1
        labels.append(id1 if unique else f"dataset 58 #{k}" + (f" ({id1})" if id1 else ""))
    aliases: dict[str, list[int]] = {}
    for k, id1 in enumerate(ids):
        if id1:
            aliases.setdefault(id1.lower(), []).append(k)
    k = pick(channel, labels, name, what="dataset 58", aliases=aliases)
    return k, labels[k]


def _check_time_record(head: dict, label: str, name: str, limit: int) -> None:
    """Refuse (InputError) a dataset that is not a real time response, or too large to decode."""
    func = int(head.get("func_type", 0))
    abscissa = int(head.get("abscissa_spec_data_type", 0))
    if func not in _TIME_FUNCTIONS or abscissa not in _TIME_ABSCISSA:
        what = (
            _FUNCTION_NAMES.get(func, f"function type {func}")
            if func not in _TIME_FUNCTIONS
            else f"{_TIME_FUNCTIONS[func]} over abscissa data type {abscissa}"
        )
        raise InputError(
            f"dataset {label!r} of {name!r} is a {what}, not a time record; give a time response "
            "(function type 1 over a time abscissa)"
        )
    if int(head.get("ord_data_type", 2)) in (5, 6):
        raise InputError(f"dataset {label!r} of {name!r} holds complex values, not a time signal; pick a real one")
    check_size(int(head.get("num_pts", 0)), name, label, limit)


def _file_rate(head: dict, data: dict, samples: np.ndarray, label: str, name: str) -> tuple[float, str]:
    """(sample rate in Hz, where it came from): the abscissa increment of an evenly spaced
    dataset, else the abscissa values (printed to six significant digits)."""
    if int(head.get("abscissa_spacing", 1)) == 1:
        inc = float(head.get("abscissa_inc", 0.0))
        file_rate = _rate_from_increment(inc)
        source = f"abscissa increment {inc:g} s"
    else:
        x = np.asarray(data.get("x", []), dtype=np.float64)
        if x.shape != samples.shape:
            raise InputError(
                f"dataset {label!r} of {name!r} has {x.size} abscissa values for {samples.size} "
                "samples; export it again"
            )
        # record 12 prints the abscissa as E13.5: six significant digits
        printed = 10.0 ** (math.floor(math.log10(max(float(np.max(np.abs(x))), 1e-300))) - 5)
        file_rate = rate_from_time(x, name, label, resolution=printed)
        source = "uneven abscissa values"
    return file_rate, source


def _read_set(uff, i: int, name: str, header_only: bool = False) -> dict:
    try:
        d = uff.read_sets(i, header_only=header_only)
    except Exception as exc:
        raise InputError(
            f"UFF dataset {i + 1} of {name!r} cannot be read ({reason(exc)}); export the file again"
        ) from exc
    if not isinstance(d, dict):
        raise InputError(f"UFF dataset {i + 1} of {name!r} cannot be read; export the file again")
    return d


def _rate_from_increment(inc: float) -> float:
    """``1 / inc`` (Hz), or the whole number of Hz within the E13.5 rounding of ``inc``."""
    if not (math.isfinite(inc) and inc > 0):
        return float("nan") if inc != 0 else float("inf")
    rate = 1.0 / inc
    half = 0.5 * 10.0 ** (math.floor(math.log10(inc)) - 5)  # half a unit in the 6th digit
    whole = round(rate)
    if whole > 0 and 1.0 / (inc + half) <= whole <= 1.0 / (inc - half):
        return float(whole)
    return rate
