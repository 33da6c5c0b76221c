"""What flows from sources to the engine: blocks of samples with their stream metadata.

Blocks carry their sample rate and the stream's metadata (mode, dial frequency, sideband,
harmonic number, clock correction) so that nothing downstream guesses.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Literal

import numpy as np

Mode = Literal["audio", "beat", "iq"]
Sideband = Literal["upper", "lower"]
MODES: tuple[str, ...] = ("audio", "beat", "iq")


@dataclass(frozen=True)
class StreamMeta:
    """Everything known about a stream besides its samples.

    Attributes
    ----------
    source : str
        File path or device name, for messages.
    fs_hz : float
        Nominal sample rate (what the file header or the device says).
    channels : int
        Channels in the underlying file or device (before channel selection).
    mode : {"audio", "beat", "iq"}
        How the samples are to be read.
    clock_ppm : float
        Sound-card clock correction P = (true rate / nominal - 1) * 1e6; every measured
        frequency is multiplied by (1 + P * 1e-6).
    center_hz : float or None
        I/Q centre frequency (from SigMF metadata or the user), or None.
    dial_hz : float or None
        Receiver dial frequency, or None.
    sideband : {"upper", "lower"}
        Receiver sideband for `beat` mode.
    harmonic : int
        The receiver hears this harmonic of the oscillator's fundamental (1 = fundamental).
    profile : str or None
        Name of the bench profile applied, if any.
    frames : int or None
        Total frames if known (files), None for live streams.
    extra : dict
        Source-specific metadata (file subtype, SigMF annotations, ...), JSON-able.
    """

    source: str
    fs_hz: float
    channels: int = 1
    mode: Mode = "audio"
    clock_ppm: float = 0.0
    center_hz: float | None = None
    dial_hz: float | None = None
    sideband: Sideband = "upper"
    harmonic: int = 1
    profile: str | None = None
    frames: int | None = None
    extra: dict = field(default_factory=dict, compare=False, hash=False)

    @property
    def clock_factor(self) -> float:
        """Multiply nominal-clock frequencies by this to get true frequencies."""
        return 1.0 + self.clock_ppm * 1e-6

    @property
    def duration_s(self) -> float | None:
        return None if self.frames is None else self.frames / self.fs_hz

    def with_(self, **changes) -> StreamMeta:
        return replace(self, **changes)


@dataclass(frozen=True)
class Block:
    """A run of consecutive samples.

    `samples` is float64 of shape (n,) for `audio`/`beat`, complex128 of shape (n,) for
    `iq`. `start` is the index of the first sample in the stream, so gaps and ordering are
    explicit. `overflow` is True when the device reported lost input just before this block.
    """

    samples: np.ndarray
    start: int
    meta: StreamMeta
    overflow: bool = False

    @property
    def fs_hz(self) -> float:
        return self.meta.fs_hz

    @property
    def t0_s(self) -> float:
        return self.start / self.meta.fs_hz

    def __len__(self) -> int:
        return int(self.samples.shape[0])
