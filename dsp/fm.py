"""FM modulation analysis: streaming discriminator, deviation statistics, Bessel lines.

The demodulator turns a real beat-note signal or complex I/Q into the instantaneous
frequency offset from a given carrier, gate after gate, with all state carried between
calls. The statistics take that instantaneous frequency *after* the application's
post-demodulation filter (audio band, de-emphasis): peaks of a raw discriminator output
are set by noise spikes, not by the modulation.
"""

from __future__ import annotations

import math
from array import array
from dataclasses import dataclass
from functools import lru_cache
from typing import Literal

import numpy as np
import scipy.fft as sfft
import scipy.signal as ssig
import scipy.special as sspec
from scipy.optimize import minimize_scalar

from dsp import _fft

__all__ = [
    "BS412_REFERENCE_DEVIATION_HZ",
    "BesselFit",
    "DemodBlock",
    "DeviationFigures",
    "DeviationHistogram",
    "FmDemodulator",
    "ModulationPower",
    "ModulationPowerMeter",
    "PhaseLine",
    "carson_bandwidth_hz",
    "deviation_figures",
    "fit_bessel",
    "fm_line_amplitudes",
    "modulation_index",
    "modulation_power",
    "modulation_power_dbr",
    "phase_line",
]

InputKind = Literal["real", "complex"]
_KINDS = ("real", "complex")

#: ITU-R BS.412: reference power is that of a sine giving +/-19 kHz peak deviation.
BS412_REFERENCE_DEVIATION_HZ = 19_000.0

_TWO_PI = 2.0 * math.pi


def _positive_finite(name: str, value: float) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise TypeError(f"{name} must be a number, got {type(value).__name__}")
    v = float(value)
    if not math.isfinite(v) or v <= 0.0:
        raise ValueError(f"{name}={value} must be finite and > 0")
    return v


def _nonneg_finite(name: str, value: float) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise TypeError(f"{name} must be a number, got {type(value).__name__}")
    v = float(value)
    if not math.isfinite(v) or v < 0.0:
        raise ValueError(f"{name}={value} must be finite and >= 0")
    return v


def _finite(name: str, value: float) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise TypeError(f"{name} must be a number, got {type(value).__name__}")
    v = float(value)
    if not math.isfinite(v):
        raise ValueError(f"{name}={value} must be finite")
    return v


def _finite_energy(x: np.ndarray) -> bool:
    """No NaN or inf in x: one BLAS dot product instead of an isfinite pass (the dot
    also overflows for |x| > 1e154, which no filter here could hold either)."""
    with np.errstate(over="ignore", invalid="ignore"):
        e = np.vdot(x, x).real if x.dtype.kind == "c" else np.dot(x, x)
    return bool(np.isfinite(e))


def _as_real_1d(name: str, x) -> np.ndarray:
    a = np.asarray(x)
    if a.dtype.kind not in "biuf":
        raise TypeError(f"{name} must be a real numeric array, got dtype {a.dtype}")
    if a.ndim > 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {a.shape}")
    return np.asarray(a, dtype=np.float64).reshape(-1)


def _as_1d(name: str, x, kind: InputKind) -> np.ndarray:
    a = np.asarray(x)
    if a.ndim > 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {a.shape}")
    if kind == "real":
        if a.dtype.kind not in "biuf":
            raise TypeError(f"{name} must be real for kind='real', got dtype {a.dtype}")
        return np.asarray(a, dtype=np.float64).reshape(-1)
    if a.dtype.kind not in "biufc":
        raise TypeError(f"{name} must be numeric, got dtype {a.dtype}")
    return np.asarray(a, dtype=np.complex128).reshape(-1)


# --------------------------------------------------------------------------------------
# Simple relations
# --------------------------------------------------------------------------------------


def carson_bandwidth_hz(peak_deviation_hz: float, mod_tone_hz: float) -> float:
    """Carson's rule bandwidth of an FM signal, 2 * (peak deviation + modulating frequency).

    Parameters
    ----------
    peak_deviation_hz : float
        Peak frequency deviation in Hz (>= 0).
    mod_tone_hz : float
        Highest modulating frequency in Hz (>= 0).

    Returns
    -------
    float
        Bandwidth in Hz holding roughly 98% of the power.

    Raises
    ------
    ValueError
        If an argument is negative or not finite.

    References
    ----------
    Federal Standard 1037C, "Carson's rule": B = 2 (deltaf + fm).
    """
    df = _nonneg_finite("peak_deviation_hz", peak_deviation_hz)
    fm = _nonneg_finite("mod_tone_hz", mod_tone_hz)
    return 2.0 * (df + fm)


def modulation_index(peak_deviation_hz: float, mod_tone_hz: float) -> float:
    """Modulation index beta = peak deviation / modulating frequency (single tone).

    Parameters
    ----------
    peak_deviation_hz : float
        Peak frequency deviation in Hz (>= 0).
    mod_tone_hz : float
        Modulating tone in Hz (> 0).

    Returns
    -------
    float
        beta, dimensionless (radians of peak phase deviation).

    Raises
    ------
    ValueError
        If peak_deviation_hz < 0 or mod_tone_hz <= 0, or either is not finite.
    """
    df = _nonneg_finite("peak_deviation_hz", peak_deviation_hz)
    fm = _positive_finite("mod_tone_hz", mod_tone_hz)
    return df / fm


# --------------------------------------------------------------------------------------
# Discriminator
# --------------------------------------------------------------------------------------

# Taylor coefficients of atan(v)/v in v^2. After folding to the right half-plane and
# three half-angle steps |v| <= tan(pi/16) = 0.199, where six terms leave < 1e-8 rad.
_ATAN_TAYLOR = tuple((-1.0) ** k / (2 * k + 1) for k in range(6))


_SIGN_BIT = np.int32(-(2**31))
_PI_BITS = np.array(math.pi, dtype=np.float32).view(np.int32)


def _phase_angle(re: np.ndarray, im: np.ndarray) -> np.ndarray:
    """Angle of re + j*im in [-pi, pi] as float32, within 1e-6 rad of numpy.arctan2.

    numpy's arctan2 costs about 40 ns per sample on the machines we benchmark on. Here
    the point is folded into the right half-plane (angle(-p) = angle(p) -/+ pi), then
    tan(t/2) = y / (r + x) (no cancellation for x >= 0) and two steps
    tan(t/2) = u / (1 + sqrt(1 + u^2)) reduce the argument to |v| <= 0.199, where a short
    series converges; only multiplications, divisions and square roots are used, in
    float32, which numpy vectorises: about four times faster. float32 rounding limits the
    angle to about 1e-7 rad, i.e. 4e-4 Hz at a 24 kHz output rate.
    """
    x = np.array(re, dtype=np.float32)  # new arrays: worked on in place below
    y = np.array(im, dtype=np.float32)
    neg = np.signbit(x)
    # fold: y *= sign(x), by flipping y's sign bit where x's is set (-0.0 folds too)
    xs = np.bitwise_and(x.view(np.int32), _SIGN_BIT)
    np.bitwise_xor(y.view(np.int32), xs, out=y.view(np.int32))
    np.abs(x, out=x)
    r = x * x
    r += y * y
    np.sqrt(r, out=r)
    r += x
    with np.errstate(divide="ignore", invalid="ignore"):
        u = np.divide(y, r, out=r)  # |u| <= 1; 0/0 only at the origin
    s = x  # x is not needed any more: its buffer holds the squares
    for _ in range(2):
        np.multiply(u, u, out=s)
        s += 1.0
        np.sqrt(s, out=s)
        s += 1.0
        np.divide(u, s, out=u)
    np.multiply(u, u, out=s)
    acc = np.full_like(u, _ATAN_TAYLOR[-1])
    for c in _ATAN_TAYLOR[-2::-1]:
        acc *= s
        acc += np.float32(c)
    acc *= u
    acc *= np.float32(8.0)
    # Undo the fold: points from the left half-plane move by +pi (upper) or -pi (lower):
    # pi with the folded y's sign (sign(y) = -sign(im) where folded), where x was < 0
    corr = np.bitwise_and(y.view(np.int32), _SIGN_BIT, out=xs)
    corr |= _PI_BITS
    corr = corr.view(np.float32)
    corr *= neg
    acc -= corr
    with np.errstate(over="ignore", invalid="ignore"):
        finite = np.isfinite(np.dot(acc, acc))  # angles are < 4: no overflow
    if not finite:
        bad = ~np.isfinite(acc)
        acc[bad] = np.arctan2(np.asarray(im)[bad], np.asarray(re)[bad])
    return acc


# The equaliser stops at 11 taps: numpy's direct convolution keeps a fast path up to
# there (longer kernels cost up to ten times as much per tap), and 1 / sinc, mirrored at
# half the output rate, has a kink there that more taps approach only slowly.
_EQ_MAX_HALF = 5
_EQ_TOLERANCE = 1e-4
# Up to this fraction of the output rate the 11 taps hold the net response within
# 1.3e-3 (1e-4 up to a quarter): the demodulator keeps its output rate at least the
# equaliser's band over this, where the input rate allows.
_EQ_BAND_MAX = 0.4


def _droop_equaliser(x_max: float) -> np.ndarray:
    """Symmetric FIR taps whose response times sinc(x) is 1 over 0 <= x <= x_max (x in
    cycles per output sample): least squares on a fine grid, the fewest taps (3 to 11)
    that keep the error within 1e-4, else 11. (Read-only: the taps are shared.)"""
    return _droop_taps(round(float(x_max), 6))


@lru_cache(maxsize=32)
def _droop_taps(x_max: float) -> np.ndarray:
    x = np.linspace(0.0, x_max, 400)
    target = 1.0 / np.sinc(x)
    for half in range(1, _EQ_MAX_HALF + 1):
        # E(x) = c0 + 2 sum c_k cos(2 pi k x) with E(0) = 1 exactly (c0 = 1 - 2 sum c_k):
        # a steady offset and slow drift pass unchanged
        basis = np.stack([2.0 * (np.cos(_TWO_PI * k * x) - 1.0) for k in range(1, half + 1)], 1)
        ck = np.linalg.lstsq(basis, target - 1.0, rcond=None)[0]
        err = np.max(np.abs((1.0 + basis @ ck) * np.sinc(x) - 1.0))
        c = np.concatenate(([1.0 - 2.0 * ck.sum()], ck))
        if err <= _EQ_TOLERANCE:
            break
    taps = np.concatenate((c[:0:-1], c))
    taps.setflags(write=False)
    return taps


class FmDemodulator:
    """Streaming FM discriminator: carrier offset in Hz at a decimated rate.

    The chain is the classical one: mix to complex baseband by ``-carrier_hz``, low-pass
    to +/- ``if_bandwidth_hz / 2``, decimate by ``decimation``, polar discriminator
    ``angle(z[n] conj(z[n-1])) * fs_out / (2 pi)``. It is evaluated in an equivalent,
    cheaper order: the mixer is folded into the low-pass taps (g[k] = h[k] e^{j w k}, a
    complex band-pass at the carrier), the band-pass runs as an FFT overlap-save
    convolution that only evaluates the decimated outputs (spectrum folded before the
    inverse transform), and the mixer's remaining phase ramp e^{-j w D m} at the output
    rate becomes a constant subtracted from every discriminator angle (modulo 2 pi).
    The result equals the direct chain up to rounding, for any split of the input into
    calls, because the filter history, the output grid and the last baseband sample are
    carried between calls.

    The phase difference averages the frequency over one output sample, so a modulating
    tone f reads sinc(f / fs_out) low (0.41% at fs_out / 20, 10% at fs_out / 4). An
    optional symmetric FIR equaliser (3 to 11 taps, least-squares fit of 1 / sinc over
    0 .. ``droop_band_hz``) undoes it to within 1e-4 up to a quarter of the output rate,
    and within 1.3e-3 up to 0.4 fs_out, the most the output rate is chosen for where the
    input rate allows (`droop_response` gives the exact net response).

    Parameters
    ----------
    fs_hz : float
        Input sample rate in Hz.
    carrier_hz : float
        Carrier (beat-note or I/Q offset) frequency in Hz. Real input: 0 < carrier < fs/2;
        complex input: -fs/2 < carrier < fs/2.
    if_bandwidth_hz : float
        Two-sided IF bandwidth in Hz; the passband is flat (ripple < 0.001 dB) over
        carrier +/- if_bandwidth_hz / 2. Carson's rule (`carson_bandwidth_hz`) or wider.
    kind : {"real", "complex"}
        "real" for a beat note in a real audio signal, "complex" for I/Q.
    oversample : float
        The output rate is the input rate divided by the largest integer decimation that
        keeps fs_out >= oversample * if_bandwidth_hz (default 2).
    min_fs_out_hz : float, optional
        Lower bound on the output rate, e.g. 2.2 x the upper edge of the audio filter that
        follows (32 kHz or more for a 15 kHz band).
    stopband_db : float
        Attenuation of the IF filter outside the band and, for real input, of the
        mixer image at -2 * carrier (default 80 dB).
    droop_compensation : bool
        Apply the droop equaliser to the output (default True).
    droop_band_hz : float, optional
        Highest modulating frequency the equaliser is fitted to (default half the IF
        bandwidth). With the equaliser on, the output rate is kept at least 2.5 times
        this (net response within 1.3e-3) where the input rate allows; the band is held
        to at most 0.45 fs_out.

    Attributes
    ----------
    fs_out_hz : float
        Output sample rate in Hz.
    decimation : int
        Input samples per output sample.
    numtaps : int
        Length of the IF filter.
    first_output_time_s : float
        Time of the first output sample relative to the first input sample, allowing
        for the filter's group delay; output k is at first_output_time_s + k / fs_out_hz.
    samples_out : int
        Output samples produced so far.

    Raises
    ------
    ValueError
        If a rate or bandwidth is not positive, the carrier is outside the allowed range,
        or (real input) the IF band does not fit between 0 Hz and fs/2:
        ``carrier - bw/2 <= 0`` or ``carrier + bw/2 >= fs/2``, or comes so close to
        0 Hz or fs/2 that the transition band needs more than 16385 taps (real input
        rejects everything below half the gap between the band and 0 Hz -- DC, hum, the
        mixer image at -2 * carrier -- by stopband_db, with about 10 fs / gap taps).

    References
    ----------
    Polar discriminator and overlap-save filtering: common practice (e.g. R. G. Lyons,
    Understanding Digital Signal Processing, 3rd ed., 13.22 and 13.10 [memory]). The
    sinc droop of a first difference and its FIR equaliser: common practice (the same
    droop as a boxcar/CIC stage) [computed].
    """

    _MAX_TAPS = 16385
    # FFT size of a full block: FFT buffers stay under 128 kB, so the C allocator reuses
    # them instead of mapping fresh pages on every call (page faults cost a quarter of
    # the run time on the machines we measured); larger FFTs also fall out of cache.
    _BLOCK_REAL = 15360
    _BLOCK_COMPLEX = 7680

    def __init__(
        self,
        fs_hz: float,
        carrier_hz: float,
        if_bandwidth_hz: float,
        *,
        kind: InputKind = "real",
        oversample: float = 2.0,
        min_fs_out_hz: float | None = None,
        stopband_db: float = 80.0,
        droop_compensation: bool = True,
        droop_band_hz: float | None = None,
    ) -> None:
        if kind not in _KINDS:
            raise ValueError(f"kind={kind!r} must be one of {_KINDS}")
        fs = _positive_finite("fs_hz", fs_hz)
        fc = _finite("carrier_hz", carrier_hz)
        bw = _positive_finite("if_bandwidth_hz", if_bandwidth_hz)
        osr = _positive_finite("oversample", oversample)
        if osr < 1.0:
            raise ValueError(f"oversample={oversample} must be >= 1")
        att = _positive_finite("stopband_db", stopband_db)
        if not 20.0 <= att <= 150.0:
            raise ValueError(f"stopband_db={stopband_db} must be in [20, 150]")
        if kind == "real":
            if fc - bw / 2.0 <= 0.0:
                raise ValueError(
                    f"carrier_hz={carrier_hz} - if_bandwidth_hz/2={bw / 2.0} must be > 0 "
                    "for real input (the IF band would fold over 0 Hz)"
                )
            if fc + bw / 2.0 >= fs / 2.0:
                raise ValueError(
                    f"carrier_hz={carrier_hz} + if_bandwidth_hz/2={bw / 2.0} must be < "
                    f"fs_hz/2={fs / 2.0} for real input"
                )
        else:
            if not -fs / 2.0 < fc < fs / 2.0:
                raise ValueError(f"carrier_hz={carrier_hz} must be in (-fs_hz/2, fs_hz/2)")
            if bw > fs:
                raise ValueError(f"if_bandwidth_hz={if_bandwidth_hz} must be <= fs_hz={fs}")
        dec = max(1, int(math.floor(fs / (osr * bw) + 1e-9)))
        if min_fs_out_hz is not None:
            fmin = _positive_finite("min_fs_out_hz", min_fs_out_hz)
            if fmin > fs:
                raise ValueError(f"min_fs_out_hz={min_fs_out_hz} must be <= fs_hz={fs}")
            dec = max(1, min(dec, int(math.floor(fs / fmin + 1e-9))))
        band = (
            bw / 2.0 if droop_band_hz is None else _positive_finite("droop_band_hz", droop_band_hz)
        )
        if droop_compensation:
            dec = max(1, min(dec, int(math.floor(fs * _EQ_BAND_MAX / band + 1e-9))))
        fs_out = fs / dec
        # Transition band: wide enough for a short filter, narrow enough that nothing
        # folds into the passband at the output rate.
        if fs_out <= bw:
            raise ValueError(
                f"if_bandwidth_hz={if_bandwidth_hz} leaves no transition band at the output "
                f"rate {fs_out} Hz; lower the bandwidth or raise oversample"
            )
        tw = min(0.25 * bw, fs_out - bw)
        if kind == "real":
            # Low audio (DC, hum: below half the gap between the band and 0 Hz), the mixer
            # image at -2 carrier and the mirror beyond fs/2 must all fall in the
            # stopband, not in the transition band.
            tw = min(tw, 0.5 * (fc - bw / 2.0), fs / 2.0 - (fc + bw / 2.0))
        numtaps, beta = ssig.kaiserord(att, tw / (fs / 2.0))
        numtaps |= 1  # odd: integer group delay
        if numtaps > self._MAX_TAPS:
            raise ValueError(
                f"carrier_hz={carrier_hz}, if_bandwidth_hz={if_bandwidth_hz}: the IF band is "
                f"too close to 0 Hz or fs/2 (transition {tw:.3g} Hz needs {numtaps} taps); "
                "move the carrier or narrow the bandwidth"
            )
        cutoff = min(bw / 2.0 + tw / 2.0, 0.5 * fs * 0.999999)
        h = ssig.firwin(numtaps, cutoff, window=("kaiser", beta), fs=fs)
        k = np.arange(numtaps)
        self._g = h * np.exp(1j * _TWO_PI * fc / fs * k)
        if kind == "real":
            self._g *= 2.0  # baseband of A cos(...) at amplitude A, as the analytic signal

        self.fs_hz = fs
        self.carrier_hz = fc
        self.if_bandwidth_hz = bw
        self.kind: InputKind = kind
        self.decimation = dec
        self.fs_out_hz = fs_out
        self.numtaps = numtaps
        self.droop_compensation = bool(droop_compensation)
        self.droop_band_hz = min(band, 0.45 * fs_out)
        self._eq = (
            _droop_equaliser(self.droop_band_hz / fs_out) if self.droop_compensation else None
        )
        self._eq_half = 0 if self._eq is None else (self._eq.size - 1) // 2
        self._pad = dec * int(math.ceil((numtaps - 1) / dec))
        # Output-rate phase step of the mixer, kept in (-pi, pi].
        step = math.fmod(fc * dec / fs, 1.0)
        self._mix_cycles = step
        c = _TWO_PI * step
        c = c - _TWO_PI * round(c / _TWO_PI)
        self._rot = complex(math.cos(-c), math.sin(-c))
        # The first discriminator output needs two full filter windows.
        self._first_j = self._pad // dec + 1
        comp_delay = self._eq_half
        self.first_output_time_s = (self._first_j + comp_delay - 0.5) * dec / fs - (numtaps - 1) / (
            2.0 * fs
        )
        block = self._BLOCK_REAL if kind == "real" else self._BLOCK_COMPLEX
        self._max_new = (block - self._pad - 1) // dec + 1
        if self._max_new < 64:
            self._max_new = 64
        self._spectra: dict[int, tuple] = {}
        self._bufs: dict[str, np.ndarray] = {}
        self.reset()

    def droop_response(self, freq_hz) -> np.ndarray:
        """Amplitude response of the discriminator and its equaliser to a modulating
        tone: sinc(f / fs_out) times the equaliser's response (1 within 1e-4 over the
        equalised band; the tone figures can be divided by it exactly)."""
        if np.ndim(freq_hz) == 0:  # one tone a gate: plain floats are quicker
            x = float(freq_hz) / self.fs_out_hz
            h = 1.0 if x == 0.0 else math.sin(math.pi * x) / (math.pi * x)
            if self._eq is not None:
                eq, half = self._eq, self._eq_half
                h *= float(eq[half]) + 2.0 * sum(
                    float(eq[half + k]) * math.cos(_TWO_PI * k * x) for k in range(1, half + 1)
                )
            return np.float64(h)
        x = np.asarray(freq_hz, dtype=np.float64) / self.fs_out_hz
        h = np.sinc(x)
        if self._eq is not None:
            k = np.arange(self._eq.size) - self._eq_half
            h = h * (np.cos(_TWO_PI * np.multiply.outer(x, k)) @ self._eq)
        return h

    def __getstate__(self) -> dict:
        # the FFT workspaces and scratch buffers are caches, remade on use: a pickled
        # demodulator (one handed between processes) carries its state, not them
        state = dict(self.__dict__)
        state["_spectra"] = {}
        state["_bufs"] = {}
        return state

    def outputs_for(self, n_input: int) -> int:
        """Output samples a fresh demodulator gives for its first n_input samples (in
        any split into calls): the output clock's reading at input sample n_input."""
        m = int(n_input)
        eq = 0 if self._eq is None else self._eq.size - 1
        return max(0, -(-m // self.decimation) - self._first_j - eq)

    def seek(self, n_input: int) -> None:
        """Forget all state and continue as if n_input samples had been given: outputs
        keep the grid, indices and mixer phase of a demodulator that was fed the stream
        from its start. The filter history, the discriminator's last sample and the
        equaliser's tail are unknown (zero) until the numtaps + 2 * decimation * (taps of
        the equaliser) samples after n_input have passed; feed those and discard what
        they give, and the outputs are those of a demodulator that read everything."""
        m = int(n_input)
        if m < 0:
            raise ValueError(f"n_input={n_input} must be >= 0")
        self.reset()
        d = self.decimation
        j0 = -(-m // d)
        # the virtual buffer hist ++ input starts at input index j0 * d - pad
        self._hist = np.zeros(self._pad - (j0 * d - m), dtype=self._hist.dtype)
        self._j0 = j0
        self._m = m

    @property
    def settle_inputs(self) -> int:
        """Input samples after `seek` until the outputs are those of one pass."""
        taps = 0 if self._eq is None else self._eq.size
        return self.numtaps + self.decimation * (taps + 2)

    # ----------------------------------------------------------------------------------
    def reset(self) -> None:
        """Forget all state, as if newly created."""
        dtype = np.float64 if self.kind == "real" else np.complex128
        self._hist = np.zeros(self._pad, dtype=dtype)  # input from J0*D - pad
        self._j0 = 0  # decimated samples computed so far
        self._m = 0  # input samples received
        self._last_v: complex | None = None
        self._tail = np.zeros(0)
        self.samples_out = 0

    def _workspace(self, n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Tap spectrum (scaled by 1/D) and reusable buffers for FFT size n.

        Reusing buffers matters: fresh arrays of this size are page-faulted in on every
        call, which cost a quarter of the run time on the machines we measured.
        """
        ws = self._spectra.get(n)
        if ws is None:
            if len(self._spectra) >= 8:
                self._spectra.pop(next(iter(self._spectra)))
            g = sfft.fft(self._g, n) / self.decimation
            ws = (g, np.empty(n, dtype=np.complex128), np.empty(n // self.decimation, complex))
            self._spectra[n] = ws
        return ws

    def _scratch(self, name: str, n: int, dtype) -> np.ndarray:
        """A reusable internal array of at least n elements (a view of length n)."""
        buf = self._bufs.get(name)
        if buf is None or buf.size < n:
            buf = np.empty(max(n, 1024), dtype=dtype)
            self._bufs[name] = buf
        return buf[:n]

    def _fft_size(self, b: int) -> int:
        d = self.decimation
        return d * sfft.next_fast_len(-(-b // d))

    def _band_outputs(self, seg: np.ndarray, n_out: int, out: np.ndarray) -> None:
        """Band-pass outputs v[P + q*D], q < n_out, of one block starting P before."""
        d = self.decimation
        n = self._fft_size(seg.size)
        g, xf, folded = self._workspace(n)
        h = n // 2 + 1
        if seg.size < n or not seg.flags.c_contiguous:  # zero-padded, in a kept buffer
            buf = self._scratch("seg", n, seg.dtype)
            buf[: seg.size] = seg
            buf[seg.size :] = 0.0
            seg = buf
        if self.kind == "real":
            xr = _fft.rfft(seg, out=self._scratch("xr", h, np.complex128))
            np.multiply(xr, g[:h], out=xf[:h])
            np.conjugate(xr[1 : (n + 1) // 2][::-1], out=xf[h:])
            xf[h:] *= g[h:]
        else:
            np.multiply(_fft.fft(seg, out=xf), g, out=xf)
        k = n // d
        if d > 1:
            np.add.reduce(xf.reshape(d, k), axis=0, out=folded)
        else:
            folded[:] = xf
        v = _fft.ifft(folded, out=folded)
        p = self._pad // d
        out[:] = v[p : p + n_out]

    def process(self, samples) -> np.ndarray:
        """Demodulate the next block of input.

        Parameters
        ----------
        samples : array_like
            The next input samples (real for kind="real", real or complex for "complex").
            Any length, including 0.

        Returns
        -------
        numpy.ndarray
            Instantaneous frequency offset from ``carrier_hz`` in Hz, float64, at
            ``fs_out_hz``. The concatenation over calls does not depend on how the input
            was split; the first call returns a few samples fewer (filter start-up).

        Raises
        ------
        TypeError
            If complex samples are given to a real demodulator.
        ValueError
            If samples is not one-dimensional.
        """
        v = self._advance(samples)
        return self._discriminate(v)

    def process_baseband(self, samples) -> tuple[np.ndarray, np.ndarray]:
        """Like `process`, also returning the complex baseband at ``fs_out_hz``.

        Returns
        -------
        inst_freq_hz : numpy.ndarray
            As from `process`.
        baseband : numpy.ndarray
            Complex baseband samples (mixed by -carrier_hz, filtered, decimated) of this
            call, starting with the first sample the filter fully covers. For real input
            they are scaled by 2, so a carrier A cos(...) gives amplitude A (as the
            analytic signal does).
        """
        b = self.process_block(samples)
        return b.inst_hz, b.baseband()

    def process_block(self, samples, *, check_finite: bool = True) -> DemodBlock:
        """Like `process`, returning a `DemodBlock`: the instantaneous frequency, the
        discriminator's raw (unequalised) phase steps and the baseband, which it
        computes only where asked (`DemodBlock.baseband`). A caller that has checked the
        samples for NaN and inf already can skip the check (``check_finite=False``)."""
        v = self._advance(samples, fresh=True, check_finite=check_finite)
        vstart = self._vstart
        inst, step = self._discriminate(v, keep_raw=True)
        return DemodBlock(
            inst_hz=inst,
            step_hz=step,
            fs_out_hz=self.fs_out_hz,
            start_index=vstart - (self._first_j - 1),
            _v=v,
            _v_index=vstart,
            _mix_cycles=self._mix_cycles,
        )

    # ----------------------------------------------------------------------------------
    def _advance(self, samples, fresh: bool = False, check_finite: bool = True) -> np.ndarray:
        """Band-pass outputs of the next input (a reused buffer; a new array if fresh)."""
        x = _as_1d("samples", samples, self.kind)
        if check_finite and x.size and not _finite_energy(x):
            raise ValueError("samples must be finite (found NaN or inf)")
        d = self.decimation
        hist = self._hist
        nh = hist.size
        m = self._m + x.size
        j1 = -(-m // d)
        total = j1 - self._j0
        v = (
            np.empty(max(total, 0), np.complex128)
            if fresh
            else self._scratch("v", max(total, 0), np.complex128)
        )
        done = 0
        pos = 0  # in the virtual buffer hist ++ x
        while done < total:
            nb = min(total - done, self._max_new)
            b = (nb - 1) * d + self._pad + 1
            if pos >= nh:
                seg = x[pos - nh : pos - nh + b]
            elif pos + b <= nh:
                seg = hist[pos : pos + b]
            else:
                seg = np.concatenate((hist[pos:], x[: pos + b - nh]))
            self._band_outputs(seg, nb, v[done : done + nb])
            pos += nb * d
            done += nb
        if pos >= nh:
            self._hist = x[pos - nh :].copy()
        else:
            self._hist = np.concatenate((hist[pos:], x))
        self._m = m
        j0 = self._j0
        self._j0 = j1
        # Drop outputs whose filter window reaches before the first input sample.
        skip = max(0, self._first_j - 1 - j0)
        self._vstart = j0 + skip
        return v[skip:] if skip else v

    def _discriminate(self, v: np.ndarray, keep_raw: bool = False):
        """Equalised instantaneous frequency of baseband v (Hz); with keep_raw also the
        raw steps aligned with v: raw[i] = angle(v[i] conj(v[i-1])) * fs_out / 2 pi, with
        raw[0] = 0 (not used) on a run's first call."""
        if v.size == 0:
            return (np.zeros(0), np.zeros(0)) if keep_raw else np.zeros(0)
        first = self._last_v is None
        # p = v[n] conj(v[n-1]) e^{-jc}: c is the mixer's phase step at the output rate.
        if not first:
            p = self._scratch("p", v.size, np.complex128)
            p[0] = np.conj(self._last_v)
            np.conjugate(v[:-1], out=p[1:])
        else:
            p = self._scratch("p", v.size - 1, np.complex128)
            np.conjugate(v[:-1], out=p)
        p *= v[v.size - p.size :]
        self._last_v = complex(v[-1])
        p *= self._rot
        # Keep float32 in range (the angle does not depend on scale); a sparse look is
        # enough because the filtered amplitude varies slowly.
        # (float32 squares overflow above 1.8e19 and lose everything below 1e-19: a margin
        # of 1e7 either side for the sparse look and the amplitude's variation)
        big = float(np.max(np.abs(p.view(np.float64)[::15]))) if p.size else 1.0
        if big > 1e12 or 0.0 < big < 1e-12:
            p *= 1.0 / big
        comp = self.droop_compensation
        nt = self._tail.size if comp else 0
        # One new array holds the equaliser's input, previous tail ++ new raw
        # frequencies, laid out so that the raw part is also the steps aligned with v
        # (one slot ahead of them on a run's first call): no copies.
        lead = 1 if first else 0
        buf = np.empty(nt + lead + p.size)
        r = buf[lead:]
        r[:nt] = self._tail
        scale = np.float64(self.fs_out_hz / _TWO_PI)
        # Pieces keep the float32 temporaries small enough to be reused, not re-faulted.
        for i in range(0, p.size, 16384):
            q = p[i : i + 16384]
            np.multiply(_phase_angle(q.real, q.imag), scale, out=r[nt + i : nt + i + q.size])
        if comp:
            span = self._eq.size
            if r.size < span:
                self._tail = r.copy()
                y = np.zeros(0)
            else:
                y = np.convolve(r, self._eq, mode="valid")  # symmetric: no flip needed
                self._tail = r[r.size - span + 1 :].copy()
                self.samples_out += y.size
        else:
            y = r.copy() if keep_raw else r
            self.samples_out += y.size
        if not keep_raw:
            return y
        steps = buf[nt:]
        steps[0] = 0.0
        return y, steps


@lru_cache(maxsize=16)
def _nco_table(cycles_per_sample: float, table: int) -> np.ndarray:
    """exp(-j 2 pi c k), k < table: one per demodulator's mixer, kept (read-only)."""
    full = np.exp(-1j * _TWO_PI * cycles_per_sample * np.arange(table))
    full.setflags(write=False)
    return full


def _nco(cycles_per_sample: float, j: np.ndarray, table: int = 1024) -> np.ndarray:
    """exp(-j 2 pi frac(c * j)) for consecutive integers j, by table and block restarts.

    A table of one block is multiplied by an exactly computed phasor per block, so trig
    is evaluated for len(j) / table + table samples instead of len(j) and rounding does
    not accumulate from block to block.
    """
    n = j.size
    if n == 0:
        return np.zeros(0, dtype=np.complex128)
    c = float(cycles_per_sample)
    base = _nco_table(c, table)[: min(table, n)]
    nblocks = -(-n // base.size)
    starts = int(j[0]) + base.size * np.arange(nblocks)
    phase0 = np.mod(c * starts, 1.0)
    heads = np.exp(-1j * _TWO_PI * phase0)
    out = (heads[:, None] * base[None, :]).reshape(-1)
    return out[:n]


@dataclass(frozen=True)
class DemodBlock:
    """One call's output of `FmDemodulator.process_block`.

    Attributes
    ----------
    inst_hz : numpy.ndarray
        Instantaneous frequency offset from the demodulator's carrier in Hz, as returned
        by `FmDemodulator.process` (droop-equalised when the demodulator does that).
    step_hz : numpy.ndarray
        The discriminator's raw output aligned with the baseband: step_hz[k] is
        angle(z[k] conj(z[k-1])) * fs_out / (2 pi) for baseband sample z[k] of this call
        (float32 arithmetic, about 1e-7 rad a step); step_hz[0] is 0 (not used).
    fs_out_hz : float
        Output (baseband) sample rate in Hz.
    start_index : int
        Index of this call's first baseband sample counted from the first baseband
        sample since the demodulator started (or was reset): sample k is at time
        (start_index + k) / fs_out_hz on that run's baseband clock.
    """

    inst_hz: np.ndarray
    step_hz: np.ndarray
    fs_out_hz: float
    start_index: int
    _v: np.ndarray
    _v_index: int
    _mix_cycles: float

    @property
    def n_baseband(self) -> int:
        """Number of baseband samples of this call."""
        return int(self._v.size)

    def baseband(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """Complex baseband samples [start, stop) of this call (computed on request).

        Mixed by -carrier_hz, filtered and decimated; real input is scaled by 2 so a
        carrier A cos(...) gives amplitude A.
        """
        v = self._v[start:stop]
        lo = start if start >= 0 else max(0, self._v.size + start)
        j = np.arange(self._v_index + lo, self._v_index + lo + v.size)
        return v * _nco(self._mix_cycles, j)

    def angle_at(self, idx: np.ndarray) -> np.ndarray:
        """Angles of the baseband samples at the given indices, modulo 2 pi (exact)."""
        idx = np.asarray(idx, dtype=np.int64)
        mix = np.mod(self._mix_cycles * (self._v_index + idx), 1.0)
        return np.angle(self._v[idx]) - _TWO_PI * mix

    def envelope(self) -> np.ndarray:
        """|baseband| (the mixer does not change it)."""
        return np.abs(self._v)


@dataclass(frozen=True)
class PhaseLine:
    """Least-squares line through the unwrapped baseband phase of a `DemodBlock`.

    Attributes
    ----------
    offset_hz : float
        Slope / (2 pi): the carrier's offset from the demodulator's carrier.
    phase_rad : float
        The line at the block's centre time (unwrapped from the first sample's angle).
    t_center_s : float
        That centre, (n - 1) / 2 / fs_out after the block's first baseband sample.
    sigma_offset_hz, sigma_phase_rad : float
        1-sigma uncertainties for white phase noise of variance var(|z|) / mean(|z|)^2
        (noise splits equally between the envelope and the phase of a constant-envelope
        signal).
    cnr : float
        Carrier-to-noise power ratio in the baseband's bandwidth, 1 / (2 var_phase).
    n_samples : int
        Baseband samples used.
    """

    offset_hz: float
    phase_rad: float
    t_center_s: float
    sigma_offset_hz: float
    sigma_phase_rad: float
    cnr: float
    n_samples: int


# Anchor spacing of `phase_line`: the float32 discriminator's rounding drifts the running
# phase by at most about 1e-7 rad a step; exact angles every this many samples bring it
# back, and a straight line between anchors takes out the drift of a steady carrier.
_PHASE_ANCHOR = 32


@lru_cache(maxsize=16)
def _phase_weights(n: int) -> tuple:
    """Per-length constants of `phase_line`: anchors, t, and the weights that turn the
    phase steps and the anchors' corrections into sum(phase) and sum(t * phase)
    (read-only arrays: they are shared)."""
    m = _PHASE_ANCHOR
    anchors = np.arange(0, n, m)
    if anchors[-1] != n - 1:
        anchors = np.append(anchors, n - 1)
    k = np.arange(n, dtype=np.float64)
    t = k - (n - 1) / 2.0  # in samples
    # sum_k sum_{j<=k} s[j] = sum_j s[j] (n - j); sum_k t_k sum_{j<=k} s[j] = sum_j s[j] T_j
    w0 = n - k
    w1 = np.cumsum(t[::-1])[::-1]
    # hat functions of the piecewise-linear correction through the anchors
    seg = np.minimum(np.searchsorted(anchors, k, side="right") - 1, anchors.size - 2)
    left = anchors[seg]
    span = (anchors[seg + 1] - left).astype(np.float64)
    u = (k - left) / span
    nodes = anchors.size
    h0 = np.bincount(seg, 1.0 - u, nodes) + np.bincount(seg + 1, u, nodes)
    h1 = np.bincount(seg, t * (1.0 - u), nodes) + np.bincount(seg + 1, t * u, nodes)
    for a in (anchors, w0, w1, h0, h1):
        a.setflags(write=False)
    return anchors, w0, w1, h0, h1, float(np.dot(t, t))


def phase_line(block: DemodBlock) -> PhaseLine:
    """Least-squares line through the unwrapped phase of a block's baseband.

    Equals a fit of ``numpy.unwrap(numpy.angle(z))`` against time to rounding (the
    tests check it), at a fraction of the cost: the unwrapped phase is the running sum
    of the discriminator's phase steps, whose float32 rounding is taken out by exact
    angles every 32 samples; the sums of the fit are dot products of the steps with
    fixed weights, so the phase itself is never formed.

    Parameters
    ----------
    block : DemodBlock
        At least 2 baseband samples.

    Returns
    -------
    PhaseLine

    Raises
    ------
    ValueError
        If the block has fewer than 2 baseband samples.
    """
    n = block.n_baseband
    if n < 2:
        raise ValueError(f"block has {n} baseband samples; at least 2 are needed")
    fs = block.fs_out_hz
    rad = _TWO_PI / fs
    anchors, w0, w1, h0, h1, tt = _phase_weights(n)
    s = block.step_hz  # s[0] = 0
    theta = block.angle_at(anchors)
    theta[0] = math.remainder(float(theta[0]), _TWO_PI)  # in [-pi, pi], as numpy.angle
    # the running sum at the anchors: sums over (a_i, a_{i+1}]
    seg = np.add.reduceat(s, anchors[:-1] + 1) * rad
    run = np.concatenate(([0.0], np.cumsum(seg)))
    e = theta - theta[0] - run
    e -= _TWO_PI * np.round(e / _TWO_PI)
    s0 = n * float(theta[0]) + float(np.dot(s, w0)) * rad + float(np.dot(e, h0))
    s1 = float(np.dot(s, w1)) * rad + float(np.dot(e, h1))
    slope = s1 / tt  # rad per sample
    mean_ph = s0 / n
    env = block.envelope()
    a = float(env.sum()) / n
    var_env = float(np.dot(env, env)) / n - a * a
    if var_env < 1e-9 * a * a:  # a very clean carrier: the difference lost its digits
        env -= a
        var_env = float(np.dot(env, env)) / n
    sigma_ph2 = max(var_env / (a * a), 1e-30) if a > 0 else math.inf
    tt_s = tt / (fs * fs)
    return PhaseLine(
        offset_hz=slope * fs / _TWO_PI,
        phase_rad=mean_ph,
        t_center_s=(n - 1) / 2.0 / fs,
        sigma_offset_hz=math.sqrt(sigma_ph2 / tt_s) / _TWO_PI,
        sigma_phase_rad=math.sqrt(sigma_ph2 / n),
        cnr=0.5 / sigma_ph2 if sigma_ph2 > 0 else math.inf,
        n_samples=n,
    )


# --------------------------------------------------------------------------------------
# Deviation statistics
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class DeviationFigures:
    """Deviation of an (already filtered) instantaneous-frequency record, in Hz.

    Attributes
    ----------
    peak_pos_hz : float
        Largest value (deviation above the carrier).
    peak_neg_hz : float
        Smallest value (deviation below the carrier; negative when the signal swings
        below it).
    peak_avg_hz : float
        (peak_pos_hz - peak_neg_hz) / 2, i.e. (peak+ + |peak-|) / 2.
    rms_hz : float
        Root-mean-square about the mean.
    rms_sqrt2_hz : float
        rms_hz * sqrt(2): the peak deviation of a sine with that rms.
    mean_hz : float
        Mean (carrier offset from the demodulator's carrier_hz).
    n_samples : int
        Number of samples used.
    """

    peak_pos_hz: float
    peak_neg_hz: float
    peak_avg_hz: float
    rms_hz: float
    rms_sqrt2_hz: float
    mean_hz: float
    n_samples: int


def _parabolic_peak(x: np.ndarray, i: int) -> float:
    """Vertex of the parabola through x[i-1], x[i], x[i+1] (x[i] at the ends)."""
    if i <= 0 or i >= x.size - 1:
        return float(x[i])
    a, b, c = float(x[i - 1]), float(x[i]), float(x[i + 1])
    den = a - 2.0 * b + c
    if den == 0.0:
        return b
    p = 0.5 * (a - c) / den
    p = max(-0.5, min(0.5, p))
    return b - 0.25 * (a - c) * p


def deviation_figures(
    inst_freq_hz, *, interpolate_peaks: bool = True, check_finite: bool = True
) -> DeviationFigures:
    """Peak, average-peak, RMS and mean deviation of an instantaneous-frequency record.

    Pass the discriminator output *after* the post-demodulation filter (audio band and,
    where used, de-emphasis): the raw output's extremes are noise spikes. Peaks are taken
    relative to the demodulator's carrier (0 Hz); subtract ``mean_hz`` first to measure
    about the actual carrier.

    Parameters
    ----------
    inst_freq_hz : array_like
        Instantaneous frequency offset in Hz (real, finite, 1-D, at least one sample).
    interpolate_peaks : bool
        Refine the largest and smallest sample by a parabola through it and its two
        neighbours, so the peak of a tone sampled at 20 points per cycle is read within
        0.03% instead of up to 1.2% low (default True).
    check_finite : bool
        Check for NaN and inf (default True); a caller whose samples are finite by
        construction can skip the pass.

    Returns
    -------
    DeviationFigures

    Raises
    ------
    ValueError
        If the record is empty, not 1-D or not finite.
    TypeError
        If it is not real.
    """
    x = _as_real_1d("inst_freq_hz", inst_freq_hz)
    if x.size == 0:
        raise ValueError("inst_freq_hz is empty (0 samples)")
    if check_finite and not np.isfinite(np.dot(x, x)):  # inf or NaN anywhere shows here
        if not np.all(np.isfinite(x)):
            raise ValueError("inst_freq_hz must be finite (found NaN or inf)")
    imax = int(np.argmax(x))
    imin = int(np.argmin(x))
    if interpolate_peaks:
        pmax = _parabolic_peak(x, imax)
        pmin = -_parabolic_peak(-x, imin)
    else:
        pmax, pmin = float(x[imax]), float(x[imin])
    n = x.size
    mean = float(x.sum()) / n
    d = x - mean
    rms = math.sqrt(float(np.dot(d, d)) / n)
    return DeviationFigures(
        peak_pos_hz=pmax,
        peak_neg_hz=pmin,
        peak_avg_hz=0.5 * (pmax - pmin),
        rms_hz=rms,
        rms_sqrt2_hz=rms * math.sqrt(2.0),
        mean_hz=mean,
        n_samples=int(x.size),
    )


class DeviationHistogram:
    """Streaming histogram of instantaneous deviation with bounded memory.

    Bins have a fixed width and edges at integer multiples of it (bin i covers
    [i*w, (i+1)*w)); the range grows to cover new data. When it would exceed
    ``max_bins`` the bin width doubles (pairs of bins merge), so memory stays bounded
    whatever the input.

    Feed it the *filtered* instantaneous frequency, as for `deviation_figures`.

    Parameters
    ----------
    bin_hz : float
        Initial bin width in Hz (default 10 Hz).
    max_bins : int
        Upper bound on the number of bins (default 65536).

    Raises
    ------
    ValueError
        If bin_hz <= 0 or max_bins < 16.
    """

    def __init__(self, bin_hz: float = 10.0, *, max_bins: int = 65536) -> None:
        self.bin_hz = _positive_finite("bin_hz", bin_hz)
        if isinstance(max_bins, bool) or not isinstance(max_bins, (int, np.integer)):
            raise TypeError(f"max_bins must be an int, got {type(max_bins).__name__}")
        if max_bins < 16:
            raise ValueError(f"max_bins={max_bins} must be >= 16")
        self.max_bins = int(max_bins)
        self._first = 0  # index of counts[0]
        self._counts = np.zeros(0, dtype=np.int64)

    @property
    def count(self) -> int:
        """Number of samples accumulated."""
        return int(self._counts.sum())

    def _merge(self) -> None:
        # Pairs (2m, 2m+1) -> m at twice the width; align the first index to even.
        if self._first % 2:
            self._counts = np.concatenate(([0], self._counts))
            self._first -= 1
        if self._counts.size % 2:
            self._counts = np.concatenate((self._counts, [0]))
        self._counts = self._counts.reshape(-1, 2).sum(axis=1)
        self._first //= 2
        self.bin_hz *= 2.0

    def update(self, inst_freq_hz, *, check_finite: bool = True) -> None:
        """Add samples (Hz, finite, 1-D). Empty input is a no-op.

        With check_finite=False the caller vouches that the samples are finite."""
        x = _as_real_1d("inst_freq_hz", inst_freq_hz)
        if x.size == 0:
            return
        lo_v, hi_v = float(x.min()), float(x.max())
        if check_finite and not (math.isfinite(lo_v) and math.isfinite(hi_v)):
            raise ValueError("inst_freq_hz must be finite (found NaN or inf)")
        self._cover(lo_v, hi_v)
        idx = np.floor(x / self.bin_hz).astype(np.int64)
        idx -= self._first
        self._counts += np.bincount(idx, minlength=self._counts.size)

    def _cover(self, lo_v: float, hi_v: float) -> None:
        """Widen the bins (merging pairs) and grow the range until lo_v..hi_v fit."""
        self._cover_bins(math.floor(lo_v / self.bin_hz), math.floor(hi_v / self.bin_hz))

    def _cover_bins(self, lo_bin: int, hi_bin: int) -> None:
        """`_cover` for the bins lo_bin..hi_bin at the current width (integers, so no
        rounding of edges: bin i at width w is bin i // 2**k at width w * 2**k)."""
        base_w = self.bin_hz
        while True:
            scale = round(self.bin_hz / base_w)
            lo = lo_bin // scale
            hi = hi_bin // scale
            if self._counts.size:
                lo = min(lo, self._first)
                hi = max(hi, self._first + self._counts.size - 1)
            if hi - lo + 1 <= self.max_bins:
                break
            self._merge()
        if self._counts.size == 0:
            self._first = lo
            self._counts = np.zeros(hi - lo + 1, dtype=np.int64)
        elif lo < self._first or hi >= self._first + self._counts.size:
            grown = np.zeros(hi - lo + 1, dtype=np.int64)
            off = self._first - lo
            grown[off : off + self._counts.size] = self._counts
            self._counts = grown
            self._first = lo

    def merge(self, other: DeviationHistogram) -> None:
        """Add the counts of `other` (made with the same initial bin width): the result
        is the histogram one instance fed both streams would hold, count for count
        (bins only ever merge in pairs whose edges are multiples of the width)."""
        if not other._counts.size:
            return
        if not self._counts.size:
            self.bin_hz, self._first, self._counts = (
                other.bin_hz,
                other._first,
                other._counts.copy(),
            )
            return
        while self.bin_hz < other.bin_hz:
            self._merge()
        counts, first, width = self._widened(other)  # other is finer: at our width
        if not math.isclose(self.bin_hz, width, rel_tol=1e-12):
            raise ValueError(f"bin widths {self.bin_hz} and {width} do not share a base width")
        self._cover_bins(first, first + counts.size - 1)
        if self.bin_hz > width:  # covering widened our bins: widen theirs alike
            counts, first, width = self._widened(other)
        off = first - self._first
        self._counts[off : off + counts.size] += counts

    def _widened(self, other: DeviationHistogram) -> tuple[np.ndarray, int, float]:
        """other's (counts, first bin, width), its bins merged in pairs up to our width
        (or as they are when already as wide)."""
        if other.bin_hz >= self.bin_hz:
            return other._counts, other._first, other.bin_hz
        twin = DeviationHistogram(other.bin_hz, max_bins=self.max_bins)
        twin._counts, twin._first = other._counts.copy(), other._first
        while twin.bin_hz < self.bin_hz:
            twin._merge()
        return twin._counts, twin._first, twin.bin_hz

    def exceeded_hz(self, fraction: float) -> float:
        """|deviation| exceeded by the given fraction of samples (e.g. 0.01 for 1%).

        Linear interpolation inside a bin; resolution is the bin width.

        Raises
        ------
        ValueError
            If fraction is not in (0, 1) or the histogram is empty.
        """
        q = _finite("fraction", fraction)
        if not 0.0 < q < 1.0:
            raise ValueError(f"fraction={fraction} must be in (0, 1)")
        total = self.count
        if total == 0:
            raise ValueError("histogram is empty (0 samples)")
        w = self.bin_hz
        idx = np.arange(self._first, self._first + self._counts.size)
        # |x| bin of signed bin i: i for i >= 0, -i-1 for i < 0 (edges stay multiples of w).
        absidx = np.where(idx >= 0, idx, -idx - 1)
        folded = np.bincount(absidx, weights=self._counts.astype(np.float64))
        above = np.cumsum(folded[::-1])[::-1]  # samples with |x| >= a*w
        target = q * total
        # Largest a with above[a] > target: the level lies inside bin a.
        a = int(np.nonzero(above > target)[0].max())
        above_next = above[a + 1] if a + 1 < above.size else 0.0
        inside = folded[a]
        frac_in = (target - above_next) / inside if inside > 0 else 0.0
        return float((a + 1 - frac_in) * w)

    def to_dict(self) -> dict:
        """JSON-ready contents: bin width, first bin's lower edge, counts."""
        return {
            "bin_hz": self.bin_hz,
            "first_edge_hz": self._first * self.bin_hz,
            "counts": [int(c) for c in self._counts],
            "n_samples": self.count,
        }


# --------------------------------------------------------------------------------------
# ITU-R BS.412 modulation power
# --------------------------------------------------------------------------------------


def modulation_power_dbr(mean_square_deviation_hz2: float) -> float:
    """Modulation power in dBr relative to a sine of +/-19 kHz peak deviation.

    P = 10 log10(<deltaf^2> / ((19 kHz)^2 / 2)).

    Parameters
    ----------
    mean_square_deviation_hz2 : float
        Mean of the squared instantaneous deviation in Hz^2 (>= 0; 0 gives -inf).

    Returns
    -------
    float
        Power in dBr: a +/-19 kHz sine reads 0.00 dBr, +/-75 kHz reads +11.93 dBr.

    Raises
    ------
    ValueError
        If the value is negative or not finite.

    References
    ----------
    ITU-R BS.412, limit of the multiplex power over any 60 s interval.
    """
    ms = _nonneg_finite("mean_square_deviation_hz2", mean_square_deviation_hz2)
    if ms == 0.0:
        return -math.inf
    return 10.0 * math.log10(ms / (BS412_REFERENCE_DEVIATION_HZ**2 / 2.0))


@dataclass(frozen=True)
class ModulationPower:
    """BS.412 modulation power of a record.

    Attributes
    ----------
    power_dbr : float
        Maximum over the sliding windows (see `ModulationPowerMeter`), or over the whole
        record if no window fits in it.
    window_s : float
        Length of the windows used (the record length when whole_record).
    n_windows : int
        Number of window positions measured: windows starting on the meter's step (1/60
        of a window) that lie wholly in the record and hold samples (0 when whole_record).
    whole_record : bool
        True when no window fits in the record (it is shorter than a window).
    """

    power_dbr: float
    window_s: float
    n_windows: int
    whole_record: bool


#: Steps per window of the sliding BS.412 maximum (1 s steps for 60 s windows).
_POWER_STEPS_PER_WINDOW = 60


class ModulationPowerMeter:
    """Streaming BS.412 power: the maximum mean square over sliding windows.

    ITU-R BS.412 (recalled from memory, not checked against the text) limits the power
    of the multiplex integrated over *any* 60 s interval. The meter approximates "any"
    by a step of 1/60 window (1 s for 60 s windows): the sample clock, counted from
    index 0 of the stream, is cut into 60 blocks a window, block k starting at sample
    floor(k W / 60) (W the window in samples; fewer, one-sample blocks when W < 60), so
    the blocks are W/60 long to a sample and any 60 consecutive ones hold exactly W
    samples. A window starts on every block boundary. A burst straddling a boundary of
    back-to-back windows is so measured whole; one starting between steps reads low by
    at most the step's share of it (1/60, 0.07 dB).

    Samples that are not measured (a filter settling) can be stepped over with `skip`:
    they move the clock but add nothing, and a window's power is the mean square of the
    samples it holds (windows holding none are ignored). Only windows lying wholly
    between the meter's ``start_index`` and its clock count; if there is none, the
    result is the mean square of the whole record (``whole_record``).

    A meter for a later part of a stream starts at that part's ``start_index`` (any
    sample); `merge` joins it to the meter of the part before, adding the two shares of
    the block cut by the boundary, so parts measured apart give what one meter gives.

    Memory: the meter keeps the full per-block history, one (sum of squares, count)
    pair of 16 bytes a block: 58 kB per hour of input at 1 s steps, whatever the sample
    rate. `result` evaluates every window from it.

    Parameters
    ----------
    fs_hz : float
        Sample rate of the instantaneous-frequency input.
    window_s : float
        Window length (BS.412: 60 s).
    start_index : int
        Clock index of the first sample (default 0, the start of the stream).
    """

    def __init__(self, fs_hz: float, *, window_s: float = 60.0, start_index: int = 0) -> None:
        self.fs_hz = _positive_finite("fs_hz", fs_hz)
        self.window_s = _positive_finite("window_s", window_s)
        if isinstance(start_index, bool) or not isinstance(start_index, (int, np.integer)):
            raise TypeError(f"start_index must be an int, got {type(start_index).__name__}")
        if start_index < 0:
            raise ValueError(f"start_index={start_index} must be >= 0")
        self._win = max(1, round(self.window_s * self.fs_hz))
        self._nblk = min(_POWER_STEPS_PER_WINDOW, self._win)
        #: step of the sliding windows in seconds (the mean block length)
        self.step_s = self._win / self._nblk / self.fs_hz
        self._origin = self._pos = int(start_index)
        # block k is [floor(k W / K), floor((k + 1) W / K)); _first holds the origin
        self._first = self._block_of(self._origin)
        self._k = self._first  # the open block, holding the clock
        self._next = self._edge(self._k + 1)
        # per block from _first to _k: sum of squares and number of samples
        self._sum = array("d", [0.0])
        self._cnt = array("q", [0])
        self._all = 0.0
        self._all_n = 0

    def _edge(self, k: int) -> int:
        """Clock index where block k starts."""
        return k * self._win // self._nblk

    def _block_of(self, i: int) -> int:
        """The block holding clock index i (the last k with _edge(k) <= i)."""
        return ((i + 1) * self._nblk - 1) // self._win

    def skip(self, n: int) -> None:
        """Move the clock over n samples that are not measured."""
        n = int(n)
        if n < 0:
            raise ValueError(f"n={n} must be >= 0")
        self._pos += n
        if self._pos >= self._next:
            k = self._block_of(self._pos)
            m = k - self._k
            self._sum.extend(array("d", bytes(8 * m)))
            self._cnt.extend(array("q", bytes(8 * m)))
            self._k = k
            self._next = self._edge(k + 1)

    def update(self, inst_freq_hz, *, check_finite: bool = True) -> None:
        """Add samples of instantaneous deviation in Hz (empty input is a no-op)."""
        x = _as_real_1d("inst_freq_hz", inst_freq_hz)
        n = x.size
        if n == 0:
            return
        if check_finite:  # before anything is counted: bad input leaves the meter as it was
            with np.errstate(over="ignore", invalid="ignore"):
                if not np.isfinite(np.dot(x, x)) and not np.all(np.isfinite(x)):
                    raise ValueError("inst_freq_hz must be finite (found NaN or inf)")
        pos, nxt = self._pos, self._next
        sums, cnts = self._sum, self._cnt
        if pos + n < nxt:  # hot path: no block boundary reached
            sq = float(np.dot(x, x))
            sums[-1] += sq
            cnts[-1] += n
            self._pos = pos + n
            self._all += sq
            self._all_n += n
            return
        i = 0
        total = 0.0
        k = self._k
        while i < n:
            end = min(n, i + nxt - pos)
            piece = x[i:end]
            sq = float(np.dot(piece, piece))
            sums[-1] += sq
            cnts[-1] += end - i
            total += sq
            pos += end - i
            i = end
            if pos == nxt:
                sums.append(0.0)
                cnts.append(0)
                k += 1
                nxt = self._edge(k + 1)
        self._pos, self._next, self._k = pos, nxt, k
        self._all += total
        self._all_n += n

    def merge(self, later: ModulationPowerMeter) -> None:
        """Append the meter of the part of the stream right after this one's.

        Raises
        ------
        ValueError
            If `later` does not start where this meter's clock stands, or the window
            lengths differ.
        """
        if later._win != self._win:
            raise ValueError(f"window lengths differ ({self._win} and {later._win} samples)")
        if later._origin != self._pos:
            raise ValueError(
                f"the later meter starts at sample {later._origin}, this one stands at {self._pos}"
            )
        # later's first block is this one's open block (both hold sample self._pos)
        self._sum[-1] += later._sum[0]
        self._cnt[-1] += later._cnt[0]
        self._sum.extend(later._sum[1:])
        self._cnt.extend(later._cnt[1:])
        self._all += later._all
        self._all_n += later._all_n
        self._pos, self._k, self._next = later._pos, later._k, later._next

    def _windows(self) -> tuple[np.ndarray, np.ndarray]:
        """Sum of squares and count of every window lying wholly in the record."""
        nb = self._nblk
        k0 = -(-self._origin * nb // self._win)  # first window starting at or after origin
        k1 = self._block_of(self._pos - self._win)  # last window ending by the clock
        if k1 < k0:
            return np.zeros(0), np.zeros(0, dtype=np.int64)
        i0, i1 = k0 - self._first, k1 - self._first
        sums = np.frombuffer(self._sum, dtype=np.float64)[i0 : i1 + nb]
        cnts = np.frombuffer(self._cnt, dtype=np.int64)[i0 : i1 + nb]
        # summed block by block (no running-sum cancellation over a long record)
        s = np.lib.stride_tricks.sliding_window_view(sums, nb).sum(axis=1)
        c = np.lib.stride_tricks.sliding_window_view(cnts, nb).sum(axis=1)
        return s, c

    def result(self) -> ModulationPower:
        """The power so far.

        Raises
        ------
        ValueError
            If no samples were given.
        """
        if self._all_n == 0:
            raise ValueError("no samples (0 samples given)")
        s, c = self._windows()
        held = c > 0
        if held.any():
            return ModulationPower(
                power_dbr=modulation_power_dbr(float(np.max(s[held] / c[held]))),
                window_s=self._win / self.fs_hz,
                n_windows=int(np.count_nonzero(held)),
                whole_record=False,
            )
        return ModulationPower(
            power_dbr=modulation_power_dbr(self._all / self._all_n),
            window_s=self._all_n / self.fs_hz,
            n_windows=0,
            whole_record=True,
        )


def modulation_power(inst_freq_hz, fs_hz: float, *, window_s: float = 60.0) -> ModulationPower:
    """BS.412 modulation power of a record: maximum over 60 s windows, or whole record.

    Parameters
    ----------
    inst_freq_hz : array_like
        Instantaneous deviation in Hz about the carrier (the multiplex signal).
    fs_hz : float
        Its sample rate.
    window_s : float
        Window length in seconds (default 60, per BS.412).

    Returns
    -------
    ModulationPower

    Raises
    ------
    ValueError
        If the record is empty or a parameter is not positive.

    References
    ----------
    ITU-R BS.412: the power over any 60 s shall not exceed that of a +/-19 kHz sine.
    """
    meter = ModulationPowerMeter(fs_hz, window_s=window_s)
    meter.update(inst_freq_hz)
    return meter.result()


# --------------------------------------------------------------------------------------
# Bessel lines
# --------------------------------------------------------------------------------------


def _line_sums(x: np.ndarray, w0: float, dw: float, kmin: int, kmax: int) -> np.ndarray:
    """sum_n x[n] exp(-j (w0 + k dw) n) for k = kmin..kmax, by a phasor recurrence."""
    n = np.arange(x.size)
    base = x * _nco(w0 / _TWO_PI, n)
    step = _nco(dw / _TWO_PI, n)
    out = np.empty(kmax - kmin + 1, dtype=np.complex128)
    cur = base * _nco(kmin * dw / _TWO_PI, n)
    for i in range(out.size):
        out[i] = cur.sum()
        if i + 1 < out.size:
            cur *= step
    return out


def _dirichlet(dw: np.ndarray, n: int) -> np.ndarray:
    """sum_{m<n} exp(j dw m), exactly, for an array of angle steps."""
    dw = np.asarray(dw, dtype=np.float64)
    half = 0.5 * dw
    s = np.sin(half)
    out = np.empty(dw.shape, dtype=np.complex128)
    small = np.abs(s) < 1e-12
    out[small] = n
    ok = ~small
    out[ok] = np.exp(1j * half[ok] * (n - 1)) * np.sin(n * half[ok]) / s[ok]
    return out


def fm_line_amplitudes(
    z, fs_hz: float, carrier_hz: float, mod_tone_hz: float, k_max: int
) -> np.ndarray:
    """Amplitudes of the spectral lines at carrier + k * mod_tone, k = -k_max..k_max.

    A least-squares fit of all 2 k_max + 1 lines (and, for real input, their mirror
    images at negative frequency) with their exact mutual leakage, so lines need not fall
    on FFT bins and the record need not hold whole modulation cycles.

    Parameters
    ----------
    z : array_like
        Real (beat note) or complex (I/Q) samples.
    fs_hz : float
        Sample rate in Hz.
    carrier_hz : float
        Carrier frequency in Hz (measure it first; an error of df leaves the fit
        accurate only while df * record length << 1).
    mod_tone_hz : float
        Modulating tone in Hz (> 0).
    k_max : int
        Highest line order (>= 0).

    Returns
    -------
    numpy.ndarray
        Peak amplitude of each line, in input units, index k + k_max. For a complex
        A exp(j(w t + beta sin(wm t))) the line k is A |J_k(beta)|; for a real
        A cos(...) too.

    Raises
    ------
    ValueError
        If parameters are out of range, a line falls outside (0, fs/2) for real input
        or outside (-fs/2, fs/2) for complex input, or the record is shorter than needed
        to resolve the lines (fewer than 2 fs / mod_tone samples).
    """
    a = np.asarray(z)
    if a.ndim != 1:
        raise ValueError(f"z must be one-dimensional, got shape {a.shape}")
    if a.dtype.kind not in "biufc":
        raise TypeError(f"z must be numeric, got dtype {a.dtype}")
    fs = _positive_finite("fs_hz", fs_hz)
    fc = _finite("carrier_hz", carrier_hz)
    fm = _positive_finite("mod_tone_hz", mod_tone_hz)
    if isinstance(k_max, bool) or not isinstance(k_max, (int, np.integer)):
        raise TypeError(f"k_max must be an int, got {type(k_max).__name__}")
    if k_max < 0:
        raise ValueError(f"k_max={k_max} must be >= 0")
    real = a.dtype.kind != "c"
    lo, hi = fc - k_max * fm, fc + k_max * fm
    if real and not (lo > 0.0 and hi < fs / 2.0):
        raise ValueError(
            f"lines carrier_hz={carrier_hz} +/- k_max={k_max} x mod_tone_hz={mod_tone_hz} "
            f"must lie in (0, fs_hz/2={fs / 2.0}) for real input"
        )
    if not real and not (lo > -fs / 2.0 and hi < fs / 2.0):
        raise ValueError(
            f"lines carrier_hz={carrier_hz} +/- k_max={k_max} x mod_tone_hz={mod_tone_hz} "
            f"must lie in (-fs_hz/2, fs_hz/2)"
        )
    n = a.size
    if n < 2.0 * fs / fm:
        raise ValueError(
            f"z has {n} samples; at least {math.ceil(2.0 * fs / fm)} (2 modulation "
            "cycles) are needed"
        )
    x = a.astype(np.complex128 if not real else np.float64)
    w0 = _TWO_PI * fc / fs
    dw = _TWO_PI * fm / fs
    ks = np.arange(-k_max, k_max + 1)
    w = w0 + ks * dw
    rhs = _line_sums(x, w0, dw, -k_max, k_max)  # E^H x for the positive lines
    if not real:
        gram = _dirichlet(w[None, :] - w[:, None], n)
        coef = np.linalg.solve(gram, rhs)
        return np.abs(coef)
    # Real input: model x = sum c_k e^{j w_k n} + conj; unknowns [c, conj(c)].
    wall = np.concatenate((w, -w))
    gram = _dirichlet(wall[None, :] - wall[:, None], n)
    rhs_all = np.concatenate((rhs, np.conj(rhs)))
    coef = np.linalg.solve(gram, rhs_all)
    return 2.0 * np.abs(coef[: ks.size])


@dataclass(frozen=True)
class BesselFit:
    """Least-squares fit of |J_k(beta)| line amplitudes.

    Attributes
    ----------
    mod_index : float
        Fitted modulation index beta.
    scale : float
        Fitted unmodulated carrier amplitude (input units).
    residual : float
        RMS misfit relative to the RMS line amplitude (0 = perfect).
    carrier_depth_db : float
        Carrier line relative to the unmodulated carrier (scale), in dB (negative).
    nearest_carrier_null : int
        Which zero of J0 (1, 2, 3, ...) beta is nearest to.
    nearest_null_mod_index : float
        That zero (2.40483, 5.52008, ...).
    peak_deviation_hz : float | None
        beta * mod_tone_hz when the tone was given.
    """

    mod_index: float
    scale: float
    residual: float
    carrier_depth_db: float
    nearest_carrier_null: int
    nearest_null_mod_index: float
    peak_deviation_hz: float | None


_J0_ZEROS = sspec.jn_zeros(0, 40)


def fit_bessel(
    amplitudes, *, mod_tone_hz: float | None = None, beta_max: float | None = None
) -> BesselFit:
    """Fit the modulation index to measured line amplitudes A |J_k(beta)|.

    The overall scale A is unknown and solved in closed form for each beta; the misfit
    has many local minima in beta, so it is scanned on a fine grid and the best point
    refined with a bounded scalar search.

    Parameters
    ----------
    amplitudes : array_like
        Line amplitudes for k = -K..K (odd length 2K+1, centre = carrier), e.g. from
        `fm_line_amplitudes`.
    mod_tone_hz : float, optional
        The modulating tone, to report the peak deviation.
    beta_max : float, optional
        Upper end of the search (default K + 1: beyond it the lines outside +/-K hold
        much of the power and the fit is not trustworthy).

    Returns
    -------
    BesselFit

    Raises
    ------
    ValueError
        If amplitudes has even length, fewer than 3 lines, negative or non-finite values
        or is all zero.

    References
    ----------
    Line amplitudes J_k(beta) of single-tone FM and the zeros of J0 (Abramowitz & Stegun
    Table 9.5; DLMF 10.21), evaluated with scipy.special.
    """
    a = _as_real_1d("amplitudes", amplitudes)
    if a.size < 3 or a.size % 2 == 0:
        raise ValueError(f"amplitudes must have odd length >= 3 (k=-K..K), got {a.size}")
    if not np.all(np.isfinite(a)) or np.any(a < 0):
        raise ValueError("amplitudes must be finite and >= 0")
    energy = float(a @ a)
    if energy == 0.0:
        raise ValueError("amplitudes are all zero")
    kk = (a.size - 1) // 2
    fm = None if mod_tone_hz is None else _positive_finite("mod_tone_hz", mod_tone_hz)
    bmax = float(kk + 1) if beta_max is None else _positive_finite("beta_max", beta_max)
    ks = np.arange(-kk, kk + 1)

    def misfit(beta: float) -> float:
        j = np.abs(sspec.jv(ks, beta))
        jj = float(j @ j)
        return energy - float(a @ j) ** 2 / jj

    # a grid step of 1/40 puts a point within the basin of every minimum (they lie about
    # a zero spacing of the J_k apart, ~pi); |J_-k| = |J_k| halves the evaluations
    grid = np.linspace(0.0, bmax, max(200, int(bmax * 40)) + 1)
    half = np.abs(sspec.jv(np.arange(kk + 1)[None, :], grid[:, None]))
    jgrid = np.concatenate([half[:, :0:-1], half], axis=1)
    proj = jgrid @ a
    norm = np.einsum("ij,ij->i", jgrid, jgrid)
    r = energy - proj**2 / norm
    i = int(np.argmin(r))
    step = grid[1] - grid[0]
    lo, hi = max(0.0, grid[i] - step), min(bmax, grid[i] + step)
    res = minimize_scalar(misfit, bounds=(lo, hi), method="bounded", options={"xatol": 1e-10})
    beta = float(res.x) if res.fun <= r[i] else float(grid[i])
    j = np.abs(sspec.jv(ks, beta))
    scale = float(a @ j) / float(j @ j)
    resid = math.sqrt(max(misfit(beta), 0.0) / energy)
    c0 = float(a[kk])
    depth = 20.0 * math.log10(c0 / scale) if c0 > 0 else -math.inf
    nn = int(np.argmin(np.abs(_J0_ZEROS - beta)))
    return BesselFit(
        mod_index=beta,
        scale=scale,
        residual=resid,
        carrier_depth_db=depth,
        nearest_carrier_null=nn + 1,
        nearest_null_mod_index=float(_J0_ZEROS[nn]),
        peak_deviation_hz=None if fm is None else beta * fm,
    )
