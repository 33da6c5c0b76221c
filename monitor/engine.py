"""The block engine: blocks in, one reading per gate and a summary of the whole record.

One engine serves the offline path (`analyze`) and the live path (sound card, replay):
it keeps its state across blocks, never holds more than one gate of samples, and knows
nothing of where blocks come from. Per input mode a processor measures each gate; the
engine assembles gates, applies the clock correction and builds the summary.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable
from dataclasses import asdict, dataclass, field, fields

import numpy as np

from dsp import quality as dq
from dsp import tone as dt
from monitor.blocks import Block, StreamMeta

GATE_MIN_S = 0.1
GATE_MAX_S = 100.0

# Doubtful-input thresholds (common practice for sound-card measurement).
DC_WARN_FRACTION = 0.01  # |mean| above 1% of full scale
LOW_LEVEL_DBFS = -60.0
SILENCE_DBFS = -110.0
# Integrated SNR (N * eta) below which a gate holds no usable tone: the estimator's
# threshold, where outliers begin, lies near 12-16 dB (references.md [computed]).
TONE_GATE_SNR_MIN_DB = 20.0
# SFDR needs a fine spectrum; searching one gate in this many keeps the quality meter
# cheap while the summary's SFDR still covers the record.
SFDR_EVERY_GATES = 8


@dataclass(frozen=True)
class AnalysisSettings:
    """What to measure and how; shared by `analyze`, `live` and replays."""

    mode: str = "audio"
    gate_s: float = 1.0
    near_hz: float | None = None
    band_hz: tuple[float, float] | None = None
    filter: str = "none"
    mains: str = "auto"
    n_harmonics: int = 10
    fm: object | None = None  # monitor.fm_engine.FmSettings for beat / iq
    # audio mode: Hz of deviation per unit (full scale) of the receiver's audio after its
    # de-emphasis is undone (from `calibrate deviation`), and that de-emphasis
    deviation_hz_per_unit: float | None = None
    receiver_deemphasis: str = "none"

    def __post_init__(self):
        if not (GATE_MIN_S <= self.gate_s <= GATE_MAX_S):
            raise ValueError(f"gate_s={self.gate_s} must be in [{GATE_MIN_S}, {GATE_MAX_S}] s")
        if self.band_hz is not None:
            lo, hi = self.band_hz
            if not (0 <= lo < hi):
                raise ValueError(f"band_hz={self.band_hz} must satisfy 0 <= LO < HI")
        if self.near_hz is not None and not self.near_hz > 0:
            raise ValueError(f"near_hz={self.near_hz} must be positive")


@dataclass(frozen=True)
class Reading:
    """One gate's result. Frequencies include the clock correction.

    Fields that do not apply to a gate are None (and left out of JSON).
    """

    t_s: float  # gate start, seconds from the start of the stream
    gate_s: float
    frequency_hz: float | None
    uncertainty_hz: float | None
    amplitude_dbfs: float | None
    tone_snr_db: float | None
    rms_dbfs: float
    peak_dbfs: float
    clipped_samples: int
    snr_db: float | None = None
    sinad_db: float | None = None
    thd_percent: float | None = None
    thd_n_percent: float | None = None
    enob_bits: float | None = None
    sfdr_db: float | None = None
    hum_db: float | None = None
    # FM modes (beat, iq): carrier and RF, deviation of this gate, the modulating tone
    carrier_hz: float | None = None
    carrier_uncertainty_hz: float | None = None
    rf_hz: float | None = None
    fundamental_hz: float | None = None
    deviation_peak_pos_hz: float | None = None
    deviation_peak_neg_hz: float | None = None
    deviation_peak_avg_hz: float | None = None
    deviation_rms_hz: float | None = None
    deviation_rms_sqrt2_hz: float | None = None  # RMS x sqrt(2): a sine's peak from its RMS
    deviation_hold_hz: float | None = None  # peak |deviation| held since the start
    mod_tone_hz: float | None = None
    mod_index: float | None = None
    occupied_bw_hz: float | None = None
    cnr_db: float | None = None
    contiguous: bool = True
    overflow: bool = False

    def to_dict(self) -> dict:
        return {k: v for k, v in asdict(self).items() if v is not None}

    @classmethod
    def columns(cls) -> list[str]:
        return [f.name for f in fields(cls)]


@dataclass(frozen=True)
class GateView:
    """What a display needs of one gate besides its Reading (computed only on request).

    Attributes
    ----------
    t_s : float
        Gate start.
    spectrum_hz, spectrum_db : ndarray
        Power spectrum of the gate (dB re full scale per bin), at most a few thousand
        points; for `iq` the axis is the offset from the centre frequency.
    markers_hz : tuple of float
        Lines worth marking: the tone, or the carrier and the sidebands at k * fm.
    span_hz : (float, float) or None
        The occupied-bandwidth span, when measured.
    waveform_s, waveform : ndarray
        A stretch of the signal to draw: the audio itself (full-scale units) in `audio`
        mode, the instantaneous frequency deviation (Hz) in FM modes.
    waveform_unit : str
        "FS" or "Hz".
    """

    t_s: float
    spectrum_hz: np.ndarray
    spectrum_db: np.ndarray
    markers_hz: tuple[float, ...]
    span_hz: tuple[float, float] | None
    waveform_s: np.ndarray
    waveform: np.ndarray
    waveform_unit: str


DISPLAY_POINTS = 2048


def spectrum_view(x: np.ndarray, fs_hz: float, *, points: int = DISPLAY_POINTS):
    """(freqs_hz, power_db) of a gate for display: Hann window, max-hold decimation to
    about `points` bins so narrow lines stay visible."""
    n = x.shape[0]
    w = np.hanning(n)
    scale = 2.0 / w.sum()
    if np.iscomplexobj(x):
        spec = np.fft.fftshift(np.fft.fft(x * w)) * (scale / 2.0)
        freqs = np.fft.fftshift(np.fft.fftfreq(n, 1.0 / fs_hz))
    else:
        spec = np.fft.rfft(x * w) * scale
        freqs = np.fft.rfftfreq(n, 1.0 / fs_hz)
    p = spec.real**2 + spec.imag**2
    step = max(1, p.shape[0] // points)
    m = (p.shape[0] // step) * step
    p = p[:m].reshape(-1, step).max(axis=1)
    freqs = freqs[:m].reshape(-1, step)[:, 0]
    return freqs, 10.0 * np.log10(np.maximum(p, 1e-20))


def waveform_view(y: np.ndarray, fs_hz: float, *, seconds: float = 0.02):
    """The first `seconds` of a gate (enough for a few cycles of an audio tone)."""
    n = max(2, min(y.shape[0], int(seconds * fs_hz)))
    return np.arange(n) / fs_hz, np.array(y[:n].real if np.iscomplexobj(y) else y[:n])


@dataclass(frozen=True)
class LevelSummary:
    rms_dbfs: float
    peak_dbfs: float
    clipped_samples: int
    dc_offset: float


@dataclass(frozen=True)
class ToneSummary:
    frequency_hz: float | None
    uncertainty_hz: float | None
    amplitude_dbfs: float | None
    method: str | None
    birge_ratio: float | None
    n_gates: int
    drift_hz_per_s: float | None


@dataclass(frozen=True)
class QualitySummary:
    snr_db: float | None
    sinad_db: float | None
    thd_percent: float | None
    thd_n_percent: float | None
    enob_bits: float | None
    sfdr_db: float | None
    hum_hz: float | None
    hum_db: float | None
    filter: str


@dataclass(frozen=True)
class ClockSummary:
    ppm: float
    profile: str | None


@dataclass(frozen=True)
class Summary:
    file: str
    mode: str
    sample_rate_hz: float
    channels: int
    duration_s: float
    gate_s: float
    clock: ClockSummary
    level: LevelSummary
    tone: ToneSummary
    quality: QualitySummary
    warnings: tuple[str, ...]

    @property
    def frequency_hz(self) -> float | None:
        return self.tone.frequency_hz

    def to_dict(self) -> dict:
        d = asdict(self)
        d["warnings"] = list(self.warnings)
        return d


def _db(x: float) -> float:
    return 10.0 * math.log10(x) if x > 0 else -math.inf


class _LevelAccumulator:
    def __init__(self, full_scale: float = 1.0):
        self.n = 0
        self.sum = 0.0
        self.sum2 = 0.0
        self.peak = 0.0
        self.clipped = 0
        self.full_scale = full_scale

    def add_level(self, lvl) -> None:
        """Add a gate from its LevelFigures (no second pass over the samples)."""
        n = lvl.n_samples
        rms = 10 ** (lvl.rms_dbfs / 20) / math.sqrt(2.0) * self.full_scale
        self.n += n
        self.sum += lvl.dc_offset * n
        self.sum2 += rms * rms * n
        self.peak = max(self.peak, 10 ** (lvl.peak_dbfs / 20) * self.full_scale)
        self.clipped += int(lvl.clipped_samples)

    def merge(self, other: _LevelAccumulator) -> None:
        self.n += other.n
        self.sum += other.sum
        self.sum2 += other.sum2
        self.peak = max(self.peak, other.peak)
        self.clipped += other.clipped

    def summary(self) -> LevelSummary:
        n = max(self.n, 1)
        rms = math.sqrt(self.sum2 / n)
        return LevelSummary(
            rms_dbfs=_db((rms * math.sqrt(2.0) / self.full_scale) ** 2),
            peak_dbfs=_db((self.peak / self.full_scale) ** 2),
            clipped_samples=self.clipped,
            dc_offset=self.sum / n,
        )


class AudioProcessor:
    """`audio` mode: the counter, the level and the audio-quality meter on each gate."""

    def __init__(self, meta: StreamMeta, settings: AnalysisSettings):
        self.meta = meta
        self.settings = settings
        self.fs = meta.fs_hz
        self._track_hz: float | None = None
        self._track_snr: float | None = None
        # the tone's whole-record join and the quality meter's powers as running sums
        # (dsp.tone.GateJoin, QualityAccumulator): memory stays flat over day-long
        # sessions
        self._tones = dt.GateJoin()
        self._quality = dq.QualityAccumulator()
        # full quality gates (spur search, both mains families) by the gate index alone,
        # so a recording analysed in parts (monitor.parallel) gets the same ones
        self._gate_index = 0
        self._schedule = QualitySchedule(settings.mains)
        self._levels = _LevelAccumulator()
        self._sos = None
        self._zi = None
        if settings.filter != "none":
            from dsp import filters

            self._sos = filters.filter_sos(settings.filter, self.fs)
            if self._sos is not None:
                # start from rest: the first gate includes the filter's settling
                self._zi = np.zeros((self._sos.shape[0], 2))
        self.no_tone_gates = 0
        self._dev = _AudioDeviation(settings, self.fs) if settings.deviation_hz_per_unit else None

    def filtered(self, x: np.ndarray) -> np.ndarray:
        """Stream the measurement filter (state kept across gates)."""
        if self._sos is None:
            return x
        from scipy.signal import sosfilt

        y, self._zi = sosfilt(self._sos, x, zi=self._zi)
        return y

    def _tone(self, x: np.ndarray) -> dt.ToneEstimate:
        s = self.settings
        band = s.band_hz
        if band is not None:
            band = (band[0], min(band[1], self.fs / 2))
        if self._track_hz is not None:
            est = dt.estimate_tone(x, self.fs, start_hz=self._track_hz, check_finite=False)
            bin_hz = self.fs / x.shape[0]
            moved = abs(est.frequency_hz - self._track_hz) > 0.5 * bin_hz
            lost = self._track_snr is not None and est.snr_db < self._track_snr - 6.0
            outside = band is not None and not (band[0] <= est.frequency_hz <= band[1])
            if not (moved or lost or outside):
                return est
        return dt.estimate_tone(x, self.fs, near_hz=s.near_hz, band_hz=band, check_finite=False)

    def process(self, x: np.ndarray, t_s: float, contiguous: bool, overflow: bool) -> Reading:
        s = self.settings
        k = self.meta.clock_factor
        full = self._schedule.next_gate(self._gate_index)
        self._gate_index += 1
        lvl = dq.measure_level(x)
        self._levels.add_level(lvl)
        xf = self.filtered(x)
        gate_s = x.shape[0] / self.fs
        freq = unc = amp = tsnr = None
        qual = None
        if lvl.rms_dbfs > SILENCE_DBFS:
            est = self._tone(x)
            if est.gate_snr_db >= TONE_GATE_SNR_MIN_DB:
                self._track_hz, self._track_snr = est.frequency_hz, est.snr_db
                freq, unc = est.frequency_hz * k, est.uncertainty_hz * k
                amp, tsnr = est.amplitude_dbfs, est.snr_db
                self._tones.add(
                    t_s + est.t_ref_s,
                    est.frequency_hz,
                    est.uncertainty_hz,
                    est.phase_rad,
                    est.phase_uncertainty_rad,
                    contiguous,
                    est.amplitude,
                )
                if 0 < est.frequency_hz < self.fs / 2:
                    qual = dq.measure_quality(
                        xf,
                        self.fs,
                        fundamental_hz=est.frequency_hz,
                        n_harmonics=s.n_harmonics,
                        mains=self._schedule.mains_for(xf.shape[0], self.fs),
                        # the spur search is the costliest part: a sample of gates
                        sfdr=full,
                    )
                    self._schedule.measured(qual, full)
                    self._quality.add(qual)
            else:
                self._track_hz = None
        if freq is None:
            self.no_tone_gates += 1
        dev = {}
        if self._dev is not None:
            dev = self._dev.process(x, None if freq is None else freq / k, k)
        return Reading(
            t_s=t_s,
            gate_s=gate_s,
            frequency_hz=freq,
            uncertainty_hz=unc,
            amplitude_dbfs=amp,
            tone_snr_db=tsnr,
            rms_dbfs=lvl.rms_dbfs,
            peak_dbfs=lvl.peak_dbfs,
            clipped_samples=lvl.clipped_samples,
            **quality_fields(qual),
            contiguous=contiguous,
            overflow=overflow,
            **dev,
        )

    def extra(self) -> dict:
        """The deviation section: measured when calibrated, else said to be missing."""
        if self._dev is None:
            return {
                "deviation": {
                    "calibrated": False,
                    "note": "not calibrated: audio mode gives deviation only with a bench "
                    "profile from `swingmeter calibrate deviation`",
                }
            }
        return {"deviation": self._dev.summary(self.meta.clock_factor)}

    def view(self, x: np.ndarray, r: Reading) -> GateView:
        freqs, db = spectrum_view(x, self.fs)
        wt, wy = waveform_view(x, self.fs)
        markers = () if r.frequency_hz is None else (r.frequency_hz / self.meta.clock_factor,)
        return GateView(r.t_s, freqs, db, markers, None, wt, wy, "FS")

    def tone_summary(self) -> ToneSummary:
        k = self.meta.clock_factor
        j = self._tones
        if not j.k:
            return ToneSummary(None, None, None, None, None, 0, None)
        comb = j.result()
        amp_rms = j.amplitude_rms
        slope = j.drift_hz_per_s
        drift = None if slope is None else float(slope * k)
        return ToneSummary(
            frequency_hz=comb.frequency_hz * k,
            uncertainty_hz=comb.uncertainty_hz * k,
            amplitude_dbfs=20.0 * math.log10(amp_rms) if amp_rms > 0 else -math.inf,
            method=comb.method,
            birge_ratio=comb.birge_ratio,
            n_gates=comb.n_gates,
            drift_hz_per_s=drift,
        )

    def quality_summary(self) -> QualitySummary:
        return quality_summary(
            self._quality.result() if self._quality.gates else None, self.settings.filter
        )

    def start_at(self, gate_index: int) -> None:
        """Make this processor the one for a part of a stream that starts at gate
        `gate_index` (a multiple of SFDR_EVERY_GATES, where the schedule re-arms)."""
        if gate_index % SFDR_EVERY_GATES:
            raise ValueError(f"gate_index={gate_index} must be a multiple of {SFDR_EVERY_GATES}")
        self._gate_index = gate_index

    def warm_up(self, x: np.ndarray) -> None:
        """Take the counter's tracking state from gate `x` without measuring it (the gate
        before a part of a stream, so that the part's first fit starts where one pass's
        would: their results then agree to second order in the fit's tolerance)."""
        if dq.measure_level(x).rms_dbfs > SILENCE_DBFS:
            est = self._tone(x)
            if est.gate_snr_db >= TONE_GATE_SNR_MIN_DB:
                self._track_hz, self._track_snr = est.frequency_hz, est.snr_db
            else:
                self._track_hz = None

    def absorb(self, later: AudioProcessor) -> None:
        """Append the gates of `later`, which measured the part of the stream right after
        this one's: afterwards the summaries are those of one processor that measured
        both parts."""
        if later._dev is not None or self._dev is not None:
            raise ValueError("audio deviation figures cannot be joined from parts")
        self._tones.merge(later._tones)
        self._quality.merge(later._quality)
        self._levels.merge(later._levels)
        self.no_tone_gates += later.no_tone_gates
        self._gate_index = later._gate_index
        self._schedule = later._schedule
        self._track_hz, self._track_snr = later._track_hz, later._track_snr
        self._zi = later._zi


def quality_fields(q) -> dict:
    """A gate's quality figures as Reading fields (None where not measured)."""
    if q is None:
        return {}
    return {
        "snr_db": q.snr_db,
        "sinad_db": q.sinad_db,
        "thd_percent": q.thd_percent,
        "thd_n_percent": q.thd_n_percent,
        "enob_bits": q.enob_bits,
        "sfdr_db": q.sfdr_db if math.isfinite(q.sfdr_db) else None,
        "hum_db": q.hum_db,
    }


def quality_summary(q, filter_name: str) -> QualitySummary:
    """The record's quality figures (q: the running combined figure, or None)."""
    if q is None:
        return QualitySummary(None, None, None, None, None, None, None, None, filter_name)
    return QualitySummary(
        snr_db=q.snr_db,
        sinad_db=q.sinad_db,
        thd_percent=q.thd_percent,
        thd_n_percent=q.thd_n_percent,
        enob_bits=q.enob_bits,
        sfdr_db=q.sfdr_db,
        hum_hz=q.hum_hz,
        hum_db=q.hum_db,
        filter=filter_name,
    )


class _AudioDeviation:
    """Deviation from a receiver's audio through a calibrated factor.

    The receiver's de-emphasis is undone first (pre-emphasis, `dsp.filters.emphasis_sos`
    with inverse=True), so the audio is proportional to the instantaneous deviation, then
    scaled by the bench profile's Hz-per-unit factor.
    """

    def __init__(self, settings: AnalysisSettings, fs: float):
        from dsp import filters
        from dsp import fm as dfm

        self.factor = float(settings.deviation_hz_per_unit)
        self.deemphasis = settings.receiver_deemphasis
        self.fs = fs
        tau = {"none": None, "50us": 50e-6, "75us": 75e-6}[settings.receiver_deemphasis]
        self.sos = None if tau is None else filters.emphasis_sos(tau, fs, inverse=True)
        self.zi = None if self.sos is None else np.zeros((self.sos.shape[0], 2))
        self._dfm = dfm
        self.figs: list = []
        self.hold = 0.0
        self.tone_peaks: list[tuple[float, float]] = []

    def process(self, x: np.ndarray, tone_hz: float | None, k: float) -> dict:
        from scipy.signal import sosfilt

        y = x - x.mean()
        if self.sos is not None:
            y, self.zi = sosfilt(self.sos, y, zi=self.zi)
        dev = self.factor * y
        f = self._dfm.deviation_figures(dev)
        self.figs.append(f)
        self.hold = max(self.hold, f.peak_pos_hz, -f.peak_neg_hz)
        out = {
            "deviation_peak_pos_hz": f.peak_pos_hz * k,
            "deviation_peak_neg_hz": f.peak_neg_hz * k,
            "deviation_peak_avg_hz": f.peak_avg_hz * k,
            "deviation_rms_hz": f.rms_hz * k,
            "deviation_rms_sqrt2_hz": f.rms_hz * k * math.sqrt(2.0),
            "deviation_hold_hz": self.hold * k,
        }
        if tone_hz is not None and 0 < tone_hz < self.fs / 2:
            est = dt.estimate_tone(dev, self.fs, start_hz=tone_hz, check_finite=False)
            self.tone_peaks.append((est.amplitude, est.frequency_hz))
            out["mod_tone_hz"] = est.frequency_hz * k
            out["mod_index"] = est.amplitude / est.frequency_hz
        return out

    def summary(self, k: float) -> dict:
        figs = self.figs
        if not figs:
            return {"calibrated": True, "factor_hz_per_unit": self.factor}
        n = sum(f.n_samples for f in figs)
        rms = math.sqrt(sum(f.rms_hz**2 * f.n_samples for f in figs) / n)
        d = {
            "calibrated": True,
            "factor_hz_per_unit": self.factor,
            "receiver_deemphasis": self.deemphasis,
            "peak_pos_hz": max(f.peak_pos_hz for f in figs) * k,
            "peak_neg_hz": min(f.peak_neg_hz for f in figs) * k,
            "rms_hz": rms * k,
            "rms_sqrt2_hz": rms * math.sqrt(2) * k,
            "hold_hz": self.hold * k,
            "tone_peak_hz": None,
            "mod_tone_hz": None,
            "mod_index": None,
        }
        d["peak_avg_hz"] = (d["peak_pos_hz"] - d["peak_neg_hz"]) / 2
        if self.tone_peaks:
            amp = float(np.mean([a for a, _ in self.tone_peaks]))
            f0 = float(np.mean([f for _, f in self.tone_peaks]))
            d.update(tone_peak_hz=amp * k, mod_tone_hz=f0 * k, mod_index=amp / f0)
        return d


def _mains_arg(mains: str):
    if mains == "auto":
        return "auto"
    if mains in ("none", "off"):
        return None
    return int(mains)


class QualitySchedule:
    """Which gates get the quality meter's full treatment, by the gate's index alone.

    A *full* gate is the first gate with a tone at or after every SFDR_EVERY_GATES-th
    gate of the stream: it gets the spur search (the meter's costliest part) and, with
    mains "auto", the fit of both the 50 Hz and the 60 Hz family. The gates after it, up
    to the next boundary, fit only the family that held more power there, when the gate
    holds whole cycles of 10 Hz: the two families' lines are then orthogonal over the
    gate, so the figures are the same (the other family's lines are noise either way;
    they agree to about 1e-6 dB at 1 s gates) and six lines fewer are fitted. At other
    gate lengths the lines overlap and both families are fitted on every gate.

    The state is re-armed at each boundary, so a part of a stream that starts on one
    (monitor.parallel) schedules exactly as the whole stream does.
    """

    def __init__(self, mains: str):
        self.mains = _mains_arg(mains)
        self._due = True
        self._chosen: int | None = None

    def next_gate(self, gate_index: int) -> bool:
        """Start gate `gate_index`; True when it is to be a full gate (if it has a tone)."""
        if gate_index % SFDR_EVERY_GATES == 0:
            self._due = True
            self._chosen = None
        return self._due

    def mains_for(self, n: int, fs_hz: float):
        """The `mains` argument of measure_quality for the current n-sample gate."""
        if self.mains != "auto" or self._due or self._chosen is None:
            return self.mains
        cycles = n * 10.0 / fs_hz
        if abs(cycles - round(cycles)) > 1e-9:
            return self.mains  # 50 and 60 Hz lines are not orthogonal over this gate
        return self._chosen

    def measured(self, q, full: bool) -> None:
        """Note the quality figures of the gate just measured."""
        if full:
            self._due = False
            if self.mains == "auto" and q.hum_hz:
                self._chosen = int(q.hum_hz)


class Engine:
    """Turns a stream of blocks into readings (one per gate) and a summary.

    Parameters
    ----------
    meta : StreamMeta
        The stream's metadata (sample rate, mode, clock correction, ...).
    settings : AnalysisSettings
    on_reading : callable, optional
        Called with each Reading as soon as its gate is complete (live path).
    """

    def __init__(
        self,
        meta: StreamMeta,
        settings: AnalysisSettings | None = None,
        *,
        on_reading: Callable[[Reading], None] | None = None,
        on_view: Callable[[GateView], None] | None = None,
        keep_readings: bool = True,
    ):
        self.on_view = on_view
        self.meta = meta
        self.settings = settings or AnalysisSettings(mode=meta.mode)
        self.on_reading = on_reading
        self.keep_readings = keep_readings
        self.readings: list[Reading] = []
        self.gates = 0  # gates measured, whether or not their readings are kept
        self.gate_n = _gate_n(self.settings, meta)
        dtype = np.complex128 if meta.mode == "iq" else np.float64
        self._buf = np.empty(self.gate_n, dtype=dtype)
        self._fill = 0
        self._gate_start = 0  # stream index of the buffer's first sample
        self._next = 0  # stream index expected next
        self._contiguous = True
        self._overflow = False
        self.frames = 0
        self.warnings: list[str] = []
        self.processor = self._make_processor()

    def holds_no_samples(self) -> bool:
        """True when a block's samples are measured before `feed` returns and nothing
        keeps a reference to them (partial gates are copied): the source may refill the
        same arrays for the next block (`reuse_buffers`). So far the FM modes' processor;
        not with a view callback, which is handed the gate itself."""
        return self.on_view is None and getattr(self.processor, "HOLDS_NO_SAMPLES", False)

    def _make_processor(self):
        mode = self.meta.mode
        if mode == "audio":
            return AudioProcessor(self.meta, self.settings)
        from monitor import fm_engine

        return fm_engine.make_processor(self.meta, self.settings)

    def feed(self, block: Block) -> list[Reading]:
        """Add a block; returns the readings of the gates it completed."""
        out: list[Reading] = []
        x = block.samples
        if block.start != self._next:
            # Samples were lost (or the stream restarted): drop the partial gate, and
            # mark the next gate so the phase is not followed across the gap.
            if self._fill:
                self._fill = 0
            self._contiguous = False
            self._gate_start = block.start
        if block.overflow:
            self._overflow = True
            self._contiguous = False
        self._next = block.start + x.shape[0]
        self.frames += x.shape[0]
        pos = 0
        while pos < x.shape[0]:
            if self._fill == 0:
                self._gate_start = block.start + pos
                whole = (x.shape[0] - pos) // self.gate_n
                if whole > 1 and self.on_view is None and hasattr(self.processor, "process_many"):
                    # whole gates inside the block, measured together where they lie
                    out.extend(self._emit_many(x[pos : pos + whole * self.gate_n], whole))
                    pos += whole * self.gate_n
                    continue
                if whole:
                    # a whole gate inside the block: measured where it lies, not copied
                    out.append(self._emit(x[pos : pos + self.gate_n]))
                    pos += self.gate_n
                    continue
            take = min(self.gate_n - self._fill, x.shape[0] - pos)
            self._buf[self._fill : self._fill + take] = x[pos : pos + take]
            self._fill += take
            pos += take
            if self._fill == self.gate_n:
                out.append(self._emit(self._buf))
                self._fill = 0
        return out

    def _emit_many(self, x: np.ndarray, count: int) -> list[Reading]:
        """`count` consecutive whole gates of x through the processor's batch path (the
        same readings as gate by gate)."""
        n, fs = self.gate_n, self.meta.fs_hz
        gates = [
            (
                x[i * n : (i + 1) * n],
                (self._gate_start + i * n) / fs,
                self._contiguous if i == 0 else True,
                self._overflow if i == 0 else False,
            )
            for i in range(count)
        ]
        readings = self.processor.process_many(gates)
        self._contiguous = True
        self._overflow = False
        self.gates += count
        if self.keep_readings:
            self.readings.extend(readings)
        if self.on_reading is not None:
            for r in readings:
                self.on_reading(r)
        return readings

    def _emit(self, gate: np.ndarray) -> Reading:
        r = self.processor.process(
            gate, self._gate_start / self.meta.fs_hz, self._contiguous, self._overflow
        )
        self._contiguous = True
        self._overflow = False
        self.gates += 1
        if self.keep_readings:
            self.readings.append(r)
        if self.on_reading is not None:
            self.on_reading(r)
        if self.on_view is not None:
            self.on_view(self.processor.view(gate, r))
        return r

    def finish(self) -> list[Reading]:
        """Process the partial last gate if it is long enough (half a gate, or the only
        data there is)."""
        out = []
        if self._fill and (self._fill >= self.gate_n // 2 or not self.gates):
            if self._fill >= 16:
                out.append(self._emit(self._buf[: self._fill].copy()))
        self._fill = 0
        return out

    def drop_buffer(self) -> None:
        """Free the gate buffer (an engine that has finished and is sent elsewhere)."""
        self._buf = self._buf[:0]

    def restore_buffer(self) -> None:
        """Give back the gate buffer `drop_buffer` freed, so the engine can be fed."""
        if self._buf.shape[0] != self.gate_n:
            self._buf = np.empty(self.gate_n, dtype=self._buf.dtype)

    def absorb(self, later: Engine) -> None:
        """Join the engine that measured the part of the stream right after this one's
        (both started on a gate boundary): readings, counts, warnings and summaries
        become those of one engine that measured both parts."""
        absorb = getattr(self.processor, "absorb", None)
        if absorb is None:
            raise ValueError(f"{self.meta.mode} mode readings cannot be joined from parts")
        carry = getattr(self.processor, "later_readings", None)
        readings = later.readings if carry is None else carry(later.readings)
        absorb(later.processor)
        self.readings.extend(readings)
        self.gates += later.gates
        self.frames += later.frames
        self.warnings.extend(w for w in later.warnings if w not in self.warnings)
        self._next = later._next

    def extra(self) -> dict:
        """Mode-specific summary sections (`fm`, `iq`) as JSON-able dicts."""
        fn = getattr(self.processor, "extra", None)
        return fn() if fn is not None else {}

    def summary(self, extra_warnings: Iterable[str] = ()) -> Summary:
        p = self.processor
        level = p._levels.summary()
        warnings = list(extra_warnings) + list(self.warnings)
        if level.clipped_samples:
            warnings.append(
                f"clipping: {level.clipped_samples} samples at or near full scale; "
                "lower the input level"
            )
        if abs(level.dc_offset) > DC_WARN_FRACTION:
            warnings.append(f"DC offset of {level.dc_offset:+.3f} of full scale")
        if level.rms_dbfs <= SILENCE_DBFS:
            warnings.append("silence: no signal above the noise of the converter")
        elif level.rms_dbfs < LOW_LEVEL_DBFS:
            warnings.append(f"very low level ({level.rms_dbfs:.1f} dBFS): raise the input level")
        n_read = self.gates
        if getattr(p, "no_tone_gates", 0):
            warnings.append(f"{p.no_tone_gates} of {n_read} gates held no usable tone")
        extra = getattr(p, "summary_warnings", None)
        if extra:
            warnings.extend(extra())
        return Summary(
            file=self.meta.source,
            mode=self.meta.mode,
            sample_rate_hz=self.meta.fs_hz,
            channels=self.meta.channels,
            duration_s=self.frames / self.meta.fs_hz,
            gate_s=self.settings.gate_s,
            clock=ClockSummary(ppm=self.meta.clock_ppm, profile=self.meta.profile),
            level=level,
            tone=p.tone_summary(),
            quality=p.quality_summary(),
            warnings=tuple(warnings),
        )


@dataclass
class Analysis:
    """The result of running a whole source through the engine."""

    meta: StreamMeta
    readings: list[Reading]
    summary: Summary
    extra: dict = field(default_factory=dict)


def run(
    source,
    settings: AnalysisSettings | None = None,
    *,
    progress: Callable[[int, int | None], None] | None = None,
    on_reading: Callable[[Reading], None] | None = None,
    on_view: Callable[[GateView], None] | None = None,
) -> Analysis:
    """Run every block of `source` through one engine."""
    engine = Engine(source.meta, settings, on_reading=on_reading, on_view=on_view)
    was = getattr(source, "reuse_buffers", False)
    if engine.holds_no_samples():
        source.reuse_buffers = True
    try:
        for block in source:
            engine.feed(block)
            if progress is not None:
                progress(engine.frames, source.meta.frames)
    finally:
        source.reuse_buffers = was
    engine.finish()
    summary = engine.summary(extra_warnings=source.warnings)
    return Analysis(source.meta, engine.readings, summary, engine.extra())


def analyze_file(
    path,
    *,
    settings: AnalysisSettings | None = None,
    mode: str = "audio",
    gate_s: float = 1.0,
    clock_ppm: float | None = None,
    channel: int = 0,
    mix: bool = False,
    swap_iq: bool = False,
    meta: dict | None = None,
    progress: Callable[[int, int | None], None] | None = None,
    on_view: Callable[[GateView], None] | None = None,
    jobs: int | None = 1,
) -> Analysis:
    """Analyse one recording (WAV/RF64/W64/SigMF) and return readings and summary.

    `on_view` receives each gate's GateView (spectrum, markers, waveform) for displays
    and reports; without it no view is computed. `jobs` > 1 lets a long integer-PCM
    recording in audio mode be analysed in that many processes (`monitor.parallel`;
    None: as many as the CPUs and the recording's length make worth it); the readings
    and summary are those of one process, to rounding."""
    from monitor.sources import open_source

    if settings is None:
        settings = AnalysisSettings(mode=mode, gate_s=gate_s)
    fields_ = dict(meta or {})
    if clock_ppm is not None:
        fields_["clock_ppm"] = float(clock_ppm)
    source_kw = dict(mode=settings.mode, channel=channel, mix=mix, swap_iq=swap_iq, meta=fields_)
    with open_source(path, **source_kw) as src:
        gate_n = _gate_n(settings, src.meta)
        src.prefer_block_frames(gate_n)  # blocks of whole gates reach the engine uncopied
        if jobs != 1 and on_view is None:
            from monitor import parallel

            n = parallel.choose_jobs(jobs, src, settings)
            if n > 1 and len(parallel.plan_for(src.meta.frames, gate_n, n, settings)) > 1:
                return parallel.analyze_parts(path, src, settings, source_kw, n, progress=progress)
        return run(src, settings, progress=progress, on_view=on_view)


def _gate_n(settings: AnalysisSettings, meta: StreamMeta) -> int:
    """Samples in one gate (as the Engine counts them)."""
    return max(16, int(round(settings.gate_s * meta.fs_hz)))
