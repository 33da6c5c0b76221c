"""Writes the demo recordings of swingmeter, deterministically (seeded), with index.json.

The scenario is invented: the bench of the Heronsgate Radio Workshop, where members
build small test oscillators (the "TO-7" board) and listen to them on a bench receiver
through a USB sound card. Nothing here is a real recording.

Run from the repository root:  python recordings_demo/make_recordings.py
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import soundfile as sf

HERE = Path(__file__).parent
SEED = 20261201

# The bench sound card's crystal runs fast by this much (true rate = nominal * (1 + P)).
CARD_PPM = 37.5


def _t(n: int, fs: float, ppm: float = CARD_PPM) -> np.ndarray:
    """Sample times as the card really takes them (its clock is off by `ppm`)."""
    return np.arange(n) / (fs * (1.0 + ppm * 1e-6))


def rx_audio(rng) -> tuple[np.ndarray, int]:
    """Bench receiver's audio of a 1 kHz test tone: hiss, 50 Hz hum, some distortion."""
    fs, dur = 48000, 4.0
    t = _t(int(fs * dur), fs)
    f = 1000.0
    x = 0.35 * np.sin(2 * np.pi * f * t)
    x += 0.35 * 0.012 * np.sin(2 * np.pi * 2 * f * t + 0.4)  # 2nd harmonic, -38 dB
    x += 0.35 * 0.006 * np.sin(2 * np.pi * 3 * f * t + 1.1)  # 3rd harmonic, -44 dB
    x += 0.35 * 0.01 * np.sin(2 * np.pi * 50.0 * t)  # mains hum, -40 dB
    x += 0.35 * 0.004 * np.sin(2 * np.pi * 150.0 * t + 0.2)
    x += 0.002 * rng.standard_normal(t.size)  # receiver hiss
    return x, fs


def reference_tone(rng) -> tuple[np.ndarray, int]:
    """A 1 kHz reference (GPS-disciplined generator) through the same card."""
    fs, dur = 48000, 4.0
    t = _t(int(fs * dur), fs)
    x = 0.5 * np.sin(2 * np.pi * 1000.0 * t + 0.7) + 2e-4 * rng.standard_normal(t.size)
    return x, fs


def drifting_tone(rng) -> tuple[np.ndarray, int]:
    """The TO-7 heard as a CW beat note while it warms up: +3 Hz, time constant 12 s."""
    fs, dur = 8000, 40.0
    t = _t(int(fs * dur), fs)
    f0, excursion, tau = 1500.0, 3.0, 12.0
    # phase = integral of f(t) = f0 + excursion * (1 - exp(-t/tau))
    phase = 2 * np.pi * (f0 * t + excursion * (t - tau * (1 - np.exp(-t / tau))))
    x = 0.3 * np.sin(phase) + 0.003 * rng.standard_normal(t.size)
    return x, fs


def _fm_phase(t, carrier_hz, dev_hz, tone_hz, drift_hz=0.0, dur=1.0):
    """Phase of a carrier with single-tone FM and a linear drift of drift_hz over dur."""
    return 2 * np.pi * (carrier_hz * t + 0.5 * drift_hz / dur * t * t) + (
        dev_hz / tone_hz
    ) * np.sin(2 * np.pi * tone_hz * t)


# The TO-7 board on the bench: fundamental 32.4333 MHz, heard on its 3rd harmonic at
# 97.3000 MHz (inside the broadcast band), frequency-modulated by a 1 kHz test tone.
TO7_RF_HZ = 97.300_000e6
DIAL_USB_HZ = 97.290_000e6  # SDR in USB: the carrier arrives as a 10 kHz beat note
IQ_CENTRE_HZ = 97.288_000e6  # quadrature mixer LO: the carrier sits at +12 kHz


def to7_beat(rng) -> tuple[np.ndarray, int]:
    """The TO-7 as a beat note: 1.5 kHz RF deviation at 1 kHz, warming (+1.5 Hz)."""
    fs, dur = 48000, 6.0
    t = _t(int(fs * dur), fs)
    x = 0.3 * np.sin(_fm_phase(t, TO7_RF_HZ - DIAL_USB_HZ, 1500.0, 1000.0, 1.5, dur))
    x += 0.003 * rng.standard_normal(t.size)  # about 40 dB C/N in a 10 kHz band
    return x, fs


def to7_iq(rng) -> tuple[np.ndarray, int]:
    """The TO-7 through a quadrature mixer: I/Q with a little imbalance and DC."""
    fs, dur = 48000, 3.0
    t = _t(int(fs * dur), fs)
    ph = _fm_phase(t, TO7_RF_HZ - IQ_CENTRE_HZ, 1500.0, 1000.0)
    i = 0.3 * np.cos(ph) + 0.004 + 0.002 * rng.standard_normal(t.size)
    g, phi = 10 ** (0.4 / 20), np.deg2rad(1.5)  # Q arm 0.4 dB hot, 1.5 degrees off
    q = g * 0.3 * np.sin(ph + phi) - 0.003 + 0.002 * rng.standard_normal(t.size)
    return np.stack([i, q], axis=1), fs


def _broadcast_audio(rng, dev_hz: float, dur: float) -> tuple[np.ndarray, int]:
    """A broadcast receiver's audio of the TO-7 modulated by 1 kHz at dev_hz: the
    receiver's discriminator (here: the ideal one), its 50 us de-emphasis, its volume."""
    from scipy.signal import bilinear, lfilter

    fs = 48000
    t = _t(int(fs * dur), fs)
    audio = dev_hz * np.sin(2 * np.pi * 1000.0 * t)  # instantaneous deviation, Hz
    tau = 50e-6
    b, a = bilinear([1.0], [tau, 1.0], fs)
    gain = 0.4 / 3000.0  # the receiver's volume: 3 kHz deviation -> 0.4 FS before de-emph.
    x = lfilter(b, a, audio) * gain + 0.0015 * rng.standard_normal(t.size)
    return x, fs


def null_audio(rng):
    return _broadcast_audio(rng, 2404.83, 3.0)


def null_beat(rng) -> tuple[np.ndarray, int]:
    """The same modulation (first carrier null, 2404.83 Hz at 1 kHz) as a beat note."""
    fs, dur = 48000, 3.0
    t = _t(int(fs * dur), fs)
    x = 0.3 * np.sin(_fm_phase(t, TO7_RF_HZ - DIAL_USB_HZ, 2404.83, 1000.0))
    return x + 0.002 * rng.standard_normal(t.size), fs


def adjusted_audio(rng):
    """After turning the TO-7's modulation trimmer: what deviation now?"""
    return _broadcast_audio(rng, 3000.0, 3.0)


FM_META = {"dial_hz": DIAL_USB_HZ, "sideband": "upper", "harmonic": 3}

RECORDINGS = [
    {
        "file": "rx-audio-1khz.wav",
        "make": rx_audio,
        "subtype": "PCM_16",
        "mode": "audio",
        "description": "bench receiver's audio of a 1 kHz test tone (hiss, 50 Hz hum, "
        "a little distortion)",
        "options": {},
    },
    {
        "file": "ref-tone-1khz.wav",
        "make": reference_tone,
        "subtype": "PCM_24",
        "mode": "audio",
        "description": "1000.000 Hz reference tone through the same sound card, for "
        "`swingmeter calibrate clock --reference 1000`",
        "options": {},
        "calibrate_clock_reference_hz": 1000.0,
    },
    {
        "file": "drifting-tone.wav",
        "make": drifting_tone,
        "subtype": "PCM_16",
        "mode": "audio",
        "description": "TO-7 test oscillator as a 1.5 kHz beat note while it warms up",
        "options": {"gate_s": 2.0},
    },
    {
        "file": "to7-beat.wav",
        "make": to7_beat,
        "subtype": "PCM_16",
        "mode": "beat",
        "description": "TO-7 heard on its 3rd harmonic at 97.3 MHz, SDR in USB at 97.290 MHz: "
        "a 10 kHz beat note with 1 kHz test-tone FM, warming up",
        "options": {"meta": FM_META},
        "command": "swingmeter analyze recordings_demo/to7-beat.wav --mode beat "
        "--dial 97.29M --sideband upper --harmonic 3",
    },
    {
        "file": "to7-iq.wav",
        "make": to7_iq,
        "subtype": "PCM_16",
        "mode": "iq",
        "description": "TO-7 through a quadrature mixer (LO 97.288 MHz) into the stereo line-in: "
        "I/Q with a little gain and phase imbalance",
        "options": {"meta": {"center_hz": IQ_CENTRE_HZ, "harmonic": 3}, "fm": {"iq_correct": True}},
        "command": "swingmeter analyze recordings_demo/to7-iq.wav --mode iq --dial 97.288M "
        "--harmonic 3 --iq-correct",
    },
    {
        "file": "to7-null-beat.wav",
        "make": null_beat,
        "subtype": "PCM_16",
        "mode": "beat",
        "description": "TO-7 set to the first carrier null (1 kHz tone, 2404.83 Hz deviation), "
        "heard as a beat note: the reference of the deviation calibration",
        "options": {"meta": FM_META},
    },
    {
        "file": "rx-fm-null.wav",
        "make": null_audio,
        "subtype": "PCM_16",
        "mode": "audio",
        "description": "a broadcast radio's audio (50 us de-emphasis) of the same modulation: "
        "the other half of the calibration pair",
        "options": {},
        "calibrate_deviation": {
            "reference": "to7-null-beat.wav",
            "reference_mode": "beat",
            "deemphasis": "50us",
        },
    },
    {
        "file": "rx-fm-adjusted.wav",
        "make": adjusted_audio,
        "subtype": "PCM_16",
        "mode": "audio",
        "description": "the broadcast radio's audio after turning the modulation trimmer: "
        "deviation read through the calibration",
        "options": {},
        "uses_deviation_calibration": True,
    },
]


def main() -> None:
    rng = np.random.default_rng(SEED)
    index = []
    for rec in RECORDINGS:
        x, fs = rec["make"](rng)
        sf.write(HERE / rec["file"], np.clip(x, -1, 1), fs, subtype=rec["subtype"])
        entry = {k: v for k, v in rec.items() if k not in ("make", "subtype")}
        index.append(entry)
    (HERE / "index.json").write_text(json.dumps(index, indent=2) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
