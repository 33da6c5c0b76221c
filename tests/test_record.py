"""The crash-safe recorder: files read back by readers that are not ours.

Readers used as references: Python's `wave` module (PCM WAV), soundfile/libsndfile and
the `sigmf` package. The recorder is killed with SIGKILL in a child process and starved
of file space with RLIMIT_FSIZE, and the files are read back.
"""

from __future__ import annotations

import datetime as dt
import json
import signal
import subprocess
import sys
import textwrap
import time
import wave
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from monitor.blocks import Block, StreamMeta
from monitor.errors import InputError
from monitor.record import (
    WAV_LIMIT_BYTES,
    Recorder,
    RecordingSummary,
    choose_container,
    default_subtype,
    meta_from_sidecar,
    read_sidecar,
    sidecar_path,
)

FS = 48000
LSB24 = 2.0**-23  # one step of 24-bit PCM on a +/-1 full scale


def tone(start, n, mode="audio"):
    """A deterministic test signal, sample-exact from any start index."""
    t = (start + np.arange(n)) / FS
    if mode == "iq":
        return 0.5 * np.exp(2j * np.pi * 1000.5 * t)
    return 0.5 * np.sin(2 * np.pi * 1000.5 * t)


def wave_samples(path):
    """Decode a 24-bit PCM WAV with Python's wave module (an independent reader)."""
    with wave.open(str(path)) as w:
        assert w.getsampwidth() == 3 and w.getframerate() == FS
        raw = np.frombuffer(w.readframes(w.getnframes()), dtype=np.uint8).reshape(-1, 3)
    ints = raw[:, 0].astype(np.int32) | (raw[:, 1].astype(np.int32) << 8)
    ints |= raw[:, 2].astype(np.int32) << 16
    ints = np.where(ints >= 1 << 23, ints - (1 << 24), ints)
    return ints / float(1 << 23)


def blocks_of(meta, total, n=4800, skip=()):
    for k, start in enumerate(range(0, total, n)):
        if k in skip:
            continue
        yield Block(tone(start, min(n, total - start), meta.mode), start, meta)


META = StreamMeta(
    source="bench synth", fs_hz=FS, dial_hz=7.04e6, harmonic=3, clock_ppm=-12.5, profile="b1"
)


class TestDefaultSubtype:
    def test_modes(self):
        assert default_subtype("audio") == "PCM_24"
        assert default_subtype("beat") == "PCM_24"
        assert default_subtype("iq") == "FLOAT"

    def test_raises(self):
        with pytest.raises(ValueError, match="mode='fm' must be one of"):
            default_subtype("fm")


class TestChooseContainer:
    def test_limit(self):
        # RIFF/WAV chunk sizes are 32-bit unsigned, so a WAV holds < 4 GiB of data
        # (Microsoft RIFF specification; EBU Tech 3306 for RF64) [memory].
        # 48 kHz mono PCM_24 = 144000 B/s: 8 h = 4.15e9 B fits, 9 h = 4.67e9 B does not.
        assert choose_container(8 * 3600, FS, 1, "PCM_24") == "WAV"
        assert choose_container(9 * 3600, FS, 1, "PCM_24") == "RF64"
        # 48 kHz stereo FLOAT = 384000 B/s: 3 h = 4.15e9 B fits, 3.2 h does not.
        assert choose_container(3 * 3600, FS, 2, "FLOAT") == "WAV"
        assert choose_container(3.2 * 3600, FS, 2, "FLOAT") == "RF64"
        assert choose_container(None, FS, 1, "PCM_24") == "RF64"
        assert WAV_LIMIT_BYTES < 2**32

    def test_raises(self):
        with pytest.raises(ValueError, match="subtype='MP3' must be one of"):
            choose_container(1.0, FS, 1, "MP3")


class TestSidecarPath:
    def test_names(self):
        assert sidecar_path("a/bench.wav") == Path("a/bench.wav.swingmeter.json")
        assert sidecar_path("bench.wav.swingmeter.json") == Path("bench.wav.swingmeter.json")


class TestRecorder:
    def test_wav_roundtrip(self, tmp_path):
        out = tmp_path / "osc.wav"
        with Recorder(out, META, duration_s=1.0) as rec:
            for block in blocks_of(META, FS, skip={3}):
                rec.write(block)
        summary = rec.close()
        assert isinstance(summary, RecordingSummary)
        assert summary.container == "WAV" and summary.subtype == "PCM_24"
        assert summary.frames == FS - 4800 and summary.gaps == 1 and summary.lost_frames == 4800
        # Reference readers: Python's wave and libsndfile agree with what was written,
        # to within the rounding of 24-bit PCM (half a step; 1 step allowed).
        expected = np.concatenate([b.samples for b in blocks_of(META, FS, skip={3})])
        np.testing.assert_allclose(wave_samples(out), expected, atol=LSB24)
        data, fs = sf.read(out)
        assert fs == FS
        np.testing.assert_allclose(data, expected, atol=LSB24)
        side = read_sidecar(out)
        assert side["mode"] == "audio" and side["fs_hz"] == FS and side["channels"] == 1
        assert side["device"] == "bench synth" and side["dial_hz"] == 7.04e6
        assert side["harmonic"] == 3 and side["clock_ppm"] == -12.5 and side["profile"] == "b1"
        assert side["sideband"] == "upper" and side["complete"] is True
        assert side["frames"] == FS - 4800
        assert side["gaps"] == [{"frame": 3 * 4800, "lost_frames": 4800}]
        start = dt.datetime.fromisoformat(side["start_utc"].replace("Z", "+00:00"))
        assert start.utcoffset() == dt.timedelta(0)
        assert abs(dt.datetime.now(dt.timezone.utc) - start) < dt.timedelta(minutes=1)

    def test_clips_pcm(self, tmp_path):
        # Out-of-range floats are clipped, not wrapped round to the opposite sign.
        out = tmp_path / "hot.wav"
        with Recorder(out, META, duration_s=1) as rec:
            rec.write(Block(np.array([1.5, -1.5, 0.25]), 0, META))
        x = wave_samples(out)
        assert x[0] > 0.999 and x[1] <= -0.999 and x[2] == pytest.approx(0.25, abs=LSB24)

    def test_iq_float(self, tmp_path):
        meta = META.with_(mode="iq", channels=2, center_hz=144.3e6)
        out = tmp_path / "iq.wav"
        with Recorder(out, meta, duration_s=0.5) as rec:
            for block in blocks_of(meta, FS // 2):
                rec.write(block)
        info = sf.info(out)
        assert (info.format, info.subtype, info.channels) == ("WAV", "FLOAT", 2)
        data, _ = sf.read(out)
        z = tone(0, FS // 2, "iq")
        np.testing.assert_allclose(data[:, 0] + 1j * data[:, 1], z, atol=1e-7)  # float32
        assert read_sidecar(out)["channels"] == 2

    def test_unknown_duration_is_rf64_downgraded(self, tmp_path):
        out = tmp_path / "open.wav"
        with Recorder(out, META) as rec:
            for block in blocks_of(META, FS // 4):
                rec.write(block)
        assert rec.container == "RF64"
        # An expected 10 h of 48 kHz stereo FLOAT (13.8 GB) is RF64 from the start.
        meta = META.with_(mode="iq", channels=2)
        with Recorder(tmp_path / "long.wav", meta, duration_s=10 * 3600) as long_rec:
            long_rec.write(Block(tone(0, 480, "iq"), 0, meta))
        assert long_rec.container == "RF64"
        assert sf.info(tmp_path / "long.wav").frames == 480
        # libsndfile's auto-downgrade leaves a RIFF/WAVE file while it is under 4 GiB.
        assert out.read_bytes()[:4] == b"RIFF"
        data, _ = sf.read(out)
        np.testing.assert_allclose(data, tone(0, FS // 4), atol=LSB24)

    def test_sigmf(self, tmp_path):
        from sigmf import sigmffile

        meta = META.with_(mode="iq", channels=2, center_hz=433.92e6)
        with Recorder(tmp_path / "cap.wav", meta, sigmf=True) as rec:
            for block in blocks_of(meta, 9600):
                rec.write(block)
        assert rec.path == tmp_path / "cap.sigmf-data"
        # Reference reader: the sigmf package.
        rec_meta = sigmffile.fromfile(str(tmp_path / "cap.sigmf-meta"))
        assert rec_meta.get_global_field("core:sample_rate") == FS
        assert rec_meta.get_global_field("core:datatype") == "cf32_le"
        capture = rec_meta.get_captures()[0]
        assert capture["core:frequency"] == 433.92e6
        assert capture["core:datetime"].endswith("Z")
        np.testing.assert_allclose(rec_meta.read_samples(), tone(0, 9600, "iq"), atol=1e-7)
        assert read_sidecar(tmp_path / "cap.sigmf-data")["container"] == "SigMF"

    def test_raises(self, tmp_path):
        with pytest.raises(InputError, match=r"directory .* not found"):
            Recorder(tmp_path / "missing" / "x.wav", META)
        (tmp_path / "adir.wav").mkdir()
        with pytest.raises(InputError, match=r"cannot create .*adir\.wav: it is a directory"):
            Recorder(tmp_path / "adir.wav", META)
        (tmp_path / "plain").write_text("x")
        with pytest.raises(InputError, match="not found"):
            Recorder(tmp_path / "plain" / "x.wav", META)
        with pytest.raises(ValueError, match="sigmf=True needs mode 'iq'"):
            Recorder(tmp_path / "a.wav", META, sigmf=True)
        with pytest.raises(ValueError, match="subtype='MP3' must be one of"):
            Recorder(tmp_path / "b.wav", META, subtype="MP3")
        with pytest.raises(TypeError, match="meta must be a StreamMeta"):
            Recorder(tmp_path / "c.wav", {"fs_hz": FS})
        rec = Recorder(tmp_path / "d.wav", META)
        with pytest.raises(ValueError, match="does not match the recording"):
            rec.write(Block(np.zeros(10), 0, META.with_(fs_hz=44100)))
        rec.write(Block(np.zeros(10), 100, META))
        with pytest.raises(ValueError, match=r"block.start=50 is before"):
            rec.write(Block(np.zeros(10), 50, META))
        with pytest.raises(TypeError, match="audio blocks must hold real samples"):
            rec.write(Block(np.zeros(10, complex), 110, META))
        rec.close()
        with pytest.raises(ValueError, match="is closed"):
            rec.write(Block(np.zeros(10), 110, META))


# A child that records a synthetic stream and reports, after each block, how many frames
# it has handed to the writer (one pwrite of a fixed-width number: atomic under SIGKILL).
CHILD = textwrap.dedent(
    """
    import os, sys, time
    import numpy as np
    import monitor.record as record
    from monitor.blocks import Block, StreamMeta
    out, progress, mode, duration, fallback = sys.argv[1:6]
    if fallback == "1":
        record._USE_LIBSNDFILE_AUTO_HEADER = False
    fs = 48000
    meta = StreamMeta(source="synth", fs_hz=fs, mode=mode, channels=2 if mode == "iq" else 1)
    fd = os.open(progress, os.O_WRONLY | os.O_CREAT | os.O_TRUNC)
    rec = record.Recorder(out, meta, duration_s=None if duration == "none" else float(duration))
    start = 0
    while True:
        t = (start + np.arange(480)) / fs
        w = 2 * np.pi * 1000.5 * t
        x = 0.5 * (np.exp(1j * w) if mode == "iq" else np.sin(w))
        rec.write(Block(x, start, meta))
        start += 480
        os.pwrite(fd, b"%012d" % start, 0)
        time.sleep(0.002)
    """
)


def _read_progress(path):
    text = Path(path).read_bytes()
    return int(text) if text else 0


class TestRecorderKilled:
    @pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL is POSIX")
    @pytest.mark.parametrize(
        ("mode", "duration", "fallback", "container", "subtype"),
        [
            ("audio", "600", "0", "WAV", "PCM_24"),
            ("iq", "600", "0", "WAV", "FLOAT"),
            ("audio", "none", "0", "WAVEX", "PCM_24"),  # RF64, auto-downgraded
            ("audio", "600", "1", "WAV", "PCM_24"),  # our own header patching
        ],
    )
    def test_sigkill(self, tmp_path, mode, duration, fallback, container, subtype):
        out, progress = tmp_path / "killed.wav", tmp_path / "progress"
        child = subprocess.Popen(
            [sys.executable, "-c", CHILD, str(out), str(progress), mode, duration, fallback]
        )
        try:
            deadline = time.monotonic() + 30
            while not progress.exists() or _read_progress(progress) < 6 * FS:
                assert child.poll() is None, "recorder child died"
                assert time.monotonic() < deadline, "recorder child too slow"
                time.sleep(0.01)
            child.send_signal(signal.SIGKILL)
        finally:
            child.wait(timeout=30)
        assert child.returncode == -signal.SIGKILL
        handed = _read_progress(progress)
        info = sf.info(out)  # reference reader: libsndfile
        assert (info.format, info.subtype) == (container, subtype)
        # At least 99% of the frames handed to the writer are in the file, and no more
        # than the one block that may have been handed just before the kill.
        assert 0.99 * handed <= info.frames <= handed + 480
        data, _ = sf.read(out, always_2d=True)
        if mode == "iq":
            np.testing.assert_allclose(
                data[:, 0] + 1j * data[:, 1], tone(0, info.frames, "iq"), atol=1e-7
            )
        else:
            np.testing.assert_allclose(data[:, 0], tone(0, info.frames), atol=LSB24)
        if subtype.startswith("PCM") and container == "WAV":
            # Reference reader: Python's wave, which trusts the header sizes alone.
            x = wave_samples(out)
            assert len(x) == info.frames
        side = read_sidecar(out)  # written when the first block came; still valid
        assert side["complete"] is False and side["mode"] == mode


class TestRecorderDiskFull:
    @pytest.mark.skipif(sys.platform == "win32", reason="RLIMIT_FSIZE is POSIX")
    def test_raises(self, tmp_path):
        # A file-size limit makes write(2) fail with EFBIG, as a full disk fails with
        # ENOSPC: the recorder reports it in one line and the file keeps what it had.
        code = textwrap.dedent(
            """
            import resource, signal, sys
            import numpy as np
            from monitor.blocks import Block, StreamMeta
            from monitor.errors import InputError
            from monitor.record import Recorder
            signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
            resource.setrlimit(resource.RLIMIT_FSIZE, (300_000, 300_000))
            meta = StreamMeta(source="synth", fs_hz=48000)
            rec = Recorder(sys.argv[1], meta, duration_s=60)
            start = 0
            try:
                while start < 48000 * 60:
                    t = (start + np.arange(4800)) / 48000
                    rec.write(Block(0.5 * np.sin(2 * np.pi * 1000.5 * t), start, meta))
                    start += 4800
                rec.close()
            except InputError as exc:
                print(rec.frames_written)
                print(exc)
            """
        )
        out = tmp_path / "full.wav"
        done = subprocess.run(
            [sys.executable, "-c", code, str(out)], capture_output=True, text=True, timeout=60
        )
        assert done.returncode == 0, done.stderr
        written, message = done.stdout.strip().split("\n", 1)
        assert message.startswith(f"cannot write {out}")
        assert "the file holds the" in message
        held = wave_samples(out)  # Python's wave still opens it: the header is right
        assert int(written) <= len(held) <= 300_000 // 3
        assert len(held) > 0.9 * (300_000 // 3)
        np.testing.assert_allclose(held, tone(0, len(held)), atol=LSB24)


class TestReadSidecar:
    def test_roundtrip(self, tmp_path):
        out = tmp_path / "r.wav"
        with Recorder(out, META) as rec:
            rec.write(Block(tone(0, 100), 0, META))
        data = read_sidecar(out)
        assert read_sidecar(sidecar_path(out)) == data
        meta = meta_from_sidecar(data, source=str(out), frames=100)
        assert (meta.fs_hz, meta.mode, meta.dial_hz, meta.harmonic) == (FS, "audio", 7.04e6, 3)
        assert (meta.clock_ppm, meta.profile, meta.frames) == (-12.5, "b1", 100)
        assert read_sidecar(tmp_path / "none.wav", missing_ok=True) == {}

    def test_raises(self, tmp_path):
        out = tmp_path / "r.wav"
        with pytest.raises(InputError, match=r"r\.wav\.swingmeter\.json: no metadata sidecar"):
            read_sidecar(out)
        side = sidecar_path(out)
        side.write_text('{"format": "swingmeter-recording", "mode": "audio", ')
        with pytest.raises(InputError, match=r"r\.wav\.swingmeter\.json: corrupt metadata"):
            read_sidecar(out)
        side.write_bytes(b"\xff\xfe\x00")
        with pytest.raises(InputError, match=r"swingmeter\.json: cannot read metadata"):
            read_sidecar(out)
        side.write_text(json.dumps([1, 2]))
        with pytest.raises(InputError, match="not a swingmeter metadata sidecar"):
            read_sidecar(out)
        fields = {
            "format": "swingmeter-recording",
            "mode": "audio",
            "fs_hz": "48k",
            "channels": 1,
            "harmonic": 1,
            "clock_ppm": 0,
            "sideband": "upper",
        }
        side.write_text(json.dumps(fields))
        with pytest.raises(InputError, match=r"corrupt metadata sidecar \(fs_hz='48k'\)"):
            read_sidecar(out)
        side.write_text(json.dumps({**fields, "fs_hz": 48000, "mode": "fm"}))
        with pytest.raises(InputError, match="mode='fm'"):
            read_sidecar(out)
