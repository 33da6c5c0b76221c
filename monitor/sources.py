"""Sources: recordings and synthetic streams that yield `Block`s with bounded memory.

Files are read a block at a time, so a one-hour recording costs the same memory as a
one-minute one. Every problem that makes a file unusable becomes one `InputError` naming
the file and the problem; doubtful but usable details land in `warnings`.

Supported: WAV of every common kind (8-bit unsigned, 16/24/32-bit PCM, 32/64-bit float,
WAVE_FORMAT_EXTENSIBLE), RF64, W64 and the other containers libsndfile reads; SigMF
recordings (`.sigmf-meta` / `.sigmf-data`, real and complex datatypes).
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Iterator
from pathlib import Path

import numpy as np

from monitor.blocks import MODES, Block, StreamMeta
from monitor.errors import InputError

MIN_RATE_HZ = 1000.0
MAX_RATE_HZ = 50e6
DEFAULT_BLOCK_FRAMES = 1 << 16

SIGMF_SUFFIXES = (".sigmf-meta", ".sigmf-data", ".sigmf")


def _check_rate(path: str, fs_hz: float) -> None:
    if not (math.isfinite(fs_hz) and MIN_RATE_HZ <= fs_hz <= MAX_RATE_HZ):
        raise InputError(
            f"{path}: sample rate {fs_hz:g} Hz is not usable "
            f"(expected {MIN_RATE_HZ:g} Hz to {MAX_RATE_HZ:g} Hz)"
        )


class _BlockReader:
    """Common iteration: checks every block for NaN/Inf and counts frames."""

    meta: StreamMeta
    warnings: list[str]

    def _raw_blocks(self) -> Iterator[np.ndarray]:  # pragma: no cover - abstract
        raise NotImplementedError

    def __iter__(self) -> Iterator[Block]:
        start = 0
        for samples in self._raw_blocks():
            if samples.size == 0:
                continue
            if not np.all(np.isfinite(samples)):
                bad = int(np.argmin(np.isfinite(samples)))
                raise InputError(
                    f"{self.meta.source}: NaN or infinite sample at "
                    f"{(start + bad) / self.meta.fs_hz:.3f} s (sample {start + bad})"
                )
            yield Block(samples, start, self.meta)
            start += samples.shape[0]
        self.frames_read = start
        expected = self.meta.frames
        if expected is not None and start < expected:
            self.warnings.append(
                f"file is truncated: header promises {expected} frames, found {start}"
            )

    def close(self) -> None:
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.close()


class SoundFileSource(_BlockReader):
    """A WAV/RF64/W64 (or other libsndfile) recording.

    Parameters
    ----------
    path : str or Path
    mode : {"audio", "beat", "iq"}
        `audio`/`beat` deliver one real channel (`channel`, or the mean of all channels
        with `mix`); `iq` needs two channels: left = I, right = Q (`swap_iq` swaps them).
    channel : int
        Zero-based channel for `audio`/`beat` (default 0).
    """

    def __init__(
        self,
        path: str | os.PathLike,
        *,
        mode: str = "audio",
        channel: int = 0,
        mix: bool = False,
        swap_iq: bool = False,
        block_frames: int = DEFAULT_BLOCK_FRAMES,
        meta: dict | None = None,
    ):
        import soundfile as sf

        self.path = str(path)
        self.warnings: list[str] = []
        _check_exists(self.path)
        try:
            self._f = sf.SoundFile(self.path)
        except (sf.LibsndfileError, RuntimeError, TypeError, ValueError) as exc:
            raise InputError(f"{self.path}: not a readable audio file ({exc})") from None
        info = self._f
        fs = float(info.samplerate)
        try:
            _check_rate(self.path, fs)
            channels = int(info.channels)
            frames = int(info.frames)
            if frames <= 0:
                raise InputError(f"{self.path}: holds no audio samples")
            if mode == "iq":
                if channels != 2:
                    raise InputError(
                        f"{self.path}: has {channels} channel(s); --mode iq needs a stereo "
                        "file with I on the left and Q on the right"
                    )
            elif not mix and not 0 <= channel < channels:
                raise InputError(
                    f"{self.path}: --channel {channel} does not exist "
                    f"(the file has {channels} channel(s), numbered from 0)"
                )
        except InputError:
            self._f.close()
            raise
        self.mode = mode
        self.channel = channel
        self.mix = mix
        self.swap_iq = swap_iq
        self.block_frames = int(block_frames)
        if channels == 2 and mode != "iq" and _looks_like_iq(self._f):
            self.warnings.append(
                "the two channels look like I/Q (equal level, 90 degrees apart): "
                "use --mode iq to read them as one complex signal"
            )
        extra = {"format": info.format, "subtype": info.subtype}
        self.meta = StreamMeta(
            source=self.path,
            fs_hz=fs,
            channels=channels,
            mode=mode,
            frames=frames,
            extra=extra,
            **(meta or {}),
        )

    def _raw_blocks(self) -> Iterator[np.ndarray]:
        import soundfile as sf

        f = self._f
        f.seek(0)
        while True:
            try:
                data = f.read(self.block_frames, dtype="float64", always_2d=True)
            except (sf.LibsndfileError, RuntimeError) as exc:
                raise InputError(f"{self.path}: read failed ({exc})") from None
            if data.shape[0] == 0:
                return
            if self.mode == "iq":
                i, q = data[:, 0], data[:, 1]
                if self.swap_iq:
                    i, q = q, i
                yield i + 1j * q
            elif self.mix:
                yield data.mean(axis=1)
            else:
                yield np.ascontiguousarray(data[:, self.channel])

    def close(self) -> None:
        self._f.close()


class SigMFSource(_BlockReader):
    """A SigMF recording (metadata + data), read through the `sigmf` package.

    The sample rate comes from `core:sample_rate` and the centre frequency from the first
    capture's `core:frequency`. Complex datatypes need `--mode iq`; real ones the others.
    """

    def __init__(
        self,
        path: str | os.PathLike,
        *,
        mode: str = "iq",
        channel: int = 0,
        swap_iq: bool = False,
        block_frames: int = DEFAULT_BLOCK_FRAMES,
        meta: dict | None = None,
    ):
        self.path = str(path)
        self.warnings: list[str] = []
        meta_path = _sigmf_meta_path(self.path)
        _check_exists(meta_path)
        try:
            from sigmf import sigmffile

            self._f = sigmffile.fromfile(meta_path, skip_checksum=True)
        except Exception as exc:  # sigmf raises many types for broken recordings
            raise InputError(
                f"{self.path}: not a readable SigMF recording ({type(exc).__name__}: {exc})"
            ) from None
        g = self._f.get_global_info()
        datatype = str(g.get("core:datatype", ""))
        fs = g.get("core:sample_rate")
        if not isinstance(fs, (int, float)):
            raise InputError(f"{self.path}: SigMF metadata has no numeric core:sample_rate")
        fs = float(fs)
        _check_rate(self.path, fs)
        is_complex = datatype.startswith("c")
        if mode == "iq" and not is_complex:
            raise InputError(
                f"{self.path}: SigMF datatype {datatype!r} is real; --mode iq needs complex "
                "samples (use --mode audio or beat)"
            )
        if mode != "iq" and is_complex:
            raise InputError(
                f"{self.path}: SigMF datatype {datatype!r} is complex I/Q; use --mode iq"
            )
        try:
            frames = int(self._f.sample_count)
        except Exception:
            frames = 0
        if frames <= 0:
            raise InputError(f"{self.path}: SigMF recording holds no samples")
        channels = int(g.get("core:num_channels", 1) or 1)
        if not 0 <= channel < channels:
            raise InputError(
                f"{self.path}: --channel {channel} does not exist ({channels} channel(s))"
            )
        captures = self._f.get_captures() or [{}]
        center = captures[0].get("core:frequency")
        extra = {
            "datatype": datatype,
            "datetime": captures[0].get("core:datetime"),
            "description": g.get("core:description"),
        }
        self.mode, self.channel, self.swap_iq = mode, channel, swap_iq
        self.channels = channels
        self.block_frames = int(block_frames)
        fields = dict(meta or {})
        if fields.get("center_hz") is None and isinstance(center, (int, float)):
            fields["center_hz"] = float(center)
        self.meta = StreamMeta(
            source=self.path,
            fs_hz=fs,
            channels=channels,
            mode=mode,
            frames=frames,
            extra=extra,
            **fields,
        )

    def _raw_blocks(self) -> Iterator[np.ndarray]:
        total = self.meta.frames or 0
        pos = 0
        while pos < total:
            count = min(self.block_frames, total - pos)
            try:
                data = np.asarray(self._f.read_samples(start_index=pos, count=count))
            except Exception as exc:
                raise InputError(
                    f"{self.path}: read failed at sample {pos} ({type(exc).__name__}: {exc})"
                ) from None
            if data.ndim == 2:
                data = data[:, self.channel]
            if data.shape[0] == 0:
                return
            if self.mode == "iq":
                data = data.astype(np.complex128)
                if self.swap_iq:
                    data = data.imag + 1j * data.real
            else:
                data = data.astype(np.float64)
            yield data
            pos += data.shape[0]


class ArraySource(_BlockReader):
    """Samples already in memory (tests, synthetic signals, replays), in blocks."""

    def __init__(
        self,
        samples: np.ndarray,
        fs_hz: float,
        *,
        mode: str = "audio",
        block_frames: int = DEFAULT_BLOCK_FRAMES,
        source: str = "<array>",
        meta: dict | None = None,
    ):
        x = np.asarray(samples)
        if x.ndim != 1:
            raise ValueError(f"samples must be one-dimensional, got shape {x.shape}")
        if mode == "iq":
            x = x.astype(np.complex128)
        elif np.iscomplexobj(x):
            raise TypeError("complex samples need mode='iq'")
        else:
            x = x.astype(np.float64)
        self._x = x
        self.warnings: list[str] = []
        self.block_frames = int(block_frames)
        self.meta = StreamMeta(
            source=source, fs_hz=float(fs_hz), mode=mode, frames=x.shape[0], **(meta or {})
        )

    def _raw_blocks(self) -> Iterator[np.ndarray]:
        for i in range(0, self._x.shape[0], self.block_frames):
            yield self._x[i : i + self.block_frames]


def _looks_like_iq(f) -> bool:
    """True when the first second of a stereo file behaves like I/Q: both channels carry
    a signal of equal level, uncorrelated with each other, and Q is (close to) the Hilbert
    transform of I."""
    from scipy.signal import hilbert

    f.seek(0)
    data = f.read(min(int(f.samplerate), 1 << 17), dtype="float64", always_2d=True)
    f.seek(0)
    if data.shape[0] < 256:
        return False
    i, q = data[:, 0] - data[:, 0].mean(), data[:, 1] - data[:, 1].mean()
    pi, pq = float(np.dot(i, i)), float(np.dot(q, q))
    if pi <= 0 or pq <= 0 or not 0.5 < pi / pq < 2.0:
        return False
    if abs(float(np.dot(i, q))) > 0.3 * math.sqrt(pi * pq):
        return False
    h = np.imag(hilbert(i))
    c = abs(float(np.dot(h, q))) / math.sqrt(float(np.dot(h, h)) * pq)
    return c > 0.9


def _check_exists(path: str) -> None:
    p = Path(path)
    if not p.exists():
        raise InputError(f"{path}: file not found")
    if p.is_dir():
        raise InputError(f"{path}: is a directory, not a recording")
    if p.stat().st_size == 0:
        raise InputError(f"{path}: file is empty")


def _sigmf_meta_path(path: str) -> str:
    for suffix in (".sigmf-data", ".sigmf-meta"):
        if path.endswith(suffix):
            return path[: -len(suffix)] + ".sigmf-meta"
    return path


def is_sigmf(path: str | os.PathLike) -> bool:
    return str(path).endswith(SIGMF_SUFFIXES)


def sidecar_metadata(path: str | os.PathLike) -> dict:
    """StreamMeta fields stored beside a recording by `swingmeter record`, if any."""
    from monitor.record import read_sidecar

    data = read_sidecar(path, missing_ok=True)
    keys = ("dial_hz", "center_hz", "clock_ppm", "harmonic", "sideband", "profile")
    return {k: data[k] for k in keys if data.get(k) is not None}


def recorded_mode(path: str | os.PathLike) -> str | None:
    """The mode a recording says it was made in: its sidecar's, or `iq` for complex SigMF."""
    path = str(path)
    if is_sigmf(path):
        meta_path = Path(_sigmf_meta_path(path))
        try:
            g = json.loads(meta_path.read_text(encoding="utf-8")).get("global", {})
        except (OSError, UnicodeDecodeError, json.JSONDecodeError, AttributeError):
            return None  # the reader will say what is wrong
        datatype = str(g.get("core:datatype", "")) if isinstance(g, dict) else ""
        return "iq" if datatype.startswith("c") else None
    from monitor.record import read_sidecar

    try:
        mode = read_sidecar(path, missing_ok=True).get("mode")
    except InputError:
        return None
    return mode if mode in MODES else None


def open_source(
    path: str | os.PathLike,
    *,
    mode: str = "audio",
    channel: int = 0,
    mix: bool = False,
    swap_iq: bool = False,
    block_frames: int = DEFAULT_BLOCK_FRAMES,
    meta: dict | None = None,
):
    """Open a recording for block reading, choosing the reader by file name.

    `meta` holds StreamMeta fields given by the user (dial, sideband, harmonic, clock);
    they override what the file or its sidecar says.
    """
    if mode not in MODES:
        raise ValueError(f"mode={mode!r} must be one of {MODES}")
    path = str(path)
    fields = {}
    if not is_sigmf(path):
        fields.update(sidecar_metadata(path))
    fields.update({k: v for k, v in (meta or {}).items() if v is not None})
    if is_sigmf(path):
        return SigMFSource(
            path,
            mode=mode,
            channel=channel,
            swap_iq=swap_iq,
            block_frames=block_frames,
            meta=fields,
        )
    return SoundFileSource(
        path,
        mode=mode,
        channel=channel,
        mix=mix,
        swap_iq=swap_iq,
        block_frames=block_frames,
        meta=fields,
    )
