"""The live window: counter, deviation, spectrum and history areas fed by a LiveSession.

One QTimer pulls from the session at up to 20 frames/s; plot items are made once and
updated with `setData`; text readouts change a few times a second. The session runs in
its own threads, so a stalled input never blocks the window. Changing a control starts
a new session (a new engine run) with the new settings; seeking in a replay does the same
from the seek point.

Qt (PySide6-Essentials) and pyqtgraph are imported by this module; `monitor.commands.live`
imports it only when a window is asked for.
"""

from __future__ import annotations

import math
import time
from collections import deque
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path

import numpy as np
import pyqtgraph as pg
from pyqtgraph.Qt import QtCore, QtGui, QtWidgets

from monitor import settings as stored
from monitor.errors import SwingmeterError
from monitor.live import LiveConfig, LiveSession, start_session
from monitor.window import readouts as ro

FRAME_MS = 50  # 20 frames/s
TEXT_EVERY_FRAMES = 4  # text 5 times a second ...
TEXT_MIN_FRAMES = 3  # ... or at once for a new reading, at most 6.7 times a second
HISTORY_EVERY_FRAMES = 8  # the history strip (a trend) 2.5 times a second
VIEW_MIN_FRAMES = 5  # spectrum, waterfall and waveform at most 4 times a second
STABILITY_EVERY_S = 1.0  # the drift fit behind the stability line, once a second
HISTORY_POINTS = 3600
HISTORY_SYMBOLS_MAX = 300
LEFT_AXIS_PX = 72
WATERFALL_ROWS = 60
WATERFALL_COLS = 512
WATERFALL_LEVELS_DB = (-130.0, -10.0)
RATES_HZ = (8000, 16000, 44100, 48000, 96000, 192000)
GATES_S = (0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0)
SPEEDS = (0.5, 1.0, 2.0, 4.0, 10.0, math.inf)
DEEMPHASIS = ("none", "50us", "75us")
N_MARKERS = 9
COLOURS = {
    "trace": (90, 200, 250),
    "marker": (250, 200, 60),
    "span": (120, 220, 140, 50),
    "history": (240, 140, 90),
    "warn": "#e0a030",
    "bad": "#e05050",
}


def _label(text: str = "", *, size: int | None = None, bold: bool = False, mono=False):
    w = QtWidgets.QLabel(text)
    f = w.font()
    if size:
        f.setPointSize(size)
    f.setBold(bold)
    if mono:
        f.setFamily("monospace")
        f.setStyleHint(QtGui.QFont.StyleHint.Monospace)
    w.setFont(f)
    w.setTextInteractionFlags(QtCore.Qt.TextInteractionFlag.TextSelectableByMouse)
    return w


def _group(title: str, obj_name: str) -> tuple[QtWidgets.QGroupBox, QtWidgets.QGridLayout]:
    box = QtWidgets.QGroupBox(title)
    box.setObjectName(obj_name)
    grid = QtWidgets.QGridLayout(box)
    grid.setContentsMargins(8, 6, 8, 6)
    grid.setHorizontalSpacing(10)
    grid.setVerticalSpacing(2)
    return box, grid


class LiveWindow(QtWidgets.QMainWindow):
    """The window. `config` says what to run; `save_settings` keeps controls between runs.

    Parameters
    ----------
    config : LiveConfig
    save_settings : bool
        Write the controls to `monitor.settings` when they change and on close.
    log_path : str or None
        Also log readings to this CSV file (as `live --no-window --log`).
    session_factory : callable or None
        Starts a session for a config (default: `monitor.live.start_session` with gate
        views); benchmarks pass their own sources through it.
    """

    def __init__(
        self,
        config: LiveConfig,
        *,
        save_settings: bool = True,
        log_path=None,
        session_factory: Callable[[LiveConfig], LiveSession] | None = None,
    ):
        super().__init__()
        self._session_factory = session_factory or (lambda c: start_session(c, views=True))
        self.setWindowTitle("swingmeter live")
        self.config = config
        self.save_settings = save_settings
        self.session: LiveSession | None = None
        self.hold = ro.PeakHold()
        self.latest = None  # LiveReading
        # block arrival -> its reading in the counter's text, s (readings that arrive
        # faster than the text refreshes are drawn in the history only)
        self.latencies: deque[float] = deque(maxlen=4096)
        self.frames = 0
        self._text_frame = 0
        self._text_seq = 0
        self._history_frame = 0
        self._view_frame = 0
        self._pending_view = None  # the newest GateView not yet drawn
        self._stability_at = -math.inf  # monotonic time of the last drift fit
        self._seq = 0
        self._vseq = 0
        self._hist_t = np.zeros(HISTORY_POINTS)
        self._hist_f = np.zeros(HISTORY_POINTS)
        self._hist_n = 0
        self._hist_ref: float | None = None
        self._hist_symbols = True
        self._hist_yrange = (math.inf, -math.inf)
        self._hist_xrange = (math.inf, -math.inf)
        self._hist_shown = None  # the (x, y) ranges last given to the plot
        self._history_dirty = False
        self._wf = np.full((WATERFALL_ROWS, WATERFALL_COLS), WATERFALL_LEVELS_DB[0], np.float32)
        self._wf_span: tuple[float, float] | None = None
        self._error_text = ""
        self._log = None
        if log_path:
            from monitor.commands.live import CsvLog

            self._log = CsvLog(log_path)
        from monitor.window.qtfix import bool_ref_guard

        self._refguard = bool_ref_guard()
        self._building = True
        self._build()
        self._building = False
        self._restart()
        self.timer = QtCore.QTimer(self)
        self.timer.setInterval(FRAME_MS)
        self.timer.timeout.connect(self._frame)
        self.timer.start()

    # -- layout ---------------------------------------------------------------------------

    def _build(self) -> None:
        pg.setConfigOptions(antialias=False, background="#15181c", foreground="#d8dde3")
        central = QtWidgets.QWidget()
        self.setCentralWidget(central)
        outer = QtWidgets.QHBoxLayout(central)
        outer.setContentsMargins(6, 6, 6, 6)
        outer.addWidget(self._build_controls(), 0)
        right = QtWidgets.QVBoxLayout()
        outer.addLayout(right, 1)

        top = QtWidgets.QHBoxLayout()
        top.addWidget(self._build_counter(), 3)
        top.addWidget(self._build_deviation(), 2)
        right.addLayout(top, 0)

        self.warning = _label("", bold=True)
        self.warning.setObjectName("warnings")
        self.warning.setStyleSheet(f"color: {COLOURS['warn']}")
        self.warning.setWordWrap(True)
        right.addWidget(self.warning, 0)

        plots = QtWidgets.QGridLayout()
        right.addLayout(plots, 1)
        self.spectrum_plot = pg.PlotWidget(title="spectrum")
        self.spectrum_plot.setObjectName("spectrum")
        self.spectrum_plot.setLabel("bottom", "frequency", units="Hz")
        self.spectrum_plot.setLabel("left", "dBFS")
        self.spectrum_plot.setYRange(-140, 0)
        self.spectrum_plot.showGrid(x=True, y=True, alpha=0.2)
        self.spectrum_curve = self.spectrum_plot.plot(pen=pg.mkPen(COLOURS["trace"], width=1))
        self.markers = []
        for _ in range(N_MARKERS):
            pen = pg.mkPen(COLOURS["marker"], style=QtCore.Qt.PenStyle.DashLine)
            line = pg.InfiniteLine(angle=90, movable=False, pen=pen)
            line.setZValue(-10)  # behind the trace, which must stay readable
            line.hide()
            self.spectrum_plot.addItem(line)
            self.markers.append(line)
        self.span = pg.LinearRegionItem(movable=False, brush=pg.mkBrush(*COLOURS["span"]))
        self.span.hide()
        self.spectrum_plot.addItem(self.span)

        self.waterfall_plot = pg.PlotWidget(title="waterfall")
        self.waterfall_plot.setObjectName("waterfall")
        self.waterfall_plot.setLabel("bottom", "frequency", units="Hz")
        self.waterfall_plot.setLabel("left", "gates ago")
        self.waterfall = pg.ImageItem(axisOrder="row-major")
        self.waterfall.setLookupTable(pg.colormap.get("viridis").getLookupTable(nPts=256))
        self.waterfall.setLevels(WATERFALL_LEVELS_DB)
        self.waterfall.setImage(self._wf, autoLevels=False)
        self.waterfall_plot.addItem(self.waterfall)
        self.waterfall_plot.disableAutoRange()
        self.waterfall_plot.setXLink(self.spectrum_plot)

        self.wave_plot = pg.PlotWidget(title="waveform")
        self.wave_plot.setObjectName("waveform")
        self.wave_plot.setLabel("bottom", "time", units="s")
        self.wave_plot.showGrid(x=True, y=True, alpha=0.2)
        self.wave_plot.getAxis("left").enableAutoSIPrefix(False)  # "mFS" reads badly
        self.wave_curve = self.wave_plot.plot(pen=pg.mkPen(COLOURS["trace"], width=1))

        self.history_plot = pg.PlotWidget(title="history")
        self.history_plot.setObjectName("history")
        self.history_plot.setLabel("bottom", "time", units="s")
        self.history_plot.setLabel("left", "frequency", units="Hz")
        self.history_plot.showGrid(x=True, y=True, alpha=0.2)
        self.history_curve = self.history_plot.plot(
            pen=pg.mkPen(COLOURS["history"], width=1), symbol="o", symbolSize=3
        )
        # The strip always shows all of its (at most HISTORY_POINTS) points, and
        # _draw_history sets the ranges with the data: no clipping, no view-dependent
        # downsampling and no auto-range, each of which would redo the curve at paint
        # time and ask for a second paint of the strip.
        self.history_plot.disableAutoRange()
        for plot in (self.spectrum_plot, self.waterfall_plot, self.wave_plot, self.history_plot):
            for name in ("left", "bottom"):
                # Axis text is the dearest part of a frame; redraw it only when the ticks
                # change, not on every repaint of the plot beside it.
                plot.getAxis(name).setCacheMode(
                    QtWidgets.QGraphicsItem.CacheMode.DeviceCoordinateCache
                )
            # a fixed width: room for "-1500" and the label, no re-layout as ticks change
            plot.getAxis("left").setWidth(LEFT_AXIS_PX)
        self.spectrum_curve.setDownsampling(auto=True, method="peak")
        self.spectrum_curve.setSkipFiniteCheck(True)
        self.wave_curve.setSkipFiniteCheck(True)
        self.wave_plot.enableAutoRange(axis="y", enable=False)
        self._wave_span = 0.0
        self._wave_unit = ""
        self._wave_len = 0.0
        plots.addWidget(self.spectrum_plot, 0, 0)
        plots.addWidget(self.waterfall_plot, 1, 0)
        plots.addWidget(self.wave_plot, 0, 1)
        plots.addWidget(self.history_plot, 1, 1)

        bottom = QtWidgets.QHBoxLayout()
        self.stability = _label("")
        self.stability.setObjectName("stability")
        bottom.addWidget(self.stability, 1)
        self.status = _label("")
        self.status.setObjectName("status")
        bottom.addWidget(self.status, 1)
        right.addLayout(bottom, 0)
        right.addWidget(self._build_replay(), 0)
        self.resize(1360, 860)

    def _build_counter(self) -> QtWidgets.QGroupBox:
        box, g = _group("counter", "counter")
        self.freq_label = _label("tone", bold=True)
        self.freq = _label("—", size=22, bold=True, mono=True)
        self.freq.setObjectName("frequency")
        g.addWidget(self.freq_label, 0, 0, 1, 4)
        g.addWidget(self.freq, 1, 0, 1, 4)
        self.level = _label("—")
        self.level_bar = QtWidgets.QProgressBar()
        self.level_bar.setRange(-80, 0)
        self.level_bar.setTextVisible(False)
        self.level_bar.setMaximumHeight(10)
        self.clip = _label("", bold=True)
        self.clip.setStyleSheet(f"color: {COLOURS['bad']}")
        self.clock = _label("—")
        self.dropped = _label("0")
        self.snr = _label("—")
        self.sinad = _label("—")
        self.thd = _label("—")
        rows = (
            ("input level", self.level, "clock correction", self.clock),
            ("SNR", self.snr, "dropped blocks", self.dropped),
            ("SINAD", self.sinad, "THD", self.thd),
        )
        for i, (a, wa, b, wb) in enumerate(rows, start=3):
            g.addWidget(_label(a), i, 0)
            g.addWidget(wa, i, 1)
            g.addWidget(_label(b), i, 2)
            g.addWidget(wb, i, 3)
        g.addWidget(self.level_bar, 2, 0, 1, 3)
        g.addWidget(self.clip, 2, 3)
        g.setColumnStretch(1, 1)
        g.setColumnStretch(3, 1)
        return box

    def _build_deviation(self) -> QtWidgets.QGroupBox:
        box, g = _group("deviation", "deviation")
        g.addWidget(_label("now", bold=True), 0, 1)
        g.addWidget(_label("held", bold=True), 0, 2)
        self.dev = {}
        for i, (key, name) in enumerate((("pos", "peak+"), ("neg", "peak-"), ("rms", "RMS")), 1):
            g.addWidget(_label(name), i, 0)
            self.dev[key] = _label("—", mono=True)
            self.dev["hold_" + key] = _label("—", mono=True)
            g.addWidget(self.dev[key], i, 1)
            g.addWidget(self.dev["hold_" + key], i, 2)
        self.mod_index = _label("—", mono=True)
        self.mod_tone = _label("—", mono=True)
        g.addWidget(_label("mod. index"), 4, 0)
        g.addWidget(self.mod_index, 4, 1)
        g.addWidget(_label("mod. tone"), 5, 0)
        g.addWidget(self.mod_tone, 5, 1)
        self.reset_button = QtWidgets.QPushButton("reset held peaks")
        self.reset_button.clicked.connect(self.reset_hold)
        g.addWidget(self.reset_button, 6, 0, 1, 3)
        return box

    def _build_controls(self) -> QtWidgets.QWidget:
        panel = QtWidgets.QGroupBox("set-up")
        panel.setObjectName("controls")
        panel.setFixedWidth(250)
        form = QtWidgets.QFormLayout(panel)
        form.setContentsMargins(6, 6, 6, 6)
        c, s = self.config, self.config.settings

        self.device_box = QtWidgets.QComboBox()
        if c.file is not None:
            self.device_box.addItem(f"file: {Path(c.file).name}", None)
            self.device_box.setEnabled(False)
        else:
            self.device_box.addItem("default input", None)
            try:
                from monitor.audio import list_input_devices

                for d in list_input_devices():
                    self.device_box.addItem(f"{d.index}: {d.name}", str(d.index))
            except SwingmeterError as exc:
                self._error_text = str(exc)
            self._select(self.device_box, c.device)
        self.device_box.currentIndexChanged.connect(self._controls_changed)
        form.addRow("input", self.device_box)

        self.mode_box = self._combo(("audio", "beat", "iq"), s.mode)
        form.addRow("mode", self.mode_box)
        self.rate_box = self._combo(RATES_HZ, int(c.rate_hz), fmt=lambda v: f"{v:g} Hz")
        if c.file is not None:  # a recording brings its own rate
            self.rate_box.setItemText(self.rate_box.currentIndex(), "the file's")
            self.rate_box.setEnabled(False)
        form.addRow("rate", self.rate_box)
        self.gate_box = self._combo(GATES_S, s.gate_s, fmt=lambda v: f"{v:g} s")
        form.addRow("gate", self.gate_box)
        from monitor.commands.analyze import FILTER_CHOICES

        self.filter_box = self._combo(FILTER_CHOICES, s.filter)
        form.addRow("filter", self.filter_box)
        deemph = getattr(getattr(s, "fm", None), "deemphasis", None)
        self.deemph_box = self._combo(DEEMPHASIS, deemph if deemph in DEEMPHASIS else "none")
        form.addRow("de-emphasis", self.deemph_box)
        self.dial_edit = QtWidgets.QLineEdit(_frequency_text(c.meta.get("dial_hz")))
        self.dial_edit.setPlaceholderText("e.g. 7.030M")
        self.dial_edit.editingFinished.connect(self._controls_changed)
        form.addRow("dial", self.dial_edit)
        self.sideband_box = self._combo(("upper", "lower"), c.meta.get("sideband", "upper"))
        form.addRow("sideband", self.sideband_box)
        self.harmonic_spin = QtWidgets.QSpinBox()
        self.harmonic_spin.setRange(1, 99)
        self.harmonic_spin.setValue(int(c.meta.get("harmonic", 1)))
        self.harmonic_spin.valueChanged.connect(self._controls_changed)
        form.addRow("harmonic", self.harmonic_spin)
        self.profile_box = QtWidgets.QComboBox()
        self.profile_box.addItem("none", None)
        try:
            from monitor import profiles

            for name in sorted(profiles.load_all()):
                self.profile_box.addItem(name, name)
        except SwingmeterError as exc:
            self._error_text = str(exc)
        self._select(self.profile_box, c.meta.get("profile"))
        self.profile_box.currentIndexChanged.connect(self._controls_changed)
        form.addRow("bench profile", self.profile_box)

        self.record_button = QtWidgets.QPushButton("record")
        self.record_button.setCheckable(True)
        self.record_button.toggled.connect(self._record_toggled)
        form.addRow(self.record_button)
        return panel

    def _build_replay(self) -> QtWidgets.QWidget:
        bar = QtWidgets.QWidget()
        bar.setObjectName("replay")
        h = QtWidgets.QHBoxLayout(bar)
        h.setContentsMargins(0, 0, 0, 0)
        self.pause_button = QtWidgets.QPushButton("pause")
        self.pause_button.setCheckable(True)
        self.pause_button.toggled.connect(self._pause_toggled)
        self.seek = QtWidgets.QSlider(QtCore.Qt.Orientation.Horizontal)
        self.seek.setRange(0, 1000)
        self.seek.sliderReleased.connect(self._seek_released)
        self.position = _label("", mono=True)
        self.speed_box = self._combo(
            SPEEDS, self.config.speed, fmt=lambda v: "max" if math.isinf(v) else f"{v:g}x"
        )
        h.addWidget(self.pause_button)
        h.addWidget(self.seek, 1)
        h.addWidget(self.position)
        h.addWidget(_label("speed"))
        h.addWidget(self.speed_box)
        bar.setVisible(self.config.file is not None)
        return bar

    def _combo(self, values, current, *, fmt=str) -> QtWidgets.QComboBox:
        box = QtWidgets.QComboBox()
        for v in values:
            box.addItem(fmt(v), v)
        if current not in values:
            box.addItem(fmt(current), current)
        self._select(box, current)
        box.currentIndexChanged.connect(self._controls_changed)
        return box

    @staticmethod
    def _select(box: QtWidgets.QComboBox, value) -> None:
        for i in range(box.count()):
            if box.itemData(i) == value:
                box.setCurrentIndex(i)
                return

    # -- controls -> config -> new session ------------------------------------------------

    def _config_from_controls(self) -> LiveConfig:
        from monitor.units import parse_frequency

        c = self.config
        meta = dict(c.meta)
        text = self.dial_edit.text().strip()
        dial = None
        if text:
            try:
                dial = parse_frequency(text)
            except ValueError as exc:
                self._error_text = f"dial: {exc}"
                dial = c.meta.get("dial_hz")
        meta["dial_hz"] = dial
        mode = self.mode_box.currentData()
        meta["center_hz"] = dial if mode == "iq" else None
        meta["sideband"] = self.sideband_box.currentData()
        meta["harmonic"] = self.harmonic_spin.value()
        profile = self.profile_box.currentData()
        if profile != c.meta.get("profile"):
            meta["profile"] = profile
            meta["clock_ppm"] = 0.0
            if profile:
                from monitor import profiles

                meta["clock_ppm"] = float(profiles.load(profile).get("clock_ppm", 0.0))
        deemph = self.deemph_box.currentData()
        new = c.with_(
            device=self.device_box.currentData() if c.file is None else None,
            rate_hz=float(self.rate_box.currentData()),
            meta=meta,
            speed=float(self.speed_box.currentData()),
        )
        return new.with_settings(
            mode=mode,
            gate_s=float(self.gate_box.currentData()),
            filter=self.filter_box.currentData(),
            fm=_fm_settings(c.settings, mode, deemph),
        )

    def _controls_changed(self, *_args) -> None:
        if self._building:
            return
        try:
            new = self._config_from_controls()
        except SwingmeterError as exc:
            self._error_text = str(exc)
            return
        if new == self.config:
            return
        if self.config.file is not None:
            pos = self.session.source.position_s if self.session else 0.0
            new = new.with_(start_s=pos)
        self.config = new
        self._restart()
        self._store_settings()

    def _restart(self) -> None:
        """Stop the running session and start one with `self.config`."""
        if self.session is not None:
            if self.session.recording:
                self.record_button.setChecked(False)
            self.session.stop(timeout=1.0)
        self.session = None
        self._seq = self._vseq = self._text_seq = 0
        self.latest = None
        self.hold.reset()
        self._hist_n = 0
        self._hist_ref = None
        self._hist_yrange = (math.inf, -math.inf)
        self._hist_xrange = (math.inf, -math.inf)
        self._hist_shown = None  # the (x, y) ranges last given to the plot
        self._wave_span = 0.0
        self._wave_unit = ""
        self._wave_len = 0.0
        self._wf[:] = WATERFALL_LEVELS_DB[0]
        self._wf_span = None
        self._pending_view = None
        self._stability_at = -math.inf
        self._error_text = ""
        self.pause_button.setChecked(False)
        try:
            self.session = self._session_factory(self.config)
        except (SwingmeterError, ValueError) as exc:
            self._error_text = str(exc)
        self._update_text()

    def _store_settings(self) -> None:
        if not self.save_settings:
            return
        c, s = self.config, self.config.settings
        values = {
            "device": c.device,
            "mode": s.mode,
            "rate_hz": c.rate_hz,
            "gate_s": s.gate_s,
            "filter": s.filter,
            "deemphasis": self.deemph_box.currentData(),
            "dial_hz": c.meta.get("dial_hz"),
            "sideband": c.meta.get("sideband", "upper"),
            "harmonic": int(c.meta.get("harmonic", 1)),
            "profile": c.meta.get("profile"),
        }
        if not math.isinf(c.speed):
            values["speed"] = c.speed
        try:
            if not stored.save(values):
                self._error_text = stored.load().problem or ""
        except OSError as exc:
            self._error_text = f"cannot save window settings: {exc}"

    def reset_hold(self) -> None:
        """Forget the held deviation peaks."""
        self.hold.reset()
        self._update_text()

    def _pause_toggled(self, on: bool) -> None:
        if self.session is None:
            return
        if on:
            self.session.pause()
        else:
            self.session.resume()
        self.pause_button.setText("resume" if on else "pause")

    def seek_to(self, start_s: float) -> None:
        """Replay from `start_s`: a new engine run from that point (gates start there)."""
        if self.config.file is None:
            return
        self.config = self.config.with_(start_s=max(0.0, float(start_s)))
        self._restart()

    def _seek_released(self) -> None:
        dur = self._duration_s()
        if dur:
            self.seek_to(dur * self.seek.value() / 1000.0)

    def _duration_s(self) -> float | None:
        meta = self.session.meta if self.session else None
        return None if meta is None else meta.duration_s

    def _record_toggled(self, on: bool) -> None:
        if self.session is None:
            return
        if on:
            name = time.strftime("live-%Y%m%d-%H%M%S.wav")
            try:
                rec = self.session.start_recording(Path.cwd() / name)
            except (SwingmeterError, ValueError) as exc:
                self._error_text = f"record: {exc}"
                self.record_button.blockSignals(True)
                self.record_button.setChecked(False)
                self.record_button.blockSignals(False)
                return
            self.record_button.setText(f"stop recording ({rec.path.name})")
        else:
            try:
                summary = self.session.stop_recording()
            except SwingmeterError as exc:
                self._error_text = f"record: {exc}"
                summary = None
            self.record_button.setText("record")
            if summary is not None:
                self._error_text = f"wrote {summary.path} ({summary.duration_s:.1f} s)"

    # -- the timer ------------------------------------------------------------------------

    def _frame(self) -> None:
        self._refguard.top_up()
        self.frames += 1
        s = self.session
        if s is not None:
            new = s.readings_since(self._seq)
            if new:
                for lr in new:
                    self._add_history(lr.reading)
                    self.hold.add(lr.reading)
                    if self._log is not None:
                        self._log.add(lr.reading)
                self._seq = new[-1].seq
                self.latest = new[-1]
                self._history_dirty = True
            views = s.views_since(self._vseq)
            if views:
                self._vseq = views[-1][0]
                for _seq, v in views:
                    self._add_waterfall_row(v)  # every gate keeps its row ...
                self._pending_view = views[-1][1]
        if self._pending_view is not None and (
            self.frames - self._view_frame >= VIEW_MIN_FRAMES or (s is not None and s.done)
        ):
            # ... but the plots are redrawn at most 4 times a second: drawing is most of
            # the window's CPU, and the eye gains nothing from a faster spectrum
            self._view_frame = self.frames
            self._draw_view(self._pending_view)
            self._pending_view = None
            self.waterfall.setImage(self._wf, autoLevels=False)
        since = self.frames - self._text_frame
        fresh = self.latest is not None and self.latest.seq != self._text_seq
        # a new reading is shown at once unless text changed very recently; otherwise
        # the text (status, stall time) refreshes a few times a second
        if (fresh and since >= TEXT_MIN_FRAMES) or since >= TEXT_EVERY_FRAMES:
            self._update_text()
        due = self.frames - self._history_frame >= HISTORY_EVERY_FRAMES
        if self._history_dirty and (due or (s is not None and s.done)):
            # the strip scrolls, so each redraw re-ticks its axis: a few times a second is
            # enough for a trend
            self._history_dirty = False
            self._history_frame = self.frames
            self._draw_history()

    def _add_history(self, r) -> None:
        f = ro.shown_frequency(r, harmonic=int(self.config.meta.get("harmonic", 1))).value_hz
        if f is None:
            return
        if self._hist_n == HISTORY_POINTS:
            self._hist_t[:-1] = self._hist_t[1:]
            self._hist_f[:-1] = self._hist_f[1:]
            self._hist_n -= 1
        self._hist_t[self._hist_n] = r.t_s + r.gate_s / 2
        self._hist_f[self._hist_n] = f
        self._hist_n += 1

    def _draw_history(self) -> None:
        n = self._hist_n
        if not n:
            return
        if self._hist_ref is None:
            # offsets from a round reference keep the axis readable at mHz spreads
            self._hist_ref = float(math.floor(self._hist_f[0]))
            self.history_plot.setLabel("left", f"frequency − {self._hist_ref:.0f} Hz", units="Hz")
        symbols = n <= HISTORY_SYMBOLS_MAX  # dots help a short strip; a long one pays for them
        if symbols != self._hist_symbols:
            self._hist_symbols = symbols
            self.history_curve.setSymbol("o" if symbols else None)
        t, y = self._hist_t[:n], self._hist_f[:n] - self._hist_ref
        self.history_curve.setData(t, y)
        # Ranges set here, in the same pass as the data: pyqtgraph's auto-range would
        # find the new bounds at paint time and ask for a second paint of the strip.
        lo, hi = float(y.min()), float(y.max())
        y_lo, y_hi = self._hist_yrange
        if lo < y_lo or hi > y_hi or (hi - lo) < 0.25 * (y_hi - y_lo):
            # a new scale only when the trace leaves it or shrinks to a quarter of it
            pad = 0.1 * (hi - lo) if hi > lo else max(1e-6, 1e-9 * abs(self._hist_f[0]))
            self._hist_yrange = (lo - pad, hi + pad)
        # The time axis moves in steps, like a chart recorder's paper: room is left at
        # the right for a tenth of the span, and the axis (whose re-ticking is most of
        # the strip's cost) is redrawn only when the trace reaches the edge or the
        # oldest points leave a tenth of the strip empty at the left.
        t0, t1 = float(t[0]), float(t[-1])
        x_lo, x_hi = self._hist_xrange
        if t1 > x_hi or t0 < x_lo or t0 - x_lo > 0.1 * (x_hi - x_lo):
            self._hist_xrange = (t0, t1 + 0.1 * max(t1 - t0, 1.0))
        if (self._hist_xrange, self._hist_yrange) != self._hist_shown:
            self._hist_shown = (self._hist_xrange, self._hist_yrange)
            self.history_plot.setRange(
                xRange=self._hist_xrange, yRange=self._hist_yrange, padding=0
            )

    def _add_waterfall_row(self, v) -> None:
        f, db = v.spectrum_hz, v.spectrum_db
        if f.size < 2:
            return
        span = (float(f[0]), float(f[-1]))
        if self._wf_span != span:
            self._wf_span = span
            self._wf[:] = WATERFALL_LEVELS_DB[0]
            self.waterfall.setRect(QtCore.QRectF(span[0], 0, span[1] - span[0], WATERFALL_ROWS))
            # fixed ranges: autoscaling would follow the first (empty) image instead
            self.spectrum_plot.setXRange(span[0], span[1], padding=0)
            self.waterfall_plot.setYRange(0, WATERFALL_ROWS, padding=0)
        grid = np.linspace(span[0], span[1], WATERFALL_COLS)
        self._wf[1:] = self._wf[:-1]
        self._wf[0] = np.interp(grid, f, db).astype(np.float32)

    def _draw_view(self, v) -> None:
        self.spectrum_curve.setData(v.spectrum_hz, v.spectrum_db)
        for i, line in enumerate(self.markers):
            if i < len(v.markers_hz):
                if line.value() != v.markers_hz[i]:
                    line.setValue(v.markers_hz[i])
                if not line.isVisible():
                    line.show()
            elif line.isVisible():
                line.hide()
        if v.span_hz is not None:
            if tuple(self.span.getRegion()) != tuple(v.span_hz):
                self.span.setRegion(v.span_hz)
            if not self.span.isVisible():
                self.span.show()
        elif self.span.isVisible():
            self.span.hide()
        self.wave_curve.setData(v.waveform_s, v.waveform)
        peak = float(np.max(np.abs(v.waveform))) if v.waveform.size else 0.0
        if peak > self._wave_span or peak < 0.5 * self._wave_span:
            # a new range only when the signal outgrows it or shrinks to half: steady
            # ticks, and no re-ticking of the axis on every gate
            self._wave_span = _nice_ceiling(1.1 * peak) if peak > 0 else 1.0
            self.wave_plot.setYRange(-self._wave_span, self._wave_span, padding=0)
        if v.waveform_s.size and float(v.waveform_s[-1]) != self._wave_len:
            self._wave_len = float(v.waveform_s[-1])
            self.wave_plot.setXRange(0.0, self._wave_len, padding=0)
        if v.waveform_unit != self._wave_unit:  # a new label re-lays the axis out: rarely
            self._wave_unit = v.waveform_unit
            if v.waveform_unit == "Hz":
                self.wave_plot.setLabel("left", "deviation", units="Hz")
            else:
                self.wave_plot.setLabel("left", "audio (full scale)")

    def _update_text(self) -> None:
        self._text_frame = self.frames
        if self.latest is not None and self.latest.seq != self._text_seq:
            self._text_seq = self.latest.seq
            self.latencies.append(time.monotonic() - self.latest.arrived_s)
        s = self.session
        c = self.config
        meta = s.meta if s is not None and s.meta is not None else None
        clock_ppm = meta.clock_ppm if meta is not None else float(c.meta.get("clock_ppm", 0.0))
        profile = meta.profile if meta is not None else c.meta.get("profile")
        self.clock.setText(ro.clock_text(clock_ppm, profile))
        warnings = []
        status = []
        if s is not None:
            st = s.stats
            self.dropped.setText(str(st.dropped_blocks))
            if st.running and st.stalled_s > 1.0 and not s.paused:
                status.append(f"no input for {st.stalled_s:.0f} s")
            if s.done and c.file is not None and s.error is None:
                status.append("end of recording")
            if s.paused:
                status.append("paused")
            if s.error is not None:
                status.append(f"stopped: {s.error}")
            if s.recording:
                status.append("recording")
            self._update_position()
        lr = self.latest
        if lr is not None:
            r = lr.reading
            shown = ro.shown_frequency(r, harmonic=int(c.meta.get("harmonic", 1)))
            self.freq_label.setText(shown.label)
            self.freq.setText(shown.text)
            q = ro.quality_texts(r)
            self.snr.setText(q["snr"])
            self.sinad.setText(q["sinad"])
            self.thd.setText(q["thd"])
            self.mod_index.setText(q["mod_index"])
            self.mod_tone.setText(q["mod_tone"])
            self.level.setText(q["level"])
            if math.isfinite(r.rms_dbfs):
                self.level_bar.setValue(int(max(-80, min(0, r.rms_dbfs))))
            clip = ro.clipping(r)
            self.clip.setText("CLIPPING" if clip else "")
            if clip:
                warnings.append("input clipping: lower the level")
            band = ro.protected_band_warning(
                r, dial_hz=c.meta.get("dial_hz"), harmonic=int(c.meta.get("harmonic", 1))
            )
            if band:
                warnings.append(band)
            for k, text in ro.deviation_texts(r, self.hold).items():
                self.dev[k].setText(text)
        else:
            self.freq.setText("waiting for the first gate…" if s is not None else "—")
        self.warning.setText("   ".join(warnings))
        if self._error_text:
            status.append(self._error_text)
        self.status.setText("   ".join(status))
        self._update_stability()

    def _update_position(self) -> None:
        if self.config.file is None or self.session is None:
            return
        dur = self._duration_s() or 0.0
        pos = getattr(self.session.source, "position_s", 0.0)
        self.position.setText(f"{pos:7.1f} / {dur:.1f} s")
        if dur > 0 and not self.seek.isSliderDown():
            self.seek.blockSignals(True)
            self.seek.setValue(int(1000 * min(1.0, pos / dur)))
            self.seek.blockSignals(False)

    def _update_stability(self) -> None:
        n = self._hist_n
        if n < 3:
            self.stability.setText("stability: —")
            return
        now = time.monotonic()
        if now - self._stability_at < STABILITY_EVERY_S:
            return  # a fit over up to an hour of gates: once a second is plenty
        self._stability_at = now
        try:
            from dsp.stability import fit_drift
        except ImportError:
            return
        try:
            fit = fit_drift(self._hist_t[:n], self._hist_f[:n])
        except (ValueError, TypeError, ArithmeticError):
            return
        self.stability.setText(
            f"stability: drift {fit.hz_per_s * 60:+.4g} Hz/min "
            f"({fit.ppm_per_min:+.3g} ppm/min), excursion {fit.excursion_hz:.3g} Hz "
            f"over {fit.duration_s:.0f} s"
        )

    # -- closing --------------------------------------------------------------------------

    def shutdown(self) -> None:
        """Stop the timer and the session, close the log; idempotent."""
        self.timer.stop()
        if self.session is not None:
            try:
                self.session.stop_recording()
            except SwingmeterError:
                pass
            self.session.stop(timeout=1.0)
        if self._log is not None:
            self._log.close()

    def closeEvent(self, event) -> None:
        self.shutdown()
        super().closeEvent(event)


def _nice_ceiling(x: float) -> float:
    """The smallest 1, 2 or 5 times a power of ten that is >= x (x > 0)."""
    p = 10.0 ** math.floor(math.log10(x))
    for m in (1.0, 2.0, 5.0, 10.0):
        if m * p >= x:
            return m * p
    return 10.0 * p


def _frequency_text(hz: float | None) -> str:
    """A frequency as the dial field shows it (and `parse_frequency` reads it back)."""
    if hz is None:
        return ""
    for scale, suffix in ((1e9, "G"), (1e6, "M"), (1e3, "k")):
        if abs(hz) >= scale:
            return f"{hz / scale:.9g}{suffix}"
    return f"{hz:.9g}"


def _fm_settings(settings, mode: str, deemphasis: str):
    """The FM settings for `mode` with the window's de-emphasis (None in audio mode, or
    when the engine has no FM settings)."""
    if mode not in ("beat", "iq"):
        return None
    try:
        from monitor.fm_engine import FmSettings
    except ImportError:
        return None
    fm = getattr(settings, "fm", None)
    if isinstance(fm, FmSettings):
        return replace(fm, deemphasis=deemphasis)
    return FmSettings(deemphasis=deemphasis)


def config_with_stored(config: LiveConfig) -> tuple[LiveConfig, str | None]:
    """Fill the controls the command line left at their defaults from the stored settings.

    Returns
    -------
    (LiveConfig, problem) : the config and a message if the settings file is corrupt.
    """
    loaded = stored.load()
    v = loaded.values
    if not v:
        return config, loaded.problem
    c = config
    if c.file is None:
        if c.device is None and "device" in v:
            c = c.with_(device=v["device"])
        if c.rate_hz == 48000.0 and "rate_hz" in v:
            c = c.with_(rate_hz=float(v["rate_hz"]))
    s = c.settings
    changes = {}
    if s.mode == "audio" and v.get("mode") in ("audio", "beat", "iq") and c.file is None:
        changes["mode"] = v["mode"]
    if s.gate_s == 1.0 and "gate_s" in v:
        changes["gate_s"] = float(v["gate_s"])
    if s.filter == "none" and "filter" in v:
        changes["filter"] = v["filter"]
    mode = changes.get("mode", s.mode)
    if v.get("deemphasis") in DEEMPHASIS and mode in ("beat", "iq"):
        changes["fm"] = _fm_settings(s, mode, v["deemphasis"])
    try:
        c = c.with_settings(**changes)
    except ValueError:
        pass
    meta = dict(c.meta)
    for key in ("dial_hz", "sideband", "harmonic"):
        if meta.get(key) in (None, "upper", 1) and v.get(key) is not None:
            meta[key] = v[key]
    c = c.with_(meta=meta)
    if c.speed == 1.0 and "speed" in v:
        c = c.with_(speed=float(v["speed"]))
    return replace(c), loaded.problem


def run_window(config: LiveConfig, *, log_path: str | None = None) -> int:
    """Show the live window until it is closed; returns the exit code."""
    app = QtWidgets.QApplication.instance() or QtWidgets.QApplication([])
    config, problem = config_with_stored(config)
    win = LiveWindow(config, log_path=log_path)
    if problem:
        win._error_text = problem
    win.show()
    try:
        app.exec()
    finally:
        win.shutdown()
        win._refguard.top_up()
    return 0
