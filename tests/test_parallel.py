"""A recording analysed in parts on several processes equals the one-process analysis.

The reference for every figure is the one-process engine (itself checked against sox,
scipy and the published tables elsewhere); the tone is a sox sine (an independent
generator) with sox's white noise, so the summary is also checked against the truth.
"""

from __future__ import annotations

import itertools
import math

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
        assert b.frequency_hz == pytest.approx(a.frequency_hz, rel=1e-11)
        assert b.uncertainty_hz == pytest.approx(a.uncertainty_hz, rel=1e-6)
        # the quality fit is second-order in the frequency it is given, which agrees to
        # 1e-11: the dB figures agree far below their display resolution
        for k in ("sinad_db", "snr_db", "rms_dbfs", "peak_dbfs"):
            assert getattr(b, k) == pytest.approx(getattr(a, k), abs=1e-6), k
        assert b.thd_percent == pytest.approx(a.thd_percent, rel=1e-6)
        # the spur search runs on the same gates
        assert (a.sfdr_db is None or math.isnan(a.sfdr_db)) == (
            b.sfdr_db is None or math.isnan(b.sfdr_db)
        )
    sa, sb = one.summary, two.summary
    assert sb.tone.frequency_hz == pytest.approx(sa.tone.frequency_hz, rel=1e-13)
    assert sb.tone.uncertainty_hz == pytest.approx(sa.tone.uncertainty_hz, rel=1e-6)
    assert sb.tone.n_gates == sa.tone.n_gates and sb.tone.method == sa.tone.method
    for k in ("snr_db", "sinad_db", "sfdr_db", "hum_db"):
        assert getattr(sb.quality, k) == pytest.approx(getattr(sa.quality, k), abs=1e-6), k
    assert sb.quality.thd_percent == pytest.approx(sa.quality.thd_percent, rel=1e-6)
    assert sb.level == sa.level or sb.level.rms_dbfs == pytest.approx(sa.level.rms_dbfs)
    assert sb.duration_s == sa.duration_s and sb.warnings == sa.warnings


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
            assert "beat mode" in parallel.why_not_split(src, AnalysisSettings(mode="beat"))


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
