"""Every reader of a user's file, fed malformed input: a result or our own error, in time.

Two kinds of input:

- generated (hypothesis): valid small files (a few hundred frames) mutated by bit flips,
  truncations, header fields overwritten (sizes, rates, channels, format codes), chunks
  reordered, dropped or doubled, garbage appended; JSON documents (SigMF metadata,
  recorder sidecars, bench profiles, readings) with values replaced by other types,
  keys dropped, text cut; CSV with bad numbers, missing cells, NaN, huge lines.
- hand-made (`tests/fuzz_corpus/`, written by its `make_corpus.py`): one broken thing
  per file.

The contract: each case ends in a result that keeps the reader's promises (finite
samples, consecutive blocks, increasing times) or in a `monitor.errors.SwingmeterError`;
any other exception fails, and so does a case that runs longer than CASE_TIMEOUT_S.
Headers that claim huge sizes must not make us allocate them (checked with tracemalloc,
and on Linux in a child process under an address-space limit).

`make test` runs a small seeded share; `SWINGMETER_FUZZ=full` (`make fuzz`) the full
count, at least 100,000 cases (checked by TestFuzzBudget).
"""

from __future__ import annotations

import contextlib
import io
import json
import math
import os
import random
import signal
import struct
import subprocess
import sys
import threading
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from monitor import profiles, readings_io, record
from monitor.errors import InputError, ProfileError, SwingmeterError
from monitor.sources import (
    MAX_RATE_HZ,
    MIN_RATE_HZ,
    SigMFSource,
    SoundFileSource,
    open_source,
    recorded_mode,
)

CORPUS = Path(__file__).parent / "fuzz_corpus"
FULL = os.environ.get("SWINGMETER_FUZZ") == "full"
CASE_TIMEOUT_S = 5.0  # a case reads a few hundred frames: milliseconds when all is well

# Cases per reader under SWINGMETER_FUZZ=full (make fuzz) and in make test's share.
FULL_EXAMPLES = {
    "soundfile": 40_000,
    "sigmf": 16_000,
    "sidecar_open": 10_000,
    "sidecar_read": 6_000,
    "profiles": 10_000,
    "readings_csv": 12_000,
    "readings_json": 8_000,
}
SHARE_EXAMPLES = {
    "soundfile": 250,
    "sigmf": 100,
    "sidecar_open": 60,
    "sidecar_read": 40,
    "profiles": 60,
    "readings_csv": 100,
    "readings_json": 60,
}
FUZZ_TOTAL_PROMISED = 100_000
# Each case is built from one seed (random.Random): hypothesis drives and records the
# seeds, the mutation itself costs microseconds instead of hundreds of draws.
SEEDS = st.integers(0, 2**64 - 1)


def fuzz_settings(name: str):
    """Hypothesis settings of one reader's fuzz test; the share is derandomised (the same
    cases every run), the full run explores."""

    def deco(fn):
        fn._fuzz_name = name
        return settings(
            max_examples=(FULL_EXAMPLES if FULL else SHARE_EXAMPLES)[name],
            derandomize=not FULL,
            database=None,
            deadline=None,
            suppress_health_check=[
                HealthCheck.too_slow,
                HealthCheck.data_too_large,
                HealthCheck.function_scoped_fixture,
                HealthCheck.filter_too_much,
            ],
        )(fn)

    return deco


# --------------------------------------------------------------------------- time bound


class _CaseTimeout(BaseException):
    """Raised by the alarm; a BaseException so no reader's `except Exception` eats it."""


@contextlib.contextmanager
def bounded(what: str, seconds: float = CASE_TIMEOUT_S):
    """Fail the case if its body runs longer than `seconds`.

    POSIX main thread: SIGALRM interrupts the body (a timer already running, such as
    pytest-timeout's, is put back afterwards). Elsewhere (Windows, worker threads) the
    time is only measured, and a slow case fails when it returns.
    """
    use_alarm = (
        hasattr(signal, "setitimer") and threading.current_thread() is threading.main_thread()
    )
    t0 = time.monotonic()
    if use_alarm:

        def ring(signum, frame):
            raise _CaseTimeout

        old_handler = signal.signal(signal.SIGALRM, ring)
        old_timer = signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    except _CaseTimeout:
        raise AssertionError(f"{what}: no result after {seconds} s (hang)") from None
    finally:
        if use_alarm:
            signal.setitimer(signal.ITIMER_REAL, 0)
            signal.signal(signal.SIGALRM, old_handler)
            if old_timer[0] > 0:
                left = max(old_timer[0] - (time.monotonic() - t0), 1e-3)
                signal.setitimer(signal.ITIMER_REAL, left, old_timer[1])
    elapsed = time.monotonic() - t0
    assert elapsed <= seconds, f"{what}: took {elapsed:.1f} s"


class TestBounded:
    def test_a_hang_fails_the_case(self):
        if not hasattr(signal, "setitimer"):
            pytest.skip("no SIGALRM here: the watchdog only measures")
        with pytest.raises(AssertionError, match=r"no result after 0\.2 s"):
            with bounded("sleeper", 0.2):
                time.sleep(5)

    def test_a_slow_case_fails_when_it_returns(self):
        # off the main thread (and on Windows) only the watchdog measures
        caught = []

        def body():
            try:
                with bounded("slow", 0.05):
                    time.sleep(0.1)
            except AssertionError as exc:
                caught.append(str(exc))

        t = threading.Thread(target=body)
        t.start()
        t.join()
        assert caught and caught[0].startswith("slow: took")


# --------------------------------------------------------------------------- contracts

MAX_FRAMES_READ = 1 << 20  # our cases hold far fewer; more would mean a runaway reader


def check_recording(path, *, mode="audio", channel=0, mix=False, block_frames=128, engine=False):
    """Open `path`, read every block and check the reader's promises; optionally run the
    engine on it. Returns "ok" or "error" (a SwingmeterError)."""
    try:
        src = open_source(path, mode=mode, channel=channel, mix=mix, block_frames=block_frames)
    except SwingmeterError as exc:
        assert str(exc), "an error must say what is wrong"
        return "error"
    with src:
        assert isinstance(src, (SoundFileSource, SigMFSource))
        m = src.meta
        assert MIN_RATE_HZ <= m.fs_hz <= MAX_RATE_HZ
        assert m.frames is None or m.frames > 0
        assert math.isfinite(m.clock_factor) and m.clock_factor > 0
        want = np.complex128 if mode == "iq" else np.float64
        n = 0
        try:
            for b in src:
                x = b.samples
                assert x.dtype == want and x.ndim == 1 and x.size > 0
                assert bool(np.all(np.isfinite(x))), "blocks hold finite samples only"
                assert b.start == n, "blocks are consecutive"
                n += x.shape[0]
                assert n <= MAX_FRAMES_READ
        except SwingmeterError as exc:
            assert str(exc)
            return "error"
        assert all(isinstance(w, str) and w for w in src.warnings)
    if engine and n:
        from monitor.engine import AnalysisSettings, run

        try:
            with open_source(path, mode=mode, channel=channel, mix=mix) as again:
                a = run(again, AnalysisSettings(mode=mode, gate_s=0.1))
        except SwingmeterError:
            return "error"
        assert a.summary.duration_s > 0
        assert all(isinstance(w, str) for w in a.summary.warnings)
    return "ok"


def check_series(result) -> None:
    assert isinstance(result, list) and result
    for s in result:
        assert isinstance(s, readings_io.ReadingSeries) and len(s) >= 1
        assert bool(np.all(np.isfinite(s.t_s))) and bool(np.all(np.diff(s.t_s) > 0))
        f = s.frequency_hz
        assert not bool(np.any(np.isinf(f))) and not bool(np.any(f < 0))
        assert s.gate_s is None or s.gate_s > 0


def check_profiles(names=None) -> None:
    try:
        allp = profiles.load_all()
    except ProfileError:
        return
    assert isinstance(allp, dict)
    for name in names or list(allp)[:5]:
        try:
            prof = profiles.load(name)
        except ProfileError:
            continue
        assert isinstance(prof, dict)


def check_sidecar(path) -> None:
    try:
        data = record.read_sidecar(path)
    except InputError:
        return
    assert isinstance(data, dict)


# --------------------------------------------------------------------------- RIFF / W64


def _soundfile_bytes(x, fs, fmt, subtype) -> bytes:
    buf = io.BytesIO()
    buf.name = "x.w64" if fmt == "W64" else "x.wav"
    sf.write(buf, x, fs, format=fmt, subtype=subtype)
    return buf.getvalue()


def _base_recordings() -> list[tuple[str, bytes]]:
    """Small valid recordings (300 frames) in every container and sample format."""
    n = 300
    t = np.arange(n) / 8000.0
    mono = 0.5 * np.sin(2 * np.pi * 1000.0 * t)
    iq = 0.5 * np.stack([np.cos(2 * np.pi * 900 * t), np.sin(2 * np.pi * 900 * t)], axis=1)
    out = []
    for fmt, subtype, x, fs in (
        ("WAV", "PCM_16", mono, 8000),
        ("WAV", "PCM_U8", mono, 8000),
        ("WAV", "PCM_24", iq, 48000),
        ("WAV", "PCM_32", mono, 44100),
        ("WAV", "FLOAT", mono, 8000),
        ("WAV", "DOUBLE", iq, 96000),
        ("WAVEX", "PCM_16", iq, 8000),
        ("WAVEX", "FLOAT", mono, 192000),
        ("RF64", "PCM_16", mono, 8000),
        ("RF64", "FLOAT", iq, 48000),
        ("W64", "PCM_16", mono, 8000),
        ("W64", "FLOAT", iq, 8000),
    ):
        ext = "w64" if fmt == "W64" else "wav"
        out.append((ext, _soundfile_bytes(x, fs, fmt, subtype)))
    # a float file with a NaN stretch, and one with an extra LIST chunk to reorder
    y = mono.copy()
    y[100:110] = np.nan
    out.append(("wav", _soundfile_bytes(y, 8000, "WAV", "FLOAT")))
    plain = _soundfile_bytes(mono, 8000, "WAV", "PCM_16")
    info = b"LIST" + struct.pack("<I", 12) + b"INFOISFT" + struct.pack("<I", 0)
    body = plain[12:]
    out.append(
        ("wav", b"RIFF" + struct.pack("<I", len(body) + 4 + len(info)) + b"WAVE" + info + body[4:])
    )
    return out


BASES = _base_recordings()


def parse_chunks(b: bytes) -> tuple[int, list[tuple[int, int]], str]:
    """(header length, [(chunk start, chunk end incl. pad)], kind) of a RIFF/RF64/W64 file;
    stops at the first chunk that does not fit."""
    if b[:4] == b"riff":
        kind, pos, hdr, align = "w64", 40, 24, 8
    else:
        kind, pos, hdr, align = "riff", 12, 8, 2
    first = pos
    chunks = []
    while pos + hdr <= len(b):
        if kind == "w64":
            size = struct.unpack_from("<Q", b, pos + 16)[0] - 24
        else:
            size = struct.unpack_from("<I", b, pos + 4)[0]
        end = pos + hdr + size
        end += -end % align if kind == "w64" else end % 2
        if size < 0 or end > len(b):
            break
        chunks.append((pos, end))
        pos = end
    return first, chunks, kind


def header_fields(b: bytes) -> list[tuple[int, int]]:
    """(offset, width in bytes) of the fields worth overwriting: container and chunk
    sizes, every WAVEFORMAT(EXTENSIBLE) field, RF64 ds64 sizes."""
    _, chunks, kind = parse_chunks(b)
    fields = [(16, 8)] if kind == "w64" else [(4, 4)]
    for start, _ in chunks:
        cid = b[start : start + 4]
        data = start + (24 if kind == "w64" else 8)
        fields.append((start + 16, 8) if kind == "w64" else (start + 4, 4))
        if cid == b"fmt ":
            fields += [(data, 2), (data + 2, 2), (data + 4, 4), (data + 8, 4)]
            fields += [(data + 12, 2), (data + 14, 2), (data + 16, 2), (data + 18, 2)]
            fields += [(data + 20, 4), (data + 24, 2)]
        elif cid == b"ds64":
            fields += [(data, 8), (data + 8, 8), (data + 16, 8)]
    return [(o, w) for o, w in fields if o + w <= len(b)]


SPECIAL_VALUES = [
    0,
    1,
    2,
    3,
    0x7F,
    0xFF,
    0x100,
    0xFFFE,
    0xFFFF,
    0x7FFFFFFF,
    0x80000000,
    0xFFFFFFFF,
    2**62,
    2**63 - 1,
    2**64 - 1,
    8000,
    48000,
    384000,
    1 << 31,
]


def mutated_recording(r: random.Random) -> tuple[str, bytes]:
    ext, b = r.choice(BASES)
    b = bytearray(b)
    for _ in range(r.randint(1, 4)):
        op = r.choice(
            [
                "flip",
                "field",
                "field",
                "truncate",
                "append",
                "bytes",
                "swap",
                "drop",
                "dup",
                "insert",
            ]
        )
        if op == "flip" and b:
            pos = r.randint(0, len(b) - 1)
            b[pos] ^= 1 << r.randint(0, 7)
        elif op == "field":
            fields = header_fields(bytes(b))
            if fields:
                off, width = r.choice(fields)
                v = (
                    r.choice(SPECIAL_VALUES)
                    if r.random() < 0.5
                    else r.randint(0, 2 ** (8 * width) - 1)
                )
                v &= (1 << (8 * width)) - 1
                if (r.random() < 0.5) and width >= 2:
                    v = (-r.randint(1, 100_000)) & ((1 << (8 * width)) - 1)
                b[off : off + width] = v.to_bytes(width, "little")
        elif op == "truncate" and b:
            b = b[: r.randint(0, len(b) - 1)]
        elif op == "append":
            b += r.randbytes(r.randint(1, 64))
        elif op == "bytes" and b:
            pos = r.randint(0, len(b) - 1)
            new = r.randbytes(r.randint(1, 8))
            b[pos : pos + len(new)] = new
        elif op in ("swap", "drop", "dup", "insert"):
            first, chunks, kind = parse_chunks(bytes(b))
            if not chunks:
                continue
            parts = [bytes(b[s:e]) for s, e in chunks]
            tail = bytes(b[chunks[-1][1] :])
            i = r.randint(0, len(parts) - 1)
            if op == "swap":
                j = r.randint(0, len(parts) - 1)
                parts[i], parts[j] = parts[j], parts[i]
            elif op == "drop":
                del parts[i]
            elif op == "dup":
                parts.insert(i, parts[i])
            else:
                cid = r.choice([b"fmt ", b"data", b"ds64", b"LIST", b"JUNK", b"fact"])
                payload = r.randbytes(r.randint(0, 40))
                if kind == "w64":
                    c = cid + bytes(12) + struct.pack("<Q", len(payload) + 24) + payload
                    c += bytes(-len(c) % 8)
                else:
                    c = cid + struct.pack("<I", len(payload)) + payload + b"\0" * (len(payload) % 2)
                parts.insert(i, c)
            b = bytearray(bytes(b[:first]) + b"".join(parts) + tail)
    return ext, bytes(b)


@pytest.fixture(scope="module")
def work_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz")


@pytest.mark.fuzz
class TestSoundFileReaderFuzz:
    @fuzz_settings("soundfile")
    @given(seed=SEEDS)
    @example(seed=853_781_223_856)  # a float sample of 5e157 once crashed the engine
    def test_mutated_recordings(self, work_dir, seed):
        r = random.Random(seed)
        ext, data = mutated_recording(r)
        path = work_dir / f"case.{ext}"
        path.write_bytes(data)
        with bounded(f"{len(data)}-byte {ext} case from seed {seed}"):
            check_recording(
                path,
                mode=r.choice(["audio", "audio", "beat", "iq"]),
                channel=r.randint(0, 2),
                mix=r.random() < 0.25,
                block_frames=r.choice([1, 7, 64, 4096]),
                engine=r.randint(0, 7) == 0,
            )


# --------------------------------------------------------------------------- JSON mutation

JSON_NUMBERS = [0, -1, 1, 2, 65535, 48000, 2**63, -(2**63), 1e300, -1e300, 1e-300, 0.5]
JSON_WORDS = ["", "upper", "lower", "audio", "iq", "beat", "cf32_le", "ri16_le", "nan", "NaN"]


def rand_text(r: random.Random, max_len: int) -> str:
    alphabet = "abz019 _-.:/\\\"'\x00\u00e9\u0661\U0001f600"
    return "".join(r.choice(alphabet) for _ in range(r.randint(0, max_len)))


def json_value(r: random.Random, depth: int = 0):
    """A random JSON value: any type, numbers from zero to +-1e300, NaN and infinities
    (Python's json writes and reads them), short odd strings, small nested containers.
    Integers stay within 64 bits: wider ones are `mutate_json(wild=True)`'s business."""
    k = r.randint(0, 9 if depth < 2 else 6)
    if k == 0:
        return None
    if k == 1:
        return r.random() < 0.5
    if k == 2:
        return r.randint(-(2**63), 2**63)
    if k == 3:
        return r.choice(JSON_NUMBERS)
    if k == 4:
        return r.choice([math.nan, math.inf, -math.inf, r.uniform(-1e6, 1e6), -0.0])
    if k == 5:
        return rand_text(r, 12)
    if k == 6:
        return r.choice(JSON_WORDS)
    if k in (7, 8):
        return [json_value(r, depth + 1) for _ in range(r.randint(0, 4))]
    return {rand_text(r, 8): json_value(r, depth + 1) for _ in range(r.randint(0, 4))}


def _paths(obj, prefix=()):
    yield prefix
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield from _paths(v, (*prefix, k))
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            yield from _paths(v, (*prefix, i))


def _get(obj, path):
    for p in path:
        obj = obj[p]
    return obj


def mutate_json(r: random.Random, doc, *, wild: bool) -> bytes:
    """Apply 1-4 structure/type mutations to a copy of `doc`, serialise, maybe cut or flip
    the text. `wild` adds what the plain JSON parser chokes on: integers of
    hundreds of digits and nesting deeper than the parser's recursion limit."""
    doc = json.loads(json.dumps(doc))
    for _ in range(r.randint(1, 4)):
        paths = list(_paths(doc))
        path = r.choice(paths)
        op = r.choice(["replace", "replace", "delete", "wrap", "stringify", "add"])
        if not path:
            if op == "replace":
                doc = json_value(r)
            elif op == "wrap":
                doc = [doc]
            continue
        parent, key = _get(doc, path[:-1]), path[-1]
        if op == "replace":
            parent[key] = json_value(r)
        elif op == "delete":
            del parent[key]
        elif op == "wrap":
            parent[key] = [parent[key]]
        elif op == "stringify":
            parent[key] = str(parent[key])
        elif op == "add" and isinstance(parent[key], dict):
            parent[key][rand_text(r, 10)] = json_value(r)
    text = json.dumps(doc, allow_nan=True)
    if wild and r.randint(0, 9) == 0:
        if r.random() < 0.5:
            text = text.replace("0", "1" + "0" * r.choice([400, 5000]), 1)
        else:
            text = "[" * 3000 + text + "]" * 3000
    cut = r.randint(0, 9)
    if cut == 0 and text:
        text = text[: r.randint(0, len(text) - 1)]
    elif cut == 1 and text:
        pos = r.randint(0, len(text) - 1)
        text = text[:pos] + r.choice(["{", "}", "[", "]", ",", '"', ":", "\\", "\x00"]) + text[pos:]
    raw = text.encode()
    if r.randint(0, 19) == 0 and raw:
        raw = raw[:1] + b"\xff\xfe" + raw[1:]  # not UTF-8
    return raw


def _sigmf_meta(datatype: str, fs: float, channels: int) -> dict:
    g = {"core:datatype": datatype, "core:sample_rate": fs, "core:version": "1.2.0"}
    if channels != 1:
        g["core:num_channels"] = channels
    return {
        "global": g,
        "captures": [
            {
                "core:sample_start": 0,
                "core:frequency": 100.1e6,
                "core:datetime": "2026-12-01T12:00:00Z",
            }
        ],
        "annotations": [{"core:sample_start": 0, "core:sample_count": 10}],
    }


SIGMF_TYPES = {
    "cf32_le": 8,
    "ci16_le": 4,
    "ci8": 2,
    "cu8": 2,
    "rf32_le": 4,
    "ri16_le": 2,
    "ri8": 1,
    "cf64_le": 16,
    "rf32_be": 4,
    "cu16_le": 4,
}


@pytest.mark.fuzz
class TestSigMFReaderFuzz:
    @fuzz_settings("sigmf")
    @given(seed=SEEDS)
    def test_mutated_recordings(self, work_dir, seed):
        r = random.Random(seed)
        datatype = r.choice(sorted(SIGMF_TYPES))
        channels = r.choice([1, 1, 2])
        fs = r.choice([8000.0, 48000.0, 192000.0, 2.4e6])
        meta = _sigmf_meta(datatype, fs, channels)
        raw = mutate_json(r, meta, wild=True) if r.randint(0, 3) else (json.dumps(meta).encode())
        n_bytes = r.randint(0, 600 * SIGMF_TYPES[datatype])
        rng = np.random.default_rng(r.randint(0, 2**32 - 1))
        payload = rng.integers(0, 256, n_bytes, dtype=np.uint8).tobytes()
        if datatype.startswith(("cf", "rf")) and (r.random() < 0.5):
            payload = (0.5 * rng.standard_normal(n_bytes // 4)).astype(np.float32).tobytes()
        base = work_dir / "case"
        Path(str(base) + ".sigmf-meta").write_bytes(raw)
        Path(str(base) + ".sigmf-data").write_bytes(payload)
        name = str(base) + r.choice([".sigmf-meta", ".sigmf-data"])
        mode = r.choice(["iq", "audio", "beat"])
        with bounded(f"SigMF {datatype} case"):
            assert recorded_mode(name) in (None, "iq")
            check_recording(
                name,
                mode=mode,
                channel=r.randint(0, 2),
                block_frames=r.choice([1, 33, 4096]),
                engine=r.randint(0, 7) == 0,
            )


# --------------------------------------------------------------------------- sidecars

GOOD_SIDECAR = {
    "format": "swingmeter-recording",
    "version": 1,
    "written_by": "swingmeter test",
    "file": "case.wav",
    "container": "WAV",
    "subtype": "PCM_16",
    "mode": "audio",
    "fs_hz": 8000.0,
    "channels": 1,
    "device": "bench card",
    "device_channels": 2,
    "dial_hz": 7.1e6,
    "center_hz": None,
    "sideband": "upper",
    "harmonic": 1,
    "clock_ppm": 12.5,
    "profile": "bench-a",
    "start_utc": "2026-12-01T12:00:00.000Z",
    "stream_start": 0,
    "complete": True,
    "frames": 300,
    "gaps": [],
    "lost_frames": 0,
}


@pytest.mark.fuzz
class TestSidecarFuzz:
    @fuzz_settings("sidecar_open")
    @given(seed=SEEDS)
    def test_through_open_source(self, work_dir, seed):
        r = random.Random(seed)
        # our path: open_source reads the sidecar beside the recording (sidecar_metadata,
        # recorded_mode); whatever the sidecar holds, a result or an InputError
        raw = mutate_json(r, GOOD_SIDECAR, wild=True)
        wav = work_dir / "side.wav"
        if not wav.exists():
            wav.write_bytes(BASES[0][1])
        record.sidecar_path(wav).write_bytes(raw)
        with bounded("sidecar through open_source"):
            assert recorded_mode(wav) in (None, "audio", "beat", "iq")
            check_recording(wav, engine=r.randint(0, 7) == 0)

    @fuzz_settings("sidecar_read")
    @given(seed=SEEDS)
    def test_read_sidecar(self, work_dir, seed):
        r = random.Random(seed)
        # monitor.record.read_sidecar alone
        raw = mutate_json(r, GOOD_SIDECAR, wild=True)
        wav = work_dir / "direct.wav"
        record.sidecar_path(wav).write_bytes(raw)
        with bounded("read_sidecar"):
            check_sidecar(wav)


# --------------------------------------------------------------------------- profiles

GOOD_PROFILES = {
    "schema": 1,
    "profiles": {
        "bench-a": {
            "clock_ppm": 12.5,
            "deviation_hz_per_unit": 75000.0,
            "receiver_deemphasis": "50us",
        },
        "field-kit": {"clock_ppm": -3.0},
    },
}


@pytest.mark.fuzz
class TestProfilesFuzz:
    @fuzz_settings("profiles")
    @given(seed=SEEDS)
    def test_load(self, config_dir, seed):
        r = random.Random(seed)
        raw = mutate_json(r, GOOD_PROFILES, wild=True)
        config_dir.mkdir(parents=True, exist_ok=True)
        (config_dir / profiles.PROFILE_FILE).write_bytes(raw)
        with bounded("profiles.load"):
            check_profiles(["bench-a", "field-kit", "nope"])


# --------------------------------------------------------------------------- readings

CSV_COLUMNS = ["t_s", "frequency_hz", "uncertainty_hz", "gate_s", "contiguous", "file", "x"]
CSV_SPECIAL = [
    "",
    " ",
    "nan",
    "NaN",
    "inf",
    "-inf",
    "1e309",
    "-0",
    "1e-400",
    "0x10",
    "1_000",
    "true",
    "false",
    "yes",
    "maybe",
    "a.wav",
    '"',
    '""',
    "1,5",
    "\x00",
    "\u0661\u0662",
    "\uff11\uff12",
    "  12  ",
    "#",
    "\r",
]


def csv_cell(r: random.Random) -> str:
    k = r.randint(0, 3)
    if k == 0:
        return repr(r.choice([math.nan, math.inf, -math.inf, r.uniform(-1e6, 1e6), 1e300]))
    if k == 1:
        return str(r.randint(-(10**6), 10**6))
    if k == 2:
        return r.choice(CSV_SPECIAL)
    return rand_text(r, 10)


def readings_csv(r: random.Random) -> bytes:
    header = [r.choice(CSV_COLUMNS) for _ in range(r.randint(0, 7))]
    if r.randint(0, 4):
        header = ["t_s", "frequency_hz", *header]
    lines = [",".join(header)]
    t = 0.0
    for _ in range(r.randint(0, 20)):
        kind = r.randint(0, 9)
        if kind == 0:
            lines.append(r.choice(["# note", "", "   ", "#t_s,frequency_hz"]))
            continue
        cells = []
        for col in header:
            if kind >= 4 and col == "t_s":
                t += r.choice([0.5, 1.0, 0.0, -1.0])
                cells.append(repr(t))
            elif kind >= 4 and col == "frequency_hz":
                cells.append(repr(1000.0 + r.uniform(-1, 1)))
            else:
                cells.append(csv_cell(r))
        if r.randint(0, 9) == 0:
            cells = cells[: r.randint(0, len(cells))] + [
                csv_cell(r) for _ in range(r.randint(0, 2))
            ]
        lines.append(",".join(cells))
    if r.randint(0, 29) == 0:
        lines.append("0," + "9" * r.choice([10_000, 140_000]))  # huge line
    text = r.choice(["\n", "\r\n"]).join(lines) + "\n"
    raw = text.encode()
    if r.randint(0, 9) == 0:
        raw = b"\xef\xbb\xbf" + raw  # a UTF-8 byte-order mark
    if r.randint(0, 9) == 0 and raw:
        pos = r.randint(0, len(raw) - 1)
        raw = raw[:pos] + r.randbytes(r.randint(1, 3)) + raw[pos + 1 :]
    return raw


GOOD_READINGS = {
    "file": "osc.wav",
    "readings": [
        {
            "t_s": 0.0,
            "gate_s": 1.0,
            "frequency_hz": 1000.01,
            "uncertainty_hz": 0.002,
            "contiguous": True,
        },
        {
            "t_s": 1.0,
            "gate_s": 1.0,
            "frequency_hz": 1000.02,
            "uncertainty_hz": 0.002,
            "contiguous": True,
        },
        {"t_s": 2.0, "gate_s": 1.0, "frequency_hz": None, "contiguous": False},
    ],
}


@pytest.mark.fuzz
class TestReadingsFuzz:
    @fuzz_settings("readings_csv")
    @given(seed=SEEDS)
    def test_csv(self, work_dir, seed):
        raw = readings_csv(random.Random(seed))
        p = work_dir / "readings.csv"
        p.write_bytes(raw)
        with bounded("read_readings_csv"):
            try:
                result = readings_io.read_readings_csv(p)
            except InputError:
                return
            check_series(result)

    @fuzz_settings("readings_json")
    @given(seed=SEEDS)
    @example(seed=5_737_319_115)  # the document `[]` (once returned no series, no error)
    def test_json(self, work_dir, seed):
        r = random.Random(seed)
        doc = r.choice([GOOD_READINGS, [GOOD_READINGS, GOOD_READINGS], GOOD_READINGS["readings"]])
        p = work_dir / "readings.json"
        p.write_bytes(mutate_json(r, doc, wild=True))
        with bounded("read_readings_json"):
            try:
                result = readings_io.read_readings_json(p)
            except InputError:
                return
            if result == []:  # the document `[]`: no records; load_series must refuse it
                with pytest.raises(InputError, match="no readings"):
                    readings_io.load_series(p)
                return
            check_series(result)


# --------------------------------------------------------------------------- hand-made corpus


def _corpus(pattern: str) -> list:
    return [pytest.param(f, id=f.name) for f in sorted(CORPUS.glob(pattern))]


@pytest.mark.fuzz
class TestCorpus:
    def test_corpus_is_there(self):
        # make_corpus.py writes exactly the committed files
        sys.path.insert(0, str(CORPUS))
        try:
            import make_corpus
        finally:
            sys.path.remove(str(CORPUS))
        want = make_corpus.all_files()
        have = {p.name for p in CORPUS.iterdir() if p.name != "make_corpus.py" and p.is_file()}
        assert have >= set(want)
        for name, data in want.items():
            assert (CORPUS / name).read_bytes() == data, name

    @pytest.mark.parametrize("path", _corpus("wav-*.wav") + _corpus("rf64-*") + _corpus("*.w64"))
    @pytest.mark.parametrize("mode", ["audio", "iq"])
    def test_recordings(self, path, mode):
        with bounded(path.name):
            check_recording(path, mode=mode, engine=True)

    def test_nan_run_is_named(self):
        # wav-float-nan-run.wav: 12 NaN from frame 60, one inf at 150 (8 kHz)
        src = open_source(CORPUS / "wav-float-nan-run.wav")
        with src:
            y = np.concatenate([b.samples for b in src])
        assert y.size == 200 and np.count_nonzero(y[60:72]) == 0 and y[150] == 0
        assert src.warnings == [
            "13 NaN/Inf samples at 0.007-0.009 s, 0.019 s replaced by silence; "
            "gates across them are not joined"
        ]

    @pytest.mark.parametrize(
        "name",
        [
            "wav-rate-0.wav",
            "wav-rate-1.wav",
            "wav-rate-max.wav",
            "wav-channels-0.wav",
            "wav-no-data.wav",
            "wav-no-fmt.wav",
            "wav-float-all-nan.wav",
            "wav-fmt-short.wav",
            "wav-bad-magic.wav",
            "wav-float-huge-values.wav",
        ],
    )
    def test_unusable_recordings_say_so(self, name):
        with pytest.raises(InputError, match=name):
            with open_source(CORPUS / name) as src:
                for _ in src:
                    pass

    @pytest.mark.parametrize("path", _corpus("sigmf-*.sigmf-meta"))
    @pytest.mark.parametrize("mode", ["audio", "iq"])
    def test_sigmf(self, path, mode):
        with bounded(path.name):
            assert recorded_mode(path) in (None, "iq")
            check_recording(path, mode=mode, engine=True)

    @pytest.mark.parametrize(
        "name",
        [
            "sample-rate-string",
            "sample-rate-0",
            "sample-rate-negative",
            "sample-rate-huge-int",
            "sample-rate-nan",
            "sample-rate-bool",
            "channels-0",
            "channels-string",
            "global-list",
            "not-json",
            "deep-nesting",
            "data-missing",
            "data-3-bytes",
        ],
    )
    def test_unusable_sigmf_says_so(self, name):
        with pytest.raises(InputError, match=f"sigmf-{name}"):
            with open_source(CORPUS / f"sigmf-{name}.sigmf-meta", mode="iq") as src:
                for _ in src:
                    pass

    @pytest.mark.parametrize("path", _corpus("sidecar-*.wav"))
    def test_sidecars_through_open_source(self, path):
        # our path survives every sidecar, including those read_sidecar chokes on
        with bounded(path.name):
            assert recorded_mode(path) in (None, "audio", "beat", "iq")
            check_recording(path, engine=True)

    @pytest.mark.parametrize(
        "name",
        [
            "dial-string",
            "dial-nan",
            "clock-inf",
            "clock-huge",
            "clock-minus-1e6",
            "harmonic-0",
            "sideband-sideways",
            "profile-number",
            "center-list",
            "deep-nesting",
            "int-5000-digits",
            "clock-int-huge",
        ],
    )
    def test_bad_sidecar_fields_say_so(self, name):
        with pytest.raises(InputError, match="corrupt metadata sidecar"):
            open_source(CORPUS / f"sidecar-{name}.wav")

    @pytest.mark.parametrize("path", _corpus("sidecar-*.swingmeter.json"))
    def test_read_sidecar(self, path):
        with bounded(path.name):
            check_sidecar(path)

    @pytest.mark.parametrize("path", _corpus("profiles-*.json"))
    def test_profiles(self, path, config_dir):
        config_dir.mkdir(parents=True, exist_ok=True)
        (config_dir / profiles.PROFILE_FILE).write_bytes(path.read_bytes())
        with bounded(path.name):
            check_profiles(["bench-a"])

    @pytest.mark.parametrize("path", _corpus("readings-*.csv") + _corpus("readings-*.json"))
    def test_readings(self, path):
        reader = (
            readings_io.read_readings_json
            if path.suffix == ".json"
            else (readings_io.read_readings_csv)
        )
        with bounded(path.name):
            try:
                result = reader(path)
            except InputError:
                return
            check_series(result)

    def test_huge_csv_line(self, tmp_path):
        # a 140,000-character cell: beyond the csv module's field limit (131,072)
        p = tmp_path / "huge.csv"
        p.write_text("t_s,frequency_hz\n0," + "9" * 140_000 + "\n")
        with pytest.raises(InputError, match="not a readable CSV line"):
            readings_io.read_readings_csv(p)


# --------------------------------------------------------------------------- memory

HUGE_CLAIMS = [
    "wav-data-size-max.wav",
    "wav-riff-size-max.wav",
    "wav-chunk-size-max.wav",
    "wav-channels-1024.wav",
    "wav-channels-65535.wav",
    "rf64-ds64-huge.wav",
    "rf64-no-ds64.wav",
    "w64-size-huge.w64",
    "w64-data-size-huge.w64",
    "sigmf-channels-65535.sigmf-meta",
]
MEMORY_CAP_BYTES = 32 << 20  # the files are < 1 kB; a block of 65,536 stereo frames is 1 MiB


@pytest.mark.fuzz
class TestBoundedMemory:
    @pytest.mark.parametrize("name", HUGE_CLAIMS)
    def test_headers_claiming_huge_sizes(self, name):
        # tracemalloc sees numpy's buffers: reading must not allocate what a header claims
        tracemalloc.start()
        try:
            for mode in ("audio", "iq"):
                with bounded(name):
                    check_recording(CORPUS / name, mode=mode, block_frames=1 << 16)
            _, peak = tracemalloc.get_traced_memory()
        finally:
            tracemalloc.stop()
        assert peak < MEMORY_CAP_BYTES, f"{name}: peak {peak / 2**20:.1f} MiB"

    @pytest.mark.skipif(not sys.platform.startswith("linux"), reason="RLIMIT_AS is Linux's")
    def test_under_address_space_limit(self):
        # A child process imports everything, then caps its address space at what it
        # uses plus 256 MiB and reads every huge-claim file: an attempt to allocate a
        # claimed size fails there as MemoryError (the contract check reports it).
        code = f"""
import resource, sys
sys.path.insert(0, {str(Path(__file__).parent.parent)!r})
from tests.test_fuzz_readers import CORPUS, HUGE_CLAIMS, check_recording
import monitor.engine, monitor.fm_engine, scipy.signal
vm = [int(l.split()[1]) * 1024 for l in open("/proc/self/status") if l.startswith("VmSize")][0]
limit = vm + (256 << 20)
resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
for name in HUGE_CLAIMS:
    for mode in ("audio", "iq"):
        check_recording(CORPUS / name, mode=mode, block_frames=1 << 16, engine=True)
print("ok")
"""
        env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1")
        r = subprocess.run(
            [sys.executable, "-c", code], capture_output=True, text=True, timeout=300, env=env
        )
        assert r.returncode == 0 and r.stdout.strip() == "ok", r.stderr[-2000:]


# --------------------------------------------------------------------------- found by fuzzing


@pytest.mark.fuzz
class TestFoundByFuzzing:
    """Inputs that once crashed the JSON readers of other modules (RecursionError,
    ValueError, OverflowError, IndexError); since commit 08b6832 each ends in our error."""

    DEEP = "[" * 3000 + "]" * 3000
    DIGITS = '{"format": "swingmeter-recording", "fs_hz": ' + "9" * 5000 + "}"

    @pytest.mark.parametrize("text", [DEEP, DIGITS], ids=["deep", "5000-digits"])
    def test_read_sidecar(self, tmp_path, text):
        record.sidecar_path(tmp_path / "a.wav").write_text(text)
        with pytest.raises(InputError, match=r"a\.wav\.swingmeter\.json"):
            record.read_sidecar(tmp_path / "a.wav")

    @pytest.mark.parametrize(
        "text",
        [DEEP, '{"schema": 1, "profiles": {"bench-a": {"clock_ppm": 1' + "0" * 400 + "}}}"],
        ids=["deep", "1e400-int"],
    )
    def test_profiles(self, config_dir, text):
        config_dir.mkdir(parents=True, exist_ok=True)
        (config_dir / profiles.PROFILE_FILE).write_text(text)
        with pytest.raises(ProfileError, match=r"bench-profiles\.json"):
            profiles.load("bench-a")

    @pytest.mark.parametrize(
        "text",
        [DEEP, '{"readings": [{"t_s": 1' + "0" * 400 + "}]}", "[]"],
        ids=["deep", "1e400-int", "empty-list"],
    )
    def test_readings_json(self, tmp_path, text):
        (tmp_path / "r.json").write_text(text)
        with pytest.raises(InputError, match=r"r\.json"):
            readings_io.load_series(tmp_path / "r.json")


# --------------------------------------------------------------------------- the promise


@pytest.mark.fuzz  # in make test (the share's settings) and in make fuzz (the full ones)
class TestFuzzBudget:
    def test_full_run_is_at_least_100000_cases(self):
        assert sum(FULL_EXAMPLES.values()) >= FUZZ_TOTAL_PROMISED
        assert set(SHARE_EXAMPLES) == set(FULL_EXAMPLES)

    def test_every_reader_test_uses_its_budget(self):
        # each fuzz test carries the settings of its budget entry, and every entry has a
        # test: lowering max_examples on a test, or dropping one, fails here
        tests = {}
        for cls in (
            TestSoundFileReaderFuzz,
            TestSigMFReaderFuzz,
            TestSidecarFuzz,
            TestProfilesFuzz,
            TestReadingsFuzz,
        ):
            for attr in vars(cls).values():
                name = getattr(attr, "_fuzz_name", None)
                if name is not None:
                    tests[name] = attr
        assert set(tests) == set(FULL_EXAMPLES)
        want = FULL_EXAMPLES if FULL else SHARE_EXAMPLES
        for name, fn in tests.items():
            s = fn._hypothesis_internal_use_settings
            assert s.max_examples == want[name], name
            assert s.derandomize == (not FULL)
