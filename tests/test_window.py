"""The live window (offscreen Qt) and its Qt-free readouts and stored settings.

The window's figures must be the engine's: a replay of a demo recording in the window
shows the same text as the `analyze` path's readings formatted the same way. Outside
checks of the measurements themselves are in tests/test_engine.py and tests/test_live.py
(sox tones); here a sox tone checks the counter's digits once more.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

import numpy as np
import pytest

os.environ["QT_QPA_PLATFORM"] = "offscreen"  # before any QApplication exists

from dsp.tone import format_with_uncertainty
from monitor import settings as stored
from monitor.engine import AnalysisSettings, Reading, analyze_file
from monitor.live import LiveConfig
from monitor.window import readouts as ro
from tests.soundserver import sox_tone

DEMO = Path(__file__).resolve().parent.parent / "recordings_demo" / "rx-audio-1khz.wav"
SCREENSHOT = Path("/tmp/swingmeter-window.png")


def _reading(**kw) -> Reading:
    base = dict(
        t_s=0.0,
        gate_s=1.0,
        frequency_hz=None,
        uncertainty_hz=None,
        amplitude_dbfs=None,
        tone_snr_db=None,
        rms_dbfs=-20.0,
        peak_dbfs=-17.0,
        clipped_samples=0,
    )
    base.update(kw)
    return Reading(**base)


class TestShownFrequency:
    def test_tone_rf_and_fundamental(self):
        r = _reading(frequency_hz=1000.0123, uncertainty_hz=0.0012)
        s = ro.shown_frequency(r)
        assert (s.label, s.text) == ("tone", "1000.0123 ± 0.0012 Hz")
        r = _reading(rf_hz=145.5e6, carrier_uncertainty_hz=0.3, fundamental_hz=48.5e6)
        assert ro.shown_frequency(r).label == "RF"
        f = ro.shown_frequency(r, harmonic=3)
        # harmonic N of f0: f0 = RF / N, and its uncertainty divides by N too
        assert f.value_hz == 48.5e6 and f.uncertainty_hz == pytest.approx(0.1)
        assert ro.shown_frequency(_reading()).text == "no tone"


class TestPeakHold:
    def test_hold_and_reset(self):
        h = ro.PeakHold()
        for p, n, s in ((100.0, -80.0, 50.0), (90.0, -120.0, 40.0)):
            h.add(_reading(deviation_peak_pos_hz=p, deviation_peak_neg_hz=n, deviation_rms_hz=s))
        assert (h.pos, h.neg, h.rms) == (100.0, -120.0, 50.0)
        h.reset()
        assert (h.pos, h.neg, h.rms) == (None, None, None)


class TestClipping:
    def test_clipping(self):
        assert ro.clipping(_reading(clipped_samples=3))
        assert ro.clipping(_reading(peak_dbfs=0.0))
        assert not ro.clipping(_reading())


class TestProtectedBandWarning:
    def test_emergency_frequency(self):
        pytest.importorskip("dsp.harmonics").protected_band_hits  # noqa: B018
        # 121.5 MHz is the aeronautical emergency frequency (ITU Radio Regulations,
        # Appendix 15) [memory]: a 40.5 MHz oscillator's third harmonic lands on it.
        r = _reading(rf_hz=40.5e6, fundamental_hz=40.5e6, deviation_hold_hz=2000.0)
        text = ro.protected_band_warning(r, dial_hz=40.5e6, harmonic=1)
        assert text is not None and "harmonic 3" in text
        assert ro.protected_band_warning(r, dial_hz=None, harmonic=1) is None
        # 7.030 MHz and its first harmonics touch none of them
        r = _reading(rf_hz=7.03e6)
        assert ro.protected_band_warning(r, dial_hz=7.03e6, harmonic=1) is None


class TestSettings:
    def test_round_trip_atomic(self, config_dir):
        assert stored.load().values == {}
        assert stored.save({"gate_s": 0.5, "mode": "beat", "junk": 1, "harmonic": "x"})
        assert stored.load().values == {"gate_s": 0.5, "mode": "beat"}
        assert stored.settings_path().parent == config_dir
        assert [p.name for p in config_dir.iterdir()] == [stored.SETTINGS_FILE]  # no temp

    def test_corrupt_file_reported_and_left_in_place(self, config_dir):
        path = stored.settings_path()
        path.write_text("{not json")
        loaded = stored.load()
        assert loaded.corrupt and str(path) in loaded.problem
        assert stored.save({"gate_s": 2.0}) is False
        assert path.read_text() == "{not json"
        path.write_text(json.dumps({"format": "other"}))
        assert "not a swingmeter" in stored.load().problem

    def test_raises(self):
        with pytest.raises(TypeError, match="values must be a dict"):
            stored.save([("gate_s", 1.0)])


def _wait_done(qtbot, win, timeout_ms=60000):
    def finished():
        s = win.session
        assert s is not None and s.done
        assert win.latest is not None and win.latest.seq == s.stats.readings
        # and the last gate's view drawn (the plots and markers follow the views, which
        # can trail the readings by a timer tick)
        assert not s.views_since(win._vseq) and win._pending_view is None

    qtbot.waitUntil(finished, timeout=timeout_ms)
    win._update_text()


@pytest.mark.gui
class TestLiveWindow:
    def test_replay_shows_the_engine_figures(self, qtbot, tmp_path):
        from monitor.window.app import LiveWindow

        settings = AnalysisSettings(gate_s=0.5)
        config = LiveConfig(file=str(DEMO), settings=settings, speed=math.inf)
        win = LiveWindow(config, save_settings=False)
        qtbot.addWidget(win)
        win.show()
        _wait_done(qtbot, win)
        offline = analyze_file(DEMO, settings=settings).readings
        last = offline[-1]
        assert win.latest.reading == last  # the same engine and gates as `analyze`
        assert win.freq.text() == format_with_uncertainty(last.frequency_hz, last.uncertainty_hz)
        assert win.sinad.text() == f"{last.sinad_db:.1f} dB"
        assert win.snr.text() == f"{last.snr_db:.1f} dB"
        assert win.thd.text() == f"{last.thd_percent:.3g} %"
        assert win.dropped.text() == "0"
        assert win.clock.text() == "+0.00 ppm"
        assert "end of recording" in win.status.text()
        # the plots hold data: spectrum, waveform, history (one point per gate), waterfall
        fx, fy = win.spectrum_curve.getData()
        assert fx.size > 100 and np.all(np.isfinite(fy))
        assert win.wave_curve.getData()[0].size > 100
        assert win._hist_n == len(offline)
        assert np.ptp(win._wf[: len(offline)]) > 20  # tone above the floor in every row
        assert win.markers[0].isVisible()
        assert win.markers[0].value() == pytest.approx(last.frequency_hz, abs=1e-6)
        img = win.grab()
        img.save(str(tmp_path / "window.png"))
        img.save(str(SCREENSHOT))
        assert img.width() >= 1000

    def test_counter_digits_for_a_sox_tone(self, qtbot, tmp_path):
        from monitor.window.app import LiveWindow

        wav = tmp_path / "tone.wav"
        sox_tone(wav, 1.5, ["sine", "1500.25", "vol", "0.5"], channels=1)
        config = LiveConfig(file=str(wav), settings=AnalysisSettings(gate_s=0.5), speed=math.inf)
        win = LiveWindow(config, save_settings=False)
        qtbot.addWidget(win)
        _wait_done(qtbot, win)
        # sox's 1500.25 Hz (independent generator); the text carries the digits the
        # uncertainty supports, so the value read back agrees to within 3 sigma
        value, sigma = win.freq.text().removesuffix(" Hz").split(" ± ")
        assert abs(float(value) - 1500.25) <= 3 * float(sigma) + 10 ** -len(value.split(".")[1])

    def test_deviation_area_for_ffmpeg_fm(self, qtbot, tmp_path, ffmpeg):
        pytest.importorskip("monitor.fm_engine")
        from monitor.fm_engine import FmSettings
        from monitor.window.app import LiveWindow

        # ffmpeg (independent generator): a 9 kHz beat note frequency-modulated by 800 Hz
        # with index 2, i.e. a peak deviation of 2 * 800 = 1600 Hz (Carson's definitions).
        wav = tmp_path / "fm.wav"
        ffmpeg("-f", "lavfi", "-i",
               "aevalsrc=0.5*sin(2*PI*9000*t+2*sin(2*PI*800*t)):s=48000:d=1.5", wav)  # fmt: skip
        settings = AnalysisSettings(mode="beat", gate_s=0.5, fm=FmSettings())
        meta = {"dial_hz": 40.5e6, "harmonic": 3}
        config = LiveConfig(file=str(wav), settings=settings, speed=math.inf, meta=meta)
        win = LiveWindow(config, save_settings=False)
        qtbot.addWidget(win)
        _wait_done(qtbot, win)
        r = win.latest.reading
        assert win.dev["pos"].text() == f"{r.deviation_peak_pos_hz:+.1f} Hz"
        assert win.dev["neg"].text() == f"{r.deviation_peak_neg_hz:+.1f} Hz"
        assert win.mod_index.text() == f"{r.mod_index:.3f}"
        assert abs(float(win.dev["pos"].text().split()[0]) - 1600.0) < 16.0  # 1 %
        assert abs(float(win.dev["hold_neg"].text().split()[0]) + 1600.0) < 16.0
        assert abs(float(win.mod_index.text()) - 2.0) < 0.02
        # RF = dial + 9 kHz (upper sideband); the counter shows the fundamental RF / 3
        assert win.freq_label.text() == "fundamental (RF / 3)"
        assert abs(float(win.freq.text().split()[0]) - (40.5e6 + 9000.0) / 3) < 0.01
        win.reset_hold()
        assert win.dev["hold_pos"].text() == ro.DASH

    def test_history_axis_moves_in_steps_and_holds_every_point(self, qtbot):
        from monitor.window.app import HISTORY_POINTS, LiveWindow

        config = LiveConfig(settings=AnalysisSettings(gate_s=0.1), rate_hz=48000.0)
        win = LiveWindow(config, save_settings=False, session_factory=lambda c: None)
        qtbot.addWidget(win)
        win.timer.stop()
        rng = np.random.default_rng(3)
        changes, last = 0, None
        for k in range(HISTORY_POINTS + 1500):  # fills the strip, then scrolls it
            r = _reading(t_s=0.1 * k, gate_s=0.1, frequency_hz=1000.0 + 1e-3 * rng.normal())
            win._add_history(r)
            if k % 4 == 0:
                win._draw_history()
                n = win._hist_n
                (x0, x1), (y0, y1) = win.history_plot.viewRange()
                t, f = win._hist_t[:n], win._hist_f[:n] - win._hist_ref
                assert x0 <= t.min() and t.max() <= x1  # every point on the strip
                assert y0 <= f.min() and f.max() <= y1
                changes += win._hist_shown != last
                last = win._hist_shown
        # the axis is re-ticked on a few steps, not on each of the ~1300 redraws
        assert changes < 60
        assert win._hist_n == HISTORY_POINTS

    def test_controls_restart_and_persist(self, qtbot, config_dir):
        from monitor.window.app import LiveWindow

        config = LiveConfig(file=str(DEMO), settings=AnalysisSettings(gate_s=0.5), speed=50.0)
        win = LiveWindow(config, save_settings=True)
        qtbot.addWidget(win)
        first = win.session
        win.gate_box.setCurrentIndex(win.gate_box.findData(1.0))
        assert win.session is not first and win.config.settings.gate_s == 1.0
        assert stored.load().values["gate_s"] == 1.0
        win.pause_button.setChecked(True)
        assert win.session.paused
        win.pause_button.setChecked(False)
        win.seek_to(2.0)  # a new engine run from the seek point
        _wait_done(qtbot, win)
        assert win.session.readings_since(0)[0].reading.t_s == 2.0
        win.reset_hold()
        win.shutdown()

    def test_stored_settings_fill_defaults(self, config_dir):
        from monitor.window.app import config_with_stored

        stored.save({"gate_s": 2.0, "filter": "a-weight", "dial_hz": 7.03e6})
        c, problem = config_with_stored(LiveConfig(file=str(DEMO)))
        assert problem is None
        assert c.settings.gate_s == 2.0 and c.settings.filter == "a-weight"
        assert c.meta["dial_hz"] == 7.03e6
        stored.settings_path().write_text("[]")
        c, problem = config_with_stored(LiveConfig(file=str(DEMO)))
        assert problem and c.settings.gate_s == 1.0


@pytest.mark.gui
class TestBoolRefGuard:
    def test_emits_do_not_drain_true(self, qapp):
        import sys

        from pyqtgraph.Qt import QtCore

        from monitor.window.qtfix import bool_ref_guard

        guard = bool_ref_guard()

        class Obj(QtCore.QObject):
            sig = QtCore.Signal()

        o = Obj()
        guard.top_up()
        before = sys.getrefcount(True)
        for _ in range(5000):
            o.sig.emit()
        guard.top_up()
        # whether or not this PySide6 leaks references to True on emit, none are lost
        assert sys.getrefcount(True) >= before - 50
