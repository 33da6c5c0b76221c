"""Audio quality meter: level, SNR, SINAD, THD, THD+N, ENOB, SFDR and mains hum.

The counter already knows the fundamental frequency, so the figures come from IEEE Std
1057 / 1241 style least-squares fits at known frequencies (three-parameter sine fits at the
fundamental, at its harmonics and at the mains-hum lines, plus DC), solved jointly. The
noise is what the fit leaves over. SFDR needs to see every spur, so it comes from a
Kaiser-windowed spectrum of (at most) the first 16384 samples.

Speed: the engine calls `measure_quality` once per gate, so trigonometric functions are
never evaluated over the full record. The record is folded into an (R, M) matrix, n = rM + m,
and since exp(-j w n) = exp(-j w r M) exp(-j w m) every projection is one BLAS product of
that matrix with the (M, K) table of exp(-j w m) followed by an R-long sum. The harmonics'
tables are running powers of their base line's, so only about 2 sqrt(N) trig values per base
frequency (fundamental, 50 Hz, 60 Hz) are computed. The Gram matrix of the fit has
closed-form entries (Dirichlet kernels), so the normal equations are built without touching
the samples again. Only above about 110 dB SINAD, where the residual energy
||x||^2 - b.p would lose digits, is the fitted waveform rebuilt (from the same tables) and
subtracted.
"""

from __future__ import annotations

import itertools
import math
import operator
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from functools import lru_cache
from typing import Literal

import numpy as np

__all__ = [
    "LevelFigures",
    "QualityAccumulator",
    "QualityFigures",
    "combine_quality",
    "measure_level",
    "measure_quality",
    "measure_quality_many",
]

Mains = Literal["auto", 50, 60] | None

#: Kaiser beta of the SFDR spectrum: highest sidelobe about -155 dB, so window leakage
#: does not limit an ideal 16-bit (or a real 24-bit) signal; main lobe +/-6.5 bins wide.
_KAISER_BETA = 20.0
#: Half-width (bins) of the region around a line that belongs to that line.
_LOBE_BINS = 8
#: Longest spectrum segment (samples): 2.9 Hz bins at 48 kHz, so a 50 Hz spur clears the
#: DC region.
_SPECTRUM_MAX = 16384
#: Number of mains-hum harmonics fitted (1 .. _HUM_HARMONICS times 50 or 60 Hz).
_HUM_HARMONICS = 6
#: Fewest cycles of the fundamental a record must hold for the figures to be trusted:
#: below about two the fit cannot separate the tone from DC and its harmonics (its
#: columns are nearly collinear) and splits the power among them arbitrarily.
_MIN_CYCLES = 2.0
#: Dynamic range floor of the ratios: powers below this fraction of the total power are
#: treated as this fraction (the arithmetic cannot resolve less), so no figure is inf/NaN.
_FLOOR_REL = 1e-20


# --------------------------------------------------------------------------------------
# Level
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class LevelFigures:
    """Signal level of a block.

    Attributes
    ----------
    rms_dbfs : float
        RMS level in dB relative to full scale, AES17 convention: a full-scale sine reads
        0 dBFS (20 log10(rms * sqrt(2) / full_scale)); a full-scale square reads +3.01 dBFS.
        -inf for digital silence.
    peak_dbfs : float
        Sample peak, 20 log10(max|x| / full_scale); -inf for digital silence.
    clipped_samples : int
        Samples with |x| >= clip_fraction * full_scale.
    dc_offset : float
        Mean of x, in the units of x.
    n_samples : int
        Number of samples.
    mean_square : float
        Mean of x^2, in the units of x squared (the rms before the dB scale).
    """

    rms_dbfs: float
    peak_dbfs: float
    clipped_samples: int
    dc_offset: float
    n_samples: int
    mean_square: float = math.nan


def _as_real_block(x: object, name: str = "x") -> np.ndarray:
    """Return x as a 1-D finite float64 array, or raise TypeError / ValueError."""
    return _real_block_and_sum(x, name)[0]


def _real_block_and_sum(x: object, name: str = "x") -> tuple[np.ndarray, float]:
    """`_as_real_block` and the sum of the samples it took to check them."""
    arr = np.asarray(x)
    if arr.dtype.kind not in "fiu":
        raise TypeError(f"{name} must be a real numeric array, got dtype {arr.dtype}")
    if arr.ndim != 1:
        raise ValueError(f"{name} must be 1-D, got shape {arr.shape}")
    if arr.size == 0:
        raise ValueError(f"{name} is empty (0 samples); need at least one sample")
    arr = arr.astype(np.float64, copy=False)
    # One pass that is needed anyway; non-finite values poison the sum.
    total = float(arr.sum())
    if not math.isfinite(total):
        bad = int(np.count_nonzero(~np.isfinite(arr)))
        if bad:
            raise ValueError(f"{name} holds {bad} non-finite samples (NaN or inf)")
        raise ValueError(f"{name} holds values too large to sum in float64")
    return arr, total


def _check_positive(name: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise TypeError(f"{name} must be a number, got {type(value).__name__}")
    v = float(value)
    if not (math.isfinite(v) and v > 0):
        raise ValueError(f"{name}={value} must be positive and finite")
    return v


def measure_level(
    x: np.ndarray, *, full_scale: float = 1.0, clip_fraction: float = 0.999
) -> LevelFigures:
    """Measure the RMS and peak level, clipping and DC offset of a block.

    Parameters
    ----------
    x : array_like, 1-D, real
        Samples, in the same units as `full_scale`.
    full_scale : float, optional
        Amplitude of a full-scale sine (1.0 for float audio).
    clip_fraction : float, optional
        A sample counts as clipped when |x| >= clip_fraction * full_scale. In (0, 1].

    Returns
    -------
    LevelFigures
        Digital silence reads -inf dBFS (never NaN).

    Raises
    ------
    TypeError
        If x is not a real numeric array.
    ValueError
        If x is empty, not 1-D or not finite, or an option is out of range.

    References
    ----------
    AES17, AES standard method for digital audio engineering - Measurement of digital
    audio equipment (dBFS: full-scale sine = 0 dB).

    Examples
    --------
    A sine of amplitude 0.5 reads -6.02 dBFS:

    >>> n = np.arange(48000)
    >>> round(measure_level(0.5 * np.sin(2 * np.pi * 1000 * n / 48000)).rms_dbfs, 2)
    -6.02
    """
    fs_ = _check_positive("full_scale", full_scale)
    cf = _check_positive("clip_fraction", clip_fraction)
    if cf > 1.0:
        raise ValueError(f"clip_fraction={clip_fraction} must be in (0, 1]")
    a, total = _real_block_and_sum(x)
    n = a.size
    mean_sq = float(np.dot(a, a)) / n
    # four reductions and no temporaries: max and min give the peak, and the clipped
    # samples are counted only when the peak says there are some
    peak = max(float(a.max()), -float(a.min()))
    with np.errstate(divide="ignore"):
        rms_dbfs = float(10.0 * np.log10(2.0 * mean_sq / fs_**2)) if mean_sq > 0 else -math.inf
        peak_dbfs = float(20.0 * np.log10(peak / fs_)) if peak > 0 else -math.inf
    limit = cf * fs_
    clipped = int(np.count_nonzero(np.abs(a) >= limit)) if peak >= limit else 0
    return LevelFigures(
        rms_dbfs=rms_dbfs,
        peak_dbfs=peak_dbfs,
        clipped_samples=clipped,
        dc_offset=total / n,
        n_samples=n,
        mean_square=mean_sq,
    )


# --------------------------------------------------------------------------------------
# Quality
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class QualityFigures:
    """Quality figures of one gate (or, from `combine_quality`, of several).

    Powers are mean squares in full-scale units squared (a full-scale sine has power 0.5).

    Attributes
    ----------
    fundamental_hz, fs_hz : float
        The fundamental the fit used and the sample rate.
    n_samples : int
        Samples analysed (summed over gates when combined).
    n_harmonics_used : int
        Harmonics 2..k actually fitted (those above fs/2 are skipped).
    snr_db : float
        10 log10(S / N): fundamental against noise (hum counts as noise; harmonics 2..k
        and DC are excluded).
    sinad_db : float
        10 log10((S + N + D) / (N + D)), receiver-test convention (TIA-603).
    thd_percent : float
        100 sqrt(D / S).
    thd_n_percent : float
        100 sqrt((N + D) / (S + N + D)), relative to the total.
    enob_bits : float
        (10 log10(S / (N + D)) - 1.76) / 6.02 (IEEE Std 1241, meaningful for a full-scale
        sine; a sine at -6 dBFS reads one bit less).
    sfdr_db : float
        10 log10(S / largest spur), spur searched over 0..fs/2 except DC and the
        fundamental (harmonics and hum count as spurs).
    spur_hz : float
        Frequency of that spur (to a spectrum bin); nan if the record was too short to
        search (a warning is issued then).
    fundamental_dbfs : float
        Level of the fundamental, AES17 dBFS (-inf if it is exactly zero).
    hum_hz : float or None
        The mains frequency fitted (50 or 60), None if hum was not measured.
    hum_db : float
        Hum power relative to the fundamental power (dB); -inf if not measured.
    hum_dbfs : float
        Hum level, AES17 dBFS; -inf if not measured or exactly zero.
    fundamental_power, harmonic_power, noise_power, hum_power, spur_power, dc_power,
    total_power : float
        S, D, noise, hum, largest spur, DC and mean square of the whole input.
        N (noise + distortion) in SINAD is noise_power + hum_power + harmonic_power.
    """

    fundamental_hz: float
    fs_hz: float
    n_samples: int
    n_harmonics_used: int
    snr_db: float
    sinad_db: float
    thd_percent: float
    thd_n_percent: float
    enob_bits: float
    sfdr_db: float
    spur_hz: float
    fundamental_dbfs: float
    hum_hz: float | None
    hum_db: float
    hum_dbfs: float
    fundamental_power: float
    harmonic_power: float
    noise_power: float
    hum_power: float
    spur_power: float
    dc_power: float
    total_power: float


@lru_cache(maxsize=16)
def _table_rows(m_len: int, r_len: int) -> np.ndarray:
    """The sample offsets of the tables: m < m_len, then r * m_len for r <= r_len."""
    rows = np.concatenate(
        [np.arange(m_len, dtype=np.float64), np.arange(r_len + 1, dtype=np.float64) * m_len]
    )
    rows.setflags(write=False)
    return rows


def _tables(
    w_base: np.ndarray, sel: np.ndarray, q_max: int, m_len: int, r_len: int
) -> tuple[np.ndarray, np.ndarray]:
    """Tables exp(j w m), m < m_len, and exp(j w r m_len), r <= r_len, for chosen lines.

    The lines are harmonics q * w_base[i], q = 1..q_max; `sel` picks (q - 1) * B + i.
    Only the q = 1 columns are evaluated with trig functions; the harmonics are their
    powers (a running product, relative error about q * eps).
    """
    if w_base.size == 1:
        # one base line, so `sel` picks its first harmonics (no hum lines)
        tab = _harmonic_tables(w_base, sel.size, m_len, r_len)[0]
        return tab[:m_len], tab[m_len:]
    rows = _table_rows(m_len, r_len)
    ang = rows[None, :] * w_base[:, None]  # (B, rows)
    e = (np.cos(ang) + 1j * np.sin(ang)).ravel()
    powers = np.empty((q_max, e.size), dtype=np.complex128)
    powers[0] = e
    for q in range(1, q_max):  # np.cumprod is several times slower on complex rows
        np.multiply(powers[q - 1], e, out=powers[q])
    tab = np.ascontiguousarray(powers.reshape(q_max * w_base.size, -1)[sel].T)  # (rows, K)
    return tab[:m_len], tab[m_len:]


def _harmonic_tables(w0: np.ndarray, k: int, m_len: int, r_len: int) -> np.ndarray:
    """`_tables` of the lines w0, 2 w0, .. k w0 for each base line of `w0` (one gate
    each): a (gates, rows, k) stack whose columns are the running powers themselves,
    built in place (each gate's numbers do not depend on the others')."""
    rows = _table_rows(m_len, r_len)
    tab = np.empty((w0.size, rows.size, k), dtype=np.complex128)
    e = tab[:, :, 0]
    ang = rows[None, :] * w0[:, None]
    np.cos(ang, out=e.real)
    np.sin(ang, out=e.imag)
    for q in range(1, k):
        np.multiply(tab[:, :, q - 1], e, out=tab[:, :, q])
    return tab


@lru_cache(maxsize=64)
def _fold_shape(n: int) -> tuple[int, int]:
    """(M, R) with R * M <= n, M near sqrt(n); an exact divisor when there is one near
    (no tail left over: two fewer products per projection)."""
    root = max(1, math.isqrt(n))
    for m in range(root, max(1, (3 * root) // 4) - 1, -1):
        if n % m == 0:
            return m, n // m
    return root, n // root


def _project(x: np.ndarray, inner: np.ndarray, outer: np.ndarray) -> np.ndarray:
    """Z_q = sum_n x[n] exp(j w_q n) with n = r M + m: one gemm and an R-long sum."""
    m_len = inner.shape[0]
    r_len = outer.shape[0] - 1
    main = x[: r_len * m_len].reshape(r_len, m_len)
    # A complex table times a real matrix: BLAS sees it as a real (M, 2K) view.
    tab = np.ascontiguousarray(inner).view(np.float64)  # (M, 2K): re, im interleaved
    y = (main @ tab).view(np.complex128)  # (R, K)
    z = np.einsum("rk,rk->k", y, outer[:r_len])
    tail = x[r_len * m_len :]
    if tail.size:
        z += (tail @ tab[: tail.size]).view(np.complex128) * outer[r_len]
    return z


def _model(n: int, b0: float, coef: np.ndarray, inner: np.ndarray, outer: np.ndarray) -> np.ndarray:
    """b0 + Re sum_k coef_k exp(j w_k n) over n < n (the fitted waveform)."""
    m_len = inner.shape[0]
    r_len = outer.shape[0] - 1
    u = coef[None, :] * outer  # (R+1, K)
    # Re[u e] = u.re e.re - u.im e.im, as one real product.
    a = np.concatenate([u.real, -u.imag], axis=1)
    e = np.concatenate([inner.real, inner.imag], axis=1)
    out = np.empty(n)
    out[: r_len * m_len] = (a[:r_len] @ e.T).ravel()
    t = n - r_len * m_len
    if t:
        out[r_len * m_len :] = e[:t] @ a[r_len]
    out += b0
    return out


def _gram(w: np.ndarray, n: int) -> np.ndarray:
    """Gram matrix of the columns [1, cos(w_1 n)..cos(w_K n), sin(w_1 n)..sin(w_K n)].

    Entries are Dirichlet sums S(a) = sum_{k<n} exp(j a k)
    = exp(j (n-1) a / 2) sin(n a / 2) / sin(a / 2) at a = w_i -/+ w_j, built from the
    per-line factors exp(j w/2) and exp(j n w/2) so that only 4K trig values are needed.
    """
    k = w.size
    half = 0.5 * w
    p = np.cos(half) + 1j * np.sin(half)
    q = np.cos(n * half) + 1j * np.sin(n * half)
    # All angles with their Dirichlet sums: differences (i, j), sums (i, j), and w_i alone.
    pc = np.concatenate([p.conj(), p, [1.0]])
    qc = np.concatenate([q.conj(), q, [1.0]])
    pa = p[:, None] * pc  # (K, 2K+1): exp(j a/2) for a = w_i - w_j, w_i + w_j, w_i
    qa = q[:, None] * qc
    den = pa.imag  # sin(a/2)
    # a = 0 (mod 2 pi), to rounding: the sum is n (its error there is below (n a)^2).
    exact = np.abs(den) < 1e-13
    ratio = qa.imag / np.where(exact, 1.0, den)
    s = np.where(exact, float(n), ratio * (qa * pa.conj()))
    sd, ss, s1 = s[:, :k], s[:, k : 2 * k], s[:, 2 * k]
    g = np.empty((2 * k + 1, 2 * k + 1))
    g[0, 0] = n
    g[0, 1 : k + 1] = g[1 : k + 1, 0] = s1.real
    g[0, k + 1 :] = g[k + 1 :, 0] = s1.imag
    g[1 : k + 1, 1 : k + 1] = 0.5 * (sd.real + ss.real)
    g[k + 1 :, k + 1 :] = 0.5 * (sd.real - ss.real)
    cs = 0.5 * (ss.imag - sd.imag)  # cs[i, j] = sum cos(w_i n) sin(w_j n)
    g[1 : k + 1, k + 1 :] = cs
    g[k + 1 :, 1 : k + 1] = cs.T
    return g


@lru_cache(maxsize=32)
def _harmonic_gram_index(k: int) -> tuple[np.ndarray, ...]:
    """Where the Gram matrix of k harmonics takes its Dirichlet sums: line i is harmonic
    i + 1, so the pair (i, j) needs the sums at (i - j) w0 and (i + j + 2) w0."""
    i = np.arange(k)[:, None]
    j = np.arange(k)[None, :]
    diff = i - j
    tabs = (
        np.arange(2 * k + 1, dtype=np.float64),  # the multiples m of w0
        np.abs(diff),
        np.sign(diff).astype(np.float64),  # S(-a) = conj S(a): the imaginary part flips
        i + j + 2,
    )
    for t in tabs:
        t.setflags(write=False)
    return tabs


def _gram_harmonics(w0, k: int, n: int) -> np.ndarray:
    """`_gram` for the lines w0, 2 w0, .. k w0 (a tone and its harmonics, no hum lines);
    for an array of base lines (one a gate), the stack of their matrices.

    Every entry is a Dirichlet sum at a multiple m w0, m = 0 .. 2k: 2k + 1 of them are
    evaluated and spread over the matrix, instead of one for every pair of lines."""
    w = np.asarray(w0, dtype=np.float64)
    mult, adiff, sgn, summ = _harmonic_gram_index(k)
    half = (0.5 * w)[..., None] * mult
    den = np.sin(half)  # sin(a / 2)
    num = np.sin(n * half)  # sin(n a / 2)
    exact = np.abs(den) < 1e-13
    ratio = num / np.where(exact, 1.0, den)
    ph = (n - 1) * half  # S(a) = exp(j (n - 1) a / 2) sin(n a / 2) / sin(a / 2)
    sr = np.where(exact, float(n), ratio * np.cos(ph))
    si = np.where(exact, 0.0, ratio * np.sin(ph))
    g = np.empty((*w.shape, 2 * k + 1, 2 * k + 1))
    g[..., 0, 0] = n
    g[..., 0, 1 : k + 1] = g[..., 1 : k + 1, 0] = sr[..., 1 : k + 1]
    g[..., 0, k + 1 :] = g[..., k + 1 :, 0] = si[..., 1 : k + 1]
    sdr = sr[..., adiff]
    ssr = sr[..., summ]
    g[..., 1 : k + 1, 1 : k + 1] = 0.5 * (sdr + ssr)
    g[..., k + 1 :, k + 1 :] = 0.5 * (sdr - ssr)
    cs = 0.5 * (si[..., summ] - sgn * si[..., adiff])  # cs[i, j] = sum cos(w_i n) sin(w_j n)
    g[..., 1 : k + 1, k + 1 :] = cs
    g[..., k + 1 :, 1 : k + 1] = np.swapaxes(cs, -1, -2)
    return g


def _solve_normal(g: np.ndarray, p: np.ndarray, well_separated: bool) -> np.ndarray:
    """Least-squares coefficients from the normal equations G b = p.

    Columns whose norm vanishes (sin at 0 or fs/2) get 0. Nearly collinear columns (lines
    closer than half a bin, or a line that near 0 / fs/2) take an eigenvalue-truncated
    pseudo-inverse of the Jacobi-scaled Gram matrix instead of a plain solve.
    """
    diag = g.diagonal()
    keep = diag > 1e-9 * g[0, 0]
    if not keep.all():
        b = np.zeros_like(p)
        b[keep] = _solve_normal(g[keep][:, keep], p[keep], False)
        return b
    if well_separated:
        # nearly orthogonal columns of similar norms (n for DC, about n/2 for the
        # lines): a plain solve needs no scaling
        try:
            return np.linalg.solve(g, p)
        except np.linalg.LinAlgError:
            pass
    d = np.sqrt(diag)
    gs = g / np.outer(d, d)
    ps = p / d
    ev, vec = np.linalg.eigh(gs)
    inv = np.where(ev > 1e-10 * ev[-1], 1.0 / np.where(ev > 0, ev, 1.0), 0.0)
    return (vec @ (inv * (vec.T @ ps))) / d


@lru_cache(maxsize=8)
def _kaiser(length: int) -> tuple[np.ndarray, float]:
    # periodic Kaiser window (as scipy.signal.windows.kaiser(sym=False)); numpy's own
    # saves importing scipy.signal, which takes longer than analysing a minute of audio
    win = np.kaiser(length + 1, _KAISER_BETA)[:-1]
    win.setflags(write=False)
    return win, float(np.dot(win, win))


def _largest_spur(x: np.ndarray, fs_hz: float, f0_hz: float, dc: float) -> tuple[float, float]:
    """Power (mean square) and frequency of the largest spectral line outside DC and f0."""
    from scipy import fft

    length = min(x.size, _SPECTRUM_MAX)
    win, wsq = _kaiser(length)
    # Taking out the fitted DC (not the segment mean, which a partial cycle of the tone
    # would bias) removes most of the DC lobe.
    spec = fft.rfft((x[:length] - dc) * win)
    pw = spec.real**2 + spec.imag**2
    h = _LOBE_BINS
    k0 = int(round(f0_hz * length / fs_hz))
    lo0, hi0 = max(k0 - h, 0), k0 + h + 1
    saved = pw[lo0:hi0].copy()
    pw[lo0:hi0] = -1.0
    saved_dc = pw[: h + 1].copy()
    pw[: h + 1] = -1.0
    kp = int(np.argmax(pw))
    if pw[kp] < 0:  # nothing outside the excluded regions (very short record)
        return -1.0, math.nan
    # The spur's own lobe, without what belongs to DC or the fundamental.
    pw[: h + 1] = saved_dc
    pw[lo0:hi0] = saved
    lo, hi = max(kp - h, 0), min(kp + h + 1, pw.size)
    mask = np.ones(hi - lo, dtype=bool)
    mask[: max(h + 1 - lo, 0)] = False
    mask[max(lo0 - lo, 0) : max(hi0 - lo, 0)] = False
    # Parseval: a real line of mean square P puts L * P * sum(w^2) / 2 into its lobe.
    power = 2.0 * float(pw[lo:hi][mask].sum()) / (length * wsq)
    return power, kp * fs_hz / length


def _db(num: float, den: float) -> float:
    return 10.0 * math.log10(num / den)


def _figures_from_powers(
    *,
    fundamental_hz: float,
    fs_hz: float,
    n_samples: int,
    n_harmonics_used: int,
    spur_hz: float,
    hum_hz: float | None,
    fundamental_power: float,
    harmonic_power: float,
    noise_power: float,
    hum_power: float,
    spur_power: float,
    dc_power: float,
    total_power: float,
) -> QualityFigures:
    floor = max(total_power * _FLOOR_REL, 1e-300)
    s = max(fundamental_power, floor)
    d = max(harmonic_power, 0.0)
    nn = max(noise_power + hum_power, 0.0)
    nd = max(nn + d, floor)
    sinad = _db(s + nd, nd)
    ratio_db = _db(s, nd)
    if hum_hz is None:
        hum_db = hum_dbfs = -math.inf
    else:
        hum = max(hum_power, floor)
        hum_db = _db(hum, s)
        hum_dbfs = _db(hum_power, 0.5) if hum_power > 0 else -math.inf
    return QualityFigures(
        fundamental_hz=fundamental_hz,
        fs_hz=fs_hz,
        n_samples=n_samples,
        n_harmonics_used=n_harmonics_used,
        snr_db=_db(s, max(nn, floor)),
        sinad_db=sinad,
        thd_percent=100.0 * math.sqrt(d / s),
        thd_n_percent=100.0 * math.sqrt(nd / (s + nd)),
        enob_bits=(ratio_db - 1.76) / 6.02,
        sfdr_db=_db(s, max(spur_power, floor)),
        spur_hz=spur_hz,
        fundamental_dbfs=_db(fundamental_power, 0.5) if fundamental_power > 0 else -math.inf,
        hum_hz=hum_hz,
        hum_db=hum_db,
        hum_dbfs=hum_dbfs,
        fundamental_power=fundamental_power,
        harmonic_power=harmonic_power,
        noise_power=noise_power,
        hum_power=hum_power,
        spur_power=spur_power,
        dc_power=dc_power,
        total_power=total_power,
    )


def measure_quality(
    x: np.ndarray,
    fs_hz: float,
    *,
    fundamental_hz: float,
    n_harmonics: int = 10,
    mains: Mains = "auto",
    sfdr: bool = True,
) -> QualityFigures:
    """Measure SNR, SINAD, THD, THD+N, ENOB, SFDR and mains hum of a tone of known frequency.

    With ``sfdr=False`` the spur search (a 16384-point spectrum, the costliest part) is
    skipped: sfdr_db, spur_hz and spur_power are NaN, and `combine_quality` leaves such
    gates out of the summary's SFDR. A monitor measuring every gate can search spurs on
    some gates only.

    Definitions (S fundamental, D harmonics 2..k, N noise including hum, all mean squares):

    - SNR = 10 log10(S / N); harmonics 2..k and DC excluded, hum counted as noise.
    - SINAD = 10 log10((S + N + D) / (N + D)), as used for receiver testing (TIA-603 and
      common practice): at 12 dB SINAD, noise + distortion is 25.1 % of the total voltage.
    - THD = 100 sqrt(D / S) %, the rss of harmonics 2..k over the rms fundamental.
    - THD+N = 100 sqrt((N + D) / (S + N + D)) %, relative to the total.
    - ENOB = (10 log10(S / (N + D)) - 1.76) / 6.02, the IEEE Std 1241 ratio S/(N+D)
      (its SINAD). At high SINAD the two SINAD conventions agree.
    - SFDR = 10 log10(S / P_spur), the largest line in 0..fs/2 apart from DC and the
      fundamental (a harmonic or hum line can be that spur).
    - hum: the power of the mains lines m * f_mains, m = 1..6, relative to S (hum_db) and
      to a full-scale sine (hum_dbfs).

    Method: one joint least-squares fit (IEEE Std 1057 / 1241 three-parameter sine fits)
    of DC, the fundamental, harmonics 2..n_harmonics below fs/2 and the mains lines; each
    component's power is the mean square of its fitted sinusoid, and N is the residual
    mean square (divided by N - number of fitted parameters, unbiased for white noise).
    Mains lines within 1/T (T = record length) of the fundamental or a fitted harmonic
    are dropped, so a line is never counted twice. With mains="auto" both the 50 Hz and
    the 60 Hz family are fitted and the one holding more power is kept (the other's power
    stays in the noise). SFDR uses a Kaiser (beta 20, sidelobes < -150 dB) spectrum of
    the first min(len(x), 16384) samples. Powers below 1e-20 of the total power are
    floored there, so ratios stay finite (a resolution far beyond 32-bit audio).

    Parameters
    ----------
    x : array_like, 1-D, real
        Samples, full scale 1.0 (a full-scale sine has peak 1).
    fs_hz : float
        Sample rate (Hz).
    fundamental_hz : float
        Known fundamental frequency (Hz), in (0, fs_hz / 2).
    n_harmonics : int, optional
        Highest harmonic number in D (default 10, i.e. harmonics 2..10).
    mains : {"auto", 50, 60, None}, optional
        Mains frequency whose hum is fitted; None fits no hum (hum then stays in N).

    Returns
    -------
    QualityFigures

    Raises
    ------
    TypeError
        If x is not a real numeric array or a number has the wrong type.
    ValueError
        If x is empty, not 1-D or not finite; fs_hz is not positive and finite;
        fundamental_hz is outside (0, fs_hz/2); n_harmonics < 1; mains is not one of the
        choices.

    References
    ----------
    IEEE Std 1057-2017, IEEE Standard for Digitizing Waveform Recorders (sine fits).
    IEEE Std 1241-2010, IEEE Standard for Terminology and Test Methods for
    Analog-to-Digital Converters (SINAD, ENOB, THD, SFDR).
    TIA-603, Land Mobile FM or PM Communications Equipment (SINAD).

    Examples
    --------
    A 1 kHz sine at 48 kHz with 1 % second and 0.5 % third harmonic (THD 1.118 %):

    >>> n = np.arange(48000)
    >>> w = 2 * np.pi * 1000 * n / 48000
    >>> x = 0.5 * (np.sin(w) + 0.01 * np.sin(2 * w) + 0.005 * np.sin(3 * w))
    >>> round(measure_quality(x, 48000, fundamental_hz=1000).thd_percent, 3)
    1.118
    """
    fs = _check_positive("fs_hz", fs_hz)
    f0 = _check_fundamental(fundamental_hz, fs)
    _check_n_harmonics(n_harmonics)
    if mains is not None and (isinstance(mains, bool) or mains not in ("auto", 50, 60)):
        raise ValueError(f"mains={mains!r} must be 'auto', 50, 60 or None")
    a, total = _real_block_and_sum(x)
    n = a.size

    # Lines: fundamental and harmonics 2..n_harmonics at or below fs/2, then the mains
    # lines (1..6 x 50 and/or 60 Hz) below fs/2 and not within 1/T of a signal line.
    n_sig = _signal_lines(f0, fs, n, n_harmonics)
    mains_hz = (50.0, 60.0) if mains == "auto" else () if mains is None else (float(mains),)
    q_max = max(n_sig, _HUM_HARMONICS)
    n_base = 1 + len(mains_hz)
    cols = [q * n_base for q in range(n_sig)]  # index (q - 1) * n_base + base into tables
    line_hz = [f0 * q for q in range(1, n_sig + 1)]
    member: dict[float, list[bool]] = {f: [False] * n_sig for f in mains_hz}
    tol_hz = fs / n
    for i, f_mains in enumerate(mains_hz):
        for q in range(1, _HUM_HARMONICS + 1):
            hz = f_mains * q
            near = round(hz / f0)  # the nearest signal line
            if hz >= fs / 2 or (1 <= near <= n_sig and abs(hz - near * f0) < tol_hz):
                continue
            if hz < 0.5 * f0 and hz < tol_hz:  # not resolvable from DC either
                continue
            if hz in line_hz:  # 300 Hz is in both families: one line, in both
                member[f_mains][line_hz.index(hz)] = True
                continue
            cols.append((q - 1) * n_base + i + 1)
            line_hz.append(hz)
            for f in mains_hz:
                member[f].append(f == f_mains)
    w_base = 2.0 * np.pi * np.array([f0, *mains_hz]) / fs
    w = 2.0 * np.pi * np.array(line_hz) / fs
    k = w.size

    xx = float(np.dot(a, a))
    if k == n_sig:  # the tone and its harmonics alone: the same path as a batch of gates
        nyquist = _nyquist_lines(w, n)
        (b,), (g,), (p,), ((inner, outer),) = _fit_harmonic_stack(
            [a], [total], w_base[:1], k, n, nyquist, [_well_separated(w, n, nyquist)]
        )
    else:
        inner, outer = _tables(w_base, np.array(cols), q_max, *_fold_shape(n))
        z = _project(a, inner, outer)
        g = _gram(w, n)
        p = np.concatenate([[total], z.real, z.imag])
        nyquist = _nyquist_lines(w, n)
        sep = _well_separated(w, n, nyquist)
        if nyquist:
            use = _fitted_columns(k, nyquist)
            b = np.zeros(2 * k + 1)
            b[use] = _solve_normal(g[use][:, use], p[use], sep)
        else:
            b = _solve_normal(g, p, sep)
    return _figures_from_fit(
        a, xx, b, g, p, inner, outer, fs=fs, f0=f0, n_sig=n_sig, mains_hz=mains_hz,
        member=member, sfdr=sfdr,
    )  # fmt: skip


def _check_fundamental(value, fs: float) -> float:
    f0 = _check_positive("fundamental_hz", value)
    if not f0 < fs / 2:
        raise ValueError(f"fundamental_hz={value} must be in (0, fs_hz/2) = (0, {fs / 2:g})")
    return f0


def _check_n_harmonics(n_harmonics) -> None:
    if isinstance(n_harmonics, bool) or not isinstance(n_harmonics, (int, np.integer)):
        raise TypeError(f"n_harmonics must be an int, got {type(n_harmonics).__name__}")
    if n_harmonics < 1:
        raise ValueError(f"n_harmonics={n_harmonics} must be >= 1")


def _signal_lines(f0: float, fs: float, n: int, n_harmonics: int) -> int:
    """How many of the fundamental's lines (it and harmonics 2..n_harmonics) are fitted:
    those at or below fs/2. A harmonic up to half a bin beyond fs/2 is the line at fs/2
    it aliases onto: it counts as that line, so the figures do not jump as the
    fundamental crosses fs/2q."""
    return max(1, min(int(n_harmonics), int(math.floor(fs / 2 * (1 + 1 / n) / f0))))


def _fitted_columns(k: int, nyquist: list[int]) -> np.ndarray:
    """Mask of the fit's columns [DC, cos.., sin..] for k lines: all but the sine
    columns of the lines at fs/2 (`_nyquist_lines`), fitted as cosines."""
    use = np.ones(2 * k + 1, dtype=bool)
    use[[k + 1 + i for i in nyquist]] = False
    return use


def _nyquist_lines(w: np.ndarray, n: int) -> list[int]:
    """Lines within half a bin of fs/2. Such a line has a sine column that all but
    vanishes (exactly at fs/2 it is zero): whether it is fitted would hang on the last
    digits of the frequency, and with it the line's power. It is fitted as the cosine
    it is there, and sits apart from the others."""
    return [i for i, x in enumerate(w.tolist()) if abs(math.pi - x) < math.pi / n]


def _well_separated(w: np.ndarray, n: int, nyquist: list[int]) -> bool:
    """Whether the lines are half a bin or more apart from each other and from their
    mirror images at 0 / fs/2: nearly orthogonal columns (Dirichlet kernel), whose Gram
    matrix a plain solve handles; closer lines make it ill-conditioned and take the
    careful solver. (A few dozen numbers: plain Python is quicker here than numpy.)"""
    ws = sorted(w.tolist())
    edge = math.pi - ws[-1] if not nyquist else 9.0
    gap = min(ws[0], edge, min(map(operator.sub, ws[1:], ws[:-1]), default=9.0))
    return gap > np.pi / n


def _fit_harmonic_stack(arrs, totals, w0, k: int, n: int, nyquist: list[int], separated):
    """The joint fit of DC and the lines w0, 2 w0, .. k w0 of each gate (arrays of n
    samples, the same lines near fs/2), with the tables, Gram matrices and normal
    equations of all the gates in stacks: each gate's numbers are those it gets alone.

    Returns (b, g, p, tables): per gate the coefficients [DC, cos.., sin..], the Gram
    matrix, the projections and the (inner, outer) tables.
    """
    m_len, r_len = _fold_shape(n)
    tab = _harmonic_tables(w0, k, m_len, r_len)
    tables = [(t[:m_len], t[m_len:]) for t in tab]
    g = _gram_harmonics(w0, k, n)
    p = np.empty((len(arrs), 2 * k + 1))
    for i, (a, (inner, outer)) in enumerate(zip(arrs, tables, strict=True)):
        z = _project(a, inner, outer)
        p[i, 0] = totals[i]
        p[i, 1 : k + 1] = z.real
        p[i, k + 1 :] = z.imag
    use = _fitted_columns(k, nyquist)
    gu = g[:, use][:, :, use] if nyquist else g
    pu = p[:, use] if nyquist else p
    # columns that vanish (sin at 0) or lines too close take the careful solver, gate by
    # gate; the rest one stacked solve (LAPACK's gesv on each matrix, as alone)
    diag = np.diagonal(gu, axis1=1, axis2=2)
    plain = (diag > 1e-9 * gu[:, :1, 0]).all(axis=1) & np.asarray(separated, dtype=bool)
    bu = np.empty_like(pu)
    idx = np.flatnonzero(plain)
    if idx.size:
        try:
            bu[idx] = np.linalg.solve(gu[idx], pu[idx][:, :, None])[:, :, 0]
        except np.linalg.LinAlgError:
            plain[:] = False
    for i in np.flatnonzero(~plain):
        bu[i] = _solve_normal(gu[i], pu[i], bool(separated[i]))
    if nyquist:
        b = np.zeros_like(p)
        b[:, use] = bu
    else:
        b = bu
    return b, g, p, tables


def _figures_from_fit(
    a, xx, b, g, p, inner, outer, *, fs, f0, n_sig, mains_hz, member, sfdr
) -> QualityFigures:
    """The figures of one gate from its joint fit (see `measure_quality`)."""
    n = a.size
    k = (b.size - 1) // 2
    bc, bs = b[1 : k + 1], b[k + 1 :]
    dg = g.diagonal()
    energy = bc * bc * dg[1 : k + 1] + 2.0 * bc * bs * g[1 : k + 1, k + 1 :].diagonal()
    energy += bs * bs * dg[k + 1 :]

    # With mains="auto" keep the family holding more power; the other family's own lines
    # go back into the noise.
    f_m: float | None = None
    hum_energy = other_energy = 0.0
    n_other = 0
    if mains_hz:
        el = energy.tolist()
        fam = {f: math.fsum(itertools.compress(el, member[f])) for f in mains_hz}
        f_m = max(mains_hz, key=lambda f: fam[f])
        hum_energy = fam[f_m]
        other = [not m for m in member[f_m][n_sig:]]  # the other family's own lines
        other_energy = math.fsum(itertools.compress(el[n_sig:], other))
        n_other = sum(other)

    n_par = max(int(np.count_nonzero(b)) - 2 * n_other, 1)
    resid = xx - float(np.dot(b, p))
    if resid < 1e-11 * xx:
        # Above ~110 dB SINAD the subtraction above loses digits: evaluate the residual
        # itself (still without trig over the full record).
        r = a - _model(n, float(b[0]), bc - 1j * bs, inner, outer)
        resid = float(np.dot(r, r))
    noise_power = (max(resid, 0.0) + other_energy) / max(n - n_par, 1)

    if sfdr:
        spur_power, spur_hz = _largest_spur(a, fs, f0, float(b[0]))
    else:
        spur_power, spur_hz = math.nan, math.nan
    if spur_power < 0.0:
        spur_power = 0.0
        warnings.warn(
            f"the record has only {n} samples: too short to search for spurs; SFDR is a floor",
            stacklevel=3,
        )
    if energy[0] <= 0.0 or xx <= float(b[0]) ** 2 * n * (1.0 + 1e-12):
        warnings.warn(
            "the record holds no AC signal (constant or silent): the ratio figures are meaningless",
            stacklevel=3,
        )
    cycles = f0 * n / fs
    if cycles < _MIN_CYCLES:
        warnings.warn(
            f"the record holds only {cycles:.3g} cycles of the tone: too few to tell it from "
            "DC and its harmonics, so the figures are unreliable (a longer record or gate helps)",
            stacklevel=3,
        )
    return _figures_from_powers(
        fundamental_hz=f0,
        fs_hz=fs,
        n_samples=n,
        n_harmonics_used=n_sig - 1,
        spur_hz=spur_hz,
        hum_hz=f_m,
        fundamental_power=float(energy[0]) / n,
        harmonic_power=float(energy[1:n_sig].sum()) / n,
        noise_power=noise_power,
        hum_power=hum_energy / n,
        spur_power=spur_power,
        dc_power=float(b[0]) ** 2,
        total_power=xx / n,
    )


def measure_quality_many(
    xs: Sequence[np.ndarray],
    fs_hz: float,
    fundamentals_hz: Sequence[float],
    *,
    sfdr: Sequence[bool],
    n_harmonics: int = 10,
) -> list[QualityFigures]:
    """`measure_quality` of several gates, without mains lines: figures[i] equals
    ``measure_quality(xs[i], fs_hz, fundamental_hz=fundamentals_hz[i], mains=None,
    sfdr=sfdr[i], n_harmonics=n_harmonics)`` bit for bit.

    Gates of one length whose fits take the same shape share the small linear algebra
    (tables, Gram matrices, normal equations), done in stacks: a monitor measuring gates
    in batches pays numpy's per-call cost once a batch instead of once a gate.

    Raises
    ------
    ValueError, TypeError
        As `measure_quality`, for the first gate at fault; or if the sequences differ in
        length.
    """
    fs = _check_positive("fs_hz", fs_hz)
    _check_n_harmonics(n_harmonics)
    if np.ndim(sfdr) != 1 or np.ndim(fundamentals_hz) != 1:
        raise TypeError("fundamentals_hz and sfdr must be sequences, one entry a gate")
    xs, f0s, full = list(xs), list(fundamentals_hz), [bool(s) for s in sfdr]
    if not len(xs) == len(f0s) == len(full):
        raise ValueError(
            f"xs, fundamentals_hz and sfdr differ in length ({len(xs)}, {len(f0s)}, {len(full)})"
        )
    gates = []
    groups: dict[tuple, list[int]] = {}
    for i, (x, f) in enumerate(zip(xs, f0s, strict=True)):
        f0 = _check_fundamental(f, fs)
        a, total = _real_block_and_sum(x)
        n = a.size
        n_sig = _signal_lines(f0, fs, n, n_harmonics)
        w = 2.0 * np.pi * np.array([f0 * q for q in range(1, n_sig + 1)]) / fs
        nyquist = _nyquist_lines(w, n)
        gates.append((a, total, f0, n_sig, _well_separated(w, n, nyquist)))
        groups.setdefault((n, n_sig, tuple(nyquist)), []).append(i)
    fits: list = [None] * len(xs)
    for (n, k, nyquist), members in groups.items():
        w0 = 2.0 * np.pi * np.array([gates[i][2] for i in members]) / fs
        b, g, p, tables = _fit_harmonic_stack(
            [gates[i][0] for i in members],
            [gates[i][1] for i in members],
            w0,
            k,
            n,
            list(nyquist),
            [gates[i][4] for i in members],
        )
        for j, i in enumerate(members):
            fits[i] = (b[j], g[j], p[j], *tables[j])
    # the figures (and their warnings) in gate order, as gate by gate
    out = []
    for (a, _, f0, n_sig, _), (b, g, p, inner, outer), s in zip(gates, fits, full, strict=True):
        out.append(
            _figures_from_fit(
                a, float(np.dot(a, a)), b, g, p, inner, outer, fs=fs, f0=f0, n_sig=n_sig,
                mains_hz=(), member={}, sfdr=s,
            )
        )  # fmt: skip
    return out


def combine_quality(figures: Sequence[QualityFigures]) -> QualityFigures:
    """Combine the figures of several gates into one (the whole-record summary).

    The component powers are averaged, weighted by each gate's n_samples, and every ratio
    is recomputed from the averages (averaging dB values would be biased). The fundamental
    frequency is the weighted mean; hum_hz and spur_hz are those of the gate holding the
    most hum / the strongest spur; n_harmonics_used is the smallest over the gates.

    Parameters
    ----------
    figures : sequence of QualityFigures
        Gates measured at one sample rate.

    Returns
    -------
    QualityFigures

    Raises
    ------
    TypeError
        If an element is not a QualityFigures.
    ValueError
        If the sequence is empty or the gates' sample rates differ.
    """
    figs = list(figures)
    if not figs:
        raise ValueError("figures is empty; need at least one QualityFigures")
    acc = QualityAccumulator()
    for f in figs:
        acc.add(f)
    return acc.result()


_SUMMED = (
    "fundamental_hz",
    "fundamental_power",
    "harmonic_power",
    "noise_power",
    "hum_power",
    "dc_power",
    "total_power",
)


class QualityAccumulator:
    """`combine_quality` one gate at a time, in constant memory and time per gate.

    ``acc.add(f)`` for each gate, then ``acc.result()`` gives what ``combine_quality``
    gives for the whole list: sample-weighted mean powers (the spur power over the gates
    whose spurs were searched), ratios recomputed from them.

    Examples
    --------
    >>> n = np.arange(4800)
    >>> x = 0.5 * np.sin(2 * np.pi * 1000 * n / 48000) + 1e-3 * np.cos(n)
    >>> acc = QualityAccumulator()
    >>> for _ in range(3):
    ...     acc.add(measure_quality(x, 48000, fundamental_hz=1000))
    >>> acc.result().n_samples, acc.gates
    (14400, 3)
    """

    def __init__(self) -> None:
        self.gates = 0
        self._n = 0
        self._fs: float | None = None
        self._sums = dict.fromkeys(_SUMMED, 0.0)
        self._spur_n = 0
        self._spur_sum = 0.0
        self._n_harm: int | None = None
        self._hum_gate: QualityFigures | None = None
        self._spur_gate: QualityFigures | None = None
        self._first: QualityFigures | None = None

    def add(self, f: QualityFigures) -> None:
        """Add one gate's figures (or a summary of several, weighted by its n_samples)."""
        if not isinstance(f, QualityFigures):
            raise TypeError(f"figures must hold QualityFigures, got {type(f).__name__}")
        if self._fs is not None and f.fs_hz != self._fs:
            raise ValueError(
                f"figures come from different sample rates fs_hz={sorted({self._fs, f.fs_hz})}"
            )
        self._fs = f.fs_hz
        self.gates += 1
        w = f.n_samples
        self._n += w
        sums = self._sums
        for field in _SUMMED:
            sums[field] += w * getattr(f, field)
        if math.isfinite(f.spur_power):
            self._spur_n += w
            self._spur_sum += w * f.spur_power
            if self._spur_gate is None or f.spur_power > self._spur_gate.spur_power:
                self._spur_gate = f
        self._n_harm = (
            f.n_harmonics_used if self._n_harm is None else min(self._n_harm, f.n_harmonics_used)
        )
        key = (f.hum_hz is not None, f.hum_power)
        if self._hum_gate is None or key > (
            self._hum_gate.hum_hz is not None,
            self._hum_gate.hum_power,
        ):
            self._hum_gate = f
        if self._first is None:
            self._first = f

    def merge(self, other: QualityAccumulator) -> None:
        """Add every gate of `other` (as if each had been added here)."""
        if not other.gates:
            return
        if self._fs is not None and other._fs != self._fs:
            raise ValueError(
                f"figures come from different sample rates fs_hz={sorted({self._fs, other._fs})}"
            )
        if not self.gates:
            self.__dict__.update(other.__dict__, _sums=dict(other._sums))
            return
        self.gates += other.gates
        self._n += other._n
        for k, v in other._sums.items():
            self._sums[k] += v
        self._spur_n += other._spur_n
        self._spur_sum += other._spur_sum
        sg = other._spur_gate
        if sg is not None and (
            self._spur_gate is None or sg.spur_power > self._spur_gate.spur_power
        ):
            self._spur_gate = sg
        self._n_harm = min(self._n_harm, other._n_harm)
        hg = other._hum_gate
        if (hg.hum_hz is not None, hg.hum_power) > (
            self._hum_gate.hum_hz is not None,
            self._hum_gate.hum_power,
        ):
            self._hum_gate = hg

    def result(self) -> QualityFigures:
        """The combined figures; ValueError before the first `add`."""
        if not self.gates:
            raise ValueError("figures is empty; need at least one QualityFigures")
        n = self._n
        mean = {k: v / n for k, v in self._sums.items()}
        spur_gate = self._spur_gate or self._first
        return _figures_from_powers(
            fs_hz=self._fs,
            n_samples=int(n),
            n_harmonics_used=self._n_harm,
            spur_hz=spur_gate.spur_hz,
            hum_hz=self._hum_gate.hum_hz,
            spur_power=self._spur_sum / self._spur_n if self._spur_n else math.nan,
            **mean,
        )
