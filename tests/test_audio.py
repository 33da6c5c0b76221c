"""Sound-card input through a real PulseAudio null sink, with tones made by sox.

The reference signals come from sox (an independent generator); frequencies and levels
are estimated here with a plain zero-padded numpy FFT, not with swingmeter's estimators.
"""

from __future__ import annotations

import itertools
import os
import subprocess
import sys
import threading
import time
import types

import numpy as np
import pytest

from monitor.audio import (
    PORTAUDIO_HELP,
    CaptureStats,
    InputDevice,
    SoundCardSource,
    list_input_devices,
    resolve_device,
)
from monitor.blocks import StreamMeta
from monitor.errors import DeviceError

# The `pulse_server` fixture: a real PulseAudio null sink.
pytest_plugins = ("tests.soundserver",)
pytestmark = pytest.mark.sound

FS = 48000


def capture_while_playing(server, wav, source):
    """Capture from `source`; start playing `wav` once the first block has arrived."""
    blocks, player = [], None
    try:
        for block in source:
            if player is None:
                player = server.play(wav)
            blocks.append(block)
    finally:
        if player is not None:
            player.wait(timeout=20)
    return blocks


class TestSoundServerFixture:
    def test_raises(self, monkeypatch):
        # Without the tools the server does not start; in CI on Linux that is a failure.
        from tests import soundserver

        monkeypatch.setenv("PATH", "")
        with pytest.raises(RuntimeError, match="pulseaudio not found"):
            soundserver.start_pulse_server()
        monkeypatch.setenv("CI", "true")
        if sys.platform.startswith("linux"):
            with pytest.raises(pytest.fail.Exception, match="unavailable in CI"):
                soundserver._unavailable("test")
        monkeypatch.setenv("CI", "false")
        with pytest.raises(pytest.skip.Exception, match="sound server unavailable: test"):
            soundserver._unavailable("test")


class TestPortAudioMissing:
    @pytest.mark.skipif(not sys.platform.startswith("linux"), reason="wheels bundle PortAudio")
    def test_raises(self):
        # Make sounddevice's own library search fail, as on a machine without libportaudio2.
        code = (
            "import ctypes.util\n"
            "ctypes.util.find_library = lambda name: None\n"
            "from monitor.audio import list_input_devices\n"
            "from monitor.errors import DeviceError\n"
            "try:\n"
            "    list_input_devices()\n"
            "except DeviceError as exc:\n"
            "    print(exc)\n"
        )
        done = subprocess.run(
            [sys.executable, "-c", code], capture_output=True, text=True, timeout=60
        )
        assert "sudo apt-get install libportaudio2" in done.stdout
        assert "PortAudio library not found" in done.stdout
        assert PORTAUDIO_HELP in done.stdout


class TestListInputDevices:
    def test_pulse_listed(self, pulse_server):
        devices = list_input_devices()
        assert all(isinstance(d, InputDevice) for d in devices)
        pulse = [d for d in devices if d.name == "pulse"]
        assert len(pulse) == 1
        assert pulse[0].hostapi == "ALSA"
        assert pulse[0].max_input_channels >= 2
        # test-bench.md: ALSA's pulse device reports 44100 Hz, hence the explicit rate.
        assert pulse[0].default_fs_hz > 0
        assert sum(d.is_default for d in devices) <= 1


class TestResolveDevice:
    def test_name_and_index(self, pulse_server):
        index = resolve_device("pulse")
        assert [d.name for d in list_input_devices() if d.index == index] == ["pulse"]
        assert resolve_device(index) == index
        assert resolve_device(str(index)) == index
        assert resolve_device("PULS") == index  # case-insensitive substring
        assert isinstance(resolve_device(None), int)

    def test_raises(self, pulse_server):
        with pytest.raises(DeviceError, match=r"no input device matches 'no-such-card'.*pulse"):
            resolve_device("no-such-card")
        # "e" is in both "pulse" and "default": ambiguous, and the message lists them.
        with pytest.raises(DeviceError, match=r"ambiguous.*pulse.*default|ambiguous.*default"):
            resolve_device("e")
        with pytest.raises(DeviceError, match="no input device with index 9999"):
            resolve_device(9999)
        with pytest.raises(TypeError, match="device must be"):
            resolve_device(1.5)


class TestSoundCardSource:
    def test_tone_frequency_and_level(self, pulse_server, tmp_path):
        # Imported here, not at the top: tests.soundserver must first load as a plugin.
        from tests.soundserver import fft_peak_hz, sox_tone, steady_part

        wav = tmp_path / "tone.wav"
        # sox: a 1234.5 Hz sine at amplitude 0.5 (vol 0.5), i.e. -6.02 dB below full scale.
        sox_tone(wav, 2.5, ["sine", "1234.5", "vol", "0.5"])
        meta = StreamMeta(source="", fs_hz=FS, dial_hz=7.1e6, harmonic=2)
        source = SoundCardSource("pulse", FS, "audio", meta=meta, block_frames=2048, duration_s=3.5)
        blocks = capture_while_playing(pulse_server, wav, source)
        # Consecutive start indices, exactly duration * rate frames, float64 samples.
        starts = [b.start for b in blocks]
        assert starts[0] == 0
        assert all(b.start == a.start + len(a) for a, b in itertools.pairwise(blocks))
        assert sum(len(b) for b in blocks) == round(3.5 * FS)
        assert all(b.samples.dtype == np.float64 for b in blocks)
        assert not any(b.overflow for b in blocks)
        assert blocks[0].meta.fs_hz == FS and blocks[0].meta.source == "pulse"
        assert blocks[0].meta.dial_hz == 7.1e6 and blocks[0].meta.harmonic == 2
        x = steady_part(np.concatenate([b.samples for b in blocks]), FS)
        assert len(x) > 1.5 * FS
        # Reference: sox's 1234.5 Hz; tolerance 0.1 Hz (a sound server at the sink rate
        # does not resample, so the only error is the estimator's).
        assert fft_peak_hz(x, FS) == pytest.approx(1234.5, abs=0.1)
        # Reference: sox amplitude 0.5; peak amplitude = sqrt(2) * RMS; tolerance 1 dB.
        level_db = 20 * np.log10(np.sqrt(2 * np.mean(x**2)) / 0.5)
        assert abs(level_db) < 1.0
        stats = source.stats
        assert isinstance(stats, CaptureStats)
        assert stats.frames_delivered == round(3.5 * FS)
        assert stats.dropped_blocks == 0 and stats.overflows == 0

    def test_iq_channels(self, pulse_server, tmp_path):
        from tests.soundserver import fft_peak_hz, sox_tone, steady_part

        wav = tmp_path / "iq.wav"
        # sox: left sin(wt), right sin(wt + 90 deg) = cos(wt) (phase 25 % of a cycle).
        # I + jQ = sin + j cos = j exp(-jwt): the tone sits at -1500 Hz; swapped at +1500.
        spec = ["sine", "1500", "0", "0", "sine", "1500", "0", "25", "vol", "0.4"]
        sox_tone(wav, 2, spec)
        source = SoundCardSource("pulse", FS, "iq", block_frames=4096, duration_s=3.0)
        blocks = capture_while_playing(pulse_server, wav, source)
        assert blocks[0].meta.mode == "iq" and blocks[0].meta.channels == 2
        z = steady_part(np.concatenate([b.samples for b in blocks]), FS)
        assert z.dtype == np.complex128 and len(z) > FS
        # Reference: sox's 1500 Hz with the stated phases; sign from the channel order.
        assert fft_peak_hz(z, FS) == pytest.approx(-1500.0, abs=0.1)
        assert fft_peak_hz(np.conj(z), FS) == pytest.approx(1500.0, abs=0.1)  # = swap_iq
        # Single-sideband: the image at +1500 Hz is far below the tone (balanced channels).
        spec_mag = np.abs(np.fft.fft(z[:FS] * np.hanning(FS)))
        image = spec_mag[1500] / spec_mag[FS - 1500]
        assert image < 0.01

    def test_swap_iq(self):
        # The callback's copy and the channel mapping, fed a known buffer (no device).
        source = SoundCardSource(None, FS, "iq", channel=1, swap_iq=True)
        buf = np.array([[9.0, 1.0, 2.0], [9.0, 3.0, 4.0]], dtype=np.float32)
        z = source._to_samples(buf)
        np.testing.assert_array_equal(z, [2.0 + 1.0j, 4.0 + 3.0j])
        assert source.open_channels == 3

    def test_slow_consumer(self, pulse_server):
        source = SoundCardSource("pulse", FS, block_frames=1024, queue_blocks=4, duration_s=2.0)
        blocks = []
        peak_seen = 0
        for block in source:
            blocks.append(block)
            peak_seen = max(peak_seen, source._queue.qsize())
            time.sleep(0.08)  # much slower than the ~21 ms buffers arrive
        stats = source.stats
        assert stats.dropped_blocks > 0 and stats.dropped_frames > 0
        # Memory stays bounded: the queue never held more than its bound.
        assert stats.queue_peak_blocks <= 4 and peak_seen <= 4 and source._queue.maxsize == 4
        # Every gap is a drop the next block admits to, and starts account for the drops.
        gaps = 0
        for a, b in itertools.pairwise(blocks):
            assert b.start >= a.start + len(a)
            if b.start > a.start + len(a):
                assert b.overflow
                gaps += b.start - (a.start + len(a))
        assert gaps + blocks[0].start <= stats.dropped_frames
        assert stats.frames_delivered == sum(len(b) for b in blocks)
        assert blocks[-1].start + len(blocks[-1]) <= 2 * FS  # later buffers may be dropped

    def test_overflow_counting(self):
        # Device overflows arrive as status flags; fed here through the callback itself.
        import sounddevice as sd

        source = SoundCardSource(None, FS, block_frames=256)
        buf = np.zeros((256, 1), dtype=np.float32)
        ok, lost = sd.CallbackFlags(), sd.CallbackFlags(2)  # 2 = paInputOverflow
        assert lost.input_overflow
        source._callback(buf, 256, types.SimpleNamespace(inputBufferAdcTime=1.0), ok)
        # The next buffer's time stamp is 512 frames late: the device lost 512 frames.
        t = 1.0 + (256 + 512) / FS
        source._callback(buf, 256, types.SimpleNamespace(inputBufferAdcTime=t), lost)
        first, second = source._queue.get_nowait(), source._queue.get_nowait()
        assert first[1:] == (0, False)
        assert second[1:] == (256 + 512, True)
        assert source.stats.overflows == 1 and source.stats.lost_frames == 512

    def test_stop_from_another_thread(self, pulse_server):
        with SoundCardSource("pulse", FS, block_frames=1024) as source:
            n = 0
            for _block in source:
                n += 1
                if n == 1:
                    threading.Timer(0.3, source.stop).start()
        assert source.stats.frames_delivered > 0

    def test_device_gone(self, pulse_server):
        # Run in a child process: once the sound server is killed under an open stream,
        # PortAudio (ALSA's pulse plugin) may block for good in stop or terminate, which
        # must not take this test process's PortAudio down with it. The child reports and
        # leaves with os._exit, skipping PortAudio's own exit handler.
        code = (
            "import os, signal, sys\n"
            "from monitor.audio import SoundCardSource\n"
            "from monitor.errors import DeviceError\n"
            f"src = SoundCardSource('pulse', {FS}, block_frames=1024, stall_timeout_s=1.0)\n"
            "try:\n"
            "    for block in src:\n"
            "        if block.start == 0:\n"
            f"            os.kill({pulse_server.pid}, signal.SIGKILL)\n"
            "except DeviceError as exc:\n"
            "    print('DeviceError:', exc, flush=True)\n"
            "os._exit(0)\n"
        )
        env = {**os.environ, **pulse_server.env}
        r = subprocess.run(
            [sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=60
        )
        assert "DeviceError:" in r.stdout, r.stdout + r.stderr
        assert "stopped delivering samples" in r.stdout

    def test_raises(self, pulse_server):
        with pytest.raises(ValueError, match="mode='fm' must be one of"):
            SoundCardSource(None, FS, "fm")
        with pytest.raises(ValueError, match="fs_hz=0 must be"):
            SoundCardSource(None, 0)
        with pytest.raises(ValueError, match="channel=-1 must be"):
            SoundCardSource(None, FS, channel=-1)
        with pytest.raises(ValueError, match="queue_blocks=0 must be"):
            SoundCardSource(None, FS, queue_blocks=0)
        with pytest.raises(DeviceError, match=r"input channel.*needs 41"):
            SoundCardSource("pulse", FS, channel=40).open()
        with pytest.raises(DeviceError, match="no input device matches"):
            SoundCardSource("no-such-card", FS).open()
