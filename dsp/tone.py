"""The counter: frequency of a tone near the Cramér–Rao bound, with a stated uncertainty.

A gate is measured in three steps: a coarse spectral peak (Hann window, parabolic
interpolation, and a check that the peak is the fundamental of a periodic wave rather than
one of its harmonics), then an IEEE Std 1057 four-parameter sine fit by Gauss–Newton,
which is the maximum-likelihood estimator in white noise and reaches the Cramér–Rao
bound above threshold at any sub-bin offset. The fit never evaluates trigonometric
functions over the whole gate: with the sample index split as n = r*M + m the complex
exponentials factor, so every sum the fit needs is a small BLAS product over an (R, M)
view of the gate plus R + M exponentials.

Gates are joined into a whole-record frequency phase-coherently (`combine_gates`): the
phase at each gate centre is unwrapped across gates and a line is fitted to it, so the
uncertainty of a stable tone falls as T^-3/2 rather than the T^-1/2 of averaging readings.

References
----------
S. M. Kay, Fundamentals of Statistical Signal Processing: Estimation Theory, 1993,
Example 3.14 (CRLB of a real sinusoid's frequency).
D. C. Rife and R. R. Boorstyn, "Single-tone parameter estimation from discrete-time
observations", IEEE Trans. Inf. Theory 20(5), 1974.
IEEE Std 1057 (four-parameter sine fit).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

__all__ = [
    "GateCombination",
    "GateJoin",
    "ToneEstimate",
    "combine_gates",
    "crlb_frequency_std_hz",
    "estimate_tone",
    "format_with_uncertainty",
]

TWO_PI = 2.0 * math.pi


@dataclass(frozen=True)
class ToneEstimate:
    """One tone measured over one stretch of samples.

    Attributes
    ----------
    frequency_hz : float
        Estimated frequency (nominal sample clock; apply clock correction outside).
    uncertainty_hz : float
        1-sigma standard uncertainty: the Cramér–Rao bound evaluated at the measured
        signal-to-noise ratio (residual-based), valid above threshold.
    amplitude : float
        Peak amplitude of the fitted sine, in full-scale units.
    amplitude_dbfs : float
        20*log10(amplitude); a full-scale sine reads 0 dBFS.
    phase_rad : float
        Phase of A*cos(2*pi*f*(t - t_ref) + phase) at the reference time.
    phase_uncertainty_rad : float
        1-sigma uncertainty of `phase_rad` (1/sqrt(eta*N) at the centre).
    t_ref_s : float
        Reference time of the phase, seconds after the first sample (the centre).
    offset : float
        Fitted DC offset.
    snr_db : float
        Per-sample SNR eta = A^2 / (2 sigma^2), dB, where sigma^2 is the white-noise
        variance equivalent to the noise density near the tone (harmonics and distant
        tones do not count; see `_Gate.local_noise_variance`).
    gate_snr_db : float
        N * eta in dB: the gate's integrated SNR, which sets the threshold (below about
        15-20 dB outliers appear).
    n_samples : int
        Samples used.
    acquired : bool
        True when the coarse spectral search ran, False when the fit started from a
        given frequency (tracking).
    """

    frequency_hz: float
    uncertainty_hz: float
    amplitude: float
    amplitude_dbfs: float
    phase_rad: float
    phase_uncertainty_rad: float
    t_ref_s: float
    offset: float
    snr_db: float
    gate_snr_db: float
    n_samples: int
    acquired: bool


def crlb_frequency_std_hz(eta: float, n_samples: int, fs_hz: float) -> float:
    """Square root of the Cramér–Rao bound on the frequency of a real sinusoid.

    var(f) >= 12 fs^2 / ((2 pi)^2 eta N (N^2 - 1)), eta = A^2 / (2 sigma^2)
    (Kay 1993, Example 3.14). Holds away from 0 Hz and fs/2.

    Parameters
    ----------
    eta : float
        Per-sample SNR, linear (A^2 / (2 sigma^2)).
    n_samples : int
        Number of samples N (>= 2).
    fs_hz : float
        Sample rate.
    """
    if n_samples < 2:
        raise ValueError(f"n_samples={n_samples} must be at least 2")
    if not eta > 0:
        return math.inf
    n = float(n_samples)
    return math.sqrt(12.0 * fs_hz**2 / (TWO_PI**2 * eta * n * (n * n - 1.0)))


# ---------------------------------------------------------------------------------------
# Factored sums. Index n = r*M + m (r < R, m < M), centred time t = n - c, c = (N-1)/2.


def _split(n: int) -> tuple[int, int]:
    """(R, M) with R*M >= N and M near sqrt(N); an exact divisor avoids a padded copy."""
    root = math.isqrt(n)
    for m in range(max(1, root), max(1, root // 2), -1):
        if n % m == 0:
            return n // m, m
    m = max(1, math.ceil(math.sqrt(n)))
    return -(-n // m), m


class _Layout:
    """Index arrays shared by every gate of one length (cached)."""

    def __init__(self, n: int):
        self.n = n
        self.r, self.m = _split(n)
        self.c = (n - 1) / 2.0
        self.u = np.arange(self.r) * float(self.m) - self.c
        self.v = np.arange(self.m, dtype=float)
        self.vpow = np.stack([self.v**p for p in range(_TAYLOR + 2)])  # (P, M)
        self.tail = np.arange(n, self.r * self.m) - self.c  # padded times, excluded
        self.tt = (n - 1) * n * (n + 1) / 12.0  # sum of t^2
        self.full_rows = self.r if self.r * self.m == n else self.r - 1
        self.hann = np.hanning(self.m + 2)[1:-1]
        self.whann = self.hann * self.vpow[:_TAYLOR]
        self.hann_sum = float(self.hann.sum())
        self.hann_energy = float(np.dot(self.hann, self.hann))


# Taylor terms for moving a row projection from w0 to w = w0 + d: the error after K terms
# is (d M)^K / K!; re-expansion keeps |d| M below _REEXPAND, so 4 terms leave ~1e-10.
_TAYLOR = 4
_REEXPAND = 0.02
_FACT = np.array([1.0, 1.0, 2.0, 6.0, 24.0, 120.0])
_POWERS = np.arange(_TAYLOR)
_LAYOUTS: dict[int, _Layout] = {}


def _layout(n: int) -> _Layout:
    lay = _LAYOUTS.get(n)
    if lay is None:
        if len(_LAYOUTS) > 16:
            _LAYOUTS.clear()
        lay = _LAYOUTS[n] = _Layout(n)
    return lay


class _Gate:
    """A gate prepared for repeated factored sums.

    Index n = r*M + m (r < R, m < M), centred time t = n - c with c = (N-1)/2, so
    t = u_r + v_m with u_r = r*M - c and v_m = m, and e^{j w t} = e^{j w u_r} e^{j w v_m}.
    The row sums q_p[r] = sum_m x[rM+m] m^p e^{-j w0 m} are taken once, in one BLAS
    product over the gate; sums at a nearby w follow from their Taylor series in (w - w0).
    """

    def __init__(self, x: np.ndarray):
        lay = self.lay = _layout(x.shape[0])
        self.n, self.r, self.m = lay.n, lay.r, lay.m
        if lay.r * lay.m == lay.n:
            self.rows = x.reshape(lay.r, lay.m)
        else:
            buf = np.zeros(lay.r * lay.m)
            buf[: lay.n] = x
            self.rows = buf.reshape(lay.r, lay.m)
        self.x = x
        self.sum_x = float(x.sum())
        self.w0: float | None = None

    @property
    def sum_x2(self) -> float:
        return float(np.dot(self.x, self.x))

    def _expand(self, w0: float) -> None:
        lay = self.lay
        e = np.exp(-1j * w0 * lay.v)
        k = _TAYLOR + 1
        cols = np.concatenate([lay.vpow[:k] * e, lay.whann * e])  # (K + T, M) complex
        basis = np.concatenate([cols.real, cols.imag]).T  # (M, 2(K + T)) real
        q = self.rows @ basis  # the one pass over the gate
        half = cols.shape[0]
        qc = q[:, :half] + 1j * q[:, half:]
        self.q = qc[:, :k].T  # (K, R)
        self.qw = qc[:, k:].T  # (T, R)
        self.w0 = w0

    def _coef(self, omega: float) -> np.ndarray:
        """Taylor coefficients (-j d)^p / p! that move the row sums from w0 to omega
        (expanding afresh at omega when it is too far from w0)."""
        if self.w0 is None or abs(omega - self.w0) * self.m > _REEXPAND:
            self._expand(omega)
        return (-1j * (omega - self.w0)) ** _POWERS / _FACT[:_TAYLOR]

    def _row_sums(self, omega: float):
        coef = self._coef(omega)
        s0 = coef @ self.q[:_TAYLOR]  # sum_m x e^{-j w m}
        s1 = coef @ self.q[1 : _TAYLOR + 1]  # sum_m x m e^{-j w m}
        return s0, s1

    def sums(self, omega: float):
        """Everything one Gauss–Newton step needs at angular frequency `omega`.

        Returns (P0, P1, G(omega), G(2 omega)) where P0 = sum x e^{-j w t},
        P1 = sum x t e^{-j w t}, and G(theta) = (sum cos(theta t), sum t sin(theta t),
        sum t^2 cos(theta t)); by the symmetry of centred t the sums of sin(theta t),
        t cos(theta t) and t^2 sin(theta t) vanish.
        """
        lay = self.lay
        s0, s1 = self._row_sums(omega)
        er_c = np.exp(-1j * omega * lay.u)  # e^{-j w u_r}
        p0 = complex(er_c @ s0)
        p1 = complex(er_c @ (lay.u * s0 + s1))
        return p0, p1, self._trig(omega), self._trig(2.0 * omega)

    def _trig(self, theta: float) -> tuple[float, float, float]:
        """(sum cos(theta t), sum t sin(theta t), sum t^2 cos(theta t)) over centred t.

        Closed form from the Dirichlet kernel D(theta) = sin(N theta/2) / sin(theta/2)
        and its derivatives (sum t sin = -D', sum t^2 cos = -D''); within a few bins of
        theta = 0 (mod 2 pi), where the form cancels, the factored sums are used.
        """
        n = self.n
        x = 0.5 * theta
        sx = math.sin(x)
        if abs(sx) * n < 20.0:
            return self._trig_sum(theta)
        cx = math.cos(x)
        snx, cnx = math.sin(n * x), math.cos(n * x)
        f, f1, f2 = snx, n * cnx, -n * n * snx
        g, g1, g2 = sx, cx, -sx
        d0 = f / g
        num = f1 * g - f * g1
        d1 = num / (g * g)
        d2 = (f2 * g - f * g2) / (g * g) - 2.0 * g1 * num / (g * g * g)
        return d0, -0.5 * d1, -0.25 * d2

    def _trig_sum(self, theta: float) -> tuple[float, float, float]:
        lay = self.lay
        er = np.exp(1j * theta * lay.u)
        ec = np.exp(1j * theta * lay.v)
        c0, c1, c2 = lay.vpow[:3] @ ec
        u = lay.u
        r0, r1, r2 = er.sum(), er @ u, er @ (u * u)
        g0 = r0 * c0
        g1 = r1 * c0 + r0 * c1
        g2 = r2 * c0 + 2.0 * r1 * c1 + r0 * c2
        if lay.tail.size:
            et = np.exp(1j * theta * lay.tail)
            g0 -= et.sum()
            g1 -= et @ lay.tail
            g2 -= et @ (lay.tail * lay.tail)
        return float(g0.real), float(g1.imag), float(g2.real)

    def local_noise_variance(self, omega: float, a: float, b: float, d: float) -> float | None:
        """White-noise variance equivalent to the noise density near the tone.

        Each complete row is Hann-windowed and demodulated at `omega`; the fitted model's
        share (tone, its image at -omega and the offset) is removed exactly, and what is
        left is noise within about +/-2 fs/M of the tone. Distant tones and harmonics fall
        in the window's sidelobes, so they do not count as noise; the frequency estimate's
        variance depends on the noise density at the tone (asymptotically, in coloured
        noise too), which is what this measures. None when there are too few rows.
        """
        lay = self.lay
        rows = lay.full_rows
        if rows < 8:
            return None
        coef = self._coef(omega)
        yrow = coef[: self.qw.shape[0]] @ self.qw  # sum_m w_m x e^{-j w m}
        u = lay.u[:rows]
        er1 = np.exp(-1j * omega * u)
        y = yrow[:rows] * er1
        w = lay.hann
        e1 = np.exp(-1j * omega * lay.v)
        w1 = np.dot(w, e1)
        w2 = np.dot(w, e1 * e1)
        model = (
            0.5 * (a - 1j * b) * lay.hann_sum + 0.5 * (a + 1j * b) * er1 * er1 * w2 + d * er1 * w1
        )
        res = y - model
        # 2*rows real values, 4 fitted parameters
        power = float(np.sum(res.real**2 + res.imag**2)) / max(1, rows - 2)
        return power / lay.hann_energy


def _fit_step(g: _Gate, omega: float, ab: tuple[float, float] | None):
    """One Gauss–Newton step of the four-parameter sine fit (IEEE Std 1057).

    Model x ~ a cos(w t) + b sin(w t) + d + dw * D, D = t (-a sin(w t) + b cos(w t)).
    Returns ((a, b, d, dw), (a3, b3, d3, xc, xs)): the step, and the linear
    three-parameter fit at `omega` with the projections it used.
    """
    n = g.n
    p0, p1, (c1, s1t, _), (c2, s2t, c2tt) = g.sums(omega)
    xc, xs = p0.real, -p0.imag  # sum x cos(wt), sum x sin(wt)
    xtc, xts = p1.real, -p1.imag  # sum x t cos, sum x t sin
    cc = 0.5 * (n + c2)
    ss = 0.5 * (n - c2)
    # Centred t makes sum cos*sin, sum t cos^2, sum t sin^2, sum t cos and
    # sum t^2 sin cos vanish, which leaves these Gram entries.
    tcs = 0.5 * s2t  # sum t sin cos
    ttcc = 0.5 * (g.lay.tt + c2tt)
    ttss = 0.5 * (g.lay.tt - c2tt)
    # Three-parameter Gram [[cc, 0, c1], [0, ss, 0], [c1, 0, n]]: b decouples.
    det = cc * n - c1 * c1
    if det > 0 and ss > 0:
        a3 = (xc * n - c1 * g.sum_x) / det
        d3 = (cc * g.sum_x - c1 * xc) / det
        b3 = xs / ss
    else:
        a3, b3, d3 = 0.0, 0.0, g.sum_x / n
    a, b = (a3, b3) if ab is None else ab
    dc = -a * tcs  # sum D cos
    ds = b * tcs  # sum D sin
    d1 = -a * s1t  # sum D
    dd = a * a * ttss + b * b * ttcc  # sum D^2
    xd = -a * xts + b * xtc
    g4 = [
        [cc, 0.0, c1, dc],
        [0.0, ss, 0.0, ds],
        [c1, 0.0, float(n), d1],
        [dc, ds, d1, dd],
    ]
    sol = _cholesky_solve(g4, [xc, xs, g.sum_x, xd])
    if sol is None:
        sol = [a3, b3, d3, 0.0]
    return sol, (a3, b3, d3, xc, xs)


def _cholesky_solve(a: list[list[float]], b: list[float]) -> list[float] | None:
    """Solve a symmetric positive-definite 4x4 system in plain floats (the Gram matrix of
    a Gauss-Newton step costs more to hand to LAPACK, or to a loop, than to solve here
    written out). None if not positive definite."""
    (a00, a01, a02, a03), (_, a11, a12, a13), (_, _, a22, a23), (_, _, _, a33) = a
    if not a00 > 0.0:
        return None
    l00 = math.sqrt(a00)
    l10, l20, l30 = a01 / l00, a02 / l00, a03 / l00
    t = a11 - l10 * l10
    if not t > 0.0:
        return None
    l11 = math.sqrt(t)
    l21 = (a12 - l20 * l10) / l11
    l31 = (a13 - l30 * l10) / l11
    t = a22 - l20 * l20 - l21 * l21
    if not t > 0.0:
        return None
    l22 = math.sqrt(t)
    l32 = (a23 - l30 * l20 - l31 * l21) / l22
    t = a33 - l30 * l30 - l31 * l31 - l32 * l32
    if not t > 0.0:
        return None
    l33 = math.sqrt(t)
    b0, b1, b2, b3 = b
    y0 = b0 / l00
    y1 = (b1 - l10 * y0) / l11
    y2 = (b2 - l20 * y0 - l21 * y1) / l22
    y3 = (b3 - l30 * y0 - l31 * y1 - l32 * y2) / l33
    x3 = y3 / l33
    x2 = (y2 - l32 * x3) / l22
    x1 = (y1 - l21 * x2 - l31 * x3) / l11
    x0 = (y0 - l10 * x1 - l20 * x2 - l30 * x3) / l00
    return [x0, x1, x2, x3]


_HANN: dict[int, np.ndarray] = {}


def _hann_spectrum(x: np.ndarray) -> np.ndarray:
    n = x.shape[0]
    w = _HANN.get(n)
    if w is None:
        if len(_HANN) > 16:
            _HANN.clear()
        w = _HANN[n] = np.hanning(n) / (np.hanning(n).sum())
    spec = np.fft.rfft((x - x.mean()) * w)
    return spec.real**2 + spec.imag**2


def _parabolic(p: np.ndarray, k: int) -> float:
    """Sub-bin peak position from log-power parabolic interpolation (Hann window)."""
    if k <= 0 or k >= p.shape[0] - 1:
        return float(k)
    a, b, c = np.log(p[k - 1 : k + 2] + 1e-300)
    den = a - 2.0 * b + c
    if den >= 0:
        return float(k)
    return k + 0.5 * (a - c) / den


def _local_peak(p: np.ndarray, k0: float, half_width: int = 2) -> tuple[int, float]:
    lo = max(1, int(round(k0)) - half_width)
    hi = min(p.shape[0] - 1, int(round(k0)) + half_width + 1)
    if hi <= lo:
        return int(round(k0)), 0.0
    k = lo + int(np.argmax(p[lo:hi]))
    return k, float(p[k])


def _coarse(
    x: np.ndarray,
    fs_hz: float,
    near_hz: float | None,
    band_hz: tuple[float, float] | None,
    fundamental: bool,
) -> float:
    n = x.shape[0]
    p = _hann_spectrum(x)
    df = fs_hz / n
    kmin, kmax = 1, p.shape[0] - 1
    if band_hz is not None:
        kmin = max(1, int(math.ceil(band_hz[0] / df)))
        kmax = min(p.shape[0] - 1, int(math.floor(band_hz[1] / df)))
        if kmax < kmin:
            raise ValueError(f"band_hz={band_hz} holds no frequency bin at N={n}")
    seg = p[kmin : kmax + 1]
    floor = float(np.median(seg[:: max(1, seg.shape[0] // 2048)])) + 1e-300
    if near_hz is not None:
        # Significant local maxima; choose the one nearest to near_hz.
        inner = seg[1:-1]
        is_peak = (inner > seg[:-2]) & (inner >= seg[2:]) & (inner > floor * 30.0)
        cand = np.nonzero(is_peak)[0] + 1 + kmin
        if cand.size == 0:
            k = kmin + int(np.argmax(seg))
        else:
            k = int(cand[np.argmin(np.abs(cand * df - near_hz))])
        return _parabolic(p, k) * df
    k = kmin + int(np.argmax(seg))
    kf = _parabolic(p, k)
    if fundamental and band_hz is None:
        # A distorted periodic wave may have a harmonic stronger than its fundamental.
        # Take the lowest sub-multiple f/q (q <= 10) that carries a real line within
        # 20 dB of the strongest and well above the floor.
        peak = float(p[k])
        for q in range(10, 1, -1):
            kq = kf / q
            if kq < 2.0:
                continue
            kk, val = _local_peak(p, kq, half_width=max(1, int(round(0.02 * kq)) + 1))
            if val > peak * 0.01 and val > floor * 1e3 and abs(kk - kq) <= 1.5:
                return _parabolic(p, kk) * df
    return kf * df


def _finite_energy(x: np.ndarray) -> bool:
    with np.errstate(over="ignore", invalid="ignore"):
        return bool(np.isfinite(np.dot(x, x)))


def estimate_tone(
    x: np.ndarray,
    fs_hz: float,
    *,
    near_hz: float | None = None,
    band_hz: tuple[float, float] | None = None,
    start_hz: float | None = None,
    fundamental: bool = True,
    max_iter: int = 12,
    check_finite: bool = True,
) -> ToneEstimate:
    """Estimate the frequency of the dominant (or chosen) tone in a real signal.

    Parameters
    ----------
    x : array_like, shape (N,)
        Real samples, N >= 16.
    fs_hz : float
        Sample rate in Hz.
    near_hz : float, optional
        Measure the significant spectral line nearest to this frequency.
    band_hz : (float, float), optional
        Measure the strongest line within this band.
    start_hz : float, optional
        Skip the spectral search and start the fit here (tracking a tone already known
        to within a fraction of 1/T, T = N/fs).
    fundamental : bool
        When searching the whole band, prefer the fundamental of a periodic wave to a
        stronger harmonic (default True).
    max_iter : int
        Gauss–Newton iterations at most.
    check_finite : bool
        Check for NaN/Inf first (default True); callers that validated their samples
        already may skip the extra pass.

    Returns
    -------
    ToneEstimate

    Raises
    ------
    ValueError
        For too few samples, a bad sample rate, non-finite samples or an empty band.

    Examples
    --------
    A 0.5 amplitude sine at 1234.5678 Hz sampled at 48 kHz for one second:

    >>> import numpy as np
    >>> t = np.arange(48000) / 48000
    >>> est = estimate_tone(0.5 * np.sin(2 * np.pi * 1234.5678 * t), 48000)
    >>> round(est.frequency_hz, 4)
    1234.5678
    """
    x = np.asarray(x, dtype=float)
    if x.ndim != 1:
        raise ValueError(f"x must be one-dimensional, got shape {x.shape}")
    n = x.shape[0]
    if n < 16:
        raise ValueError(f"need at least 16 samples, got {n}")
    if not (math.isfinite(fs_hz) and fs_hz > 0):
        raise ValueError(f"Sampling frequency fs_hz={fs_hz} must be positive and finite")
    if band_hz is not None:
        lo, hi = float(band_hz[0]), float(band_hz[1])
        if not (0 <= lo < hi <= fs_hz / 2):
            raise ValueError(f"band_hz={band_hz} must satisfy 0 <= lo < hi <= fs/2")
        band_hz = (lo, hi)
    if near_hz is not None and not (0 < near_hz < fs_hz / 2):
        raise ValueError(f"near_hz={near_hz} must be inside (0, fs/2)")
    if check_finite and not _finite_energy(x):
        # (x.x also overflows for |x| > 1e154, which the spectra could not hold either)
        raise ValueError("x contains NaN, infinite or absurdly large samples")

    acquired = start_hz is None
    f0 = _coarse(x, fs_hz, near_hz, band_hz, fundamental) if acquired else float(start_hz)
    g = _Gate(x)
    omega = TWO_PI * f0 / fs_hz
    ab = None
    bin_w = TWO_PI / n  # one bin: a larger step means the start was poor
    for _ in range(max(1, max_iter)):
        sol, (a3, b3, d3, xc, xs) = _fit_step(g, omega, ab)
        a, b, _d, dw = sol
        if not math.isfinite(dw):
            break
        dw = max(-bin_w, min(bin_w, dw))
        omega = omega + dw
        ab = (a, b)
        # Gauss-Newton converges quadratically: after a step of 1e-4 bin the error left
        # is ~1e-8 bin, far below the CRLB at any SNR a sound card gives; the
        # three-parameter fit of that step stands for the converged one.
        if abs(dw) < 1e-4 * bin_w:
            break
    # The Gauss-Newton solution carries the amplitude and phase at the updated frequency
    # to first order; the three-parameter projections give the residual energy.
    a_fit, b_fit, d_fit = float(sol[0]), float(sol[1]), float(sol[2])
    amp = math.hypot(a_fit, b_fit)
    local = g.local_noise_variance(omega, a_fit, b_fit, d_fit)
    if local is None:
        rss = g.sum_x2 - (a3 * xc + b3 * xs + d3 * g.sum_x)
        local = max(rss, 0.0) / max(1, n - 4)
    # Guard against a numerically perfect fit (noiseless synthetic data): float64
    # rounding of the sums sets a floor about 150 dB below the tone.
    sigma2 = max(local, (amp * 3e-8) ** 2, 1e-300)
    eta = amp * amp / (2.0 * sigma2)
    f_hz = omega * fs_hz / TWO_PI
    if f_hz < 0:
        f_hz = -f_hz
    return ToneEstimate(
        frequency_hz=float(f_hz),
        uncertainty_hz=crlb_frequency_std_hz(eta, n, fs_hz),
        amplitude=float(amp),
        amplitude_dbfs=float(20.0 * math.log10(amp)) if amp > 0 else -math.inf,
        phase_rad=float(math.atan2(-b_fit, a_fit)),
        phase_uncertainty_rad=float(1.0 / math.sqrt(eta * n)) if eta > 0 else math.inf,
        t_ref_s=(n - 1) / 2.0 / fs_hz,
        offset=d_fit,
        snr_db=float(10.0 * math.log10(eta)) if eta > 0 else -math.inf,
        gate_snr_db=float(10.0 * math.log10(eta * n)) if eta > 0 else -math.inf,
        n_samples=n,
        acquired=acquired,
    )


# ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class GateCombination:
    """Whole-record frequency from per-gate estimates.

    Attributes
    ----------
    frequency_hz, uncertainty_hz : float
        Combined frequency and its 1-sigma uncertainty (scaled up by the Birge ratio when
        the gates disagree more than their own uncertainties allow, e.g. under drift).
    method : {"phase-coherent", "mean"}
        "phase-coherent" when the phase could be followed across every gate; "mean" is
        the weighted mean of the gate frequencies otherwise.
    birge_ratio : float
        sqrt(chi^2 / dof) of the fit (1 for consistent gates).
    n_gates : int
    """

    frequency_hz: float
    uncertainty_hz: float
    method: str
    birge_ratio: float
    n_gates: int


def combine_gates(
    t_ref_s: Sequence[float],
    frequency_hz: Sequence[float],
    frequency_sigma_hz: Sequence[float],
    phase_rad: Sequence[float],
    phase_sigma_rad: Sequence[float],
    *,
    contiguous: Sequence[bool] | None = None,
) -> GateCombination:
    """Join gate estimates of one tone into a whole-record frequency.

    The phase of each gate (at its centre `t_ref_s`) is unwrapped against the phase
    predicted from the neighbouring gates' frequencies; then phases and frequencies are
    fitted together by weighted least squares to phi_k = p + 2 pi f (t_k - t_mean) and
    f_k = f. For a stable tone this is the whole-record maximum-likelihood estimate to
    first order: its variance falls as T^-3.

    Parameters
    ----------
    t_ref_s, frequency_hz, frequency_sigma_hz, phase_rad, phase_sigma_rad : sequences
        One entry per gate (all the same length, at least 1).
    contiguous : sequence of bool, optional
        contiguous[k] is False when samples were lost between gate k-1 and gate k; the
        phase cannot be followed across such a gap and the mean is used instead.
    """
    t = np.asarray(t_ref_s, dtype=float)
    f = np.asarray(frequency_hz, dtype=float)
    sf = np.asarray(frequency_sigma_hz, dtype=float)
    ph = np.asarray(phase_rad, dtype=float)
    sp = np.asarray(phase_sigma_rad, dtype=float)
    k = t.shape[0]
    if not (f.shape[0] == sf.shape[0] == ph.shape[0] == sp.shape[0] == k):
        raise ValueError("all per-gate sequences must have the same length")
    if k == 0:
        raise ValueError("need at least one gate")
    ok = np.isfinite(f) & np.isfinite(sf) & (sf > 0)
    if not np.any(ok):
        raise ValueError("no gate has a finite frequency and uncertainty")
    wf = np.where(ok, 1.0 / np.where(ok, sf, 1.0) ** 2, 0.0)
    f_mean = float(np.sum(wf * np.where(ok, f, 0.0)) / np.sum(wf))
    s_mean = float(1.0 / math.sqrt(np.sum(wf)))
    n_ok = int(ok.sum())
    if n_ok > 1:
        chi2_mean = float(np.sum(wf * (np.where(ok, f, f_mean) - f_mean) ** 2))
        birge_mean = math.sqrt(chi2_mean / (n_ok - 1))
    else:
        birge_mean = 1.0
    mean_result = GateCombination(f_mean, s_mean * max(1.0, birge_mean), "mean", birge_mean, k)
    if k == 1:
        return mean_result
    if not np.all(ok) or not np.all(np.isfinite(ph)) or not np.all(sp < 0.5):
        return mean_result
    if contiguous is not None and not all(list(contiguous)[1:]):
        return mean_result
    # Follow the phase from gate to gate as a residual against a reference frequency, so
    # the numbers stay small: over a day at 1 kHz the phase itself reaches ~5e8 rad,
    # where float64 keeps only ~1e-7 rad, more than a gate's phase uncertainty.
    f_ref = f_mean
    d = f - f_ref
    psi = np.empty(k)
    psi[0] = 0.0
    for i in range(1, k):
        step = _unwrap_step(
            (t[i - 1], f[i - 1], sf[i - 1], ph[i - 1]), (t[i], f[i], sf[i], ph[i]), f_ref
        )
        if step is None:
            return mean_result
        psi[i] = psi[i - 1] + step
    tm = float(np.mean(t))
    tau = t - tm
    wp = 1.0 / sp**2
    # Normal equations for (p, delta): phase rows [1, 2 pi tau], frequency rows [0, 1],
    # with psi = p + 2 pi delta tau and f - f_ref = delta.
    a11 = np.sum(wp)
    a12 = np.sum(wp * TWO_PI * tau)
    a22 = np.sum(wp * (TWO_PI * tau) ** 2) + np.sum(wf)
    b1 = np.sum(wp * psi)
    b2 = np.sum(wp * TWO_PI * tau * psi) + np.sum(wf * d)
    mat = np.array([[a11, a12], [a12, a22]])
    try:
        p_hat, delta = np.linalg.solve(mat, [b1, b2])
        cov = np.linalg.inv(mat)
    except np.linalg.LinAlgError:
        return mean_result
    res_p = psi - p_hat - TWO_PI * delta * tau
    res_f = d - delta
    chi2 = float(np.sum(wp * res_p**2) + np.sum(wf * res_f**2))
    dof = 2 * k - 2
    birge = math.sqrt(chi2 / dof) if dof > 0 else 1.0
    sigma = math.sqrt(cov[1, 1]) * max(1.0, birge)
    return GateCombination(float(f_ref + delta), float(sigma), "phase-coherent", float(birge), k)


class GateJoin:
    """`combine_gates` gate by gate, in constant memory: running sums instead of a table.

    ``j.add(t, f, sf, ph, sp, contiguous)`` for each gate in order, then ``j.result()``
    gives what ``combine_gates`` gives for all of them (to rounding). ``j.merge(later)``
    appends a join of the gates that followed (a stream analysed in parts), as if its
    gates had been added here. The phase is followed as in `combine_gates`; the normal
    equations are kept as moments about the first gate's time and frequency and moved
    to the record's mean time and frequency at the end (exact algebra, so long records
    keep their digits: the moments' phases stay within a few radians per hour of drift
    from the first gate's frequency).

    Also kept, for the engine's summary: the mean square amplitude (`amplitude_rms`) and
    the least-squares drift of frequency against time (`drift_hz_per_s`).
    """

    _SUMS = (
        "w", "wd", "wdd", "p", "pt", "ptt", "pq", "ptq", "pqq",
        "n1", "nt", "ntt", "nd", "ntd", "t", "aa",
    )  # fmt: skip

    def __init__(self) -> None:
        self.k = 0
        self.n_ok = 0
        self.coherent = True
        self._t0 = self._f0 = None  # reference time and frequency (first gate / first ok)
        self._first: tuple | None = None  # (t, f, sf, ph, ok, contiguous) of gate 0
        self._last: tuple | None = None  # (t, f, sf, ph) of the last gate
        self._q = 0.0  # unwrapped phase of the last gate, against f0, from gate 0
        self._s = dict.fromkeys(self._SUMS, 0.0)

    # -- gate by gate --------------------------------------------------------------------
    def add(
        self,
        t: float,
        f: float,
        sf: float,
        ph: float,
        sp: float,
        contiguous: bool = True,
        amplitude: float = 0.0,
    ) -> None:
        t, f, sf, ph, sp = float(t), float(f), float(sf), float(ph), float(sp)
        ok = math.isfinite(f) and math.isfinite(sf) and sf > 0
        s = self._s
        if self._t0 is None:
            self._t0 = t
        if ok and self._f0 is None:
            self._f0 = f
        f0 = self._f0 if self._f0 is not None else 0.0
        if ok:
            w = 1.0 / (sf * sf)
            d = f - f0
            s["w"] += w
            s["wd"] += w * d
            s["wdd"] += w * d * d
            self.n_ok += 1
            tau = t - self._t0
            s["n1"] += 1.0
            s["nt"] += tau
            s["ntt"] += tau * tau
            s["nd"] += d
            s["ntd"] += tau * d
        s["t"] += t - self._t0
        s["aa"] += float(amplitude) ** 2
        if self._first is None:
            self._first = (t, f, sf, ph, ok, bool(contiguous))
        if not (ok and math.isfinite(ph) and sp < 0.5):
            self.coherent = False
        if self.k and not contiguous:
            self.coherent = False
        if self.coherent:
            if self.k:
                step = _unwrap_step(self._last, (t, f, sf, ph), f0)
                if step is None:
                    self.coherent = False
                else:
                    self._q += step
            if self.coherent:
                wp = 1.0 / (sp * sp)
                tau, q = t - self._t0, self._q
                s["p"] += wp
                s["pt"] += wp * tau
                s["ptt"] += wp * tau * tau
                s["pq"] += wp * q
                s["ptq"] += wp * tau * q
                s["pqq"] += wp * q * q
        self._last = (t, f, sf, ph)
        self.k += 1

    def merge(self, later: GateJoin) -> None:
        """Append `later`, the join of the gates right after this one's."""
        if not later.k:
            return
        if not self.k:
            self.__dict__.update(later.__dict__, _s=dict(later._s))
            return
        a, b = self._s, later._s
        e = later._t0 - self._t0  # B's time origin in A's frame
        if self._f0 is None:
            self._f0 = later._f0
            shift = 0.0
        else:
            shift = (later._f0 - self._f0) if later._f0 is not None else 0.0
        # frequency moments: d_A = d_B + shift, tau_A = tau_B + e
        a["w"] += b["w"]
        a["wd"] += b["wd"] + shift * b["w"]
        a["wdd"] += b["wdd"] + 2.0 * shift * b["wd"] + shift * shift * b["w"]
        a["n1"] += b["n1"]
        a["nt"] += b["nt"] + e * b["n1"]
        a["ntt"] += b["ntt"] + 2.0 * e * b["nt"] + e * e * b["n1"]
        a["nd"] += b["nd"] + shift * b["n1"]
        a["ntd"] += b["ntd"] + e * b["nd"] + shift * b["nt"] + e * shift * b["n1"]
        a["t"] += b["t"] + e * later.k
        a["aa"] += b["aa"]
        self.n_ok += later.n_ok
        coherent = self.coherent and later.coherent
        if coherent:
            t, f, sf, ph, _ok, contiguous = later._first
            step = _unwrap_step(self._last, (t, f, sf, ph), self._f0) if contiguous else None
            coherent = step is not None
        if coherent:
            # phase in A's frame: q_A = beta + q_B + 2 pi shift u, u = B's own time
            beta = self._q + step
            g = TWO_PI * shift
            p, pt, ptt = b["p"], b["pt"], b["ptt"]
            pq, ptq, pqq = b["pq"], b["ptq"], b["pqq"]
            a["p"] += p
            a["pt"] += pt + e * p
            a["ptt"] += ptt + 2.0 * e * pt + e * e * p
            sum_q = beta * p + pq + g * pt  # sum wp q_A
            sum_uq = beta * pt + ptq + g * ptt  # sum wp u q_A
            a["pq"] += sum_q
            a["ptq"] += sum_uq + e * sum_q
            a["pqq"] += (
                beta * beta * p + pqq + g * g * ptt
                + 2.0 * beta * pq + 2.0 * beta * g * pt + 2.0 * g * ptq
            )  # fmt: skip
            last_u = later._last[0] - later._t0
            self._q = beta + later._q + g * last_u
        self.coherent = coherent
        self._last = later._last
        self.k += later.k

    # -- results -------------------------------------------------------------------------
    @property
    def amplitude_rms(self) -> float:
        return math.sqrt(self._s["aa"] / self.k) if self.k else math.nan

    @property
    def drift_hz_per_s(self) -> float | None:
        """Least-squares slope of the (finite) gate frequencies against time."""
        s = self._s
        n = s["n1"]
        if n < 3:
            return None
        den = n * s["ntt"] - s["nt"] ** 2
        return (n * s["ntd"] - s["nt"] * s["nd"]) / den if den > 0 else None

    def result(self) -> GateCombination:
        """The combined frequency (as `combine_gates`); ValueError without a usable gate."""
        if not self.k:
            raise ValueError("need at least one gate")
        s = self._s
        if not self.n_ok:
            raise ValueError("no gate has a finite frequency and uncertainty")
        f0 = self._f0
        dm = s["wd"] / s["w"]
        f_mean = f0 + dm
        s_mean = 1.0 / math.sqrt(s["w"])
        if self.n_ok > 1:
            chi2_mean = max(s["wdd"] - s["wd"] * dm, 0.0)
            birge_mean = math.sqrt(chi2_mean / (self.n_ok - 1))
        else:
            birge_mean = 1.0
        mean_result = GateCombination(
            f_mean, s_mean * max(1.0, birge_mean), "mean", birge_mean, self.k
        )
        if self.k == 1 or not self.coherent:
            return mean_result
        # Move the moments to the batch fit's frame: tau = tau0 - c (c: mean time from
        # gate 0), phase against f_ref = f_mean: q = q0 - 2 pi g tau0, d = d0 - g.
        c = s["t"] / self.k
        g = dm
        tg = TWO_PI * g
        p, pt, ptt, pq, ptq, pqq = (s[x] for x in ("p", "pt", "ptt", "pq", "ptq", "pqq"))
        sw, swd, swdd = s["w"], s["wd"], s["wdd"]
        s_tau = pt - c * p
        s_tau2 = ptt - 2.0 * c * pt + c * c * p
        s_q = pq - tg * pt
        s_tq = ptq - tg * ptt - c * pq + tg * c * pt
        s_qq = pqq - 2.0 * tg * ptq + tg * tg * ptt
        s_d = swd - g * sw
        s_dd = swdd - 2.0 * g * swd + g * g * sw
        a11 = p
        a12 = TWO_PI * s_tau
        a22 = TWO_PI * TWO_PI * s_tau2 + sw
        b1 = s_q
        b2 = TWO_PI * s_tq + s_d
        det = a11 * a22 - a12 * a12
        if not (det > 0 and math.isfinite(det)):
            return mean_result
        p_hat = (a22 * b1 - a12 * b2) / det
        delta = (a11 * b2 - a12 * b1) / det
        chi2_p = (
            s_qq - 2.0 * p_hat * s_q - 2.0 * TWO_PI * delta * s_tq + p_hat * p_hat * p
            + 2.0 * TWO_PI * p_hat * delta * s_tau + (TWO_PI * delta) ** 2 * s_tau2
        )  # fmt: skip
        chi2_f = s_dd - 2.0 * delta * s_d + delta * delta * sw
        chi2 = max(chi2_p + chi2_f, 0.0)
        dof = 2 * self.k - 2
        birge = math.sqrt(chi2 / dof) if dof > 0 else 1.0
        sigma = math.sqrt(a11 / det) * max(1.0, birge)
        return GateCombination(float(f_mean + delta), float(sigma), "phase-coherent", birge, self.k)


def _unwrap_step(prev: tuple, cur: tuple, f_ref: float) -> float | None:
    """Phase advance from gate `prev` to gate `cur` against f_ref (as in combine_gates),
    or None when the phase cannot be followed across them."""
    t0, f0, s0, p0 = prev
    t1, f1, s1, p1 = cur
    dt = t1 - t0
    f_mid = 0.5 * (f0 + f1)
    # the prediction error must be well inside half a cycle to trust the unwrap
    if TWO_PI * 0.5 * math.hypot(s0, s1) * dt > 0.5:
        return None
    miss = p1 - p0 - TWO_PI * f_mid * dt
    miss = (miss + math.pi) % TWO_PI - math.pi
    if abs(miss) > 0.5 * math.pi:
        return None
    return TWO_PI * (f_mid - f_ref) * dt + miss


def format_with_uncertainty(value: float, sigma: float, unit: str = "Hz") -> str:
    """Show a value with as many digits as its uncertainty supports.

    Two significant digits of the uncertainty, the value rounded to the same place:
    1234.56781 with sigma 0.0012 -> "1234.5678 ± 0.0012 Hz".
    """
    if not math.isfinite(value):
        return f"— {unit}".strip()
    if not (math.isfinite(sigma) and sigma > 0):
        return f"{value:.6g} {unit}".strip()
    exp = math.floor(math.log10(sigma)) - 1
    decimals = max(0, -exp)
    if decimals == 0:
        step = 10.0**exp
        v = round(value / step) * step
        s = round(sigma / step) * step
        return f"{v:.0f} ± {s:.0f} {unit}".strip()
    return f"{value:.{decimals}f} ± {sigma:.{decimals}f} {unit}".strip()
