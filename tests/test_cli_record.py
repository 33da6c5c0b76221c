"""`swingmeter devices` and `swingmeter record` against a real PulseAudio null sink.

The tone comes from sox (an independent generator) and the recordings are read back
with Python's `wave` module; frequencies are estimated with a plain numpy FFT.
"""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time
import wave

import numpy as np
import pytest

from monitor.cli import build_parser, main
from monitor.record import read_sidecar

# The `pulse_server` fixture: a real PulseAudio null sink.
pytest_plugins = ("tests.soundserver",)
pytestmark = pytest.mark.sound

FS = 48000


def wav_mono_24(path):
    """Samples of a mono 24-bit WAV, decoded with Python's wave module."""
    with wave.open(str(path)) as w:
        assert (w.getnchannels(), w.getsampwidth(), w.getframerate()) == (1, 3, FS)
        raw = np.frombuffer(w.readframes(w.getnframes()), dtype=np.uint8).reshape(-1, 3)
    ints = (raw[:, 0].astype(np.int32) | (raw[:, 1].astype(np.int32) << 8)) | (
        raw[:, 2].astype(np.int32) << 16
    )
    return np.where(ints >= 1 << 23, ints - (1 << 24), ints) / float(1 << 23)


class TestDevices:
    def test_json_lists_pulse(self, pulse_server, capsys):
        assert main(["devices", "--json"]) == 0
        devices = json.loads(capsys.readouterr().out)
        names = [d["name"] for d in devices]
        assert "pulse" in names
        assert {"index", "name", "hostapi", "max_input_channels", "default_fs_hz"} <= set(
            devices[0]
        )

    def test_table(self, pulse_server):
        # A fresh process, as a user runs it: PortAudio initialised with the server's env.
        done = subprocess.run(
            [sys.executable, "-m", "monitor.cli", "devices"],
            env=pulse_server.env,
            capture_output=True,
            text=True,
            timeout=60,
        )
        assert done.returncode == 0, done.stderr
        assert "pulse" in done.stdout and "ALSA" in done.stdout


class TestMetaFromArgs:
    def test_fields(self):
        from monitor import profiles
        from monitor.commands.record import meta_from_args

        parser = build_parser()
        args = parser.parse_args(
            ["record", "--mode", "iq", "--channel", "2", "--dial", "145.5M", "--harmonic",
             "3", "--sideband", "lower", "--rate", "96k", "--duration", "5", "x.wav"]
        )  # fmt: skip
        meta = meta_from_args(args)
        assert (meta.mode, meta.fs_hz, meta.channels) == ("iq", 96000.0, 4)
        assert (meta.dial_hz, meta.center_hz, meta.harmonic) == (145.5e6, 145.5e6, 3)
        assert (meta.sideband, meta.clock_ppm, meta.profile) == ("lower", 0.0, None)
        profiles.update("bench-a", clock_ppm=4.25)  # in the tests' private config dir
        args = parser.parse_args(["record", "--profile", "bench-a", "--duration", "1", "x.wav"])
        meta = meta_from_args(args)
        assert (meta.clock_ppm, meta.profile, meta.dial_hz) == (4.25, "bench-a", None)

    def test_raises(self, capsys):
        assert main(["record", "--profile", "nobody", "--duration", "1", "x.wav"]) == 2
        assert "no bench profile named 'nobody'" in capsys.readouterr().err
        for bad, message in (
            (["--harmonic", "0"], "harmonic must be 1 or more"),
            (["--channel", "-1"], "channel must be 0 or more"),
            (["--rate=-48k"], "frequency must be positive"),
            (["--clock-ppm", "1", "--profile", "a"], "not allowed with argument"),
        ):
            with pytest.raises(SystemExit):
                main(["record", "--duration", "1", *bad, "x.wav"])
            assert message in capsys.readouterr().err


class TestRecord:
    def test_help(self):
        sub = next(a for a in build_parser()._actions if a.dest == "command")
        text = sub.choices["record"].format_help()
        assert "swingmeter record --mode beat --dial" in text
        assert "clip" in text  # line-in levels should not clip
        assert "(default: 48000)" in text

    def test_tone(self, pulse_server, tmp_path, capsys):
        # Imported here, not at the top: tests.soundserver must first load as a plugin.
        from tests.soundserver import fft_peak_hz, sox_tone, steady_part

        wav = tmp_path / "tone.wav"
        # sox: 987.6 Hz at amplitude 0.3, long enough to cover the server's start-up.
        sox_tone(wav, 7, ["sine", "987.6", "vol", "0.3"])
        player = pulse_server.play(wav)
        try:
            time.sleep(0.3)
            out = tmp_path / "take1.wav"
            args = ["record", "--device", "pulse", "--rate", "48k", "--duration", "2"]
            args += ["--mode", "beat", "--dial", "7.0301M", "--sideband", "lower"]
            args += ["--harmonic", "2", "--clock-ppm", "-3.5", str(out)]
            assert main(args) == 0
        finally:
            player.terminate()
            player.wait(timeout=10)
        err = capsys.readouterr().err
        assert "overflows: 0, dropped blocks: 0" in err
        assert f"wrote {out}: 2.00 s, 96000 frames, WAV PCM_24" in err
        x = wav_mono_24(out)  # reference reader: Python's wave
        assert len(x) == 2 * FS
        part = steady_part(x, FS)
        assert len(part) > FS
        # Reference: sox's 987.6 Hz, 0.1 Hz; amplitude 0.3 within 1 dB.
        assert fft_peak_hz(part, FS) == pytest.approx(987.6, abs=0.1)
        assert abs(20 * np.log10(np.sqrt(2 * np.mean(part**2)) / 0.3)) < 1.0
        side = read_sidecar(out)
        assert (side["mode"], side["fs_hz"], side["channels"], side["device"]) == (
            "beat",
            48000.0,
            1,
            "pulse",
        )
        assert (side["dial_hz"], side["sideband"], side["harmonic"]) == (7.0301e6, "lower", 2)
        assert side["clock_ppm"] == -3.5 and side["complete"] is True
        assert side["capture"]["dropped_blocks"] == 0

    def test_iq_sigmf(self, pulse_server, tmp_path, capsys):
        from sigmf import sigmffile

        out = tmp_path / "iq"
        args = ["record", "--device", "pulse", "--mode", "iq", "--dial", "433.92M"]
        assert main([*args, "--duration", "1", "--sigmf", str(out)]) == 0
        assert "SigMF cf32_le" in capsys.readouterr().err
        # Reference reader: the sigmf package.
        rec = sigmffile.fromfile(str(tmp_path / "iq.sigmf-meta"))
        assert rec.get_global_field("core:sample_rate") == FS
        assert rec.get_captures()[0]["core:frequency"] == 433.92e6
        samples = rec.read_samples()
        assert samples.dtype.kind == "c" and len(samples) == FS
        assert read_sidecar(tmp_path / "iq.sigmf-data")["mode"] == "iq"

    @pytest.mark.skipif(sys.platform == "win32", reason="SIGINT to a child is POSIX here")
    def test_ctrl_c(self, pulse_server, tmp_path):
        out = tmp_path / "long.wav"
        child = subprocess.Popen(
            [sys.executable, "-m", "monitor.cli", "record", "--device", "pulse",
             "--duration", "60", str(out)],
            env=pulse_server.env, stderr=subprocess.PIPE, text=True,
        )  # fmt: skip
        try:
            deadline = time.monotonic() + 30
            # Wait for half a second of samples in the file (24-bit mono: 3 bytes/frame).
            while not out.exists() or out.stat().st_size < 44 + 3 * FS // 2:
                assert child.poll() is None, child.stderr.read()
                assert time.monotonic() < deadline
                time.sleep(0.05)
            child.send_signal(signal.SIGINT)
            err = child.communicate(timeout=30)[1]
        finally:
            if child.poll() is None:
                child.kill()
        assert child.returncode == 130, err
        assert "stopped by Ctrl+C" in err and "overflows: 0" in err
        x = wav_mono_24(out)
        assert FS // 2 <= len(x) < 30 * FS
        side = read_sidecar(out)
        assert side["complete"] is True and side["stopped_by"] == "Ctrl+C"
        assert side["frames"] == len(x)

    def test_raises(self, pulse_server, tmp_path, capsys):
        # Errors a user can cause: one line, exit code 2, the file is not left behind.
        assert main(["record", "--duration", "1", str(tmp_path / "no" / "x.wav")]) == 2
        assert "cannot create" in capsys.readouterr().err
        (tmp_path / "adir.wav").mkdir()
        adir = tmp_path / "adir.wav"
        assert main(["record", "--device", "pulse", "--duration", "1", str(adir)]) == 2
        err = capsys.readouterr().err
        assert err == f"swingmeter: error: cannot create {adir}: it is a directory\n"
        x = str(tmp_path / "x.wav")
        assert main(["record", "--device", "no-such-card", "--duration", "1", x]) == 2
        assert "no input device matches 'no-such-card'" in capsys.readouterr().err
        assert main(["record", "--duration", "1", "--sigmf", str(tmp_path / "s.wav")]) == 2
        assert "--sigmf needs --mode iq" in capsys.readouterr().err
        with pytest.raises(SystemExit):
            main(["record", "--duration", "-1", x])
        assert "duration must be positive" in capsys.readouterr().err
        assert not (tmp_path / "s.wav").exists() and not (tmp_path / "x.wav").exists()
