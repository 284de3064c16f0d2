"""The sound-card input: blocks from PortAudio through sounddevice (``ringdown listen``).

sounddevice (extra ``live``) and the PortAudio library (``libportaudio2``) are imported only
here and only when a device is used; without them the error says what to install.
"""

from __future__ import annotations

import queue
import threading
from collections.abc import Iterator

import numpy as np

from ..base.errors import InputError, ParameterError
from .blocks import Block

__all__ = ["DeviceBlocks", "list_devices", "import_sounddevice"]


def import_sounddevice():
    """The ``sounddevice`` module, or a one-line error saying how to install it."""
    try:
        import sounddevice
    except ImportError as exc:
        raise ParameterError(
            "live capture needs the 'live' extra: pip install 'ringdown[live]' "
            f"(sounddevice, with the PortAudio library libportaudio2): {exc}"
        ) from None
    except OSError as exc:  # the module is there but PortAudio is not
        raise ParameterError(f"sounddevice cannot load PortAudio ({exc}); install libportaudio2") from None
    return sounddevice


def list_devices() -> str:
    """The input devices PortAudio sees, one line each: index, name, channels, default rate."""
    sd = import_sounddevice()
    lines = []
    for i, d in enumerate(sd.query_devices()):
        if d["max_input_channels"] > 0:
            lines.append(f"{i:3d}  {d['name']}  ({d['max_input_channels']} in, {d['default_samplerate']:g} Hz)")
    return "\n".join(lines) if lines else "no input devices found"


class DeviceBlocks:
    """Blocks from a sound-card input through sounddevice (PortAudio).

    Parameters
    ----------
    device : int, str or None
        PortAudio device index or (part of a) name; None: the default input.
    channel : int >= 1
        Input channel analysed (1-based).
    sample_rate : float or None, Hz
        None: the device's default rate.
    block_samples : int
        Samples per callback block.
    queue_s : float, s
        How far the analysis may fall behind the input (default 60 s: about 23 MB of float64 at
        48 kHz) before arriving blocks are dropped (and counted).

    Attributes ``dropped_blocks`` (blocks lost: overflowed or no room) and ``overflows``
    (blocks PortAudio flagged as input overflow) grow while the stream runs.
    """

    full_scale = 1.0  # PortAudio delivers float32 in [-1, 1]
    total_samples = None
    path = None

    def __init__(
        self,
        device=None,
        *,
        channel: int = 1,
        sample_rate: float | None = None,
        block_samples: int = 1024,
        queue_s: float = 60.0,
    ) -> None:
        sd = import_sounddevice()
        try:
            info = sd.query_devices(device, "input")
        except (ValueError, sd.PortAudioError) as exc:
            raise ParameterError(f"no input device {device!r}: {exc} (list them with --list-devices)") from None
        if not 1 <= int(channel) <= int(info["max_input_channels"]):
            raise ParameterError(
                f"channel {channel} is out of range: {info['name']!r} has {info['max_input_channels']} input channel(s)"
            )
        self._sd = sd
        self.device = device
        self.device_name = str(info["name"])
        self.channel = str(int(channel))
        self.n_channels = int(channel)
        self.sample_rate = float(sample_rate or info["default_samplerate"])
        self.block_samples = int(block_samples)
        self._q: queue.Queue = queue.Queue()
        self._queued = 0  # samples waiting in the queue
        self._max_queued = int(queue_s * self.sample_rate)
        self.dropped_blocks = 0
        self.overflows = 0
        self._lost = 0
        self._lock = threading.Lock()  # _lost and _queued change in PortAudio's thread
        self._pos = 0
        self._stop = threading.Event()

    def _callback(self, indata, frames, time_info, status) -> None:  # PortAudio's thread
        lost = 0
        if status.input_overflow:
            # PortAudio does not say how much was lost: count one block (an estimate)
            self.overflows += 1
            self.dropped_blocks += 1
            lost = frames
        ch = int(self.channel) - 1
        with self._lock:
            if self._queued + frames > self._max_queued:  # the analysis fell behind: this block is lost
                self.dropped_blocks += 1
                self._lost += frames
                return
            self._queued += frames
        self._q.put_nowait((indata[:, ch].astype(np.float64), lost))

    def stop_capture(self) -> None:
        self._stop.set()

    def __iter__(self) -> Iterator[Block]:
        sd = self._sd
        try:
            stream = sd.InputStream(
                device=self.device,
                channels=self.n_channels,
                samplerate=self.sample_rate,
                blocksize=self.block_samples,
                dtype="float32",
                callback=self._callback,
            )
        except sd.PortAudioError as exc:
            raise InputError(f"cannot open input {self.device_name!r} at {self.sample_rate:g} Hz: {exc}") from None
        with stream:
            while not self._stop.is_set():
                try:
                    x, lost = self._q.get(timeout=0.1)
                except queue.Empty:
                    continue
                with self._lock:
                    self._queued -= x.shape[0]
                    lost += self._lost
                    self._lost = 0
                self._pos += lost
                yield Block(x, self._pos, lost)
                self._pos += x.shape[0]
