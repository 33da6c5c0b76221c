"""Harmonics of an oscillator: the ladder N*f0, the inverse problem, and protected bands.

Forward: from a fundamental f0, the harmonics N*f0 that land in a frequency range, each
with its deviation (frequency modulation multiplies with the harmonic number: N*deviation)
and the fundamental deviation that gives a wanted deviation on that harmonic.

Inverse: from frequencies where a receiver heard the signal, the fundamentals f0 and
harmonic numbers N_i with |f_i - N_i*f0| <= tolerance for every i. Every solution f0 has
the sub-multiples f0/k (harmonic numbers k*N_i) as exact aliases, fitting just as well;
they are listed after the primitive solutions, never dropped.

Protected bands: a table of aeronautical, emergency and distress frequencies, and the
test of whether a signal (with its occupied bandwidth) touches one.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

__all__ = [
    "CAUTION",
    "DEFAULT_AUDIO_HZ",
    "DEFAULT_SPOT_GUARD_HZ",
    "GUARD_RULE",
    "PROTECTED_BANDS",
    "BandHit",
    "HarmonicLine",
    "Inference",
    "ProtectedBand",
    "ProtectedHarmonic",
    "SolutionCandidate",
    "harmonic_ladder",
    "infer_fundamental",
    "protected_band_hits",
    "protected_harmonics",
]


@dataclass(frozen=True)
class ProtectedBand:
    """One entry of the protected-band table.

    Attributes
    ----------
    name : str
        What the band or frequency is for.
    lo_hz, hi_hz : float
        Band edges; equal for a spot frequency.
    source : str
        Where the entry comes from.
    verified : bool
        False where the entry is recalled from the source, not checked against its text.
    """

    name: str
    lo_hz: float
    hi_hz: float
    source: str
    verified: bool = False

    @property
    def is_spot(self) -> bool:
        return self.lo_hz == self.hi_hz


_RR = "ITU Radio Regulations"
#: Protected bands and spot frequencies. All entries are recalled [memory] from the ITU
#: Radio Regulations (Article 5, the Table of Frequency Allocations, and Appendix 15,
#: frequencies for distress and safety), not verified against the current edition; the
#: national rules that implement them decide what applies where you are.
PROTECTED_BANDS: tuple[ProtectedBand, ...] = (
    ProtectedBand(
        "aeronautical radionavigation and mobile (R) band 108-137 MHz",
        108.0e6,
        137.0e6,
        f"{_RR}, Article 5 [memory]",
    ),
    ProtectedBand(
        "aeronautical emergency 121.5 MHz",
        121.5e6,
        121.5e6,
        f"{_RR}, Appendix 15 [memory]",
    ),
    ProtectedBand(
        "military aeronautical emergency and survival craft 243 MHz",
        243.0e6,
        243.0e6,
        f"{_RR}, Appendix 15 [memory]",
    ),
    ProtectedBand(
        "maritime distress, safety and calling 156.8 MHz (VHF channel 16)",
        156.8e6,
        156.8e6,
        f"{_RR}, Appendix 15 [memory]",
    ),
    ProtectedBand(
        "maritime digital selective calling distress 156.525 MHz (VHF channel 70)",
        156.525e6,
        156.525e6,
        f"{_RR}, Appendix 15 [memory]",
    ),
    ProtectedBand(
        "satellite distress beacons 406-406.1 MHz",
        406.0e6,
        406.1e6,
        f"{_RR}, Article 5 and Appendix 15 [memory]",
    ),
)

#: Half of a 25 kHz aeronautical/maritime channel: the width a spot frequency's own
#: service occupies on either side (common practice; 8.33 kHz aeronautical spacing is
#: narrower, so this errs on the safe side).
DEFAULT_SPOT_GUARD_HZ = 12.5e3
#: Highest modulating frequency assumed for the occupied bandwidth of broadcast-style
#: FM audio (15 kHz, common practice for mono FM broadcast audio).
DEFAULT_AUDIO_HZ = 15.0e3

GUARD_RULE = (
    "A signal on frequency f with peak deviation D (for a harmonic N: N times the "
    "fundamental's) and highest audio frequency fm occupies f +/- (D + fm), Carson's rule "
    "(half of B = 2(D + fm)). It is flagged when that span overlaps a protected band, or "
    "comes within the guard (default 12.5 kHz, half a 25 kHz channel) of a protected spot "
    "frequency."
)

CAUTION = (
    "Caution: harmonics of an overdriven oscillator radiate. Harmonics on aeronautical, "
    "emergency or distress frequencies can endanger lives and are unlawful almost "
    "everywhere. Check your local regulations and licensed practice (your national "
    "regulator's rules, which implement the ITU Radio Regulations) before putting anything "
    "on the air; filter the output and measure its harmonics into a dummy load first."
)


@dataclass(frozen=True)
class BandHit:
    """A protected band that a signal touches.

    Attributes
    ----------
    name : str
        The band's name.
    lo_hz, hi_hz : float
        The band's edges (equal for a spot frequency).
    distance_hz : float
        Distance from the signal's carrier to the band (0 if inside it).
    source : str
        Source of the table entry.
    verified : bool
        Whether the entry was checked against its source.
    """

    name: str
    lo_hz: float
    hi_hz: float
    distance_hz: float
    source: str
    verified: bool


def _check_nonneg(name: str, value: float) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be a number, got {type(value).__name__}") from None
    if not (math.isfinite(v) and v >= 0):
        raise ValueError(f"{name}={value} must be finite and >= 0")
    return v


def _check_pos(name: str, value: float) -> float:
    v = _check_nonneg(name, value)
    if v == 0:
        raise ValueError(f"{name}={value} must be positive")
    return v


def protected_band_hits(
    frequency_hz: float,
    deviation_hz: float = 0.0,
    *,
    audio_hz: float = DEFAULT_AUDIO_HZ,
    guard_hz: float = DEFAULT_SPOT_GUARD_HZ,
    bands: Sequence[ProtectedBand] = PROTECTED_BANDS,
) -> tuple[BandHit, ...]:
    """Protected bands touched by a signal on `frequency_hz` (see `GUARD_RULE`).

    Parameters
    ----------
    frequency_hz : float
        Carrier frequency of the signal (for a harmonic: N*f0), Hz.
    deviation_hz : float, default 0
        Peak deviation of that signal, Hz (for a harmonic: N times the fundamental's).
    audio_hz : float, default 15e3
        Highest modulating frequency, for Carson's rule. Use 0 for a bare carrier.
    guard_hz : float, default 12.5e3
        Guard on either side of a protected spot frequency.
    bands : sequence of ProtectedBand
        The table; default `PROTECTED_BANDS`.

    Returns
    -------
    tuple of BandHit
        Empty if the signal touches nothing.

    Raises
    ------
    ValueError
        Negative or non-finite arguments.

    References
    ----------
    Carson's rule, B = 2(deviation + fm): Federal Standard 1037C. Band table: ITU Radio
    Regulations, Article 5 and Appendix 15 [memory].
    """
    f = _check_nonneg("frequency_hz", frequency_hz)
    half = _check_nonneg("deviation_hz", deviation_hz) + _check_nonneg("audio_hz", audio_hz)
    g = _check_nonneg("guard_hz", guard_hz)
    hits = []
    for b in bands:
        lo, hi = (b.lo_hz - g, b.hi_hz + g) if b.is_spot else (b.lo_hz, b.hi_hz)
        if f + half >= lo and f - half <= hi:
            dist = 0.0 if b.lo_hz <= f <= b.hi_hz else min(abs(f - b.lo_hz), abs(f - b.hi_hz))
            hits.append(BandHit(b.name, b.lo_hz, b.hi_hz, dist, b.source, b.verified))
    return tuple(hits)


@dataclass(frozen=True)
class HarmonicLine:
    """One harmonic N*f0.

    Attributes
    ----------
    n : int
        Harmonic number (1 = fundamental).
    frequency_hz : float
        N*f0.
    deviation_hz : float
        N times the fundamental's deviation.
    fundamental_deviation_for_target_hz : float or None
        Fundamental deviation that gives the target deviation on this harmonic
        (target / N), or None without a target.
    protected : tuple of BandHit
        Protected bands this harmonic touches.
    """

    n: int
    frequency_hz: float
    deviation_hz: float
    fundamental_deviation_for_target_hz: float | None
    protected: tuple[BandHit, ...]


MAX_LINES = 100_000


def harmonic_ladder(
    fundamental_hz: float,
    *,
    lo_hz: float = 88e6,
    hi_hz: float = 108e6,
    deviation_hz: float = 0.0,
    target_deviation_hz: float | None = None,
    audio_hz: float = DEFAULT_AUDIO_HZ,
    guard_hz: float = DEFAULT_SPOT_GUARD_HZ,
) -> tuple[HarmonicLine, ...]:
    """Harmonics N*f0 with lo_hz <= N*f0 <= hi_hz.

    Parameters
    ----------
    fundamental_hz : float
        f0, Hz.
    lo_hz, hi_hz : float
        Range, Hz (default 88-108 MHz, the FM broadcast band, common practice).
    deviation_hz : float, default 0
        Peak deviation of the fundamental, Hz.
    target_deviation_hz : float, optional
        Wanted peak deviation on the harmonic; gives target/N per line.
    audio_hz, guard_hz : float
        As in `protected_band_hits`.

    Returns
    -------
    tuple of HarmonicLine

    Raises
    ------
    ValueError
        Non-positive fundamental, lo_hz > hi_hz, negative deviations, or more than
        100000 harmonics in the range.
    """
    f0 = _check_pos("fundamental_hz", fundamental_hz)
    lo, hi = _check_nonneg("lo_hz", lo_hz), _check_nonneg("hi_hz", hi_hz)
    if lo > hi:
        raise ValueError(f"lo_hz={lo_hz} must not exceed hi_hz={hi_hz}")
    dev = _check_nonneg("deviation_hz", deviation_hz)
    tgt = (
        None
        if target_deviation_hz is None
        else _check_pos("target_deviation_hz", target_deviation_hz)
    )
    n_lo = max(1, math.ceil(lo / f0 - 1e-12))
    n_hi = math.floor(hi / f0 + 1e-12)
    if n_hi - n_lo + 1 > MAX_LINES:
        raise ValueError(
            f"{n_hi - n_lo + 1} harmonics of fundamental_hz={fundamental_hz} fall in "
            f"{lo_hz}-{hi_hz} Hz; narrow the range (at most {MAX_LINES})"
        )
    return tuple(
        HarmonicLine(
            n=n,
            frequency_hz=n * f0,
            deviation_hz=n * dev,
            fundamental_deviation_for_target_hz=None if tgt is None else tgt / n,
            protected=protected_band_hits(n * f0, n * dev, audio_hz=audio_hz, guard_hz=guard_hz),
        )
        for n in range(n_lo, n_hi + 1)
    )


@dataclass(frozen=True)
class ProtectedHarmonic:
    """Harmonics of f0 that touch one protected band.

    Attributes
    ----------
    band : str
        The band's name.
    lo_hz, hi_hz : float
        The band's edges.
    harmonics : tuple of int
        Harmonic numbers that touch it (first 1000).
    count : int
        How many harmonics touch it.
    source : str
    verified : bool
    """

    band: str
    lo_hz: float
    hi_hz: float
    harmonics: tuple[int, ...]
    count: int
    source: str
    verified: bool


def protected_harmonics(
    fundamental_hz: float,
    *,
    deviation_hz: float = 0.0,
    max_hz: float = 1e9,
    audio_hz: float = DEFAULT_AUDIO_HZ,
    guard_hz: float = DEFAULT_SPOT_GUARD_HZ,
    bands: Sequence[ProtectedBand] = PROTECTED_BANDS,
) -> tuple[ProtectedHarmonic, ...]:
    """All harmonics N*f0 up to `max_hz` that touch a protected band, grouped by band.

    Parameters
    ----------
    fundamental_hz : float
        f0, Hz.
    deviation_hz : float, default 0
        Peak deviation of the fundamental (harmonic N has N times it).
    max_hz : float, default 1e9
        Highest harmonic frequency considered.
    audio_hz, guard_hz, bands
        As in `protected_band_hits`.

    Returns
    -------
    tuple of ProtectedHarmonic
        One entry per band touched, in table order.

    Raises
    ------
    ValueError
        Non-positive fundamental or `max_hz`, negative deviation.
    """
    f0 = _check_pos("fundamental_hz", fundamental_hz)
    dev = _check_nonneg("deviation_hz", deviation_hz)
    top = _check_pos("max_hz", max_hz)
    a = _check_nonneg("audio_hz", audio_hz)
    g = _check_nonneg("guard_hz", guard_hz)
    out = []
    n_max = math.floor(top / f0 + 1e-12)
    for b in bands:
        lo, hi = (b.lo_hz - g, b.hi_hz + g) if b.is_spot else (b.lo_hz, b.hi_hz)
        # N*f0 + N*dev + a >= lo and N*f0 - N*dev - a <= hi
        n_first = max(1, math.ceil((lo - a) / (f0 + dev) - 1e-12))
        n_last = math.floor((hi + a) / (f0 - dev) + 1e-12) if f0 > dev else n_max
        n_last = min(n_last, n_max)
        if n_last < n_first:
            continue
        ns = np.arange(n_first, n_last + 1)
        keep = (ns * (f0 + dev) + a >= lo) & (ns * (f0 - dev) - a <= hi)
        ns = ns[keep]
        if ns.size:
            out.append(
                ProtectedHarmonic(
                    band=b.name,
                    lo_hz=b.lo_hz,
                    hi_hz=b.hi_hz,
                    harmonics=tuple(int(n) for n in ns[:1000]),
                    count=int(ns.size),
                    source=b.source,
                    verified=b.verified,
                )
            )
    return tuple(out)


# ---------------------------------------------------------------------------------------
# inverse


@dataclass(frozen=True)
class SolutionCandidate:
    """One fundamental that explains every heard frequency.

    Attributes
    ----------
    fundamental_hz : float
        Least-squares f0 for the harmonic numbers (moved into the tolerance region if the
        least-squares value leaves it).
    harmonics : tuple of int
        N_i for each heard frequency, in the order given.
    residual_hz : float
        RMS of f_i - N_i*f0.
    max_error_hz : float
        Largest |f_i - N_i*f0|.
    alias_of : int or None
        For a sub-multiple: the rank (from 1) of the primitive solution it divides, else
        None.
    divisor : int
        k for a sub-multiple f0_primitive/k (harmonic numbers k times), 1 otherwise.
    """

    fundamental_hz: float
    harmonics: tuple[int, ...]
    residual_hz: float
    max_error_hz: float
    alias_of: int | None
    divisor: int


@dataclass(frozen=True)
class Inference:
    """Result of `infer_fundamental`.

    Attributes
    ----------
    candidates : tuple of SolutionCandidate
        Primitive solutions (gcd of the harmonic numbers 1), largest fundamental first,
        then their sub-multiples, largest fundamental first; at most `max_candidates`.
    total_count : int
        Number of solutions found before truncation.
    omitted_count : int
        Solutions left out of `candidates`.
    primitive_count : int
        Primitive solutions found.
    heard_hz : tuple of float
        The heard frequencies, in the order given.
    tolerance_hz : float
    min_fundamental_hz : float
    explanation : str
        What the list means, in words.
    """

    candidates: tuple[SolutionCandidate, ...]
    total_count: int
    omitted_count: int
    primitive_count: int
    heard_hz: tuple[float, ...]
    tolerance_hz: float
    min_fundamental_hz: float
    explanation: str


MAX_SEARCH = 2_000_000


def infer_fundamental(
    heard_hz: Sequence[float],
    *,
    tolerance_hz: float,
    min_fundamental_hz: float = 100e3,
    max_fundamental_hz: float | None = None,
    max_candidates: int = 20,
) -> Inference:
    """Fundamentals f0 and harmonic numbers N_i with |f_i - N_i*f0| <= tolerance for all i.

    The lowest heard frequency f_1 fixes the search: for each N_1 with f0 = f_1/N_1 between
    `min_fundamental_hz` and f_1, the interval of f0 allowed by f_1 is
    [(f_1 - tol)/N_1, (f_1 + tol)/N_1]; each other f_i admits the integers N_i whose
    interval [(f_i - tol)/N_i, (f_i + tol)/N_i] meets it, and a set of N_i is a solution
    when all intervals share a point. f0 is then the least-squares value
    sum(N_i f_i)/sum(N_i^2), clipped into the shared interval.

    If (f0, N_i) is a solution, so is (f0/k, k*N_i) for every k with f0/k above the
    minimum, with the same residual: the data cannot tell them apart. Solutions whose N_i
    have a common factor are therefore listed as sub-multiples of the primitive one, after
    all primitive solutions; primitive ones are ranked with the largest fundamental (the
    simplest harmonic numbers) first, as any of them fits within the tolerance.

    Parameters
    ----------
    heard_hz : sequence of float
        Two or more receiver frequencies where the signal was heard, Hz.
    tolerance_hz : float
        Largest allowed |f_i - N_i*f0|, Hz (dial error plus reading error).
    min_fundamental_hz : float, default 100e3
        Lowest fundamental searched.
    max_fundamental_hz : float, optional
        Highest fundamental searched; default the lowest heard frequency (+ tolerance).
    max_candidates : int, default 20
        Length of the list returned.

    Returns
    -------
    Inference
        With no candidates if nothing fits.

    Raises
    ------
    ValueError
        Fewer than two heard frequencies, non-positive values, a search of more than
        2,000,000 harmonic numbers (raise `min_fundamental_hz`).

    References
    ----------
    The harmonic relation f_N = N*f0 (common practice); least squares for a single scale
    factor: f0 = sum(N f)/sum(N^2).
    """
    try:
        f = np.array([float(v) for v in heard_hz])
    except (TypeError, ValueError):
        raise TypeError("heard_hz must be a sequence of numbers") from None
    if f.size < 2:
        raise ValueError(f"heard_hz needs at least two frequencies, got {f.size}")
    if not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise ValueError(f"heard_hz={list(heard_hz)} must all be positive and finite")
    tol = _check_pos("tolerance_hz", tolerance_hz)
    fmin = _check_pos("min_fundamental_hz", min_fundamental_hz)
    if max_candidates < 1:
        raise ValueError(f"max_candidates={max_candidates} must be >= 1")
    order = np.argsort(f)
    fs = f[order]
    f1 = fs[0]
    fmax = (
        f1 + tol
        if max_fundamental_hz is None
        else _check_pos("max_fundamental_hz", max_fundamental_hz)
    )
    if fmax < fmin:
        raise ValueError(f"max_fundamental_hz={fmax} is below min_fundamental_hz={fmin}")
    n1_lo = max(1, math.ceil((f1 - tol) / fmax - 1e-12))
    n1_hi = math.floor((f1 + tol) / fmin + 1e-12)
    if n1_hi - n1_lo + 1 > MAX_SEARCH:
        raise ValueError(
            f"searching {n1_hi - n1_lo + 1} harmonic numbers; raise "
            f"min_fundamental_hz={min_fundamental_hz}"
        )
    sols: list[tuple[float, tuple[int, ...], float, float]] = []
    for n1 in range(n1_lo, n1_hi + 1):
        lo0 = max((f1 - tol) / n1, fmin)
        hi0 = min((f1 + tol) / n1, fmax)
        if lo0 > hi0:
            continue
        partial = [([n1], lo0, hi0)]
        for fi in fs[1:]:
            nxt = []
            for ns, lo, hi in partial:
                a = max(1, math.ceil((fi - tol) / hi - 1e-12))
                b = math.floor((fi + tol) / lo + 1e-12)
                for ni in range(a, min(b, a + 1000) + 1):
                    lo2 = max(lo, (fi - tol) / ni)
                    hi2 = min(hi, (fi + tol) / ni)
                    if lo2 <= hi2:
                        nxt.append(([*ns, ni], lo2, hi2))
            partial = nxt
            if not partial:
                break
        for ns, lo, hi in partial:
            n = np.array(ns, dtype=float)
            f0 = float(np.dot(n, fs) / np.dot(n, n))
            f0 = min(max(f0, lo), hi)
            err = fs - n * f0
            back = np.empty(len(ns), dtype=int)
            back[order] = ns
            sols.append(
                (
                    f0,
                    tuple(int(v) for v in back),
                    float(np.sqrt(np.mean(err**2))),
                    float(np.max(np.abs(err))),
                )
            )
    prim = [s for s in sols if math.gcd(*s[1]) == 1]
    alias = [s for s in sols if math.gcd(*s[1]) > 1]
    prim.sort(key=lambda s: -s[0])
    alias.sort(key=lambda s: -s[0])
    index = {s[1]: i + 1 for i, s in enumerate(prim)}
    ranked = []
    for s in prim:
        ranked.append(SolutionCandidate(s[0], s[1], s[2], s[3], None, 1))
    for s in alias:
        k = math.gcd(*s[1])
        base = tuple(v // k for v in s[1])
        ranked.append(SolutionCandidate(s[0], s[1], s[2], s[3], index.get(base), k))
    kept = tuple(ranked[:max_candidates])
    if not ranked:
        text = (
            f"No fundamental between {fmin / 1e6:.6g} MHz and {fmax / 1e6:.6g} MHz puts a "
            "harmonic within "
            f"+/-{tol:g} Hz of every heard frequency: they are not harmonics of one "
            "oscillator at this tolerance (check the dial readings, images or mixing "
            "products, or widen the tolerance)."
        )
    else:
        text = (
            f"{len(prim)} primitive solution(s), largest fundamental first. Each solution f0 "
            "also fits as f0/2, f0/3, ... with harmonic numbers doubled, tripled, ...: the "
            f"heard frequencies cannot rule those out ({len(alias)} such sub-multiples "
            f"down to {fmin / 1e6:.6g} MHz are listed after the primitive ones). Measure the "
            "fundamental, or hear more harmonics, to decide."
        )
        if len(prim) > 1:
            text += (
                " More than one primitive solution fits: the tolerance is too wide to "
                "decide between them."
            )
    return Inference(
        candidates=kept,
        total_count=len(ranked),
        omitted_count=len(ranked) - len(kept),
        primitive_count=len(prim),
        heard_hz=tuple(float(v) for v in f),
        tolerance_hz=tol,
        min_fundamental_hz=fmin,
        explanation=text,
    )
