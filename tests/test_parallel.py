"""A recording analysed in parts on several processes equals the one-process analysis.

The reference for every figure is the one-process engine (itself checked against sox,
scipy and the published tables elsewhere); the tone is a sox sine (an independent
generator) with sox's white noise, so the summary is also checked against the truth.
"""

from __future__ import annotations

import itertools
import math
import os
import sys

import numpy as np
import pytest
import soundfile as sf
from hypothesis import given, settings
from hypothesis import strategies as st

from monitor import parallel
from monitor.engine import AnalysisSettings, analyze_file
from monitor.sources import open_source

FS = 8000
SECONDS = 150  # 150 one-second gates: two parts of 75 (>= MIN_PART_GATES)


@pytest.fixture(scope="module")
def recording(tmp_path_factory):
    import shutil
    import subprocess

    exe = shutil.which("sox")
    if exe is None:
        pytest.skip("sox not installed")
    d = tmp_path_factory.mktemp("par")
    path, tone, noise = d / "tone.wav", d / "sine.wav", d / "noise.wav"
    # sox: a 1234.5 Hz sine at -6 dBFS and white noise about 40 dB below it, mixed into
    # 16-bit PCM, with a partial last gate (0.6 s)
    n = str(SECONDS + 0.6)
    for out, gen in (
        (tone, ["sine", "1234.5", "vol", "0.5"]),
        (noise, ["whitenoise", "vol", "0.01"]),
    ):
        subprocess.run(
            [exe, "-n", "-r", str(FS), "-b", "32", "-e", "float", str(out), "synth", n, *gen],
            check=True,
            capture_output=True,
        )
    subprocess.run(
        [exe, "-m", "-v", "1", str(tone), "-v", "1", str(noise), "-b", "16", str(path)],
        check=True,
        capture_output=True,
    )
    return path


def _compare(one, two):
    assert len(one.readings) == len(two.readings)
    for a, b in zip(one.readings, two.readings, strict=True):
        assert a.t_s == b.t_s and a.gate_s == b.gate_s
        if a.frequency_hz is None:
            assert b.frequency_hz is None
            continue
        # a part's first gate starts its fit afresh: it stops within 1e-3 of the
        # uncertainty of where one pass stops (and equals it on the gates after)
        assert (
            abs(b.frequency_hz - a.frequency_hz) <= 1e-3 * a.uncertainty_hz + 1e-12 * a.frequency_hz
        )
        assert b.uncertainty_hz == pytest.approx(a.uncertainty_hz, rel=1e-5)
        # a part's first gate: the fit starts next to where one pass's starts, and the
        # frequency agrees to 1e-11; the quality figures, given that frequency, to 1e-5
        # dB (THD of harmonics at the noise floor to 1e-3 of itself), far below their
        # display resolution
        for k in ("sinad_db", "snr_db", "tone_snr_db", "hum_db", "rms_dbfs", "peak_dbfs"):
            assert getattr(b, k) == pytest.approx(getattr(a, k), abs=1e-5), k
        assert b.thd_percent == pytest.approx(a.thd_percent, rel=1e-3)
        # the spur search runs on the same gates
        assert (a.sfdr_db is None or math.isnan(a.sfdr_db)) == (
            b.sfdr_db is None or math.isnan(b.sfdr_db)
        )
    sa, sb = one.summary, two.summary
    assert sb.tone.frequency_hz == pytest.approx(sa.tone.frequency_hz, rel=1e-13)
    assert sb.tone.uncertainty_hz == pytest.approx(sa.tone.uncertainty_hz, rel=1e-6)
    assert sb.tone.birge_ratio == pytest.approx(sa.tone.birge_ratio, rel=1e-6)
    assert sb.tone.n_gates == sa.tone.n_gates and sb.tone.method == sa.tone.method
    for k in ("snr_db", "sinad_db", "sfdr_db", "hum_db"):
        assert getattr(sb.quality, k) == pytest.approx(getattr(sa.quality, k), abs=1e-6), k
    assert sb.quality.thd_percent == pytest.approx(sa.quality.thd_percent, rel=1e-6)
    assert sb.level == sa.level or sb.level.rms_dbfs == pytest.approx(sa.level.rms_dbfs)
    assert sb.duration_s == sa.duration_s and sb.warnings == sa.warnings


_REAL_PART = parallel._part


def _dying_part(task):
    """A worker that dies on the second part, as one killed for memory would."""
    if task[3] > 0:
        os._exit(9)
    return _REAL_PART(task)


class TestParts:
    def test_two_processes_equal_one(self, recording):
        s = AnalysisSettings(gate_s=1.0)
        one = analyze_file(recording, settings=s)
        two = analyze_file(recording, settings=s, jobs=2)
        _compare(one, two)
        # and both read sox's frequency within the stated uncertainty (3 sigma)
        tone = two.summary.tone
        assert abs(tone.frequency_hz - 1234.5) <= 3 * tone.uncertainty_hz + 1e-9

    def test_filter_state_carried_by_preroll(self, recording):
        # A-weighting's state at each part's start comes from the 2 s before it
        s = AnalysisSettings(gate_s=1.0, filter="a-weight")
        _compare(analyze_file(recording, settings=s), analyze_file(recording, settings=s, jobs=3))

    def test_progress_reaches_the_end(self, recording):
        seen = []
        analyze_file(recording, jobs=2, progress=lambda done, total: seen.append((done, total)))
        assert len(seen) == 2 and seen[-1][0] == seen[-1][1]

    @pytest.mark.skipif(not sys.platform.startswith("linux"), reason="needs fork")
    def test_a_dead_worker_means_one_pass_not_a_hang(self, recording, monkeypatch):
        import multiprocessing

        one = analyze_file(recording)
        monkeypatch.setattr(parallel, "_part", _dying_part)
        # fork, so the worker runs the patched function
        monkeypatch.setattr(parallel, "_context", lambda: multiprocessing.get_context("fork"))
        with pytest.warns(RuntimeWarning, match="worker process died"):
            two = analyze_file(recording, jobs=2)
        _compare(one, two)

    def test_what_is_not_split(self, recording, tmp_path):
        flt = tmp_path / "float.wav"
        x, fs = sf.read(recording)
        sf.write(flt, x, fs, subtype="FLOAT")  # float samples may hold NaN: one pass
        s = AnalysisSettings(gate_s=1.0)
        with open_source(flt) as src:
            assert parallel.choose_jobs(4, src, s) == 1
            assert "integer PCM" in parallel.why_not_split(src, s)
        with open_source(recording) as src:
            assert parallel.choose_jobs(4, src, s) == 4
            assert parallel.choose_jobs(1, src, s) == 1
            dev = AnalysisSettings(gate_s=1.0, deviation_hz_per_unit=1000.0)
            assert parallel.why_not_split(src, dev) is not None
            with pytest.raises(ValueError, match="at least 1"):
                parallel.choose_jobs(0, src, s)
        with open_source(recording, mode="beat") as src:
            # the FM modes split libsndfile recordings, float ones too
            assert parallel.why_not_split(src, AnalysisSettings(mode="beat")) is None
        with open_source(flt, mode="beat") as src:
            assert parallel.why_not_split(src, AnalysisSettings(mode="beat")) is None


class TestBoundaries:
    """Recordings where a part's first gate, measured on its own, would differ from one
    pass (each case found in review): the joined result must still be the one-pass one.
    240 gates of 0.25 s at 8 kHz: parts start at gates 0, 64, 120 and 176."""

    GATE = 0.25
    N = 240 * 2000

    def _write(self, tmp_path, x):
        path = tmp_path / "case.wav"
        sf.write(path, np.clip(x, -1, 1 - 2**-15), FS, subtype="PCM_16")
        return path

    def _signals(self):
        rng = np.random.default_rng(7)
        t = np.arange(self.N) / FS
        gate = np.arange(self.N) // 2000
        noise = 1e-3 * rng.standard_normal(self.N)
        hum = 3e-4 * np.sin(2 * np.pi * 50 * t) + 1e-4 * np.sin(2 * np.pi * 150 * t)
        return t, gate, noise, hum

    def _both(self, path):
        s = AnalysisSettings(gate_s=self.GATE)
        one = analyze_file(path, settings=s)
        parts = analyze_file(path, settings=s, jobs=2)
        _compare(one, parts)
        return one, parts

    def test_fading_tone_beside_a_stronger_one(self, tmp_path):
        # The measured 1 kHz tone fades by 40 dB while a 1511 Hz tone stays at -26 dBFS:
        # one pass keeps following the 1 kHz tone, a fresh search would take 1511 Hz
        t, _, noise, _ = self._signals()
        x = 0.5 * 10 ** (-2.0 * t / t[-1]) * np.sin(2 * np.pi * 1000.0 * t)
        x += 0.05 * np.sin(2 * np.pi * 1511.0 * t) + noise
        _, parts = self._both(self._write(tmp_path, x))
        assert all(abs(r.frequency_hz - 1000.0) < 0.1 for r in parts.readings)

    def test_first_tone_after_silence_gets_the_spur_search(self, tmp_path):
        t, gate, noise, hum = self._signals()
        x = np.where(gate >= 67, 0.5 * np.sin(2 * np.pi * 1000.0 * t) + hum + noise, 0.0)
        _, parts = self._both(self._write(tmp_path, x))
        assert np.isfinite(parts.readings[67].sfdr_db)

    def test_mains_family_after_a_silent_gate(self, tmp_path):
        # gate 120 (a part's first) silent; 60 Hz hum stronger on gate 112 only
        t, gate, noise, hum = self._signals()
        h60 = 2e-4 * np.sin(2 * np.pi * 60 * t) + 1e-4 * np.sin(2 * np.pi * 180 * t)
        fam = (gate == 112).astype(float)
        x = 0.5 * np.sin(2 * np.pi * 1000.0 * t) + noise + (1 - fam) * hum + fam * 3 * h60
        x = np.where(gate == 120, 0.0, x + 0.2 * h60)
        self._both(self._write(tmp_path, x))


@settings(max_examples=200, deadline=None)
@given(
    frames=st.integers(1, 10**7),
    gate_n=st.integers(16, 200000),
    jobs=st.integers(1, 16),
)
def test_parts_cover_the_record_on_gate_boundaries(frames, gate_n, jobs):
    parts = parallel.plan_parts(frames, gate_n, jobs)
    assert parts[0][0] == 0 and parts[-1][1] == frames
    assert 1 <= len(parts) <= jobs
    step = gate_n * parallel.SFDR_EVERY_GATES  # parts start on a full quality gate
    for (a, b), (c, _) in itertools.pairwise(parts):
        assert b == c and a % step == 0 and (b - a) // gate_n >= parallel.MIN_PART_GATES - 8
