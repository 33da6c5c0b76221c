"""FM modes end to end (beat, iq) against signals from an independent generator (ffmpeg),
published Bessel zeros and worked RF arithmetic."""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pytest
import soundfile as sf
from hypothesis import given, settings
from hypothesis import strategies as st

from monitor.blocks import StreamMeta
from monitor.cli import main
from monitor.engine import AnalysisSettings, analyze_file
from monitor.fm_engine import (
    CNR_MEDIAN_STEP_DB,
    FmSettings,
    _MedianBins,
    rf_from_carrier,
    rf_warning,
)

# First zero of J0 (Abramowitz & Stegun Table 9.5; DLMF 10.21) [seen cited].
J0_FIRST_ZERO = 2.404825557695773


def beat_fm(ffmpeg, path, *, carrier=9000.0, beta=2.0, fm=800.0, rate=48000, dur=3, amp=0.5):
    expr = f"{amp}*sin(2*PI*{carrier}*t+{beta}*sin(2*PI*{fm}*t))"
    ffmpeg("-f", "lavfi", "-i", f"aevalsrc={expr}:s={rate}:d={dur}", "-c:a", "pcm_f32le", path)
    return path


def iq_fm(ffmpeg, path, *, offset=12000.0, beta=J0_FIRST_ZERO, fm=1000.0, rate=192000, dur=2):
    ph = f"2*PI*{offset}*t+{beta}*sin(2*PI*{fm}*t)"
    expr = f"0.4*cos({ph})|0.4*sin({ph})"
    ffmpeg("-f", "lavfi", "-i", f"aevalsrc={expr}:s={rate}:d={dur}", "-c:a", "pcm_f32le", path)
    return path


def fm_summary(path, mode, **fm):
    a = analyze_file(path, settings=AnalysisSettings(mode=mode, fm=FmSettings(**fm)))
    return a, a.extra["fm"]


def within(value, truth, rel=0.005, abs_=5.0):
    """The issue's tolerance: 0.5% or 5 Hz, whichever is larger."""
    return abs(value - truth) <= max(rel * abs(truth), abs_)


class TestBeat:
    def test_ffmpeg_beat_note(self, ffmpeg, tmp_path):
        # carrier 9 kHz, beta 2 at 800 Hz: peak deviation 1600 Hz (generator's formula)
        p = beat_fm(ffmpeg, tmp_path / "fm.wav")
        a, fm = fm_summary(p, "beat")
        assert fm["carrier_hz"] == pytest.approx(9000.0, abs=1e-3)
        d = fm["deviation"]
        for key in ("peak_pos_hz", "peak_avg_hz", "rms_sqrt2_hz", "tone_peak_hz"):
            assert within(d[key], 1600.0, abs_=1.0), key
        assert within(-d["peak_neg_hz"], 1600.0, abs_=1.0)
        assert fm["mod_tone_hz"] == pytest.approx(800.0, abs=1e-3)
        assert fm["mod_index"] == pytest.approx(2.0, rel=0.005)
        assert fm["bessel_mod_index"] == pytest.approx(2.0, rel=0.005)
        # Carson's rule, Federal Standard 1037C: B = 2 (deltaf + fm) = 4800 Hz
        assert fm["carson_bw_hz"] == pytest.approx(4800.0, rel=0.005)
        # 99% occupied bandwidth (ITU-R SM.328 [memory for the clause]) of beta-2 FM: lines
        # beyond +/-3 hold 0.2% of the power, line 3 on each side 1.7% (scipy.special.jv
        # [computed]), so each 0.5% cut falls on the 3rd line: about 2 * 3 * 800 Hz, to
        # within the analysis window's main lobe.
        assert fm["occupied_bw_hz"] == pytest.approx(4800.0, abs=100.0)
        # BS.412: P = 10 log10(<df^2> / (19 kHz^2 / 2)) for a 1600 Hz sine
        expected = 10 * np.log10((1600.0**2 / 2) / (19000.0**2 / 2))
        assert fm["mod_power_dbr"] == pytest.approx(expected, abs=0.05)
        assert all(r.mod_tone_hz == pytest.approx(800.0, abs=0.01) for r in a.readings)
        # per gate too: RMS x sqrt(2) of a sine is its peak, the generator's 1600 Hz
        assert all(within(r.deviation_rms_sqrt2_hz, 1600.0, abs_=1.0) for r in a.readings)
        # the summary dict is what dataclasses.asdict (the reference) makes of it
        import dataclasses

        from monitor.engine import Engine
        from monitor.sources import open_source

        with open_source(p, mode="beat") as src:
            eng = Engine(src.meta, AnalysisSettings(mode="beat", fm=FmSettings()))
            for b in src:
                eng.feed(b)
        assert eng.extra()["fm"] == dataclasses.asdict(eng.processor.fm_summary())

    def test_carrier_null(self, ffmpeg, tmp_path):
        # beta at the first zero of J0 with fm = 1 kHz: the carrier line vanishes and the
        # deviation is 2404.8 Hz (references.md, A&S Table 9.5).
        p = beat_fm(ffmpeg, tmp_path / "null.wav", carrier=7000.0, beta=J0_FIRST_ZERO, fm=1000.0)
        _, fm = fm_summary(p, "beat")
        b = fm["bessel"]
        assert b["carrier_depth_db"] < -40
        assert b["nearest_carrier_null"] == 1
        assert b["nearest_null_mod_index"] == pytest.approx(2.40483, abs=1e-5)
        assert fm["bessel_mod_index"] * 1000.0 == pytest.approx(2404.8, abs=2.0)
        assert fm["deviation"]["tone_peak_hz"] == pytest.approx(2404.8, abs=2.0)

    def test_noise_and_drift(self, ffmpeg, tmp_path, rng):
        # the ffmpeg signal with white noise at 30 dB carrier-to-noise in a 10 kHz IF band
        # and a slow carrier drift (+2 Hz over 3 s) mixed on top with numpy
        fs, dur = 48000, 3
        expr = "0.5*sin(2*PI*(9000*t+t*t/3)+2*sin(2*PI*800*t))"
        p = tmp_path / "nd.wav"
        ffmpeg("-f", "lavfi", "-i", f"aevalsrc={expr}:s={fs}:d={dur}", "-c:a", "pcm_f32le", p)
        x, _ = sf.read(p)
        cnr_db, bw = 30.0, 10000.0
        noise_density = (0.5**2 / 2) / 10 ** (cnr_db / 10) / bw
        x = x + rng.standard_normal(x.size) * np.sqrt(noise_density * fs / 2)
        sf.write(p, x, fs, subtype="FLOAT")
        a, fm = fm_summary(p, "beat", if_bandwidth_hz=bw)
        # mean carrier over the record: 9000 + 2/3 * 1.5 = 9001 Hz
        assert fm["carrier_hz"] == pytest.approx(9001.0, abs=0.05)
        assert a.summary.tone.drift_hz_per_s == pytest.approx(2 / 3, rel=0.05)
        d = fm["deviation"]
        assert within(d["tone_peak_hz"], 1600.0)
        assert within(d["rms_sqrt2_hz"], 1600.0)
        assert fm["mod_index"] == pytest.approx(2.0, rel=0.005)
        assert fm["bessel_mod_index"] == pytest.approx(2.0, rel=0.005)
        assert 25 < fm["cnr_db"] < 40  # measured in the (wider) demodulator band
        # the summary's CNR is the median of the gates' (numpy.median), to its 0.01 dB bins
        cnrs = [r.cnr_db for r in a.readings]
        assert fm["cnr_db"] == pytest.approx(np.median(cnrs), abs=CNR_MEDIAN_STEP_DB / 2)


class TestClockCorrection:
    def test_every_frequency_scales_with_the_clock(self, ffmpeg, tmp_path, capsys):
        # a card running 100 ppm fast: all frequencies (carrier, tone, deviation, RF
        # offset) scale by 1 + 100e-6, as the counter's do; the index (a ratio) does not
        p = beat_fm(ffmpeg, tmp_path / "fm.wav")
        argv = ["analyze", str(p), "--mode", "beat", "--dial", "97.291M", "--json"]
        assert main([*argv, "--clock-ppm", "100"]) == 0
        fm = json.loads(capsys.readouterr().out)["fm"]
        s = 1 + 100e-6
        assert fm["carrier_hz"] == pytest.approx(9000.0 * s, abs=1e-3)
        assert fm["rf_hz"] == pytest.approx(97_291_000.0 + 9000.0 * s, abs=1e-3)
        assert fm["mod_tone_hz"] == pytest.approx(800.0 * s, abs=1e-4)
        assert fm["deviation"]["tone_peak_hz"] == pytest.approx(1600.0 * s, rel=2e-5)
        assert fm["mod_index"] == pytest.approx(2.0, rel=2e-5)


def _ffmpeg_wav(ffmpeg, path, expr, rate=48000, dur=3):
    ffmpeg("-f", "lavfi", "-i", f"aevalsrc={expr}:s={rate}:d={dur}", "-c:a", "pcm_f32le", path)
    return path


class TestLegitimateSignalsPass:
    """The set-up's refusals turn away no legitimate recording (ffmpeg signals; truths
    from the generator's expressions)."""

    @pytest.mark.parametrize(
        ("expr", "rate", "beta"),
        [
            # FM with hum on it as FM (-40 dB lines of another spacing) and as AM
            ("0.3*sin(2*PI*9000*t+2*sin(2*PI*800*t)+0.02*sin(2*PI*50*t))", 48000, 2.0),
            ("0.3*(1+0.01*sin(2*PI*50*t))*sin(2*PI*9000*t+2*sin(2*PI*800*t))", 48000, 2.0),
            # a small index (sidebands 32 dB down), a large one, near both band edges
            ("0.3*sin(2*PI*9000*t+0.05*sin(2*PI*1000*t))", 48000, 0.05),
            ("0.3*sin(2*PI*9000*t+8*sin(2*PI*500*t))", 48000, 8.0),
            ("0.3*sin(2*PI*1500*t+0.5*sin(2*PI*300*t))", 48000, 0.5),
            ("0.3*sin(2*PI*20000*t+1*sin(2*PI*1000*t))", 48000, 1.0),
            ("0.3*sin(2*PI*2000*t+1*sin(2*PI*400*t))", 8000, 1.0),
            # with its 2nd harmonic 23 dB down (an overdriven stage)
            ("0.3*sin(2*PI*9000*t+2*sin(2*PI*800*t))+0.02*sin(2*PI*18000*t+4*sin(2*PI*800*t))",
             48000, 2.0),
        ],
    )  # fmt: skip
    def test_beat(self, ffmpeg, tmp_path, expr, rate, beta):
        p = _ffmpeg_wav(ffmpeg, tmp_path / "x.wav", expr, rate)
        a, fm = fm_summary(p, "beat")
        assert fm["mod_index"] == pytest.approx(beta, rel=0.005)
        assert not any("NOT to be trusted" in w for w in a.summary.warnings)

    @pytest.mark.parametrize(
        "expr",
        ["0.3*sin(2*PI*9000*t)+0.003*sin(2*PI*18000*t)",  # a carrier and its harmonics
         "0.3*sin(2*PI*1000*t)+0.001*sin(2*PI*2000*t)+0.0003*sin(2*PI*3000*t)"],
    )  # fmt: skip
    def test_carrier_with_harmonics(self, ffmpeg, tmp_path, expr):
        p = _ffmpeg_wav(ffmpeg, tmp_path / "x.wav", expr)
        _, fm = fm_summary(p, "beat")
        f0 = 9000.0 if "9000" in expr else 1000.0
        assert fm["carrier_hz"] == pytest.approx(f0, abs=1e-6)
        assert fm["mod_index"] is None

    def test_iq_tuned_onto_the_carrier(self, ffmpeg, tmp_path):
        # offset 0 Hz, beta 0.2 at 1 kHz: I and Q are far from circular (I nearly DC),
        # but they are an I/Q pair
        expr = "0.4*cos(0.2*sin(2*PI*1000*t))|0.4*sin(0.2*sin(2*PI*1000*t))"
        p = _ffmpeg_wav(ffmpeg, tmp_path / "x.wav", expr)
        _, fm = fm_summary(p, "iq")
        assert fm["mod_index"] == pytest.approx(0.2, rel=0.005)

    def test_noise_is_not_another_signal(self, ffmpeg, tmp_path, rng):
        # an ffmpeg carrier at 3 dB SNR (numpy noise): no "other signals" note
        x, fs = sf.read(_ffmpeg_wav(ffmpeg, tmp_path / "x.wav", "0.3*sin(2*PI*9000*t)"))
        p = tmp_path / "n.wav"
        sf.write(p, x + rng.normal(0.0, 0.15, x.size), fs, subtype="FLOAT")
        a, fm = fm_summary(p, "beat")
        assert fm["carrier_hz"] == pytest.approx(9000.0, abs=0.01)
        assert not any("other signals" in w for w in a.summary.warnings)


class TestSeveralSignals:
    def test_carrier_near_picks_one_of_two(self, ffmpeg, tmp_path):
        # ffmpeg: FM at 8 kHz (beta 1.5 at 1 kHz) plus an unmodulated carrier at 16 kHz of
        # the same level; each is measured on its own, the other left out and said so
        p = tmp_path / "two.wav"
        expr = "0.3*sin(2*PI*8000*t+1.5*sin(2*PI*1000*t))+0.3*sin(2*PI*16000*t)"
        ffmpeg("-f", "lavfi", "-i", f"aevalsrc={expr}:s=48000:d=3", "-c:a", "pcm_f32le", p)
        a, fm = fm_summary(p, "beat", carrier_near_hz=8000.0)
        assert fm["carrier_hz"] == pytest.approx(8000.0, abs=1e-3)
        assert fm["mod_index"] == pytest.approx(1.5, rel=0.005)
        assert any("other signals" in w for w in a.summary.warnings)
        a, fm = fm_summary(p, "beat", carrier_near_hz=16000.0)
        assert fm["carrier_hz"] == pytest.approx(16000.0, abs=1e-3)
        assert fm["mod_index"] is None  # a plain carrier: no tone, no index
        assert fm["deviation"]["rms_hz"] < 1.0


class TestToneThroughPostFilter:
    """The tone's deviation and the modulation index are the carrier's, whatever the post
    filter and de-emphasis do to the demodulated audio (their gain at the tone is divided
    out); the peak figures stay as filtered. Truth: the ffmpeg generator's beta * fm."""

    @pytest.mark.parametrize(
        ("fm", "beta", "extra"),
        [
            (300.0, 1.0, {}),  # the 300-3000 filter's lower corner (-3 dB)
            (2500.0, 1.0, {}),  # near its upper corner
            (3000.0, 2.0, {"if_bandwidth_hz": 19000.0}),  # at the upper corner
            (1000.0, 1.5, {"deemphasis": "50us"}),  # 1 kHz through 50 us: -0.41 dB
            (1000.0, 1.5, {"deemphasis": "75us", "post_filter": "none"}),
        ],
    )
    def test_mod_index_is_the_carriers(self, ffmpeg, tmp_path, fm, beta, extra):
        p = beat_fm(ffmpeg, tmp_path / "fm.wav", carrier=10000.0, beta=beta, fm=fm)
        a, s = fm_summary(p, "beat", **extra)
        assert s["mod_index"] == pytest.approx(beta, rel=0.005)
        assert within(s["deviation"]["tone_peak_hz"], beta * fm)
        assert s["carson_bw_hz"] == pytest.approx(2 * (beta * fm + fm), rel=0.005)
        assert all(r.mod_index == pytest.approx(beta, rel=0.005) for r in a.readings)
        assert not any("passes only" in w for w in a.summary.warnings)

    def test_deemphasis_lowers_the_filtered_peaks_only(self, ffmpeg, tmp_path):
        # 75 us at 2122 Hz corner: a 2 kHz tone comes out at 1/sqrt(1 + (2000/2122)^2)
        # = 0.7277 (ITU-R BS.450 time constant; first-order low-pass, common practice)
        p = beat_fm(ffmpeg, tmp_path / "fm.wav", carrier=10000.0, beta=1.0, fm=2000.0)
        _, s = fm_summary(p, "beat", deemphasis="75us", post_filter="none")
        g = 1.0 / math.sqrt(1.0 + (2000.0 * 2 * math.pi * 75e-6) ** 2)
        assert s["deviation"]["peak_avg_hz"] == pytest.approx(2000.0 * g, rel=0.01)
        assert s["mod_index"] == pytest.approx(1.0, rel=0.005)

    def test_tone_outside_the_filter_band_is_said(self, ffmpeg, tmp_path):
        # 150 Hz through the 300-3000 filter: about -25 dB; still corrected, but said
        p = beat_fm(ffmpeg, tmp_path / "fm.wav", carrier=10000.0, beta=2.0, fm=150.0)
        a, s = fm_summary(p, "beat")
        assert s["mod_index"] == pytest.approx(2.0, rel=0.01)
        assert any("passes only" in w and "--post-filter none" in w for w in a.summary.warnings)


class TestCnrMedian:
    @settings(max_examples=200, deadline=None)
    @given(
        values=st.lists(
            st.one_of(
                st.floats(-30.0, 90.0),
                st.sampled_from([math.inf, -math.inf, math.nan]),
            ),
            min_size=0,
            max_size=60,
        ),
        cut=st.integers(0, 60),
    )
    def test_against_numpy_median(self, values, cut):
        # Reference: numpy.median of the values without NaN (numpy.nanmedian), to half a
        # bin; the bins of two parts merged give the median of the whole stream.
        whole, first, later = (_MedianBins(CNR_MEDIAN_STEP_DB) for _ in range(3))
        for i, v in enumerate(values):
            whole.add(v)
            (first if i < cut else later).add(v)
        first.merge(later)
        assert first.median() == whole.median() or math.isnan(whole.median())
        kept = [v for v in values if not math.isnan(v)]
        if not kept:
            assert whole.median() is None
            return
        with np.errstate(invalid="ignore"):  # the median of -inf and +inf is NaN
            want = float(np.median(kept))
        got = whole.median()
        if math.isinf(want) or math.isnan(want):
            assert got == want or (math.isnan(want) and math.isnan(got))
        else:
            assert got == pytest.approx(want, abs=CNR_MEDIAN_STEP_DB / 2 + 1e-9)


class TestShortGates:
    def test_bandwidths_at_a_tenth_of_a_second(self, ffmpeg, tmp_path):
        # 0.1 s gates hold 1200 baseband samples at 12 kHz: the averaged spectrum takes
        # shorter segments, so the occupied and -26 dB bandwidths are still given (ffmpeg
        # beta 2 at 800 Hz: Carson 4.8 kHz; 99% of the power inside 4.8 kHz, J_k from
        # scipy.special in test_fm; here within a tenth of it)
        p = beat_fm(ffmpeg, tmp_path / "fm.wav")
        s = AnalysisSettings(mode="beat", gate_s=0.1, fm=FmSettings(if_bandwidth_hz=8000.0))
        fm = analyze_file(p, settings=s).extra["fm"]
        assert fm["occupied_bw_hz"] == pytest.approx(4800.0, rel=0.1)
        assert fm["bw_26db_hz"] is not None


class TestIq:
    def test_ffmpeg_iq(self, ffmpeg, tmp_path):
        p = iq_fm(ffmpeg, tmp_path / "iq.wav")
        _, fm = fm_summary(p, "iq")
        assert fm["carrier_hz"] == pytest.approx(12000.0, abs=1e-3)
        assert fm["deviation"]["tone_peak_hz"] == pytest.approx(2404.8, abs=2.0)
        assert fm["bessel"]["carrier_depth_db"] < -40
        assert fm["post_filter"] == "20-15k"

    def test_negative_offset_and_swap(self, ffmpeg, tmp_path):
        p = iq_fm(ffmpeg, tmp_path / "iq.wav", offset=-7000.0, beta=1.0, fm=1000.0)
        _, fm = fm_summary(p, "iq")
        assert fm["carrier_hz"] == pytest.approx(-7000.0, abs=1e-3)
        # swapped channels mirror the spectrum: the carrier reads +7 kHz
        a = analyze_file(p, settings=AnalysisSettings(mode="iq", fm=FmSettings()), swap_iq=True)
        assert a.extra["fm"]["carrier_hz"] == pytest.approx(7000.0, abs=1e-3)

    def test_imbalance_is_measured_and_corrected(self, ffmpeg, tmp_path):
        p = iq_fm(ffmpeg, tmp_path / "iq.wav", beta=2.0, fm=1000.0)
        z, fs = sf.read(p)
        i, q = z[:, 0], z[:, 1]
        g, phi = 10 ** (1.0 / 20), np.deg2rad(3.0)  # Q arm 1 dB hot and 3 degrees off
        q2 = g * (q * np.cos(phi) + i * np.sin(phi)) + 0.01
        sf.write(p, np.stack([i, q2], axis=1), fs, subtype="FLOAT")
        _, fm_raw = fm_summary(p, "iq")
        a, fm = fm_summary(p, "iq", iq_correct=True)
        iq = a.extra["iq"]
        assert iq["gain_imbalance_db"] == pytest.approx(1.0, abs=0.05)
        assert abs(iq["phase_imbalance_deg"]) == pytest.approx(3.0, abs=0.2)
        assert iq["image_rejection_db"] < 40
        assert fm["deviation"]["tone_peak_hz"] == pytest.approx(2000.0, rel=0.005)
        assert fm["mod_index"] == pytest.approx(2.0, rel=0.005)
        # the discriminator tolerates this much imbalance even uncorrected
        assert fm_raw["deviation"]["tone_peak_hz"] == pytest.approx(2000.0, rel=0.005)

    def test_sigmf_center_frequency(self, tmp_path):
        from sigmf import SigMFFile

        fs, n = 96000.0, 96000 * 2
        t = np.arange(n) / fs
        z = 0.5 * np.exp(1j * (2 * np.pi * 5000 * t + 1.5 * np.sin(2 * np.pi * 1000 * t)))
        base = tmp_path / "cap"
        z.astype(np.complex64).tofile(str(base) + ".sigmf-data")
        meta = SigMFFile(
            data_file=str(base) + ".sigmf-data",
            global_info={"core:datatype": "cf32_le", "core:sample_rate": fs},
        )
        meta.add_capture(0, metadata={"core:frequency": 97.0e6})
        meta.tofile(str(base) + ".sigmf-meta")
        a = analyze_file(str(base) + ".sigmf-meta", settings=AnalysisSettings(mode="iq"))
        assert a.extra["fm"]["rf_hz"] == pytest.approx(97.005e6, abs=0.01)


class TestRfArithmetic:
    """Worked numbers (common practice for SSB reception of a carrier)."""

    def meta(self, **kw):
        return StreamMeta(source="x", fs_hz=48000.0, **kw)

    def test_upper_sideband(self):
        # dial 97.300000 MHz USB, beat note 1500 Hz: RF = 97.301500 MHz
        m = self.meta(mode="beat", dial_hz=97.3e6, sideband="upper")
        assert rf_from_carrier(m, 1500.0) == pytest.approx(97_301_500.0)

    def test_lower_sideband(self):
        # the same beat note heard on LSB: RF = 97.298500 MHz
        m = self.meta(mode="beat", dial_hz=97.3e6, sideband="lower")
        assert rf_from_carrier(m, 1500.0) == pytest.approx(97_298_500.0)

    def test_iq_centre(self):
        m = self.meta(mode="iq", center_hz=100.0e6)
        assert rf_from_carrier(m, -25_000.0) == pytest.approx(99_975_000.0)

    def test_no_dial(self):
        assert rf_from_carrier(self.meta(mode="beat"), 1500.0) is None
        assert rf_warning(self.meta(mode="beat"), 1500.0) is None

    def test_dial_below_the_beat_note_on_lsb(self, ffmpeg, tmp_path, capsys):
        # dial 5 kHz, lower sideband, beat note 9 kHz: 5000 - 9000 < 0 Hz, no frequency
        m = self.meta(mode="beat", dial_hz=5000.0, sideband="lower")
        assert rf_from_carrier(m, 9000.0) is None
        assert "not a positive frequency" in rf_warning(m, 9000.0)
        p = beat_fm(ffmpeg, tmp_path / "h.wav")
        argv = ["analyze", str(p), "--mode", "beat", "--dial", "5k", "--sideband", "lower"]
        assert main([*argv, "--json"]) == 0
        d = json.loads(capsys.readouterr().out)
        assert d["fm"]["rf_hz"] is None and d["fm"]["fundamental_hz"] is None
        assert any("check --dial and --sideband" in w for w in d["warnings"])

    def test_harmonic_through_the_cli(self, ffmpeg, tmp_path, capsys):
        # beat 9 kHz on USB at dial 97.291 MHz: RF 97.300 MHz; heard as the 3rd harmonic,
        # the fundamental is 32.433333 MHz and its deviation 1600 / 3 = 533.3 Hz.
        p = beat_fm(ffmpeg, tmp_path / "h.wav")
        argv = ["analyze", str(p), "--mode", "beat", "--dial", "97.291M", "--harmonic", "3"]
        assert main([*argv, "--json"]) == 0
        d = json.loads(capsys.readouterr().out)
        fm = d["fm"]
        assert fm["rf_hz"] == pytest.approx(97_300_000.0, abs=0.01)
        assert fm["fundamental_hz"] == pytest.approx(97_300_000.0 / 3, abs=0.01)
        assert fm["fundamental_deviation_hz"] == pytest.approx(1600.0 / 3, rel=0.005)
        assert fm["harmonic"] == 3
        # the table shows the same
        assert main(argv) == 0
        out = capsys.readouterr().out
        rf_shown = float(re.search(r"RF\s+([0-9.]+) ±", out).group(1))
        assert rf_shown == pytest.approx(97_300_000.0, abs=0.01)
        assert "RF / 3" in out


class TestBadInput:
    def _fails(self, capsys, *argv, match):
        rc = main(list(argv))
        err = capsys.readouterr().err
        assert rc == 2, err
        assert "Traceback" not in err and match in err
        return err

    def test_no_carrier(self, tmp_path, capsys, rng):
        p = tmp_path / "hiss.wav"
        sf.write(p, 0.1 * rng.standard_normal(48000 * 2), 48000, subtype="FLOAT")
        self._fails(capsys, "analyze", str(p), "--mode", "beat", match="no carrier found")

    def test_carrier_not_where_asked(self, ffmpeg, tmp_path, capsys):
        p = beat_fm(ffmpeg, tmp_path / "fm.wav")
        self._fails(
            capsys, "analyze", str(p), "--mode", "beat", "--carrier-near", "3000",
            match="no carrier found near 3000",
        )  # fmt: skip

    def test_if_band_too_narrow(self, ffmpeg, tmp_path, capsys):
        # beta 2 at 800 Hz in a 2 kHz IF: the first sideband pair is in, but the band holds
        # J0^2 + 2 J1^2 = 71% of the power (scipy.special.jv): no deviation figure
        p = beat_fm(ffmpeg, tmp_path / "fm.wav")
        self._fails(
            capsys, "analyze", str(p), "--mode", "beat", "--if-bandwidth", "2000",
            match="holds only",
        )  # fmt: skip

    @pytest.mark.parametrize("mode", ["beat", "iq"])
    def test_tone_above_half_the_if_bandwidth(self, ffmpeg, tmp_path, capsys, mode):
        # beta 0.2 at 3 kHz in a 4 kHz IF: 98% of the power (the carrier) is in the band,
        # but both sidebands are out, so the tone would vanish and the deviation read 0
        if mode == "beat":
            p = beat_fm(ffmpeg, tmp_path / "fm.wav", carrier=10000.0, beta=0.2, fm=3000.0)
        else:
            p = iq_fm(ffmpeg, tmp_path / "fm.wav", offset=8000.0, beta=0.2, fm=3000.0)
        self._fails(
            capsys, "analyze", str(p), "--mode", mode, "--if-bandwidth", "4000",
            match="3000 Hz away, outside the IF bandwidth 4000 Hz",
        )  # fmt: skip
        # with the band the message asks for, the figures are right (generator's 600 Hz)
        _, fm = fm_summary(p, mode, if_bandwidth_hz=7200.0)
        assert fm["mod_index"] == pytest.approx(0.2, rel=0.005)
        assert within(fm["deviation"]["tone_peak_hz"], 600.0)

    def test_if_band_does_not_fit(self, ffmpeg, tmp_path, capsys):
        p = beat_fm(ffmpeg, tmp_path / "fm.wav", carrier=2000.0, beta=0.5, fm=300.0)
        self._fails(
            capsys, "analyze", str(p), "--mode", "beat", "--if-bandwidth", "5000",
            match="does not fit",
        )  # fmt: skip

    def test_audio_file_as_iq(self, ffmpeg, tmp_path, capsys):
        p = beat_fm(ffmpeg, tmp_path / "fm.wav")
        self._fails(capsys, "analyze", str(p), "--mode", "iq", match="--mode iq needs a stereo")

    def test_signal_past_the_band_edge_is_refused(self, ffmpeg, tmp_path, capsys):
        # carrier 1000 Hz, beta 8 at 200 Hz: Carson half-width (beta + 1) fm = 1800 Hz
        # (Federal Standard 1037C) reaches far below 0 Hz
        p = beat_fm(ffmpeg, tmp_path / "fm.wav", carrier=1000.0, beta=8.0, fm=200.0)
        self._fails(
            capsys, "analyze", str(p), "--mode", "beat", match="reaches past the edge",
        )  # fmt: skip

    @pytest.mark.parametrize(("carrier", "beta", "fm"), [(600.0, 1.5, 300.0), (1500.0, 3.0, 500.0)])
    def test_folded_signal_is_refused(self, ffmpeg, tmp_path, capsys, carrier, beta, fm):
        # lines below 0 Hz fold back onto the others (600 Hz, beta 1.5 at 300 Hz: -300
        # and -600 Hz land on 300 and 600 Hz), so the spectrum looks narrower than it is;
        # its sidebands' partners are missing at the band's edge: refused, with a way out
        p = beat_fm(ffmpeg, tmp_path / "fm.wav", carrier=carrier, beta=beta, fm=fm)
        self._fails(
            capsys, "analyze", str(p), "--mode", "beat",
            match="does not fit around the carrier in this recording",
        )  # fmt: skip

    def test_folded_but_measured_signal_is_not_trusted(self, ffmpeg, tmp_path):
        # carrier 1200 Hz, beta 1.5 at 400 Hz: the 3rd lower line sits on 0 Hz and the 4th
        # (-400 Hz) folds onto the 2nd (400 Hz); every sideband keeps a partner, so it is
        # measured, but its lines no longer fit one-tone FM (the |J_k| fit, scipy.special.jv,
        # leaves a residual over 0.05) and the index reads off the generator's 1.5: the
        # summary says not to trust it
        p = beat_fm(ffmpeg, tmp_path / "fm.wav", carrier=1200.0, beta=1.5, fm=400.0)
        a, fm = fm_summary(p, "beat")
        assert fm["bessel"]["residual"] > 0.05
        assert fm["mod_index"] != pytest.approx(1.5, rel=0.005)
        assert any("NOT to be trusted" in w for w in a.summary.warnings)

    def test_outer_lines_at_the_edge_are_noted_only(self, ffmpeg, tmp_path):
        # beta 2 at 3 kHz on a 10 kHz carrier: the 4th lines (J4(2)^2 = 0.1% of the power
        # each, scipy.special.jv) fall at -2 kHz; the figures stay within 0.5%
        p = beat_fm(ffmpeg, tmp_path / "fm.wav", carrier=10000.0, beta=2.0, fm=3000.0)
        a, fm = fm_summary(p, "beat", if_bandwidth_hz=19000.0)
        assert fm["mod_index"] == pytest.approx(2.0, rel=0.005)
        assert any("outer lines" in w for w in a.summary.warnings)
        assert not any("NOT to be trusted" in w for w in a.summary.warnings)

    @pytest.mark.parametrize(
        ("expr", "rate", "extra"),
        [
            # beta 0.2 at 3 kHz in a 4 kHz IF with faint hum: the hum's pair is inside
            ("0.3*sin(2*PI*9000*t+0.2*sin(2*PI*3000*t)+0.01*sin(2*PI*50*t))", 48000,
             ("--if-bandwidth", "4000")),
            # the upper sideband on fs/2 (8 kHz): only the lower is in the band
            ("0.3*sin(2*PI*3000*t+0.3*sin(2*PI*1000*t))", 8000, ()),
            # the sidebands of a 700 Hz beat note at 100 and 1300 Hz: no IF fits
            ("0.3*sin(2*PI*700*t+0.2*sin(2*PI*600*t))", 48000, ()),
        ],
    )  # fmt: skip
    def test_sidebands_cut_by_if_or_band(self, ffmpeg, tmp_path, capsys, expr, rate, extra):
        p = _ffmpeg_wav(ffmpeg, tmp_path / "x.wav", expr, rate)
        self._fails(
            capsys, "analyze", str(p), "--mode", "beat", *extra, match="sidebands of the signal"
        )

    @pytest.mark.parametrize("sign", [1.0, -1.0])
    def test_two_channel_audio_as_iq(self, ffmpeg, tmp_path, capsys, sign):
        # an ffmpeg beat note copied to both channels (or inverted in one): image
        # rejection 0 dB, so no I/Q pair; said as such, not as an IF band problem
        mono, fs = sf.read(beat_fm(ffmpeg, tmp_path / "fm.wav"))
        p = tmp_path / "two.wav"
        sf.write(p, np.column_stack([mono, sign * mono]), fs, subtype="FLOAT")
        self._fails(capsys, "analyze", str(p), "--mode", "iq", match="not an I/Q pair")

    def test_dead_q_channel(self, ffmpeg, tmp_path, capsys):
        # ffmpeg I/Q with the Q (right) channel silenced by numpy: named, not a traceback
        p = iq_fm(ffmpeg, tmp_path / "iq.wav", rate=48000, offset=6000.0, beta=0.5)
        x, fs = sf.read(p)
        x[:, 1] = 0.0
        sf.write(p, x, fs, subtype="FLOAT")
        self._fails(capsys, "analyze", str(p), "--mode", "iq", match="Q (right) channel")

    def test_iq_file_as_audio_warns(self, ffmpeg, tmp_path, capsys):
        p = iq_fm(ffmpeg, tmp_path / "iq.wav", rate=48000, offset=3000.0, beta=0.5)
        assert main(["analyze", str(p), "--json"]) == 0
        d = json.loads(capsys.readouterr().out)
        assert any("look like I/Q" in w for w in d["warnings"])


def broadcast_audio(path, dev_hz, *, gain=0.4 / 3000.0, tau=50e-6, fs=48000, dur=2.0, seed=4):
    """A receiver's audio of a 1 kHz tone at dev_hz with its de-emphasis, made with
    scipy.signal.bilinear (not our filter code) and seeded hiss."""
    from scipy.signal import bilinear, lfilter

    t = np.arange(int(fs * dur)) / fs
    b, a = bilinear([1.0], [tau, 1.0], fs)
    x = lfilter(b, a, dev_hz * np.sin(2 * np.pi * 1000.0 * t)) * gain
    x += 1e-4 * np.random.default_rng(seed).standard_normal(t.size)
    sf.write(path, x, fs, subtype="PCM_24")
    return path


class TestAudioDeviation:
    def test_not_calibrated(self, tmp_path, capsys):
        p = broadcast_audio(tmp_path / "rx.wav", 3000.0)
        assert main(["analyze", str(p), "--json", "--readings"]) == 0
        d = json.loads(capsys.readouterr().out)
        assert d["deviation"]["calibrated"] is False
        assert "not calibrated" in d["deviation"]["note"]
        assert not any(k.startswith("deviation_") for r in d["readings"] for k in r)
        assert main(["analyze", str(p)]) == 0
        assert "not calibrated" in capsys.readouterr().out

    def test_pair_calibration_then_reading(self, ffmpeg, tmp_path, capsys):
        # the same modulation (1 kHz at the first carrier null, 2404.83 Hz) as a beat note
        # from ffmpeg and as a receiver's audio; then a new audio recording at 3 kHz
        beat = beat_fm(ffmpeg, tmp_path / "beat.wav", carrier=9000.0, beta=J0_FIRST_ZERO,
                       fm=1000.0)  # fmt: skip
        rx = broadcast_audio(tmp_path / "rx.wav", 1000.0 * J0_FIRST_ZERO)
        argv = [
            "calibrate", "deviation", "--audio", str(rx), "--reference", str(beat),
            "--reference-mode", "beat", "--deemphasis", "50us", "--profile", "rx1", "--json",
        ]  # fmt: skip
        assert main(argv) == 0
        cal = json.loads(capsys.readouterr().out)
        # the audio holds gain * dev (before de-emphasis): factor = 1 / gain = 7500 Hz/FS
        assert cal["deviation_hz_per_unit"] == pytest.approx(7500.0, rel=0.005)
        later = broadcast_audio(tmp_path / "later.wav", 3000.0, seed=5)
        assert main(["analyze", str(later), "--profile", "rx1", "--json"]) == 0
        d = json.loads(capsys.readouterr().out)["deviation"]
        assert d["calibrated"] is True
        assert d["tone_peak_hz"] == pytest.approx(3000.0, rel=0.005)
        assert d["rms_sqrt2_hz"] == pytest.approx(3000.0, rel=0.005)
        assert d["mod_index"] == pytest.approx(3.0, rel=0.005)

    def test_stated_deviation(self, tmp_path, capsys):
        rx = broadcast_audio(tmp_path / "rx.wav", 2000.0, tau=75e-6)
        argv = [
            "calibrate", "deviation", "--audio", str(rx), "--deviation", "2k",
            "--deemphasis", "75us", "--profile", "rx2", "--json",
        ]  # fmt: skip
        assert main(argv) == 0
        cal = json.loads(capsys.readouterr().out)
        assert cal["deviation_hz_per_unit"] == pytest.approx(7500.0, rel=0.005)

    def test_mismatched_pair(self, ffmpeg, tmp_path, capsys):
        beat = beat_fm(ffmpeg, tmp_path / "beat.wav", fm=800.0)
        rx = broadcast_audio(tmp_path / "rx.wav", 2000.0)
        rc = main([
            "calibrate", "deviation", "--audio", str(rx), "--reference", str(beat),
            "--profile", "x",
        ])  # fmt: skip
        assert rc == 2
        assert "not the same modulation" in capsys.readouterr().err


class TestBatches:
    @pytest.mark.parametrize("mode", ["beat", "iq"])
    def test_batches_equal_gate_by_gate(self, ffmpeg, tmp_path, mode):
        # Whole gates measured stage by stage in batches (a recording read in large
        # blocks) give the readings and summary of gates measured one by one (small
        # blocks), bit for bit, a gap in the middle included (ffmpeg FM, numpy noise).
        from monitor.blocks import Block
        from monitor.engine import Engine
        from monitor.sources import open_source

        if mode == "beat":
            p = beat_fm(ffmpeg, tmp_path / "fm.wav", dur=4)
        else:
            p = iq_fm(ffmpeg, tmp_path / "iq.wav", rate=48000, offset=6000.0, beta=2.0, dur=4)
        with open_source(p, mode=mode) as src:
            meta = src.meta
            x = np.concatenate([b.samples for b in src])
        x = x + 1e-3 * np.random.default_rng(1).standard_normal(x.shape)
        s = AnalysisSettings(mode=mode, gate_s=0.25, fm=FmSettings(if_bandwidth_hz=8000.0))
        gap = 9 * 12000  # samples of gates 9 and 10 never arrive
        runs = []
        for size in (997, 8 * 12000):
            eng = Engine(meta, s)
            for a in range(0, x.shape[0], size):
                b = min(a + size, x.shape[0])
                lo, hi = max(a, gap), min(b, gap + 2 * 12000)
                if lo < hi:  # drop the gap's samples from this block
                    if a < lo:
                        eng.feed(Block(x[a:lo], a, meta))
                    if hi < b:
                        eng.feed(Block(x[hi:b], hi, meta))
                    continue
                eng.feed(Block(x[a:b], a, meta))
            eng.finish()
            runs.append(eng)
        small, large = runs
        assert len(small.readings) == len(large.readings) == 14
        assert small.readings == large.readings
        assert not large.readings[9].contiguous
        assert small.summary() == large.summary()
        assert small.extra() == large.extra()
