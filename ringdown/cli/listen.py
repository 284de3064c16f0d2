"""``ringdown listen``: the live test station (see :mod:`ringdown.inspection.station`)."""

from __future__ import annotations

from collections import deque
from pathlib import Path
from typing import Annotated, Any, Optional

import typer

from ._common import (
    EXIT_ERROR,
    EXIT_OK,
    error_line,
    guarded,
    note_line,
    on_terminal,
    print_json_line,
    resolve_db,
    usage_guarded,
)
from ._options import Db, Debug, Jsonl, Operator, Station

#: Recent parts shown under the last verdict in the terminal view.
RECENT_ROWS = 8

#: Block letters (5 rows) for the verdict, readable from a few metres at the station.
_GLYPHS = {
    "P": ["####", "#  #", "####", "#   ", "#   "],
    "A": [" ## ", "#  #", "####", "#  #", "#  #"],
    "S": [" ###", "#   ", " ## ", "   #", "### "],
    "F": ["####", "#   ", "### ", "#   ", "#   "],
    "I": ["###", " # ", " # ", " # ", "###"],
    "L": ["#   ", "#   ", "#   ", "#   ", "####"],
    "E": ["####", "#   ", "### ", "#   ", "####"],
    "R": ["### ", "#  #", "### ", "# # ", "#  #"],
    "O": [" ## ", "#  #", "#  #", "#  #", " ## "],
}


def big_word(word: str) -> str:
    """``word`` (PASS, FAIL, ERROR) in 5-row block letters; other characters are left out."""
    rows = ["  ".join(_GLYPHS[c][r] for c in word.upper() if c in _GLYPHS) for r in range(5)]
    return "\n".join(r.replace("#", "\u2588") for r in rows)


ListDevices = Annotated[bool, typer.Option("--list-devices", help="List the input devices and exit.")]
Device = Annotated[
    Optional[str],
    typer.Option(
        "--device", help="Input device: PortAudio index or part of its name (default: the system's default input)."
    ),
]
InputChannel = Annotated[int, typer.Option("--channel", help="Input channel analysed, 1-based.")]
CaptureRate = Annotated[
    Optional[float], typer.Option("--sample-rate", help="Capture rate, Hz (default: the device's own).")
]
Replay = Annotated[
    Optional[Path],
    typer.Option("--replay", help="Feed this recording through the station instead of a device (a rehearsal)."),
]
Speed = Annotated[
    float, typer.Option("--speed", help="With --replay: this many times real time (0: as fast as it can).")
]
JudgeLimits = Annotated[Optional[Path], typer.Option("--limits", help="Limits file: judge each part PASS/FAIL.")]
SaveDir = Annotated[
    Optional[Path], typer.Option("--save-dir", help="Write each tap as a WAV here, named by UTC time and part id.")
]
StoreTaps = Annotated[bool, typer.Option("--store", help="Keep each result in the results history (SQLite).")]
PartIdPattern = Annotated[
    str, typer.Option("--part-id", help="Part id pattern with the tap counter {n} (e.g. 'B7-{n:04d}').")
]
First = Annotated[int, typer.Option("--first", help="Counter of the first tap.")]
AskPartId = Annotated[
    bool, typer.Option("--ask-part-id", help="Ask for each part id at the prompt (Enter takes the pattern's).")
]
MaxTaps = Annotated[Optional[int], typer.Option("--max-taps", help="Stop after this many taps.")]
Duration = Annotated[Optional[float], typer.Option("--duration", help="Stop after this many seconds of input.")]
TapSnrDb = Annotated[
    Optional[float],
    typer.Option(
        "--min-hit-snr-db", help="A tap must rise this far above the noise floor, dB (default 20, or the limits')."
    ),
]


def register(app: typer.Typer) -> None:
    """Add the ``listen`` command to ``app``."""
    app.command("listen")(listen_cmd)


def listen_cmd(
    list_devices: ListDevices = False,
    device: Device = None,
    channel: InputChannel = 1,
    sample_rate: CaptureRate = None,
    replay: Replay = None,
    speed: Speed = 1.0,
    limits: JudgeLimits = None,
    save_dir: SaveDir = None,
    store: StoreTaps = False,
    db: Db = None,
    station: Station = None,
    operator: Operator = None,
    part_id: PartIdPattern = "part-{n:04d}",
    first: First = 1,
    ask_part_id: AskPartId = False,
    jsonl: Jsonl = False,
    max_taps: MaxTaps = None,
    duration: Duration = None,
    min_hit_snr_db: TapSnrDb = None,
    debug: Debug = False,
) -> None:
    """Listen for taps (a sound card, or --replay FILE): per tap the modes, or the verdict with --limits."""
    if list_devices:
        from ..io.device import list_devices as _list

        typer.echo(guarded(_list, debug=debug))
        raise typer.Exit(EXIT_OK)

    lim, ids, opts = usage_guarded(
        lambda: _parse(speed, replay, max_taps, limits, part_id, first, ask_part_id, min_hit_snr_db), debug=debug
    )
    source = guarded(lambda: _source(replay, speed, device, channel, sample_rate), debug=debug)
    history = guarded(lambda: _open_store(db), debug=debug) if store else None
    station_options = dict(limits=lim, save_dir=save_dir, store=history, station=station, operator=operator)
    st = guarded(lambda: _station(source, replay, opts, ids, station_options), debug=debug)
    if replay is None:
        st.warm_up()  # before the stream opens: the first tap's analysis is then not late
    what = f"replay of {replay}" if replay is not None else f"input {getattr(source, 'device_name', device)!r}"
    view = _View(what, lim is not None) if on_terminal(jsonl) and not ask_part_id else None
    stop_at = None if duration is None else int(round(duration * source.sample_rate))
    interrupted = False
    try:
        _listen(st, source, view, what, stop_at, max_taps, jsonl)
    except KeyboardInterrupt:
        interrupted = True
    except Exception as exc:  # the input failed: the taps so far are kept and summarised
        from ..base.batch import as_ringdown_error

        if debug:
            raise
        error_line(str(as_ringdown_error(exc)))
        _summary(st, source, interrupted, to_err=jsonl)
        raise typer.Exit(EXIT_ERROR) from None
    finally:
        stop = getattr(source, "stop_capture", None)
        if stop:
            stop()
        if history is not None:
            history.close()
    _summary(st, source, interrupted, to_err=jsonl)
    raise typer.Exit(EXIT_OK)


def _parse(speed, replay, max_taps, limits, part_id, first, ask_part_id, min_hit_snr_db):
    """The limits (or None), the part ids and the analysis options; a ParameterError for a bad option."""
    from ..base.errors import ParameterError
    from ..inspection.limits_file import read_limits
    from ..inspection.station import PartIds

    if speed < 0:
        raise ParameterError(f"--speed must be >= 0 (0: as fast as possible); got {speed:g}")
    if replay is None and speed != 1.0:
        raise ParameterError("--speed applies to --replay only")
    if max_taps is not None and max_taps < 1:
        raise ParameterError(f"--max-taps must be >= 1; got {max_taps}")
    lim = read_limits(limits) if limits is not None else None
    ids = PartIds(part_id, start=first, prompt=_ask if ask_part_id else None)
    opts = {} if min_hit_snr_db is None else {"min_hit_snr_db": min_hit_snr_db}
    return lim, ids, opts


def _open_store(db):
    """The results history (``--db``, else ``$RINGDOWN_DB``, else ringdown.sqlite here)."""
    from ..inspection.store import ResultStore

    return ResultStore(resolve_db(db))


def _station(source, replay, options: dict, part_ids, kwargs: dict):
    """The test station over ``source`` (``kwargs``: limits, save_dir, store, station, operator)."""
    from ..inspection.station import Station as TestStation

    return TestStation(
        source.sample_rate,
        options=options,
        part_ids=part_ids,
        subtype=_subtype(replay),
        full_scale=getattr(source, "full_scale", 1.0),
        **kwargs,
    )


def _listen(st, source, view, what: str, stop_at, max_taps, jsonl: bool) -> None:
    """Run the station over the source's blocks; each tap shown as it is judged (a JSON line, the
    terminal view, or a plain line)."""
    with view.live() if view else _nothing():
        ready = None if view else (lambda: note_line(f"listening: {what} at {source.sample_rate:g} Hz; Ctrl-C ends"))
        for tap in st.run(_until(source, stop_at, ready)):
            if jsonl:
                print_json_line(tap.to_dict())
            elif view:
                view.add(tap, getattr(source, "dropped_blocks", 0))
            else:
                typer.echo(_line(tap))
            if max_taps is not None and len(st.taps) >= max_taps:
                break


def _ask(question: str) -> str:
    try:
        return input(question)
    except EOFError:
        return ""


class _nothing:
    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False


def _source(replay, speed, device, channel, sample_rate):
    """The block source: a paced replay of a file, or the sound card."""
    if replay is not None:
        import math

        from ..io.blocks import Paced, SoundFileBlocks

        src = SoundFileBlocks(replay, channel=channel, sample_rate=sample_rate, block_samples=1024)
        return Paced(src, math.inf if speed == 0 else speed)
    from ..io.device import DeviceBlocks

    dev = int(device) if device is not None and device.isdigit() else device
    return DeviceBlocks(dev, channel=channel, sample_rate=sample_rate)


def _subtype(replay) -> str:
    """WAV subtype of saved taps: the replayed file's own (its samples kept exactly), else PCM_24."""
    if replay is None:
        return "PCM_24"
    import soundfile as sf

    sub = str(sf.info(str(replay)).subtype)
    return sub if sf.check_format("WAV", sub) else "FLOAT"


def _until(source, stop_at, on_first=None):
    """The source's blocks up to ``stop_at`` samples; ``on_first()`` once the first block is in."""
    for blk in source:
        if on_first is not None:
            on_first()
            on_first = None
        yield blk
        if stop_at is not None and blk.start + blk.samples.shape[0] >= stop_at:
            return


def _modes_text(a, n: int = 3) -> str:
    from ..base.numfmt import fmt_pm as fmt_u

    if a.error is not None:
        return f"not measured: {a.error.message}"
    parts = [f"f{m.index} {fmt_u(m.f_d_hz, m.f_d_hz_u)} Hz  Q {fmt_u(m.q, m.q_u)}" for m in a.modes[:n]]
    more = f"  (+{len(a.modes) - n} more)" if len(a.modes) > n else ""
    return "; ".join(parts) + more


def _line(tap) -> str:
    """One plain line per tap (a pipe, or no terminal view)."""
    head = f"tap {tap.number}  {tap.part_id}  {tap.time_utc}"
    if tap.verdict is not None:
        why = "; ".join(r.message for r in tap.reasons[:2])
        text = f"{head}  {tap.verdict.upper()}" + (f"  {why}" if why else "")
    else:
        text = f"{head}  {_modes_text(tap.analysis)}"
    if tap.dropped:
        text += f"  [INPUT DROPPED: {tap.dropped} samples lost, tap again]"
    if tap.path:
        text += f"  -> {tap.path}"
    return text


def _summary(st, source, interrupted: bool, *, to_err: bool) -> None:
    s = st.summary(getattr(source, "dropped_blocks", 0))
    verdicts = (
        f", {s['pass']} pass, {s['fail']} fail, {s['error']} error"
        if st.limits is not None
        else f", {s['taps'] - s['not_measured']} measured, {s['not_measured']} not measured"
    )
    typer.echo(
        f"{'stopped' if interrupted else 'done'}: {s['taps']} taps{verdicts}; "
        f"{s['dropped_blocks']} input blocks dropped, {s['taps_with_lost_input']} taps with lost input; "
        f"{s['saved']} saved, {s['stored']} stored",
        err=to_err,
    )


class _View:
    """The terminal view: the last verdict large, the recent parts below, the input's state."""

    def __init__(self, what: str, judged: bool) -> None:
        self.what = what
        self.judged = judged
        self.recent: deque = deque(maxlen=RECENT_ROWS)
        self.dropped = 0
        self._live: Any = None

    def live(self):
        from rich.console import Console
        from rich.live import Live

        self._live = Live(self.render(), console=Console(), refresh_per_second=4, transient=False)
        return self._live

    def add(self, tap, dropped_blocks: int) -> None:
        self.recent.appendleft(tap)
        self.dropped = dropped_blocks
        if self._live is not None:
            self._live.update(self.render())

    def render(self):
        from rich.console import Group
        from rich.panel import Panel
        from rich.table import Table
        from rich.text import Text

        last = self.recent[0] if self.recent else None
        if last is None:
            big = Text("waiting for a tap", style="bold")
            style = "white"
        elif last.dropped:
            big, style = Text(f"{last.part_id}: INPUT DROPPED - TAP AGAIN", style="bold black on yellow"), "yellow"
        elif last.verdict is not None:
            style = {"pass": "green", "fail": "red"}.get(last.verdict, "yellow")
            big = Text(big_word(last.verdict) + "\n", style=f"bold {style}")
            big.append(f"{last.part_id}  (tap {last.number})", style="bold")
            if last.reasons:
                big.append("\n" + "\n".join(r.message for r in last.reasons[:3]), style="not bold")
        else:
            style = "cyan" if last.analysis.error is None else "yellow"
            big = Text(f"{last.part_id}\n{_modes_text(last.analysis)}", style="bold")
        table = Table(expand=True)
        for col in ("tap", "part", "time (UTC)", "verdict" if self.judged else "result", "f1 [Hz]", "Q1"):
            table.add_column(col)
        for t in self.recent:
            m = t.analysis.modes[0] if t.analysis.modes else None
            result = (t.verdict or "").upper() if self.judged else ("measured" if m is not None else "not measured")
            if t.dropped:
                result += " (input dropped)"
            table.add_row(
                str(t.number),
                t.part_id,
                t.time_utc[11:23],
                result,
                f"{m.f_d_hz:.2f}" if m else "-",
                f"{m.q:.4g}" if m else "-",
            )
        n = self.recent[0].number if self.recent else 0
        status = Text(
            f"listening: {self.what}; {n} taps; {self.dropped} input blocks dropped; Ctrl-C ends", style="dim"
        )
        return Group(Panel(big, border_style=style, padding=(1, 2)), table, status)
