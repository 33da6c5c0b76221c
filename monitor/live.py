"""The live path: a source thread, a bounded queue, a worker running the analysis engine.

    source thread ──blocks──> bounded queue ──> worker thread (Engine) ──> latest readings
    (sound card or            (drops and        (the same Engine as       and gate views,
     paced file replay;        counts when       `analyze`)                bounded, for the
     feeds the recorder)       full)                                       window / terminal)

No Qt here, so the headless path (`live --no-window`) runs without a display. The window
pulls from a `LiveSession` with its own timer; the terminal loop polls it the same way.

A replay (`ReplaySource`) hands the blocks of a recording on at real-time pace (or
`speed` times faster) and never drops: when the worker falls behind, the replay waits, so
its readings are exactly those of `analyze` on the same file. Seeking starts a new
session (a new engine run) from the seek point: gates then start at the seek point, not
at the file's gate boundaries, and readings before it are not carried over.
"""

from __future__ import annotations

import math
import queue
import threading
import time
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field, fields, replace

import numpy as np

from monitor.blocks import Block, StreamMeta
from monitor.engine import AnalysisSettings, Engine, GateView, Reading, Summary

REPLAY_BLOCK_FRAMES = 2048  # 43 ms at 48 kHz: smooth pacing, cheap per block
_SLICE_S = 0.02  # longest sleep between checks of stop/pause


class ReplaySource:
    """A recording's blocks at real-time pace (times `speed`), with pause and a start point.

    Parameters
    ----------
    source : iterable of Block with `meta` and `warnings`
        An opened file source (see `monitor.sources.open_source`).
    speed : float
        Replay speed: 1 is real time, 2 twice as fast; `math.inf` as fast as possible.
    start_s : float
        Skip the stream's first `start_s` seconds (a seek). Blocks keep their stream
        `start` index, so reading times stay those of the file.
    duration_s : float or None
        Stop after this many seconds of stream time from `start_s`.

    Raises
    ------
    ValueError
        If `speed` is not positive or `start_s` is negative.
    """

    def __init__(
        self,
        source,
        *,
        speed: float = 1.0,
        start_s: float = 0.0,
        duration_s: float | None = None,
    ):
        if not (isinstance(speed, (int, float)) and speed > 0 and not math.isnan(speed)):
            raise ValueError(f"speed={speed!r} must be positive")
        if not (math.isfinite(start_s) and start_s >= 0):
            raise ValueError(f"start_s={start_s!r} must be >= 0")
        if duration_s is not None and not (math.isfinite(duration_s) and duration_s > 0):
            raise ValueError(f"duration_s={duration_s!r} must be positive (or None)")
        self._src = source
        self.meta: StreamMeta = source.meta
        self.speed = float(speed)
        self.start_s = float(start_s)
        self.duration_s = duration_s
        self._stop = threading.Event()
        self._running = threading.Event()
        self._running.set()
        self.position_s = self.start_s

    @property
    def warnings(self) -> list[str]:
        return self._src.warnings

    @property
    def paused(self) -> bool:
        return not self._running.is_set()

    def pause(self) -> None:
        self._running.clear()

    def resume(self) -> None:
        self._running.set()

    def stop(self) -> None:
        self._stop.set()
        self._running.set()

    def close(self) -> None:
        self.stop()
        close = getattr(self._src, "close", None)
        if close is not None:
            close()

    def _wait_until(self, t_wall: float, shift: list[float]) -> bool:
        """Sleep until `t_wall + shift[0]`; time spent paused moves the target (shift)."""
        while not self._stop.is_set():
            if not self._running.is_set():
                t0 = time.monotonic()
                self._running.wait(0.1)
                shift[0] += time.monotonic() - t0
                continue
            left = t_wall + shift[0] - time.monotonic()
            if left <= 0:
                return True
            time.sleep(min(left, _SLICE_S))
        return False

    def __iter__(self) -> Iterator[Block]:
        fs = self.meta.fs_hz
        first = round(self.start_s * fs)
        last = None if self.duration_s is None else first + round(self.duration_s * fs)
        t0 = time.monotonic()
        shift = [0.0]
        for block in self._src:
            if self._stop.is_set():
                return
            end = block.start + len(block)
            if end <= first:
                continue
            if block.start < first:
                cut = first - block.start
                block = Block(block.samples[cut:], first, block.meta, block.overflow)
            if last is not None and end > last:
                if block.start >= last:
                    return
                block = Block(block.samples[: last - block.start], block.start, block.meta)
                end = last
            if math.isfinite(self.speed):
                # a block is available once its last sample has "arrived", as from a card
                if not self._wait_until(t0 + (end - first) / fs / self.speed, shift):
                    return
            elif not self._running.is_set():
                self._wait_until(time.monotonic(), shift)
            self.position_s = end / fs
            yield block
            if last is not None and end >= last:
                return


@dataclass(frozen=True)
class SessionStats:
    """Counters of a live session (a snapshot).

    Attributes
    ----------
    blocks_in, frames_in : int
        Blocks and frames the source delivered.
    dropped_blocks, dropped_frames : int
        Blocks (frames) dropped because the worker's queue was full, plus those the
        sound card itself lost (overflows, its own queue drops).
    device_overflows : int
        Buffers for which the device reported lost input.
    queue_peak : int
        Largest number of blocks waiting for the worker.
    queue_blocks : int
        The queue's bound.
    readings : int
        Readings produced so far.
    stalled_s : float
        Seconds since the source last delivered a block.
    running : bool
        The source or the worker is still running.
    """

    blocks_in: int = 0
    frames_in: int = 0
    dropped_blocks: int = 0
    dropped_frames: int = 0
    device_overflows: int = 0
    queue_peak: int = 0
    queue_blocks: int = 0
    readings: int = 0
    stalled_s: float = 0.0
    running: bool = False


@dataclass(frozen=True)
class LiveReading:
    """A reading with its place in the session and its timing.

    Attributes
    ----------
    seq : int
        1, 2, 3, ... in the order the worker produced them.
    reading : Reading
    arrived_s : float
        `time.monotonic()` when the block that completed the gate arrived from the source.
    ready_s : float
        `time.monotonic()` when the reading was ready.
    """

    seq: int
    reading: Reading
    arrived_s: float
    ready_s: float


_END = object()


class LiveSession:
    """Run a block source through an `Engine` in background threads.

    Parameters
    ----------
    source : iterable of Block
        A `SoundCardSource`, a `ReplaySource` or any iterable of blocks; iterated in the
        session's source thread. `stop()`/`pause()`/`resume()`/`stats` are used if present.
    settings : AnalysisSettings or None
        What to measure (None: the defaults for the stream's mode).
    queue_blocks : int
        Bound of the queue between the source and the worker.
    drop_when_full : bool
        True (live input): a block that finds the queue full is dropped and counted, so
        a slow worker never holds up the input. False (replays): the source waits.
    keep_readings : int
        How many recent readings the session keeps for `poll` (older ones are dropped).
    views : bool
        Compute a `GateView` (spectrum, waveform) per gate for a display.
    keep_views : int
        How many recent gate views are kept.
    on_reading : callable or None
        Called in the worker thread with each `Reading` (nothing is dropped on this path).

    Raises
    ------
    ValueError
        For a bad queue or history size.
    """

    def __init__(
        self,
        source: Iterable[Block],
        settings: AnalysisSettings | None = None,
        *,
        queue_blocks: int = 256,
        drop_when_full: bool = True,
        keep_readings: int = 2048,
        views: bool = False,
        keep_views: int = 32,
        on_reading: Callable[[Reading], None] | None = None,
    ):
        for name, v in (
            ("queue_blocks", queue_blocks),
            ("keep_readings", keep_readings),
            ("keep_views", keep_views),
        ):
            if isinstance(v, bool) or not isinstance(v, int) or v < 1:
                raise ValueError(f"{name}={v!r} must be an integer >= 1")
        self.source = source
        self.settings = settings
        self.drop_when_full = drop_when_full
        self.views = views
        self.on_reading = on_reading
        self._queue: queue.Queue = queue.Queue(maxsize=queue_blocks)
        self._queue_blocks = queue_blocks
        self._lock = threading.Lock()
        self._readings: deque[LiveReading] = deque(maxlen=keep_readings)
        self._views: deque[tuple[int, GateView]] = deque(maxlen=keep_views)
        self._seq = 0
        self._view_seq = 0
        self._stop = threading.Event()
        self._source_done = threading.Event()
        self._worker_done = threading.Event()
        self._blocks_in = 0
        self._frames_in = 0
        self._dropped_blocks = 0
        self._dropped_frames = 0
        self._queue_peak = 0
        self._last_block_s = time.monotonic()
        self._arrived = 0.0  # arrival time of the block the worker is feeding
        self._recorder = None
        self._rec_lock = threading.Lock()
        self.error: BaseException | None = None
        self.engine: Engine | None = None
        self.meta: StreamMeta | None = getattr(source, "meta", None)
        self.summary: Summary | None = None
        self._threads: list[threading.Thread] = []

    # -- life cycle -----------------------------------------------------------------------

    def start(self) -> LiveSession:
        """Make the engine (when the stream's metadata is known) and start the source and
        worker threads."""
        if self._threads:
            return self
        if self.meta is not None and self.engine is None:
            self._warm_up(self.meta)
            self.engine = self._make_engine(self.meta)
        self._last_block_s = time.monotonic()
        for target, name in ((self._source_loop, "source"), (self._worker_loop, "engine")):
            t = threading.Thread(target=target, name=f"swingmeter-{name}", daemon=True)
            t.start()
            self._threads.append(t)
        return self

    def stop(self, timeout: float = 2.0) -> None:
        """Stop both threads and close the recorder; waits at most about `timeout` s.

        A source stalled inside a blocking read cannot be interrupted; its (daemon) thread
        is left to end on its own, and the worker stops anyway.
        """
        self._stop.set()
        stopper = getattr(self.source, "stop", None)
        if stopper is not None:
            stopper()
        deadline = time.monotonic() + timeout
        for t in self._threads:
            t.join(max(0.0, deadline - time.monotonic()))
        self.stop_recording()

    def wait(self, timeout: float | None = None) -> bool:
        """Wait until the source has ended and the worker has finished; True if it has."""
        return self._worker_done.wait(timeout)

    @property
    def running(self) -> bool:
        return bool(self._threads) and not self._worker_done.is_set()

    @property
    def done(self) -> bool:
        return self._worker_done.is_set()

    def pause(self) -> None:
        f = getattr(self.source, "pause", None)
        if f is not None:
            f()

    def resume(self) -> None:
        f = getattr(self.source, "resume", None)
        if f is not None:
            f()

    @property
    def paused(self) -> bool:
        return bool(getattr(self.source, "paused", False))

    def __enter__(self) -> LiveSession:
        return self.start()

    def __exit__(self, *exc) -> None:
        self.stop()

    # -- recording (fed from the source thread) -------------------------------------------

    def start_recording(self, path, **kwargs):
        """Record the incoming blocks to `path` (a `monitor.record.Recorder`) from now on.

        Parameters
        ----------
        path : path-like
        **kwargs
            Passed to `Recorder` (subtype, sigmf, ...).

        Returns
        -------
        Recorder

        Raises
        ------
        ValueError
            If the stream's metadata is not known yet (no block has arrived).
        InputError
            If the file cannot be created.
        """
        from monitor.record import Recorder

        meta = self.meta
        if meta is None:
            raise ValueError("no block has arrived yet: the stream's metadata is unknown")
        self.stop_recording()
        rec = Recorder(path, meta, **kwargs)
        with self._rec_lock:
            self._recorder = rec
        return rec

    def stop_recording(self):
        """Close the recording, if any; returns its RecordingSummary or None."""
        with self._rec_lock:
            rec, self._recorder = self._recorder, None
        if rec is None:
            return None
        return rec.close(extra={"capture": self.stats_dict()})

    @property
    def recording(self) -> bool:
        return self._recorder is not None

    # -- threads --------------------------------------------------------------------------

    def _source_loop(self) -> None:
        try:
            for block in self.source:
                now = time.monotonic()
                self._last_block_s = now
                if self.meta is None:
                    self.meta = block.meta
                self._blocks_in += 1
                self._frames_in += len(block)
                with self._rec_lock:
                    rec = self._recorder
                    if rec is not None:
                        try:
                            rec.write(block)
                        except Exception as exc:  # a failed recording must not stop the input
                            self._recorder = None
                            self.error = exc
                item = (block, now)
                if self.drop_when_full:
                    try:
                        self._queue.put_nowait(item)
                    except queue.Full:
                        self._dropped_blocks += 1
                        self._dropped_frames += len(block)
                else:
                    while not self._stop.is_set():
                        try:
                            self._queue.put(item, timeout=0.1)
                            break
                        except queue.Full:
                            continue
                size = self._queue.qsize()
                if size > self._queue_peak:
                    self._queue_peak = size
                if self._stop.is_set():
                    break
        except Exception as exc:  # DeviceError, InputError: reported by the consumer
            self.error = exc
        finally:
            self._source_done.set()
            while True:  # the end marker always gets through
                try:
                    self._queue.put(_END, timeout=0.1)
                    break
                except queue.Full:
                    if self._stop.is_set():
                        break

    def _make_engine(self, meta: StreamMeta) -> Engine:
        settings = self.settings or AnalysisSettings(mode=meta.mode)
        return Engine(
            meta,
            settings,
            on_reading=self._emit_reading,
            on_view=self._emit_view if self.views else None,
            keep_readings=False,
        )

    def _warm_up(self, meta: StreamMeta) -> None:
        """Measure one synthetic gate with a throwaway engine, so that lazy imports and
        first-time set-up (seconds on a slow machine) happen before the input runs, not
        while its blocks pile up. Errors are left for the real run to report."""
        settings = self.settings or AnalysisSettings(mode=meta.mode)
        try:
            warm = Engine(meta.with_(source="warm-up"), settings, keep_readings=False)
            if self.views:
                warm.on_view = lambda _v: None
            n = warm.gate_n
            w = 2 * np.pi * 0.1 * np.arange(n)  # a tone at a tenth of the sample rate
            x = 0.1 * (np.exp(1j * w) if meta.mode == "iq" else np.cos(w))
            warm.feed(Block(x, 0, warm.meta))
        except Exception:
            pass

    def _emit_reading(self, r: Reading) -> None:
        arrived = self._arrived
        with self._lock:
            self._seq += 1
            self._readings.append(LiveReading(self._seq, r, arrived, time.monotonic()))
        if self.on_reading is not None:
            self.on_reading(r)

    def _emit_view(self, v: GateView) -> None:
        with self._lock:
            self._view_seq += 1
            self._views.append((self._view_seq, v))

    def _worker_loop(self) -> None:
        try:
            while True:
                try:
                    item = self._queue.get(timeout=0.1)
                except queue.Empty:
                    if self._stop.is_set():
                        break  # even if the source is stuck in a blocking read
                    continue
                if item is _END or self._stop.is_set():
                    break
                block, self._arrived = item
                if self.engine is None:
                    self.engine = self._make_engine(block.meta)
                self.engine.feed(block)
            if self.engine is not None and not self._stop.is_set():
                self.engine.finish()
            if self.engine is not None:
                self.summary = self.engine.summary(
                    extra_warnings=getattr(self.source, "warnings", ()) or ()
                )
        except Exception as exc:
            if self.error is None:
                self.error = exc
        finally:
            self._worker_done.set()

    # -- consumer side --------------------------------------------------------------------

    def readings_since(self, seq: int = 0) -> list[LiveReading]:
        """Readings with a sequence number above `seq`, oldest first (thread-safe)."""
        with self._lock:
            if not self._readings or self._readings[-1].seq <= seq:
                return []
            return [r for r in self._readings if r.seq > seq]

    def latest(self) -> LiveReading | None:
        with self._lock:
            return self._readings[-1] if self._readings else None

    def views_since(self, seq: int = 0) -> list[tuple[int, GateView]]:
        """Gate views with a sequence number above `seq`, oldest first (thread-safe)."""
        with self._lock:
            return [(s, v) for s, v in self._views if s > seq]

    @property
    def stats(self) -> SessionStats:
        dev = getattr(self.source, "stats", None)
        dev_dropped = dev_frames = dev_over = 0
        if dev is not None and not callable(dev):
            dev_dropped = int(getattr(dev, "dropped_blocks", 0))
            dev_frames = int(getattr(dev, "dropped_frames", 0)) + int(
                getattr(dev, "lost_frames", 0)
            )
            dev_over = int(getattr(dev, "overflows", 0))
        return SessionStats(
            blocks_in=self._blocks_in,
            frames_in=self._frames_in,
            dropped_blocks=self._dropped_blocks + dev_dropped,
            dropped_frames=self._dropped_frames + dev_frames,
            device_overflows=dev_over,
            queue_peak=self._queue_peak,
            queue_blocks=self._queue_blocks,
            readings=self._seq,
            stalled_s=0.0 if self._source_done.is_set() else time.monotonic() - self._last_block_s,
            running=self.running,
        )

    def stats_dict(self) -> dict:
        s = self.stats
        return {f.name: getattr(s, f.name) for f in fields(s)}


# -- building a session from a description ---------------------------------------------


@dataclass(frozen=True)
class LiveConfig:
    """Everything needed to (re)start a live session; the window edits a copy of it.

    Attributes
    ----------
    file : str or None
        A recording to replay; None for a sound-card input.
    device : str or None
        Sound-card device (index or name substring); None for the default input.
    rate_hz : float
        Sound-card sample rate.
    settings : AnalysisSettings
        What to measure (mode, gate, filter, ...).
    meta : dict
        StreamMeta fields given by the user (clock_ppm, profile, dial_hz, sideband,
        harmonic, center_hz).
    channel, mix, swap_iq
        Channel selection (as for `analyze`).
    speed : float
        Replay speed (files).
    start_s : float
        Replay start (a seek).
    duration_s : float or None
        Stream seconds to run; None for all (file) or until stopped (sound card).
    """

    file: str | None = None
    device: str | None = None
    rate_hz: float = 48000.0
    settings: AnalysisSettings = field(default_factory=AnalysisSettings)
    meta: dict = field(default_factory=dict)
    channel: int = 0
    mix: bool = False
    swap_iq: bool = False
    speed: float = 1.0
    start_s: float = 0.0
    duration_s: float | None = None

    def with_(self, **changes) -> LiveConfig:
        return replace(self, **changes)

    def with_settings(self, **changes) -> LiveConfig:
        """A copy with AnalysisSettings fields changed; unknown fields are ignored (so the
        window works whether or not the engine has an option yet)."""
        known = {f.name for f in fields(AnalysisSettings)}
        ok = {k: v for k, v in changes.items() if k in known}
        return replace(self, settings=replace(self.settings, **ok))


def open_config_source(config: LiveConfig):
    """The block source a LiveConfig describes: a paced replay or a sound card (opened).

    Raises
    ------
    InputError
        If the recording cannot be used.
    DeviceError
        If the sound card cannot be opened (or PortAudio is missing).
    """
    mode = config.settings.mode
    meta = {k: v for k, v in config.meta.items() if v is not None}
    if config.file is not None:
        from monitor.sources import open_source

        src = open_source(
            config.file,
            mode=mode,
            channel=config.channel,
            mix=config.mix,
            swap_iq=config.swap_iq,
            block_frames=REPLAY_BLOCK_FRAMES,
            meta=meta,
        )
        return ReplaySource(
            src, speed=config.speed, start_s=config.start_s, duration_s=config.duration_s
        )
    from monitor.audio import SoundCardSource

    base = StreamMeta(source=config.device or "default", fs_hz=config.rate_hz, **meta)
    src = SoundCardSource(
        config.device,
        config.rate_hz,
        mode,
        config.channel,
        meta=base,
        swap_iq=config.swap_iq,
        block_frames=_card_block_frames(config.rate_hz, config.settings.gate_s),
        duration_s=config.duration_s,
    )
    try:
        src.open()
    except BaseException:
        src.close()
        raise
    return src


def _card_block_frames(rate_hz: float, gate_s: float) -> int:
    """Blocks of at most a quarter gate (and about 20 ms at least), so a reading is not
    held back by a long block."""
    n = int(min(max(rate_hz * 0.02, rate_hz * gate_s / 4), rate_hz * 0.1))
    return max(256, min(n, 1 << 16))


def start_session(config: LiveConfig, **kwargs) -> LiveSession:
    """Open the source a LiveConfig describes and start a LiveSession on it.

    Keyword arguments go to `LiveSession`; replays never drop blocks, sound-card input
    drops (and counts) when the worker falls behind.
    """
    src = open_config_source(config)
    kwargs.setdefault("drop_when_full", config.file is None)
    return LiveSession(src, config.settings, **kwargs).start()
