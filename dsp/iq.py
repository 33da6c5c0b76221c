"""I/Q health: DC offset, gain and phase imbalance, image rejection; and their removal.

Estimated blindly from second-order statistics, which is valid when the wanted signal is
circular (its I and Q have equal power and are uncorrelated): a tone or an FM carrier
away from 0 Hz observed over many cycles, or noise-like signals. A signal parked at 0 Hz
or a real signal is not circular and gives meaningless figures.

Imbalance model (Q arm relative to I arm): I = I0 + dc_i, Q = g (sin(phi) I0 +
cos(phi) Q0) + dc_q, with I0 + j Q0 the ideal circular signal, g the gain ratio and phi
the phase error. A tone e^{j w t} then carries an image at -w with power ratio
IRR = |1 + g e^{j phi}|^2 / |1 - g e^{-j phi}|^2 = (1 + 2 g cos phi + g^2) /
(1 - 2 g cos phi + g^2).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from dsp.fm import modulation_index

__all__ = [
    "IqHealth",
    "IqStatistics",
    "image_rejection_db",
    "iq_correct",
    "iq_health",
    "modulation_index",
]


@dataclass(frozen=True)
class IqHealth:
    """Blind I/Q impairment estimate.

    Attributes
    ----------
    dc_i, dc_q : float
        Mean of I and Q (input units, e.g. full scale).
    gain_imbalance_db : float
        20 log10(g): Q-arm gain relative to the I arm.
    phase_imbalance_deg : float
        phi: departure of the Q arm from quadrature, in degrees.
    image_rejection_db : float
        Power ratio of a tone to its image at the mirror frequency (inf when ideal).
    n_samples : int
        Samples used.
    var_i, var_q, cov_iq : float
        Central second moments of the arms (E[I'^2], E[Q'^2], E[I'Q'] about the means),
        from which the other figures follow; `IqStatistics` pools them over gates.
    """

    dc_i: float
    dc_q: float
    gain_imbalance_db: float
    phase_imbalance_deg: float
    image_rejection_db: float
    n_samples: int
    var_i: float = math.nan
    var_q: float = math.nan
    cov_iq: float = math.nan


def _as_complex(z) -> np.ndarray:
    a = np.asarray(z)
    if a.ndim != 1:
        raise ValueError(f"z must be one-dimensional, got shape {a.shape}")
    if a.dtype.kind != "c":
        raise TypeError(f"z must be complex I/Q, got dtype {a.dtype}")
    return a.astype(np.complex128, copy=False)


def image_rejection_db(gain_imbalance_db: float, phase_imbalance_deg: float) -> float:
    """Image rejection ratio in dB for a gain and phase imbalance.

    Parameters
    ----------
    gain_imbalance_db : float
        20 log10 of the Q/I gain ratio.
    phase_imbalance_deg : float
        Phase error in degrees.

    Returns
    -------
    float
        10 log10((1 + 2 g cos phi + g^2) / (1 - 2 g cos phi + g^2)); inf when ideal.

    Raises
    ------
    ValueError
        If an argument is not finite.

    References
    ----------
    Standard quadrature-mixer image formula (common practice; e.g. B. Razavi, RF
    Microelectronics, 2nd ed., 4.2 [memory]).
    """
    gdb, pdeg = float(gain_imbalance_db), float(phase_imbalance_deg)
    if not (math.isfinite(gdb) and math.isfinite(pdeg)):
        raise ValueError(
            f"gain_imbalance_db={gain_imbalance_db}, phase_imbalance_deg="
            f"{phase_imbalance_deg} must be finite"
        )
    g = 10.0 ** (gdb / 20.0)
    c = math.cos(math.radians(pdeg))
    num = 1.0 + 2.0 * g * c + g * g
    den = 1.0 - 2.0 * g * c + g * g
    if den <= 0.0:
        return math.inf
    return 10.0 * math.log10(num / den)


def iq_health(z) -> IqHealth:
    """Estimate DC offsets, gain and phase imbalance and image rejection of I/Q.

    Parameters
    ----------
    z : array_like of complex
        I + jQ samples (at least 2). The wanted signal must be circular (see module
        notes): e.g. a carrier well away from 0 Hz over many of its cycles.

    Returns
    -------
    IqHealth

    Raises
    ------
    TypeError
        If z is not complex.
    ValueError
        If z has fewer than 2 samples, is not finite, or one arm carries no signal.

    References
    ----------
    Blind second-order estimation of I/Q imbalance: E[I^2], E[Q^2], E[IQ] of the
    DC-free arms (common practice; e.g. L. Anttila et al., IEEE Trans. Signal Process.
    56(8), 2008, on circularity-based compensation [memory]).
    """
    a = _as_complex(z)
    if a.size < 2:
        raise ValueError(f"z has {a.size} samples; at least 2 are needed")
    # Means and second moments from two complex reductions and two complex BLAS dot
    # products over the interleaved arms: sum z = sum I + j sum Q, sum |z|^2 = sum I^2 +
    # sum Q^2, sum z^2 = sum I^2 - sum Q^2 + 2j sum I Q. (A reduction over the columns of
    # an (N, 2) view costs twenty times as much.)
    a = np.ascontiguousarray(a)
    n = a.size
    total = complex(a.sum())
    if not (math.isfinite(total.real) and math.isfinite(total.imag)):
        raise ValueError("z must be finite (found NaN or inf)")
    dci, dcq = total.real / n, total.imag / n
    p_all = float(np.vdot(a, a).real) / n  # E[I^2] + E[Q^2]
    sq = complex(np.dot(a, a)) / n  # E[I^2] - E[Q^2] + 2j E[IQ]
    if not (math.isfinite(p_all) and math.isfinite(sq.real) and math.isfinite(sq.imag)):
        raise ValueError("z must be finite (found NaN or inf)")
    # central moments from the raw ones after removing the means' share; a second pass
    # over the DC-free arms only when the offset dwarfs the signal (cancellation)
    pi = 0.5 * (p_all + sq.real) - dci * dci
    pq = 0.5 * (p_all - sq.real) - dcq * dcq
    c = 0.5 * sq.imag - dci * dcq
    if min(pi, pq) < 1e-6 * max(dci * dci, dcq * dcq):
        i0 = a.real - dci
        q0 = a.imag - dcq
        pi = float(np.mean(i0 * i0))
        pq = float(np.mean(q0 * q0))
        c = float(np.mean(i0 * q0))
    return _health_from_moments(dci, dcq, pi, pq, c, int(a.size))


def _health_from_moments(dci, dcq, pi, pq, c, n) -> IqHealth:
    if pi <= 0.0 or pq <= 0.0:
        raise ValueError("one arm of z carries no signal (zero variance)")
    g = math.sqrt(pq / pi)
    s = max(-1.0, min(1.0, c / math.sqrt(pi * pq)))
    phi = math.asin(s)
    gdb = 20.0 * math.log10(g)
    pdeg = math.degrees(phi)
    return IqHealth(
        dc_i=dci,
        dc_q=dcq,
        gain_imbalance_db=gdb,
        phase_imbalance_deg=pdeg,
        image_rejection_db=image_rejection_db(gdb, pdeg),
        n_samples=n,
        var_i=pi,
        var_q=pq,
        cov_iq=c,
    )


class IqStatistics:
    """`iq_health` of a whole stream from the gates' figures, pooled in constant memory.

    The gates' means and central second moments are combined exactly (the pairwise
    update of Chan, Golub and LeVeque), so the result is `iq_health` of all the samples
    at once, to rounding; `merge` joins the statistics of a later part of the stream.

    References
    ----------
    T. F. Chan, G. H. Golub, R. J. LeVeque, "Updating formulae and a pairwise algorithm
    for computing sample variances", Stanford CS report STAN-CS-79-773, 1979 [memory].
    """

    def __init__(self) -> None:
        self.n = 0
        self._mean = np.zeros(2)
        self._m2 = np.zeros(3)  # sums of I'^2, Q'^2, I'Q' about the running means

    def add(self, h: IqHealth) -> None:
        """Add one gate's figures (from `iq_health`)."""
        self._combine(
            h.n_samples,
            np.array([h.dc_i, h.dc_q]),
            h.n_samples * np.array([h.var_i, h.var_q, h.cov_iq]),
        )

    def merge(self, other: IqStatistics) -> None:
        """Add the statistics of another stretch of the same stream."""
        if other.n:
            self._combine(other.n, other._mean.copy(), other._m2.copy())

    def _combine(self, nb: int, mean_b: np.ndarray, m2_b: np.ndarray) -> None:
        na = self.n
        if na == 0:
            self.n, self._mean, self._m2 = nb, mean_b, m2_b
            return
        n = na + nb
        d = mean_b - self._mean
        f = na * nb / n
        self._m2 = self._m2 + m2_b + f * np.array([d[0] * d[0], d[1] * d[1], d[0] * d[1]])
        self._mean = self._mean + d * (nb / n)
        self.n = n

    def result(self) -> IqHealth:
        """The pooled figures.

        Raises
        ------
        ValueError
            Without samples, or when an arm carries no signal.
        """
        if not self.n:
            raise ValueError("no gates (0 samples)")
        pi, pq, c = (float(v) / self.n for v in self._m2)
        return _health_from_moments(float(self._mean[0]), float(self._mean[1]), pi, pq, c, self.n)


def iq_correct(z, health: IqHealth) -> np.ndarray:
    """Remove DC offsets, gain and phase imbalance estimated by `iq_health`.

    Parameters
    ----------
    z : array_like of complex
        I + jQ samples (any length, including 0).
    health : IqHealth
        The estimate to undo (usually from a previous stretch of the same stream).

    Returns
    -------
    numpy.ndarray
        Corrected complex samples: I - dc_i + j (Q - dc_q - g sin(phi) I') / (g cos(phi)).

    Raises
    ------
    TypeError
        If z is not complex or health is not an IqHealth.
    ValueError
        If the phase imbalance is +/-90 degrees (no quadrature information left).
    """
    if not isinstance(health, IqHealth):
        raise TypeError(f"health must be an IqHealth, got {type(health).__name__}")
    a = _as_complex(z)
    g = 10.0 ** (health.gain_imbalance_db / 20.0)
    phi = math.radians(health.phase_imbalance_deg)
    cphi = math.cos(phi)
    if abs(cphi) < 1e-9:
        raise ValueError(
            f"health.phase_imbalance_deg={health.phase_imbalance_deg} leaves no quadrature"
        )
    i = a.real - health.dc_i
    q = a.imag - health.dc_q
    q0 = (q / g - math.sin(phi) * i) / cphi
    return i + 1j * q0
