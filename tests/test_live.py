"""Live path: session threads, paced replay, the headless `live` command, a real sound server.

Outside references: tones written by sox (an independent generator) and played through a
real PulseAudio server; the `analyze` path on the same file (same engine, so readings must
be identical, not merely close).
"""

from __future__ import annotations

import csv
import itertools
import json
import math
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from monitor.blocks import Block, StreamMeta
from monitor.cli import main
from monitor.engine import AnalysisSettings, Reading, analyze_file
from monitor.live import LiveConfig, LiveSession, ReplaySource, start_session
from monitor.sources import ArraySource, open_source
from tests.soundserver import pulse_server, sox_tone  # noqa: F401 - fixture

ROOT = Path(__file__).resolve().parent.parent
TONE_HZ = 1234.5678  # sox's sine, an independent generator


@pytest.fixture(scope="module")
def tone_wav(tmp_path_factory):
    """3 s of a 1234.5678 Hz sine at -6 dBFS with a little noise floor, written by sox."""
    path = tmp_path_factory.mktemp("live") / "tone.wav"
    sox_tone(path, 3, ["sine", str(TONE_HZ), "vol", "0.5"], channels=1)
    return path


def _collect(session: LiveSession, timeout: float = 60.0) -> None:
    assert session.wait(timeout), "session did not finish"
    session.stop()


class TestReplaySource:
    def test_blocks_cover_the_file_from_the_start_point(self, tone_wav):
        with open_source(tone_wav, block_frames=4096) as src:
            rep = ReplaySource(src, speed=math.inf, start_s=1.0)
            blocks = list(rep)
        fs = blocks[0].meta.fs_hz
        assert blocks[0].start == round(1.0 * fs)
        for a, b in itertools.pairwise(blocks):
            assert b.start == a.start + len(a)  # consecutive
        x, _ = sf.read(tone_wav)
        got = np.concatenate([b.samples for b in blocks])
        np.testing.assert_array_equal(got, x[round(fs) :])

    def test_paced_not_ahead_of_time(self, tone_wav):
        # At speed 10 a 3 s file cannot be delivered before 0.3 s of wall time: each block
        # waits until its last sample is due.
        with open_source(tone_wav, block_frames=2048) as src:
            t0 = time.monotonic()
            n = sum(len(b) for b in ReplaySource(src, speed=10.0))
            took = time.monotonic() - t0
        assert n == sf.info(str(tone_wav)).frames
        assert took >= 0.3 * 0.95

    def test_duration_and_pause(self, tone_wav):
        with open_source(tone_wav, block_frames=2048) as src:
            rep = ReplaySource(src, speed=math.inf, duration_s=0.5)
            rep.pause()
            got = []
            t = threading.Thread(target=lambda: got.extend(rep))
            t.start()
            time.sleep(0.2)
            assert got == []  # nothing while paused
            rep.resume()
            t.join(10)
        assert sum(len(b) for b in got) == round(0.5 * src.meta.fs_hz)

    def test_raises(self, tone_wav):
        with open_source(tone_wav) as src:
            with pytest.raises(ValueError, match="speed=0"):
                ReplaySource(src, speed=0)
            with pytest.raises(ValueError, match="start_s=-1"):
                ReplaySource(src, start_s=-1.0)
            with pytest.raises(ValueError, match="duration_s=0"):
                ReplaySource(src, duration_s=0.0)


class TestLiveSession:
    def test_replay_equals_analyze(self, tone_wav):
        settings = AnalysisSettings(gate_s=0.5)
        offline = analyze_file(tone_wav, settings=settings)
        got: list[Reading] = []
        config = LiveConfig(file=str(tone_wav), settings=settings, speed=math.inf)
        session = start_session(config, on_reading=got.append, views=True)
        _collect(session)
        assert session.error is None
        # same engine, same gates: identical readings, not merely close
        assert [r.t_s for r in got] == [r.t_s for r in offline.readings]
        assert [r.frequency_hz for r in got] == [r.frequency_hz for r in offline.readings]
        assert got == offline.readings
        # and the figure is sox's tone (independent generator) within 5 sigma
        for r in got:
            assert abs(r.frequency_hz - TONE_HZ) <= 5 * r.uncertainty_hz + 1e-6
        assert session.summary.tone.frequency_hz == offline.summary.tone.frequency_hz
        assert session.views_since(0)  # gate views were made for a display
        assert session.stats.dropped_blocks == 0

    def test_seek_starts_a_new_run_at_the_seek_point(self, tone_wav):
        got: list[Reading] = []
        config = LiveConfig(
            file=str(tone_wav), settings=AnalysisSettings(gate_s=0.5), speed=math.inf
        )
        session = start_session(config.with_(start_s=1.25), on_reading=got.append)
        _collect(session)
        assert got[0].t_s == 1.25  # gates start at the seek point (documented)
        assert got[0].contiguous is False  # the stream did not start at sample 0
        # 1.75 s left: 3 full gates and the 0.25 s rest (half a gate is kept as a reading)
        assert [r.t_s for r in got] == [1.25, 1.75, 2.25, 2.75]

    def test_stalled_source_keeps_session_responsive(self):
        fs = 8000.0
        meta = StreamMeta(source="stall", fs_hz=fs)
        release = threading.Event()
        t = np.arange(int(fs)) / fs

        def stalling():
            yield Block(0.5 * np.sin(2 * np.pi * 440.0 * t), 0, meta)
            release.wait(30)  # a device that stops delivering

        session = LiveSession(stalling(), AnalysisSettings(gate_s=0.5)).start()
        try:
            deadline = time.monotonic() + 30
            while session.stats.readings < 2 and time.monotonic() < deadline:
                time.sleep(0.02)
            assert session.stats.readings == 2
            time.sleep(0.3)
            t0 = time.monotonic()
            stats = session.stats
            latest = session.latest()
            assert time.monotonic() - t0 < 0.1  # polling never waits for the source
            assert stats.stalled_s >= 0.25 and stats.running
            assert latest.seq == 2
            t0 = time.monotonic()
            session.stop(timeout=1.0)
            assert time.monotonic() - t0 < 1.5
            assert session.done  # the worker stopped although the source is stuck
        finally:
            release.set()

    def test_slow_consumer_drops_and_counts_with_bounded_memory(self):
        fs = 8000.0
        meta = StreamMeta(source="fast", fs_hz=fs)
        n_blocks, frames = 400, 400  # 20 s of signal, delivered at once
        t = np.arange(frames) / fs

        def fast():
            for i in range(n_blocks):
                yield Block(
                    0.5 * np.sin(2 * np.pi * 440.0 * (t + i * frames / fs)), i * frames, meta
                )

        def slow(_r):
            time.sleep(0.05)  # a consumer slower than the input

        session = LiveSession(
            fast(),
            AnalysisSettings(gate_s=0.1),
            queue_blocks=4,
            keep_readings=8,
            on_reading=slow,
        ).start()
        _collect(session)
        st = session.stats
        assert st.blocks_in == n_blocks
        assert st.dropped_blocks > 0
        assert st.dropped_frames == st.dropped_blocks * frames
        assert st.queue_peak <= 4  # the queue never grew past its bound
        assert len(session.readings_since(0)) <= 8  # nor did the kept readings
        # the engine saw the gaps
        assert st.readings < n_blocks * frames / (0.1 * fs)

    def test_recorder_is_fed_from_the_source_thread(self, tone_wav, tmp_path):
        with open_source(tone_wav, block_frames=2048) as src:
            session = LiveSession(ReplaySource(src, speed=math.inf), drop_when_full=False)
            session.meta = src.meta
            rec = session.start_recording(tmp_path / "copy.wav", subtype="FLOAT")
            session.start()
            assert session.wait(60)
            summary = session.stop_recording()
            session.stop()
        assert not session.recording
        assert summary.frames == sf.info(str(tone_wav)).frames
        copy, _ = sf.read(rec.path)
        orig, _ = sf.read(tone_wav)
        np.testing.assert_allclose(copy, orig, atol=1e-7)  # float32 copy of 24-bit PCM

    def test_raises(self):
        src = ArraySource(np.zeros(100), 8000.0)
        with pytest.raises(ValueError, match="queue_blocks=0"):
            LiveSession(src, queue_blocks=0)
        with pytest.raises(ValueError, match="keep_readings=-1"):
            LiveSession(src, keep_readings=-1)
        with pytest.raises(ValueError, match="metadata is unknown"):
            LiveSession(iter(()), None).start_recording("x.wav")


class TestHeadless:
    def test_json_lines_have_the_reading_keys(self, tone_wav, capsys):
        rc = main(["live", "--no-window", "--json-lines", "--file", str(tone_wav),
                   "--speed", "max", "--gate", "0.5"])  # fmt: skip
        assert rc == 0
        lines = capsys.readouterr().out.splitlines()
        objs = [json.loads(line) for line in lines]
        offline = analyze_file(tone_wav, settings=AnalysisSettings(gate_s=0.5)).readings
        assert len(objs) == len(offline)
        for o, r in zip(objs, offline, strict=True):
            assert set(o) == set(r.to_dict())  # the keys of `analyze --readings`
            assert o["frequency_hz"] == r.frequency_hz  # JSON keeps every digit

    def test_table_and_csv_log(self, tone_wav, tmp_path, capsys):
        log = tmp_path / "log.csv"
        rc = main(["live", "--no-window", "--file", str(tone_wav), "--speed", "max",
                   "--gate", "0.5", "--duration", "2", "--log", str(log)])  # fmt: skip
        assert rc == 0
        out = capsys.readouterr().out.splitlines()
        assert "frequency" in out[0]
        assert len(out) == 1 + 4  # header, 2 s in 0.5 s gates
        assert "1234.567" in out[1]
        with open(log, newline="") as f:
            rows = list(csv.reader(f))
        assert rows[0] == Reading.columns()
        assert len(rows) == 5
        freq = rows[0].index("frequency_hz")
        assert abs(float(rows[1][freq]) - TONE_HZ) < 0.01

    def test_ctrl_c_exits_cleanly_with_a_complete_log(self, tmp_path):
        wav = tmp_path / "long.wav"
        sox_tone(wav, 30, ["sine", "700", "vol", "0.5"], channels=1)
        log = tmp_path / "log.csv"
        proc = subprocess.Popen(
            [sys.executable, "-m", "monitor.cli", "live", "--no-window", "--file", str(wav),
             "--speed", "1", "--gate", "0.2", "--log", str(log)],
            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        )  # fmt: skip
        try:
            deadline = time.monotonic() + 60
            while time.monotonic() < deadline:
                if log.exists() and log.read_text().count("\n") >= 3:
                    break
                time.sleep(0.05)
            else:
                pytest.fail("no readings logged")
            proc.send_signal(signal.SIGINT)
            out, err = proc.communicate(timeout=20)
        finally:
            if proc.poll() is None:
                proc.kill()
        assert proc.returncode == 0, err
        assert "stopped by Ctrl+C" in err
        text = log.read_text()
        assert text.endswith("\n")  # no half-written row
        rows = list(csv.reader(text.splitlines()))
        assert rows[0] == Reading.columns()
        assert len(rows) >= 3
        assert all(len(r) == len(rows[0]) for r in rows)
        # every reading printed was also logged
        assert len(out.splitlines()) - 1 == len(rows) - 1

    def test_without_portaudio(self, tone_wav, monkeypatch, capsys):
        from monitor import audio
        from monitor.errors import DeviceError

        def missing():
            raise DeviceError(f"{audio.PORTAUDIO_HELP} (PortAudio library not found)")

        monkeypatch.setattr(audio, "_sounddevice", missing)
        assert main(["live", "--no-window", "--duration", "1"]) == 2
        assert "libportaudio2" in capsys.readouterr().err
        # a file still works
        rc = main(["live", "--no-window", "--json-lines", "--file", str(tone_wav),
                   "--speed", "max", "--duration", "1", "--gate", "0.5"])  # fmt: skip
        assert rc == 0
        assert len(capsys.readouterr().out.splitlines()) == 2

    def test_raises(self, tone_wav, capsys):
        assert main(["live", "--json-lines", "--file", str(tone_wav)]) == 2
        assert "--json-lines needs --no-window" in capsys.readouterr().err
        with pytest.raises(SystemExit):
            main(["live", "--no-window", "--speed", "0", "--file", str(tone_wav)])
        assert main(["live", "--no-window", "--file", str(tone_wav) + ".missing"]) == 2
        assert "file not found" in capsys.readouterr().err


@pytest.mark.sound
class TestSoundServer:
    def test_live_capture_reads_the_played_tone(self, pulse_server, tmp_path):  # noqa: F811
        # sox writes the tone (independent generator); paplay plays it into the null sink;
        # `live` captures the sink's monitor through PortAudio's ALSA `pulse` device.
        wav = tmp_path / "tone.wav"
        sox_tone(wav, 6, ["sine", str(TONE_HZ), "vol", "0.5"])
        proc = subprocess.Popen(
            [sys.executable, "-m", "monitor.cli", "live", "--no-window", "--json-lines",
             "--duration", "3", "--device", "pulse", "--rate", "48000", "--gate", "0.5"],
            cwd=ROOT, env={**pulse_server.env, "PYTHONPATH": str(ROOT)},
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        )  # fmt: skip
        player = None
        try:
            first = proc.stderr.readline()  # "live: ..." once the input stream is running
            assert first.startswith("live:"), first + proc.stderr.read()
            player = pulse_server.play(wav)
            out, err = proc.communicate(timeout=60)
        finally:
            if player is not None:
                player.kill()
                player.wait()
            if proc.poll() is None:
                proc.kill()
                proc.wait()
        done = subprocess.CompletedProcess(proc.args, proc.returncode, out, err)
        assert done.returncode == 0, done.stderr
        readings = [json.loads(line) for line in done.stdout.splitlines()]
        assert len(readings) >= 5
        tones = [r for r in readings if r.get("frequency_hz") is not None]
        inner = tones[1:]  # the first may hold the start of the tone
        assert len(inner) >= 3
        for r in inner:
            # within its uncertainty plus 0.5 Hz (the brief's allowance for the sound path)
            assert abs(r["frequency_hz"] - TONE_HZ) <= 3 * r["uncertainty_hz"] + 0.5, r


def test_env_has_no_display_dependency():
    # the headless path never imports Qt
    code = (
        "import sys, monitor.live, monitor.commands.live; "
        "sys.exit(any(m.startswith(('PySide6', 'pyqtgraph')) for m in sys.modules))"
    )
    assert subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=os.environ).returncode == 0
