"""The window's text readouts, computed from readings without Qt (so they are testable
and the same words appear wherever a reading is shown)."""

from __future__ import annotations

import math
from dataclasses import dataclass

from dsp.tone import format_with_uncertainty
from monitor.engine import Reading

DASH = "—"
CLIP_WARN_DBFS = -0.1  # a peak this close to full scale has probably clipped


def num(v: float | None, fmt: str, unit: str = "") -> str:
    """A number with its unit, or a dash when it does not apply."""
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return DASH
    return f"{v:{fmt}}" + (f" {unit}" if unit else "")


@dataclass(frozen=True)
class ShownFrequency:
    """The frequency the counter area shows and what it is.

    Attributes
    ----------
    label : str
        "tone", "carrier", "RF" or "fundamental (RF / N)".
    value_hz, uncertainty_hz : float or None
    """

    label: str
    value_hz: float | None
    uncertainty_hz: float | None

    @property
    def text(self) -> str:
        if self.value_hz is None:
            return "no tone"
        sigma = self.uncertainty_hz if self.uncertainty_hz is not None else math.nan
        return format_with_uncertainty(self.value_hz, sigma)


def shown_frequency(r: Reading, *, harmonic: int = 1) -> ShownFrequency:
    """Pick the counter's frequency: the fundamental when the receiver hears a harmonic and
    the dial is known, else the RF, else the carrier's beat, else the audio tone."""
    unc = r.carrier_uncertainty_hz if r.carrier_uncertainty_hz is not None else r.uncertainty_hz
    if r.fundamental_hz is not None and harmonic > 1:
        return ShownFrequency(
            f"fundamental (RF / {harmonic})",
            r.fundamental_hz,
            None if unc is None else unc / harmonic,
        )
    if r.rf_hz is not None:
        return ShownFrequency("RF", r.rf_hz, unc)
    if r.carrier_hz is not None:
        return ShownFrequency("carrier", r.carrier_hz, unc)
    return ShownFrequency("tone", r.frequency_hz, r.uncertainty_hz)


class PeakHold:
    """Deviation peaks held since the last reset (peak+ the largest, peak- the most
    negative, RMS the largest)."""

    def __init__(self) -> None:
        self.reset()

    def reset(self) -> None:
        self.pos: float | None = None
        self.neg: float | None = None
        self.rms: float | None = None

    def add(self, r: Reading) -> None:
        if r.deviation_peak_pos_hz is not None:
            p = r.deviation_peak_pos_hz
            self.pos = p if self.pos is None else max(self.pos, p)
        if r.deviation_peak_neg_hz is not None:
            n = r.deviation_peak_neg_hz
            self.neg = n if self.neg is None else min(self.neg, n)
        if r.deviation_rms_hz is not None:
            s = r.deviation_rms_hz
            self.rms = s if self.rms is None else max(self.rms, s)


def quality_texts(r: Reading) -> dict[str, str]:
    """SNR, SINAD, THD, modulation index and level as the window shows them."""
    return {
        "snr": num(r.snr_db, ".1f", "dB"),
        "sinad": num(r.sinad_db, ".1f", "dB"),
        "thd": num(r.thd_percent, ".3g", "%"),
        "mod_index": num(r.mod_index, ".3f"),
        "mod_tone": num(r.mod_tone_hz, ".1f", "Hz"),
        "level": f"{num(r.rms_dbfs, '.1f')} dBFS rms, {num(r.peak_dbfs, '.1f')} dBFS peak",
    }


def clipping(r: Reading) -> bool:
    """True when the gate held clipped samples or peaked at full scale."""
    return r.clipped_samples > 0 or (
        r.peak_dbfs is not None and math.isfinite(r.peak_dbfs) and r.peak_dbfs >= CLIP_WARN_DBFS
    )


def deviation_texts(r: Reading, hold: PeakHold) -> dict[str, str]:
    return {
        "pos": num(r.deviation_peak_pos_hz, "+.1f", "Hz"),
        "neg": num(r.deviation_peak_neg_hz, "+.1f", "Hz"),
        "rms": num(r.deviation_rms_hz, ".1f", "Hz"),
        "hold_pos": num(hold.pos, "+.1f", "Hz"),
        "hold_neg": num(hold.neg, "+.1f", "Hz"),
        "hold_rms": num(hold.rms, ".1f", "Hz"),
    }


def clock_text(clock_ppm: float, profile: str | None) -> str:
    t = f"{clock_ppm:+.2f} ppm"
    return t + (f" (bench profile {profile})" if profile else "")


def protected_band_warning(
    r: Reading, *, dial_hz: float | None, harmonic: int, max_harmonic: int = 5
) -> str | None:
    """A warning when the oscillator or one of its first harmonics touches a protected band.

    Uses `dsp.harmonics.protected_band_hits` when that function exists; without it (or
    without a dial frequency and harmonic) returns None.
    """
    if dial_hz is None or harmonic < 1:
        return None
    try:
        from dsp.harmonics import protected_band_hits
    except ImportError:
        return None
    rf = r.rf_hz if r.rf_hz is not None else dial_hz
    f0 = r.fundamental_hz if r.fundamental_hz is not None else rf / harmonic
    dev = r.deviation_hold_hz
    if dev is None and r.deviation_peak_pos_hz is not None:
        dev = max(abs(r.deviation_peak_pos_hz), abs(r.deviation_peak_neg_hz or 0.0))
    dev0 = 0.0 if dev is None else dev / harmonic
    found = []
    for k in range(1, max_harmonic + 1):
        try:
            hits = protected_band_hits(k * f0, k * dev0)
        except (ValueError, TypeError):
            continue
        for h in hits:
            what = "the fundamental" if k == 1 else f"harmonic {k}"
            found.append(f"{what} ({k * f0 / 1e6:.4f} MHz) touches {h.name}")
    if not found:
        return None
    return "protected band: " + "; ".join(found[:3])
