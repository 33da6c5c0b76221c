"""Measurement filters applied before the quality figures: audio bands, weightings, de-emphasis.

Every filter is a cascade of second-order sections for `scipy.signal.sosfilt`, so the
engine can stream it block by block with its filter state (`zi`). All are causal IIR
filters of low order (a few sections), cheap at any rate from 8 kHz to 384 kHz.

Design notes:

- Band filters ("300-3000", "20-15k") are 4th-order-per-edge Butterworth band-passes,
  bilinear with the edges pre-warped (scipy.signal.butter), so -3 dB falls exactly on the
  band edges at every rate.
- Weightings are analog prototypes mapped section by section: each section's bilinear
  transform is pre-warped at its own natural frequency, so every pole lands where the
  analog one is. First-order low-pass factors (A-weighting's 12194 Hz double pole, the
  de-emphasis) are magnitude-matched instead: exact at DC, at the corner and at fs/2. The
  bilinear transform would force a zero at fs/2 (the droop of a plain design).
- Psophometric (ITU-T O.41) and C-message (IEEE 743) weightings have no closed form; their
  analog prototypes were fitted by least squares (log magnitude) to the published tables
  below: the points reproduced in ANSI/TIA-470.120-C Annex A [seen] weighted three times the
  further table points recalled from memory ([memory]).
- Section-wise mapping leaves errors where a prototype's features come near fs/2. At
  design time every weighting and the de-emphasis are polished by a least-squares fit of
  all section coefficients to the prototype's response (dB, 48 log-spaced points from
  20 Hz to 20 kHz or 0.45 fs), started from the mapped design; zeros are then reflected
  inside the unit circle (minimum phase, same magnitude). Designs are cached per rate.
"""

from __future__ import annotations

import math
from functools import lru_cache
from typing import Literal

import numpy as np

__all__ = [
    "FILTERS",
    "FilterName",
    "emphasis_sos",
    "filter_response_db",
    "filter_sos",
    "sos_gain",
]

FilterName = Literal[
    "none",
    "300-3000",
    "20-15k",
    "a-weight",
    "psophometric",
    "c-message",
    "deemph-50us",
    "deemph-75us",
]
FILTERS: tuple[str, ...] = (
    "none",
    "300-3000",
    "20-15k",
    "a-weight",
    "psophometric",
    "c-message",
    "deemph-50us",
    "deemph-75us",
)

#: Published weighting points (Hz: dB) used for the psophometric fit. ITU-T O.41,
#: 0 dB at 800 Hz. [seen] = ANSI/TIA-470.120-C Annex A; the rest [memory].
PSOPHOMETRIC_SEEN = {300: -10.6, 800: 0.0, 1000: 1.0, 2000: -3.0, 3000: -5.6, 4000: -15.0}
PSOPHOMETRIC_MEMORY = {
    50: -63.0, 100: -41.0, 200: -21.0, 400: -6.3, 500: -3.6, 600: -2.0, 700: -0.9,
    900: 0.6, 1200: 0.0, 1400: -0.9, 1600: -1.7, 1800: -2.4, 2500: -4.2, 3500: -8.5,
    4500: -25.0, 5000: -36.0,
}  # fmt: skip
#: C-message weighting, IEEE 743, 0 dB at 1 kHz. [seen] = ANSI/TIA-470.120-C Annex A.
C_MESSAGE_SEEN = {300: -16.3, 800: -1.3, 1000: 0.0, 2000: -1.1, 3000: -3.0, 4000: -14.6}
C_MESSAGE_MEMORY = {
    60: -55.7, 100: -42.5, 200: -25.1, 400: -11.2, 500: -7.7, 600: -5.0, 700: -2.8,
    900: -0.4, 1200: -0.2, 1500: -1.0, 2500: -1.4, 3500: -7.6, 4500: -21.5, 5000: -28.5,
}  # fmt: skip

# Analog prototypes fitted to the tables above (see the module notes). Each entry is
# (kind, f_hz, q): "hp2" s^2/(s^2 + s w/q + w^2), "lp2" w^2/(s^2 + s w/q + w^2),
# "lp1" w/(s + w), "hp1" s/(s + w), "notch" zeros s^2 + w_z^2 (f_hz = f_z) merged with the
# preceding "lp2". Gains are normalised at the reference frequency afterwards.
_PSOPHOMETRIC = (
    ("hp2", 311.56, 1.0319),
    ("hp2", 375.26, 0.189),
    ("lp2", 1038.47, 1.0482),
    ("lp2", 3046.71, 1.6173),
    ("lp2", 3884.92, 3.0312),
    ("notch", 6053.77, math.inf),
)
_C_MESSAGE = (
    ("hp2", 324.25, 0.6261),
    ("hp1", 14.136, 0.0),
    ("hp1", 1e6, 0.0),  # the fit's fourth zero at DC with a far pole: a plain s factor
    ("lp2", 947.6, 1.1069),
    ("lp2", 2653.73, 1.5778),
    ("lp2", 3484.4, 2.2765),
    ("notch", 14818.48, math.inf),
)

#: Lowest rate for the psophometric and C-message weightings.
_WEIGHTING_MIN_FS = 16000.0

_A_POLES_HZ = (20.598997, 107.65265, 737.86223, 12194.217)  # IEC 61672-1, Annex E [memory]


def _check_fs(fs_hz: object) -> float:
    if isinstance(fs_hz, bool) or not isinstance(fs_hz, (int, float, np.integer, np.floating)):
        raise TypeError(f"fs_hz must be a number, got {type(fs_hz).__name__}")
    fs = float(fs_hz)
    if not (math.isfinite(fs) and fs > 0):
        raise ValueError(f"fs_hz={fs_hz} must be positive and finite")
    return fs


def _bilinear_section(b: tuple[float, ...], a: tuple[float, ...], f_warp_hz: float, fs: float):
    """Digital biquad of the analog section b(s)/a(s) (coefficients of s^2, s, 1),
    bilinear with the frequency f_warp_hz pre-warped (mapped exactly)."""
    w = 2.0 * math.pi * f_warp_hz
    k = w / math.tan(w / (2.0 * fs))
    b2, b1, b0 = b
    a2, a1, a0 = a
    if b2 == 0.0 and a2 == 0.0:  # first order: keep it first order (no z = -1 pair)
        num = [b1 * k + b0, b0 - b1 * k, 0.0]
        den = [a1 * k + a0, a0 - a1 * k, 0.0]
    else:
        num = [b2 * k * k + b1 * k + b0, 2.0 * (b0 - b2 * k * k), b2 * k * k - b1 * k + b0]
        den = [a2 * k * k + a1 * k + a0, 2.0 * (a0 - a2 * k * k), a2 * k * k - a1 * k + a0]
    return np.array(num + den) / den[0]


def _matched_lowpass1(fc_hz: float, fs: float) -> np.ndarray:
    """First-order low-pass matching |1/(1 + j f/fc)| exactly at DC, at the corner fc (or
    fs/4 if fc lies above it) and at fs/2.

    |H|^2 of a first-order digital section is a Moebius function of cos(w); three points
    fix it, and its numerator and denominator factor back into minimum-phase sections.
    """
    f_mid = min(fc_hz, 0.25 * fs)
    c = np.array([1.0, math.cos(2.0 * math.pi * f_mid / fs), -1.0])
    f = np.array([0.0, f_mid, 0.5 * fs])
    t = 1.0 / (1.0 + (f / fc_hz) ** 2)
    # t_i (1 + d c_i) = alpha + beta c_i, linear in (alpha, beta, d).
    alpha, beta, d = np.linalg.solve(np.column_stack([np.ones(3), c, -t * c]), t)

    def root(e: float) -> float:  # x with 2x / (1 + x^2) = e, |x| < 1
        return 0.0 if abs(e) < 1e-15 else (1.0 - math.sqrt(1.0 - e * e)) / e

    a1 = root(float(d))
    b1 = root(float(beta / alpha))
    g = math.sqrt(float(alpha) * (1.0 + a1 * a1) / (1.0 + b1 * b1))
    return np.array([g, g * b1, 0.0, 1.0, a1, 0.0])


def sos_gain(sos: np.ndarray, f_hz: float, fs_hz: float) -> float:
    """Amplitude response |H(f)| of a cascade of second-order sections at one frequency.

    The sections are in scipy.signal's layout (rows [b0, b1, b2, a0, a1, a2]); the value
    is ``abs(scipy.signal.sosfreqz(sos, worN=[f_hz], fs=fs_hz)[1][0])``, evaluated
    directly (a few microseconds: it runs once a gate for the modulating tone).

    Parameters
    ----------
    sos : array_like, shape (n_sections, 6)
        Second-order sections.
    f_hz : float
        Frequency in Hz (0 <= f_hz <= fs_hz / 2).
    fs_hz : float
        Sample rate in Hz.

    Raises
    ------
    ValueError
        If sos is not (n, 6) or f_hz lies outside 0..fs_hz/2.
    """
    fs = _check_fs(fs_hz)
    sos = np.asarray(sos, dtype=np.float64)
    if sos.ndim != 2 or sos.shape[1] != 6 or sos.shape[0] == 0:
        raise ValueError(f"sos must have shape (n_sections, 6), got {sos.shape}")
    f = float(f_hz)
    if not 0.0 <= f <= fs / 2.0:
        raise ValueError(f"f_hz={f_hz} must lie in 0..fs_hz/2 ({fs / 2.0:g} Hz)")
    w = 2.0 * math.pi * f / fs
    z1 = complex(math.cos(w), -math.sin(w))  # z^-1 on the unit circle
    z2 = z1 * z1
    h = 1.0 + 0.0j
    for b0, b1, b2, a0, a1, a2 in sos.tolist():  # a few sections: plain complex floats
        h *= (b0 + b1 * z1 + b2 * z2) / (a0 + a1 * z1 + a2 * z2)
    return abs(h)


def _normalise(sos: np.ndarray, f_ref_hz: float, gain_ref: float, fs: float) -> np.ndarray:
    sos = sos.copy()
    sos[0, :3] *= gain_ref / sos_gain(sos, f_ref_hz, fs)
    return sos


def _a_weight_analog_db(f_hz: np.ndarray) -> np.ndarray:
    """IEC 61672-1 A-weighting, closed form (Annex E), 0 dB at 1 kHz."""
    f1, f2, f3, f4 = _A_POLES_HZ
    f2_ = np.asarray(f_hz, dtype=np.float64) ** 2
    with np.errstate(divide="ignore"):
        r = (f4**2 * f2_**2) / (
            (f2_ + f1**2) * np.sqrt((f2_ + f2**2) * (f2_ + f3**2)) * (f2_ + f4**2)
        )
        r1k = (f4**2 * 1e12) / (
            (1e6 + f1**2) * math.sqrt((1e6 + f2**2) * (1e6 + f3**2)) * (1e6 + f4**2)
        )
        return 20.0 * np.log10(r / r1k)


def _a_weight(fs: float) -> np.ndarray:
    f1, f2, f3, f4 = _A_POLES_HZ
    w1, w2, w3 = (2.0 * math.pi * f for f in (f1, f2, f3))
    sections = [
        _bilinear_section((1.0, 0.0, 0.0), (1.0, 2.0 * w1, w1 * w1), f1, fs),
        _bilinear_section((0.0, 1.0, 0.0), (0.0, 1.0, w2), f2, fs),
        _bilinear_section((0.0, 1.0, 0.0), (0.0, 1.0, w3), f3, fs),
        _matched_lowpass1(f4, fs),
        _matched_lowpass1(f4, fs),
    ]
    sos = _normalise(np.array(sections), 1000.0, 1.0, fs)
    grid = np.geomspace(20.0, min(20000.0, 0.45 * fs), 48)
    sos = _refine(sos, grid, _a_weight_analog_db(grid), fs)
    return _normalise(sos, 1000.0, 1.0, fs)


def _analog_db(proto, f_hz: np.ndarray, f_ref_hz: float) -> np.ndarray:
    """Response (dB, 0 at f_ref_hz) of an analog prototype in the `_PSOPHOMETRIC` form."""

    def h(f: np.ndarray) -> np.ndarray:
        s = 2j * np.pi * f
        out = np.ones_like(s)
        for kind, fk, q in proto:
            w = 2.0 * math.pi * fk
            if kind == "hp2":
                out *= s * s / (s * s + s * w / q + w * w)
            elif kind == "lp2":
                out *= w * w / (s * s + s * w / q + w * w)
            elif kind == "hp1":
                out *= s / (s + w)
            elif kind == "lp1":
                out *= w / (s + w)
            elif kind == "notch":
                out *= (s * s + w * w) / (w * w)
        return out

    f = np.asarray(f_hz, dtype=np.float64)
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.abs(h(f)) / np.abs(h(np.array([f_ref_hz]))))


def _refine(sos0: np.ndarray, f_grid: np.ndarray, target_db: np.ndarray, fs: float):
    """Least-squares polish (dB error on f_grid) of all section coefficients.

    Section-wise mapping leaves errors where the prototype's features come near fs/2;
    this removes them at design time (cached per rate). Falls back to sos0 if the result
    were unstable or no better.
    """
    from scipy.optimize import least_squares

    n = sos0.shape[0]
    free = [0, 1, 2, 4, 5]

    def unpack(p: np.ndarray) -> np.ndarray:
        sos = np.zeros((n, 6))
        sos[:, 3] = 1.0
        sos[:, free] = p.reshape(n, 5)
        return sos

    z1 = np.exp(-2j * np.pi * f_grid / fs)
    powers = np.stack([np.ones_like(z1), z1, z1 * z1])  # (3, F): 1, z^-1, z^-2

    def resid(p: np.ndarray) -> np.ndarray:
        c = p.reshape(n, 5)
        num = c[:, :3] @ powers
        den = powers[0] + c[:, 3:] @ powers[1:]
        mag = np.abs(np.prod(num / den, axis=0))
        return 20.0 * np.log10(mag + 1e-300) - target_db

    p0 = sos0[:, free].ravel()
    r0 = resid(p0)
    best, best_err = sos0, float(np.max(np.abs(r0)))
    # Two solvers: "lm" is quick when the start is close; "trf" with Jacobian scaling
    # copes with coefficients of very different sizes (poles near z = 1 at high rates).
    for method in ("lm", "trf"):
        fit = least_squares(resid, p0, method=method, x_scale="jac", max_nfev=20 * p0.size)
        sos = unpack(fit.x)
        poles = [np.abs(np.roots([1.0, a1, a2])) for a1, a2 in sos[:, 4:6]]
        err = float(np.max(np.abs(fit.fun)))
        if all(np.all(r < 0.9999) for r in poles) and err < best_err:
            best, best_err = sos, err
        if best_err < 0.01:
            break
    return best if best is sos0 else _minimum_phase(best)


def _minimum_phase(sos: np.ndarray) -> np.ndarray:
    """Reflect zeros outside the unit circle inside (same magnitude), so that every section
    has a stable inverse and the least group delay."""
    out = sos.copy()
    for row in out:
        b = row[:3]
        if b[0] == 0.0:
            continue
        z = np.roots(b[: 3 if b[2] != 0.0 else 2])
        outside = np.abs(z) > 1.0
        if not outside.any():
            continue
        gain = b[0] * np.prod(np.abs(z[outside]))
        z = np.where(outside, 1.0 / np.conj(z), z)
        poly = np.real(np.poly(z)) * gain
        row[:3] = np.concatenate([poly, np.zeros(3 - poly.size)])
    return out


def _weighting(proto, f_ref_hz: float, fs: float, f_top_hz: float) -> np.ndarray:
    """Digital version of an analog prototype, section by section, then polished."""
    if fs < _WEIGHTING_MIN_FS:
        raise ValueError(
            f"this weighting needs fs_hz >= {_WEIGHTING_MIN_FS:g} (its table runs to 5 kHz); "
            f"got fs_hz={fs:g}: resample first"
        )
    f_max = 0.45 * fs
    sections: list[np.ndarray] = []
    for kind, f, q in proto:
        fw = min(f, f_max)  # features above the band: start from the band edge
        w = 2.0 * math.pi * fw
        if kind == "hp2":
            sections.append(_bilinear_section((1.0, 0.0, 0.0), (1.0, w / q, w * w), fw, fs))
        elif kind == "lp2":
            sections.append(_bilinear_section((0.0, 0.0, w * w), (1.0, w / q, w * w), fw, fs))
        elif kind == "hp1":
            sections.append(_bilinear_section((0.0, 1.0, 0.0), (0.0, 1.0, w), fw, fs))
        elif kind == "lp1":
            sections.append(_matched_lowpass1(f, fs))
        elif kind == "notch":
            # Zeros on the j-axis at f, merged into the previous low-pass section; kept on
            # the unit circle at f (or just below fs/2).
            prev = sections.pop()
            theta = 2.0 * math.pi * min(f / fs, 0.49)
            num = np.array([1.0, -2.0 * math.cos(theta), 1.0])
            sections.append(np.concatenate([num, prev[3:]]))
    sos = _normalise(np.array(sections), f_ref_hz, 1.0, fs)
    grid = np.geomspace(20.0, min(f_top_hz, f_max), 48)
    sos = _refine(sos, grid, _analog_db(proto, grid, f_ref_hz), fs)
    return _normalise(sos, f_ref_hz, 1.0, fs)


def emphasis_sos(tau_s: float, fs_hz: float, *, inverse: bool = False) -> np.ndarray:
    """First-order FM de-emphasis 1/(1 + j w tau), or its inverse (pre-emphasis).

    The corner is 1/(2 pi tau): 3183 Hz for 50 us, 2122 Hz for 75 us (ITU-R BS.450). The
    section starts magnitude-matched (exact at DC, at the corner and at fs/2; fs/4 instead
    of the corner if the corner lies above it) and is then polished to within 0.05 dB of
    the analog 1/(1 + j w tau) from 20 Hz to 15 kHz (or 0.45 fs), with no bilinear droop.

    inverse=True returns the exact inverse of that de-emphasis (numerator and denominator
    swapped): it follows 1 + j w tau in the audio band and levels off towards fs/2, where
    its gain is about the analog sqrt(1 + (pi fs tau)^2) (17.6 dB for 50 us at 48 kHz,
    35.6 dB at 384 kHz). That level-off is its high-frequency limit: it keeps the filter
    bounded and stable (the de-emphasis is minimum phase, so the inverse's poles lie
    inside the unit circle), and de-emphasis after pre-emphasis is the identity to
    rounding.

    Parameters
    ----------
    tau_s : float
        Time constant (s), e.g. 50e-6 or 75e-6.
    fs_hz : float
        Sample rate (Hz).
    inverse : bool, optional
        Return the pre-emphasis instead.

    Returns
    -------
    numpy.ndarray
        One second-order section, shape (1, 6), for scipy.signal.sosfilt.

    Raises
    ------
    ValueError
        If tau_s or fs_hz is not positive and finite.

    References
    ----------
    ITU-R BS.450, Transmission standards for FM sound broadcasting at VHF (50/75 us).
    """
    fs = _check_fs(fs_hz)
    if isinstance(tau_s, bool) or not isinstance(tau_s, (int, float, np.integer, np.floating)):
        raise TypeError(f"tau_s must be a number, got {type(tau_s).__name__}")
    if not (math.isfinite(float(tau_s)) and tau_s > 0):
        raise ValueError(f"tau_s={tau_s} must be positive and finite")
    sec = _deemphasis(float(tau_s), fs)
    if inverse:
        b, a = sec[0, :3], sec[0, 3:]
        sec = np.concatenate([a / b[0], b / b[0]])[None, :]
    return sec


@lru_cache(maxsize=32)
def _deemphasis(tau_s: float, fs: float) -> np.ndarray:
    fc = 1.0 / (2.0 * math.pi * tau_s)
    sos = _matched_lowpass1(fc, fs)[None, :]
    grid = np.geomspace(20.0, min(20000.0, 0.45 * fs), 48)
    sos = _refine(sos, grid, -10.0 * np.log10(1.0 + (grid / fc) ** 2), fs)
    sos.setflags(write=False)
    return sos


@lru_cache(maxsize=64)
def _design(name: str, fs: float) -> np.ndarray | None:
    from scipy.signal import butter

    if name == "none":
        return None
    if name in ("300-3000", "20-15k"):
        lo, hi = (300.0, 3000.0) if name == "300-3000" else (20.0, 15000.0)
        if hi >= 0.5 * fs:
            raise ValueError(
                f"filter {name!r} needs fs_hz > {2 * hi:g} (upper edge {hi:g} Hz); got fs_hz={fs:g}"
            )
        return butter(4, [lo, hi], btype="bandpass", fs=fs, output="sos")
    if name == "a-weight":
        return _a_weight(fs)
    if name == "psophometric":
        return _weighting(_PSOPHOMETRIC, 800.0, fs, 6000.0)
    if name == "c-message":
        return _weighting(_C_MESSAGE, 1000.0, fs, 6000.0)
    tau = 50e-6 if name == "deemph-50us" else 75e-6
    return emphasis_sos(tau, fs)


def filter_sos(name: FilterName, fs_hz: float) -> np.ndarray | None:
    """Second-order sections of a measurement filter, for scipy.signal.sosfilt.

    Filters (all causal, minimum-phase IIR; sections and group delay at 1 kHz, 48 kHz):

    - "none": no filter (returns None).
    - "300-3000": land-mobile audio band (TIA-603), Butterworth band-pass, 4th order per
      edge, -3.01 dB at 300 and 3000 Hz [4 sections, 0.29 ms].
    - "20-15k": broadcast audio band, same design, -3.01 dB at 20 Hz and 15 kHz; needs
      fs_hz > 30 kHz (ValueError below) [4 sections, 0.03 ms].
    - "a-weight": IEC 61672-1 A-weighting, 0 dB at 1 kHz; within 0.05 dB of the
      standard's closed form from 20 Hz to 20 kHz (or 0.45 fs) at every rate from 8 kHz
      to 384 kHz [5 sections, 0.11 ms].
    - "psophometric": ITU-T O.41 telephone weighting, 0 dB at 800 Hz; needs
      fs_hz >= 16 kHz (its table runs to 5 kHz; resample 8 kHz audio first)
      [5 sections, 0.49 ms].
    - "c-message": IEEE 743 C-message weighting, 0 dB at 1 kHz; needs fs_hz >= 16 kHz
      [6 sections, 0.49 ms].
    - "deemph-50us", "deemph-75us": FM de-emphasis (ITU-R BS.450), see `emphasis_sos`
      [1 section, 0.04 / 0.05 ms].

    The first design at a rate takes up to a second or two (a least-squares polish, see
    the module notes); results are cached per (name, rate).

    Parameters
    ----------
    name : str
        One of FILTERS.
    fs_hz : float
        Sample rate (Hz).

    Returns
    -------
    numpy.ndarray of shape (n_sections, 6), or None for "none"
        A fresh array (safe to modify).

    Raises
    ------
    TypeError
        If name is not a string.
    ValueError
        If name is unknown, fs_hz is not positive and finite, or the filter's band does
        not fit below fs_hz / 2.

    References
    ----------
    IEC 61672-1:2013, Electroacoustics - Sound level meters - Part 1 (A-weighting).
    ITU-T O.41, Psophometer for use on telephone-type circuits.
    IEEE Std 743, Equipment requirements and measurement techniques for analog
    transmission parameters (C-message weighting).
    ITU-R BS.450 (de-emphasis).
    """
    if not isinstance(name, str):
        raise TypeError(f"name must be a str, got {type(name).__name__}")
    if name not in FILTERS:
        raise ValueError(f"name={name!r} is not a filter; choose one of {', '.join(FILTERS)}")
    fs = _check_fs(fs_hz)
    sos = _design(name, fs)
    return None if sos is None else sos.copy()


def filter_response_db(name: FilterName, f_hz: np.ndarray, fs_hz: float) -> np.ndarray:
    """Magnitude response (dB) of the digital filter `filter_sos(name, fs_hz)` at f_hz.

    Parameters
    ----------
    name : str
        One of FILTERS ("none" gives 0 dB everywhere).
    f_hz : array_like
        Frequencies (Hz), in [0, fs_hz / 2].
    fs_hz : float
        Sample rate (Hz).

    Returns
    -------
    numpy.ndarray
        20 log10 |H(f)|, same shape as f_hz (-inf at an exact zero of the response).

    Raises
    ------
    ValueError
        As filter_sos, or if a frequency is outside [0, fs_hz / 2] or not finite.
    """
    from scipy.signal import sosfreqz

    sos = filter_sos(name, fs_hz)
    f = np.asarray(f_hz, dtype=np.float64)
    if f.size and not (np.all(np.isfinite(f)) and f.min() >= 0 and f.max() <= fs_hz / 2):
        raise ValueError(f"f_hz must lie in [0, fs_hz/2] = [0, {fs_hz / 2:g}]")
    if sos is None:
        return np.zeros(f.shape)
    _, h = sosfreqz(sos, worN=f.ravel(), fs=float(fs_hz))
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.abs(h)).reshape(f.shape)


def _load_sos_kernel():
    """scipy's compiled second-order-section loop (private API), checked once against
    scipy.signal.sosfilt; None (use sosfilt) if missing or different."""
    try:
        from scipy.signal import butter, sosfilt
        from scipy.signal._sosfilt import _sosfilt

        sos = butter(2, [0.1, 0.3], btype="bandpass", output="sos")
        x = np.sin(np.arange(64) * 0.7) + 0.1 * np.cos(np.arange(64) * 2.1)
        zi0 = np.full((sos.shape[0], 2), 0.25)
        want, zf = sosfilt(sos, x, zi=zi0)
        y = x.copy()[None, :]
        zi = zi0.copy()[None, :, :]
        _sosfilt(sos, y, zi)
        if np.allclose(y[0], want, rtol=1e-13, atol=1e-13) and np.allclose(zi[0], zf):
            return _sosfilt
    except Exception:  # private API: any failure means "use the public one"
        pass
    return None


_SOS_KERNEL = _load_sos_kernel()


class SosStream:
    """A cascade of second-order sections run over a stream, its state kept between
    calls: `scipy.signal.sosfilt` with `zi`, starting from rest.

    Per gate the public function's checks and copies cost as much as the filtering of a
    few thousand samples; here the compiled loop scipy uses is called directly (checked
    against sosfilt at import; sosfilt itself where it is not available).

    Parameters
    ----------
    sos : array_like, shape (n_sections, 6)
        The sections (as from `filter_sos`, `emphasis_sos`).
    """

    def __init__(self, sos) -> None:
        self.sos = np.ascontiguousarray(sos, dtype=np.float64)
        if self.sos.ndim != 2 or self.sos.shape[1] != 6 or self.sos.shape[0] < 1:
            raise ValueError(f"sos must have shape (n_sections, 6), got {self.sos.shape}")
        self.reset()

    def reset(self) -> None:
        """Back to rest (zero state)."""
        self._zi = np.zeros((1, self.sos.shape[0], 2))

    def __call__(self, x: np.ndarray, *, overwrite: bool = False) -> np.ndarray:
        """Filter the next samples (1-D float64); with overwrite=True x itself (a
        contiguous array the caller owns) is filtered in place and returned."""
        x = np.asarray(x, dtype=np.float64)
        if x.ndim != 1:
            raise ValueError(f"x must be one-dimensional, got shape {x.shape}")
        if _SOS_KERNEL is None:
            from scipy.signal import sosfilt

            y, zf = sosfilt(self.sos, x, zi=self._zi[0])
            self._zi[0] = zf
            return y
        y = x if (overwrite and x.flags.c_contiguous and x.flags.writeable) else x.copy()
        _SOS_KERNEL(self.sos, y.reshape(1, -1), self._zi)
        return y
