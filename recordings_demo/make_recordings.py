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
    fs, dur = 48000, 6.0
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
    fs, dur = 48000, 6.0
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
]


def main() -> None:
    rng = np.random.default_rng(SEED)
    index = []
    for rec in RECORDINGS:
        x, fs = rec["make"](rng)
        sf.write(HERE / rec["file"], x, fs, subtype=rec["subtype"])
        entry = {k: v for k, v in rec.items() if k not in ("make", "subtype")}
        index.append(entry)
    (HERE / "index.json").write_text(json.dumps(index, indent=2) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
