"""Windowed power spectra, averaged across gates, and the bandwidths read from them.

`power_spectrum` and `SpectrumAverager` give a power spectrum scaled so that a sine on a
bin reads its power (A^2/2 for a real sine of amplitude A, |A|^2 for a complex tone);
summing all bins and dividing by the window's noise bandwidth in bins gives the total
power. Real input gives a one-sided spectrum, complex input a two-sided one ordered from
-fs/2 to +fs/2. Occupied and x-dB bandwidths follow the ITU-R SM.328 definitions.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.fft as sfft
import scipy.signal as ssig

from dsp import _fft

__all__ = [
    "Spectrum",
    "SpectrumAverager",
    "occupied_bandwidth_hz",
    "power_spectrum",
    "xdb_bandwidth_hz",
]

WindowName = Literal["kaiser", "hann", "blackmanharris", "flattop", "boxcar"]
_WINDOWS = ("kaiser", "hann", "blackmanharris", "flattop", "boxcar")


@dataclass(frozen=True)
class Spectrum:
    """A power spectrum.

    Attributes
    ----------
    freqs_hz : numpy.ndarray
        Bin centre frequencies in Hz (ascending; -fs/2.. for complex input).
    power : numpy.ndarray
        Power per bin in input units squared (a sine on a bin reads its power).
    fs_hz : float
        Sample rate in Hz.
    nfft : int
        Transform length.
    bin_hz : float
        Bin spacing fs / nfft in Hz.
    enbw_hz : float
        Equivalent noise bandwidth of one bin in Hz (window-dependent).
    onesided : bool
        True for real input (negative frequencies folded in).
    window : str
        Window name.
    averages : int
        Number of segments averaged.
    """

    freqs_hz: np.ndarray
    power: np.ndarray
    fs_hz: float
    nfft: int
    bin_hz: float
    enbw_hz: float
    onesided: bool
    window: str
    averages: int

    @property
    def total_power(self) -> float:
        """Total power in input units squared (sum of bins / noise bandwidth in bins)."""
        return float(self.power.sum() * self.bin_hz / self.enbw_hz)

    def to_dict(self) -> dict:
        """JSON-ready contents (arrays as lists)."""
        return {
            "freqs_hz": self.freqs_hz.tolist(),
            "power": self.power.tolist(),
            "fs_hz": self.fs_hz,
            "nfft": self.nfft,
            "bin_hz": self.bin_hz,
            "enbw_hz": self.enbw_hz,
            "onesided": self.onesided,
            "window": self.window,
            "averages": self.averages,
        }


def _check_window(window: str, kaiser_beta: float) -> None:
    if window not in _WINDOWS:
        raise ValueError(f"window={window!r} must be one of {_WINDOWS}")
    if not (math.isfinite(kaiser_beta) and kaiser_beta >= 0):
        raise ValueError(f"kaiser_beta={kaiser_beta} must be finite and >= 0")


def _make_window(window: str, n: int, kaiser_beta: float) -> np.ndarray:
    spec = ("kaiser", kaiser_beta) if window == "kaiser" else window
    return ssig.get_window(spec, n, fftbins=True)


class SpectrumAverager:
    """Welch-style averaged power spectrum, fed gate by gate.

    Segments of ``nfft`` samples overlapping by ``overlap`` are windowed and their
    periodograms averaged. Samples that do not complete a segment are kept for the next
    call, so the result does not depend on how the input was split.

    Parameters
    ----------
    fs_hz : float
        Sample rate in Hz.
    nfft : int
        Segment and transform length (>= 8).
    kind : {"real", "complex"}
        Input kind; "real" gives a one-sided spectrum.
    window : {"kaiser", "hann", "blackmanharris", "flattop", "boxcar"}
        Window (default "kaiser" with ``kaiser_beta``; 14 keeps leakage below -100 dB).
    kaiser_beta : float
        Kaiser window shape (default 14).
    overlap : float
        Fraction of overlap between segments, in [0, 0.95] (default 0.5).

    Raises
    ------
    ValueError
        For bad parameter values.

    References
    ----------
    P. D. Welch, IEEE Trans. Audio Electroacoust. 15(2), 1967 [memory]; the scaling
    matches scipy.signal.welch(scaling="spectrum").
    """

    def __init__(
        self,
        fs_hz: float,
        nfft: int,
        *,
        kind: Literal["real", "complex"] = "real",
        window: WindowName = "kaiser",
        kaiser_beta: float = 14.0,
        overlap: float = 0.5,
    ) -> None:
        if isinstance(fs_hz, bool) or not isinstance(fs_hz, (int, float, np.number)):
            raise TypeError(f"fs_hz must be a number, got {type(fs_hz).__name__}")
        fs = float(fs_hz)
        if not (math.isfinite(fs) and fs > 0):
            raise ValueError(f"fs_hz={fs_hz} must be finite and > 0")
        if isinstance(nfft, bool) or not isinstance(nfft, (int, np.integer)):
            raise TypeError(f"nfft must be an int, got {type(nfft).__name__}")
        if nfft < 8:
            raise ValueError(f"nfft={nfft} must be >= 8")
        if kind not in ("real", "complex"):
            raise ValueError(f"kind={kind!r} must be 'real' or 'complex'")
        _check_window(window, kaiser_beta)
        if not (0.0 <= overlap <= 0.95):
            raise ValueError(f"overlap={overlap} must be in [0, 0.95]")
        self.fs_hz = fs
        self.nfft = int(nfft)
        self.kind = kind
        self.window = window
        self._win = _make_window(window, self.nfft, kaiser_beta)
        self._hop = max(1, round(self.nfft * (1.0 - overlap)))
        self._buf = np.zeros(0, dtype=np.float64 if kind == "real" else np.complex128)
        self._acc = np.zeros(self.nfft // 2 + 1 if kind == "real" else self.nfft)
        self._count = 0
        self._weight = 0.0

    @property
    def averages(self) -> int:
        """Segments accumulated so far."""
        return self._count

    def update(self, samples, *, weight: float = 1.0) -> None:
        """Add samples (any length, including 0).

        Each segment completed here enters the average with the given weight (> 0): a
        caller that takes four segments from some stretches and one from others can
        weight each stretch alike."""
        weight = float(weight)
        if not (math.isfinite(weight) and weight > 0):
            raise ValueError(f"weight={weight} must be finite and > 0")
        a = np.asarray(samples)
        if a.ndim > 1:
            raise ValueError(f"samples must be one-dimensional, got shape {a.shape}")
        if self.kind == "real" and a.dtype.kind == "c":
            raise TypeError("samples must be real for kind='real'")
        if a.dtype.kind not in "biufc":
            raise TypeError(f"samples must be numeric, got dtype {a.dtype}")
        if a.size == 0:
            return
        n = self.nfft
        if self._buf.size == 0 and self._hop == n:
            # segments side by side, nothing held over: a reshape, no copy
            buf = a.astype(self._buf.dtype, copy=False)
            nseg = buf.size // n
            view = buf[: nseg * n].reshape(nseg, n)
        else:
            buf = np.concatenate((self._buf, a.astype(self._buf.dtype)))
            nseg = 0 if buf.size < n else (buf.size - n) // self._hop + 1
            view = np.lib.stride_tricks.sliding_window_view(buf, n)[:: self._hop][:nseg]
        if nseg:
            # Batches bound the temporary memory for long records.
            for b in range(0, nseg, 128):
                seg = view[b : b + 128] * self._win
                if seg.shape[0] == 1:  # one segment (a monitor's share of a gate)
                    one = seg[0]
                    spec = (_fft.rfft(one) if self.kind == "real" else _fft.fft(one, out=one))[
                        None, :
                    ]
                elif self.kind == "real":
                    spec = sfft.rfft(seg, axis=1, overwrite_x=True)
                else:
                    spec = sfft.fft(seg, axis=1, overwrite_x=True)
                pw = spec.real**2
                pw += spec.imag**2
                pw = pw.sum(axis=0) if pw.shape[0] > 1 else pw[0]
                if weight != 1.0:
                    pw *= weight
                self._acc += pw
            self._count += nseg
            self._weight += weight * nseg
        self._buf = buf[nseg * self._hop :].copy()

    def merge(self, other: SpectrumAverager) -> None:
        """Add the segments of `other` (same rate, length, kind and window); samples it
        holds that complete no segment are dropped."""
        if (other.fs_hz, other.nfft, other.kind) != (self.fs_hz, self.nfft, self.kind) or not (
            np.array_equal(other._win, self._win)
        ):
            raise ValueError("spectra of different rates, lengths, kinds or windows")
        self._acc += other._acc
        self._count += other._count
        self._weight += other._weight

    def result(self) -> Spectrum:
        """The averaged spectrum.

        Raises
        ------
        ValueError
            If no complete segment has been seen.
        """
        if self._count == 0:
            raise ValueError(f"no complete segment yet (need nfft={self.nfft} samples)")
        n = self.nfft
        w = self._win
        p = self._acc / (self._weight * w.sum() ** 2)
        if self.kind == "real":
            p = p.copy()
            p[1 : (n + 1) // 2] *= 2.0  # fold negative frequencies (not DC or Nyquist)
            freqs = sfft.rfftfreq(n, 1.0 / self.fs_hz)
        else:
            p = sfft.fftshift(p)
            freqs = sfft.fftshift(sfft.fftfreq(n, 1.0 / self.fs_hz))
        bin_hz = self.fs_hz / n
        enbw = bin_hz * n * float((w * w).sum()) / float(w.sum()) ** 2
        return Spectrum(
            freqs_hz=freqs,
            power=p,
            fs_hz=self.fs_hz,
            nfft=n,
            bin_hz=bin_hz,
            enbw_hz=enbw,
            onesided=self.kind == "real",
            window=self.window,
            averages=self._count,
        )


def power_spectrum(
    x,
    fs_hz: float,
    *,
    nfft: int | None = None,
    window: WindowName = "kaiser",
    kaiser_beta: float = 14.0,
    overlap: float = 0.5,
) -> Spectrum:
    """Power spectrum of a real or complex record.

    Parameters
    ----------
    x : array_like
        Samples, real (one-sided result) or complex (two-sided, -fs/2 .. fs/2).
    fs_hz : float
        Sample rate in Hz.
    nfft : int, optional
        Segment length; default the whole record as one segment. Longer records are
        Welch-averaged over segments overlapping by ``overlap``.
    window, kaiser_beta, overlap
        As for `SpectrumAverager`.

    Returns
    -------
    Spectrum

    Raises
    ------
    ValueError
        If x is empty, shorter than nfft or parameters are out of range.

    Examples
    --------
    A 1 Vrms sine at 1 kHz, sampled at 48 kHz, reads 1.0 V^2 on its bin:

    >>> import numpy as np
    >>> t = np.arange(48000) / 48000
    >>> s = power_spectrum(np.sqrt(2) * np.sin(2 * np.pi * 1000 * t), 48000.0, nfft=4800)
    >>> round(float(s.power[100]), 3)
    1.0
    """
    a = np.asarray(x)
    if a.ndim > 1:
        raise ValueError(f"x must be one-dimensional, got shape {a.shape}")
    if a.size == 0:
        raise ValueError("x is empty (0 samples)")
    n = a.size if nfft is None else nfft
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)):
        raise TypeError(f"nfft must be an int, got {type(n).__name__}")
    if n > a.size:
        raise ValueError(f"nfft={n} is longer than x ({a.size} samples)")
    avg = SpectrumAverager(
        fs_hz,
        int(n),
        kind="complex" if a.dtype.kind == "c" else "real",
        window=window,
        kaiser_beta=kaiser_beta,
        overlap=overlap,
    )
    avg.update(a)
    return avg.result()


def _check_spectrum(spectrum: Spectrum) -> np.ndarray:
    if not isinstance(spectrum, Spectrum):
        raise TypeError(f"spectrum must be a Spectrum, got {type(spectrum).__name__}")
    p = np.asarray(spectrum.power, dtype=np.float64)
    if p.size == 0 or not np.all(np.isfinite(p)) or p.sum() <= 0:
        raise ValueError("spectrum power must be finite, non-empty and not all zero")
    return p


def occupied_bandwidth_hz(spectrum: Spectrum, fraction: float = 0.99) -> tuple[float, float, float]:
    """Occupied bandwidth: the band outside which (1 - fraction)/2 of the power lies each side.

    Each bin's power is spread evenly over its width, so the limits are interpolated
    within bins.

    Parameters
    ----------
    spectrum : Spectrum
        From `power_spectrum` or `SpectrumAverager` (use a low-leakage window).
    fraction : float
        Power fraction inside the band, in (0, 1) (default 0.99).

    Returns
    -------
    (low_hz, high_hz, bw_hz) : tuple of float

    Raises
    ------
    ValueError
        If fraction is not in (0, 1) or the spectrum holds no power.

    References
    ----------
    ITU-R SM.328 / Radio Regulations Article 1.153: occupied bandwidth, 0.5% of the
    mean power below the lower and above the upper limit [memory for the clause].
    """
    q = float(fraction)
    if not (math.isfinite(q) and 0.0 < q < 1.0):
        raise ValueError(f"fraction={fraction} must be in (0, 1)")
    p = _check_spectrum(spectrum)
    f = np.asarray(spectrum.freqs_hz, dtype=np.float64)
    edges = np.concatenate(([f[0] - spectrum.bin_hz / 2], f + spectrum.bin_hz / 2))
    if spectrum.onesided:
        # The DC and Nyquist bins of a one-sided spectrum are half bins.
        edges = np.clip(edges, 0.0, spectrum.fs_hz / 2)
    cum = np.concatenate(([0.0], np.cumsum(p)))
    cum /= cum[-1]
    tail = (1.0 - q) / 2.0
    low = float(np.interp(tail, cum, edges))
    high = float(np.interp(1.0 - tail, cum, edges))
    return low, high, high - low


def xdb_bandwidth_hz(spectrum: Spectrum, x_db: float = 26.0) -> tuple[float, float, float]:
    """x-dB bandwidth: between the outermost points x dB below the spectrum's peak.

    Parameters
    ----------
    spectrum : Spectrum
        Power spectrum.
    x_db : float
        Level below the peak in dB (> 0; default 26 dB).

    Returns
    -------
    (low_hz, high_hz, bw_hz) : tuple of float
        Crossing points interpolated linearly in dB between bins; the spectrum's first
        or last bin when the level is never reached on that side.

    Raises
    ------
    ValueError
        If x_db <= 0 or the spectrum holds no power.

    References
    ----------
    ITU-R SM.328, "x dB bandwidth": beyond its limits every spectral component is at
    least x dB below the reference (here the peak) [memory for the clause].
    """
    xd = float(x_db)
    if not (math.isfinite(xd) and xd > 0.0):
        raise ValueError(f"x_db={x_db} must be finite and > 0")
    p = _check_spectrum(spectrum)
    f = np.asarray(spectrum.freqs_hz, dtype=np.float64)
    thr = p.max() * 10.0 ** (-xd / 10.0)
    above = np.nonzero(p >= thr)[0]
    i_lo, i_hi = int(above[0]), int(above[-1])
    tiny = p.max() * 1e-30

    def cross(i_in: int, i_out: int) -> float:
        l_in = 10 * math.log10(p[i_in] + tiny)
        l_out = 10 * math.log10(p[i_out] + tiny)
        l_thr = 10 * math.log10(thr)
        t = (l_in - l_thr) / (l_in - l_out) if l_in != l_out else 0.0
        return float(f[i_in] + t * (f[i_out] - f[i_in]))

    low = cross(i_lo, i_lo - 1) if i_lo > 0 else float(f[0])
    high = cross(i_hi, i_hi + 1) if i_hi < p.size - 1 else float(f[-1])
    return low, high, high - low
