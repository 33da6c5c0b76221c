"""FM modes of the engine: `beat` (a real beat note) and `iq` (complex I/Q).

Per gate: find the carrier (first gate) and demodulate with a streaming discriminator;
measure the carrier from a least-squares line through the baseband phase, the deviation
from the post-demodulation-filtered instantaneous frequency, the modulating tone with the
counter and the audio-quality meter, and the carrier-to-noise ratio from the envelope.
Over the record: the carrier joined phase-coherently, deviation statistics and
percentiles, BS.412 modulation power, Carson / occupied / -26 dB bandwidths from the
averaged baseband spectrum, and the Bessel-line fit of single-tone modulation.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields, is_dataclass, replace

import numpy as np

from dsp import filters as dfilters
from dsp import fm as dfm
from dsp import iq as diq
from dsp import quality as dq
from dsp import spectrum as dspec
from dsp import tone as dt
from monitor.blocks import StreamMeta
from monitor.errors import InputError

POST_FILTERS = ("none", "300-3000", "20-15k")
# Quality figures a reading carries for the demodulated audio.
_DEMOD_FIELDS = ("snr_db", "sinad_db", "thd_percent", "thd_n_percent")
# Post-demodulation output discarded after each (re)start while the filter settles
# (about eight time constants of its lowest corner).
SETTLE_S = {"none": 0.005, "300-3000": 0.03, "20-15k": 0.3}
# Upper edge of each post-demodulation filter: the discriminator's droop equaliser is
# fitted up to there (up to half the IF bandwidth without a filter).
POST_UPPER_HZ = {"300-3000": 3000.0, "20-15k": 15000.0}
# Output rate each post-demodulation filter needs (2.2 x its upper edge).
POST_MIN_RATE = {post: float(round(2.2 * upper)) for post, upper in POST_UPPER_HZ.items()}
# The demodulator's output rate is at least this times the IF bandwidth: enough for the
# IF filter's transition band (a fifth of the bandwidth); everything after the
# discriminator runs at this rate, so it is kept low.
IF_OVERSAMPLE = 1.2
DEEMPHASIS = {"none": None, "50us": 50e-6, "75us": 75e-6}
MIN_IF_BANDWIDTH_HZ = 200.0
# The carrier cluster must stand this far above the spectral floor (dB) to count.
CARRIER_MIN_SNR_DB = 15.0
# The averaged baseband spectrum (bandwidths) takes this many segments from each of the
# first SPECTRUM_FULL_GATES gates of a stream, then one from every SPECTRUM_STRIDE-th gate
# (its place moving through the gate), each gate sampled weighted alike: short records
# still get a smooth spectrum, long ones do not pay for four segments a gate.
SPECTRUM_SEGMENTS_PER_GATE = 4
SPECTRUM_FULL_GATES = 8
SPECTRUM_STRIDE = 2
# The tone's deviation is divided by the post chain's gain at the tone; below this gain
# (-20 dB: a tone outside the filter's band) the summary says so.
TONE_GAIN_WARN = 0.1
# Two channels correlated beyond this (either sign) are no I/Q pair but one signal twice
# (mono audio on both channels): I and Q of a quadrature mixer correlate as the sine of its
# phase error (0.17 at 10 degrees), and a signal tuned onto 0 Hz, whose I/Q is far from
# circular, correlates little too. (Two unrelated channels cannot be told from I/Q so.)
IQ_MAX_CHANNEL_CORRELATION = 0.95
# A signal at the band's edge whose lines fit one-tone FM this badly is folded there
# (one-tone FM fits to 1e-3..1e-2 at 15-40 dB C/N in the tests).
EDGE_BESSEL_RESIDUAL = 0.05
# An IF band holding less of the signal's power than this gives no trustworthy deviation.
IF_POWER_MIN_FRACTION = 0.9
# Below this integrated CNR the discriminator output is mostly clicks.
CNR_MIN_DB = 3.0
# The summary's carrier-to-noise ratio is the median over gates, to this resolution (dB).
CNR_MEDIAN_STEP_DB = 0.01
# A part of a recording analysed on its own (monitor.parallel) runs its post-demodulation
# filters over this many times their settling time before the gate ahead of it: their
# state then agrees with one pass's to rounding (SETTLE_S is about eight time constants
# of the slowest pole: e^-16 of the start-up transient is left, times the gate before).
PART_SETTLE_FACTOR = 2.0


@dataclass(frozen=True)
class FmSettings:
    """FM options (part of AnalysisSettings)."""

    carrier_near_hz: float | None = None
    if_bandwidth_hz: float | None = None
    post_filter: str | None = None  # None: the mode's default
    deemphasis: str = "none"
    iq_correct: bool = False

    def __post_init__(self):
        if self.post_filter is not None and self.post_filter not in POST_FILTERS:
            raise ValueError(f"post_filter={self.post_filter!r} must be one of {POST_FILTERS}")
        if self.deemphasis not in DEEMPHASIS:
            raise ValueError(f"deemphasis={self.deemphasis!r} must be one of {tuple(DEEMPHASIS)}")
        if self.if_bandwidth_hz is not None and not self.if_bandwidth_hz > 0:
            raise ValueError(f"if_bandwidth_hz={self.if_bandwidth_hz} must be positive")


@dataclass(frozen=True)
class DeviationSummary:
    peak_pos_hz: float
    peak_neg_hz: float
    peak_avg_hz: float
    rms_hz: float
    rms_sqrt2_hz: float
    tone_peak_hz: float | None
    hold_hz: float
    exceeded_10pct_hz: float
    exceeded_1pct_hz: float
    exceeded_0p1pct_hz: float
    histogram: dict


@dataclass(frozen=True)
class BesselSummary:
    mod_index: float
    residual: float
    carrier_depth_db: float
    nearest_carrier_null: int
    nearest_null_mod_index: float
    lines_db: tuple[float, ...]  # k = -K..K, dB re the fitted unmodulated carrier


@dataclass(frozen=True)
class FmSummary:
    carrier_hz: float
    carrier_uncertainty_hz: float
    carrier_method: str
    rf_hz: float | None
    rf_uncertainty_hz: float | None
    fundamental_hz: float | None
    fundamental_deviation_hz: float | None
    dial_hz: float | None
    sideband: str | None
    harmonic: int
    if_bandwidth_hz: float
    post_filter: str
    deemphasis: str
    deviation: DeviationSummary
    mod_tone_hz: float | None
    mod_tone_uncertainty_hz: float | None
    mod_index: float | None
    bessel_mod_index: float | None
    bessel: BesselSummary | None
    carson_bw_hz: float | None
    occupied_bw_hz: float | None
    occupied_low_hz: float | None
    occupied_high_hz: float | None
    bw_26db_hz: float | None
    mod_power_dbr: float | None
    mod_power_window_s: float | None
    mod_power_whole_record: bool | None
    cnr_db: float | None
    demod_snr_db: float | None
    demod_sinad_db: float | None
    demod_thd_percent: float | None


@dataclass(frozen=True)
class IqSummary:
    dc_i: float
    dc_q: float
    gain_imbalance_db: float
    phase_imbalance_deg: float
    image_rejection_db: float
    corrected: bool


def _rf_reference(meta: StreamMeta) -> float | None:
    """The frequency a carrier's offset is added to or taken from: the dial for a beat
    note; for I/Q the centre (from SigMF metadata) or else the dial."""
    if meta.mode == "iq":
        return meta.center_hz if meta.center_hz is not None else meta.dial_hz
    return meta.dial_hz


def rf_from_carrier(meta: StreamMeta, carrier_hz: float) -> float | None:
    """RF frequency from the carrier found in the recording's band.

    beat: RF = dial + carrier (upper sideband) or dial - carrier (lower sideband);
    iq: RF = centre + offset (the centre from SigMF metadata or `--dial`).
    None without a dial or centre, and where the sum is no positive frequency (a dial
    below the beat note on the lower sideband: a wrong dial or sideband, which
    `rf_warning` says).
    """
    ref = _rf_reference(meta)
    if ref is None:
        return None
    lower = meta.mode != "iq" and meta.sideband != "upper"
    rf = ref - carrier_hz if lower else ref + carrier_hz
    return rf if rf > 0 else None


def rf_warning(meta: StreamMeta, carrier_hz: float) -> str | None:
    """Why a dial or centre that was given yields no RF frequency (None when it does)."""
    ref = _rf_reference(meta)
    if ref is None or rf_from_carrier(meta, carrier_hz) is not None:
        return None
    how = (
        f"dial {ref:.0f} Hz {'+' if meta.sideband == 'upper' else '-'} beat note "
        f"{carrier_hz:.1f} Hz"
        if meta.mode != "iq"
        else f"centre {ref:.0f} Hz + offset {carrier_hz:.1f} Hz"
    )
    return f"no RF frequency: {how} is not a positive frequency (check --dial and --sideband)"


def _gate_power(x: np.ndarray, fs_hz: float, kind: str):
    """Hann-windowed power spectrum of a gate; for real input DC and sub-audio (< 20 Hz,
    where hum and offsets live) are zeroed, since they are never the carrier."""
    n = x.shape[0]
    w = np.hanning(n)
    if kind == "complex":
        spec = np.fft.fftshift(np.fft.fft((x - x.mean()) * w))
        freqs = np.fft.fftshift(np.fft.fftfreq(n, 1.0 / fs_hz))
    else:
        spec = np.fft.rfft((x - x.mean()) * w)
        freqs = np.fft.rfftfreq(n, 1.0 / fs_hz)
    p = spec.real**2 + spec.imag**2
    if kind == "real":
        p[freqs < 20.0] = 0.0
    return freqs, p


@dataclass(frozen=True)
class CarrierGroup:
    """A carrier's group of spectral lines in one gate (`find_carrier`)."""

    centre_hz: float  # power-weighted centre: the coarse carrier
    width_hz: float  # from the first line to the last, plus one line spacing
    snr_db: float  # of the strongest line over the spectral floor
    lines_hz: np.ndarray  # the group's lines
    line_power: np.ndarray  # their powers (arbitrary units)
    spacing_hz: float  # the typical spacing of its lines


def find_carrier(
    x: np.ndarray, fs_hz: float, *, kind: str, near_hz: float | None = None, spectrum=None
) -> CarrierGroup:
    """Coarse carrier and signal width from one gate's spectrum.

    The carrier of symmetric FM is the centre of its group of lines (its own line may be
    nulled, a sideband may be the strongest). Take the significant spectral peaks, group
    neighbours whose gaps stay within 2.5 times the typical line spacing (so one nulled
    line does not split the group), keep the group holding the strongest peak (or the
    peak nearest `near_hz`), and return it as a `CarrierGroup` (centre, width, SNR of its
    strongest peak, its lines). `spectrum` is the gate's (freqs, power) from
    `_gate_power`, when the caller has it already.
    """
    n = x.shape[0]
    freqs, p = spectrum if spectrum is not None else _gate_power(x, fs_hz, kind)
    floor = float(np.median(p)) + 1e-300
    inner = p[1:-1]
    is_peak = (inner >= p[:-2]) & (inner > p[2:])
    peaks = np.nonzero(is_peak)[0] + 1
    if peaks.size == 0:
        raise InputError("no carrier found: the spectrum has no lines")
    top = float(p[peaks].max())
    keep = peaks[(p[peaks] > floor * 10 ** (CARRIER_MIN_SNR_DB / 10)) & (p[peaks] > top * 1e-6)]
    if keep.size == 0:
        raise InputError(
            f"no carrier found: nothing stands {CARRIER_MIN_SNR_DB:.0f} dB above the noise"
        )
    if near_hz is not None:
        k = int(keep[np.argmin(np.abs(freqs[keep] - near_hz))])
        if abs(freqs[k] - near_hz) > max(0.1 * abs(near_hz), 200.0):
            raise InputError(
                f"no carrier found near {near_hz:g} Hz (the nearest line is at {freqs[k]:.1f} Hz)"
            )
    else:
        k = int(keep[np.argmax(p[keep])])
    snr_db = 10 * math.log10(p[k] / floor)
    # typical spacing of the lines around the chosen one, from those within 30 dB of it
    # when there are a few (weak lines of another spacing, such as hum sidebands, would
    # split the group), else from all (a small index: sidebands 30 dB or more down)
    strong = keep[p[keep] >= p[k] * 1e-3]
    if strong.size < 3:
        strong = keep
    order = np.argsort(np.abs(strong - k))[:16]
    near_lines = np.sort(strong[order])
    gaps = np.diff(near_lines)
    spacing = float(np.median(gaps)) if gaps.size else 1.0
    max_gap = max(3.0, 2.5 * spacing)
    i = int(np.searchsorted(keep, k))
    lo = hi = i
    while lo > 0 and keep[lo] - keep[lo - 1] <= max_gap:
        lo -= 1
    while hi < keep.size - 1 and keep[hi + 1] - keep[hi] <= max_gap:
        hi += 1
    group = keep[lo : hi + 1]
    # power-weighted centre over the group's bins (each peak with its two neighbours)
    idx = np.unique(np.clip(np.concatenate([group - 1, group, group + 1]), 0, p.size - 1))
    centre = float(np.sum(freqs[idx] * p[idx]) / np.sum(p[idx]))
    width = float(freqs[group[-1]] - freqs[group[0]]) + spacing * fs_hz / n
    return CarrierGroup(centre, width, snr_db, freqs[group], p[group], spacing * fs_hz / n)


def _power_share(spectrum, lo_hz: float, hi_hz: float, within: tuple[float, float]) -> float:
    """Share of the power above the noise floor between `within`'s bounds (one signal's
    span) that lies between lo_hz and hi_hz (its IF band)."""
    freqs, p = spectrum
    p = np.maximum(p - np.median(p), 0.0)  # the noise floor is not signal
    total = float(p[(freqs >= within[0]) & (freqs <= within[1])].sum())
    if total <= 0:
        return 1.0
    return float(p[(freqs >= lo_hz) & (freqs <= hi_hz)].sum()) / total


@dataclass(frozen=True)
class FmSetup:
    """What the first gate decides for the whole stream: where the demodulator mixes, its
    IF bandwidth and the post-demodulation filter (handed to the workers of an analysis
    in parts, so they demodulate exactly as one pass does)."""

    carrier_hz: float
    bandwidth_hz: float
    post_filter: str
    notes: tuple[str, ...] = ()
    at_band_edge: bool = False  # its outer lines reach past the edge of the band


class _MedianBins:
    """Median of a stream of values to a set resolution, in bounded memory: counts in
    bins of `step` (the values are per-gate carrier-to-noise ratios in dB; +-inf, from
    a noiseless or an empty gate, counted as such, NaN skipped). Even counts average
    the two middle values, as numpy.median does."""

    def __init__(self, step: float):
        self.step = step
        self.counts: dict[float, int] = {}
        self.n = 0

    def add(self, value: float) -> None:
        if math.isnan(value):
            return
        i = value if math.isinf(value) else math.floor(value / self.step)
        self.counts[i] = self.counts.get(i, 0) + 1
        self.n += 1

    def merge(self, other: _MedianBins) -> None:
        for i, c in other.counts.items():
            self.counts[i] = self.counts.get(i, 0) + c
        self.n += other.n

    def median(self) -> float | None:
        """The middle value's bin centre, or the mean of the two middle ones (None when
        empty)."""
        if not self.n:
            return None
        ranks = ((self.n - 1) // 2, self.n // 2)  # 0-based ranks of the middle value(s)
        centres = []
        seen = 0
        for i in sorted(self.counts):
            seen += self.counts[i]
            while len(centres) < 2 and seen > ranks[len(centres)]:
                centres.append(i if math.isinf(i) else (i + 0.5) * self.step)
            if len(centres) == 2:
                break
        return 0.5 * (centres[0] + centres[1])


class FmProcessor:
    """`beat` and `iq` modes of the engine (see the module docstring).

    Everything kept for the summary is a running sum or a bounded histogram (the
    carrier's phase-coherent join, deviation statistics and percentiles, BS.412 windows,
    the averaged spectrum, the demodulated audio's quality, I/Q statistics), so memory
    stays flat over day-long sessions and the figures of parts of a recording measured
    apart join into those of one pass (`prepare_part`, `absorb`; monitor.parallel).
    """

    #: a gate's samples are not kept once it is measured (the demodulator copies its
    #: filter history, the rest keeps figures): see `Engine.holds_no_samples`
    HOLDS_NO_SAMPLES = True

    def __init__(self, meta: StreamMeta, settings):
        self.meta = meta
        self.settings = settings
        self.fms: FmSettings = settings.fm or FmSettings()
        self.kind = "complex" if meta.mode == "iq" else "real"
        self.fs = meta.fs_hz
        self.k = meta.clock_factor
        self.setup: FmSetup | None = None
        self._demod: dfm.FmDemodulator | None = None
        self._post_filter = None  # dsp.filters.SosStream of the post-demodulation chain
        self._post_sos: np.ndarray | None = None  # its sections (the tone's gain through it)
        self.post_filter = "none"
        self._join = dt.GateJoin()  # the carrier, gate by gate (offsets from the mixer)
        self._cnr = _MedianBins(CNR_MEDIAN_STEP_DB)
        self._dev_n = 0
        self._dev_ms_n = 0.0
        self._dev_peak_pos = -math.inf
        self._dev_peak_neg = math.inf
        self._hist = dfm.DeviationHistogram(bin_hz=1.0)
        self._power: dfm.ModulationPowerMeter | None = None
        self._spec: dspec.SpectrumAverager | None = None
        self._quality = dq.QualityAccumulator()
        self._gate_index = 0  # gates processed (the quality schedule follows it)
        from monitor.engine import QualitySchedule

        self._schedule = QualitySchedule("none")
        self._last_tone: dt.ToneEstimate | None = None
        self._last_tone_gate = -1  # gate index of _last_tone
        self._tone_w = 0.0  # sum of 1/sigma^2 of the tone frequencies
        self._tone_wf = 0.0
        self._tone_amp_sum = 0.0
        self._tone_n = 0
        self._tone_gain_min = math.inf  # least gain of the post chain at a fitted tone
        self._hold = 0.0
        self._last_baseband: dfm.DemodBlock | None = None  # the last gate's
        self._last_offset_hz = 0.0
        self._last_dev = np.zeros(0)
        self._run_t0 = 0.0
        self._settle = 0
        self._summary_cache = None
        self._iq = None if self.kind == "real" else diq.IqStatistics()
        self._levels = _levels()
        self.no_tone_gates = 0
        self._iq_dead_gates = 0  # gates where one I/Q arm carried no signal
        self._restarts = 0  # demodulator runs begun after the first (gaps in the input)
        self._given: FmSetup | None = None  # set-up chosen elsewhere (monitor.parallel)
        self._warm_tone: dt.ToneEstimate | None = None  # a part's tone before its start
        self._part_origin: int | None = None  # gate index a part starts at

    # -- set-up ------------------------------------------------------------------------
    def first_setup(self, x: np.ndarray) -> FmSetup:
        """The set-up one pass chooses from its first gate `x`: find the carrier and
        choose the IF bandwidth and filter (`configure` takes it)."""
        fms = self.fms
        notes: list[str] = []
        health = _iq_health_or_none(x) if self.kind == "complex" else None
        if self.kind == "complex" and health is None:
            dead = "I (left)" if float(np.var(x.real)) <= float(np.var(x.imag)) else "Q (right)"
            raise InputError(
                f"{self.meta.source}: the {dead} channel of the I/Q pair carries no signal in "
                "the first gate; check the stereo connection, or analyse the other channel "
                "with --mode beat"
            )
        if health is not None:
            rho = _channel_correlation(x)
            if abs(rho) > IQ_MAX_CHANNEL_CORRELATION:
                raise InputError(
                    f"{self.meta.source}: the two channels are not an I/Q pair (they carry "
                    f"the same signal{', one inverted' if rho < 0 else ''}: correlation "
                    f"{rho:+.3f}, as mono audio on two channels does); analyse it with "
                    "--mode audio or --mode beat"
                )
        spectrum = _gate_power(x, self.fs, self.kind)  # one transform for both questions
        group = find_carrier(
            x, self.fs, kind=self.kind, near_hz=fms.carrier_near_hz, spectrum=spectrum
        )
        centroid, width, lines = group.centre_hz, group.width_hz, group.lines_hz
        pairs = self._sideband_pairs(group, self.fs / x.shape[0])
        at_edge = self._check_band_edges(group, pairs, notes)
        if fms.if_bandwidth_hz is not None:
            bw = fms.if_bandwidth_hz
        else:
            # the cluster's width plus margin for drift and the skirts
            bw = max(MIN_IF_BANDWIDTH_HZ, 1.3 * width + 100.0)
        if self.kind == "real":
            # keep the IF band inside (0, fs/2) with room for the filter's transition
            room = self._room(centroid)
            if room <= 0:
                raise InputError(f"carrier at {centroid:.1f} Hz is outside the band")
            if fms.if_bandwidth_hz is None:
                bw = min(bw, 2.0 * room * 0.8)
            elif bw / 2 >= room:
                raise InputError(
                    f"--if-bandwidth {bw:g} Hz does not fit around the carrier at "
                    f"{centroid:.1f} Hz between 0 Hz and {self.fs / 2:g} Hz"
                )
        else:
            bw = min(bw, 0.8 * self.fs)
        self._refuse_cut_sidebands(group, pairs, bw)
        # the signal's own power: its group of lines and its IF band (another signal in
        # the recording, outside them, is not this one's and is left out)
        pad = 2.0 * group.spacing_hz
        lo_own = min(float(lines.min()) - pad, centroid - bw / 2)
        hi_own = max(float(lines.max()) + pad, centroid + bw / 2)
        inside = _power_share(spectrum, centroid - bw / 2, centroid + bw / 2, (lo_own, hi_own))
        other = _other_lines_share(spectrum, lo_own, hi_own)
        if other > 1.0 - IF_POWER_MIN_FRACTION:
            notes.append(
                f"{100 * other:.0f}% of the recording's power lies in other signals, "
                f"outside {lo_own:.0f}-{hi_own:.0f} Hz, which are left out (--carrier-near "
                "HZ picks another)"
            )
        if inside < IF_POWER_MIN_FRACTION:
            raise InputError(
                f"{self.meta.source}: the IF bandwidth {bw:g} Hz around the carrier at "
                f"{centroid:.1f} Hz holds only {100 * inside:.0f}% of the signal's power; "
                "widen --if-bandwidth (deviation would read low)"
            )
        if inside < 0.99:
            notes.append(
                f"the IF bandwidth {bw:.0f} Hz holds {100 * inside:.1f}% of the signal's power"
            )
        post = fms.post_filter
        if post is None:
            post = (
                "20-15k"
                if (self.kind == "complex" and self.fs >= POST_MIN_RATE["20-15k"])
                else ("300-3000")
            )
        need = POST_MIN_RATE.get(post)
        if need is not None and self.fs < need:
            raise InputError(
                f"--post-filter {post} needs a sample rate of at least {need:g} Hz "
                f"(the recording has {self.fs:g} Hz)"
            )
        return FmSetup(centroid, bw, post, tuple(notes), at_edge)

    def _room(self, c_hz: float) -> float:
        """Distance from a frequency to the nearer edge of the recording's band (0 Hz and
        fs/2 for a beat note, +/-fs/2 for I/Q)."""
        half = self.fs / 2.0
        return min(c_hz - (0.0 if self.kind == "real" else -half), half - c_hz)

    def _sideband_pairs(self, group: CarrierGroup, bin_hz: float):
        """The group's sideband pairs as [(offset_hz, power, cut_by_edge)]: FM's
        sidebands come in pairs at carrier +/- k fm of equal size (|J_-k| = |J_k|), so a
        line with a mirror line about the centre is one (a lone line, such as a harmonic
        of the carrier, is not); so is a line whose mirror falls at or past the edge of
        the recording's band (its partner cut off there)."""
        c, f, pw = group.centre_hz, group.lines_hz, group.line_power
        half = self.fs / 2.0
        lo_edge = 0.0 if self.kind == "real" else -half
        d = f - c
        tol = np.maximum(3.0 * bin_hz, 0.05 * np.abs(d))
        pairs = []
        total = float(pw.sum())
        for i in np.nonzero(np.abs(d) > tol)[0]:
            mirror = c - d[i]
            if mirror <= lo_edge + tol[i] or mirror >= half - tol[i]:
                # partner cut off, unless the line is a harmonic of the carrier (at k c)
                # or too weak to matter (-40 dB of the group)
                k = round(f[i] / c) if c else 0
                harmonic = k >= 2 and abs(f[i] - k * c) <= tol[i]
                if not harmonic and pw[i] > 1e-4 * total:
                    pairs.append((abs(float(d[i])), 2.0 * float(pw[i]), True))
                continue
            if d[i] < 0:
                continue  # a pair inside the band is counted once, from its upper line
            j = int(np.argmin(np.abs(d + d[i])))  # the line nearest the mirror image
            if abs(d[j] + d[i]) <= tol[i]:
                pairs.append((float(d[i]), float(pw[i] + pw[j]), False))
        return pairs

    def _refuse_cut_sidebands(self, group: CarrierGroup, pairs, bw: float) -> None:
        """Refuse an IF band (or a band edge) that cuts the modulation: when the sideband
        pairs outside the IF band hold more power than those inside, the tone is (mostly)
        filtered out and the deviation would read near zero, however little power the
        sidebands hold against the carrier (beta 0.2: 2%, which the IF share passes).
        `pairs` are the group's `_sideband_pairs`."""
        out = [(d, pw) for d, pw, cut in pairs if cut or d > bw / 2]
        inside = sum(pw for d, pw, cut in pairs if not cut and d <= bw / 2)
        if not out or sum(pw for _, pw in out) <= inside:
            return
        c = group.centre_hz
        first_out = min(d for d, _ in out)
        want = 2.4 * first_out
        room = self._room(c)
        ask = (
            f"widen --if-bandwidth to at least {want:.0f} Hz"
            if want / 2 < room * 0.95
            else (
                f"a band that wide ({want:.0f} Hz) does not fit around the carrier in this "
                "recording: tune the signal towards the middle of the band"
                + (" or record at a higher sample rate" if want > self.fs / 2 else "")
            )
        )
        raise InputError(
            f"{self.meta.source}: the sidebands of the signal at {c:.1f} Hz lie from "
            f"{first_out:.0f} Hz away, outside the IF bandwidth {bw:g} Hz or the "
            "recording's band (a modulating tone there would be filtered out and the "
            f"deviation read as zero); {ask}"
        )

    def _check_band_edges(self, group: CarrierGroup, pairs, notes: list[str]) -> bool:
        """A signal reaching past the edge of the recording's band (0 Hz and fs/2 for a
        beat note, +/-fs/2 for I/Q) is cut there or folded back onto itself. The extent
        that holds 99% of the group's line power, seen from its centre, must fit inside
        the band, or it is refused; when only the next line beyond that extent (under 1%
        of the power) crosses the edge, a note says so. (A signal folded at the edge can
        look narrower than it is: the note is the most a spectrum can tell there.)
        `pairs` are the group's `_sideband_pairs`; without any there is nothing to fold
        (a lone carrier, perhaps with harmonics)."""
        half = self.fs / 2.0
        f, pw, c = group.lines_hz, group.line_power, group.centre_hz
        total = float(pw.sum())
        if total <= 0 or not pairs:
            return False
        order = np.argsort(np.abs(f - c))
        held = np.cumsum(pw[order]) / total
        d99 = float(np.abs(f - c)[order][int(np.searchsorted(held, 0.99))])
        room = self._room(c)
        lo_edge = 0.0 if self.kind == "real" else -half
        edge = f"{lo_edge if c - lo_edge < half - c else half:g} Hz"
        if d99 >= room:
            raise InputError(
                f"{self.meta.source}: the signal around {c:.0f} Hz reaches past the edge of "
                f"the recording's band at {edge} (99% of its power lies within "
                f"+/-{d99:.0f} Hz of it): the rest is cut off or folded back, so carrier and "
                "deviation cannot be measured; tune the receiver so the signal sits inside "
                "the band" + (", or record at a higher sample rate" if d99 > 0.4 * half else "")
            )
        if d99 + group.spacing_hz >= room:
            notes.append(
                f"the signal's outer lines (under 1% of its power) reach past the band edge "
                f"at {edge} and fold back: figures may be off by about that much, more if "
                "the folding hides more of it; a signal nearer the middle of the band "
                "is safer"
            )
            return True
        return False

    def configure(self, setup: FmSetup, *, start_frame: int = 0) -> None:
        """Build the demodulator and the filters for `setup`; `start_frame` > 0 makes
        this processor the one for the part of the stream from that frame on (its BS.412
        windows then continue the stream's clock)."""
        post = setup.post_filter
        try:
            self._demod = dfm.FmDemodulator(
                self.fs,
                setup.carrier_hz,
                setup.bandwidth_hz,
                kind=self.kind,
                min_fs_out_hz=POST_MIN_RATE.get(post),
                oversample=IF_OVERSAMPLE,
                droop_band_hz=POST_UPPER_HZ.get(post, setup.bandwidth_hz / 2.0),
            )
        except ValueError as exc:
            raise InputError(f"{self.meta.source}: cannot demodulate here: {exc}") from None
        self.setup = setup
        fs_out = self._demod.fs_out_hz
        self.post_filter = post
        chain = self._post_chain(post, self.fms.deemphasis, fs_out)
        from dsp import filters

        self._post_filter = None if chain is None else filters.SosStream(chain)
        self._post_sos = chain
        self._power = dfm.ModulationPowerMeter(
            fs_out, start_index=self._demod.outputs_for(start_frame)
        )
        nfft = 1 << max(8, min(14, int(math.log2(max(256, fs_out / 4.0)))))
        # at least one segment in every gate (short gates: shorter segments)
        per_gate = int(self.settings.gate_s * self.fs) // self._demod.decimation
        while nfft > 16 and nfft > per_gate:
            nfft //= 2
        self._spec = dspec.SpectrumAverager(fs_out, nfft, kind="complex", overlap=0.0)

    @staticmethod
    def _post_chain(post: str, deemph: str, fs_out: float):
        from dsp import filters

        parts = []
        sos = filters.filter_sos(post, fs_out) if post != "none" else None
        if sos is not None:
            parts.append(sos)
        tau = DEEMPHASIS[deemph]
        if tau is not None:
            parts.append(filters.emphasis_sos(tau, fs_out))
        return np.vstack(parts) if parts else None

    def settle_s(self) -> float:
        """How long the post-demodulation filters take to settle (seconds)."""
        tau = DEEMPHASIS[self.fms.deemphasis] or 0.0
        return SETTLE_S[self.post_filter] + 8 * tau

    # -- per gate ----------------------------------------------------------------------
    def process(self, x: np.ndarray, t_s: float, contiguous: bool, overflow: bool):
        """Measure one gate; returns its Reading."""
        return self.process_many([(x, t_s, contiguous, overflow)])[0]

    def process_many(self, gates) -> list:
        """Measure consecutive gates, [(samples, t_s, contiguous, overflow), ...], in
        order; returns their Readings.

        The same operations as gate by gate, in the same order within each chain of
        state (demodulator, filters, tone tracking, schedules, sums), so the readings are
        those of `process` called gate by gate, bit for bit. Taken stage by stage over
        the gates, the small-array stages (the phase line, the tone fit, the quality
        meter) run with their code and tables warm instead of after each gate's large
        transforms: a recording analysed whole goes through them in batches.
        """
        gates = list(gates)
        # a gap restarts the demodulator and the filters: the gates from there on are a
        # batch of their own, after the gates before it are through every stage
        cut = next((i for i in range(1, len(gates)) if not gates[i][2]), None)
        if cut is not None:
            return self.process_many(gates[:cut]) + self.process_many(gates[cut:])
        ctx = [self._demodulate(*g) for g in gates]
        for c in ctx:
            self._measure_carrier_and_deviation(c)
        for c in ctx:
            self._measure_tone(c)
        self._measure_quality(ctx)
        return [self._reading(c) for c in ctx]

    def _demodulate(self, x: np.ndarray, t_s: float, contiguous: bool, overflow: bool) -> dict:
        gate_index = self._gate_index
        self._gate_index += 1
        lvl = self._levels.add(x)
        if self._demod is None:
            self.configure(self._given or self.first_setup(x))
            self._restart_run(t_s)
        elif not contiguous:
            self._demod.reset()
            self._restart_run(t_s)
            self._restarts += 1
        if self.kind == "complex":
            health = _iq_health_or_none(x)
            if health is None:
                self._iq_dead_gates += 1  # an arm without signal: no figures, no correction
            else:
                self._iq.add(health)
                if self.fms.iq_correct:
                    x = diq.iq_correct(x, health)
        return {
            "gate_index": gate_index,
            "t_s": t_s,
            "gate_s": x.shape[0] / self.fs,
            "contiguous": contiguous,
            "overflow": overflow,
            "lvl": lvl,
            # (the level meter above refused NaN and inf: its sum is finite)
            "block": self._demod.process_block(x, check_finite=False),
            "dev_f": None,
            "tone": None,
            "qual": None,
        }

    def _measure_carrier_and_deviation(self, c: dict) -> None:
        block = c["block"]
        inst = block.inst_hz
        if block.n_baseband < 32:
            # too few samples to measure; the BS.412 clock still moves over them
            cut = min(self._settle, inst.shape[0] // 2)
            self._settle -= cut
            self._power.skip(inst.shape[0])
            return
        fs_out = block.fs_out_hz
        line = dfm.phase_line(block)
        offset = line.offset_hz
        c["line"] = line
        c["cnr_db"] = cnr_db = 10 * math.log10(line.cnr) if line.cnr > 0 else -math.inf
        # The baseband samples of one demodulator run are consecutive, so their index
        # fixes each gate's time up to a constant, which is all the phase join needs; the
        # join follows the baseband phase, i.e. the offset from the mixer.
        t_ref = self._run_t0 + block.start_index / fs_out + line.t_center_s
        self._join.add(
            t_ref,
            offset,
            line.sigma_offset_hz,
            line.phase_rad,
            line.sigma_phase_rad,
            c["contiguous"] and not c["overflow"],
        )
        self._cnr.add(cnr_db)
        self._spectrum_update(block, c["gate_index"])
        self._last_baseband = block
        self._last_offset_hz = offset
        dev_f = self._deviation(inst - offset)
        self._last_dev = c["dev_f"] = dev_f
        # the discriminator's output is finite by construction (so is the filter's)
        figs = dfm.deviation_figures(dev_f, check_finite=False)
        c["figs"] = figs
        self._dev_n += figs.n_samples
        self._dev_ms_n += figs.rms_hz**2 * figs.n_samples
        self._dev_peak_pos = max(self._dev_peak_pos, figs.peak_pos_hz)
        self._dev_peak_neg = min(self._dev_peak_neg, figs.peak_neg_hz)
        self._hist.update(dev_f, check_finite=False)
        self._power.update(dev_f, check_finite=False)
        self._hold = max(self._hold, figs.peak_pos_hz, -figs.peak_neg_hz)
        c["hold"] = self._hold

    def _measure_tone(self, c: dict) -> None:
        dev_f = c["dev_f"]
        if dev_f is None or c["cnr_db"] < CNR_MIN_DB or dev_f.shape[0] < 64:
            return
        tone = self._tone(dev_f, c["block"].fs_out_hz, self._last_tone)
        if tone is None:
            return
        c["tone"] = tone
        self._last_tone, self._last_tone_gate = tone, c["gate_index"]
        w = 1.0 / max(tone.uncertainty_hz, 1e-300) ** 2
        self._tone_w += w
        self._tone_wf += w * tone.frequency_hz
        # the tone's deviation on the carrier: without the discriminator's residual droop
        # nor the post filter's and de-emphasis's gain at the tone (both known exactly)
        gain = float(self._demod.droop_response(tone.frequency_hz))
        if self._post_sos is not None:
            post_gain = dfilters.sos_gain(
                self._post_sos,
                min(tone.frequency_hz, c["block"].fs_out_hz / 2.0),
                c["block"].fs_out_hz,
            )
            self._tone_gain_min = min(self._tone_gain_min, post_gain)
            gain *= post_gain
        c["tone_amp"] = amp = tone.amplitude / gain
        self._tone_amp_sum += amp
        self._tone_n += 1

    def _measure_quality(self, ctx: list[dict]) -> None:
        """The quality meter on the demodulated audio of each gate with a tone, the
        gates of a batch together (`dsp.quality.measure_quality_many`: the figures of
        one gate at a time, bit for bit)."""
        todo: list[tuple[dict, bool]] = []
        fs_out = self._demod.fs_out_hz  # (set up by the batch's first gate)
        for c in ctx:
            full = self._schedule.next_gate(c["gate_index"])
            tone = c["tone"]
            if tone is None:
                self.no_tone_gates += 1
                continue
            if 0 < tone.frequency_hz < fs_out / 2:
                # the spur search (the dearest part) on a sample of gates, as in audio
                # mode (engine.QualitySchedule); no hum fit: hum on the modulation is
                # noise here (SNR counts it so either way) and has no figure of its own.
                # Without mains lines the schedule does not look at the figures, so it
                # runs ahead of them.
                self._schedule.measured(None, full)
                todo.append((c, full))
        figs = dq.measure_quality_many(
            [c["dev_f"] for c, _ in todo],
            fs_out,
            [c["tone"].frequency_hz for c, _ in todo],
            sfdr=[full for _, full in todo],
        )
        for (c, _), qual in zip(todo, figs, strict=True):
            c["qual"] = qual
        for c in ctx:  # the summary's sums in gate order
            if c.get("qual") is not None:
                self._quality.add(c["qual"])

    def _reading(self, c: dict):
        from monitor.engine import Reading, quality_fields

        if "figs" not in c:
            return Reading(
                t_s=c["t_s"], gate_s=c["gate_s"], frequency_hz=None, uncertainty_hz=None,
                amplitude_dbfs=None, tone_snr_db=None, contiguous=c["contiguous"],
                overflow=c["overflow"], **c["lvl"],
            )  # fmt: skip
        k = self.k
        line, figs, tone = c["line"], c["figs"], c["tone"]
        carrier = self.setup.carrier_hz + line.offset_hz
        s_f = line.sigma_offset_hz
        rf = rf_from_carrier(self.meta, carrier * k)
        n_h = max(1, self.meta.harmonic)
        return Reading(
            t_s=c["t_s"],
            gate_s=c["gate_s"],
            frequency_hz=(rf / n_h if rf is not None else carrier * k),
            uncertainty_hz=s_f * k / (n_h if rf is not None else 1),
            amplitude_dbfs=None,
            tone_snr_db=None,
            **{f: v for f, v in quality_fields(c["qual"]).items() if f in _DEMOD_FIELDS},
            carrier_hz=carrier * k,
            carrier_uncertainty_hz=s_f * k,
            rf_hz=rf,
            fundamental_hz=None if rf is None else rf / n_h,
            deviation_peak_pos_hz=figs.peak_pos_hz * k,
            deviation_peak_neg_hz=figs.peak_neg_hz * k,
            deviation_peak_avg_hz=figs.peak_avg_hz * k,
            deviation_rms_hz=figs.rms_hz * k,
            deviation_rms_sqrt2_hz=figs.rms_hz * k * math.sqrt(2.0),
            deviation_hold_hz=c["hold"] * k,
            mod_tone_hz=None if tone is None else tone.frequency_hz * k,
            mod_index=None if tone is None else c["tone_amp"] / tone.frequency_hz,
            cnr_db=c["cnr_db"],
            contiguous=c["contiguous"],
            overflow=c["overflow"],
            **c["lvl"],
        )

    def _deviation(self, dev: np.ndarray) -> np.ndarray:
        """Post-filter the deviation; drop what a (re)started filter gives while it
        settles (the BS.412 clock moves over it)."""
        dev_f = self._post(dev, overwrite=True)
        if self._settle:
            cut = min(self._settle, dev_f.shape[0] // 2)
            dev_f = dev_f[cut:]
            self._settle -= cut
            self._power.skip(cut)
        return dev_f

    @staticmethod
    def _tone(dev_f: np.ndarray, fs_out: float, prev) -> dt.ToneEstimate | None:
        """The modulating tone: followed from the last gate's, searched afresh when it
        was lost; None below 20 dB of gate SNR or 0.5 Hz of deviation."""
        try:
            tone = None
            if prev is not None:
                tone = dt.estimate_tone(
                    dev_f, fs_out, start_hz=prev.frequency_hz, check_finite=False
                )
                if abs(tone.frequency_hz - prev.frequency_hz) > fs_out / dev_f.shape[0]:
                    tone = None
            if tone is None:
                tone = dt.estimate_tone(dev_f, fs_out, check_finite=False)
        except ValueError:
            return None
        if tone.gate_snr_db >= 20.0 and tone.amplitude > 0.5:
            return tone
        return None

    def _spectrum_update(self, block: dfm.DemodBlock, gate_index: int) -> None:
        """A share of each gate for the averaged spectrum (see SPECTRUM_FULL_GATES)."""
        nfft = self._spec.nfft
        have = block.n_baseband // nfft
        if not have:
            return
        if gate_index < SPECTRUM_FULL_GATES:
            k = min(have, SPECTRUM_SEGMENTS_PER_GATE)
            self._spec.update(block.baseband(0, k * nfft), weight=1.0 / k)
        elif gate_index % SPECTRUM_STRIDE == 0:
            a = (gate_index // SPECTRUM_STRIDE % min(have, SPECTRUM_SEGMENTS_PER_GATE)) * nfft
            self._spec.update(block.baseband(a, a + nfft))

    def _restart_run(self, t_s: float) -> None:
        """A new demodulator run: forget filter state, let the filters settle again."""
        if self._post_filter is not None:
            self._post_filter.reset()
        self._run_t0 = t_s
        self._settle = int(math.ceil(self.settle_s() * self._demod.fs_out_hz))

    def _post(self, dev: np.ndarray, *, overwrite: bool = False) -> np.ndarray:
        """The post-demodulation filter chain (state kept); overwrite: dev is ours."""
        if self._post_filter is None:
            return dev
        return self._post_filter(dev, overwrite=overwrite)

    # -- a part of a stream (monitor.parallel) -------------------------------------------
    def use_setup(self, setup: FmSetup) -> None:
        """Take `setup` (from `first_setup` on the same first gate) instead of choosing
        again at the first gate: the part of a stream that starts at its beginning."""
        self._given = setup

    def prepare_part(self, source, start: int, gate_n: int, gate_index: int, setup) -> None:
        """Make this processor the one for the part of `source` that starts at frame
        `start` (gate `gate_index`, a multiple of the quality schedule's period), in a
        stream whose first gate chose `setup`.

        The demodulator and the post-demodulation filters are run over what comes
        before the part (the gate before it and long enough before that for the
        filters to settle to rounding), so the part's figures are those of one pass; the
        modulating tone of the gate before the part is measured afresh (`warm_tone`),
        for the caller to compare with the tone one pass follows there (`joins`).
        """
        from monitor.engine import SFDR_EVERY_GATES

        if gate_index % SFDR_EVERY_GATES:
            raise ValueError(f"gate_index={gate_index} must be a multiple of {SFDR_EVERY_GATES}")
        self._gate_index = self._part_origin = gate_index
        self.configure(setup, start_frame=start)
        demod = self._demod
        lead = demod.settle_inputs + int(math.ceil(PART_SETTLE_FACTOR * self.settle_s() * self.fs))
        gate_start = max(0, start - gate_n)
        # the run-in starts on a gate boundary and goes gate by gate, as one pass does:
        # each gate its own carrier offset (and I/Q correction) into the post filter, so
        # the filter's state at the part's start is one pass's to rounding; the first
        # gate, sought into, gives a transient that the gates after it let die out
        pre = max(0, gate_start - -(-lead // gate_n) * gate_n)
        demod.seek(pre)
        last = None
        for a in range(pre, start, gate_n):
            x = source.samples_between(a, a + gate_n)
            if self.kind == "complex" and self.fms.iq_correct:
                health = _iq_health_or_none(x)
                if health is not None:
                    x = diq.iq_correct(x, health)
            blk = demod.process_block(x)
            offset = dfm.phase_line(blk).offset_hz if blk.n_baseband >= 2 else 0.0
            last = self._post(blk.inst_hz - offset)
        self._run_t0 = 0.0
        self._settle = 0
        self._warm_tone = None
        if last is not None and last.shape[0] >= 64:
            self._warm_tone = self._tone(last, demod.fs_out_hz, None)
        self._last_tone = self._warm_tone
        self._last_tone_gate = gate_index - 1 if self._warm_tone is not None else -1

    def joins(self, later: FmProcessor) -> bool:
        """Whether `later` (prepared with `prepare_part`) continues this processor as
        one pass would: the same demodulator run, and the same modulating tone followed
        into its first gate."""
        if later._part_origin != self._gate_index or self._restarts or later._restarts:
            return False
        mine = self._last_tone if self._last_tone_gate == self._gate_index - 1 else None
        theirs = later._warm_tone
        if self._last_tone is not None and mine is None:
            return False  # one pass follows an older tone there; a fresh search may differ
        if mine is None or theirs is None:
            return mine is None and theirs is None
        n = self._last_dev.shape[0] or 1
        bin_hz = self._demod.fs_out_hz / n
        return abs(mine.frequency_hz - theirs.frequency_hz) <= 1e-3 * bin_hz

    def later_readings(self, readings: list) -> list:
        """The readings of the part after this one's, with the peak hold carried over."""
        hold = self._hold * self.k
        return [
            replace(r, deviation_hold_hz=hold)
            if r.deviation_hold_hz is not None and r.deviation_hold_hz < hold
            else r
            for r in readings
        ]

    def absorb(self, later: FmProcessor) -> None:
        """Append the gates of `later` (see `joins`): afterwards the summaries are those
        of one processor that measured both parts."""
        self._join.merge(later._join)
        self._cnr.merge(later._cnr)
        self._dev_n += later._dev_n
        self._dev_ms_n += later._dev_ms_n
        self._dev_peak_pos = max(self._dev_peak_pos, later._dev_peak_pos)
        self._dev_peak_neg = min(self._dev_peak_neg, later._dev_peak_neg)
        self._hist.merge(later._hist)
        self._power.merge(later._power)
        self._spec.merge(later._spec)
        self._quality.merge(later._quality)
        self._levels.merge(later._levels)
        if self._iq is not None:
            self._iq.merge(later._iq)
        self._tone_w += later._tone_w
        self._tone_wf += later._tone_wf
        self._tone_amp_sum += later._tone_amp_sum
        self._tone_n += later._tone_n
        self._tone_gain_min = min(self._tone_gain_min, later._tone_gain_min)
        self._hold = max(self._hold, later._hold)
        self.no_tone_gates += later.no_tone_gates
        self._iq_dead_gates += later._iq_dead_gates
        self._restarts += later._restarts
        if later._last_tone is not None:
            self._last_tone, self._last_tone_gate = later._last_tone, later._last_tone_gate
        for name in (
            "_gate_index", "_schedule", "_demod", "_post_filter", "_settle", "_run_t0",
            "_last_baseband", "_last_offset_hz", "_last_dev",
        ):  # fmt: skip
            setattr(self, name, getattr(later, name))
        self._summary_cache = None

    # -- views -------------------------------------------------------------------------
    def view(self, x: np.ndarray, r):
        from monitor.engine import GateView, spectrum_view, waveform_view

        if self._last_baseband is not None and self._demod is not None:
            fs_out = self._demod.fs_out_hz
            freqs, db = spectrum_view(self._last_baseband.baseband(), fs_out)
            base = self.setup.carrier_hz
            freqs = freqs + base
            markers: tuple[float, ...] = (base + self._last_offset_hz,)
            if r.mod_tone_hz:
                fm_ = r.mod_tone_hz / self.k
                kmax = max(1, min(8, int((r.deviation_peak_avg_hz or 0) / fm_) + 2))
                markers = markers + tuple(
                    base + self._last_offset_hz + j * fm_ for j in range(-kmax, kmax + 1) if j
                )
            wt, wy = waveform_view(self._last_dev, fs_out)
            return GateView(r.t_s, freqs, db, markers, None, wt, wy, "Hz")
        freqs, db = spectrum_view(x, self.fs)
        wt, wy = waveform_view(x, self.fs)
        return GateView(r.t_s, freqs, db, (), None, wt, wy, "FS")

    # -- summary -----------------------------------------------------------------------
    def tone_summary(self):
        from monitor.engine import ToneSummary

        if not self._join.k:
            return ToneSummary(None, None, None, None, None, 0, None)
        comb = self._join.result()
        slope = self._join.drift_hz_per_s
        return ToneSummary(
            frequency_hz=(self.setup.carrier_hz + comb.frequency_hz) * self.k,
            uncertainty_hz=comb.uncertainty_hz * self.k,
            amplitude_dbfs=self._levels.carrier_dbfs(),
            method=comb.method,
            birge_ratio=comb.birge_ratio,
            n_gates=comb.n_gates,
            drift_hz_per_s=None if slope is None else float(slope * self.k),
        )

    def quality_summary(self):
        from monitor.engine import quality_summary

        # the demodulated audio's figures; hum is not a figure of the modulation
        return replace(
            quality_summary(
                self._quality.result() if self._quality.gates else None, self.post_filter
            ),
            hum_hz=None,
            hum_db=None,
        )

    def fm_summary(self) -> FmSummary | None:
        key = self._join.k
        if self._summary_cache is not None and self._summary_cache[0] == key:
            return self._summary_cache[1]
        s = self._fm_summary()
        self._summary_cache = (key, s)
        return s

    def _fm_summary(self) -> FmSummary | None:
        if not self._join.k or not self._dev_n:
            return None
        k = self.k
        comb = self._join.result()
        carrier = (self.setup.carrier_hz + comb.frequency_hz) * k
        carrier_u = comb.uncertainty_hz * k
        meta = self.meta
        rf = rf_from_carrier(meta, carrier)
        n_h = max(1, meta.harmonic)
        peak_pos = self._dev_peak_pos * k
        peak_neg = self._dev_peak_neg * k
        ms = self._dev_ms_n / self._dev_n
        rms = math.sqrt(ms) * k
        tone_hz = tone_u = tone_peak = mod_index = None
        if self._tone_n:
            tone_hz = self._tone_wf / self._tone_w * k
            tone_u = 1.0 / math.sqrt(self._tone_w) * k
            tone_peak = self._tone_amp_sum / self._tone_n * k
            mod_index = tone_peak / tone_hz
        peak_avg = (peak_pos - peak_neg) / 2.0
        dev = DeviationSummary(
            peak_pos_hz=peak_pos,
            peak_neg_hz=peak_neg,
            peak_avg_hz=peak_avg,
            rms_hz=rms,
            rms_sqrt2_hz=rms * math.sqrt(2.0),
            tone_peak_hz=tone_peak,
            hold_hz=self._hold * k,
            exceeded_10pct_hz=self._hist.exceeded_hz(0.10) * k,
            exceeded_1pct_hz=self._hist.exceeded_hz(0.01) * k,
            exceeded_0p1pct_hz=self._hist.exceeded_hz(0.001) * k,
            histogram=self._hist.to_dict(),
        )
        carson = None
        if tone_hz is not None:
            carson = dfm.carson_bandwidth_hz(tone_peak if tone_peak else peak_avg, tone_hz)
        spec = self._spec.result() if self._spec is not None and self._spec.averages else None
        obw = obw_lo = obw_hi = bw26 = None
        if spec is not None:
            lo, hi, bw = dspec.occupied_bandwidth_hz(spec, 0.99)
            base = self.setup.carrier_hz
            obw, obw_lo, obw_hi = bw * k, lo + base, hi + base
            bw26 = dspec.xdb_bandwidth_hz(spec, 26.0)[2] * k
        bessel = None
        if tone_hz is not None and self._last_baseband is not None:
            bessel = self._bessel(tone_hz / k)
        mp = self._power.result()
        quality = self.quality_summary()
        cnr_db = self._cnr.median()
        return FmSummary(
            carrier_hz=carrier,
            carrier_uncertainty_hz=carrier_u,
            carrier_method=comb.method,
            rf_hz=rf,
            rf_uncertainty_hz=None if rf is None else carrier_u,
            fundamental_hz=None if rf is None else rf / n_h,
            fundamental_deviation_hz=(tone_peak if tone_peak is not None else peak_avg) / n_h,
            dial_hz=meta.dial_hz if meta.mode == "beat" else (meta.center_hz or meta.dial_hz),
            sideband=meta.sideband if meta.mode == "beat" else None,
            harmonic=n_h,
            if_bandwidth_hz=self.setup.bandwidth_hz,
            post_filter=self.post_filter,
            deemphasis=self.fms.deemphasis,
            deviation=dev,
            mod_tone_hz=tone_hz,
            mod_tone_uncertainty_hz=tone_u,
            mod_index=mod_index,
            bessel_mod_index=None if bessel is None else bessel.mod_index,
            bessel=bessel,
            carson_bw_hz=carson,
            occupied_bw_hz=obw,
            occupied_low_hz=obw_lo,
            occupied_high_hz=obw_hi,
            bw_26db_hz=bw26,
            mod_power_dbr=mp.power_dbr,
            mod_power_window_s=mp.window_s,
            mod_power_whole_record=mp.whole_record,
            cnr_db=cnr_db,
            demod_snr_db=quality.snr_db,
            demod_sinad_db=quality.sinad_db,
            demod_thd_percent=quality.thd_percent,
        )

    def _bessel(self, fm_hz: float) -> BesselSummary | None:
        z = self._last_baseband.baseband()
        fs_out = self._demod.fs_out_hz
        beta_guess = (
            (self._last_tone.amplitude / self._last_tone.frequency_hz) if self._last_tone else 1
        )
        kmax = int(min(40, max(3, math.ceil(beta_guess + 4))))
        # all lines must lie inside the baseband's band
        while kmax > 1 and abs(self._last_offset_hz) + kmax * fm_hz >= 0.45 * fs_out:
            kmax -= 1
        try:
            amps = dfm.fm_line_amplitudes(z, fs_out, self._last_offset_hz, fm_hz, kmax)
            fit = dfm.fit_bessel(amps, mod_tone_hz=fm_hz)
        except ValueError:
            return None
        lines = tuple(
            float(20 * math.log10(a / fit.scale)) if a > 0 and fit.scale > 0 else -math.inf
            for a in amps
        )
        return BesselSummary(
            mod_index=fit.mod_index,
            residual=fit.residual,
            carrier_depth_db=fit.carrier_depth_db,
            nearest_carrier_null=fit.nearest_carrier_null,
            nearest_null_mod_index=fit.nearest_null_mod_index,
            lines_db=lines,
        )

    def iq_summary(self) -> IqSummary | None:
        if self._iq is None or not self._iq.n:
            return None
        try:
            h = self._iq.result()
        except ValueError:
            return None
        return IqSummary(
            dc_i=h.dc_i,
            dc_q=h.dc_q,
            gain_imbalance_db=h.gain_imbalance_db,
            phase_imbalance_deg=h.phase_imbalance_deg,
            image_rejection_db=h.image_rejection_db,
            corrected=self.fms.iq_correct,
        )

    def summary_warnings(self) -> list[str]:
        out = list(self.setup.notes) if self.setup is not None else []
        if self._iq_dead_gates:
            out.append(
                f"I/Q: one arm carried no signal in {self._iq_dead_gates} gate(s) (a dead or "
                "unconnected channel?): no I/Q health there, nor correction"
            )
        s = self.fm_summary()
        if s is None:
            return out
        if s.carson_bw_hz is not None and s.carson_bw_hz > s.if_bandwidth_hz * 1.02:
            out.append(
                f"Carson bandwidth {s.carson_bw_hz:.0f} Hz exceeds the IF bandwidth "
                f"{s.if_bandwidth_hz:.0f} Hz: deviation may read low (raise --if-bandwidth)"
            )
        if s.mod_tone_hz is not None and s.mod_tone_hz > s.if_bandwidth_hz / 2:
            out.append(f"modulating tone {s.mod_tone_hz:.0f} Hz is above half the IF bandwidth")
        if s.cnr_db is not None and s.cnr_db < 10:
            out.append(
                f"carrier-to-noise ratio {s.cnr_db:.1f} dB: the discriminator output is noisy "
                "and peak deviation reads high"
            )
        if (
            self.setup.at_band_edge
            and s.bessel is not None
            and s.bessel.residual > EDGE_BESSEL_RESIDUAL
        ):
            out.append(
                f"the lines do not fit FM by one tone (Bessel fit residual "
                f"{s.bessel.residual:.2g}) and the signal reaches the band's edge: it is "
                "folded there, so the carrier, deviation and index above are NOT to be "
                "trusted; tune the signal towards the middle of the band"
            )
        rf_note = rf_warning(self.meta, s.carrier_hz)
        if rf_note is not None:
            out.append(rf_note)
        if not self._tone_n:
            out.append("no modulating tone found: modulation index and Bessel fit not given")
        elif self._tone_gain_min < TONE_GAIN_WARN:
            out.append(
                f"the modulating tone lies where the post filter ({self.post_filter}, "
                f"de-emphasis {self.fms.deemphasis}) passes only "
                f"{20 * math.log10(max(self._tone_gain_min, 1e-12)):.1f} dB: its deviation "
                "and the modulation index are scaled up by that much and carry its noise "
                "(--post-filter none measures it directly)"
            )
        return out

    def extra(self) -> dict:
        d: dict = {}
        s = self.fm_summary()
        if s is not None:
            d["fm"] = _as_dict(s)
        iq = self.iq_summary()
        if iq is not None:
            d["iq"] = _as_dict(iq)
        return d


_SCALARS = (int, float, str, bool, type(None))


def _as_dict(obj):
    """`dataclasses.asdict` without its deep copy of every element: sequences of plain
    numbers (a deviation histogram holds thousands) are passed on as they are."""
    if is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: _as_dict(getattr(obj, f.name)) for f in fields(obj)}
    if isinstance(obj, dict):
        return {k: _as_dict(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        if all(isinstance(v, _SCALARS) for v in obj):
            return obj
        return type(obj)(_as_dict(v) for v in obj)
    return obj


class _levels:
    """Level accounting shared by the FM modes (real or complex samples)."""

    def __init__(self):
        from monitor.engine import _LevelAccumulator

        self.acc = _LevelAccumulator()
        self.sum_abs2 = 0.0
        self.n = 0

    def add(self, x: np.ndarray) -> dict:
        # complex samples are measured as the interleaved I, Q rails (a view, no copy):
        # the level of each rail, and sum |z|^2 = sum of the rails' squares
        xr = np.ascontiguousarray(x).view(np.float64) if np.iscomplexobj(x) else x
        lvl = dq.measure_level(xr)
        self.acc.add_level(lvl)
        self.sum_abs2 += lvl.mean_square * xr.shape[0]
        self.n += x.shape[0]
        return {
            "rms_dbfs": lvl.rms_dbfs,
            "peak_dbfs": lvl.peak_dbfs,
            "clipped_samples": lvl.clipped_samples,
        }

    def merge(self, other: _levels) -> None:
        self.acc.merge(other.acc)
        self.sum_abs2 += other.sum_abs2
        self.n += other.n

    def summary(self):
        return self.acc.summary()

    def carrier_dbfs(self) -> float:
        ms = self.sum_abs2 / max(1, self.n)
        return 10 * math.log10(ms) if ms > 0 else -math.inf


def _channel_correlation(z: np.ndarray) -> float:
    """Normalised correlation of the I and Q rails of a gate (means removed)."""
    i = z.real - z.real.mean()
    q = z.imag - z.imag.mean()
    den = math.sqrt(float(np.dot(i, i)) * float(np.dot(q, q)))
    return float(np.dot(i, q)) / den if den > 0 else 0.0


def _other_lines_share(spectrum, lo_hz: float, hi_hz: float) -> float:
    """Share of a gate's power above the noise floor held by other signals' lines outside
    lo_hz..hi_hz: bins standing CARRIER_MIN_SNR_DB above the median floor, with their two
    neighbours each side (a Hann window's main lobe); noise alone gives about none."""
    freqs, p = spectrum
    floor = float(np.median(p))
    excess = np.maximum(p - floor, 0.0)
    total = float(excess.sum())
    if total <= 0:
        return 0.0
    strong = (p > floor * 10 ** (CARRIER_MIN_SNR_DB / 10)) & ((freqs < lo_hz) | (freqs > hi_hz))
    lobe = np.convolve(strong.astype(np.int8), np.ones(5, dtype=np.int8), mode="same") > 0
    lobe &= (freqs < lo_hz) | (freqs > hi_hz)
    return float(excess[lobe].sum()) / total


def _iq_health_or_none(z):
    """I/Q health of a gate, or None when one arm carries no signal there."""
    try:
        return diq.iq_health(z)
    except ValueError:
        return None


def make_processor(meta: StreamMeta, settings) -> FmProcessor:
    if meta.mode not in ("beat", "iq"):
        raise ValueError(f"mode={meta.mode!r} is not an FM mode")
    return FmProcessor(meta, settings)


__all__ = [
    "CarrierGroup",
    "FmProcessor",
    "FmSettings",
    "FmSetup",
    "FmSummary",
    "IqSummary",
    "find_carrier",
    "make_processor",
]
