"""Tests of dsp.spectrum against scipy.signal.welch, window constants, Bessel line powers
(scipy.special.jv) and ffmpeg-generated FM."""

from __future__ import annotations

import json

import numpy as np
import pytest
import scipy.signal as ssig
import scipy.special as sspec

from dsp.spectrum import (
    Spectrum,
    SpectrumAverager,
    occupied_bandwidth_hz,
    power_spectrum,
    xdb_bandwidth_hz,
)
from tests.test_fm import ffmpeg_signal

FS = 48000.0


class TestPowerSpectrum:
    def test_matches_scipy_welch_real(self, rng):
        # Reference: scipy.signal.welch(scaling="spectrum"), same window and overlap.
        x = rng.standard_normal(20000) + 0.3 * np.sin(2 * np.pi * 1234.5 * np.arange(20000) / FS)
        s = power_spectrum(x, FS, nfft=2048)
        f, p = ssig.welch(
            x, FS, window=("kaiser", 14.0), nperseg=2048, noverlap=1024, detrend=False,
            scaling="spectrum",
        )  # fmt: skip
        np.testing.assert_allclose(s.freqs_hz, f)
        np.testing.assert_allclose(s.power, p, rtol=1e-10)
        assert s.onesided and s.averages == (20000 - 2048) // 1024 + 1

    def test_matches_scipy_welch_complex(self, rng):
        z = rng.standard_normal(9000) + 1j * rng.standard_normal(9000)
        s = power_spectrum(z, FS, nfft=1000, window="hann")
        f, p = ssig.welch(
            z, FS, window="hann", nperseg=1000, noverlap=500, detrend=False,
            scaling="spectrum", return_onesided=False,
        )  # fmt: skip
        np.testing.assert_allclose(s.freqs_hz, np.fft.fftshift(f))
        np.testing.assert_allclose(s.power, np.fft.fftshift(p), rtol=1e-10)
        assert s.freqs_hz[0] == pytest.approx(-FS / 2)

    def test_sine_power_and_enbw(self):
        # A sine of amplitude A on a bin reads A^2/2 (common practice). Hann ENBW is
        # 1.50 bins (F. J. Harris, Proc. IEEE 66(1), 1978, Table 1 [memory]).
        t = np.arange(48000) / FS
        s = power_spectrum(2.0 * np.sin(2 * np.pi * 1000 * t), FS, nfft=4800, window="hann")
        assert s.power[100] == pytest.approx(2.0, rel=1e-9)
        assert s.enbw_hz / s.bin_hz == pytest.approx(1.5, rel=1e-3)
        # Parseval: total power of the whole record = mean square.
        assert s.total_power == pytest.approx(2.0, rel=1e-3)

    def test_whole_record_default(self, rng):
        x = rng.standard_normal(1000)
        s = power_spectrum(x, FS)
        assert s.nfft == 1000 and s.averages == 1
        json.dumps(s.to_dict())

    def test_raises(self):
        with pytest.raises(ValueError, match="empty"):
            power_spectrum([], FS)
        with pytest.raises(ValueError, match="nfft=100 is longer"):
            power_spectrum(np.ones(10), FS, nfft=100)
        with pytest.raises(ValueError, match="window='hamming'"):
            power_spectrum(np.ones(100), FS, window="hamming")
        with pytest.raises(ValueError, match="fs_hz=0"):
            power_spectrum(np.ones(100), 0.0)
        with pytest.raises(ValueError, match="one-dimensional"):
            power_spectrum(np.ones((10, 2)), FS)


class TestSpectrumAverager:
    def test_chunked_equals_whole(self, rng):
        x = rng.standard_normal(30000)
        a = SpectrumAverager(FS, 1024)
        a.update(x)
        b = SpectrumAverager(FS, 1024)
        for part in np.array_split(x, 23):
            b.update(part)
        b.update([])
        assert a.averages == b.averages
        np.testing.assert_allclose(a.result().power, b.result().power, rtol=1e-12)

    def test_raises(self):
        with pytest.raises(ValueError, match="nfft=4"):
            SpectrumAverager(FS, 4)
        with pytest.raises(ValueError, match=r"overlap=0\.99"):
            SpectrumAverager(FS, 64, overlap=0.99)
        with pytest.raises(ValueError, match="no complete segment"):
            SpectrumAverager(FS, 64).result()
        with pytest.raises(TypeError, match="real for kind='real'"):
            SpectrumAverager(FS, 64).update(np.ones(100, dtype=complex))
        with pytest.raises(ValueError, match="kind='iq'"):
            SpectrumAverager(FS, 64, kind="iq")


def _line_band_order(beta: float, fraction: float = 0.99) -> int:
    """Line order K at which the power outside each side drops below (1-fraction)/2,
    from the line powers J_k(beta)^2 (scipy.special.jv)."""
    tail = (1 - fraction) / 2
    k = 0
    while sum(sspec.jv(n, beta) ** 2 for n in range(k + 1, k + 60)) > tail:
        k += 1
    return k


class TestOccupiedBandwidth:
    def test_single_tone_fm_ffmpeg(self, tmp_path):
        # ffmpeg I/Q, carrier +5 kHz, beta 5 at fm 1 kHz. The 99% band must end at the
        # lines +/-K where the line power sum of J_k^2 (scipy.special.jv) leaves < 0.5%
        # outside each side; limits then fall within that line's bin.
        z = ffmpeg_signal(
            tmp_path, "b5",
            "cos(2*PI*5000*t+5*sin(2*PI*1000*t))|sin(2*PI*5000*t+5*sin(2*PI*1000*t))",
            d=1.0,
        )  # fmt: skip
        s = power_spectrum(z, FS, nfft=48000)
        low, high, bw = occupied_bandwidth_hz(s)
        k = _line_band_order(5.0)
        assert k == 6
        assert low == pytest.approx(5000 - k * 1000, abs=3 * s.bin_hz)
        assert high == pytest.approx(5000 + k * 1000, abs=3 * s.bin_hz)
        assert bw == pytest.approx(2 * k * 1000, abs=6 * s.bin_hz)

    def test_band_limited_white_noise(self, rng):
        # Flat noise band of width B: 0.5% of B cut from each edge -> 0.99 B (definition);
        # the band-pass is a sharp scipy FIR, 4 kHz .. 12 kHz.
        h = ssig.firwin(2001, [4000, 12000], pass_zero=False, fs=FS)
        x = ssig.lfilter(h, 1.0, rng.standard_normal(400_000))[2000:]
        s = power_spectrum(x, FS, nfft=8192)
        low, high, bw = occupied_bandwidth_hz(s)
        assert bw == pytest.approx(0.99 * 8000, rel=0.01)
        assert low == pytest.approx(4040, abs=40)
        assert high == pytest.approx(11960, abs=40)

    def test_raises(self):
        s = power_spectrum(np.ones(64), FS)
        with pytest.raises(ValueError, match=r"fraction=1\.0"):
            occupied_bandwidth_hz(s, 1.0)
        with pytest.raises(TypeError, match="Spectrum"):
            occupied_bandwidth_hz(np.ones(10))
        zero = power_spectrum(np.zeros(64), FS)
        with pytest.raises(ValueError, match="not all zero"):
            occupied_bandwidth_hz(zero)


class TestXdbBandwidth:
    def test_fm_lines(self):
        # Lines |J_k(3)| at fm 1 kHz (scipy.special.jv): the outermost lines within 26 dB
        # of the strongest set the band, widened by the window's main lobe (< 3 bins).
        fs, fm, fc, beta = FS, 1000.0, 0.0, 3.0
        t = np.arange(48000) / fs
        z = np.exp(1j * (2 * np.pi * fc * t + beta * np.sin(2 * np.pi * fm * t)))
        s = power_spectrum(z, fs, nfft=48000)
        lines = np.abs(sspec.jv(np.arange(-20, 21), beta)) ** 2
        k_out = int(np.max(np.abs(np.arange(-20, 21)[lines >= lines.max() * 10**-2.6])))
        low, high, bw = xdb_bandwidth_hz(s, 26.0)
        assert bw == pytest.approx(high - low)
        assert low == pytest.approx(-k_out * fm, abs=3 * s.bin_hz)
        assert high == pytest.approx(k_out * fm, abs=3 * s.bin_hz)
        assert low <= -k_out * fm and high >= k_out * fm

    def test_noise_band(self, rng):
        # A sharp 4-12 kHz noise band: its -26 dB points sit at the band edges, smeared
        # by the Kaiser(14) main lobe (first null 4.56 bins out [computed]) -> 4 bins.
        h = ssig.firwin(2001, [4000, 12000], pass_zero=False, fs=FS)
        x = ssig.lfilter(h, 1.0, rng.standard_normal(400_000))[2000:]
        s = power_spectrum(x, FS, nfft=4096)
        low, high, _ = xdb_bandwidth_hz(s, 26.0)
        assert low == pytest.approx(4000, abs=4 * s.bin_hz)
        assert high == pytest.approx(12000, abs=4 * s.bin_hz)

    def test_raises(self):
        s = power_spectrum(np.ones(64), FS)
        with pytest.raises(ValueError, match="x_db=0"):
            xdb_bandwidth_hz(s, 0.0)
        assert isinstance(s, Spectrum)
