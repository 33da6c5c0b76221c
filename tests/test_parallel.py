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
    workers=st.integers(1, 4),
)
def test_parts_cover_the_record_on_gate_boundaries(frames, gate_n, jobs, workers):
    guided = parallel.plan_guided_parts(frames, gate_n, workers)
    assert guided[0][0] == 0 and guided[-1][1] == frames
    sizes = [(b - a) // gate_n for a, b in guided]
    if len(guided) > 1:  # shrinking parts on full quality gates, none tiny
        assert all(a % (gate_n * parallel.SFDR_EVERY_GATES) == 0 for a, _ in guided)
        assert min(sizes) >= 16 and sizes[0] >= sizes[-2]
        assert all(b == c for (_, b), (c, _) in itertools.pairwise(guided))
    parts = parallel.plan_parts(frames, gate_n, jobs, multiple=workers)
    assert parts[0][0] == 0 and parts[-1][1] == frames
    assert 1 <= len(parts) <= jobs
    if len(parts) > workers:  # equal shares for the workers
        assert len(parts) % workers == 0
    step = gate_n * parallel.SFDR_EVERY_GATES  # parts start on a full quality gate
    for (a, b), (c, _) in itertools.pairwise(parts):
        assert b == c and a % step == 0 and (b - a) // gate_n >= parallel.MIN_PART_GATES - 8


# --------------------------------------------------------------------------------------
# The FM modes in parts


def _ffmpeg(directory, name, expr, fs, seconds, codec="pcm_s16le"):
    """FM generated by ffmpeg's aevalsrc (an independent generator); 'a|b' is stereo."""
    import shutil
    import subprocess

    exe = shutil.which("ffmpeg")
    if exe is None:
        if os.environ.get("CI") == "true":
            pytest.fail("ffmpeg is required in CI (installed by .ci/sysdeps)")
        pytest.skip("ffmpeg not installed")
    path = directory / f"{name}.wav"
    subprocess.run(
        [exe, "-hide_banner", "-loglevel", "error", "-y", "-f", "lavfi", "-i",
         f"aevalsrc={expr.replace(',', chr(92) + ',')}:s={fs}:d={seconds}", "-c:a", codec,
         str(path)],
        check=True,
        capture_output=True,
    )  # fmt: skip
    return path


def _with_noise(path, level, seed, *, subtype=None, edit=None):
    """Add numpy white noise (and apply `edit`) to a recording, keeping its format."""
    x, fs = sf.read(path, always_2d=True)
    x = x + level * np.random.default_rng(seed).standard_normal(x.shape)
    if edit is not None:
        x = edit(x, fs)
    info = sf.info(path)
    sf.write(path, np.clip(x, -1, 1 - 2**-15), fs, subtype=subtype or info.subtype)
    return path


FM_GATE = 0.25  # 120 gates in 30 s, parts from gates 0, 40, 72 (t = 18 s), 88, 104
# beat: carrier 7 kHz, 1 kHz tone, 2.4 kHz deviation (beta 2.4)
BEAT = "0.4*sin(2*PI*7000*t+2.4*sin(2*PI*1000*t))"
# I/Q at 96 kHz: carrier +12 kHz, 800 Hz tone, beta 3 (2.4 kHz deviation)
IQ = "0.4*cos(2*PI*12000*t+3*sin(2*PI*800*t))|0.4*sin(2*PI*12000*t+3*sin(2*PI*800*t))"


# The modulating tone's fit on a part's first gate starts from a fresh search of the gate
# before (one pass follows it there): both stop within the fit's tolerance, so the tone
# and the figures measured at its frequency agree to 1e-6 of themselves (the displays
# show 5 to 9 digits less); everything else to rounding.
_TONE_FIGURES = {
    "snr_db", "sinad_db", "thd_percent", "thd_n_percent", "mod_tone_hz", "mod_index",
    "demod_snr_db", "demod_sinad_db", "demod_thd_percent", "mod_tone_uncertainty_hz",
    "tone_peak_hz", "carson_bw_hz", "enob_bits", "sfdr_db", "fundamental_deviation_hz",
    # the Bessel-line fit at the record's mean tone frequency
    "bessel_mod_index", "residual", "carrier_depth_db", "nearest_null_mod_index",
}  # fmt: skip


def _compare_fm(one, two):
    """The analysis in parts equals the one-process one: every reading and the summary,
    to rounding (the part's filters are settled to rounding, its demodulator is sought
    onto the same grid); the modulating tone's figures to 1e-6 (see _TONE_FIGURES)."""
    assert len(one.readings) == len(two.readings)
    for a, b in zip(one.readings, two.readings, strict=True):
        for k, v in a.to_dict().items():
            w = getattr(b, k)
            if isinstance(v, float) and math.isfinite(v):
                tol = (1e-6 if k in _TONE_FIGURES else 1e-9) * max(abs(v), 1.0)
                if k in ("carrier_hz", "frequency_hz", "rf_hz", "fundamental_hz"):
                    tol = max(1e-3 * a.carrier_uncertainty_hz, 1e-12 * abs(v))
                assert w == pytest.approx(v, abs=tol), (k, a.t_s)
            else:
                assert w == v, (k, a.t_s)
    fa, fb = one.extra["fm"], two.extra["fm"]
    assert fb["deviation"]["histogram"] == fa["deviation"]["histogram"]

    def same(x, y, path):
        if isinstance(x, dict):
            assert x.keys() == y.keys(), path
            for k in x:
                same(x[k], y[k], f"{path}.{k}")
        elif isinstance(x, (list, tuple)):
            assert len(x) == len(y), path
            for i, (p, q) in enumerate(zip(x, y, strict=True)):
                same(p, q, f"{path}[{i}]")
        elif isinstance(x, float) and math.isfinite(x):
            key = path.rsplit(".", 1)[-1].split("[")[0]
            tol = 1e-6 if key in _TONE_FIGURES or ".bessel." in path else 1e-9
            assert y == pytest.approx(x, rel=tol, abs=tol), path
        else:
            assert y == x, path

    same(fa, fb, "fm")
    same(one.extra.get("iq"), two.extra.get("iq"), "iq")
    same(one.summary.to_dict(), two.summary.to_dict(), "summary")


@pytest.fixture(scope="module")
def fm_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("fm_parts")


class TestFmParts:
    def _both(self, path, settings):
        one = analyze_file(path, settings=settings, jobs=1)
        with open_source(path, mode=settings.mode) as src:
            gate_n = int(round(settings.gate_s * src.meta.fs_hz))
            plan = parallel.plan_for(src.meta.frames, gate_n, 2, settings)
            assert [a // gate_n for a, _ in plan] == [0, 40, 72, 88, 104]
        two = analyze_file(path, settings=settings, jobs=2)
        _compare_fm(one, two)
        return one, two

    def test_beat_in_parts_equals_one_pass(self, fm_dir):
        from monitor.fm_engine import FmSettings

        path = _with_noise(_ffmpeg(fm_dir, "beat", BEAT, 48000, 30), 3e-3, 1)
        s = AnalysisSettings(mode="beat", gate_s=FM_GATE, fm=FmSettings(if_bandwidth_hz=9000.0))
        _, two = self._both(path, s)
        fm = two.extra["fm"]
        # and the truth of the ffmpeg expression: carrier, tone and deviation
        assert abs(fm["carrier_hz"] - 7000.0) <= 3 * fm["carrier_uncertainty_hz"] + 1e-6
        assert fm["mod_tone_hz"] == pytest.approx(1000.0, abs=1e-3)
        assert fm["deviation"]["tone_peak_hz"] == pytest.approx(2400.0, rel=0.005)

    def test_iq_with_correction_deemphasis_and_broadcast_band(self, fm_dir):
        from monitor.fm_engine import FmSettings

        def imbalance(x, fs):  # 0.5 dB gain and 2 degrees of phase error on Q, DC on I
            g, phi = 10 ** (0.5 / 20), math.radians(2.0)
            q = g * (math.sin(phi) * x[:, 0] + math.cos(phi) * x[:, 1])
            return np.stack([x[:, 0] + 0.01, q], axis=1)

        path = _ffmpeg(fm_dir, "iq", IQ, 96000, 30, codec="pcm_f32le")
        path = _with_noise(path, 2e-3, 2, edit=imbalance)
        fm = FmSettings(if_bandwidth_hz=12000.0, iq_correct=True, deemphasis="75us")
        s = AnalysisSettings(mode="iq", gate_s=FM_GATE, fm=fm)
        _, two = self._both(path, s)
        assert two.extra["fm"]["post_filter"] == "20-15k"
        assert two.extra["iq"]["gain_imbalance_db"] == pytest.approx(0.5, abs=0.05)
        assert two.extra["fm"]["mod_tone_hz"] == pytest.approx(800.0, abs=1e-3)

    def test_tone_that_changes_at_a_part_start(self, fm_dir):
        # The modulating tone steps from 1 kHz to 1.25 kHz exactly at 18 s (gate 72, a
        # part's first) and is absent from 16 s on, so one pass searches afresh there:
        # the part's start must still give one pass's figures.
        from monitor.fm_engine import FmSettings

        expr = (
            "0.4*sin(2*PI*7000*t+if(lt(t,16),2.4*sin(2*PI*1000*t),"
            "if(lt(t,18),0,1.92*sin(2*PI*1250*t))))"
        )
        path = _with_noise(_ffmpeg(fm_dir, "step", expr, 48000, 30), 3e-3, 3)
        s = AnalysisSettings(mode="beat", gate_s=FM_GATE, fm=FmSettings(if_bandwidth_hz=9000.0))
        _, two = self._both(path, s)
        tones = [r.mod_tone_hz for r in two.readings]
        assert tones[62] == pytest.approx(1000.0, abs=0.01) and tones[66] is None
        assert tones[74] == pytest.approx(1250.0, abs=0.01)

    def test_tone_lost_only_on_the_gate_before_a_part(self, fm_dir):
        # Modulation off for the half second before a part (gates 70-71): one pass
        # follows the tone of gate 69 into gate 72, a part searches afresh; the parent
        # runs that part itself.
        from monitor.fm_engine import FmSettings

        expr = "0.4*sin(2*PI*7000*t+if(between(t,17.5,18),0,2.4*sin(2*PI*1000*t)))"
        path = _with_noise(_ffmpeg(fm_dir, "gap", expr, 48000, 30), 3e-3, 4)
        s = AnalysisSettings(mode="beat", gate_s=FM_GATE, fm=FmSettings(if_bandwidth_hz=9000.0))
        self._both(path, s)

    def test_drifting_carrier_short_gates_broadcast_band(self, fm_dir):
        # A carrier drifting 5 Hz/s (numpy, on the ffmpeg modulation's phase), 0.1 s
        # gates and the 20-15k post filter, whose slow poles remember the offsets of the
        # gates before a part: the run-in goes gate by gate, so the parts still give one
        # pass's figures.
        from monitor.fm_engine import FmSettings

        def drift(x, fs):
            t = np.arange(x.shape[0]) / fs
            z = (x[:, 0] + 1j * x[:, 1]) * np.exp(2j * np.pi * 2.5 * t * t)
            return np.stack([z.real, z.imag], axis=1)

        path = _ffmpeg(fm_dir, "drift", IQ, 96000, 10, codec="pcm_f32le")
        path = _with_noise(path, 2e-3, 6, edit=drift)
        s = AnalysisSettings(mode="iq", gate_s=0.1, fm=FmSettings(if_bandwidth_hz=12000.0))
        one = analyze_file(path, settings=s, jobs=1)
        two = analyze_file(path, settings=s, jobs=2)
        _compare_fm(one, two)
        assert one.summary.tone.drift_hz_per_s == pytest.approx(5.0, rel=0.01)

    def test_gates_too_short_to_measure(self, fm_dir, tmp_path):
        # 24 baseband samples a gate (a 200 Hz IF at 8 kHz, 0.1 s gates): nothing is
        # measured, but the parts' BS.412 clocks still join
        from monitor.fm_engine import FmSettings

        t = np.arange(8000 * 20) / 8000.0
        x = 0.4 * np.sin(2 * np.pi * 1500 * t + 2 * np.sin(2 * np.pi * 20 * t))
        path = tmp_path / "narrow.wav"
        sf.write(path, x, 8000, subtype="PCM_16")
        fm = FmSettings(if_bandwidth_hz=200.0, post_filter="none")
        s = AnalysisSettings(mode="beat", gate_s=0.1, fm=fm)
        one = analyze_file(path, settings=s, jobs=1)
        two = analyze_file(path, settings=s, jobs=2)
        assert len(one.readings) == len(two.readings) == 200
        assert one.summary.warnings == two.summary.warnings

    def test_nan_in_a_later_part_means_one_pass(self, fm_dir):
        # A float recording with NaN samples in the second part: only a whole read
        # handles them (replaced by silence, gates across them not joined), so the
        # recording goes through one pass, warnings and all.
        from monitor.fm_engine import FmSettings

        def nan_stretch(x, fs):
            x[int(20.3 * fs) : int(20.31 * fs)] = np.nan
            return x

        path = _ffmpeg(fm_dir, "nan", BEAT, 48000, 30, codec="pcm_f32le")
        path = _with_noise(path, 3e-3, 5, subtype="FLOAT", edit=nan_stretch)
        s = AnalysisSettings(mode="beat", gate_s=FM_GATE, fm=FmSettings(if_bandwidth_hz=9000.0))
        one = analyze_file(path, settings=s, jobs=1)
        two = analyze_file(path, settings=s, jobs=2)
        _compare_fm(one, two)
        assert any("NaN" in w for w in two.summary.warnings)
