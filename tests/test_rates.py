"""Sample rates 8 kHz to 384 kHz and every sample format, read from tones sox generates.

sox (an independent generator) writes a 1234.5 Hz sine at half scale, 0.5 s long. The
analysis must find it within its stated uncertainty plus a floor derived from the file's
quantisation:

- Noise of the file. sox adds triangular (TPDF) dither of +-1 LSB when it reduces its
  internal 32-bit samples to 8, 16 or 24 bits: noise variance q^2/12 (rounding) + q^2/6
  (dither) = q^2/4, q = 2 / 2^bits of full scale (Lipshitz, Wannamaker & Vanderkooy,
  JAES 40(5), 1992 [memory]). 32-bit integer and float output carry sox's internal
  32-bit rounding only: q^2/12 with q = 2^-31 (sox works in 32-bit integers [memory]).
- Floor. The Cramer-Rao bound for a real tone in white noise (references.md: Kay 1993,
  Example 3.14 [memory]), var(f) >= 12 fs^2 / ((2 pi)^2 eta N (N^2 - 1)),
  eta = A^2 / (2 s^2), gives the smallest spread any estimator can reach; the check
  allows five times it, and 2e-12 relative for double-precision arithmetic: an ideal
  numpy sine (float64 file) reads 2.6e-13 low at every rate here, with a stated
  uncertainty of 5e-13 relative [computed].

sox must synthesise at the file's rate: `sox -r FS -n ...` (with `-n -r FS` it makes
48 kHz and resamples, whose transient and ripple move the reading by up to 1e-8
relative [computed]).

So a reading passes when |f - 1234.5| <= 5 u + 5 sigma_CRLB + 2e-12 f, where u is the
uncertainty the analysis states; u itself must stay within 10x the bound (or the
arithmetic floor), so a huge stated uncertainty cannot make the check pass.

The matrix is kept small: the diagonal of rates x formats plus every format at 48 kHz.
The rest of the file: stereo, NaN/Inf stretches, silence, DC, full-scale square waves
and clipped sines, each with its correct figures or its warning.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import soundfile as sf

from monitor.engine import analyze_file

F_HZ = 1234.5
AMP = 0.5  # sox "vol 0.5": half of full scale
DUR_S = 0.5
GATE_S = 0.25
ARITH_REL = 2e-12  # see the module docstring

RATES = [8000, 11025, 22050, 44100, 48000, 96000, 192000, 384000]
# subtype: (sox output options, bits of the step q, dithered by sox)
SUBTYPES = {
    "PCM_U8": (["-b", "8", "-e", "unsigned-integer"], 8, True),
    "PCM_16": (["-b", "16", "-e", "signed-integer"], 16, True),
    "PCM_24": (["-b", "24", "-e", "signed-integer"], 24, True),
    "PCM_32": (["-b", "32", "-e", "signed-integer"], 31, False),
    "FLOAT": (["-b", "32", "-e", "floating-point"], 31, False),
    "DOUBLE": (["-b", "64", "-e", "floating-point"], 31, False),
}
_ORDER = list(SUBTYPES)
DIAGONAL = [(fs, _ORDER[i % len(_ORDER)]) for i, fs in enumerate(RATES)]
MATRIX = DIAGONAL + [(48000, s) for s in _ORDER if (48000, s) not in DIAGONAL]


def noise_variance(subtype: str) -> float:
    """Noise variance of a sox-written file, full scale = 1 (see the module docstring)."""
    _, bits, dithered = SUBTYPES[subtype]
    q = 2.0 / 2.0**bits if bits < 31 else 2.0**-31
    return q * q / 4.0 if dithered else q * q / 12.0


def crlb_sigma_hz(fs: float, n: int, amp: float, var: float) -> float:
    """Kay (1993) Example 3.14 [memory]: Cramer-Rao bound on the std of a real tone's
    frequency from n samples."""
    eta = amp * amp / (2.0 * var)
    return math.sqrt(12.0 * fs * fs / ((2 * math.pi) ** 2 * eta * n * (n * n - 1.0)))


def sox_tone(sox, path, fs, subtype="PCM_24", *, effects=("sine", F_HZ), vol=AMP, extra=()):
    opts = SUBTYPES[subtype][0]
    sox("-r", fs, "-n", *opts, *extra, path, "synth", DUR_S, *effects, "vol", vol)
    info = sf.info(path)
    assert info.samplerate == fs and info.subtype == subtype  # sox wrote what was asked
    return path


class TestRateAndFormatMatrix:
    @pytest.mark.parametrize(("fs", "subtype"), MATRIX, ids=[f"{f}-{s}" for f, s in MATRIX])
    def test_tone_read_within_its_uncertainty(self, sox, tmp_path, fs, subtype):
        p = sox_tone(sox, tmp_path / "tone.wav", fs, subtype)
        a = analyze_file(p, gate_s=GATE_S)
        tone = a.summary.tone
        n = int(round(DUR_S * fs))
        sigma = crlb_sigma_hz(fs, n, AMP, noise_variance(subtype))
        arith = ARITH_REL * F_HZ
        assert tone.frequency_hz is not None
        err = abs(tone.frequency_hz - F_HZ)
        assert err <= 5 * tone.uncertainty_hz + 5 * sigma + arith, (err, tone.uncertainty_hz)
        assert tone.uncertainty_hz <= 10 * max(sigma, arith)
        # sox's "vol 0.5": -6.02 dBFS (20 log10 0.5); 0.05 dB covers 8-bit dither noise
        assert tone.amplitude_dbfs == pytest.approx(20 * math.log10(AMP), abs=0.05)
        assert a.summary.sample_rate_hz == fs
        assert a.summary.duration_s == pytest.approx(DUR_S, abs=1.0 / fs)
        assert not [w for w in a.summary.warnings if "clipping" in w or "NaN" in w]


class TestStereo:
    def test_each_channel_and_the_mix(self, sox, tmp_path):
        # sox puts one synth per channel: 1000 Hz left, 1500 Hz right
        p = tmp_path / "st.wav"
        sox(
            "-n",
            "-r",
            48000,
            "-c",
            2,
            "-b",
            24,
            p,
            "synth",
            DUR_S,
            "sine",
            1000,
            "sine",
            1500,
            "vol",
            AMP,
        )
        for channel, f in ((0, 1000.0), (1, 1500.0)):
            tone = analyze_file(p, gate_s=GATE_S, channel=channel).summary.tone
            assert abs(tone.frequency_hz - f) <= 5 * tone.uncertainty_hz + ARITH_REL * f
        # the mix holds both at half amplitude each: the counter reads one of them, the
        # other counting as interference in its uncertainty
        tone = analyze_file(p, gate_s=GATE_S, mix=True).summary.tone
        err = min(abs(tone.frequency_hz - 1000), abs(tone.frequency_hz - 1500))
        assert err <= 5 * tone.uncertainty_hz
        assert tone.amplitude_dbfs == pytest.approx(20 * math.log10(AMP / 2), abs=0.1)


class TestDoubtfulInput:
    def test_nan_and_inf_stretches(self, sox, tmp_path):
        # a sox tone with 100 NaN from 0.2 s and one +inf at 0.35 s: read as silence there,
        # named in a warning, the gates holding them not joined to their neighbours
        base = sox_tone(sox, tmp_path / "base.wav", 48000, "FLOAT")
        x, fs = sf.read(base, dtype="float64")
        x[9600:9700] = np.nan
        x[16800] = np.inf
        p = tmp_path / "holes.wav"
        sf.write(p, x, fs, subtype="FLOAT")
        a = analyze_file(p, gate_s=0.1)
        assert (
            "101 NaN/Inf samples at 0.200-0.202 s, 0.350 s replaced by silence; "
            "gates across them are not joined"
        ) in a.summary.warnings
        assert [r.t_s for r in a.readings if r.overflow] == [0.2, 0.3]
        tone = a.summary.tone
        assert abs(tone.frequency_hz - F_HZ) <= 5 * tone.uncertainty_hz + ARITH_REL * F_HZ

    def test_silence(self, sox, tmp_path):
        # vol 0 without dither (-D): all-zero samples
        p = tmp_path / "quiet.wav"
        sox("-r", 48000, "-n", "-b", 16, "-D", p, "synth", DUR_S, "sine", F_HZ, "vol", 0)
        s = analyze_file(p, gate_s=GATE_S).summary
        assert s.tone.frequency_hz is None
        assert "silence: no signal above the noise of the converter" in s.warnings

    def test_dc_offset(self, sox, tmp_path):
        # sox "dcshift 0.2" adds 0.2 of full scale to a 0.3 sine
        p = tmp_path / "dc.wav"
        sox(
            "-n", "-r", 48000, "-b", 24, p, "synth", DUR_S, "sine", F_HZ, "vol", 0.3, "dcshift", 0.2
        )
        s = analyze_file(p, gate_s=GATE_S).summary
        assert s.level.dc_offset == pytest.approx(0.2, abs=2e-3)
        assert any(w.startswith("DC offset of +0.20") for w in s.warnings)
        assert abs(s.tone.frequency_hz - F_HZ) <= 5 * s.tone.uncertainty_hz + ARITH_REL * F_HZ

    def test_full_scale_square(self, sox, tmp_path):
        # a full-scale square wave: clipping is reported; its fundamental is the tone read
        p = tmp_path / "square.wav"
        sox_tone(sox, p, 48000, "PCM_16", effects=("square", F_HZ), vol=1.0)
        s = analyze_file(p, gate_s=GATE_S).summary
        assert any(w.startswith("clipping:") for w in s.warnings)
        assert abs(s.tone.frequency_hz - F_HZ) <= 5 * s.tone.uncertainty_hz + ARITH_REL * F_HZ
        # fundamental of a +-1 square: 4/pi (Fourier series, common practice) = +2.10 dBFS
        assert s.tone.amplitude_dbfs == pytest.approx(20 * math.log10(4 / math.pi), abs=0.2)

    def test_clipped_sine(self, sox, tmp_path):
        # "vol 2" drives the sine to twice full scale; sox clips it at +-1
        p = tmp_path / "clipped.wav"
        sox_tone(sox, p, 48000, "PCM_16", vol=2.0)
        s = analyze_file(p, gate_s=GATE_S).summary
        assert any(w.startswith("clipping:") for w in s.warnings)
        assert s.level.clipped_samples > 0.5 * DUR_S * 48000  # |2 sin| >= 1 for 2/3 of time
        assert abs(s.tone.frequency_hz - F_HZ) <= 5 * s.tone.uncertainty_hz + ARITH_REL * F_HZ
