"""Frequency stability of a run of counter readings: drift, warm-up and the Allan family.

The readings are per-gate mean frequencies over contiguous gates of length tau0 (the gate
time): the readings of an averaging (Pi-type) counter. Everything here works on plain
arrays of reading times and frequencies so that the command line and a live window can
call the same functions on a growing list of readings; each call is O(n) in the number of
readings (a day at 10 readings/s takes about a second).

Gaps (a reading interval much longer than tau0, or a reading without a frequency) are
found and reported, never bridged by interpolation: the Allan family is computed on each
contiguous segment and the segments are pooled term by term.

References
----------
.. [1] W. J. Riley, "Handbook of Frequency Stability Analysis", NIST Special
   Publication 1065 (2008): Allan, overlapping Allan, modified Allan and time deviation
   (sections 5.2.2-5.2.6), confidence intervals (5.3), noise types and slopes (5.2.1,
   Table 5), drift and its Allan signature D*tau/sqrt(2) (5.2.1, 6.4).
.. [2] IEEE Std 1139-2008, Definitions of physical quantities for fundamental frequency
   and time metrology.
.. [3] E. Rubiola, "On the measurement of frequency and of its sample variance with
   high-resolution counters", Rev. Sci. Instrum. 76, 054703 (2005): Pi- and Lambda-type
   counters; overlapped averaging turns the Allan variance into the modified one.
.. [4] C. A. Greenhall and W. J. Riley, "Uncertainty of stability variances based on
   finite differences", 35th PTTI meeting (2003): equivalent degrees of freedom, as
   implemented in allantools.edf_greenhall.
"""

from __future__ import annotations

import contextlib
import io
import itertools
import math
import warnings as _warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np

__all__ = [
    "INTERPRETATION",
    "NOISE_SLOPES",
    "AllanCurve",
    "DriftFit",
    "NoiseHint",
    "RateCurve",
    "ReadingCheck",
    "StabilityResult",
    "StabilityTracker",
    "Warmup",
    "allan_family",
    "analyze_stability",
    "check_readings",
    "drift_rate_curve",
    "fit_drift",
    "fractional_frequency",
    "lag1_noise_alpha",
    "noise_hint",
    "octave_factors",
    "warmup_time",
]

#: Slope mu of sigma_y(tau) ~ tau^mu per power-law noise type (NIST SP 1065, Table 5 [1]);
#: the second number is the slope of MDEV, which separates white from flicker PM.
NOISE_SLOPES: dict[str, tuple[float, float]] = {
    "white PM": (-1.0, -1.5),
    "flicker PM": (-1.0, -1.0),
    "white FM": (-0.5, -0.5),
    "flicker FM": (0.0, 0.0),
    "random-walk FM": (0.5, 0.5),
    "linear drift": (1.0, 1.0),
}

#: What the figures mean and which one to quote. Shown by the command line and the README.
INTERPRETATION = (
    "Each reading is one gate's frequency, the gates of length tau0 (the gate time) "
    "following one another without dead time: read as mean frequencies over their gates "
    "(an averaging, Pi-type counter) they are the quantity the Allan variance is defined "
    "on, so OADEV at tau = m*tau0 is the standard estimator (NIST SP 1065, IEEE Std 1139). "
    "Quote OADEV at a stated tau, with its confidence interval and the gate time: it is "
    "the figure data sheets and other counters give, and the overlapping estimate uses "
    "every reading at every tau, so its interval is narrower than the plain ADEV's. Where "
    "FM noise or drift dominates (the OADEV slope is -1/2 or above) the way a counter "
    "weights the inside of a gate matters little, and less the longer the tau. Where "
    "phase noise dominates (slope near -1, usually the "
    "shortest taus) it does: ADEV at tau0 from averaged readings is not the ADEV from "
    "instantaneous phase samples tau0 apart. A counter that forms each gate's frequency "
    "from all the samples in the gate (swingmeter fits the whole gate) averages the phase "
    "noise inside it, so its short-tau ADEV is lower than one from phase samples, which "
    "keep the white PM of the whole input bandwidth; overlapped averaging moves the Allan "
    "variance towards the modified one (Rubiola 2005). So compare short-tau figures only "
    "at the same gate time and counter type, or quote a tau where the slope shows FM "
    "noise. Both white and flicker PM give an ADEV slope near -1; MDEV separates them "
    "(-3/2 versus -1), and TDEV = tau*MDEV/sqrt(3) is the time stability in seconds. Every "
    "reading also carries the sound card's clock: measure that floor on a reference tone "
    "(--reference) and trust only figures well above it."
)

_CI_ONE_SIGMA = math.erf(1.0 / math.sqrt(2.0))


@dataclass(frozen=True)
class ReadingCheck:
    """Regularity of a run of readings.

    Attributes
    ----------
    count : int
        Readings given (with or without a frequency).
    usable_count : int
        Readings with a finite frequency.
    tau0_s : float
        Reading interval: the given gate time or the median interval between readings.
    missing_count : int
        Readings given without a finite frequency (treated as gaps).
    gap_count : int
        Breaks in the run: intervals longer than 1.5*tau0 and missing readings.
    skipped_estimate : int
        Readings that would have filled the gaps at one per tau0.
    gaps_s : tuple of (float, float)
        (last time before, first time after) of each break, first 50.
    segments : tuple of (int, int)
        Index ranges [start, stop) of contiguous usable readings, into the usable readings.
    jitter_fraction : float
        Largest |interval - tau0| / tau0 inside the segments.
    warnings : tuple of str
        What is doubtful about the run, in words.
    """

    count: int
    usable_count: int
    tau0_s: float
    missing_count: int
    gap_count: int
    skipped_estimate: int
    gaps_s: tuple[tuple[float, float], ...]
    segments: tuple[tuple[int, int], ...]
    jitter_fraction: float
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class DriftFit:
    """Linear and quadratic fits of frequency against time.

    Attributes
    ----------
    nominal_hz : float
        Frequency the ppm figures refer to.
    duration_s : float
        Time from the first to the last reading.
    hz_per_s : float
        Slope of the linear fit.
    ppm_per_min : float
        The same slope in parts per million of `nominal_hz` per minute.
    linear_mid_hz : float
        Linear fit's value at mid-record.
    linear_residual_rms_hz : float
        RMS of readings minus the linear fit.
    quadratic_hz_per_s2 : float
        Second-order coefficient c of f = a + b*t + c*t^2 (so df/dt changes by 2c per s).
    quadratic_start_hz_per_s, quadratic_end_hz_per_s : float
        Drift rate of the quadratic fit at the first and the last reading.
    quadratic_residual_rms_hz : float
        RMS of readings minus the quadratic fit.
    linear_change_hz : float
        hz_per_s * duration_s: the change the linear drift makes over the record.
    excursion_hz : float
        Largest minus smallest reading (total excursion).
    excursion_ppm : float
        The same in ppm of `nominal_hz`.
    """

    nominal_hz: float
    duration_s: float
    hz_per_s: float
    ppm_per_min: float
    linear_mid_hz: float
    linear_residual_rms_hz: float
    quadratic_hz_per_s2: float
    quadratic_start_hz_per_s: float
    quadratic_end_hz_per_s: float
    quadratic_residual_rms_hz: float
    linear_change_hz: float
    excursion_hz: float
    excursion_ppm: float


@dataclass(frozen=True)
class RateCurve:
    """Local drift rate from least-squares lines over a sliding window.

    Attributes
    ----------
    t_s : numpy.ndarray
        Window centres.
    hz_per_s : numpy.ndarray
        Local slope; NaN where the window holds too few readings.
    ppm_per_min : numpy.ndarray
        The same in ppm of the nominal frequency per minute.
    window_s : float
        Window length.
    """

    t_s: np.ndarray
    hz_per_s: np.ndarray
    ppm_per_min: np.ndarray
    window_s: float


@dataclass(frozen=True)
class Warmup:
    """When the drift rate first stays below a threshold.

    Attributes
    ----------
    warmup_s : float or None
        Time after the first reading from which the local drift rate stays below the
        threshold to the end of the record; None if it never does.
    settled_at_t_s : float or None
        The same as a reading time (`t_s` scale).
    threshold_ppm_per_min : float
        The threshold.
    window_s : float
        Length of the window the local rate is fitted over.
    final_ppm_per_min : float
        Local rate in the last full window (NaN if none).
    """

    warmup_s: float | None
    settled_at_t_s: float | None
    threshold_ppm_per_min: float
    window_s: float
    final_ppm_per_min: float


@dataclass(frozen=True)
class AllanCurve:
    """One deviation of the Allan family against tau, with confidence intervals.

    Attributes
    ----------
    kind : {"adev", "oadev", "mdev", "tdev"}
        Which deviation. `tdev` values are in seconds, the others are fractional.
    taus_s : tuple of float
        Averaging times m*tau0.
    values, lower, upper : tuple of float
        The deviation and its confidence interval (chi-squared with Greenhall's
        equivalent degrees of freedom [4]).
    edf : tuple of float
        Equivalent degrees of freedom per tau (summed over segments).
    n_terms : tuple of int
        Number of squared differences per tau (summed over segments).
    alpha : tuple of int
        Power-law exponent of the noise assumed for the interval at each tau.
    confidence : float
        Two-sided probability of the interval (0.683 = one sigma).
    """

    kind: str
    taus_s: tuple[float, ...]
    values: tuple[float, ...]
    lower: tuple[float, ...]
    upper: tuple[float, ...]
    edf: tuple[float, ...]
    n_terms: tuple[int, ...]
    alpha: tuple[int, ...]
    confidence: float


@dataclass(frozen=True)
class NoiseHint:
    """The noise type the slopes point to (NIST SP 1065, Table 5 [1]).

    Attributes
    ----------
    noise_type : str
        One of the keys of `NOISE_SLOPES`, or "unknown" if there are too few taus.
    adev_slope, mdev_slope : float
        Least-squares slopes of log OADEV and log MDEV against log tau (NaN if unknown).
    explanation : str
        The rule that gave the answer, in words.
    per_tau : tuple of (float, str)
        Local noise type between each tau and the next octave (from the local slopes).
    """

    noise_type: str
    adev_slope: float
    mdev_slope: float
    explanation: str
    per_tau: tuple[tuple[float, str], ...]


@dataclass(frozen=True)
class StabilityResult:
    """Everything `analyze_stability` computes.

    Attributes
    ----------
    check : ReadingCheck
    drift : DriftFit
        Fitted over the whole record.
    span_drift : DriftFit
        Fitted over the readings the Allan family uses (`span_s`).
    warmup : Warmup
    span_s : (float, float)
        Reading times the Allan family was computed over.
    nominal_hz : float
    adev : AllanCurve
        Overlapping Allan deviation (the one to quote).
    adev_nonoverlapping : AllanCurve
        Plain (non-overlapping) Allan deviation.
    mdev, tdev : AllanCurve
    noise : NoiseHint
    warnings : tuple of str
    """

    check: ReadingCheck
    drift: DriftFit
    span_drift: DriftFit
    warmup: Warmup
    span_s: tuple[float, float]
    nominal_hz: float
    adev: AllanCurve
    adev_nonoverlapping: AllanCurve
    mdev: AllanCurve
    tdev: AllanCurve
    noise: NoiseHint
    warnings: tuple[str, ...]


# ---------------------------------------------------------------------------------------
# input normalisation


def _as_readings(t_s, frequency_hz) -> tuple[np.ndarray, np.ndarray]:
    try:
        t = np.asarray(t_s, dtype=float).ravel()
        f = np.asarray(frequency_hz, dtype=float).ravel()
    except (TypeError, ValueError) as exc:
        raise TypeError(f"t_s and frequency_hz must be sequences of numbers: {exc}") from None
    if t.shape != f.shape:
        raise ValueError(
            f"t_s and frequency_hz must have the same length, got {t.size} and {f.size}"
        )
    if not np.all(np.isfinite(t)):
        raise ValueError("t_s must be finite (a reading without a time cannot be placed)")
    if t.size > 1 and np.any(np.diff(t) <= 0):
        raise ValueError("t_s must be strictly increasing (sort the readings, drop repeats)")
    return t, f


def _usable(t: np.ndarray, f: np.ndarray, need: int, what: str) -> tuple[np.ndarray, np.ndarray]:
    ok = np.isfinite(f)
    if int(ok.sum()) < need:
        raise ValueError(f"{what} needs at least {need} readings with a frequency, got {ok.sum()}")
    return t[ok], f[ok]


def _check_positive(name: str, value: float | None) -> None:
    if value is not None and not (math.isfinite(value) and value > 0):
        raise ValueError(f"{name}={value} must be a positive finite number")


def fractional_frequency(frequency_hz, nominal_hz: float) -> np.ndarray:
    """Fractional frequency y = f / nominal - 1.

    Parameters
    ----------
    frequency_hz : array_like
        Readings, Hz.
    nominal_hz : float
        Nominal frequency, Hz.

    Returns
    -------
    numpy.ndarray
        y, dimensionless.

    Raises
    ------
    ValueError
        If `nominal_hz` is not positive.
    """
    _check_positive("nominal_hz", nominal_hz)
    return np.asarray(frequency_hz, dtype=float) / nominal_hz - 1.0


# ---------------------------------------------------------------------------------------
# regularity


def check_readings(
    t_s, frequency_hz, *, tau0_s: float | None = None, breaks_before=None
) -> ReadingCheck:
    """Find the reading interval, gaps, missing readings and irregular spacing.

    Parameters
    ----------
    t_s : array_like
        Reading times, s, strictly increasing.
    frequency_hz : array_like
        Readings, Hz; NaN marks a reading without a frequency (a gap).
    tau0_s : float, optional
        Gate time. Default: the median interval between consecutive readings.
    breaks_before : array_like of bool, optional
        True where a reading is known not to follow the previous one without a gap (for
        example lost input reported by the sound card), whatever the times say.

    Returns
    -------
    ReadingCheck

    Raises
    ------
    ValueError
        Mismatched lengths, non-increasing or non-finite times, fewer than two usable
        readings, or a non-positive `tau0_s`.
    """
    t, f = _as_readings(t_s, frequency_hz)
    _check_positive("tau0_s", tau0_s)
    ok = np.isfinite(f)
    tu = t[ok]
    if tu.size < 2:
        raise ValueError(f"need at least 2 readings with a frequency, got {tu.size}")
    if tau0_s is None:
        # Reading times like k/10 carry rounding in their differences; 9 significant
        # digits give back the gate time the readings were taken at.
        tau0_s = float(f"{float(np.median(np.diff(t))):.9g}")
    dt = np.diff(tu)
    # A break is either a long interval or a missing reading between two usable ones.
    missing_before = np.cumsum(~ok)[ok]
    hole = np.diff(missing_before) > 0
    long = dt > 1.5 * tau0_s
    brk = long | hole
    if breaks_before is not None:
        bb = np.asarray(breaks_before, dtype=bool).ravel()
        if bb.shape != t.shape:
            raise ValueError(f"breaks_before has {bb.size} entries for {t.size} readings")
        brk = brk | bb[ok][1:]
    starts = np.concatenate(([0], np.nonzero(brk)[0] + 1))
    stops = np.concatenate((np.nonzero(brk)[0] + 1, [tu.size]))
    segments = tuple((int(a), int(b)) for a, b in zip(starts, stops, strict=True))
    inside = dt[~brk]
    jitter = float(np.max(np.abs(inside - tau0_s)) / tau0_s) if inside.size else 0.0
    skipped = int(np.sum(np.maximum(np.rint(dt[brk] / tau0_s) - 1, 0)))
    gaps = tuple((float(tu[i]), float(tu[i + 1])) for i in np.nonzero(brk)[0][:50])
    missing = int((~ok).sum())
    notes = []
    if missing:
        notes.append(f"{missing} readings have no frequency; they are treated as gaps")
    if brk.any():
        notes.append(
            f"{int(brk.sum())} gaps in the readings (about {skipped} readings missing at "
            f"tau0={tau0_s:g} s); the Allan family is pooled over {len(segments)} contiguous "
            "segments, nothing is interpolated"
        )
    if jitter > 0.01:
        notes.append(
            f"irregular reading intervals: up to {100 * jitter:.1f}% away from "
            f"tau0={tau0_s:g} s; readings are treated as equally spaced within a segment"
        )
    return ReadingCheck(
        count=int(t.size),
        usable_count=int(tu.size),
        tau0_s=float(tau0_s),
        missing_count=missing,
        gap_count=int(brk.sum()),
        skipped_estimate=skipped,
        gaps_s=gaps,
        segments=segments,
        jitter_fraction=jitter,
        warnings=tuple(notes),
    )


# ---------------------------------------------------------------------------------------
# drift


def fit_drift(t_s, frequency_hz, *, nominal_hz: float | None = None) -> DriftFit:
    """Fit f(t) with a straight line and with a parabola (ordinary least squares).

    Parameters
    ----------
    t_s : array_like
        Reading times, s, strictly increasing.
    frequency_hz : array_like
        Readings, Hz; NaN readings are left out.
    nominal_hz : float, optional
        Frequency for the ppm figures. Default: the median reading.

    Returns
    -------
    DriftFit

    Raises
    ------
    ValueError
        Fewer than three usable readings, or a non-positive `nominal_hz`.

    References
    ----------
    NIST SP 1065 [1], section 6.4 (frequency drift by a linear fit to frequency data).
    """
    t, f = _usable(*_as_readings(t_s, frequency_hz), 3, "fit_drift")
    if nominal_hz is None:
        nominal_hz = float(np.median(f))
    _check_positive("nominal_hz", nominal_hz)
    # Centre and scale time and frequency so that a day of readings near 100 MHz keeps
    # its digits through the normal equations.
    tm = 0.5 * (t[0] + t[-1])
    half = max(0.5 * (t[-1] - t[0]), 1e-300)
    x = (t - tm) / half
    fr = float(np.median(f))
    y = f - fr
    c1 = np.polynomial.polynomial.polyfit(x, y, 1)
    c2 = np.polynomial.polynomial.polyfit(x, y, 2)
    r1 = y - np.polynomial.polynomial.polyval(x, c1)
    r2 = y - np.polynomial.polynomial.polyval(x, c2)
    slope = float(c1[1] / half)
    a2 = float(c2[2] / half**2)
    b_mid = float(c2[1] / half)
    duration = float(t[-1] - t[0])
    exc = float(np.max(f) - np.min(f))
    return DriftFit(
        nominal_hz=float(nominal_hz),
        duration_s=duration,
        hz_per_s=slope,
        ppm_per_min=slope * 60.0 / nominal_hz * 1e6,
        linear_mid_hz=float(fr + c1[0]),
        linear_residual_rms_hz=float(np.sqrt(np.mean(r1**2))),
        quadratic_hz_per_s2=a2,
        quadratic_start_hz_per_s=b_mid - 2 * a2 * 0.5 * duration,
        quadratic_end_hz_per_s=b_mid + 2 * a2 * 0.5 * duration,
        quadratic_residual_rms_hz=float(np.sqrt(np.mean(r2**2))),
        linear_change_hz=slope * duration,
        excursion_hz=exc,
        excursion_ppm=exc / nominal_hz * 1e6,
    )


_RATE_BINS = 8  # sub-bins per window: the rate curve is stepped by window/8


def drift_rate_curve(
    t_s, frequency_hz, *, window_s: float, nominal_hz: float | None = None
) -> RateCurve:
    """Local drift rate: least-squares slope over a window slid in steps of window/8.

    Readings are summed into bins of window/8 (sums taken about each bin's centre, so no
    digits are lost on long records); each window's slope is then assembled from eight
    bins, exactly as a direct fit of the readings in that window. O(n).

    Parameters
    ----------
    t_s : array_like
        Reading times, s, strictly increasing.
    frequency_hz : array_like
        Readings, Hz; NaN readings are left out.
    window_s : float
        Window length, s.
    nominal_hz : float, optional
        Frequency for the ppm figures. Default: the median reading.

    Returns
    -------
    RateCurve
        NaN where a window's first or last quarter holds no reading, or it holds fewer
        than three readings: a slope across a gap is not estimated.

    Raises
    ------
    ValueError
        Non-positive `window_s` or `nominal_hz`, fewer than three usable readings.
    """
    _check_positive("window_s", window_s)
    t, f = _usable(*_as_readings(t_s, frequency_hz), 3, "drift_rate_curve")
    if nominal_hz is None:
        nominal_hz = float(np.median(f))
    _check_positive("nominal_hz", nominal_hz)
    m = _RATE_BINS
    b = window_s / m
    t_first = t[0]
    k = np.floor((t - t_first) / b).astype(np.int64)
    nb = int(k[-1]) + 1
    c = t_first + (k + 0.5) * b
    x = t - c
    y = f - float(np.median(f))
    n_k = np.bincount(k, minlength=nb).astype(float)
    sx = np.bincount(k, x, nb)
    sxx = np.bincount(k, x * x, nb)
    sy = np.bincount(k, y, nb)
    sxy = np.bincount(k, x * y, nb)
    if nb < m:
        empty = np.empty(0)
        return RateCurve(empty, empty, empty, float(window_s))
    from numpy.lib.stride_tricks import sliding_window_view as _win

    d = (np.arange(m) - m / 2 + 0.5) * b  # bin centre minus window centre
    wn, wsx, wsxx, wsy, wsxy = (_win(a, m) for a in (n_k, sx, sxx, sy, sxy))
    n = wn.sum(axis=1)
    sx_w = (wsx + wn * d).sum(axis=1)
    sxx_w = (wsxx + 2 * d * wsx + wn * d * d).sum(axis=1)
    sy_w = wsy.sum(axis=1)
    sxy_w = (wsxy + d * wsy).sum(axis=1)
    den = n * sxx_w - sx_w**2
    q = m // 4
    good = (n >= 3) & (wn[:, :q].sum(axis=1) > 0) & (wn[:, -q:].sum(axis=1) > 0) & (den > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = np.where(good, (n * sxy_w - sx_w * sy_w) / np.where(good, den, 1.0), np.nan)
    # A least-squares slope belongs to the mean time of the readings it was fitted on,
    # which is the window centre only for symmetric sampling.
    with np.errstate(invalid="ignore", divide="ignore"):
        centres = t_first + (np.arange(slope.size) + m / 2) * b + np.where(good, sx_w / n, 0.0)
    return RateCurve(
        t_s=centres,
        hz_per_s=slope,
        ppm_per_min=slope * 60.0 / nominal_hz * 1e6,
        window_s=float(window_s),
    )


def warmup_time(
    t_s,
    frequency_hz,
    *,
    threshold_ppm_per_min: float = 1.0,
    window_s: float = 60.0,
    nominal_hz: float | None = None,
) -> Warmup:
    """Time after which the local drift rate stays below a threshold to the end.

    The local rate is the least-squares slope over a sliding window (`drift_rate_curve`).
    The answer is the crossing, interpolated linearly in log|rate| between the last window
    above the threshold and the next one, of the last excursion above it.

    Parameters
    ----------
    t_s : array_like
        Reading times, s, strictly increasing.
    frequency_hz : array_like
        Readings, Hz.
    threshold_ppm_per_min : float, default 1.0
        Settling threshold on |drift rate|, ppm of `nominal_hz` per minute.
    window_s : float, default 60.0
        Window of the local fit. A longer window averages more noise but responds later;
        for f = f_inf + A*exp(-t/T) the fitted slope is the true one times
        3*(a*cosh(a) - sinh(a))/a**3, a = window_s/(2*T).
    nominal_hz : float, optional
        Default: the median reading.

    Returns
    -------
    Warmup

    Raises
    ------
    ValueError
        Non-positive threshold, window or nominal frequency; fewer than three readings.
    """
    _check_positive("threshold_ppm_per_min", threshold_ppm_per_min)
    curve = drift_rate_curve(t_s, frequency_hz, window_s=window_s, nominal_hz=nominal_hz)
    t = np.asarray(t_s, dtype=float)
    valid = np.isfinite(curve.ppm_per_min)
    tc = curve.t_s[valid]
    r = np.abs(curve.ppm_per_min[valid])
    if r.size == 0:
        return Warmup(None, None, float(threshold_ppm_per_min), float(window_s), math.nan)
    above = np.nonzero(r >= threshold_ppm_per_min)[0]
    if above.size == 0:
        settled = float(t[0])
    elif above[-1] == r.size - 1:
        return Warmup(None, None, float(threshold_ppm_per_min), float(window_s), float(r[-1]))
    else:
        i = int(above[-1])
        r0, r1 = r[i], r[i + 1]
        # Interpolate in log|rate|: exact for an exponential settle, the common shape.
        frac = (
            math.log(r0 / threshold_ppm_per_min) / math.log(r0 / r1) if r1 > 0 and r0 > r1 else 1.0
        )
        settled = float(tc[i] + frac * (tc[i + 1] - tc[i]))
    return Warmup(
        warmup_s=settled - float(t[0]),
        settled_at_t_s=settled,
        threshold_ppm_per_min=float(threshold_ppm_per_min),
        window_s=float(window_s),
        final_ppm_per_min=float(r[-1]),
    )


# ---------------------------------------------------------------------------------------
# the Allan family


def octave_factors(n_readings: int, *, kind: str = "oadev") -> np.ndarray:
    """Averaging factors m = 1, 2, 4, ... that give `kind` at least two terms.

    Parameters
    ----------
    n_readings : int
        Number of contiguous frequency readings N.
    kind : {"adev", "oadev", "mdev", "tdev"}
        OADEV has N-2m+1 terms, so needs 2m+1 <= N; ADEV (floor(N/m)-1 terms), MDEV and
        TDEV (N-3m+2 terms) need 3m <= N.

    Returns
    -------
    numpy.ndarray of int
    """
    top = (n_readings - 1) / 2 if kind == "oadev" else n_readings / 3
    if top < 1:
        return np.zeros(0, dtype=np.int64)
    return 2 ** np.arange(int(math.floor(math.log2(top))) + 1, dtype=np.int64)


_KINDS = ("adev", "oadev", "mdev")


def lag1_noise_alpha(y, m: int) -> int:
    """Power-law noise exponent alpha (S_y ~ f^alpha) by lag-1 autocorrelation.

    The readings are averaged in groups of `m`, a straight line is removed, and the
    series is differenced until its lag-1 autocorrelation r1 gives delta = r1/(1+r1) below
    0.25 (at most twice); alpha = -round(2*delta) - 2*d.

    Parameters
    ----------
    y : array_like
        Fractional frequency readings, contiguous.
    m : int
        Averaging factor.

    Returns
    -------
    int
        alpha: 2 white PM, 1 flicker PM, 0 white FM, -1 flicker FM, -2 random-walk FM.

    Raises
    ------
    ValueError
        If fewer than 30 averages remain, or `m` < 1.

    References
    ----------
    W. J. Riley and C. A. Greenhall, "Power law noise identification using the lag 1
    autocorrelation", 18th European Frequency and Time Forum (2004), eqs. (2)-(4); NIST
    SP 1065 [1] section 5.6. Same algorithm as allantools.autocorr_noise_id (frequency
    data), vectorised.
    """
    if m < 1:
        raise ValueError(f"m={m} must be >= 1")
    yv = np.asarray(y, dtype=float).ravel()
    k = yv.size // m
    if k < 30:
        raise ValueError(f"lag-1 noise identification needs 30 averages, got {k} (m={m})")
    z = yv[: k * m].reshape(k, m).mean(axis=1)
    idx = np.arange(k, dtype=float)
    z = z - np.polyval(np.polyfit(idx, z, 1), idx)
    d = 0
    while True:
        z0 = z - z.mean()
        den = float(np.dot(z0, z0))
        r1 = float(np.dot(z0[:-1], z0[1:]) / den) if den > 0 else 0.0
        delta = r1 / (1.0 + r1)
        if delta < 0.25 or d >= 2:
            return int(-round(2 * delta) - 2 * d)
        z = np.diff(z)
        d += 1


def _noise_alphas(y: np.ndarray, ms: Sequence[int]) -> dict[int, int]:
    """Alpha per averaging factor, clipped to [-2, 2]; carried on where data run short."""
    out: dict[int, int] = {}
    last = 0  # white FM until something is identified
    for m in ms:
        if y.size // m >= 100:
            last = lag1_noise_alpha(y, int(m))
        out[int(m)] = int(min(2, max(-2, last)))
    return out


def _edf(alpha: int, m: int, n_phase: int, kind: str) -> float:
    import allantools

    try:
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            e = allantools.edf_greenhall(
                alpha=int(alpha),
                d=2,
                m=int(m),
                N=int(n_phase),
                overlapping=kind != "adev",
                modified=kind == "mdev",
            )
        e = float(e)
    except (AssertionError, ValueError, ZeroDivisionError, OverflowError, NotImplementedError):
        e = math.nan
    if not (math.isfinite(e) and e > 0):
        e = float(allantools.edf_simple(int(n_phase), int(m), int(alpha)))
    return e


def allan_family(
    y,
    tau0_s: float,
    *,
    segments: Sequence[tuple[int, int]] | None = None,
    factors: Sequence[int] | None = None,
    confidence: float = _CI_ONE_SIGMA,
) -> dict[str, AllanCurve]:
    """ADEV, OADEV, MDEV and TDEV of fractional-frequency readings, with intervals.

    Each contiguous segment goes through allantools (frequency data, rate 1/tau0); the
    variances are pooled over segments weighted by their number of terms, and the
    equivalent degrees of freedom are added. Nothing is interpolated across gaps.

    Parameters
    ----------
    y : array_like
        Fractional frequency readings (y = f/nominal - 1), one per gate.
    tau0_s : float
        Gate time (reading interval), s.
    segments : sequence of (int, int), optional
        Index ranges [start, stop) of contiguous readings. Default: all one segment.
    factors : sequence of int, optional
        Averaging factors m (tau = m*tau0). Default: octaves, 1, 2, 4, ...
    confidence : float, default 0.683
        Two-sided probability of the confidence intervals.

    Returns
    -------
    dict
        {"adev", "oadev", "mdev", "tdev"} -> AllanCurve. TDEV is tau*MDEV/sqrt(3), s.

    Raises
    ------
    ValueError
        Non-positive `tau0_s`, `confidence` outside (0, 1), bad factors or segments,
        non-finite readings, or no tau computable.

    References
    ----------
    NIST SP 1065 [1], eqs. (6), (11), (14), (15); confidence intervals eq. (45) with the
    Greenhall-Riley equivalent degrees of freedom [4].
    """
    import allantools

    _check_positive("tau0_s", tau0_s)
    if not 0 < confidence < 1:
        raise ValueError(f"confidence={confidence} must be in (0, 1)")
    yv = np.asarray(y, dtype=float).ravel()
    if not np.all(np.isfinite(yv)):
        raise ValueError("y must be finite: split the readings at missing values (segments)")
    segs = [(0, yv.size)] if segments is None else [(int(a), int(b)) for a, b in segments]
    for a, b in segs:
        if not 0 <= a < b <= yv.size:
            raise ValueError(f"segment ({a}, {b}) is outside the {yv.size} readings")
    longest = max(b - a for a, b in segs)
    if factors is None:
        factors = octave_factors(longest, kind="oadev")
    ms = np.unique(np.asarray(factors, dtype=np.int64))
    if ms.size == 0 or ms[0] < 1:
        raise ValueError(f"factors={list(factors)} must be positive integers")
    fns = {"adev": allantools.adev, "oadev": allantools.oadev, "mdev": allantools.mdev}
    rate = 1.0 / tau0_s
    acc: dict[str, dict[int, list]] = {k: {} for k in _KINDS}
    for a, b in segs:
        seg = yv[a:b]
        n_seg = seg.size
        # Taus with at least two terms in this segment (allantools drops single-term
        # estimates, and fails when nothing is left): OADEV N-2m+1, ADEV floor(N/m)-1,
        # MDEV N-3m+2 terms.
        usable = {
            "oadev": ms[2 * ms <= n_seg - 1],
            "adev": ms[3 * ms <= n_seg],
            "mdev": ms[3 * ms <= n_seg],
        }
        for kind in _KINDS:
            use = usable[kind]
            if use.size == 0:
                continue
            # allantools prints notes on stdout; dsp prints nothing
            with _warnings.catch_warnings(), contextlib.redirect_stdout(io.StringIO()):
                _warnings.simplefilter("ignore")
                try:
                    taus, devs, _err, ns = fns[kind](
                        seg, rate=rate, data_type="freq", taus=use.astype(float) * tau0_s
                    )
                except UserWarning:  # allantools' "nothing remains"
                    continue
            for tau, dev, n in zip(taus, devs, ns, strict=True):
                if n <= 0 or not math.isfinite(dev):
                    continue
                m = int(round(tau / tau0_s))
                slot = acc[kind].setdefault(m, [0.0, 0, []])
                slot[0] += float(dev) ** 2 * int(n)
                slot[1] += int(n)
                slot[2].append(seg.size + 1)  # phase points of this segment
    if not acc["oadev"]:
        raise ValueError(
            f"no tau can be computed from {yv.size} readings in {len(segs)} segment(s) "
            "(need at least 3 contiguous readings)"
        )
    pooled = {}
    for kind in _KINDS:
        m_sorted = sorted(acc[kind])
        pooled[kind] = (
            np.array(m_sorted, dtype=np.int64),
            np.array([math.sqrt(acc[kind][m][0] / acc[kind][m][1]) for m in m_sorted]),
        )
    # Noise exponents for the intervals: lag-1 autocorrelation identification (NIST SP
    # 1065 section 5.6, Riley-Greenhall) on the longest segment where it holds at least 100
    # averages; beyond that the last identified type is carried on, as SP 1065 advises.
    a_long, b_long = max(segs, key=lambda s: s[1] - s[0])
    alpha_by_m = _noise_alphas(yv[a_long:b_long], sorted(set(acc["oadev"]) | set(acc["mdev"])))

    def alpha_at(m: int) -> int:
        return alpha_by_m.get(m, 0)

    out: dict[str, AllanCurve] = {}
    for kind in _KINDS:
        m_arr, vals = pooled[kind]
        alphas = [alpha_at(int(m)) for m in m_arr]
        edfs = [
            sum(_edf(al, int(m), n_ph, kind) for n_ph in acc[kind][int(m)][2])
            for m, al in zip(m_arr, alphas, strict=True)
        ]
        lo, hi = zip(
            *(
                allantools.confidence_interval(v, e, ci=confidence)
                for v, e in zip(vals, edfs, strict=True)
            ),
            strict=True,
        )
        out[kind] = AllanCurve(
            kind=kind,
            taus_s=tuple(float(m * tau0_s) for m in m_arr),
            values=tuple(float(v) for v in vals),
            lower=tuple(float(v) for v in lo),
            upper=tuple(float(v) for v in hi),
            edf=tuple(float(e) for e in edfs),
            n_terms=tuple(int(acc[kind][int(m)][1]) for m in m_arr),
            alpha=tuple(alphas),
            confidence=float(confidence),
        )
    md = out["mdev"]
    scale = [tau / math.sqrt(3.0) for tau in md.taus_s]
    out["tdev"] = AllanCurve(
        kind="tdev",
        taus_s=md.taus_s,
        values=tuple(s * v for s, v in zip(scale, md.values, strict=True)),
        lower=tuple(s * v for s, v in zip(scale, md.lower, strict=True)),
        upper=tuple(s * v for s, v in zip(scale, md.upper, strict=True)),
        edf=md.edf,
        n_terms=md.n_terms,
        alpha=md.alpha,
        confidence=md.confidence,
    )
    return out


def _slope_type(mu: float, mu_mod: float) -> str:
    if mu < -0.75:
        return "white PM" if mu_mod < -1.25 else "flicker PM"
    if mu < -0.25:
        return "white FM"
    if mu < 0.25:
        return "flicker FM"
    if mu < 0.75:
        return "random-walk FM"
    return "linear drift"


def noise_hint(
    adev: AllanCurve, mdev: AllanCurve, *, drift_per_s: float | None = None
) -> NoiseHint:
    """Name the power-law noise type from the slopes of OADEV and MDEV.

    The ADEV slope mu (sigma_y ~ tau^mu) is -1 for white and flicker PM, -1/2 for white
    FM, 0 for flicker FM, +1/2 for random-walk FM and +1 for a linear drift D, which gives
    sigma_y = D*tau/sqrt(2); MDEV's slope (-3/2 for white PM, -1 for flicker PM) tells
    the two PM types apart. Boundaries lie half way between the nominal slopes.

    Parameters
    ----------
    adev : AllanCurve
        Overlapping ADEV.
    mdev : AllanCurve
        MDEV over the same readings.
    drift_per_s : float, optional
        Fractional linear drift (1/s), from `fit_drift`; with a slope near +1 the hint
        says whether D*tau/sqrt(2) accounts for the curve.

    Returns
    -------
    NoiseHint

    References
    ----------
    NIST SP 1065 [1], section 5.2.1 and Table 5; drift signature in section 5.2.1.
    """

    def fit(c: AllanCurve) -> float:
        # Zero deviations (constant or periodic readings) have no slope: left out.
        v = np.asarray(c.values, dtype=float)
        ok = v > 0
        if ok.sum() < 2:
            return math.nan
        lt, lv = np.log(np.asarray(c.taus_s)[ok]), np.log(v[ok])
        w = np.sqrt(np.maximum(np.asarray(c.edf, float)[ok], 1e-9))
        return float(np.polyfit(lt, lv, 1, w=w)[0])

    def local(c: AllanCurve, i: int) -> float:
        if i + 1 >= len(c.taus_s) or not (c.values[i] > 0 and c.values[i + 1] > 0):
            return math.nan
        return math.log(c.values[i + 1] / c.values[i]) / math.log(c.taus_s[i + 1] / c.taus_s[i])

    mu, mu_mod = fit(adev), fit(mdev)
    per_tau = []
    for i in range(len(adev.taus_s) - 1):
        s = local(adev, i)
        if not math.isfinite(s):
            continue
        j = int(np.argmin(np.abs(np.log(np.asarray(mdev.taus_s) / adev.taus_s[i]))))
        sm = local(mdev, j)
        per_tau.append((float(adev.taus_s[i]), _slope_type(s, sm if math.isfinite(sm) else s)))
    if not math.isfinite(mu):
        return NoiseHint("unknown", mu, mu_mod, "too few taus for a slope", tuple(per_tau))
    mm = mu_mod if math.isfinite(mu_mod) else mu
    kind = _slope_type(mu, mm)
    text = f"OADEV slope {mu:+.2f}, MDEV slope {mm:+.2f}: nearest power law is {kind}"
    if kind == "linear drift":
        if drift_per_s is not None and drift_per_s != 0:
            pred = abs(drift_per_s) * np.asarray(adev.taus_s) / math.sqrt(2)
            ratio = float(np.median(np.asarray(adev.values) / pred))
            text += (
                f"; the measured curve is {ratio:.2f} times the D*tau/sqrt(2) of the fitted "
                "linear drift" + (" (drift explains it)" if 0.7 < ratio < 1.4 else "")
            )
            if not 0.7 < ratio < 1.4:
                text += " (random-run FM or changing drift also give slope +1)"
        else:
            text += " (random-run FM also gives slope +1)"
    return NoiseHint(kind, mu, mu_mod, text, tuple(per_tau))


# ---------------------------------------------------------------------------------------
# one call for everything

Selection = Literal["all", "settled", "span"]


def analyze_stability(
    t_s,
    frequency_hz,
    *,
    nominal_hz: float | None = None,
    tau0_s: float | None = None,
    settle_ppm_per_min: float = 1.0,
    settle_window_s: float = 60.0,
    select: Selection = "all",
    span_s: tuple[float, float] | None = None,
    factors: Sequence[int] | None = None,
    remove_drift: bool = False,
    confidence: float = _CI_ONE_SIGMA,
    breaks_before=None,
) -> StabilityResult:
    """Drift, warm-up, Allan family and noise hint of a run of readings.

    Parameters
    ----------
    t_s : array_like
        Reading times, s, strictly increasing.
    frequency_hz : array_like
        Readings, Hz; NaN marks a missing reading.
    nominal_hz : float, optional
        Reference for fractional frequency and ppm. Default: the median reading.
    tau0_s : float, optional
        Gate time. Default: the median reading interval.
    settle_ppm_per_min : float, default 1.0
        Warm-up threshold on the drift rate.
    settle_window_s : float, default 60.0
        Window of the local drift-rate fit for the warm-up time.
    select : {"all", "settled", "span"}, default "all"
        Readings the Allan family uses: all of them, those after the warm-up time, or
        those with span_s[0] <= t <= span_s[1].
    span_s : (float, float), optional
        Required with select="span".
    factors : sequence of int, optional
        Averaging factors (tau = m*tau0). Default: octaves.
    remove_drift : bool, default False
        Subtract the linear drift fitted over the span before the Allan family (drift
        then no longer dominates long taus; the drift figures are still reported).
    confidence : float, default 0.683
        Two-sided probability of the confidence intervals.
    breaks_before : array_like of bool, optional
        Known breaks, as in `check_readings`.

    Returns
    -------
    StabilityResult

    Raises
    ------
    ValueError
        Bad parameters, too few readings, a span or settled part with too few readings,
        or select="settled" on a record that never settles.
    """
    if select not in ("all", "settled", "span"):
        raise ValueError(f"select={select!r} must be one of 'all', 'settled', 'span'")
    t, f = _as_readings(t_s, frequency_hz)
    check = check_readings(t, f, tau0_s=tau0_s, breaks_before=breaks_before)
    tau0 = check.tau0_s
    tu, fu = t[np.isfinite(f)], f[np.isfinite(f)]
    if nominal_hz is None:
        nominal_hz = float(np.median(fu))
    _check_positive("nominal_hz", nominal_hz)
    notes = list(check.warnings)
    drift = fit_drift(tu, fu, nominal_hz=nominal_hz)
    window = settle_window_s
    if window > 0.25 * drift.duration_s and drift.duration_s > 0:
        window = max(drift.duration_s / 4, 3 * tau0)
        notes.append(
            f"record of {drift.duration_s:g} s is short for a {settle_window_s:g} s "
            f"warm-up window; using {window:g} s"
        )
    warm = warmup_time(
        tu,
        fu,
        threshold_ppm_per_min=settle_ppm_per_min,
        window_s=window,
        nominal_hz=nominal_hz,
    )
    if select == "span":
        if span_s is None or len(span_s) != 2 or not span_s[0] < span_s[1]:
            raise ValueError(f"span_s={span_s} must be (t0, t1) with t0 < t1")
        lo, hi = float(span_s[0]), float(span_s[1])
    elif select == "settled":
        if warm.settled_at_t_s is None:
            raise ValueError(
                f"the drift rate never stays below settle_ppm_per_min={settle_ppm_per_min}"
                f" (last window: {warm.final_ppm_per_min:.3g} ppm/min)"
            )
        lo, hi = warm.settled_at_t_s, float(t[-1])
    else:
        lo, hi = float(t[0]), float(t[-1])
    if warm.warmup_s is None:
        notes.append(
            f"the drift rate never stays below {settle_ppm_per_min:g} ppm/min "
            f"(last {warm.window_s:g} s window: {warm.final_ppm_per_min:.3g} ppm/min)"
        )
    sel = (tu >= lo) & (tu <= hi)
    if sel.sum() < 2:
        raise ValueError(f"span {lo:g}..{hi:g} s holds {int(sel.sum())} readings, need 2")
    idx = np.nonzero(sel)[0]
    # The drift over the part the Allan family sees is what shapes its long taus.
    span_drift = fit_drift(tu[sel], fu[sel], nominal_hz=nominal_hz) if sel.sum() >= 3 else drift
    y = fractional_frequency(fu, nominal_hz)
    if remove_drift:
        y = y - span_drift.hz_per_s / nominal_hz * (tu - 0.5 * (tu[idx[0]] + tu[idx[-1]]))
    segs = []
    for a, b in check.segments:
        a2, b2 = max(a, idx[0]), min(b, idx[-1] + 1)
        if b2 > a2:
            segs.append((a2 - idx[0], b2 - idx[0]))
    curves = allan_family(
        y[idx[0] : idx[-1] + 1], tau0, segments=segs, factors=factors, confidence=confidence
    )
    hint = noise_hint(
        curves["oadev"],
        curves["mdev"],
        drift_per_s=None if remove_drift else span_drift.hz_per_s / nominal_hz,
    )
    return StabilityResult(
        check=check,
        drift=drift,
        span_drift=span_drift,
        warmup=warm,
        span_s=(float(tu[idx[0]]), float(tu[idx[-1]])),
        nominal_hz=float(nominal_hz),
        adev=curves["oadev"],
        adev_nonoverlapping=curves["adev"],
        mdev=curves["mdev"],
        tdev=curves["tdev"],
        noise=hint,
        warnings=tuple(notes),
    )


# ---------------------------------------------------------------------------------------
# incremental: for a window that adds readings as they come


class StabilityTracker:
    """Running OADEV, MDEV and linear drift over a growing run of readings.

    Each reading costs O(number of octave taus): the squared second differences of phase
    (OADEV) and their m-long sums (MDEV, from third differences of the cumulative phase)
    are added as the phase points arrive, pooled over contiguous segments exactly as
    `allan_family` does, so a live window can refresh the curves every reading. A gap (an
    interval over 1.5*tau0, or a reading without a frequency) closes the segment;
    nothing is interpolated.

    Parameters
    ----------
    tau0_s : float
        Gate time (reading interval), s.
    nominal_hz : float
        Frequency for fractional frequency and ppm.
    max_factor : int, default 2**20
        Largest averaging factor tracked.

    Raises
    ------
    ValueError
        Non-positive `tau0_s`, `nominal_hz` or `max_factor`.

    References
    ----------
    NIST SP 1065 [1], eqs. (11) and (14) written in phase x: OADEV terms
    x[i+2m] - 2x[i+m] + x[i], MDEV terms their sums over m consecutive i (kept as running
    sums of third differences, as allantools.mdev computes them).
    """

    def __init__(self, *, tau0_s: float, nominal_hz: float, max_factor: int = 2**20) -> None:
        _check_positive("tau0_s", tau0_s)
        _check_positive("nominal_hz", nominal_hz)
        if max_factor < 1:
            raise ValueError(f"max_factor={max_factor} must be >= 1")
        self.tau0_s = float(tau0_s)
        self.nominal_hz = float(nominal_hz)
        self._ms = 2 ** np.arange(int(math.floor(math.log2(max_factor))) + 1, dtype=np.int64)
        k = self._ms.size
        self._o_sum = np.zeros(k)
        self._o_n = np.zeros(k, dtype=np.int64)
        self._m_sum = np.zeros(k)
        self._m_n = np.zeros(k, dtype=np.int64)
        self._segments: list[int] = []  # phase points of each closed segment
        self._x = np.zeros(1024)  # phase of the open segment, x[0] = 0
        self._v = np.zeros(k)  # running MDEV window sums of the open segment
        self._n = 0  # phase points in the open segment
        self._t_last: float | None = None
        self._y_ref: float | None = None
        # drift sums about the first reading (keeps the digits of long records)
        self._t_first: float | None = None
        self._f_first = 0.0
        self._s = np.zeros(5)  # n, sum t, sum t^2, sum f, sum t f

    @property
    def count(self) -> int:
        """Readings with a frequency taken so far."""
        return int(self._s[0])

    def _close(self) -> None:
        if self._n > 1:
            self._segments.append(self._n)
        self._n = 0

    def _grow(self, need: int) -> None:
        if need > self._x.size:
            size = max(need, 2 * self._x.size)
            self._x = np.concatenate([self._x, np.zeros(size - self._x.size)])

    def extend(self, t_s, frequency_hz) -> None:
        """Add readings (times strictly increasing, and later than those already added).

        Parameters
        ----------
        t_s : array_like
            Reading times, s.
        frequency_hz : array_like
            Readings, Hz; NaN marks a reading without a frequency (a gap).

        Raises
        ------
        ValueError
            Mismatched lengths, or times not after the previous ones.
        """
        t, f = _as_readings(np.atleast_1d(t_s), np.atleast_1d(frequency_hz))
        if t.size == 0:
            return
        if self._t_last is not None and t[0] <= self._t_last:
            raise ValueError(f"t_s={t[0]} must be after the last reading, {self._t_last}")
        # where the run breaks: long interval or a missing reading
        prev = np.concatenate([[self._t_last if self._t_last is not None else -np.inf], t[:-1]])
        brk = (t - prev > 1.5 * self.tau0_s) | ~np.isfinite(f)
        ok = np.isfinite(f)
        if ok.any():
            if self._t_first is None:
                self._t_first, self._f_first = float(t[ok][0]), float(f[ok][0])
            tt, ff = t[ok] - self._t_first, f[ok] - self._f_first
            self._s += (tt.size, tt.sum(), (tt * tt).sum(), ff.sum(), (tt * ff).sum())
        # contiguous runs of usable readings
        starts = np.nonzero(brk | np.concatenate([[False], ~ok[:-1]]))[0]
        edges = [0, *[int(i) for i in starts if i > 0], t.size]
        for a, b in itertools.pairwise(edges):
            if brk[a]:
                self._close()
            run = f[a:b][np.isfinite(f[a:b])]
            if run.size:
                self._append(run)
        self._t_last = float(t[-1])

    def _append(self, f: np.ndarray) -> None:
        y = f / self.nominal_hz - 1.0
        if self._y_ref is None:
            # a constant offset changes no Allan statistic; removing it keeps phase small
            self._y_ref = float(y[0])
        y = y - self._y_ref
        if self._n == 0:
            self._n = 1  # x[0] = 0 starts the segment
            self._x[0] = 0.0
        n0 = self._n
        n1 = n0 + y.size
        self._grow(n1)
        self._x[n0:n1] = self._x[n0 - 1] + np.cumsum(y) * self.tau0_s
        x = self._x
        new = np.arange(n0, n1)  # newly arrived phase indices j
        for k, m in enumerate(self._ms):
            j = new[new >= 2 * m]
            if j.size == 0:
                if n1 <= 2 * m:
                    break
                continue
            d = x[j] - 2 * x[j - m] + x[j - 2 * m]
            self._o_sum[k] += float(np.dot(d, d))
            self._o_n[k] += j.size
            # MDEV: v_i = sum over l = i..i+m-1 of x[l+2m] - 2x[l+m] + x[l], kept as a
            # running sum updated by third differences of x (small numbers, so no digits
            # are lost as they would be in differences of a cumulative phase).
            j3 = j[j >= 3 * m - 1]
            if j3.size:
                first = j3[0] == 3 * m - 1
                if first:
                    v0 = float(np.sum(x[2 * m : 3 * m] - 2 * x[m : 2 * m] + x[:m]))
                    self._m_sum[k] += v0 * v0
                    self._m_n[k] += 1
                    self._v[k] = v0
                    j3 = j3[1:]
                if j3.size:
                    inc = x[j3] - 3 * x[j3 - m] + 3 * x[j3 - 2 * m] - x[j3 - 3 * m]
                    v = self._v[k] + np.cumsum(inc)
                    self._m_sum[k] += float(np.dot(v, v))
                    self._m_n[k] += j3.size
                    self._v[k] = float(v[-1])
        self._n = n1

    def drift_hz_per_s(self) -> float:
        """Slope of the least-squares line through all readings so far (NaN if < 2)."""
        n, st, stt, sf, stf = self._s
        den = n * stt - st * st
        return float((n * stf - st * sf) / den) if n >= 2 and den > 0 else math.nan

    def drift_ppm_per_min(self) -> float:
        """The same slope in ppm of the nominal frequency per minute."""
        return self.drift_hz_per_s() * 60.0 / self.nominal_hz * 1e6

    def curves(self, *, confidence: float = _CI_ONE_SIGMA) -> dict[str, AllanCurve]:
        """OADEV, MDEV and TDEV of the readings so far, with confidence intervals.

        Intervals assume white FM (alpha = 0) at every tau: a live estimate, cheaper than
        the identification `allan_family` makes.

        Returns
        -------
        dict
            {"oadev", "mdev", "tdev"} -> AllanCurve (taus with at least one term).
        """
        import allantools

        segs = [*self._segments, *([self._n] if self._n > 1 else [])]
        out: dict[str, AllanCurve] = {}
        for kind, ssum, cnt in (
            ("oadev", self._o_sum, self._o_n),
            ("mdev", self._m_sum, self._m_n),
        ):
            keep = cnt > 1  # as allan_family: a single term is no estimate
            ms = self._ms[keep]
            taus = ms * self.tau0_s
            if kind == "oadev":
                var = ssum[keep] / (2.0 * taus**2 * cnt[keep])
            else:
                var = ssum[keep] / (2.0 * ms.astype(float) ** 2 * taus**2 * cnt[keep])
            vals = np.sqrt(var)
            edfs = [
                sum(_edf(0, int(m), n_ph, kind) for n_ph in segs if n_ph > 2 * m) or 1.0 for m in ms
            ]
            ci = [
                allantools.confidence_interval(v, e, ci=confidence)
                for v, e in zip(vals, edfs, strict=True)
            ]
            out[kind] = AllanCurve(
                kind=kind,
                taus_s=tuple(float(v) for v in taus),
                values=tuple(float(v) for v in vals),
                lower=tuple(float(c[0]) for c in ci),
                upper=tuple(float(c[1]) for c in ci),
                edf=tuple(float(e) for e in edfs),
                n_terms=tuple(int(c) for c in cnt[keep]),
                alpha=(0,) * int(keep.sum()),
                confidence=float(confidence),
            )
        md = out["mdev"]
        sc = np.asarray(md.taus_s) / math.sqrt(3.0)
        out["tdev"] = AllanCurve(
            kind="tdev",
            taus_s=md.taus_s,
            values=tuple(float(v) for v in sc * np.asarray(md.values)),
            lower=tuple(float(v) for v in sc * np.asarray(md.lower)),
            upper=tuple(float(v) for v in sc * np.asarray(md.upper)),
            edf=md.edf,
            n_terms=md.n_terms,
            alpha=md.alpha,
            confidence=md.confidence,
        )
        return out
