"""Sources: recordings and synthetic streams that yield `Block`s with bounded memory.

Files are read a block at a time, so a one-hour recording costs the same memory as a
one-minute one. Every problem that makes a file unusable becomes one `InputError` naming
the file and the problem; doubtful but usable details land in `warnings`.

Supported: WAV of every common kind (8-bit unsigned, 16/24/32-bit PCM, 32/64-bit float,
WAVE_FORMAT_EXTENSIBLE), RF64, W64 and the other containers libsndfile reads; SigMF
recordings (`.sigmf-meta` / `.sigmf-data`, real and complex datatypes).
"""

from __future__ import annotations

import itertools
import json
import math
import os
import warnings
from collections.abc import Iterator
from pathlib import Path

import numpy as np

from monitor.blocks import MODES, Block, StreamMeta
from monitor.errors import InputError

MIN_RATE_HZ = 1000.0
MAX_RATE_HZ = 50e6
DEFAULT_BLOCK_FRAMES = 1 << 16
# Samples (all channels together) fetched per read: whatever a header claims about its
# channels, one read never allocates more than 16 MiB of float64.
MAX_READ_SAMPLES = 1 << 21
#: whole gates a block of a recording holds, where they fit in MAX_READ_SAMPLES and
#: BATCH_BYTES (as float64 samples)
BATCH_GATES = 8
BATCH_BYTES = 4 << 20
# Non-finite runs closer than this many samples count as one stretch: each stretch splits
# the blocks (a flagged block starts at it), so scattered NaNs must not make a block per
# sample. 16 samples is the engine's shortest gate.
NAN_JOIN_SAMPLES = 16
# A float file's sample beyond this many times full scale (+120 dBFS) is garbage (a
# mis-declared format, a broken writer), not audio; left in, its square overflows the
# spectra. It is treated as a non-finite sample.
MAX_ABS_SAMPLE = 1e6
# Stretches named in the warning; the rest are counted.
NAN_SPANS_LISTED = 5
# Sidecar field limits: a sound-card clock is off by tens of ppm (common practice); a
# factor (1 + ppm * 1e-6) near zero or negative is a corrupt file, not a card.
MAX_ABS_CLOCK_PPM = 1e5
MAX_HARMONIC = 1000

SIGMF_SUFFIXES = (".sigmf-meta", ".sigmf-data", ".sigmf")


def _check_rate(path: str, fs_hz: float) -> None:
    if not (math.isfinite(fs_hz) and MIN_RATE_HZ <= fs_hz <= MAX_RATE_HZ):
        raise InputError(
            f"{path}: sample rate {fs_hz:g} Hz is not usable "
            f"(expected {MIN_RATE_HZ:g} Hz to {MAX_RATE_HZ:g} Hz)"
        )


def _check_block_frames(block_frames) -> int:
    if isinstance(block_frames, bool) or not isinstance(block_frames, (int, np.integer)):
        raise TypeError(f"block_frames must be an integer, got {type(block_frames).__name__}")
    if block_frames < 1:
        raise ValueError(f"block_frames={block_frames} must be at least 1")
    return int(block_frames)


def _is_number(value) -> bool:
    """A JSON number that fits a float (bools and 400-digit integers are not)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return False
    try:
        return math.isfinite(float(value))
    except OverflowError:
        return False


class _NonFinite:
    """Bookkeeping of the non-finite samples replaced while a stream is read."""

    def __init__(self):
        self.count = 0
        self.out_of_range = 0  # finite but beyond MAX_ABS_SAMPLE
        self.n_spans = 0
        self.listed: list[list[int]] = []  # [first, last] sample of the first stretches
        self.last: list[int] | None = None  # the stretch still growing

    def add(self, first: int, last: int) -> None:
        if self.last is not None and first - self.last[1] <= NAN_JOIN_SAMPLES:
            self.last[1] = last
            return
        self.n_spans += 1
        self.last = [first, last]
        if len(self.listed) < NAN_SPANS_LISTED:
            self.listed.append(self.last)  # the same list: it grows with `last`

    def message(self, fs_hz: float) -> str:
        def span(a: int, b: int) -> str:
            ta, tb = f"{a / fs_hz:.3f}", f"{b / fs_hz:.3f}"
            return f"{ta} s" if ta == tb else f"{ta}-{tb} s"

        where = ", ".join(span(a, b) for a, b in self.listed)
        more = self.n_spans - len(self.listed)
        if more > 0:
            where += f" and {more} more stretch{'es' if more > 1 else ''}"
        what = "NaN/Inf" if not self.out_of_range else "NaN/Inf or out-of-range"
        what += " sample" if self.count == 1 else " samples"
        return (
            f"{self.count} {what} at {where} replaced by silence; gates across them are not joined"
        )


#: libsndfile subtypes read as integers: (numpy dtype, scale to full scale 1.0)
_INTEGER_READS = {
    "PCM_S8": ("int16", 2.0**-15),
    "PCM_U8": ("int16", 2.0**-15),
    "PCM_16": ("int16", 2.0**-15),
    "PCM_24": ("int32", 2.0**-31),
    "PCM_32": ("int32", 2.0**-31),
}


#: containers whose integer reads were checked to equal libsndfile's float conversion
#: exactly (others, such as SDS, scale differently and keep libsndfile's own conversion)
_INTEGER_CONTAINERS = frozenset({"WAV", "WAVEX", "RF64", "W64", "AIFF", "CAF", "FLAC", "AU"})


class NonFiniteSamples(ValueError):
    """A stretch read with `blocks_between` holds NaN, inf or absurd float samples."""


def _all_in_range(samples: np.ndarray) -> bool:
    """Every sample finite and within MAX_ABS_SAMPLE: two reductions, no temporaries (a
    NaN anywhere makes min and max NaN, and the comparisons False)."""
    v = samples
    if v.dtype.kind == "c":
        if not v.flags.c_contiguous:
            return False  # the caller's element-wise check decides
        v = v.view(np.float64)
    if v.size == 0:
        return True
    return bool(v.max() <= MAX_ABS_SAMPLE) and bool(v.min() >= -MAX_ABS_SAMPLE)


class _BlockReader:
    """Common iteration: counts frames, replaces non-finite samples by silence.

    A stretch of NaN/Inf samples (a converter or a writer that failed for a moment), or
    of float samples beyond MAX_ABS_SAMPLE times full scale, is replaced by zeros and
    treated as lost input: the block is split so that one block starts where the
    stretch starts and one where it ends, both flagged `overflow`, so the engine does
    not follow the phase across the gap. The stretches are named in
    `warnings`. A stream with no finite sample at all raises `InputError` at its end.
    """

    meta: StreamMeta
    warnings: list[str]
    #: True when every sample comes from an integer (PCM) file: none can be non-finite
    _integer_samples = False
    #: True lets a file reader fill the same arrays on every read, so a block's samples
    #: hold only until the next block is asked for. A consumer that measures each block
    #: before reading on and copies what it keeps (the engine in the FM modes) sets it:
    #: a fresh multi-megabyte array a read costs page faults, a few per cent of an FM
    #: analysis.
    reuse_buffers = False

    def _raw_blocks(self) -> Iterator[np.ndarray]:  # pragma: no cover - abstract
        raise NotImplementedError

    def prefer_block_frames(self, n: int, gates: int = BATCH_GATES) -> None:
        """Read blocks of a multiple of n frames (the engine's gate), up to `gates` of
        them and BATCH_BYTES of samples: the engine then measures whole gates without
        copying them, several at a time where its processor can (beyond a few MB a
        batch stops paying: the gates' arrays no longer stay in the caches)."""
        n = int(n)
        channels = max(self.meta.channels, 1)
        cap = MAX_READ_SAMPLES // channels
        if 0 < n <= cap:
            fit = max(1, BATCH_BYTES // (8 * channels * n))
            want = max(DEFAULT_BLOCK_FRAMES, n * max(1, min(int(gates), fit)))
            self._read_frames = n * max(1, min(want, cap) // n)

    def _warn(self, text: str) -> None:
        if text not in self.warnings:  # iterating twice must not say it twice
            self.warnings.append(text)

    def __iter__(self) -> Iterator[Block]:
        start = 0
        bad = _NonFinite()
        for samples in self._raw_blocks():
            n = samples.shape[0]
            if n == 0:
                continue
            if self._integer_samples:  # read from integers: finite and in range
                yield Block(samples, start, self.meta)
                start += n
                continue
            if _all_in_range(samples):
                yield Block(samples, start, self.meta)
                start += n
                continue
            with np.errstate(invalid="ignore"):
                finite = np.abs(samples) <= MAX_ABS_SAMPLE  # False for NaN and Inf too
            yield from self._split_non_finite(samples, finite, start, bad)
            start += n
        self.frames_read = start
        if bad.count:
            if bad.count >= start:
                raise InputError(
                    f"{self.meta.source}: no usable samples: all {start} samples are NaN or "
                    f"infinite (or beyond {MAX_ABS_SAMPLE:g} times full scale)"
                )
            self._warn(bad.message(self.meta.fs_hz))
        expected = self.meta.frames
        if expected is not None and start < expected:
            self._warn(f"file is truncated: header promises {expected} frames, found {start}")

    def _split_non_finite(
        self, samples: np.ndarray, finite: np.ndarray, start: int, bad: _NonFinite
    ) -> Iterator[Block]:
        idx = np.flatnonzero(~finite)
        bad.count += int(idx.size)
        bad.out_of_range += int(np.count_nonzero(np.isfinite(samples[idx])))
        samples = np.where(finite, samples, 0.0).astype(samples.dtype, copy=False)
        gaps = np.flatnonzero(np.diff(idx) > NAN_JOIN_SAMPLES)
        firsts = idx[np.r_[0, gaps + 1]]
        lasts = idx[np.r_[gaps, idx.size - 1]]
        cuts = set()
        for a, b in zip(firsts.tolist(), lasts.tolist(), strict=True):
            bad.add(start + a, start + b)
            cuts.add(a)
            cuts.add(b + 1)
        n = samples.shape[0]
        edges = sorted(cuts | {0, n})
        for p, q in itertools.pairwise(edges):
            if q > p:
                yield Block(samples[p:q], start + p, self.meta, overflow=p in cuts)

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
        block_frames = _check_block_frames(block_frames)
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
        self.block_frames = block_frames
        self._read_frames = max(1, min(block_frames, MAX_READ_SAMPLES // max(channels, 1)))
        # _direct_read: (the dtype to read as, the scale to float64) where libsndfile's own
        # conversion is bypassed. PCM is read as integers and scaled here: the same values
        # libsndfile's own conversion gives (k / 2^15 for 8- and 16-bit, k / 2^31 for the
        # left-justified 24- and 32-bit), in half the time, and none of them can be NaN or
        # out of range
        self._direct_read = (
            _INTEGER_READS.get(str(info.subtype))
            if str(info.format) in _INTEGER_CONTAINERS
            else None
        )
        self._integer_samples = self._direct_read is not None
        # 32-bit float samples are read as stored and widened here: the same values
        # (float32 to float64 is exact) in a third of the time of libsndfile's conversion
        if (
            self._direct_read is None
            and str(info.subtype) == "FLOAT"
            and str(info.format) in _INTEGER_CONTAINERS
        ):
            self._direct_read = ("float32", 1.0)
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

    @property
    def integer_samples(self) -> bool:
        """True for integer PCM files: every sample is finite and within full scale."""
        return self._integer_samples

    def samples_between(self, start: int, stop: int) -> np.ndarray:
        """Frames [start, stop) as one new array (`blocks_between` joined: never a
        refilled buffer)."""
        # with reuse_buffers each block is overwritten by the next read: copy it first
        keep = np.copy if self.reuse_buffers else np.asarray
        return np.concatenate([keep(b.samples) for b in self.blocks_between(start, stop)])

    def blocks_between(self, start: int, stop: int) -> Iterator[Block]:
        """Blocks of frames [start, stop) (stream indices as in a whole read).

        A part of a recording analysed on its own (as `monitor.parallel` does) reads its
        samples here. They get none of the NaN/Inf bookkeeping of a whole read: a float
        sample that is not finite or beyond MAX_ABS_SAMPLE raises `NonFiniteSamples`,
        and the caller reads the recording whole instead.
        """
        pos = start
        for samples in self._raw_blocks(start, stop):
            if not self._integer_samples and not _all_in_range(samples):
                raise NonFiniteSamples(f"{self.path}: non-finite samples from frame {pos} on")
            yield Block(samples, pos, self.meta)
            pos += samples.shape[0]

    def _raw_blocks(self, start: int = 0, stop: int | None = None) -> Iterator[np.ndarray]:
        import soundfile as sf

        f = self._f
        try:
            f.seek(start)
        except (sf.LibsndfileError, RuntimeError) as exc:
            raise InputError(f"{self.path}: cannot seek to frame {start} ({exc})") from None
        dtype, scale = self._direct_read or ("float64", None)
        mono = self.meta.channels == 1
        left = math.inf if stop is None else stop - start
        raw = wide = None  # the arrays refilled on every read (reuse_buffers)
        if self.reuse_buffers:
            shape = (self._read_frames,) if mono else (self._read_frames, self.meta.channels)
            raw = np.empty(shape, dtype=dtype)
            wide = raw if scale is None else np.empty(shape)
        while left > 0:
            want = int(min(self._read_frames, left))
            try:
                out = None if raw is None else raw[:want]
                data = f.read(want, dtype=dtype, always_2d=not mono, out=out)
            except (sf.LibsndfileError, RuntimeError) as exc:
                raise InputError(f"{self.path}: read failed ({exc})") from None
            k = data.shape[0]
            if k == 0:
                return
            left -= k
            if scale is not None and wide is not None:
                if scale == 1.0:
                    np.copyto(wide[:k], data)  # float32 to float64: exact
                else:
                    np.multiply(data, scale, out=wide[:k])
                data = wide[:k]
            elif scale == 1.0:
                data = data.astype(np.float64)
            elif scale is not None:
                data = np.multiply(data, scale, dtype=np.float64)
            if mono:
                yield data
            elif self.mode == "iq":
                # (I, Q) rows are complex samples in memory: a view, no arithmetic
                rows = data[:, ::-1] if self.swap_iq else data
                yield np.ascontiguousarray(rows, dtype=np.float64).view(np.complex128)[:, 0]
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
        block_frames = _check_block_frames(block_frames)
        meta_path = _sigmf_meta_path(self.path)
        _check_exists(meta_path)
        try:
            from sigmf import sigmffile

            with warnings.catch_warnings(record=True) as said:
                warnings.simplefilter("always")
                self._f = sigmffile.fromfile(meta_path, skip_checksum=True)
        except Exception as exc:  # sigmf raises many types for broken recordings
            raise InputError(
                f"{self.path}: not a readable SigMF recording ({type(exc).__name__}: {exc})"
            ) from None
        for w in said:  # sigmf's doubts about the recording are ours to report
            self._warn(f"SigMF: {w.message}")
        if not hasattr(self._f, "read_samples"):
            raise InputError(f"{self.path}: is a SigMF collection, not one recording")
        try:
            g = self._f.get_global_info()
            captures = self._f.get_captures()
        except Exception as exc:  # sigmf's accessors on broken metadata
            raise InputError(
                f"{self.path}: not a readable SigMF recording ({type(exc).__name__}: {exc})"
            ) from None
        if not isinstance(g, dict):
            raise InputError(f"{self.path}: SigMF metadata has no 'global' object")
        datatype = g.get("core:datatype", "")
        if not isinstance(datatype, str):
            raise InputError(f"{self.path}: SigMF core:datatype {datatype!r} is not a string")
        fs = g.get("core:sample_rate")
        if isinstance(fs, bool) or not isinstance(fs, (int, float)):
            raise InputError(f"{self.path}: SigMF metadata has no numeric core:sample_rate")
        try:
            fs = float(fs)
        except OverflowError:
            fs = math.inf
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
        channels = g.get("core:num_channels", 1)
        if channels is None:
            channels = 1
        if isinstance(channels, bool) or not isinstance(channels, int) or not channels >= 1:
            raise InputError(
                f"{self.path}: SigMF core:num_channels {channels!r} is not a positive integer"
            )
        try:
            frames = int(self._f.sample_count)
        except Exception:  # sigmf derives it from the data file; any failure: no samples
            frames = 0
        if frames <= 0:
            raise InputError(f"{self.path}: SigMF recording holds no samples")
        if not 0 <= channel < channels:
            raise InputError(
                f"{self.path}: --channel {channel} does not exist ({channels} channel(s))"
            )
        first = captures[0] if isinstance(captures, list) and captures else {}
        if not isinstance(first, dict):
            first = {}
        center = first.get("core:frequency")
        extra = {
            "datatype": datatype,
            "datetime": first.get("core:datetime"),
            "description": g.get("core:description"),
        }
        self.mode, self.channel, self.swap_iq = mode, channel, swap_iq
        self.channels = channels
        self.block_frames = block_frames
        self._read_frames = max(1, min(block_frames, MAX_READ_SAMPLES // channels))
        fields = dict(meta or {})
        if fields.get("center_hz") is None and _is_number(center):
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
            count = min(self._read_frames, total - pos)
            try:
                with np.errstate(all="ignore"):  # sigmf's casts of wild data: silenced later
                    data = np.asarray(self._f.read_samples(start_index=pos, count=count))
            except Exception as exc:
                raise InputError(
                    f"{self.path}: read failed at sample {pos} ({type(exc).__name__}: {exc})"
                ) from None
            if data.ndim == 2:
                if not 0 <= self.channel < data.shape[1]:
                    raise InputError(
                        f"{self.path}: the data holds {data.shape[1]} channel(s), "
                        f"--channel {self.channel} does not exist"
                    )
                data = data[:, self.channel]
            if data.ndim != 1:
                raise InputError(f"{self.path}: unexpected sample layout {data.shape}")
            if data.shape[0] == 0:
                return
            if self.mode != "iq" and np.iscomplexobj(data):
                raise InputError(f"{self.path}: the data is complex; use --mode iq")
            with np.errstate(invalid="ignore", over="ignore"):  # non-finite: handled later
                data = data.astype(np.complex128 if self.mode == "iq" else np.float64)
            if self.mode == "iq" and self.swap_iq:
                data = data.imag + 1j * data.real
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
        self.block_frames = _check_block_frames(block_frames)
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
    import soundfile as sf
    from scipy.signal import hilbert

    try:
        f.seek(0)
        data = f.read(min(int(f.samplerate), 1 << 17), dtype="float64", always_2d=True)
        f.seek(0)
    except (sf.LibsndfileError, RuntimeError):
        return False  # the reader says what is wrong when it gets there
    if data.shape[0] < 256:
        return False
    data = np.where(np.isfinite(data), data, 0.0)  # the reader names and silences them
    with np.errstate(all="ignore"):
        return _iq_like(data, hilbert)


def _iq_like(data: np.ndarray, hilbert) -> bool:
    i, q = data[:, 0] - data[:, 0].mean(), data[:, 1] - data[:, 1].mean()
    pi, pq = float(np.dot(i, i)), float(np.dot(q, q))
    if not (math.isfinite(pi) and math.isfinite(pq)) or pi <= 0 or pq <= 0:
        return False
    if not 0.5 < pi / pq < 2.0:
        return False
    if abs(float(np.dot(i, q))) > 0.3 * math.sqrt(pi * pq):
        return False
    from scipy.fft import next_fast_len

    # a prime length (a short file) would make the FFT hundreds of times slower
    h = np.imag(hilbert(i, N=next_fast_len(i.shape[0])))[: i.shape[0]]
    ph = float(np.dot(h, h))
    if not (math.isfinite(ph) and ph > 0):
        return False
    c = abs(float(np.dot(h, q))) / math.sqrt(ph * pq)
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


def _read_sidecar(path: str) -> dict:
    """`monitor.record.read_sidecar` (missing is {}), with JSON the parser itself chokes
    on (nesting too deep, integers of thousands of digits) reported as corrupt."""
    from monitor.record import read_sidecar, sidecar_path

    try:
        return read_sidecar(path, missing_ok=True)
    except (RecursionError, ValueError) as exc:
        raise InputError(
            f"{sidecar_path(path)}: corrupt metadata sidecar ({type(exc).__name__})"
        ) from None


def sidecar_metadata(path: str | os.PathLike) -> dict:
    """StreamMeta fields stored beside a recording by `swingmeter record`, if any.

    Parameters
    ----------
    path : path-like
        The recording (its sidecar is `PATH.swingmeter.json`).

    Returns
    -------
    dict
        `dial_hz`, `center_hz`, `clock_ppm`, `harmonic`, `sideband`, `profile` where the
        sidecar gives them; {} without a sidecar.

    Raises
    ------
    InputError
        If the sidecar is corrupt or a field has an impossible value (a frequency that is
        not a finite number, a clock correction beyond +-1e5 ppm, harmonic < 1, ...).
    """
    from monitor.record import sidecar_path

    path = str(path)
    data = _read_sidecar(path)
    keys = ("dial_hz", "center_hz", "clock_ppm", "harmonic", "sideband", "profile")
    out = {k: data[k] for k in keys if data.get(k) is not None}

    def bad(key: str) -> InputError:
        return InputError(f"{sidecar_path(path)}: corrupt metadata sidecar ({key}={out[key]!r})")

    for key in ("dial_hz", "center_hz"):
        if key in out:
            if not _is_number(out[key]):
                raise bad(key)
            out[key] = float(out[key])
    if "clock_ppm" in out:
        if not (_is_number(out["clock_ppm"]) and abs(out["clock_ppm"]) <= MAX_ABS_CLOCK_PPM):
            raise bad("clock_ppm")
        out["clock_ppm"] = float(out["clock_ppm"])
    if "harmonic" in out:
        h = out["harmonic"]
        if isinstance(h, bool) or not isinstance(h, int) or not 1 <= h <= MAX_HARMONIC:
            raise bad("harmonic")
    if "sideband" in out and out["sideband"] not in ("upper", "lower"):
        raise bad("sideband")
    if "profile" in out and not isinstance(out["profile"], str):
        raise bad("profile")
    return out


def recorded_mode(path: str | os.PathLike) -> str | None:
    """The mode a recording says it was made in: its sidecar's, or `iq` for complex SigMF."""
    path = str(path)
    if is_sigmf(path):
        meta_path = Path(_sigmf_meta_path(path))
        try:
            g = json.loads(meta_path.read_text(encoding="utf-8")).get("global", {})
        except (OSError, UnicodeDecodeError, ValueError, RecursionError, AttributeError):
            return None  # the reader will say what is wrong
        datatype = g.get("core:datatype", "") if isinstance(g, dict) else ""
        return "iq" if isinstance(datatype, str) and datatype.startswith("c") else None
    try:
        mode = _read_sidecar(path).get("mode")
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
