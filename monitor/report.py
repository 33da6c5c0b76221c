"""Adjustment-session reports: one self-contained HTML file (and optionally a PDF).

A report holds, per recording, the summary with its uncertainties, the spectrum with the
carrier, sidebands and occupied bandwidth marked, the deviation waveform and histogram,
the frequency history with its drift fit, the Allan family when the record is long
enough, the harmonic and protected-band check, and the metadata and bench profile used.
Two recordings can be set side by side (before and after an adjustment), each figure with
its difference and whether that difference exceeds the combined uncertainty.

Everything is drawn with matplotlib's Agg canvas (imported only here, inside functions)
and embedded as base64 PNG data URIs, so the HTML needs no network, no external CSS and
no script. All text that goes into the HTML passes through `html.escape`.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import io
import math
import os
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from dsp.tone import format_with_uncertainty
from monitor.errors import InputError

#: Fewest full-gate readings for an Allan plot: three octaves of tau (m = 1, 2, 4).
MIN_ALLAN_READINGS = 10
#: Coverage factor of the significance test: |a - b| > K * sqrt(ua^2 + ub^2).
COVERAGE_K = 2.0
#: Highest harmonic frequency the protected-band check considers (the table's top entry,
#: 406.1 MHz, with room to spare).
HARMONIC_LIMIT_HZ = 1e9

SIGNIFICANCE_RULE = (
    "A difference B - A is marked significant when |B - A| > 2 * sqrt(uA^2 + uB^2), uA and "
    "uB being the 1-sigma standard uncertainties of the two figures (coverage factor k = 2, "
    "about 95 % for normally distributed errors; JCGM 100:2008, the GUM, section 6). "
    "Frequencies carry the counter's own uncertainty; figures averaged over gates "
    "(tone level, rms and tone deviation, modulation index) carry the standard error of "
    "their gate values (GUM Type A: s / sqrt(n)). Figures without an uncertainty (peaks, "
    "bandwidths, quality figures) show the difference only. A common systematic error, "
    "such as the sound card's clock or a receiver's calibration, cancels in the difference "
    "only if both recordings went through the same set-up."
)

CAUTIONS = (
    "Cautions. Emissions: an oscillator or low-power FM transmitter radiates its carrier "
    "and its harmonics, and harmonics can land in aeronautical, emergency and distress "
    "bands (108-137 MHz, 121.5 MHz, 156.8 MHz, 243 MHz, 406 MHz). Interference there can "
    "endanger lives. Whether any emission is allowed where you are is decided by your "
    "local regulations and licensed practice, not by this report: defer to them, work "
    "into a dummy load or a shielded enclosure, and filter and measure the harmonics "
    "before anything goes near an antenna. The protected-band check below uses a table "
    "recalled from the ITU Radio Regulations; it is a reminder, not a clearance."
)

# Our own look: deep teal for measured data, amber for fits and markers, a muted plum for
# sidebands, slate for guides.
_INK = "#1f2a30"
_DATA = "#17706b"
_FIT = "#c46a12"
_SIDE = "#8c4a7d"
_GUIDE = "#6b7a86"
_SPAN = "#f0e2c8"


# ---------------------------------------------------------------------------------------
# collecting what a report needs


@dataclass
class RecordingReport:
    """One recording's analysis plus what only a report needs.

    Attributes
    ----------
    path : str
        The recording.
    analysis : monitor.engine.Analysis
        Readings, summary and mode-specific sections, exactly as `analyze` computes them.
    view : monitor.engine.GateView or None
        The last full gate's spectrum and waveform.
    settings : monitor.engine.AnalysisSettings
    profile : dict or None
        The bench profile applied (its stored fields), if any.
    """

    path: str
    analysis: object
    view: object | None
    settings: object
    profile: dict | None = None
    notes: list[str] = field(default_factory=list)

    @property
    def summary(self) -> dict:
        d = self.analysis.summary.to_dict()
        d.update(self.analysis.extra)
        return d

    @property
    def mode(self) -> str:
        return self.analysis.summary.mode


def analyze_for_report(
    path,
    *,
    settings,
    meta: dict | None = None,
    channel: int = 0,
    mix: bool = False,
    swap_iq: bool = False,
    profile: dict | None = None,
    progress: Callable[[int, int | None], None] | None = None,
) -> RecordingReport:
    """Run one recording through the engine, keeping the last full gate's view.

    The same engine, settings and metadata as `monitor.engine.analyze_file`, so every
    figure equals what `swingmeter analyze` prints for the same options.

    Parameters
    ----------
    path : str or os.PathLike
        WAV / RF64 / W64 / SigMF recording.
    settings : monitor.engine.AnalysisSettings
    meta : dict, optional
        StreamMeta fields the user gave (dial, sideband, harmonic, clock).
    channel, mix, swap_iq
        As for `analyze_file`.
    profile : dict, optional
        The bench profile's fields, shown in the report.
    progress : callable, optional
        Called with (frames done, total frames or None).

    Returns
    -------
    RecordingReport

    Raises
    ------
    InputError
        A missing or unreadable recording, or one the engine cannot use.
    """
    p = Path(path)
    if not p.exists():
        raise InputError(f"{path}: no such file")
    if p.is_dir():
        raise InputError(f"{path}: is a directory, not a recording")
    try:
        return _analyze(str(path), settings, meta, channel, mix, swap_iq, profile, progress)
    except InputError as exc:
        if str(path) in str(exc):
            raise
        # the engine's messages do not always say which of several recordings failed
        raise InputError(f"{path}: {exc}") from None


def _analyze(path, settings, meta, channel, mix, swap_iq, profile, progress):
    from monitor.engine import Analysis, Engine
    from monitor.sources import open_source

    kept: dict = {}
    with open_source(
        path, mode=settings.mode, channel=channel, mix=mix, swap_iq=swap_iq, meta=meta
    ) as src:

        def on_view(v):
            r = engine.readings[-1] if engine.readings else None
            # a short last gate draws a poorer spectrum than the full gate before it
            if "view" not in kept or (r is not None and r.gate_s >= 0.99 * settings.gate_s):
                kept["view"] = v

        engine = Engine(src.meta, settings, on_view=on_view)
        for block in src:
            engine.feed(block)
            if progress is not None:
                progress(engine.frames, src.meta.frames)
        engine.finish()
        if not engine.readings:
            raise InputError(f"{path}: too short for one gate of {settings.gate_s:g} s")
        summary = engine.summary(extra_warnings=src.warnings)
        analysis = Analysis(src.meta, engine.readings, summary, engine.extra())
    return RecordingReport(path, analysis, kept.get("view"), settings, profile)


# ---------------------------------------------------------------------------------------
# figures (numbers) and their comparison


@dataclass(frozen=True)
class Quantity:
    """One figure of a summary, with its 1-sigma uncertainty when it has one."""

    key: str
    label: str
    value: float
    sigma: float | None
    unit: str
    text: str


@dataclass(frozen=True)
class Difference:
    """B - A for one figure of two recordings.

    `significant` is None when either figure has no uncertainty (see SIGNIFICANCE_RULE).
    """

    key: str
    label: str
    unit: str
    a: Quantity
    b: Quantity
    difference: float
    combined_sigma: float | None
    significant: bool | None


def _finite(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def type_a_uncertainty(values: Sequence[float | None]) -> float | None:
    """Standard error of the mean of gate values, s / sqrt(n) (GUM Type A).

    Parameters
    ----------
    values : sequence of float or None
        One value per gate; None and non-finite values are left out.

    Returns
    -------
    float or None
        None with fewer than three usable values.

    References
    ----------
    JCGM 100:2008 (GUM), section 4.2.
    """
    v = np.array([x for x in values if _finite(x)], dtype=float)
    if v.size < 3:
        return None
    return float(np.std(v, ddof=1) / math.sqrt(v.size))


def _q(out, key, label, value, unit, sigma=None, fmt=".4g"):
    if not _finite(value):
        return
    if sigma is not None and _finite(sigma) and sigma > 0:
        text = format_with_uncertainty(float(value), float(sigma), unit)
    else:
        sigma = None
        text = f"{value:{fmt}} {unit}".strip()
    out.append(Quantity(key, label, float(value), sigma, unit, text))


def _full_gates(rec: RecordingReport):
    g = rec.settings.gate_s
    return [r for r in rec.analysis.readings if r.gate_s >= 0.99 * g]


def quantities(rec: RecordingReport) -> list[Quantity]:
    """The comparable figures of one recording, in report order.

    Parameters
    ----------
    rec : RecordingReport

    Returns
    -------
    list of Quantity
        Values as in the summary; uncertainties from the engine (frequencies) or from
        the spread of the gate values (figures averaged over gates).
    """
    s = rec.summary
    out: list[Quantity] = []
    gates = _full_gates(rec)
    fm = s.get("fm")
    tone = s.get("tone") or {}
    if s["mode"] == "audio":
        _q(
            out,
            "frequency",
            "frequency",
            tone.get("frequency_hz"),
            "Hz",
            tone.get("uncertainty_hz"),
        )
        _q(
            out,
            "tone_level",
            "tone level",
            tone.get("amplitude_dbfs"),
            "dBFS",
            type_a_uncertainty([r.amplitude_dbfs for r in gates]),
        )
        if tone.get("drift_hz_per_s") is not None:
            _q(out, "drift", "drift", tone["drift_hz_per_s"] * 60.0, "Hz/min", fmt="+.4g")
        q = s.get("quality") or {}
        _q(out, "snr", "SNR", q.get("snr_db"), "dB", fmt=".2f")
        _q(out, "sinad", "SINAD", q.get("sinad_db"), "dB", fmt=".2f")
        _q(out, "thd", "THD", q.get("thd_percent"), "%")
        _q(out, "thd_n", "THD+N", q.get("thd_n_percent"), "%")
        _q(out, "enob", "ENOB", q.get("enob_bits"), "bit", fmt=".2f")
        _q(out, "sfdr", "SFDR", q.get("sfdr_db"), "dB", fmt=".1f")
        dev = s.get("deviation") or {}
        if dev.get("calibrated") and dev.get("peak_pos_hz") is not None:
            _deviation_quantities(out, dev, gates, 1)
    elif fm:
        n = fm.get("harmonic") or 1
        u = fm["carrier_uncertainty_hz"]
        _q(out, "carrier", "carrier", fm["carrier_hz"], "Hz", u)
        _q(out, "rf", "RF", fm.get("rf_hz"), "Hz", u)
        if n > 1:
            _q(out, "fundamental", "fundamental", fm.get("fundamental_hz"), "Hz", u / n)
        d = tone.get("drift_hz_per_s")
        if d is not None:
            _q(out, "drift", "carrier drift", d * 60.0, "Hz/min", fmt="+.4g")
        _deviation_quantities(out, {**fm["deviation"], **fm}, gates, n)
        _q(
            out,
            "mod_tone",
            "modulating tone",
            fm.get("mod_tone_hz"),
            "Hz",
            fm.get("mod_tone_uncertainty_hz"),
        )
        _q(out, "bessel_index", "Bessel-fit index", fm.get("bessel_mod_index"), "", fmt=".4f")
        _q(out, "carson_bw", "Carson bandwidth", fm.get("carson_bw_hz"), "Hz", fmt=".0f")
        _q(out, "occupied_bw", "99 % occupied bandwidth", fm.get("occupied_bw_hz"), "Hz", fmt=".0f")
        _q(out, "bw_26db", "-26 dB bandwidth", fm.get("bw_26db_hz"), "Hz", fmt=".0f")
        _q(
            out,
            "mod_power",
            "modulation power (BS.412)",
            fm.get("mod_power_dbr"),
            "dBr",
            fmt="+.2f",
        )
        _q(out, "cnr", "carrier/noise", fm.get("cnr_db"), "dB", fmt=".1f")
        _q(out, "demod_snr", "demodulated SNR", fm.get("demod_snr_db"), "dB", fmt=".1f")
        _q(out, "demod_sinad", "demodulated SINAD", fm.get("demod_sinad_db"), "dB", fmt=".1f")
        _q(out, "demod_thd", "demodulated THD", fm.get("demod_thd_percent"), "%", fmt=".3g")
    lvl = s["level"]
    _q(out, "rms_level", "rms level", lvl.get("rms_dbfs"), "dBFS", fmt=".2f")
    _q(out, "peak_level", "peak level", lvl.get("peak_dbfs"), "dBFS", fmt=".2f")
    return out


def _deviation_quantities(out, dev: dict, gates, n: int) -> None:
    _q(out, "dev_peak_pos", "deviation peak+", dev.get("peak_pos_hz"), "Hz", fmt=".1f")
    _q(out, "dev_peak_neg", "deviation peak-", dev.get("peak_neg_hz"), "Hz", fmt=".1f")
    _q(out, "dev_peak_avg", "deviation peak avg", dev.get("peak_avg_hz"), "Hz", fmt=".1f")
    _q(
        out,
        "dev_rms",
        "rms deviation",
        dev.get("rms_hz"),
        "Hz",
        type_a_uncertainty([r.deviation_rms_hz for r in gates]),
        fmt=".1f",
    )
    tone_dev = [
        r.mod_index * r.mod_tone_hz
        for r in gates
        if r.mod_index is not None and r.mod_tone_hz is not None
    ]
    u_tone = type_a_uncertainty(tone_dev)
    _q(
        out,
        "tone_deviation",
        "tone deviation (sine fit)",
        dev.get("tone_peak_hz"),
        "Hz",
        u_tone,
        fmt=".2f",
    )
    if n > 1 and dev.get("fundamental_deviation_hz") is not None:
        _q(
            out,
            "fundamental_deviation",
            "fundamental deviation",
            dev["fundamental_deviation_hz"],
            "Hz",
            None if u_tone is None or dev.get("tone_peak_hz") is None else u_tone / n,
            fmt=".2f",
        )
    _q(
        out,
        "mod_index",
        "modulation index",
        dev.get("mod_index"),
        "",
        type_a_uncertainty([r.mod_index for r in gates]),
        fmt=".4f",
    )


def compare_quantities(a: Sequence[Quantity], b: Sequence[Quantity]) -> list[Difference]:
    """Differences B - A of the figures both recordings have (SIGNIFICANCE_RULE).

    Parameters
    ----------
    a, b : sequence of Quantity
        The figures of the "before" (A) and the "after" (B) recording.

    Returns
    -------
    list of Difference
        In A's order.

    References
    ----------
    JCGM 100:2008 (GUM), sections 5.1 (combined uncertainty of uncorrelated inputs) and
    6 (expanded uncertainty, k = 2).
    """
    bk = {q.key: q for q in b}
    out = []
    for qa in a:
        qb = bk.get(qa.key)
        if qb is None:
            continue
        diff = qb.value - qa.value
        comb = sig = None
        if qa.sigma is not None and qb.sigma is not None:
            comb = math.hypot(qa.sigma, qb.sigma)
            sig = abs(diff) > COVERAGE_K * comb
        out.append(Difference(qa.key, qa.label, qa.unit, qa, qb, diff, comb, sig))
    return out


def _diff_text(d: Difference) -> str:
    if d.combined_sigma is not None:
        return format_with_uncertainty(d.difference, d.combined_sigma, d.unit)
    return f"{d.difference:+.4g} {d.unit}".strip()


# ---------------------------------------------------------------------------------------
# summary rows (text) and the protected-band check


def summary_rows(rec: RecordingReport) -> list[tuple[str, str]]:
    """(what, value) rows of one recording's summary, as text."""
    from monitor import render

    s = rec.summary
    rows = [
        (
            "input",
            f"{s['mode']}, {s['sample_rate_hz']:g} Hz, {s.get('channels', 1)} ch, "
            f"{s['duration_s']:.2f} s, gate {s['gate_s']:g} s, "
            f"{len(rec.analysis.readings)} readings",
        )
    ]
    clock = s["clock"]
    ctext = f"{clock['ppm']:+.2f} ppm"
    if clock.get("profile"):
        ctext += f" (bench profile {clock['profile']})"
    rows.append(("clock correction", ctext))
    tone = s.get("tone") or {}
    if s["mode"] == "audio":
        if tone.get("frequency_hz") is not None:
            rows.append(
                (
                    "frequency",
                    format_with_uncertainty(tone["frequency_hz"], tone["uncertainty_hz"])
                    + f"  (1σ, {tone['method']}, {tone['n_gates']} gates)",
                )
            )
        else:
            rows.append(("frequency", "no usable tone found"))
    out = {q.key: q for q in quantities(rec)}
    for key in ("tone_level", "drift", "snr", "sinad", "thd", "thd_n", "enob", "sfdr"):
        if s["mode"] == "audio" and key in out:
            rows.append((out[key].label, out[key].text))
    rows.extend(render.fm_rows(s))
    if s["mode"] != "audio" and "drift" in out:
        rows.append((out["drift"].label, out["drift"].text))
    typea = [
        f"{out[k].label} {out[k].text}"
        for k in ("dev_rms", "tone_deviation", "mod_index")
        if k in out and out[k].sigma is not None
    ]
    if typea:
        rows.append(("gate-averaged, 1σ (Type A)", "; ".join(typea)))
    dev = s.get("deviation")
    if isinstance(dev, dict):
        if not dev.get("calibrated"):
            rows.append(("deviation", "not calibrated (swingmeter calibrate deviation)"))
        elif dev.get("peak_pos_hz") is not None:
            rows.append(
                (
                    "deviation",
                    f"peak+ {dev['peak_pos_hz']:.1f}  peak- {dev['peak_neg_hz']:.1f}  "
                    f"rms {dev['rms_hz']:.1f} Hz  (calibrated audio, "
                    f"{dev['factor_hz_per_unit']:.6g} Hz/FS)",
                )
            )
    lvl = s["level"]
    rows.append(
        (
            "level",
            f"{lvl['rms_dbfs']:.2f} dBFS rms, {lvl['peak_dbfs']:.2f} dBFS peak, "
            f"{lvl['clipped_samples']} clipped",
        )
    )
    return rows


@dataclass(frozen=True)
class BandCheck:
    """The protected-band check of one recording.

    Attributes
    ----------
    done : bool
        False when the RF is unknown (no dial frequency).
    note : str
        What was checked, or why nothing was.
    rf_hits : tuple of dsp.harmonics.BandHit
        Protected bands the measured RF signal itself touches.
    harmonic_hits : tuple of dsp.harmonics.ProtectedHarmonic
        Protected bands touched by harmonics of the fundamental up to HARMONIC_LIMIT_HZ.
    """

    done: bool
    note: str
    rf_hits: tuple = ()
    harmonic_hits: tuple = ()


def band_check(rec: RecordingReport) -> BandCheck:
    """Protected bands touched by the RF signal and by the fundamental's harmonics.

    Uses the measured RF, the fundamental (RF / harmonic number), the measured
    deviation and the broadcast audio bandwidth (`dsp.harmonics.DEFAULT_AUDIO_HZ`) in
    Carson's rule (`dsp.harmonics.GUARD_RULE`).
    """
    from dsp import harmonics as dh

    fm = rec.summary.get("fm")
    if not fm or fm.get("rf_hz") is None:
        return BandCheck(
            False,
            "not checked: the RF is unknown (give --dial, and --harmonic when the receiver "
            "hears a harmonic, in beat or iq mode)",
        )
    n = fm.get("harmonic") or 1
    d = fm["deviation"]
    rf_dev = d.get("tone_peak_hz") or d.get("peak_avg_hz") or 0.0
    f0 = fm["fundamental_hz"]
    f0_dev = fm.get("fundamental_deviation_hz") or rf_dev / n
    audio = dh.DEFAULT_AUDIO_HZ
    rf_hits = dh.protected_band_hits(fm["rf_hz"], abs(rf_dev), audio_hz=audio)
    harm = dh.protected_harmonics(
        f0, deviation_hz=abs(f0_dev), max_hz=HARMONIC_LIMIT_HZ, audio_hz=audio
    )
    note = (
        f"RF {fm['rf_hz'] / 1e6:.6f} MHz (harmonic {n} of a {f0 / 1e6:.6f} MHz fundamental "
        f"with {abs(f0_dev):.1f} Hz deviation); harmonics up to {HARMONIC_LIMIT_HZ / 1e6:g} "
        f"MHz, audio up to {audio / 1e3:g} kHz. {dh.GUARD_RULE}"
    )
    return BandCheck(True, note, tuple(rf_hits), tuple(harm))


# ---------------------------------------------------------------------------------------
# plots


@dataclass
class Plot:
    """One drawn figure (or the reason there is none)."""

    title: str
    figure: object | None
    note: str = ""


def _matplotlib():
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError:
        raise InputError(
            "report needs matplotlib, which is not installed: pip install 'swingmeter[plot]'"
        ) from None
    return Figure, FigureCanvasAgg


def _new_figure(ncols: int = 1, *, width: float = 8.0, height: float = 3.6):
    Figure, Canvas = _matplotlib()
    fig = Figure(figsize=(width, height), dpi=100)
    Canvas(fig)  # the Agg canvas, without touching pyplot's global backend
    # fixed margins: an automatic layout engine costs more than the drawing itself
    fig.subplots_adjust(
        left=0.1 if ncols == 1 else 0.085, right=0.98, bottom=0.14, top=0.9, wspace=0.32
    )
    axes = [fig.add_subplot(1, ncols, i + 1) for i in range(ncols)]
    for ax in axes:
        ax.set_facecolor("#fbfaf7")
        ax.grid(True, color="#d9d6cf", lw=0.6)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
        ax.tick_params(colors=_INK, labelsize=8)
    return fig, axes


def _freq_scale(span_hz: float) -> tuple[float, str]:
    return (1e3, "kHz") if span_hz >= 5e3 else (1.0, "Hz")


def plot_spectrum(rec: RecordingReport) -> Plot:
    """The last full gate's spectrum with the carrier/tone, sidebands and 99 % band."""
    v = rec.view
    name = Path(rec.path).name
    if v is None or len(v.spectrum_hz) == 0:
        return Plot("Spectrum", None, "no gate to draw")
    s = rec.summary
    fm = s.get("fm")
    f = np.asarray(v.spectrum_hz, dtype=float)
    db = np.asarray(v.spectrum_db, dtype=float)
    fig, (ax,) = _new_figure()
    markers = list(v.markers_hz)
    if s["mode"] == "audio":
        # linear, up to the tone's 12th harmonic: the display bins are tens of Hz wide, so
        # a log axis would smear hum and low tones into triangles
        hi = float(f[-1])
        if markers:
            hi = min(hi, max(12.0 * markers[0], 4000.0))
        scale, unit = _freq_scale(hi)
        sel = f <= hi
        ax.plot(f[sel] / scale, db[sel], color=_DATA, lw=0.8, label="spectrum")
        if markers:
            f0 = markers[0]
            ax.axvline(f0 / scale, color=_FIT, lw=1.0, ls="--", alpha=0.85, label="measured tone")
            for k in range(2, int(hi // f0) + 1):
                ax.axvline(
                    k * f0 / scale,
                    color=_SIDE,
                    lw=0.7,
                    ls=":",
                    label="harmonics k·f" if k == 2 else None,
                )
        ax.set_xlabel(f"frequency ({unit})")
        ax.set_xlim(0, hi / scale)
    else:
        lo_hi = None
        if fm and fm.get("occupied_low_hz") is not None:
            lo_hi = (fm["occupied_low_hz"], fm["occupied_high_hz"])
        centre = markers[0] if markers else float(f[np.argmax(db)])
        half = 0.5 * (fm["if_bandwidth_hz"] if fm else (f[-1] - f[0]) / 4)
        if lo_hi is not None:
            half = max(half, 1.5 * max(centre - lo_hi[0], lo_hi[1] - centre))
        lo, hi = max(f[0], centre - half), min(f[-1], centre + half)
        scale, unit = _freq_scale(hi - lo)
        sel = (f >= lo) & (f <= hi)
        if lo_hi is not None:
            ax.axvspan(
                lo_hi[0] / scale,
                lo_hi[1] / scale,
                color=_SPAN,
                zorder=0,
                label="99 % occupied bandwidth",
            )
        ax.plot(f[sel] / scale, db[sel], color=_DATA, lw=0.8, label="spectrum")
        if markers:
            ax.axvline(markers[0] / scale, color=_FIT, lw=1.0, ls="--", alpha=0.85, label="carrier")
        for i, m in enumerate(markers[1:]):
            ax.axvline(
                m / scale, color=_SIDE, lw=0.8, ls=":", label="sidebands k·fm" if i == 0 else None
            )
        ax.set_xlim(lo / scale, hi / scale)
        where = "offset from the I/Q centre" if s["mode"] == "iq" else "beat-note frequency"
        ax.set_xlabel(f"{where} ({unit})")
    shown = db[sel & np.isfinite(db)]
    top = float(np.max(shown))
    # the floor from a low percentile of what is shown: deep notches waste the axis; room
    # below the floor keeps the legend off the lines
    floor = max(float(np.percentile(shown, 2)), top - 130.0)
    ax.set_ylim(floor - 30.0, top + 8)
    ax.set_ylabel("power per bin (dB re full scale)")
    ax.set_title(f"Spectrum of the gate at t = {v.t_s:g} s — {name}", fontsize=10, color=_INK)
    ax.legend(fontsize=8, loc="lower center", ncol=4, framealpha=0.9)
    return Plot("Spectrum", fig)


def plot_deviation(rec: RecordingReport) -> Plot:
    """The deviation waveform (FM modes; the audio itself in audio mode) and histogram."""
    v = rec.view
    s = rec.summary
    fm = s.get("fm")
    if v is None:
        return Plot("Deviation", None, "no gate to draw")
    fig, axes = _new_figure(2 if fm else 1)
    ax = axes[0]
    t_ms = np.asarray(v.waveform_s) * 1e3
    y = np.asarray(v.waveform, dtype=float)
    # about six cycles of the tone, so the shape (and any distortion) can be seen
    tone_hz = (fm or {}).get("mod_tone_hz") if fm else (s.get("tone") or {}).get("frequency_hz")
    if tone_hz and tone_hz > 0:
        keep = t_ms <= max(6.0 / tone_hz * 1e3, 2.0)
        if keep.sum() >= 8:
            t_ms, y = t_ms[keep], y[keep]
    style = ".-" if y.size < 200 else "-"
    if v.waveform_unit == "Hz":
        ax.plot(t_ms, y, style, color=_DATA, lw=1.0, ms=3, label="instantaneous deviation")
        ax.set_ylabel("deviation (Hz)")
        ax.set_title("Deviation waveform (after the post filter)", fontsize=10, color=_INK)
    else:
        ax.plot(t_ms, y, style, color=_DATA, lw=1.0, ms=3, label="audio samples")
        ax.set_ylabel("amplitude (full scale)")
        ax.set_title("Audio waveform", fontsize=10, color=_INK)
    ax.axhline(0, color=_GUIDE, lw=0.6)
    ax.set_xlabel(f"time from the gate at t = {v.t_s:g} s (ms)")
    ax.legend(fontsize=8, loc="upper right", framealpha=0.9)
    note = ""
    if fm:
        h = fm["deviation"]["histogram"]
        counts = np.asarray(h["counts"], dtype=float)
        ax2 = axes[1]
        if counts.size and counts.sum() > 0:
            # regroup the 1 Hz bins into about 80 for the eye
            group = _nice_group(counts.size * h["bin_hz"] / 80.0, h["bin_hz"])
            m = int(math.ceil(counts.size / group)) * group
            c = np.pad(counts, (0, m - counts.size)).reshape(-1, group).sum(axis=1)
            edges = h["first_edge_hz"] + h["bin_hz"] * group * np.arange(c.size + 1)
            pct = 100.0 * c / counts.sum()
            ax2.stairs(pct, edges, fill=True, color=_DATA, alpha=0.75, label="time share")
            d = fm["deviation"]
            ax2.axvline(d["peak_pos_hz"], color=_FIT, ls="--", lw=1.0, label="peak+ / peak-")
            ax2.axvline(d["peak_neg_hz"], color=_FIT, ls="--", lw=1.0)
            ax2.set_xlabel("deviation (Hz)")
            ax2.set_ylabel(f"share of time per {h['bin_hz'] * group:g} Hz (%)")
            ax2.set_title("Deviation histogram (whole record)", fontsize=10, color=_INK)
            ax2.legend(fontsize=8, loc="upper center", framealpha=0.9)
        else:
            note = "no deviation samples for the histogram"
    elif s["mode"] == "audio":
        note = "histogram of the deviation: only in beat and iq modes"
    return Plot("Deviation", fig, note)


def _nice_group(width_hz: float, bin_hz: float) -> int:
    """Bins per display bin so a display bin is 1, 2 or 5 times a power of ten Hz."""
    if not width_hz > bin_hz:
        return 1
    p = 10.0 ** math.floor(math.log10(width_hz))
    nice = min((m * p for m in (1, 2, 5, 10)), key=lambda w: abs(w - width_hz))
    return max(1, int(round(nice / bin_hz)))


def _history_series(rec: RecordingReport):
    """(t_s, frequency_hz, sigma_hz, what) of the full gates.

    FM modes use the RF when it is known, so drift in ppm and the fractional Allan
    figures refer to the oscillator's own frequency, not to the beat note.
    """
    gates = _full_gates(rec)
    fm_mode = rec.mode != "audio"
    use_rf = fm_mode and any(r.rf_hz is not None for r in gates)
    t, f, u = [], [], []
    for r in gates:
        if use_rf:
            val, sig = r.rf_hz, r.carrier_uncertainty_hz
        elif fm_mode:
            val, sig = r.carrier_hz, r.carrier_uncertainty_hz
        else:
            val, sig = r.frequency_hz, r.uncertainty_hz
        if val is not None and math.isfinite(val):
            t.append(r.t_s + 0.5 * r.gate_s)
            f.append(val)
            u.append(sig if sig is not None and math.isfinite(sig) else 0.0)
    if use_rf:
        what = "RF"
    elif rec.mode == "beat":
        what = "carrier (beat note; give --dial for the RF)"
    elif rec.mode == "iq":
        what = "carrier offset from the I/Q centre (give --dial for the RF)"
    else:
        what = "tone frequency"
    return np.array(t), np.array(f), np.array(u), what


def plot_history(rec: RecordingReport) -> Plot:
    """Gate-by-gate frequency with 1-sigma bars and the linear drift fit."""
    from dsp.stability import fit_drift

    t, f, u, what = _history_series(rec)
    if t.size < 2:
        return Plot("Frequency history", None, f"{t.size} gate(s) with a frequency: no history")
    ref = float(np.mean(f))
    fig, (ax,) = _new_figure()
    ax.errorbar(
        t,
        f - ref,
        yerr=u,
        fmt="o",
        ms=3.5,
        color=_DATA,
        ecolor=_DATA,
        elinewidth=0.8,
        capsize=2,
        label="gate readings (1σ)",
    )
    note = ""
    if t.size >= 3:
        d = fit_drift(t, f)
        tm = 0.5 * (t[0] + t[-1])
        ax.plot(
            t,
            d.linear_mid_hz + d.hz_per_s * (t - tm) - ref,
            color=_FIT,
            lw=1.4,
            label=f"linear drift {d.hz_per_s * 60:+.4g} Hz/min ({d.ppm_per_min:+.3g} ppm/min)",
        )
        if t.size >= 4:
            # the parabola from the same fit: f = f_mid + b (t - tm) + c (t - tm)^2
            b_mid = 0.5 * (d.quadratic_start_hz_per_s + d.quadratic_end_hz_per_s)
            c = d.quadratic_hz_per_s2
            shape = b_mid * (t - tm) + c * (t - tm) ** 2
            ax.plot(
                t,
                shape + float(np.mean(f - shape)) - ref,
                color=_SIDE,
                lw=1.2,
                ls="--",
                label=f"quadratic fit, rate {d.quadratic_start_hz_per_s * 60:+.4g} to "
                f"{d.quadratic_end_hz_per_s * 60:+.4g} Hz/min",
            )
    else:
        note = "drift fit needs three gates"
    ax.set_xlabel("time (s)")
    short = "RF" if what == "RF" else "frequency"
    ax.set_ylabel(f"{short} − {ref:.6f} Hz (Hz)")
    ax.set_title(f"Frequency history: {what}", fontsize=10, color=_INK)
    ax.legend(fontsize=8, loc="best", framealpha=0.9)
    return Plot("Frequency history", fig, note)


def stability_of(rec: RecordingReport):
    """(StabilityResult or None, note) of the gate readings (dsp.stability)."""
    from dsp.stability import analyze_stability

    t, f, _u, what = _history_series(rec)
    if t.size < MIN_ALLAN_READINGS:
        return None, (
            f"record too short for an Allan plot: {t.size} full-gate readings, at least "
            f"{MIN_ALLAN_READINGS} needed (three octaves of tau); record longer or use a "
            "shorter gate"
        )
    try:
        # the warm-up window only shapes the warm-up figure; keep it inside short records
        window = min(60.0, 0.25 * float(t[-1] - t[0]))
        res = analyze_stability(t, f, tau0_s=rec.settings.gate_s, settle_window_s=window)
    except ValueError as exc:
        return None, f"no Allan plot: {exc}"
    if rec.mode != "audio" and what != "RF":
        return res, f"fractional figures relative to the {what}, not to the oscillator"
    return res, ""


def plot_allan(rec: RecordingReport) -> Plot:
    """OADEV and MDEV with their confidence intervals and the drift signature."""
    res, note = stability_of(rec)
    if res is None:
        return Plot("Allan deviation", None, note)
    fig, (ax,) = _new_figure(width=7.0, height=4.0)

    def curve(c, label, color, marker, ls):
        tau = np.asarray(c.taus_s)
        val = np.asarray(c.values)
        err = np.vstack([val - np.asarray(c.lower), np.asarray(c.upper) - val])
        ax.errorbar(
            tau,
            val,
            yerr=err,
            color=color,
            marker=marker,
            ls=ls,
            ms=4,
            capsize=2,
            lw=1.2,
            label=label,
        )

    curve(res.adev, "overlapping ADEV (68 % interval)", _DATA, "o", "-")
    curve(res.mdev, "modified ADEV", _SIDE, "s", "--")
    tau = np.asarray(res.adev.taus_s)
    drift = abs(res.span_drift.hz_per_s) / res.nominal_hz
    if drift > 0:
        # linear drift D gives sigma_y = D*tau/sqrt(2) (NIST SP 1065, section 5.2.1)
        ax.plot(
            tau,
            drift * tau / math.sqrt(2),
            color=_FIT,
            ls=":",
            lw=1.2,
            label="drift signature D·τ/√2",
        )
    ax.set_xscale("log")
    ax.set_yscale("log")
    # label the measured taus themselves; matplotlib's 6x10^-1 style is hard to read
    ax.set_xticks(tau, [f"{x:g}" for x in tau])
    ax.xaxis.set_minor_formatter(_null_formatter())
    if tau.size > 1:
        ax.set_xlim(tau[0] / 1.4, tau[-1] * 1.4)
    ax.set_xlabel("averaging time τ (s)")
    ax.set_ylabel("σ_y(τ) (fractional frequency)")
    ax.set_title(
        f"Allan family, gate {res.check.tau0_s:g} s, noise type: {res.noise.noise_type}",
        fontsize=10,
        color=_INK,
    )
    ax.grid(True, which="both", color="#d9d6cf", lw=0.5)
    ax.legend(fontsize=8, loc="best", framealpha=0.9)
    return Plot("Allan deviation", fig, "; ".join([*res.warnings, note] if note else res.warnings))


def _null_formatter():
    from matplotlib.ticker import NullFormatter

    return NullFormatter()


def make_plots(rec: RecordingReport) -> list[Plot]:
    """All plots of one recording, in report order."""
    return [plot_spectrum(rec), plot_deviation(rec), plot_history(rec), plot_allan(rec)]


def png_bytes(fig) -> bytes:
    """A figure as PNG bytes (Agg)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, facecolor="white")
    return buf.getvalue()


# ---------------------------------------------------------------------------------------
# HTML

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;color:#1f2a30;
background:#f5f3ee;margin:0;padding:1.5rem 2rem;line-height:1.45}
h1{font-size:1.5rem;margin:0 0 .3rem}h2{font-size:1.2rem;border-bottom:2px solid #17706b;
padding-bottom:.2rem;margin-top:2rem}h3{font-size:1rem;margin:1.2rem 0 .4rem;color:#17706b}
table{border-collapse:collapse;margin:.4rem 0 1rem;font-size:.9rem;background:#fff}
th,td{border:1px solid #d9d6cf;padding:.25rem .55rem;text-align:left;vertical-align:top}
th{background:#e8efe9}td.num{font-variant-numeric:tabular-nums;white-space:nowrap}
tr.significant td{background:#fbe6cf;font-weight:600}
.caution{border-left:5px solid #c46a12;background:#fff8ee;padding:.6rem 1rem;margin:1rem 0}
.warn{color:#8a4b00}.note{color:#55616b;font-size:.88rem}
.pair{display:grid;grid-template-columns:1fr 1fr;gap:1.5rem}
.pair > section{min-width:0}img{max-width:100%;height:auto;background:#fff;
border:1px solid #d9d6cf}.meta td:first-child{white-space:nowrap}
"""


def _e(text) -> str:
    return html.escape(str(text), quote=True)


def _table(rows: Sequence[Sequence[str]], head: Sequence[str] | None = None, cls="") -> str:
    out = [f'<table class="{_e(cls)}">' if cls else "<table>"]
    if head:
        out.append("<tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + "</tr>")
    for r in rows:
        out.append("<tr>" + "".join(f"<td>{_e(c)}</td>" for c in r) + "</tr>")
    out.append("</table>")
    return "\n".join(out)


def _img(plot: Plot) -> str:
    parts = [f"<h3>{_e(plot.title)}</h3>"]
    if plot.figure is not None:
        data = base64.b64encode(png_bytes(plot.figure)).decode("ascii")
        parts.append(f'<img alt="{_e(plot.title)}" src="data:image/png;base64,{data}">')
    if plot.note:
        parts.append(f'<p class="note">{_e(plot.note)}</p>')
    return "\n".join(parts)


def _meta_rows(rec: RecordingReport) -> list[tuple[str, str]]:
    m = asdict(rec.analysis.meta)
    extra = m.pop("extra", {}) or {}
    rows = [(k, "—" if v is None else str(v)) for k, v in m.items()]
    rows += [(f"file {k}", str(v)) for k, v in extra.items()]
    st = asdict(rec.settings)
    fm = st.pop("fm", None) or {}
    rows += [(f"setting {k}", "—" if v is None else str(v)) for k, v in st.items()]
    rows += [(f"FM setting {k}", "—" if v is None else str(v)) for k, v in fm.items()]
    iq = rec.summary.get("iq")
    if iq:
        rows += [
            (f"I/Q {k}", f"{v:.4g}" if isinstance(v, float) else str(v)) for k, v in iq.items()
        ]
    return rows


def _profile_rows(rec: RecordingReport) -> list[tuple[str, str]]:
    return [(k, str(v)) for k, v in sorted((rec.profile or {}).items())]


def _band_html(bc: BandCheck) -> str:
    parts = ["<h3>Harmonics and protected bands</h3>"]
    if not bc.done:
        parts.append(f'<p class="note">{_e(bc.note)}</p>')
        return "\n".join(parts)
    if bc.rf_hits:
        parts.append('<p class="warn">The measured signal itself touches a protected band:</p>')
        parts.append(
            _table(
                [
                    (h.name, f"{h.lo_hz / 1e6:.4f}–{h.hi_hz / 1e6:.4f} MHz", h.source)
                    for h in bc.rf_hits
                ],
                ("band", "edges", "source"),
            )
        )
    if bc.harmonic_hits:
        parts.append('<p class="warn">Harmonics of the fundamental that touch protected bands:</p>')
        rows = []
        for h in bc.harmonic_hits:
            ns = ", ".join(str(n) for n in h.harmonics[:20])
            if h.count > 20:
                ns += f", … ({h.count} in all)"
            rows.append((h.band, f"{h.lo_hz / 1e6:.4f}–{h.hi_hz / 1e6:.4f} MHz", ns, h.source))
        parts.append(_table(rows, ("band", "edges", "harmonic numbers", "source")))
    if not bc.rf_hits:
        parts.append("<p>The measured RF signal itself touches no protected band.</p>")
    if not bc.harmonic_hits:
        parts.append("<p>No harmonic up to the limit touches a protected band.</p>")
    parts.append(f'<p class="note">{_e(bc.note)}</p>')
    return "\n".join(parts)


def _recording_html(rec: RecordingReport, plots: Sequence[Plot], label: str = "") -> str:
    s = rec.summary
    head = f"{label}{Path(rec.path).name}"
    parts = [f"<section><h2>{_e(head)}</h2>", f'<p class="note">{_e(rec.path)}</p>']
    parts.append("<h3>Summary</h3>")
    parts.append(_table(summary_rows(rec), ("what", "value")))
    warns = list(s.get("warnings", [])) + rec.notes
    if warns:
        parts.append("<ul>" + "".join(f'<li class="warn">{_e(w)}</li>' for w in warns) + "</ul>")
    for p in plots:
        parts.append(_img(p))
    parts.append(_band_html(band_check(rec)))
    parts.append("<h3>Metadata and settings</h3>")
    parts.append(_table(_meta_rows(rec), ("field", "value"), cls="meta"))
    parts.append("<h3>Bench profile</h3>")
    if rec.profile:
        parts.append(_table(_profile_rows(rec), ("field", "value"), cls="meta"))
    else:
        parts.append('<p class="note">none applied (clock correction as given)</p>')
    parts.append("</section>")
    return "\n".join(parts)


def _comparison_html(diffs: Sequence[Difference], a: RecordingReport, b: RecordingReport) -> str:
    rows = [
        "<h2>Before and after</h2>",
        f"<p>A = {_e(a.path)}, B = {_e(b.path)}.</p>",
        '<table class="comparison"><tr><th>figure</th><th>A</th><th>B</th><th>B − A</th>'
        "<th>2·√(uA²+uB²)</th><th>verdict</th></tr>",
    ]
    for d in diffs:
        if d.significant is None:
            verdict, limit = "no uncertainty", "—"
        else:
            verdict = "significant" if d.significant else "within uncertainty"
            limit = f"{COVERAGE_K * d.combined_sigma:.3g} {d.unit}".strip()
        cls = ' class="significant"' if d.significant else ""
        rows.append(
            f'<tr{cls} data-key="{_e(d.key)}" data-verdict="{_e(verdict)}">'
            f"<td>{_e(d.label)}</td><td class=num>{_e(d.a.text)}</td>"
            f"<td class=num>{_e(d.b.text)}</td><td class=num>{_e(_diff_text(d))}</td>"
            f"<td class=num>{_e(limit)}</td><td>{_e(verdict)}</td></tr>"
        )
    rows.append("</table>")
    rows.append(f'<p class="note">{_e(SIGNIFICANCE_RULE)}</p>')
    if a.mode != b.mode:
        rows.append(
            f'<p class="warn">{_e(f"the two recordings differ in mode ({a.mode} / {b.mode})")}</p>'
        )
    return "\n".join(rows)


def render_html(
    recs: Sequence[RecordingReport],
    *,
    compare: bool = False,
    title: str | None = None,
    plots: Sequence[Sequence[Plot]] | None = None,
    command: str | None = None,
) -> str:
    """The whole report as one self-contained HTML document.

    Parameters
    ----------
    recs : sequence of RecordingReport
    compare : bool, default False
        Two recordings side by side with the differences of their figures.
    title : str, optional
        The report's heading (default: "swingmeter report").
    plots : sequence of sequence of Plot, optional
        Plots already made with `make_plots` (one list per recording).
    command : str, optional
        The command line that made the report, shown at the top.

    Returns
    -------
    str

    Raises
    ------
    ValueError
        `compare` with other than two recordings, or no recordings.
    """
    from monitor import __version__

    if not recs:
        raise ValueError("recs must hold at least one recording")
    if compare and len(recs) != 2:
        raise ValueError(f"compare needs two recordings, got {len(recs)}")
    if plots is None:
        plots = [make_plots(r) for r in recs]
    title = title or "swingmeter report"
    now = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    out = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(title)}</title><style>{_CSS}</style></head><body>",
        f"<h1>{_e(title)}</h1>",
        f'<p class="note">swingmeter {_e(__version__)}, made {_e(now)}; '
        f"{len(recs)} recording(s). Uncertainties are 1σ.</p>",
    ]
    if command:
        out.append(f'<p class="note">command: <code>{_e(command)}</code></p>')
    out.append(f'<div class="caution">{_e(CAUTIONS)}</div>')
    if compare:
        a, b = recs
        out.append(_comparison_html(compare_quantities(quantities(a), quantities(b)), a, b))
        out.append('<div class="pair">')
        out.append(_recording_html(a, plots[0], "A: "))
        out.append(_recording_html(b, plots[1], "B: "))
        out.append("</div>")
    else:
        for rec, pl in zip(recs, plots, strict=True):
            out.append(_recording_html(rec, pl))
    out.append("</body></html>")
    return "\n".join(out) + "\n"


# ---------------------------------------------------------------------------------------
# files


def check_output_path(path) -> Path:
    """Refuse an output path that cannot be written before any work is done.

    Raises
    ------
    InputError
        The path is a directory, its folder does not exist or is not writable.
    """
    p = Path(path)
    if p.is_dir():
        raise InputError(f"{path}: is a directory; give a file name for the report")
    parent = p.parent if str(p.parent) else Path(".")
    if not parent.is_dir():
        raise InputError(f"{path}: cannot write the report (folder {parent} does not exist)")
    if not os.access(parent, os.W_OK) or (p.exists() and not os.access(p, os.W_OK)):
        raise InputError(f"{path}: cannot write the report (permission denied)")
    return p


def write_text(path, text: str) -> None:
    """Write the HTML (UTF-8); an OSError becomes an InputError naming the path."""
    try:
        Path(path).write_text(text, encoding="utf-8")
    except OSError as exc:
        raise InputError(f"{path}: cannot write the report ({exc.strerror or exc})") from None


def _text_page(lines: Sequence[str], title: str):
    import textwrap

    fig, (ax,) = _new_figure(width=8.27, height=11.69)  # A4 portrait
    ax.axis("off")
    wrapped: list[str] = []
    for line in lines:
        wrapped.extend(textwrap.wrap(line, 96, subsequent_indent="    ") or [""])
    fig.text(0.06, 0.965, title, fontsize=14, weight="bold", color=_INK, va="top")
    fig.text(
        0.06, 0.935, "\n".join(wrapped[:88]), fontsize=7.2, family="monospace", va="top", color=_INK
    )
    return fig, wrapped[88:]


def write_pdf(
    path,
    recs: Sequence[RecordingReport],
    *,
    compare: bool = False,
    title: str | None = None,
    plots: Sequence[Sequence[Plot]] | None = None,
) -> None:
    """A PDF of the report: summary pages as text, then one page per plot (PdfPages).

    Raises
    ------
    InputError
        matplotlib is missing or the file cannot be written.
    """
    _matplotlib()
    from matplotlib.backends.backend_pdf import PdfPages

    if plots is None:
        plots = [make_plots(r) for r in recs]
    title = title or "swingmeter report"
    lines = [CAUTIONS, ""]
    if compare and len(recs) == 2:
        lines.append(f"Before and after: A = {recs[0].path}, B = {recs[1].path}")
        for d in compare_quantities(quantities(recs[0]), quantities(recs[1])):
            verdict = (
                "no uncertainty"
                if d.significant is None
                else ("SIGNIFICANT" if d.significant else "within uncertainty")
            )
            lines.append(
                f"  {d.label}: A {d.a.text} | B {d.b.text} | B-A {_diff_text(d)} | {verdict}"
            )
        lines += [SIGNIFICANCE_RULE, ""]
    for i, rec in enumerate(recs):
        lines.append(("AB"[i] + ": " if compare else "") + rec.path)
        lines += [f"  {k}: {v}" for k, v in summary_rows(rec)]
        lines += [f"  warning: {w}" for w in rec.summary.get("warnings", [])]
        bc = band_check(rec)
        for h in bc.rf_hits:
            lines.append(f"  protected band touched by the RF: {h.name}")
        for h in bc.harmonic_hits:
            lines.append(f"  harmonics {', '.join(map(str, h.harmonics[:12]))} touch {h.band}")
        if rec.profile:
            lines.append(
                "  bench profile: " + ", ".join(f"{k}={v}" for k, v in rec.profile.items())
            )
        lines.append("")
    try:
        with PdfPages(path) as pdf:
            rest = lines
            page_title = title
            while rest:
                fig, rest = _text_page(rest, page_title)
                pdf.savefig(fig)
                page_title = f"{title} (continued)"
            for rec, pl in zip(recs, plots, strict=True):
                for p in pl:
                    if p.figure is not None:
                        p.figure.text(0.005, 0.008, Path(rec.path).name, fontsize=7, color=_GUIDE)
                        pdf.savefig(p.figure)
            info = pdf.infodict()
            info["Title"] = title
            info["Creator"] = "swingmeter"
    except OSError as exc:
        raise InputError(f"{path}: cannot write the PDF ({exc.strerror or exc})") from None


__all__ = [
    "CAUTIONS",
    "MIN_ALLAN_READINGS",
    "SIGNIFICANCE_RULE",
    "BandCheck",
    "Difference",
    "Plot",
    "Quantity",
    "RecordingReport",
    "analyze_for_report",
    "band_check",
    "check_output_path",
    "compare_quantities",
    "make_plots",
    "png_bytes",
    "quantities",
    "render_html",
    "summary_rows",
    "type_a_uncertainty",
    "write_pdf",
    "write_text",
]
