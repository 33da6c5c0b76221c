"""Sound-card input: device listing, device choice and a block source.

The PortAudio callback only copies each buffer into a bounded queue and notes the status
flags; blocks are built, numbered and handed on in the consumer's thread. When the
consumer is too slow the queue stays at its bound: new buffers are dropped and counted,
and the next block delivered says so (`overflow=True`, `start` skips the lost frames).

`sounddevice` is imported inside the functions that use it, so file analysis works on a
machine without PortAudio.
"""

from __future__ import annotations

import math
import numbers
import queue
import threading
import time
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from monitor.blocks import MODES, Block, Mode, StreamMeta
from monitor.errors import DeviceError

PORTAUDIO_HELP = (
    "the PortAudio library is not installed; on Debian/Ubuntu run "
    "'sudo apt-get install libportaudio2' (the macOS and Windows wheels of sounddevice "
    "bundle it)"
)
SOUNDDEVICE_HELP = (
    "the Python package 'sounddevice' is not installed; run "
    "\"pip install 'swingmeter[audio]'\" (or 'pip install sounddevice')"
)

# Extra wait for the first buffer: sound servers can take a while to start a stream
# (a PulseAudio null sink was seen to take up to about 2 s).
_STARTUP_ALLOWANCE_S = 5.0


def _sounddevice():
    """Import sounddevice, turning a missing PortAudio into a DeviceError that says what to do.

    Raises
    ------
    DeviceError
        If the package or the PortAudio library is missing.
    """
    try:
        import sounddevice
    except OSError as exc:  # "PortAudio library not found"
        raise DeviceError(f"{PORTAUDIO_HELP} ({exc})") from None
    except ImportError:
        raise DeviceError(SOUNDDEVICE_HELP) from None
    return sounddevice


def reinitialize_portaudio() -> None:
    """Re-scan the devices: terminate and initialise PortAudio again.

    PortAudio takes its device list (and, through ALSA's `pulse` plugin, the PulseAudio
    server named by PULSE_SERVER) once, when `sounddevice` is imported. Call this after a
    device was plugged in or after the sound-server environment changed. No stream may
    be open. Uses sounddevice's `_terminate`/`_initialize` (present in 0.4 and 0.5).

    Raises
    ------
    DeviceError
        If PortAudio is missing or fails to initialise.
    """
    sd = _sounddevice()
    try:
        sd._terminate()
        sd._initialize()
    except sd.PortAudioError as exc:
        raise DeviceError(f"cannot re-initialise PortAudio: {exc}") from None


# How long closing a stream may take before it is abandoned (a vanished device).
CLOSE_TIMEOUT_S = 2.0


@dataclass(frozen=True)
class InputDevice:
    """One sound-card input as PortAudio sees it.

    Attributes
    ----------
    index : int
        PortAudio device index (what `--device` accepts, besides a name substring).
    name : str
        Device name.
    hostapi : str
        Host API name (ALSA, Core Audio, MME, WASAPI, ...).
    max_input_channels : int
        Largest number of input channels the device offers.
    default_fs_hz : float
        The device's default sample rate (swingmeter always sets the rate explicitly).
    is_default : bool
        True for the system's default input.
    """

    index: int
    name: str
    hostapi: str
    max_input_channels: int
    default_fs_hz: float
    is_default: bool = False


def list_input_devices() -> list[InputDevice]:
    """List the devices that have at least one input channel.

    Returns
    -------
    list of InputDevice
        In PortAudio index order.

    Raises
    ------
    DeviceError
        If PortAudio is missing or cannot be queried.
    """
    sd = _sounddevice()
    try:
        devices = sd.query_devices()
        hostapis = sd.query_hostapis()
        default_in = sd.default.device[0]
    except sd.PortAudioError as exc:
        raise DeviceError(f"cannot list sound devices: {exc}") from None
    if not isinstance(default_in, int) or default_in < 0:
        try:
            default_in = int(sd.query_hostapis(0)["default_input_device"])
        except (sd.PortAudioError, IndexError, KeyError, ValueError):
            default_in = -1
    out = []
    for dev in devices:
        if int(dev["max_input_channels"]) < 1:
            continue
        out.append(
            InputDevice(
                index=int(dev["index"]),
                name=str(dev["name"]),
                hostapi=str(hostapis[dev["hostapi"]]["name"]),
                max_input_channels=int(dev["max_input_channels"]),
                default_fs_hz=float(dev["default_samplerate"]),
                is_default=int(dev["index"]) == default_in,
            )
        )
    return out


def _describe(devices: list[InputDevice]) -> str:
    if not devices:
        return "no input devices found (see 'swingmeter devices')"
    return "; ".join(f"{d.index}: {d.name} ({d.hostapi})" for d in devices)


def resolve_device(spec: int | str | None) -> int:
    """Turn a device index or a name substring into a PortAudio device index.

    Parameters
    ----------
    spec : int, str or None
        An index (int or a string of digits), a case-insensitive substring of the
        device name, or None for the default input. A name that matches one device
        exactly wins over longer names that contain it.

    Returns
    -------
    int
        The device index.

    Raises
    ------
    DeviceError
        If no input device matches or the substring is ambiguous; the message lists the
        candidates.
    """
    devices = list_input_devices()
    if spec is None or (isinstance(spec, str) and not spec.strip()):
        for d in devices:
            if d.is_default:
                return d.index
        if devices:
            return devices[0].index
        raise DeviceError(_describe(devices))
    if isinstance(spec, bool) or not isinstance(spec, (int, str)):
        raise TypeError(f"device must be an int, a str or None, not {type(spec).__name__}")
    text = str(spec).strip()
    if text.lstrip("-").isdigit():
        index = int(text)
        for d in devices:
            if d.index == index:
                return index
        raise DeviceError(f"no input device with index {index}; inputs: {_describe(devices)}")
    wanted = text.lower()
    exact = [d for d in devices if d.name.lower() == wanted]
    if len(exact) == 1:
        return exact[0].index
    found = [d for d in devices if wanted in d.name.lower()]
    if len(found) == 1:
        return found[0].index
    if not found:
        raise DeviceError(f"no input device matches {text!r}; inputs: {_describe(devices)}")
    raise DeviceError(
        f"device {text!r} is ambiguous; give an index or a longer name: {_describe(found)}"
    )


@dataclass(frozen=True)
class CaptureStats:
    """Counters of a sound-card capture.

    Attributes
    ----------
    overflows : int
        Buffers for which the device reported lost input (PortAudio input overflow).
    dropped_blocks : int
        Buffers dropped because the consumer was too slow and the queue was full.
    dropped_frames : int
        Frames in those dropped buffers.
    lost_frames : int
        Frames the device lost in overflows, as far as the buffer time stamps tell
        (0 when unknown).
    frames_delivered : int
        Frames handed to the consumer in blocks.
    blocks_delivered : int
        Blocks handed to the consumer.
    queue_peak_blocks : int
        Largest number of buffers waiting in the queue at any time.
    queue_blocks : int
        The queue's bound.
    """

    overflows: int = 0
    dropped_blocks: int = 0
    dropped_frames: int = 0
    lost_frames: int = 0
    frames_delivered: int = 0
    blocks_delivered: int = 0
    queue_peak_blocks: int = 0
    queue_blocks: int = 0


class SoundCardSource:
    """Blocks from a sound-card input.

    Parameters
    ----------
    device : int, str or None
        Device index or name substring (see `resolve_device`); None for the default input.
    fs_hz : float
        Sample rate, always set explicitly on the stream (some devices report a default
        that is not what the bench uses, e.g. ALSA's `pulse` says 44100 Hz).
    mode : {"audio", "beat", "iq"}
        `audio`/`beat`: one channel (`channel`) is delivered as float64. `iq`: channels
        `channel` (I) and `channel + 1` (Q) are delivered as complex128 I + jQ.
    channel : int
        Zero-based input channel (the I channel in `iq` mode).
    meta : StreamMeta or None
        Stream metadata (dial, sideband, harmonic, clock_ppm, profile, centre). Its
        `source`, `fs_hz`, `channels`, `mode` and `frames` are replaced by what this
        source opens.
    swap_iq : bool
        In `iq` mode, take I from the second channel and Q from the first.
    block_frames : int
        Frames per block handed on (default 4096, 85 ms at 48 kHz). PortAudio chooses its
        own buffer size (blocksize=0: sounddevice's documentation strongly recommends a
        fixed size only when an algorithm needs one, as it may add a layer of buffering)
        for a latency of about one block; the consumer
        joins whole buffers into blocks of at least `block_frames` (shorter only before
        a loss and at the end).
    queue_blocks : int
        Bound of the queue between the callback and the consumer, in PortAudio buffers
        (default 256, several seconds at any usual latency). When it is full, new
        buffers are dropped and counted.
    duration_s : float or None
        Stop after this many seconds of stream time; None runs until `stop()`.
    stall_timeout_s : float
        With no buffer for this long (plus a start-up allowance before the first one)
        the device is taken to have gone away: DeviceError.

    Raises
    ------
    ValueError
        For a bad mode, rate, channel, block size or duration.

    Notes
    -----
    Iterate over the source (or call `blocks()`) to start the stream and receive `Block`
    objects with consecutive `start` indices; a block after lost input has
    `overflow=True` and its `start` includes the lost frames when they are known (queue
    drops always; device overflows from the buffer time stamps). The stream is opened on
    the first iteration or by `open()`/`with`, and closed at the end of the iteration,
    by `close()` or by leaving the `with` block. `stop()` may be called from any thread.
    """

    def __init__(
        self,
        device: int | str | None = None,
        fs_hz: float = 48000.0,
        mode: Mode = "audio",
        channel: int = 0,
        *,
        meta: StreamMeta | None = None,
        swap_iq: bool = False,
        block_frames: int = 4096,
        queue_blocks: int = 256,
        duration_s: float | None = None,
        stall_timeout_s: float = 3.0,
    ) -> None:
        if mode not in MODES:
            raise ValueError(f"mode={mode!r} must be one of {', '.join(MODES)}")
        if not (isinstance(fs_hz, numbers.Real) and math.isfinite(fs_hz) and fs_hz > 0):
            raise ValueError(f"fs_hz={fs_hz} must be a positive sample rate")
        if isinstance(channel, bool) or not isinstance(channel, int) or channel < 0:
            raise ValueError(f"channel={channel!r} must be an integer >= 0")
        if not isinstance(block_frames, int) or not 16 <= block_frames <= 1 << 20:
            raise ValueError(f"block_frames={block_frames!r} must be in [16, 1048576]")
        if not isinstance(queue_blocks, int) or queue_blocks < 1:
            raise ValueError(f"queue_blocks={queue_blocks!r} must be an integer >= 1")
        if duration_s is not None and not (math.isfinite(duration_s) and duration_s > 0):
            raise ValueError(f"duration_s={duration_s} must be positive (or None)")
        self.device = device
        self.fs_hz = float(fs_hz)
        self.mode: Mode = mode
        self.channel = channel
        self.swap_iq = bool(swap_iq)
        self.block_frames = block_frames
        self.queue_blocks = queue_blocks
        self.duration_s = duration_s
        if not (math.isfinite(stall_timeout_s) and stall_timeout_s > 0):
            raise ValueError(f"stall_timeout_s={stall_timeout_s} must be positive")
        self.stall_timeout_s = float(stall_timeout_s)
        self._meta_in = meta if meta is not None else StreamMeta(source="", fs_hz=self.fs_hz)
        self.meta: StreamMeta | None = None
        self.device_index: int | None = None
        self._stream = None
        self._queue: queue.Queue = queue.Queue(maxsize=queue_blocks)
        self._stop = threading.Event()
        # Written by the callback thread only (plain ints: reads elsewhere are snapshots).
        self._cb_frames = 0
        self._cb_overflows = 0
        self._cb_dropped_blocks = 0
        self._cb_dropped_frames = 0
        self._cb_peak = 0
        self._cb_last_adc = None
        self._cb_last_frames = 0
        self._cb_lost = 0
        self._cb_pending_loss = False
        # Consumer side.
        self._frames_delivered = 0
        self._blocks_delivered = 0

    # -- stream set-up -------------------------------------------------------------------

    @property
    def open_channels(self) -> int:
        """Channels opened on the device: enough to reach the channel(s) read."""
        return self.channel + (2 if self.mode == "iq" else 1)

    def open(self) -> SoundCardSource:
        """Open and start the input stream (idempotent).

        Raises
        ------
        DeviceError
            If the device cannot be found, lacks the channels or the rate, or fails to start.
        """
        if self._stream is not None:
            return self
        sd = _sounddevice()
        index = resolve_device(self.device)
        info = next(d for d in list_input_devices() if d.index == index)
        if info.max_input_channels < self.open_channels:
            raise DeviceError(
                f"device {info.name!r} has {info.max_input_channels} input channel(s); "
                f"mode {self.mode!r} with channel={self.channel} needs {self.open_channels}"
            )
        try:
            sd.check_input_settings(
                device=index, channels=self.open_channels, samplerate=self.fs_hz, dtype="float32"
            )
        except (sd.PortAudioError, ValueError) as exc:
            raise DeviceError(
                f"device {info.name!r} does not accept {self.fs_hz:g} Hz with "
                f"{self.open_channels} channel(s): {exc}"
            ) from None
        try:
            stream = sd.InputStream(
                samplerate=self.fs_hz,
                blocksize=0,
                latency=min(max(self.block_frames / self.fs_hz, 0.01), 0.5),
                device=index,
                channels=self.open_channels,
                dtype="float32",
                callback=self._callback,
            )
            stream.start()
        except (sd.PortAudioError, ValueError) as exc:
            raise DeviceError(f"cannot start input on {info.name!r}: {exc}") from None
        self._stream = stream
        self.device_index = index
        self.meta = self._meta_in.with_(
            source=info.name,
            fs_hz=self.fs_hz,
            channels=self.open_channels,
            mode=self.mode,
            frames=None,
            extra={
                **self._meta_in.extra,
                "device_index": index,
                "hostapi": info.hostapi,
                "channel": self.channel,
                "swap_iq": self.swap_iq,
            },
        )
        return self

    def close(self) -> None:
        """Stop and close the stream; safe to call more than once.

        A device that went away can leave PortAudio's stop waiting for buffers that never
        come (seen with ALSA's pulse plugin after the sound server died), so the stream
        is aborted in a helper thread and abandoned if that does not return promptly.
        """
        self._stop.set()
        stream, self._stream = self._stream, None
        if stream is None:
            return

        def shut() -> None:
            try:
                stream.abort()
            except Exception:  # the device is gone; closing is best effort
                pass
            finally:
                try:
                    stream.close()
                except Exception:
                    pass

        t = threading.Thread(target=shut, name="swingmeter-audio-close", daemon=True)
        t.start()
        t.join(CLOSE_TIMEOUT_S)

    def stop(self) -> None:
        """Ask the iteration to end after the current block (thread-safe)."""
        self._stop.set()

    def __enter__(self) -> SoundCardSource:
        return self.open()

    def __exit__(self, *exc) -> None:
        self.close()

    # -- the callback: copy, count, nothing else ------------------------------------------

    def _callback(self, indata, frames, time_info, status) -> None:
        if status.input_overflow:
            self._cb_overflows += 1
            self._cb_pending_loss = True
            adc = getattr(time_info, "inputBufferAdcTime", 0.0) or 0.0
            if adc and self._cb_last_adc is not None:
                # The ADC time stamps tell how many frames the device lost.
                gap = round((adc - self._cb_last_adc) * self.fs_hz) - self._cb_last_frames
                if 0 < gap < 3600 * self.fs_hz:
                    self._cb_lost += gap
                    self._cb_frames += gap
        adc = getattr(time_info, "inputBufferAdcTime", 0.0) or 0.0
        self._cb_last_adc = adc if adc else None
        self._cb_last_frames = frames
        start = self._cb_frames
        self._cb_frames += frames
        try:
            self._queue.put_nowait((indata.copy(), start, self._cb_pending_loss))
            self._cb_pending_loss = False
        except queue.Full:
            self._cb_dropped_blocks += 1
            self._cb_dropped_frames += frames
            self._cb_pending_loss = True
        size = self._queue.qsize()
        if size > self._cb_peak:
            self._cb_peak = size

    # -- the consumer ------------------------------------------------------------------

    @property
    def stats(self) -> CaptureStats:
        """A snapshot of the capture counters."""
        return CaptureStats(
            overflows=self._cb_overflows,
            dropped_blocks=self._cb_dropped_blocks,
            dropped_frames=self._cb_dropped_frames,
            lost_frames=self._cb_lost,
            frames_delivered=self._frames_delivered,
            blocks_delivered=self._blocks_delivered,
            queue_peak_blocks=self._cb_peak,
            queue_blocks=self.queue_blocks,
        )

    def _to_samples(self, data: np.ndarray) -> np.ndarray:
        if self.mode == "iq":
            i, q = data[:, self.channel], data[:, self.channel + 1]
            if self.swap_iq:
                i, q = q, i
            out = np.empty(data.shape[0], dtype=np.complex128)
            out.real = i
            out.imag = q
            return out
        return data[:, self.channel].astype(np.float64)

    def blocks(self) -> Iterator[Block]:
        """Yield blocks until `duration_s` of stream time has passed or `stop()` is called.

        Raises
        ------
        DeviceError
            If the device stops delivering (unplugged, server gone) or reports an error.
        """
        self.open()
        limit = None if self.duration_s is None else round(self.duration_s * self.fs_hz)
        pending: list[np.ndarray] = []
        pending_start = 0
        pending_frames = 0
        pending_lost = False
        deadline = time.monotonic() + self.stall_timeout_s + _STARTUP_ALLOWANCE_S

        def flush() -> Block:
            nonlocal pending, pending_frames
            data = pending[0] if len(pending) == 1 else np.concatenate(pending)
            pending, pending_frames = [], 0
            samples = self._to_samples(data)
            self._frames_delivered += len(samples)
            self._blocks_delivered += 1
            return Block(
                samples=samples, start=pending_start, meta=self.meta, overflow=pending_lost
            )

        try:
            while not self._stop.is_set():
                try:
                    data, start, lost = self._queue.get(timeout=0.05)
                except queue.Empty:
                    stream = self._stream
                    if stream is None:
                        return
                    if not stream.active or time.monotonic() > deadline:
                        raise DeviceError(
                            f"input device {self.meta.source!r} stopped delivering samples "
                            f"(unplugged, or the sound server went away?)"
                        ) from None
                    continue
                deadline = time.monotonic() + self.stall_timeout_s
                if limit is not None and start >= limit:
                    break
                if limit is not None and start + len(data) > limit:
                    data = data[: limit - start]
                if pending and (lost or start != pending_start + pending_frames):
                    yield flush()
                if not pending:
                    pending_start, pending_lost = start, bool(lost)
                pending.append(data)
                pending_frames += len(data)
                if pending_frames >= self.block_frames:
                    yield flush()
                if limit is not None and start + len(data) >= limit:
                    break
            if pending:
                yield flush()
        finally:
            self.close()

    def __iter__(self) -> Iterator[Block]:
        return self.blocks()
