"""Tests of `swingmeter report` (monitor/report.py, monitor/commands/report.py).

Recordings: the demo recordings, and FM made by ffmpeg's aevalsrc (an independent
generator) with numpy noise on top. Reports are made once per module; each test reads
them.
"""

from __future__ import annotations

import base64
import contextlib
import html
import io
import json
import math
import os
import re
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from dsp.tone import format_with_uncertainty
from monitor import report
from monitor.cli import main

HERE = Path(__file__).parent
DEMO = HERE.parent / "recordings_demo"
BEAT_OPTS = ["--mode", "beat", "--dial", "97.29M", "--sideband", "upper", "--harmonic", "3"]
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948, section 5.2)
FS = 48000
FM_TONE_HZ = 1000.0
CARRIER_HZ = 6000.0


def _run(argv):
    """(exit code, stdout, stderr) of the command line."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in argv])
    return code, out.getvalue(), err.getvalue()


def _pngs(text: str) -> list[bytes]:
    return [
        base64.b64decode(b) for b in re.findall(r"data:image/png;base64,([A-Za-z0-9+/=]+)", text)
    ]


def _ffmpeg_exe() -> str:
    exe = shutil.which("ffmpeg")
    if exe is None:
        if os.environ.get("CI") == "true":
            pytest.fail("ffmpeg is required in CI (installed by .ci/sysdeps)")
        pytest.skip("ffmpeg not installed")
    return exe


def _fm_wav(directory: Path, name: str, beta: float, seed: int, noise: float = 0.02) -> Path:
    """Single-tone FM from ffmpeg's aevalsrc, phase beta*sin(2 pi fm t), so the peak
    deviation is beta*fm; white noise of std `noise` added with numpy."""
    raw = directory / f"{name}-clean.wav"
    expr = f"0.5*sin(2*PI*{CARRIER_HZ}*t+{beta}*sin(2*PI*{FM_TONE_HZ}*t))"
    subprocess.run(
        [_ffmpeg_exe(), "-hide_banner", "-loglevel", "error", "-y", "-f", "lavfi", "-i",
         f"aevalsrc={expr}:s={FS}:d=3", "-c:a", "pcm_f32le", str(raw)],
        check=True, capture_output=True,
    )  # fmt: skip
    x, fs = sf.read(raw, dtype="float64")
    assert fs == FS
    x = x + np.random.default_rng(seed).normal(0.0, noise, x.shape)
    out = directory / f"{name}.wav"
    sf.write(out, x, fs, subtype="FLOAT")
    return out


@pytest.fixture(scope="module")
def work():
    with tempfile.TemporaryDirectory(prefix="swingmeter-report-test-") as d:
        yield Path(d)


@pytest.fixture(scope="module")
def demo_beat(work):
    """A report of two demo recordings (beat mode, RF known), with its PDF."""
    files = [DEMO / "to7-beat.wav", DEMO / "to7-null-beat.wav"]
    out = work / "demo" / "report.html"
    out.parent.mkdir()
    code, _, report_err = _run(["report", *files, "-o", out, "--pdf", "--gate", "0.5", *BEAT_OPTS])
    assert code == 0, report_err
    code, js, err = _run(["analyze", *files, "--json", "--gate", "0.5", *BEAT_OPTS])
    assert code == 0, err
    return {"dir": out.parent, "html": out.read_text(encoding="utf-8"), "err": report_err,
            "analyze": json.loads(js), "pdf": out.with_suffix(".pdf")}  # fmt: skip


@pytest.fixture(scope="module")
def fm_compare(work):
    """--compare of beta 1 against beta 2, and of beta 1 against itself with new noise."""
    a = _fm_wav(work, "beta1-seed1", 1.0, seed=1)
    a2 = _fm_wav(work, "beta1-seed2", 1.0, seed=2)
    b = _fm_wav(work, "beta2-seed3", 2.0, seed=3)
    res = {}
    for key, pair in (("different", (a, b)), ("same", (a, a2))):
        out = work / f"compare-{key}.html"
        code, _, err = _run(["report", *pair, "--compare", "--mode", "beat", "--gate", "0.25",
                             "-o", out])  # fmt: skip
        assert code == 0, err
        res[key] = out.read_text(encoding="utf-8")
    return res


def _verdicts(text: str) -> dict[str, str]:
    return dict(re.findall(r'data-key="([^"]+)" data-verdict="([^"]+)"', text))


class TestReportCommand:
    def test_one_self_contained_file(self, demo_beat):
        files = sorted(p.name for p in demo_beat["dir"].iterdir())
        assert files == ["report.html", "report.pdf"]
        text = demo_beat["html"]
        assert "http://" not in text and "https://" not in text
        # no external resources: every src is a data URI, no stylesheet links, no script
        assert all(
            s.startswith("data:image/png;base64,") for s in re.findall(r'src="([^"]*)"', text)
        )
        assert "<link" not in text and "<script" not in text

    def test_embedded_pngs_decode(self, demo_beat):
        pngs = _pngs(demo_beat["html"])
        # per recording: spectrum, deviation, history; Allan only for the 12-gate one
        assert len(pngs) == 7
        for i, data in enumerate(pngs):
            assert data.startswith(PNG_MAGIC)
            # kept for looking at: /tmp/swingmeter-report-test-<i>.png
            Path(tempfile.gettempdir(), f"swingmeter-report-test-{i}.png").write_bytes(data)

    def test_summary_equals_analyze(self, demo_beat):
        text = demo_beat["html"]
        for d in demo_beat["analyze"]:
            fm = d["fm"]
            u = fm["carrier_uncertainty_hz"]
            for value, sigma in ((fm["carrier_hz"], u), (fm["rf_hz"], u),
                                 (fm["fundamental_hz"], u / 3)):  # fmt: skip
                assert html.escape(format_with_uncertainty(value, sigma)) in text
            dev = fm["deviation"]
            assert f"peak+ {dev['peak_pos_hz']:.1f}" in text
            assert f"{fm['mod_power_dbr']:+.2f} dBr" in text

    def test_allan_or_too_short(self, demo_beat):
        text = demo_beat["html"]
        # to7-beat: 6 s at 0.5 s gates = 12 readings; to7-null-beat: 3 s = 6 readings
        assert text.count('alt="Allan deviation"') == 1
        assert "record too short for an Allan plot: 6 full-gate readings" in text

    def test_harmonic_warning(self, demo_beat):
        # 97.3 MHz heard on the 3rd harmonic: fundamental 32.4333 MHz, whose 4th harmonic
        # 129.733 MHz lies in the 108-137 MHz aeronautical band (ITU RR Article 5 [memory])
        text = demo_beat["html"]
        m = re.search(
            r"<tr><td>aeronautical radionavigation[^<]*</td><td>[^<]*</td><td>([^<]*)", text
        )
        assert m is not None
        assert m.group(1).split(",")[0].strip() == "4"

    def test_cautions(self, demo_beat, fm_compare):
        for text in (demo_beat["html"], fm_compare["same"]):
            assert html.escape(report.CAUTIONS) in text
            assert "local regulations and licensed practice" in text

    def test_progress_on_stderr(self, demo_beat):
        err = demo_beat["err"]
        assert "[1/2] analysing" in err and "[2/2] analysing" in err and "wrote" in err

    def test_pdf(self, demo_beat):
        data = demo_beat["pdf"].read_bytes()
        assert data.startswith(b"%PDF")
        assert data.rstrip().endswith(b"%%EOF")
        # a summary page plus seven plot pages
        assert len(re.findall(rb"/Type\s*/Page\b", data)) == 8

    def test_escapes_text_and_shows_profile(self, work):
        from monitor import profiles

        profiles.update("bench-a", clock_ppm=12.5)
        wav = DEMO / "rx-audio-1khz.wav"
        out = work / "escape.html"
        title = "<script>alert(1)</script> & trimmer"
        code, _, err = _run(["report", wav, "--title", title, "--profile", "bench-a", "-o", out])
        assert code == 0, err
        text = out.read_text(encoding="utf-8")
        assert "<script>" not in text
        assert html.escape(title) in text
        assert "<tr><td>clock_ppm</td><td>12.5</td></tr>" in text
        # the profile's clock correction reaches the figures as in `analyze`
        code, js, err = _run(["analyze", wav, "--profile", "bench-a", "--json"])
        tone = json.loads(js)["tone"]
        code, js, err = _run(["analyze", wav, "--json"])
        plain = json.loads(js)["tone"]
        # the clock correction multiplies frequencies by 1 + P*1e-6 (StreamMeta.clock_ppm)
        assert tone["frequency_hz"] == pytest.approx(plain["frequency_hz"] * (1 + 12.5e-6))
        fmt = format_with_uncertainty
        assert html.escape(fmt(tone["frequency_hz"], tone["uncertainty_hz"])) in text
        assert html.escape(fmt(plain["frequency_hz"], plain["uncertainty_hz"])) not in text

    def test_missing_matplotlib(self, work, monkeypatch):
        # an ImportError from matplotlib becomes one line and exit 2
        monkeypatch.setitem(sys.modules, "matplotlib.backends.backend_agg", None)
        code, _, err = _run(["report", DEMO / "rx-audio-1khz.wav", "-o", work / "none.html"])
        assert code == 2
        assert err.strip() == (
            "swingmeter: error: report needs matplotlib, which is not installed: "
            "pip install 'swingmeter[plot]'"
        )
        assert not (work / "none.html").exists()

    def test_raises(self, work, tmp_path):
        wav = DEMO / "rx-audio-1khz.wav"
        cases = [
            (["report", wav, "-o", tmp_path / "missing-dir" / "r.html"], "does not exist"),
            (["report", wav, "-o", tmp_path], "is a directory"),
            (["report", tmp_path / "nothing.wav", "-o", tmp_path / "r.html"], "no such recording"),
            (["report", wav, "--compare", "-o", tmp_path / "r.html"], "exactly two"),
        ]
        cases.append((["report", wav, "-o", tmp_path / "r.pdf"], "the report is HTML"))
        noise = tmp_path / "noise-only.wav"
        sf.write(noise, np.random.default_rng(7).normal(0.0, 0.1, FS), FS)
        cases.append(
            (["report", noise, "--mode", "beat", "-o", tmp_path / "r.html"],
             r"noise-only\.wav: no carrier found")
        )  # fmt: skip
        bad = tmp_path / "not-audio.wav"
        bad.write_text("this is not a recording\n")
        cases.append((["report", bad, "-o", tmp_path / "r.html"], "not-audio.wav"))
        for argv, match in cases:
            code, _, err = _run(argv)
            assert code == 2, (argv, err)
            lines = err.strip().splitlines()
            assert len(lines) == 1 and lines[0].startswith("swingmeter: error:"), err
            assert re.search(match, lines[0]), lines[0]
        assert not (tmp_path / "r.html").exists()


class TestCompare:
    def test_different_deviation_is_significant(self, fm_compare):
        text = fm_compare["different"]
        v = _verdicts(text)
        # ffmpeg phase beta*sin(2 pi 1000 t): 1000 Hz against 2000 Hz peak deviation
        assert v["tone_deviation"] == "significant"
        assert v["mod_index"] == "significant"
        # the same carrier and tone in both: within the combined uncertainty
        assert v["carrier"] == "within uncertainty"
        assert v["mod_tone"] == "within uncertainty"
        assert v["dev_peak_pos"] == "no uncertainty"
        assert html.escape(report.SIGNIFICANCE_RULE) in text

    def test_same_signal_not_significant(self, fm_compare):
        v = _verdicts(fm_compare["same"])
        assert "significant" not in v.values()
        # every figure with an uncertainty was tested
        assert {"carrier", "tone_deviation", "mod_index", "dev_rms"} <= {
            k for k, x in v.items() if x == "within uncertainty"
        }

    def test_measured_deviation_matches_generator(self, fm_compare):
        # ffmpeg generator: peak deviation beta * fm = 1000 Hz and 2000 Hz; the report's
        # tone-deviation cells lie within 0.5 % (noise and post filter ripple)
        row = re.search(r'data-key="tone_deviation".*?</tr>', fm_compare["different"], re.S)
        cells = re.findall(r"<td class=num>([^<]*)</td>", row.group(0))
        a, b = (float(c.split()[0]) for c in cells[:2])
        assert a == pytest.approx(1000.0, rel=5e-3)
        assert b == pytest.approx(2000.0, rel=5e-3)

    def test_side_by_side(self, fm_compare):
        text = fm_compare["different"]
        assert '<div class="pair">' in text
        assert "A: beta1-seed1.wav" in text and "B: beta2-seed3.wav" in text


def _qty(key, value, sigma):
    return report.Quantity(key, key, value, sigma, "Hz", "")


class TestCompareQuantities:
    def test_rule(self):
        # |a - b| > 2 sqrt(ua^2 + ub^2): sqrt(0.1^2 + 0.1^2) = 0.14142, limit 0.28284
        a = [_qty("f", 10.0, 0.1), _qty("g", 1.0, None)]
        over = report.compare_quantities(a, [_qty("f", 10.29, 0.1), _qty("g", 5.0, 0.1)])
        under = report.compare_quantities(a, [_qty("f", 10.28, 0.1)])
        assert [d.significant for d in over] == [True, None]
        assert over[0].combined_sigma == pytest.approx(math.sqrt(0.02))
        assert over[1].difference == pytest.approx(4.0)
        assert [d.significant for d in under] == [False]

    def test_raises(self):
        with pytest.raises(ValueError, match="compare needs two recordings"):
            report.render_html([object()], compare=True)


class TestTypeAUncertainty:
    def test_against_scipy(self):
        from scipy import stats

        v = [1.0, 1.3, 0.8, 1.1, None, math.nan, 0.95]
        ok = [x for x in v if x is not None and math.isfinite(x)]
        # scipy.stats.sem: s / sqrt(n) with ddof=1 (reference library)
        assert report.type_a_uncertainty(v) == pytest.approx(stats.sem(ok))

    def test_too_few(self):
        assert report.type_a_uncertainty([1.0, 2.0, None]) is None


class TestStabilityOf:
    def test_against_allantools(self):
        import allantools

        from monitor.engine import AnalysisSettings

        rec = report.analyze_for_report(
            DEMO / "drifting-tone.wav", settings=AnalysisSettings(mode="audio", gate_s=1.0)
        )
        res, note = report.stability_of(rec)
        assert res is not None and note == ""
        f = np.array([r.frequency_hz for r in rec.analysis.readings if r.gate_s >= 1.0])
        y = f / np.median(f) - 1.0
        # allantools (reference library): overlapping ADEV of fractional frequency
        out = allantools.oadev(y, rate=1.0, data_type="freq", taus=list(res.adev.taus_s))
        dev = out[1]
        np.testing.assert_allclose(res.adev.values, dev, rtol=1e-9)
        plot = report.plot_allan(rec)
        assert plot.figure is not None
        assert report.png_bytes(plot.figure).startswith(PNG_MAGIC)

    def test_too_short(self):
        from monitor.engine import AnalysisSettings

        rec = report.analyze_for_report(
            DEMO / "rx-audio-1khz.wav", settings=AnalysisSettings(mode="audio", gate_s=1.0)
        )
        res, note = report.stability_of(rec)
        assert res is None
        assert note.startswith("record too short for an Allan plot: 4 full-gate readings")
        assert report.plot_allan(rec).figure is None

    def test_raises(self, tmp_path):
        from monitor.engine import AnalysisSettings

        with pytest.raises(report.InputError, match="no such file"):
            report.analyze_for_report(tmp_path / "absent.wav", settings=AnalysisSettings())
