"""Writes the hand-made malformed inputs of this folder (run it to regenerate them).

Each file breaks one thing a reader must survive: a header field set to 0, to its largest
value or to a wrong code; chunks missing, doubled or out of order; sizes that promise more
than the file holds; JSON of the wrong shape or type. The name says what is broken. The
files are small (a few hundred bytes); `tests/test_fuzz_readers.py` feeds each one to its
reader and checks that it ends in a result or one of our own errors.

Usage: python tests/fuzz_corpus/make_corpus.py
"""

from __future__ import annotations

import json
import math
import struct
from pathlib import Path

HERE = Path(__file__).parent
N = 200  # frames in each recording


def _tone16(n: int = N, channels: int = 1) -> bytes:
    # A 1 kHz tone at 8 kHz, 16-bit, half scale: eight samples per period.
    one = [round(16383 * math.sin(2 * math.pi * k / 8)) for k in range(n)]
    frames = [v for v in one for _ in range(channels)]
    return struct.pack(f"<{len(frames)}h", *frames)


def _float32(values) -> bytes:
    return struct.pack(f"<{len(values)}f", *values)


def _chunk(cid: bytes, payload: bytes, size: int | None = None) -> bytes:
    size = len(payload) if size is None else size
    pad = b"\0" if len(payload) % 2 else b""
    return cid + struct.pack("<I", size & 0xFFFFFFFF) + payload + pad


def _fmt(tag=1, channels=1, rate=8000, bits=16, block=None, byterate=None) -> bytes:
    block = channels * bits // 8 if block is None else block
    byterate = rate * block if byterate is None else byterate
    return struct.pack(
        "<HHIIHH", tag, channels & 0xFFFF, rate & 0xFFFFFFFF, byterate & 0xFFFFFFFF, block, bits
    )


def _riff(*chunks: bytes, riff_size: int | None = None, magic: bytes = b"RIFF") -> bytes:
    body = b"WAVE" + b"".join(chunks)
    size = len(body) if riff_size is None else riff_size
    return magic + struct.pack("<I", size & 0xFFFFFFFF) + body


def _extensible(channels=2, rate=8000, bits=16, guid_code=1, valid=16) -> bytes:
    base = _fmt(0xFFFE, channels, rate, bits)
    guid = struct.pack("<H", guid_code) + bytes.fromhex("000000001000800000aa00389b71")
    return base + struct.pack("<HHI", 22, valid, 3) + guid


def wav_files() -> dict[str, bytes]:
    data = _tone16()
    ok_fmt = _chunk(b"fmt ", _fmt())
    ok_data = _chunk(b"data", data)
    nan_run = [0.5 * math.sin(2 * math.pi * k / 8) for k in range(N)]
    for k in range(60, 72):
        nan_run[k] = math.nan
    nan_run[150] = math.inf
    return {
        "wav-rate-0.wav": _riff(_chunk(b"fmt ", _fmt(rate=0)), ok_data),
        "wav-rate-1.wav": _riff(_chunk(b"fmt ", _fmt(rate=1)), ok_data),
        "wav-rate-max.wav": _riff(_chunk(b"fmt ", _fmt(rate=0xFFFFFFFF)), ok_data),
        "wav-rate-negative.wav": _riff(_chunk(b"fmt ", _fmt(rate=-8000)), ok_data),
        "wav-channels-0.wav": _riff(_chunk(b"fmt ", _fmt(channels=0, block=2)), ok_data),
        "wav-channels-65535.wav": _riff(_chunk(b"fmt ", _fmt(channels=65535, block=2)), ok_data),
        "wav-channels-1024.wav": _riff(_chunk(b"fmt ", _fmt(channels=1024)), ok_data),
        "wav-bits-0.wav": _riff(_chunk(b"fmt ", _fmt(bits=0, block=2)), ok_data),
        "wav-bits-12.wav": _riff(_chunk(b"fmt ", _fmt(bits=12, block=2)), ok_data),
        "wav-bits-255.wav": _riff(_chunk(b"fmt ", _fmt(bits=255, block=2)), ok_data),
        "wav-blockalign-0.wav": _riff(_chunk(b"fmt ", _fmt(block=0)), ok_data),
        "wav-format-unknown.wav": _riff(_chunk(b"fmt ", _fmt(tag=0x1234)), ok_data),
        "wav-format-float-16bit.wav": _riff(_chunk(b"fmt ", _fmt(tag=3, bits=16)), ok_data),
        "wav-format-alaw-garbage.wav": _riff(_chunk(b"fmt ", _fmt(tag=6, bits=8)), ok_data),
        "wav-fmt-short.wav": _riff(_chunk(b"fmt ", _fmt()[:10]), ok_data),
        "wav-data-size-max.wav": _riff(ok_fmt, _chunk(b"data", data, size=0xFFFFFFFF)),
        "wav-data-size-odd.wav": _riff(ok_fmt, _chunk(b"data", data[:-1])),
        "wav-riff-size-0.wav": _riff(ok_fmt, ok_data, riff_size=0),
        "wav-riff-size-max.wav": _riff(ok_fmt, ok_data, riff_size=0xFFFFFFFF),
        "wav-no-data.wav": _riff(ok_fmt),
        "wav-no-fmt.wav": _riff(ok_data),
        "wav-data-before-fmt.wav": _riff(ok_data, ok_fmt),
        "wav-two-fmt.wav": _riff(ok_fmt, _chunk(b"fmt ", _fmt(channels=2, rate=96000)), ok_data),
        "wav-two-data.wav": _riff(ok_fmt, ok_data, _chunk(b"data", data[:100])),
        "wav-chunk-size-max.wav": _riff(ok_fmt, _chunk(b"LIST", b"INFO", 0xFFFFFFF0), ok_data),
        "wav-truncated-in-sample.wav": _riff(ok_fmt, ok_data)[:-3],
        "wav-truncated-in-fmt.wav": _riff(ok_fmt, ok_data)[:30],
        "wav-garbage-appended.wav": _riff(ok_fmt, ok_data) + bytes(range(256)) * 2,
        "wav-bad-magic.wav": _riff(ok_fmt, ok_data, magic=b"RIFX"),
        "wav-extensible-bad-guid.wav": _riff(
            _chunk(b"fmt ", _extensible(guid_code=0x7777)), _chunk(b"data", _tone16(100, 2))
        ),
        "wav-extensible-valid-bits-0.wav": _riff(
            _chunk(b"fmt ", _extensible(valid=0)), _chunk(b"data", _tone16(100, 2))
        ),
        "wav-float-nan-run.wav": _riff(
            _chunk(b"fmt ", _fmt(tag=3, bits=32)), _chunk(b"data", _float32(nan_run))
        ),
        "wav-float-all-nan.wav": _riff(
            _chunk(b"fmt ", _fmt(tag=3, bits=32)), _chunk(b"data", _float32([math.nan] * N))
        ),
        "wav-float-huge-values.wav": _riff(
            _chunk(b"fmt ", _fmt(tag=3, bits=32)),
            _chunk(b"data", _float32([3e38 * (-1) ** k for k in range(N)])),
        ),
        "rf64-no-ds64.wav": _riff(ok_fmt, _chunk(b"data", data, 0xFFFFFFFF), magic=b"RF64"),
        "rf64-ds64-huge.wav": _riff(
            _chunk(b"ds64", struct.pack("<QQQI", 2**62, 2**62, 2**61, 0)),
            ok_fmt,
            _chunk(b"data", data, 0xFFFFFFFF),
            riff_size=0xFFFFFFFF,
            magic=b"RF64",
        ),
        "rf64-ds64-short.wav": _riff(
            _chunk(b"ds64", b"\1\2\3"), ok_fmt, ok_data, riff_size=0xFFFFFFFF, magic=b"RF64"
        ),
        "w64-size-huge.w64": _w64(data, riff_size=2**63 - 1),
        "w64-data-size-huge.w64": _w64(data, data_size=2**62),
        "w64-bad-guid.w64": b"riff" + bytes(12) + _w64(data)[16:],
        "w64-truncated.w64": _w64(data)[:60],
    }


_W64_RIFF = b"riff" + bytes.fromhex("2e91cf11a5d628db04c10000")
_W64_WAVE = b"wave" + bytes.fromhex("f3acd3118cd100c04f8edb8a")
_W64_FMT = b"fmt " + bytes.fromhex("f3acd3118cd100c04f8edb8a")
_W64_DATA = b"data" + bytes.fromhex("f3acd3118cd100c04f8edb8a")


def _w64chunk(guid: bytes, payload: bytes, size: int | None = None) -> bytes:
    size = len(payload) + 24 if size is None else size
    pad = bytes(-len(payload) % 8)
    return guid + struct.pack("<Q", size) + payload + pad


def _w64(data: bytes, riff_size=None, data_size=None) -> bytes:
    body = _W64_WAVE + _w64chunk(_W64_FMT, _fmt()) + _w64chunk(_W64_DATA, data, data_size)
    size = len(body) + 24 if riff_size is None else riff_size
    return _W64_RIFF + struct.pack("<Q", size) + body


def _meta(**global_) -> dict:
    g = {"core:datatype": "cf32_le", "core:sample_rate": 48000.0, "core:version": "1.2.0"}
    g.update(global_)
    return {
        "global": {k: v for k, v in g.items() if v is not ...},
        "captures": [{"core:sample_start": 0, "core:frequency": 100.1e6}],
        "annotations": [],
    }


def sigmf_files() -> dict[str, bytes]:
    cf32 = _float32([0.5, 0.0, 0.0, 0.5, -0.5, 0.0, 0.0, -0.5] * 50)
    cases = {
        "sample-rate-string": _meta(**{"core:sample_rate": "48000"}),
        "sample-rate-0": _meta(**{"core:sample_rate": 0}),
        "sample-rate-negative": _meta(**{"core:sample_rate": -48000}),
        "sample-rate-huge-int": '{"global": {"core:datatype": "cf32_le", "core:version": '
        '"1.2.0", "core:sample_rate": 1' + "0" * 400 + '}, "captures": [], "annotations": []}',
        "sample-rate-nan": _meta(**{"core:sample_rate": math.nan}),
        "sample-rate-missing": _meta(**{"core:sample_rate": ...}),
        "sample-rate-bool": _meta(**{"core:sample_rate": True}),
        "datatype-unknown": _meta(**{"core:datatype": "cq7_xe"}),
        "datatype-number": _meta(**{"core:datatype": 32}),
        "datatype-missing": _meta(**{"core:datatype": ...}),
        "channels-0": _meta(**{"core:num_channels": 0}),
        "channels-65535": _meta(**{"core:num_channels": 65535}),
        "channels-string": _meta(**{"core:num_channels": "2"}),
        "channels-float": _meta(**{"core:num_channels": 1.5}),
        "global-list": {"global": [1, 2], "captures": [], "annotations": []},
        "captures-dict": {**_meta(), "captures": {"core:sample_start": 0}},
        "capture-number": {**_meta(), "captures": [7]},
        "capture-start-negative": {**_meta(), "captures": [{"core:sample_start": -100}]},
        "capture-frequency-string": {**_meta(), "captures": [{"core:frequency": "FM"}]},
        "top-level-list": [_meta()],
        "not-json": "{ this is not json",
        "deep-nesting": "[" * 3000 + "]" * 3000,
        "empty-object": {},
    }
    out = {}
    for name, meta in cases.items():
        text = meta if isinstance(meta, str) else json.dumps(meta)
        out[f"sigmf-{name}.sigmf-meta"] = text.encode()
        out[f"sigmf-{name}.sigmf-data"] = cf32
    ok = json.dumps(_meta()).encode()
    out["sigmf-data-odd-length.sigmf-meta"] = ok
    out["sigmf-data-odd-length.sigmf-data"] = cf32[:-3]
    out["sigmf-data-3-bytes.sigmf-meta"] = ok
    out["sigmf-data-3-bytes.sigmf-data"] = b"\1\2\3"
    out["sigmf-data-missing.sigmf-meta"] = ok
    return out


def _sidecar(**fields) -> dict:
    d = {
        "format": "swingmeter-recording",
        "version": 1,
        "mode": "audio",
        "fs_hz": 8000.0,
        "channels": 1,
        "harmonic": 1,
        "clock_ppm": 0.0,
        "sideband": "upper",
        "dial_hz": None,
        "center_hz": None,
        "profile": None,
    }
    d.update(fields)
    return d


def sidecar_files() -> dict[str, bytes]:
    wav = _riff(_chunk(b"fmt ", _fmt()), _chunk(b"data", _tone16()))
    cases = {
        "dial-string": _sidecar(dial_hz="7.1 MHz"),
        "dial-nan": _sidecar(dial_hz=math.nan),
        "clock-inf": _sidecar(clock_ppm=math.inf),
        "clock-huge": _sidecar(clock_ppm=1e300),
        "clock-minus-1e6": _sidecar(clock_ppm=-1e6),
        "harmonic-0": _sidecar(harmonic=0),
        "harmonic-negative": _sidecar(harmonic=-3),
        "sideband-sideways": _sidecar(sideband="sideways"),
        "profile-number": _sidecar(profile=12),
        "center-list": _sidecar(center_hz=[1, 2]),
        "mode-unknown": _sidecar(mode="spectrum"),
        "fs-zero": _sidecar(fs_hz=0),
        "channels-0": _sidecar(channels=0),
        "format-wrong": _sidecar(format="something-else"),
        "list": [1, 2, 3],
        "not-json": "{ this is not json",
        "latin1": b"\xff\xfe{\x00",
        "deep-nesting": "[" * 3000 + "]" * 3000,
        "int-5000-digits": '{"format": "swingmeter-recording", "fs_hz": ' + "9" * 5000 + "}",
        "clock-int-huge": '{"format": "swingmeter-recording", "mode": "audio", "fs_hz": 8000, '
        '"channels": 1, "harmonic": 1, "sideband": "upper", "clock_ppm": 1' + "0" * 400 + "}",
    }
    out = {}
    for name, side in cases.items():
        if isinstance(side, bytes):
            text = side
        else:
            text = (side if isinstance(side, str) else json.dumps(side)).encode()
        out[f"sidecar-{name}.wav"] = wav
        out[f"sidecar-{name}.wav.swingmeter.json"] = text
    return out


def profile_files() -> dict[str, bytes]:
    good = {"clock_ppm": 12.5, "deviation_hz_per_unit": 75000.0}
    cases = {
        "not-json": "{ this is not json",
        "list": [],
        "profiles-list": {"schema": 1, "profiles": ["bench-a"]},
        "profile-string": {"schema": 1, "profiles": {"bench-a": "fast"}},
        "clock-string": {"schema": 1, "profiles": {"bench-a": {**good, "clock_ppm": "12"}}},
        "clock-nan": {"schema": 1, "profiles": {"bench-a": {**good, "clock_ppm": math.nan}}},
        "clock-bool": {"schema": 1, "profiles": {"bench-a": {**good, "clock_ppm": True}}},
        "clock-int-huge": '{"schema": 1, "profiles": {"bench-a": {"clock_ppm": 1'
        + "0" * 400
        + "}}}",
        "int-5000-digits": '{"schema": ' + "9" * 5000 + ', "profiles": {}}',
        "deep-nesting": "[" * 3000 + "]" * 3000,
        "latin1": b"\xff\xfe{\x00",
    }
    out = {}
    for name, prof in cases.items():
        if isinstance(prof, bytes):
            out[f"profiles-{name}.json"] = prof
        else:
            out[f"profiles-{name}.json"] = (
                prof if isinstance(prof, str) else json.dumps(prof)
            ).encode()
    return out


def readings_files() -> dict[str, bytes]:
    csv_cases = {
        "no-header": "1.0,1000.0\n2.0,1000.1\n",
        "missing-frequency": "t_s,uncertainty_hz\n0,0.1\n",
        "bad-number": "t_s,frequency_hz\n0,1000\n1,ten thousand\n",
        "nan-time": "t_s,frequency_hz\nnan,1000\n",
        "inf-frequency": "t_s,frequency_hz\n0,inf\n",
        "negative-frequency": "t_s,frequency_hz\n0,-1000\n",
        "time-backwards": "t_s,frequency_hz\n1,1000\n0,1000\n",
        "cells-missing": "t_s,frequency_hz,uncertainty_hz\n0,1000\n",
        "cells-extra": "t_s,frequency_hz\n0,1000,5,6\n",
        "unterminated-quote": 't_s,frequency_hz\n0,"1000\n',
        "nul-byte": "t_s,frequency_hz\n0,1000\x00\n",
        "huge-number": "t_s,frequency_hz\n0,1e999\n",
        "gate-zero": "t_s,frequency_hz,gate_s\n0,1000,0\n",
        "contiguous-maybe": "t_s,frequency_hz,contiguous\n0,1000,maybe\n",
        "header-only": "t_s,frequency_hz\n",
        "comments-only": "# nothing here\n# still nothing\n",
        "latin1": "t_s,frequency_hz\n0,1000\n".encode("utf-16"),
    }
    json_cases = {
        "not-json": "{ this is not json",
        "readings-dict": {"readings": {"t_s": 0}},
        "reading-number": {"readings": [1, 2]},
        "no-time": {"readings": [{"frequency_hz": 1000}]},
        "time-string": {"readings": [{"t_s": "zero", "frequency_hz": 1000}]},
        "time-bool": {"readings": [{"t_s": True, "frequency_hz": 1000}]},
        "frequency-nan": {"readings": [{"t_s": 0, "frequency_hz": math.nan}]},
        "number-string-top": "12",
        "time-int-huge": '{"readings": [{"t_s": 1' + "0" * 400 + ', "frequency_hz": 1}]}',
        "int-5000-digits": '{"readings": [{"t_s": ' + "9" * 5000 + "}]}",
        "deep-nesting": "[" * 3000 + "]" * 3000,
    }
    out = {}
    for name, text in csv_cases.items():
        out[f"readings-{name}.csv"] = text if isinstance(text, bytes) else text.encode()
    for name, doc in json_cases.items():
        text = doc if isinstance(doc, str) else json.dumps(doc)
        out[f"readings-{name}.json"] = text.encode()
    return out


def all_files() -> dict[str, bytes]:
    out = {}
    for part in (wav_files, sigmf_files, sidecar_files, profile_files, readings_files):
        out.update(part())
    return out


def main() -> None:
    for name, data in all_files().items():
        (HERE / name).write_bytes(data)


if __name__ == "__main__":
    main()
