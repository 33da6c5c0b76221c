"""Recording readers: every WAV variant, SigMF, bounded memory, and unusable input."""

from __future__ import annotations

import struct

import numpy as np
import pytest
import soundfile as sf

from monitor.errors import InputError
from monitor.sources import ArraySource, SigMFSource, SoundFileSource, open_source


def read_all(src) -> np.ndarray:
    with src:
        return np.concatenate([b.samples for b in src])


def reference_signal(n=4000, fs=8000.0):
    t = np.arange(n) / fs
    return 0.5 * np.sin(2 * np.pi * 440 * t) + 0.2 * np.sin(2 * np.pi * 1234.5 * t)


# libsndfile variants: (format, subtype, quantisation step for the comparison)
SOUNDFILE_VARIANTS = [
    ("WAV", "PCM_U8", 2 / 256),
    ("WAV", "PCM_16", 2 / 65536),
    ("WAV", "PCM_24", 2 / 2**24),
    ("WAV", "PCM_32", 2 / 2**32),
    ("WAV", "FLOAT", 1e-7),
    ("WAV", "DOUBLE", 1e-15),
    ("WAVEX", "PCM_16", 2 / 65536),
    ("WAVEX", "PCM_24", 2 / 2**24),
    ("WAVEX", "FLOAT", 1e-7),
    ("RF64", "PCM_24", 2 / 2**24),
    ("RF64", "FLOAT", 1e-7),
    ("W64", "PCM_16", 2 / 65536),
    ("W64", "DOUBLE", 1e-15),
]


class TestSoundFileSource:
    @pytest.mark.parametrize(("fmt", "subtype", "step"), SOUNDFILE_VARIANTS)
    def test_variants_written_by_soundfile(self, tmp_path, fmt, subtype, step):
        x = reference_signal()
        ext = {"WAV": "wav", "WAVEX": "wav", "RF64": "wav", "W64": "w64"}[fmt]
        path = tmp_path / f"v.{ext}"
        sf.write(path, x, 8000, format=fmt, subtype=subtype)
        src = SoundFileSource(path, block_frames=1000)
        assert src.meta.fs_hz == 8000.0
        assert src.meta.frames == x.size
        y = read_all(src)
        assert y.shape == x.shape
        assert np.max(np.abs(y - x)) <= step

    @pytest.mark.parametrize("channels", [1, 2])
    @pytest.mark.parametrize("subtype", ["PCM_S8", "PCM_U8", "PCM_16", "PCM_24", "PCM_32"])
    def test_integer_reads_equal_libsndfile_conversion(self, tmp_path, subtype, channels):
        # PCM is read as integers and scaled by swingmeter; the values must be exactly
        # those of libsndfile's own conversion to float64 (the reference), full-scale
        # codes included
        fmt = "AIFF" if subtype == "PCM_S8" else "WAV"  # WAV has no signed 8-bit
        x = np.clip(reference_signal() * 2.2, -1.0, 1.0)
        x = np.stack([x, -x[::-1]], axis=1)[:, :channels]
        path = tmp_path / f"i.{fmt.lower()}"
        sf.write(path, x, 8000, format=fmt, subtype=subtype)
        want, _ = sf.read(path, dtype="float64", always_2d=True)
        for ch in range(channels):
            got = read_all(SoundFileSource(path, channel=ch, block_frames=777))
            np.testing.assert_array_equal(got, want[:, ch])
        if channels == 2:
            mixed = read_all(SoundFileSource(path, mix=True, block_frames=777))
            np.testing.assert_array_equal(mixed, want.mean(axis=1))
            iq = read_all(SoundFileSource(path, mode="iq", block_frames=777))
            np.testing.assert_array_equal(iq, want[:, 0] + 1j * want[:, 1])

    @pytest.mark.parametrize("fmt", ["WAV", "RF64", "W64"])
    def test_float_reads_equal_libsndfile_conversion(self, tmp_path, fmt):
        # 32-bit float is read as stored and widened by numpy; the values must be exactly
        # those of libsndfile's own conversion to float64 (the reference), beyond full
        # scale too, and a NaN is still found and replaced
        x = reference_signal() * 1.7
        x = np.stack([x, -x[::-1]], axis=1)
        ext = {"WAV": "wav", "RF64": "wav", "W64": "w64"}[fmt]
        path = tmp_path / f"f.{ext}"
        sf.write(path, x, 8000, format=fmt, subtype="FLOAT")
        want, _ = sf.read(path, dtype="float64", always_2d=True)
        for ch in range(2):
            got = read_all(SoundFileSource(path, channel=ch, block_frames=777))
            np.testing.assert_array_equal(got, want[:, ch])
        iq = read_all(SoundFileSource(path, mode="iq", block_frames=777))
        np.testing.assert_array_equal(iq, want[:, 0] + 1j * want[:, 1])
        x[100, 1] = np.nan
        sf.write(path, x, 8000, format=fmt, subtype="FLOAT")
        src = SoundFileSource(path, mode="iq", block_frames=777)
        iq = read_all(src)
        assert np.isfinite(iq).all() and iq[100] == 0
        assert any("NaN" in w for w in src.warnings)

    # sox (an independent writer) converts one 16-bit file into every variant; all read
    # back as the same samples to within each variant's quantisation.
    SOX_VARIANTS = (
        (["-b", "8", "-e", "unsigned-integer"], 2 / 256),
        (["-b", "16", "-e", "signed-integer"], 0),
        (["-b", "24", "-e", "signed-integer"], 0),
        (["-b", "32", "-e", "signed-integer"], 0),
        (["-b", "32", "-e", "floating-point"], 0),
        (["-b", "64", "-e", "floating-point"], 0),
    )

    @pytest.mark.parametrize(("opts", "step"), SOX_VARIANTS)
    def test_variants_written_by_sox(self, sox, tmp_path, opts, step):
        base = tmp_path / "base.wav"
        sox("-n", "-r", 8000, "-b", 16, base, "synth", 0.5, "sine", 440, "vol", 0.5)
        out = tmp_path / "variant.wav"
        sox("-D", base, *opts, out)  # -D: no dither, so samples convert exactly
        ref = read_all(SoundFileSource(base))
        y = read_all(SoundFileSource(out, block_frames=777))
        assert y.shape == ref.shape
        assert np.max(np.abs(y - ref)) <= step + 1e-12

    def test_sox_rf64_and_w64(self, sox, tmp_path):
        base = tmp_path / "base.wav"
        sox("-n", "-r", 8000, "-b", 24, base, "synth", 0.5, "sine", 440, "vol", 0.5)
        ref = read_all(SoundFileSource(base))
        for name, typ in (("x.w64", "w64"), ("x.rf64", "rf64")):
            out = tmp_path / name
            try:
                sox(base, "-t", typ, out)
            except Exception:  # older sox builds lack rf64 output
                if typ == "rf64":
                    continue
                raise
            assert np.array_equal(read_all(SoundFileSource(out)), ref)

    def test_channel_selection_and_mix(self, tmp_path):
        x = np.stack([np.full(100, 0.1), np.full(100, 0.3)], axis=1)
        path = tmp_path / "st.wav"
        sf.write(path, x, 8000, subtype="FLOAT")
        assert np.allclose(read_all(SoundFileSource(path)), 0.1)
        assert np.allclose(read_all(SoundFileSource(path, channel=1)), 0.3)
        assert np.allclose(read_all(SoundFileSource(path, mix=True)), 0.2)

    def test_iq_stereo(self, tmp_path):
        x = np.stack([np.full(100, 0.1), np.full(100, -0.3)], axis=1)
        path = tmp_path / "iq.wav"
        sf.write(path, x, 48000, subtype="FLOAT")
        z = read_all(SoundFileSource(path, mode="iq"))
        assert np.allclose(z, 0.1 - 0.3j)
        z = read_all(SoundFileSource(path, mode="iq", swap_iq=True))
        assert np.allclose(z, -0.3 + 0.1j)

    def test_blocks_are_consecutive(self, tmp_path):
        path = tmp_path / "a.wav"
        sf.write(path, reference_signal(10000), 8000)
        src = SoundFileSource(path, block_frames=3000)
        starts = [(b.start, len(b)) for b in src]
        assert starts == [(0, 3000), (3000, 3000), (6000, 3000), (9000, 1000)]

    def test_bounded_memory(self, tmp_path):
        # A long file read in blocks never materialises the whole record.
        path = tmp_path / "long.wav"
        n = 48000 * 60
        with sf.SoundFile(path, "w", 48000, 1, subtype="PCM_16") as f:
            for _ in range(60):
                f.write(0.1 * np.ones(48000))
        src = SoundFileSource(path, block_frames=8192)
        biggest = max(b.samples.nbytes for b in src)
        assert biggest == 8192 * 8
        assert src.frames_read == n


def _write_wav_header(path, *, rate=8000, frames=10, bits=16, data=True):
    data_bytes = frames * bits // 8
    hdr = b"RIFF" + struct.pack("<I", 36 + data_bytes) + b"WAVE"
    hdr += b"fmt " + struct.pack("<IHHIIHH", 16, 1, 1, rate, rate * bits // 8, bits // 8, bits)
    hdr += b"data" + struct.pack("<I", data_bytes)
    path.write_bytes(hdr + (b"\x00\x01" * frames if data else b""))


class TestUnusableInput:
    def test_missing(self, tmp_path):
        with pytest.raises(InputError, match="file not found"):
            open_source(tmp_path / "nope.wav")

    def test_empty(self, tmp_path):
        p = tmp_path / "empty.wav"
        p.write_bytes(b"")
        with pytest.raises(InputError, match="empty"):
            open_source(p)

    def test_directory(self, tmp_path):
        with pytest.raises(InputError, match="directory"):
            open_source(tmp_path)

    def test_not_audio(self, tmp_path):
        p = tmp_path / "notes.wav"
        p.write_text("these are bench notes, not audio\n" * 10)
        with pytest.raises(InputError, match="not a readable audio file"):
            open_source(p)

    def test_truncated_header(self, tmp_path):
        p = tmp_path / "cut.wav"
        sf.write(p, reference_signal(), 8000)
        p.write_bytes(p.read_bytes()[:30])
        with pytest.raises(InputError, match=str(p.name)):
            open_source(p)

    def test_truncated_data_warns(self, tmp_path):
        p = tmp_path / "short.wav"
        _write_wav_header(p, frames=1000)
        p.write_bytes(p.read_bytes()[:-500])  # header promises more than is there
        src = open_source(p)
        read_all(src)
        # libsndfile either trims the frame count on open or we notice at the end
        assert src.frames_read <= 750

    def test_zero_rate(self, tmp_path):
        p = tmp_path / "zero.wav"
        _write_wav_header(p, rate=0)
        with pytest.raises(InputError, match=p.name):
            open_source(p)

    @pytest.mark.parametrize("rate", [1, 100, 400_000_000])
    def test_absurd_rate(self, tmp_path, rate):
        p = tmp_path / "absurd.wav"
        _write_wav_header(p, rate=rate)
        with pytest.raises(InputError, match=r"sample rate|not a readable"):
            open_source(p)

    def test_no_frames(self, tmp_path):
        p = tmp_path / "none.wav"
        _write_wav_header(p, frames=0, data=False)
        with pytest.raises(InputError, match="no audio samples"):
            open_source(p)

    @pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
    def test_non_finite_samples_become_silence(self, tmp_path, bad):
        # A stretch of 12 non-finite samples from sample 1234 at 8 kHz (0.15425 s to
        # 0.155625 s): replaced by zeros, named in a warning, the block holding it flagged.
        x = reference_signal()
        x[1234:1246] = bad
        p = tmp_path / "nan.wav"
        sf.write(p, x, 8000, subtype="FLOAT")
        src = open_source(p, block_frames=1000)
        with src:
            blocks = list(src)
        y = np.concatenate([b.samples for b in blocks])
        assert np.all(y[1234:1246] == 0.0)
        keep = np.ones(x.size, bool)
        keep[1234:1246] = False
        assert np.max(np.abs(y[keep] - x[keep])) <= 1e-7  # float32 rounding
        # consecutive starts; a flagged block starts at the stretch and one just after it
        starts = [b.start for b in blocks]
        assert starts == list(np.cumsum([0] + [len(b) for b in blocks[:-1]]))
        assert sorted(b.start for b in blocks if b.overflow) == [1234, 1246]
        assert src.warnings == [
            "12 NaN/Inf samples at 0.154-0.156 s replaced by silence; "
            "gates across them are not joined"
        ]

    def test_scattered_non_finite_samples_are_one_stretch(self, tmp_path):
        x = reference_signal(8000)
        x[4000:4100:3] = np.nan  # 34 samples three apart: one stretch, two flagged blocks
        x[7000] = np.inf
        src = ArraySource(x, 8000.0)
        blocks = list(src)
        assert [b.start for b in blocks if b.overflow] == [4000, 4100, 7000, 7001]
        assert src.warnings == [
            "35 NaN/Inf samples at 0.500-0.512 s, 0.875 s replaced by silence; "
            "gates across them are not joined"
        ]

    def test_engine_does_not_join_across_non_finite(self, tmp_path):
        from monitor.engine import AnalysisSettings, run

        fs = 8000
        t = np.arange(3 * fs) / fs
        x = 0.5 * np.sin(2 * np.pi * 1000.0 * t)
        x[12000:12010] = np.nan
        p = tmp_path / "gap.wav"
        sf.write(p, x, fs, subtype="FLOAT")
        with open_source(p) as src:
            a = run(src, AnalysisSettings(gate_s=0.5))
        flagged = [r.t_s for r in a.readings if r.overflow]
        assert flagged == [1.5]
        assert [r.contiguous for r in a.readings] == [True, True, True, False, True, True]
        assert any("10 NaN/Inf samples at 1.500-1.501 s" in w for w in a.summary.warnings)
        # the sine is still read: 1000 Hz exactly as written (the generator's value)
        assert a.summary.tone.frequency_hz == pytest.approx(1000.0, abs=1e-3)

    def test_absurd_float_samples_become_silence(self, tmp_path):
        # 5e157 (a float file with garbage in it) is no sample: left in, its square would
        # overflow every spectrum; it is silenced and named like a NaN
        x = reference_signal()
        x[2000:2003] = [5e157, -3e38, 2e6]
        p = tmp_path / "absurd.wav"
        sf.write(p, x, 8000, subtype="DOUBLE")
        src = open_source(p)
        y = read_all(src)
        assert np.all(y[2000:2003] == 0) and np.array_equal(y[:2000], x[:2000])
        assert src.warnings == [
            "3 NaN/Inf or out-of-range samples at 0.250 s replaced by silence; "
            "gates across them are not joined"
        ]

    @pytest.mark.parametrize("bad", [np.nan, np.inf])
    def test_all_non_finite_raises(self, tmp_path, bad):
        p = tmp_path / "allnan.wav"
        sf.write(p, np.full(500, bad), 8000, subtype="DOUBLE")
        with pytest.raises(InputError, match="all 500 samples are NaN or infinite"):
            read_all(open_source(p))

    def test_iq_needs_two_channels(self, tmp_path):
        p = tmp_path / "mono.wav"
        sf.write(p, reference_signal(), 8000)
        with pytest.raises(InputError, match="--mode iq needs a stereo"):
            open_source(p, mode="iq")

    def test_channel_out_of_range(self, tmp_path):
        p = tmp_path / "mono.wav"
        sf.write(p, reference_signal(), 8000)
        with pytest.raises(InputError, match="--channel 3 does not exist"):
            open_source(p, channel=3)


def _write_sigmf(tmp_path, data, datatype, fs=192000.0, center=100.1e6, name="rec"):
    from sigmf import SigMFFile

    base = tmp_path / name
    data.tofile(str(base) + ".sigmf-data")
    meta = SigMFFile(
        data_file=str(base) + ".sigmf-data",
        global_info={
            "core:datatype": datatype,
            "core:sample_rate": fs,
            "core:description": "bench oscillator, synthetic",
        },
    )
    meta.add_capture(
        0,
        metadata={
            "core:frequency": center,
            "core:datetime": "2026-12-01T12:00:00Z",
        },
    )
    meta.tofile(str(base) + ".sigmf-meta")
    return base


class TestSigMF:
    def test_complex_cf32(self, tmp_path):
        n = 5000
        z = (np.exp(2j * np.pi * 0.01 * np.arange(n)) * 0.5).astype(np.complex64)
        base = _write_sigmf(tmp_path, z, "cf32_le")
        src = open_source(str(base) + ".sigmf-meta", mode="iq", block_frames=1024)
        assert isinstance(src, SigMFSource)
        assert src.meta.fs_hz == 192000.0
        assert src.meta.center_hz == 100.1e6
        assert src.meta.extra["datetime"] == "2026-12-01T12:00:00Z"
        y = read_all(src)
        assert np.allclose(y, z, atol=1e-7)
        # the data file name works too
        assert np.allclose(read_all(open_source(str(base) + ".sigmf-data", mode="iq")), z)

    def test_complex_ci16_scaled(self, tmp_path):
        n = 1000
        iq = np.zeros(2 * n, dtype=np.int16)
        iq[0::2] = 16384
        iq[1::2] = -8192
        base = _write_sigmf(tmp_path, iq, "ci16_le")
        y = read_all(open_source(str(base) + ".sigmf-meta", mode="iq"))
        assert np.allclose(y, 0.5 - 0.25j, atol=1e-4)

    def test_real_rf32(self, tmp_path):
        x = reference_signal(3000).astype(np.float32)
        base = _write_sigmf(tmp_path, x, "rf32_le", fs=8000.0)
        y = read_all(open_source(str(base) + ".sigmf-meta", mode="audio"))
        assert np.allclose(y, x, atol=1e-7)

    def test_mode_mismatch(self, tmp_path):
        z = np.zeros(100, dtype=np.complex64)
        base = _write_sigmf(tmp_path, z, "cf32_le")
        with pytest.raises(InputError, match="use --mode iq"):
            open_source(str(base) + ".sigmf-meta", mode="audio")
        x = np.zeros(100, dtype=np.float32)
        base = _write_sigmf(tmp_path, x, "rf32_le", fs=8000.0, name="real")
        with pytest.raises(InputError, match="is real"):
            open_source(str(base) + ".sigmf-meta", mode="iq")

    def test_broken_metadata(self, tmp_path):
        p = tmp_path / "bad.sigmf-meta"
        p.write_text("{ not json")
        with pytest.raises(InputError, match="not a readable SigMF"):
            open_source(p, mode="iq")


class TestArraySource:
    def test_blocks(self):
        src = ArraySource(np.arange(10.0), 8000.0, block_frames=4)
        assert [len(b) for b in src] == [4, 4, 2]

    def test_raises(self):
        with pytest.raises(ValueError, match="one-dimensional"):
            ArraySource(np.zeros((2, 2)), 8000.0)
        with pytest.raises(TypeError, match="complex"):
            ArraySource(np.zeros(4, complex), 8000.0)


class TestReusedBuffers:
    """With `reuse_buffers` a file reader refills the same arrays: each block, taken
    before the next is read, must hold what libsndfile's own float64 read gives."""

    @pytest.mark.parametrize(
        ("subtype", "channels", "mode"),
        [
            ("FLOAT", 1, "beat"),
            ("PCM_16", 1, "audio"),
            ("PCM_24", 1, "beat"),
            ("DOUBLE", 1, "beat"),
            ("FLOAT", 2, "iq"),
            ("PCM_16", 2, "iq"),
            ("FLOAT", 2, "audio"),
        ],
    )
    def test_blocks_equal_a_fresh_read(self, tmp_path, subtype, channels, mode):
        x = reference_signal(n=10000)
        if channels == 2:
            x = np.stack([x, np.roll(x, 7)], axis=1)
        path = tmp_path / "r.wav"
        sf.write(path, x, 8000, subtype=subtype)
        truth, _ = sf.read(path, dtype="float64", always_2d=True)  # libsndfile's own
        if mode == "iq":
            truth = truth[:, 0] + 1j * truth[:, 1]
        else:
            truth = truth[:, 0]
        src = SoundFileSource(path, mode=mode, block_frames=3000)
        src.reuse_buffers = True
        with src:
            blocks = [b.samples.copy() for b in src]
            again = [b.samples for b in src]
        assert [b.shape[0] for b in blocks] == [3000, 3000, 3000, 1000]
        assert np.array_equal(np.concatenate(blocks), truth)
        if mode != "iq" and channels == 1:
            # the same memory every time: no fresh array a read
            assert np.shares_memory(again[0], again[1])

    def test_samples_between_is_a_new_array(self, tmp_path):
        # a stretch across blocks, joined: libsndfile's own read of it, and its own
        # memory even while the reader refills its buffers
        x = reference_signal(n=10000)
        path = tmp_path / "s.wav"
        sf.write(path, x, 8000, subtype="FLOAT")
        truth, _ = sf.read(path, dtype="float64")
        src = SoundFileSource(path, block_frames=3000)
        src.reuse_buffers = True
        with src:
            a = src.samples_between(2500, 7100)
            b = src.samples_between(0, 3000)
        assert np.array_equal(a, truth[2500:7100]) and np.array_equal(b, truth[:3000])
        assert not np.shares_memory(a, b)

    def test_fm_analysis_reuses_them_and_reads_as_with_fresh_blocks(self, tmp_path):
        from monitor.blocks import Block
        from monitor.engine import AnalysisSettings, Engine, analyze_file
        from monitor.fm_engine import FmSettings

        # single-tone FM on a 9 kHz beat note, numpy-generated, with noise
        fs, n = 48000, 48000 * 12
        t = np.arange(n) / fs
        rng = np.random.default_rng(5)
        x = 0.4 * np.cos(2 * np.pi * 9000 * t + 2.5 * np.sin(2 * np.pi * 1000 * t))
        x += 1e-3 * rng.standard_normal(n)
        path = tmp_path / "beat.wav"
        sf.write(path, x, fs, subtype="FLOAT")
        settings = AnalysisSettings(mode="beat", fm=FmSettings(if_bandwidth_hz=10000.0))
        seen = []
        orig = SoundFileSource._raw_blocks

        def spy(self, *a, **k):
            seen.append(self.reuse_buffers)
            return orig(self, *a, **k)

        try:
            SoundFileSource._raw_blocks = spy
            one = analyze_file(path, settings=settings, jobs=1)
        finally:
            SoundFileSource._raw_blocks = orig
        assert seen == [True]
        with SoundFileSource(path, mode="beat") as src:
            src.prefer_block_frames(fs)
            engine = Engine(src.meta, settings)
            for b in src:  # fresh arrays, and a copy of each for good measure
                engine.feed(Block(b.samples.copy(), b.start, src.meta))
            engine.finish()
            assert not src.reuse_buffers
        assert len(one.readings) == len(engine.readings) == 12
        assert one.readings == engine.readings
        # and the truth of the generator: 2.5 x 1 kHz of deviation
        assert one.extra["fm"]["deviation"]["tone_peak_hz"] == pytest.approx(2500.0, rel=0.005)
