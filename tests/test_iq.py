"""Tests of dsp.iq: imbalance added with numpy to ffmpeg-generated I/Q, the image
measured with a plain numpy FFT as the outside reference."""

from __future__ import annotations

import math

import numpy as np
import pytest

from dsp.fm import FmDemodulator, deviation_figures
from dsp.iq import IqHealth, image_rejection_db, iq_correct, iq_health, modulation_index
from tests.test_fm import IQ_EXPR, ffmpeg_signal

FS = 48000


def _impair(z: np.ndarray, gain_db: float, phase_deg: float, dc_i: float, dc_q: float):
    """Q arm scaled by g and rotated by phi toward I, plus DC (the module's model)."""
    g = 10 ** (gain_db / 20)
    phi = math.radians(phase_deg)
    i = z.real
    q = g * (math.sin(phi) * z.real + math.cos(phi) * z.imag)
    return (i + dc_i) + 1j * (q + dc_q)


def _fft_image_db(z: np.ndarray, f_hz: float) -> float:
    """Tone-to-image power ratio read from a rectangular-window FFT on exact bins."""
    spec = np.fft.fft(z) / z.size
    k = round(f_hz * z.size / FS)
    return 10 * math.log10(abs(spec[k]) ** 2 / abs(spec[-k]) ** 2)


@pytest.fixture(scope="module")
def tone(tmp_path_factory):
    # ffmpeg I/Q tone at +5 kHz, 1 s: whole cycles, lines on exact FFT bins.
    d = tmp_path_factory.mktemp("ffmpeg_iq")
    return ffmpeg_signal(d, "tone", "0.5*cos(2*PI*5000*t)|0.5*sin(2*PI*5000*t)", d=1.0)


@pytest.fixture(scope="module")
def fm_iq(tmp_path_factory):
    d = tmp_path_factory.mktemp("ffmpeg_iq_fm")
    return ffmpeg_signal(d, "fm", IQ_EXPR, d=2.0)


class TestImageRejectionDb:
    def test_rule_of_thumb(self):
        # Common practice: 1 degree of phase error alone limits image rejection to about
        # 41 dB; 0.1 dB of gain error alone to about 45 dB [memory].
        assert image_rejection_db(0.0, 1.0) == pytest.approx(41.2, abs=0.1)
        assert image_rejection_db(0.1, 0.0) == pytest.approx(44.8, abs=0.1)
        assert image_rejection_db(0.0, 0.0) == math.inf

    def test_raises(self):
        with pytest.raises(ValueError, match="gain_imbalance_db=nan"):
            image_rejection_db(float("nan"), 0.0)


class TestIqHealth:
    def test_blind_estimate_matches_fft_image(self, tone):
        z = _impair(tone, 0.8, 4.0, 0.01, -0.02)
        h = iq_health(z)
        assert h.gain_imbalance_db == pytest.approx(0.8, abs=0.01)
        assert h.phase_imbalance_deg == pytest.approx(4.0, abs=0.05)
        assert h.dc_i == pytest.approx(0.01, abs=1e-4)
        assert h.dc_q == pytest.approx(-0.02, abs=1e-4)
        # Outside reference: the image line measured by a numpy FFT.
        assert h.image_rejection_db == pytest.approx(_fft_image_db(z, 5000.0), abs=0.1)
        assert h.n_samples == tone.size

    def test_clean_ffmpeg(self, tone):
        h = iq_health(tone)
        assert abs(h.gain_imbalance_db) < 0.001
        assert abs(h.phase_imbalance_deg) < 0.01
        assert h.image_rejection_db > 60

    def test_raises(self):
        with pytest.raises(TypeError, match="complex"):
            iq_health(np.ones(10))
        with pytest.raises(ValueError, match="at least 2"):
            iq_health(np.ones(1, dtype=complex))
        with pytest.raises(ValueError, match="no signal"):
            iq_health(np.ones(10, dtype=complex))
        with pytest.raises(ValueError, match="finite"):
            iq_health(np.array([1j, np.nan]))


class TestIqCorrect:
    def test_restores_image_rejection(self, tone):
        z = _impair(tone, -1.2, -6.0, 0.03, 0.01)
        assert _fft_image_db(z, 5000.0) < 25
        fixed = iq_correct(z, iq_health(z))
        assert _fft_image_db(fixed, 5000.0) > 60
        assert abs(np.mean(fixed)) < 1e-4

    def test_fm_deviation_after_correction(self, fm_iq, rng):
        # ffmpeg FM (1600 Hz peak) with imbalance and noise from numpy: after correction
        # the demodulated deviation is within 0.5% again.
        z = _impair(fm_iq, 1.5, 8.0, 0.05, -0.05)
        z = z + 0.002 * (rng.standard_normal(z.size) + 1j * rng.standard_normal(z.size))
        fixed = iq_correct(z, iq_health(z))
        dm = FmDemodulator(FS, 6000.0, 8000.0, kind="complex")
        fig = deviation_figures(dm.process(fixed))
        assert fig.rms_sqrt2_hz == pytest.approx(1600.0, rel=0.005)

    def test_empty(self):
        h = IqHealth(0.0, 0.0, 0.0, 0.0, math.inf, 0)
        assert iq_correct(np.zeros(0, dtype=complex), h).size == 0

    def test_raises(self):
        with pytest.raises(TypeError, match="IqHealth"):
            iq_correct(np.ones(3, dtype=complex), None)
        bad = IqHealth(0.0, 0.0, 0.0, 90.0, 0.0, 10)
        with pytest.raises(ValueError, match="phase_imbalance_deg=90"):
            iq_correct(np.ones(3, dtype=complex), bad)


class TestModulationIndex:
    def test_reexport(self):
        # Definition beta = deltaf / fm; A&S Table 9.5 first J0 zero at 1 kHz.
        assert modulation_index(2404.83, 1000.0) == pytest.approx(2.40483)
