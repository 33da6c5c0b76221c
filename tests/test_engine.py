"""The block engine: gating, state across blocks, gaps, clock correction, warnings."""

from __future__ import annotations

import math

import numpy as np
import pytest

from dsp.tone import crlb_frequency_std_hz
from monitor.blocks import Block
from monitor.engine import AnalysisSettings, Engine, run
from monitor.sources import ArraySource


def sine(dur_s, fs=8000.0, f=1000.25, amp=0.5, noise=0.0, seed=1):
    rng = np.random.default_rng(seed)
    t = np.arange(int(round(dur_s * fs))) / fs
    x = amp * np.sin(2 * np.pi * f * t + 0.2)
    if noise:
        x = x + noise * rng.standard_normal(t.size)
    return x


class TestGating:
    def test_one_reading_per_gate(self):
        a = run(ArraySource(sine(10.3), 8000.0), AnalysisSettings(gate_s=1.0))
        assert len(a.readings) == 10
        assert [r.t_s for r in a.readings] == pytest.approx(np.arange(10.0))
        assert all(r.gate_s == 1.0 for r in a.readings)

    def test_last_half_gate_is_kept(self):
        a = run(ArraySource(sine(3.6), 8000.0), AnalysisSettings(gate_s=1.0))
        assert len(a.readings) == 4
        assert a.readings[-1].gate_s == pytest.approx(0.6)

    def test_record_shorter_than_gate(self):
        a = run(ArraySource(sine(0.3), 8000.0), AnalysisSettings(gate_s=1.0))
        assert len(a.readings) == 1
        assert a.readings[0].frequency_hz == pytest.approx(1000.25, abs=1e-3)

    @pytest.mark.parametrize("block", [100, 1000, 4801, 65536])
    def test_block_size_does_not_matter(self, block):
        x = sine(5.0, noise=0.01)
        ref = run(ArraySource(x, 8000.0, block_frames=8000), AnalysisSettings(gate_s=0.5))
        got = run(ArraySource(x, 8000.0, block_frames=block), AnalysisSettings(gate_s=0.5))
        assert [r.frequency_hz for r in got.readings] == [r.frequency_hz for r in ref.readings]
        assert got.summary.tone.frequency_hz == ref.summary.tone.frequency_hz

    def test_gate_limits(self):
        with pytest.raises(ValueError, match="gate_s"):
            AnalysisSettings(gate_s=0.05)
        with pytest.raises(ValueError, match="gate_s"):
            AnalysisSettings(gate_s=101)


class TestSummary:
    def test_whole_record_uncertainty_is_crlb_of_record(self):
        # The whole-record uncertainty of a stable tone is the CRLB of all N samples
        # (Kay 1993 Ex. 3.14 [memory]), i.e. it falls as T^-3/2, not T^-1/2.
        fs, amp, s = 8000.0, 0.5, 0.05
        a = run(ArraySource(sine(8.0, fs, amp=amp, noise=s), fs), AnalysisSettings(gate_s=1.0))
        crlb = crlb_frequency_std_hz(amp**2 / (2 * s**2), 8 * 8000, fs)
        assert a.summary.tone.method == "phase-coherent"
        assert a.summary.tone.uncertainty_hz == pytest.approx(crlb, rel=0.15)
        assert abs(a.summary.tone.frequency_hz - 1000.25) < 4 * crlb

    def test_clock_correction(self):
        ppm = 125.0
        src = ArraySource(sine(2.0), 8000.0, meta={"clock_ppm": ppm})
        a = run(src, AnalysisSettings())
        expected = 1000.25 * (1 + ppm * 1e-6)
        assert a.summary.tone.frequency_hz == pytest.approx(expected, abs=1e-6)
        assert a.readings[0].frequency_hz == pytest.approx(expected, abs=1e-6)
        assert a.summary.clock.ppm == ppm

    def test_level(self):
        a = run(ArraySource(sine(1.0, amp=0.5), 8000.0), AnalysisSettings())
        # AES17 convention: a sine of peak amplitude 0.5 reads -6.02 dBFS rms
        assert a.summary.level.rms_dbfs == pytest.approx(20 * math.log10(0.5), abs=0.01)
        assert a.summary.level.peak_dbfs == pytest.approx(20 * math.log10(0.5), abs=0.01)

    def test_drift_rate(self):
        fs, rate = 8000.0, 0.2  # Hz/s
        t = np.arange(int(10 * fs)) / fs
        x = 0.5 * np.sin(2 * np.pi * (1000 * t + 0.5 * rate * t**2))
        a = run(ArraySource(x, fs), AnalysisSettings())
        assert a.summary.tone.drift_hz_per_s == pytest.approx(rate, rel=1e-3)


class TestGaps:
    def test_gap_breaks_phase_following(self):
        x = sine(4.0)
        meta_src = ArraySource(x, 8000.0)
        eng = Engine(meta_src.meta, AnalysisSettings(gate_s=1.0))
        eng.feed(Block(x[:16000], 0, meta_src.meta))
        eng.feed(Block(x[20000:], 20000, meta_src.meta))  # 4000 samples lost
        eng.finish()
        # 12000 samples after the gap: one gate and a kept half gate
        assert [r.contiguous for r in eng.readings] == [True, True, False, True]
        assert eng.summary().tone.method == "mean"

    def test_overflow_flag(self):
        x = sine(2.0)
        src = ArraySource(x, 8000.0)
        eng = Engine(src.meta, AnalysisSettings(gate_s=1.0))
        eng.feed(Block(x[:8000], 0, src.meta))
        eng.feed(Block(x[8000:], 8000, src.meta, overflow=True))
        assert [r.overflow for r in eng.readings] == [False, True]


class TestWarnings:
    def _warnings(self, x, fs=8000.0):
        return run(ArraySource(x, fs), AnalysisSettings()).summary.warnings

    def test_clipping(self):
        x = np.clip(sine(1.0, amp=1.5), -1.0, 1.0)
        assert any("clipping" in w for w in self._warnings(x))

    def test_dc_offset(self):
        assert any("DC offset" in w for w in self._warnings(sine(1.0) + 0.1))

    def test_silence(self):
        ws = self._warnings(np.zeros(8000))
        assert any("silence" in w for w in ws)
        assert any("no usable tone" in w for w in ws)

    def test_low_level(self):
        assert any("very low level" in w for w in self._warnings(sine(1.0, amp=1e-4)))

    def test_clean_tone_has_no_warnings(self):
        assert self._warnings(sine(1.0, noise=1e-3)) == ()


class TestFilters:
    @pytest.mark.parametrize("name", ["300-3000", "a-weight", "psophometric", "c-message"])
    def test_filtered_quality_runs(self, name):
        pytest.importorskip("dsp.filters")
        x = sine(2.0, fs=48000.0, noise=0.01)
        a = run(ArraySource(x, 48000.0), AnalysisSettings(filter=name))
        assert a.summary.quality.filter == name
        assert a.summary.quality.snr_db is not None
        # the counter runs on the unfiltered signal: the frequency is unaffected
        assert a.summary.tone.frequency_hz == pytest.approx(1000.25, abs=1e-3)


class TestLongSessions:
    def test_gate_count_without_kept_readings(self):
        src = ArraySource(np.zeros(8000 * 3), 8000.0)
        eng = Engine(src.meta, AnalysisSettings(), keep_readings=False)
        for b in src:
            eng.feed(b)
        eng.finish()
        assert eng.gates == 3 and eng.readings == []
        assert any("3 of 3 gates held no usable tone" in w for w in eng.summary().warnings)

    def test_per_gate_state_is_compact(self):
        # memory per gate must stay a few tens of bytes, not a list of objects per gate
        src = ArraySource(sine(200.0, fs=1000.0, f=100.25, noise=1e-3), 1000.0)
        eng = Engine(src.meta, AnalysisSettings(gate_s=0.1), keep_readings=False)
        for b in src:
            eng.feed(b)
        p = eng.processor
        assert eng.gates == 2000
        assert p._tones.k == 2000  # running sums, no table
        assert p._quality.gates == 2000  # running sums, not a list of figures
        assert eng.summary().tone.frequency_hz == pytest.approx(100.25, abs=1e-4)


class TestQualitySchedule:
    """Full quality gates (spur search, both mains families) by the gate index alone."""

    def _mains_used(self, monkeypatch, gate_s, x, fs=8000.0):
        import dsp.quality as dq

        used = []
        real = dq.measure_quality

        def spy(*a, **k):
            used.append((k.get("mains"), k.get("sfdr")))
            return real(*a, **k)

        monkeypatch.setattr(dq, "measure_quality", spy)
        src = ArraySource(x, fs)
        eng = Engine(src.meta, AnalysisSettings(gate_s=gate_s))
        for b in src:
            eng.feed(b)
        return used

    def _hum_tone(self, dur_s, fs=8000.0):
        t = np.arange(int(dur_s * fs)) / fs
        rng = np.random.default_rng(2)
        return (
            0.5 * np.sin(2 * np.pi * 1000.25 * t)
            + 3e-4 * np.sin(2 * np.pi * 50 * t)
            + 1e-4 * np.sin(2 * np.pi * 60 * t)
            + 1e-4 * rng.standard_normal(t.size)
        )

    def test_one_family_between_full_gates_when_orthogonal(self, monkeypatch):
        # 1 s gates hold whole cycles of 10 Hz, so the 50 and 60 Hz lines (and their
        # harmonics) are orthogonal over a gate (zeros of the Dirichlet kernel, common
        # practice): the stronger family alone is fitted between the full gates
        used = self._mains_used(monkeypatch, 1.0, self._hum_tone(17.0))
        assert [u[1] for u in used] == [i % 8 == 0 for i in range(17)]
        assert [u[0] for u in used] == ["auto" if i % 8 == 0 else 50 for i in range(17)]

    def test_both_families_on_every_gate_when_not(self, monkeypatch):
        # 0.25 s gates hold 12.5 cycles of 50 Hz: the families overlap; both every gate
        used = self._mains_used(monkeypatch, 0.25, self._hum_tone(5.0))
        assert {u[0] for u in used} == {"auto"}

    def test_one_family_gives_the_figures_of_both(self):
        # the claim behind the shortcut, against the full fit itself at a 1 s gate
        from dsp.quality import measure_quality

        x = self._hum_tone(1.0)
        both = measure_quality(x, 8000.0, fundamental_hz=1000.25, mains="auto", sfdr=False)
        one = measure_quality(x, 8000.0, fundamental_hz=1000.25, mains=50, sfdr=False)
        for k in ("snr_db", "sinad_db", "thd_percent", "hum_db"):
            assert getattr(one, k) == pytest.approx(getattr(both, k), abs=1e-6, rel=1e-6), k
