"""Crash-safe recorder: blocks in, a WAV/RF64 (or SigMF) file and a metadata sidecar out.

A writer thread, never the audio callback, writes the samples. The file stays readable by
ordinary WAV readers even if the process is killed: libsndfile is told to rewrite the
header sizes after every write (SFC_SET_UPDATE_HEADER_AUTO), and libsndfile writes with
unbuffered system calls, so everything written is in the operating system's cache at once.

Container choice: with a known duration the expected data size is
duration * rate * channels * bytes per sample; above 4 GiB less 1 MiB of headroom the
file is RF64, otherwise plain WAV (readable by every WAV reader, Python's `wave` included).
With an unknown duration the file is RF64 with libsndfile's auto-downgrade: it carries a
RIFF/WAVE header while it is under 4 GiB and turns into RF64 only if it grows past that.

The sidecar `OUT.wav.swingmeter.json` holds the stream metadata (mode, rate, channels,
device, dial, sideband, harmonic, clock_ppm, profile, UTC start) and is replaced
atomically (temporary file + rename) when written.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import json
import math
import os
import queue
import shutil
import struct
import tempfile
import threading
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from monitor import __version__, jsonio
from monitor.blocks import MODES, Block, StreamMeta
from monitor.errors import InputError

SIDECAR_SUFFIX = ".swingmeter.json"
SIDECAR_FORMAT = "swingmeter-recording"
SIDECAR_VERSION = 1

# libsndfile commands (sndfile.h); reached through soundfile's low-level handle.
SFC_SET_UPDATE_HEADER_AUTO = 0x1061
SFC_RF64_AUTO_DOWNGRADE = 0x1210
SF_TRUE = 1

WAV_LIMIT_BYTES = (1 << 32) - (1 << 20)  # RIFF sizes are 32-bit; keep 1 MiB for the header
SAMPLE_BYTES = {"PCM_16": 2, "PCM_24": 3, "PCM_32": 4, "FLOAT": 4, "DOUBLE": 8}
_FSYNC_EVERY_S = 5.0  # also survive a power cut, losing at most this much

# Tests set this False to exercise the fallback (our own header patching, WAV only).
_USE_LIBSNDFILE_AUTO_HEADER = True


def default_subtype(mode: str) -> str:
    """The sample format a recording uses unless told otherwise.

    `audio`/`beat`: PCM_24. Sound cards deliver at most 24 bits, so PCM_24 keeps every bit
    of the card, is a third smaller than FLOAT and is read by every WAV reader (Python's
    `wave` included). `iq`: FLOAT. I/Q work often subtracts offsets and rescales, float
    never clips, and FLOAT matches SigMF's cf32_le, so a WAV and a SigMF capture of the
    same stream hold the same numbers. float32 holds a 24-bit card's samples exactly.

    Raises
    ------
    ValueError
        If `mode` is not a known input mode.
    """
    if mode not in MODES:
        raise ValueError(f"mode={mode!r} must be one of {', '.join(MODES)}")
    return "FLOAT" if mode == "iq" else "PCM_24"


def choose_container(duration_s: float | None, fs_hz: float, channels: int, subtype: str) -> str:
    """'WAV' if the expected data fit a RIFF file, 'RF64' otherwise or when unknown.

    Parameters
    ----------
    duration_s : float or None
        Expected duration; None when the recording runs until stopped.
    fs_hz, channels, subtype
        Sample rate, channels in the file and libsndfile subtype.

    Returns
    -------
    str
        'WAV' or 'RF64'.
    """
    if subtype not in SAMPLE_BYTES:
        raise ValueError(f"subtype={subtype!r} must be one of {', '.join(SAMPLE_BYTES)}")
    if duration_s is None:
        return "RF64"
    expected = math.ceil(duration_s * fs_hz) * channels * SAMPLE_BYTES[subtype]
    return "RF64" if expected > WAV_LIMIT_BYTES else "WAV"


def sidecar_path(path: str | os.PathLike) -> Path:
    """The metadata sidecar of a recording: `OUT.wav` -> `OUT.wav.swingmeter.json`."""
    p = Path(path)
    if p.name.endswith(SIDECAR_SUFFIX):
        return p
    return p.with_name(p.name + SIDECAR_SUFFIX)


def check_output_path(path: str | os.PathLike) -> Path:
    """Fail early, before a device is opened, on an output path that cannot be created.

    Returns
    -------
    Path
        The path.

    Raises
    ------
    InputError
        If the directory does not exist or the path is a directory.
    """
    p = Path(path)
    if not p.parent.is_dir():
        raise InputError(f"cannot create {p}: directory {p.parent} not found")
    if p.is_dir():
        raise InputError(f"cannot create {p}: it is a directory")
    return p


def _utc_iso(t: float) -> str:
    # SigMF's core:datetime wants ISO 8601 in UTC with a 'Z'; use it for the sidecar too.
    d = _dt.datetime.fromtimestamp(t, tz=_dt.timezone.utc)
    return d.strftime("%Y-%m-%dT%H:%M:%S.") + f"{d.microsecond // 1000:03d}Z"


def _write_atomic(path: Path, text: str) -> None:
    """Replace `path` by `text` so that a reader sees the old or the new file, never half."""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


_SIDECAR_TYPES: dict[str, tuple[type, ...]] = {
    "mode": (str,),
    "fs_hz": (int, float),
    "channels": (int,),
    "harmonic": (int,),
    "clock_ppm": (int, float),
    "sideband": (str,),
}


def read_sidecar(path: str | os.PathLike, *, missing_ok: bool = False) -> dict[str, Any]:
    """Read a recording's metadata sidecar.

    Parameters
    ----------
    path : path-like
        The recording (`OUT.wav`, `OUT.sigmf-data`) or the sidecar itself.
    missing_ok : bool
        Return {} instead of raising when there is no sidecar.

    Returns
    -------
    dict
        The sidecar's fields (see `Recorder`).

    Raises
    ------
    InputError
        If the sidecar is missing (unless `missing_ok`), unreadable, not JSON, or its
        fields have the wrong types; the message names the file.
    """
    side = sidecar_path(path)
    try:
        text = side.read_text(encoding="utf-8")
    except FileNotFoundError:
        if missing_ok:
            return {}
        raise InputError(f"{side}: no metadata sidecar") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{side}: cannot read metadata sidecar ({exc})") from None
    try:
        data = jsonio.loads(text)
    except ValueError as exc:
        raise InputError(f"{side}: corrupt metadata sidecar ({jsonio.describe(exc)})") from None
    if not isinstance(data, dict) or data.get("format") != SIDECAR_FORMAT:
        raise InputError(f"{side}: not a swingmeter metadata sidecar")
    for key, types in _SIDECAR_TYPES.items():
        value = data.get(key)
        if not isinstance(value, types) or isinstance(value, bool):
            raise InputError(f"{side}: corrupt metadata sidecar ({key}={value!r})")
    if data["mode"] not in MODES or not data["fs_hz"] > 0 or data["channels"] < 1:
        raise InputError(
            f"{side}: corrupt metadata sidecar (mode={data['mode']!r}, "
            f"fs_hz={data['fs_hz']!r}, channels={data['channels']!r})"
        )
    return data


def meta_from_sidecar(
    data: dict[str, Any], *, source: str, frames: int | None = None
) -> StreamMeta:
    """Build the StreamMeta of a recording from its sidecar.

    Parameters
    ----------
    data : dict
        The sidecar, as returned by `read_sidecar` (types already checked).
    source : str
        The recording's path, for messages.
    frames : int or None
        Frames in the file, if known.

    Returns
    -------
    StreamMeta
        With the recorded mode, rate, channels (of the file), dial, sideband, harmonic,
        clock_ppm and profile; `extra` holds the recording device and UTC start.
    """
    return StreamMeta(
        source=source,
        fs_hz=float(data["fs_hz"]),
        channels=int(data["channels"]),
        mode=data["mode"],
        clock_ppm=float(data.get("clock_ppm") or 0.0),
        center_hz=data.get("center_hz"),
        dial_hz=data.get("dial_hz"),
        sideband=data.get("sideband", "upper"),
        harmonic=int(data.get("harmonic") or 1),
        profile=data.get("profile"),
        frames=frames,
        extra={"recorded_from": data.get("device"), "start_utc": data.get("start_utc")},
    )


@dataclass(frozen=True)
class RecordingSummary:
    """What a finished recording holds.

    Attributes
    ----------
    path : str
        The sample file (WAV/RF64, or the `.sigmf-data` file).
    sidecar : str
        The metadata sidecar.
    container : str
        'WAV', 'RF64' or 'SigMF'.
    subtype : str
        libsndfile subtype ('PCM_24', 'FLOAT', ...) or the SigMF datatype.
    frames : int
        Frames written.
    duration_s : float
        frames / fs_hz.
    gaps : int
        Places where the stream lost input (overflows, dropped blocks) in the recording.
    lost_frames : int
        Frames missing at those places (they are not filled in the file).
    """

    path: str
    sidecar: str
    container: str
    subtype: str
    frames: int
    duration_s: float
    gaps: int
    lost_frames: int


# -- sinks: the file formats, used only by the writer thread -------------------------------


class _SoundFileSink:
    def __init__(self, path: Path, fs_hz: float, channels: int, subtype: str, container: str):
        import soundfile as sf

        self._sf = sf
        self.path = path
        self.channels = channels
        self.bytes_per_frame = channels * SAMPLE_BYTES[subtype]
        self.container = container
        self.pcm = subtype.startswith("PCM")
        try:
            self.f = sf.SoundFile(
                str(path), "w", samplerate=round(fs_hz), channels=channels,
                subtype=subtype, format=container,
            )  # fmt: skip
        except (RuntimeError, OSError) as exc:
            raise InputError(f"cannot create {path}: {_reason(exc, path)}") from None
        self.auto_header = _USE_LIBSNDFILE_AUTO_HEADER and self._command(SFC_SET_UPDATE_HEADER_AUTO)
        if container == "RF64":
            self._command(SFC_RF64_AUTO_DOWNGRADE)
        self._data_offset: int | None = None
        self.frames = 0

    def _command(self, cmd: int) -> bool:
        # Private soundfile attributes (_snd, _ffi, SoundFile._file): present in
        # soundfile 0.10 to 0.14; without them the fallback below takes over.
        try:
            snd, ffi, handle = self._sf._snd, self._sf._ffi, self.f._file
        except AttributeError:
            return False
        return bool(snd.sf_command(handle, cmd, ffi.NULL, SF_TRUE))

    def write(self, frames: np.ndarray) -> None:
        if self.pcm:
            # libsndfile does not clip float -> int by default; out-of-range values wrap.
            frames = np.clip(frames, -1.0, 1.0)
        self.f.write(frames)
        self.frames += len(frames)
        if not self.auto_header and self.container == "WAV":
            self._patch_wav_sizes()

    def _patch_wav_sizes(self) -> None:
        """Fallback: write the RIFF and data sizes ourselves (plain WAV only)."""
        with open(self.path, "r+b") as fh:
            if self._data_offset is None:
                pos = 12
                while True:
                    fh.seek(pos)
                    head = fh.read(8)
                    if len(head) < 8:
                        return
                    cid, size = struct.unpack("<4sI", head)
                    if cid == b"data":
                        self._data_offset = pos + 8
                        break
                    pos += 8 + size + (size & 1)
            data_bytes = self.frames * self.bytes_per_frame
            fh.seek(4)
            fh.write(struct.pack("<I", self._data_offset - 8 + data_bytes))
            fh.seek(self._data_offset - 4)
            fh.write(struct.pack("<I", data_bytes))

    def sync(self) -> None:
        self.f.flush()  # sf_write_sync: fsync

    def close(self) -> None:
        self.f.close()


class _RawSink:
    """SigMF dataset: interleaved little-endian float32 I, Q (cf32_le)."""

    def __init__(self, path: Path):
        self.path = path
        try:
            self.fh = open(path, "wb", buffering=0)  # unbuffered: a kill loses nothing
        except OSError as exc:
            raise InputError(f"cannot create {path}: {_reason(exc, path)}") from None
        self.frames = 0

    def write(self, frames: np.ndarray) -> None:
        self.fh.write(np.ascontiguousarray(frames, dtype="<f4").tobytes())
        self.frames += len(frames)

    def sync(self) -> None:
        os.fsync(self.fh.fileno())

    def close(self) -> None:
        self.fh.close()


def _reason(exc: BaseException, path: Path) -> str:
    text = str(exc).strip()
    try:
        free = shutil.disk_usage(path.parent if path.parent.exists() else Path.cwd()).free
    except OSError:
        free = None
    if free is not None and free < (1 << 20):
        return f"the disk is full ({free} bytes free)"
    if isinstance(exc, OSError) and exc.strerror:
        return exc.strerror
    if not text or text.rstrip(".").lower() == "system error":
        # libsndfile reports ENOSPC / EFBIG as a bare "System error".
        return "the disk is full or a file size limit was reached (system error)"
    return text


# -- the recorder ---------------------------------------------------------------------------


class Recorder:
    """Write blocks to a crash-safe WAV/RF64 file (or SigMF) with a metadata sidecar.

    Parameters
    ----------
    path : path-like
        Output file, e.g. `bench.wav`. With `sigmf=True` the extension is replaced and the
        recording is `bench.sigmf-data` + `bench.sigmf-meta`.
    meta : StreamMeta
        The stream's metadata (as carried by its blocks).
    subtype : str or None
        'PCM_16', 'PCM_24', 'PCM_32', 'FLOAT' or 'DOUBLE'; None for `default_subtype`.
        SigMF recordings are always cf32_le (FLOAT).
    sigmf : bool
        Write an I/Q recording as SigMF (`core:sample_rate`, `core:frequency` from
        `center_hz` or else `dial_hz`, `core:datetime`). Needs mode 'iq'.
    duration_s : float or None
        Expected duration, to choose WAV or RF64 (see `choose_container`).
    queue_blocks : int
        Bound of the queue to the writer thread (default 256 blocks); `write` waits when
        it is full, so a slow disk pushes back on the caller instead of eating memory.

    Raises
    ------
    ValueError
        For a bad subtype, a SigMF request in a real mode or a bad duration.
    InputError
        If the file cannot be created (unwritable path, missing directory, full disk).

    Notes
    -----
    The sidecar `<file>.swingmeter.json` is written when the first block arrives (with
    the UTC start time of that block's first sample, to within the device latency) and
    again on `close()` with the frame count, the end time and the gaps: places where the
    stream lost input, as `{"frame": index in the file, "lost_frames": n}`. Lost input
    is not filled in; the file holds the samples delivered.
    """

    def __init__(
        self,
        path: str | os.PathLike,
        meta: StreamMeta,
        *,
        subtype: str | None = None,
        sigmf: bool = False,
        duration_s: float | None = None,
        queue_blocks: int = 256,
    ) -> None:
        if not isinstance(meta, StreamMeta):
            raise TypeError(f"meta must be a StreamMeta, not {type(meta).__name__}")
        if duration_s is not None and not (math.isfinite(duration_s) and duration_s > 0):
            raise ValueError(f"duration_s={duration_s} must be positive (or None)")
        if not isinstance(queue_blocks, int) or queue_blocks < 1:
            raise ValueError(f"queue_blocks={queue_blocks!r} must be an integer >= 1")
        self.meta = meta
        self.channels = 2 if meta.mode == "iq" else 1
        path = Path(path)
        if sigmf:
            if meta.mode != "iq":
                raise ValueError(f"sigmf=True needs mode 'iq', not {meta.mode!r}")
            if subtype not in (None, "FLOAT"):
                raise ValueError(f"subtype={subtype!r}: SigMF recordings are cf32_le (FLOAT)")
            base = path.name
            for ext in (".sigmf-data", ".sigmf-meta", ".sigmf", ".wav", ".WAV"):
                if base.endswith(ext):
                    base = base[: -len(ext)]
                    break
            self.path = path.with_name(base + ".sigmf-data")
            self.sigmf_meta_path: Path | None = path.with_name(base + ".sigmf-meta")
            self.subtype = "cf32_le"
            self.container = "SigMF"
        else:
            self.subtype = subtype if subtype is not None else default_subtype(meta.mode)
            self.container = choose_container(duration_s, meta.fs_hz, self.channels, self.subtype)
            self.path = path
            self.sigmf_meta_path = None
        self.sidecar = sidecar_path(self.path)
        check_output_path(self.path)
        if sigmf:
            self._sink: _SoundFileSink | _RawSink = _RawSink(self.path)
        else:
            self._sink = _SoundFileSink(
                self.path, meta.fs_hz, self.channels, self.subtype, self.container
            )
        self._limit_bytes = WAV_LIMIT_BYTES if self.container == "WAV" else None
        self._queue: queue.Queue = queue.Queue(maxsize=queue_blocks)
        self._error: InputError | None = None
        self._frames_queued = 0
        self._frames_written = 0
        self._next_start: int | None = None
        self._stream_start: int | None = None
        self._gaps: list[dict[str, int]] = []
        self._lost_frames = 0
        self._start_time: float | None = None
        self._closed = False
        self._summary: RecordingSummary | None = None
        self._thread = threading.Thread(target=self._run, name="swingmeter-writer", daemon=True)
        self._thread.start()

    # -- properties -----------------------------------------------------------------------

    @property
    def frames_queued(self) -> int:
        """Frames handed to the writer so far."""
        return self._frames_queued

    @property
    def frames_written(self) -> int:
        """Frames the writer thread has written to the file so far."""
        return self._frames_written

    @property
    def error(self) -> InputError | None:
        """The writer's error, if it stopped on one."""
        return self._error

    # -- the writer thread ----------------------------------------------------------------

    def _run(self) -> None:
        last_sync = time.monotonic()
        try:
            while True:
                item = self._queue.get()
                if item is None:
                    break
                if self._error is not None:
                    continue  # keep draining so that `write` never blocks for ever
                try:
                    self._sink.write(item)
                    self._frames_written += len(item)
                    if time.monotonic() - last_sync > _FSYNC_EVERY_S:
                        self._sink.sync()
                        last_sync = time.monotonic()
                except Exception as exc:  # any failure ends the file cleanly, never the caller
                    held = self._frames_written
                    self._error = InputError(
                        f"cannot write {self.path}: {_reason(exc, self.path)}; the file holds "
                        f"the {held} frames ({held / self.meta.fs_hz:.2f} s) written before"
                    )
        finally:
            with contextlib.suppress(RuntimeError, OSError, AssertionError):
                self._sink.sync()
            with contextlib.suppress(RuntimeError, OSError, AssertionError):
                self._sink.close()

    # -- the caller's side ----------------------------------------------------------------

    def _frames_of(self, block: Block) -> np.ndarray:
        x = block.samples
        if self.meta.mode == "iq":
            if not np.iscomplexobj(x):
                raise TypeError("iq blocks must hold complex samples")
            return np.stack([x.real, x.imag], axis=1).astype(np.float32)
        if np.iscomplexobj(x):
            raise TypeError(f"{self.meta.mode} blocks must hold real samples")
        return np.asarray(x, dtype=np.float64 if self.subtype == "DOUBLE" else np.float32)

    def write(self, block: Block) -> None:
        """Hand a block to the writer thread (waits while its queue is full).

        Raises
        ------
        InputError
            If the writer failed (disk full, file gone); the file keeps what was written.
        ValueError
            If the block's rate or mode differ from the recording's, or it starts before
            the end of the previous block.
        TypeError
            If the samples are not real (audio/beat) or complex (iq).
        """
        if self._closed:
            raise ValueError(f"recorder for {self.path} is closed")
        if self._error is not None:
            raise self._error
        if block.meta.fs_hz != self.meta.fs_hz or block.meta.mode != self.meta.mode:
            raise ValueError(
                f"block (fs_hz={block.meta.fs_hz}, mode={block.meta.mode!r}) does not match "
                f"the recording (fs_hz={self.meta.fs_hz}, mode={self.meta.mode!r})"
            )
        frames = self._frames_of(block)
        if len(frames) == 0:
            return
        if self._limit_bytes is not None:
            total = (self._frames_queued + len(frames)) * self._sink_bytes_per_frame()
            if total > self._limit_bytes:
                raise InputError(
                    f"{self.path}: the recording would pass the 4 GiB WAV limit; give the "
                    f"expected duration so that RF64 is chosen"
                )
        if self._next_start is None:
            self._stream_start = block.start
            self._start_time = time.time() - len(frames) / self.meta.fs_hz
            self._write_sidecar(complete=False)
        elif block.start < self._next_start:
            raise ValueError(
                f"block.start={block.start} is before the end of the previous block "
                f"({self._next_start})"
            )
        elif block.start > self._next_start:
            lost = block.start - self._next_start
            self._lost_frames += lost
            if len(self._gaps) < 10000:  # bound the sidecar on a very lossy stream
                self._gaps.append({"frame": self._frames_queued, "lost_frames": lost})
        self._next_start = block.start + len(frames)
        while True:
            try:
                self._queue.put(frames, timeout=0.5)
                break
            except queue.Full:
                if self._error is not None:
                    raise self._error from None
                if not self._thread.is_alive():
                    raise InputError(f"{self.path}: the writer thread stopped") from None
        self._frames_queued += len(frames)

    def _sink_bytes_per_frame(self) -> int:
        return self.channels * SAMPLE_BYTES.get(self.subtype, 4)

    def close(self, extra: dict[str, Any] | None = None) -> RecordingSummary:
        """Finish the file (header, sync), write the final sidecar and return a summary.

        Parameters
        ----------
        extra : dict or None
            More JSON-able fields for the sidecar, e.g. the capture counters.

        Raises
        ------
        InputError
            If the writer failed; the file keeps what was written before.
        """
        if self._closed:
            if self._summary is None:
                raise self._error or InputError(f"{self.path}: recording failed")
            return self._summary
        self._closed = True
        self._queue.put(None)
        self._thread.join()
        if self._start_time is None:
            self._start_time = time.time()
        try:
            self._write_sidecar(complete=self._error is None, extra=extra)
        except InputError:
            if self._error is None:
                raise
        if self._error is not None:
            raise self._error
        self._summary = RecordingSummary(
            path=str(self.path),
            sidecar=str(self.sidecar),
            container=self.container,
            subtype=self.subtype,
            frames=self._frames_written,
            duration_s=self._frames_written / self.meta.fs_hz,
            gaps=len(self._gaps),
            lost_frames=self._lost_frames,
        )
        return self._summary

    def __enter__(self) -> Recorder:
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            self.close()
        else:
            with contextlib.suppress(InputError):
                self.close()

    # -- metadata -------------------------------------------------------------------------

    def _sidecar_fields(self, complete: bool) -> dict[str, Any]:
        m = self.meta
        start = self._start_time if self._start_time is not None else time.time()
        fields: dict[str, Any] = {
            "format": SIDECAR_FORMAT,
            "version": SIDECAR_VERSION,
            "written_by": f"swingmeter {__version__}",
            "file": self.path.name,
            "container": self.container,
            "subtype": self.subtype,
            "mode": m.mode,
            "fs_hz": m.fs_hz,
            "channels": self.channels,
            "device": m.source,
            "device_channels": m.channels,
            "dial_hz": m.dial_hz,
            "center_hz": m.center_hz,
            "sideband": m.sideband,
            "harmonic": m.harmonic,
            "clock_ppm": m.clock_ppm,
            "profile": m.profile,
            "start_utc": _utc_iso(start),
            "stream_start": self._stream_start,
            "complete": complete,
        }
        if complete or self._closed:
            fields["frames"] = self._frames_written
            fields["end_utc"] = _utc_iso(start + self._frames_written / m.fs_hz)
            fields["gaps"] = list(self._gaps)
            fields["lost_frames"] = self._lost_frames
        if m.extra:
            fields["stream_extra"] = _jsonable(m.extra)
        return fields

    def _write_sidecar(self, complete: bool, extra: dict[str, Any] | None = None) -> None:
        fields = self._sidecar_fields(complete)
        if extra:
            fields.update(_jsonable(extra))
        target = self.sidecar
        try:
            _write_atomic(target, json.dumps(fields, indent=2) + "\n")
            if self.sigmf_meta_path is not None:
                target = self.sigmf_meta_path
                _write_atomic(target, self._sigmf_text(fields))
        except OSError as exc:
            raise InputError(f"cannot write {target}: {_reason(exc, target)}") from None

    def _sigmf_text(self, fields: dict[str, Any]) -> str:
        from sigmf import SigMFFile

        capture: dict[str, Any] = {"core:datetime": fields["start_utc"]}
        freq = self.meta.center_hz if self.meta.center_hz is not None else self.meta.dial_hz
        if freq is not None:
            capture["core:frequency"] = float(freq)
        doc = SigMFFile(
            global_info={
                "core:datatype": "cf32_le",
                "core:sample_rate": float(self.meta.fs_hz),
                "core:num_channels": 1,
                "core:recorder": f"swingmeter {__version__}",
                "core:description": f"{self.meta.mode} capture from {self.meta.source}",
            },
            skip_checksum=True,
        )
        doc.add_capture(0, metadata=capture)
        return doc.dumps(pretty=True) + "\n"


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (np.floating,)):
        return float(obj)
    if obj is None or isinstance(obj, (str, int, float, bool)):
        return obj
    return str(obj)
