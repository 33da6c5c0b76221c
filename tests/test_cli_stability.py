"""`swingmeter stability` end to end: NIST SP 1065 sets as readings files, file formats,
malformed input, the floor, the plot, and a recording made by sox."""

from __future__ import annotations

import json
import sys

import numpy as np
import pytest

from monitor.cli import main

# NIST SP 1065 (Riley 2008), pp. 107-108 [seen, via shared/guide/references.md].
NIST9 = [892, 809, 823, 798, 671, 644, 883, 903, 677]


def nist1000() -> list[float]:
    n = [1234567890]
    for _ in range(999):
        n.append(16807 * n[-1] % 2147483647)
    return [v / 2147483647 for v in n]


def write_csv(path, t, f, extra_cols=()):
    lines = ["t_s,frequency_hz" + "".join("," + c for c, _ in extra_cols)]
    for i, (a, b) in enumerate(zip(t, f, strict=True)):
        cells = [repr(float(a)), "" if b is None else repr(float(b))]
        cells += [str(v[i]) for _, v in extra_cols]
        lines.append(",".join(cells))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def run_json(capsys, *argv) -> dict:
    assert main(["stability", *map(str, argv), "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def fail(capsys, *argv) -> str:
    assert main(["stability", *map(str, argv)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1, err  # one line
    return err


def rel(a, b) -> float:
    return abs(a - b) / abs(b)


class TestNistSets:
    def test_nine_point_set(self, tmp_path, capsys):
        # f = f0 (1 + y) with f0 = 1 Hz and --nominal 1: y = f - 1 exactly in binary
        # floating point for these integers. Published: ADEV(1) 91.22945, ADEV(2)
        # 115.8082, OADEV(2) 85.95287, MDEV(2) 74.78849 (NIST SP 1065 pp. 107-108); 1e-6.
        p = write_csv(tmp_path / "nist9.csv", range(9), [1.0 + y for y in NIST9])
        d = run_json(capsys, p, "--nominal", 1, "--taus", "1,2")
        assert d["adev"]["taus_s"] == [1.0, 2.0]
        assert rel(d["adev_nonoverlapping"]["values"][0], 91.22945) < 1e-6
        assert rel(d["adev_nonoverlapping"]["values"][1], 115.8082) < 1e-6
        assert rel(d["adev"]["values"][1], 85.95287) < 1e-6
        assert rel(d["mdev"]["values"][1], 74.78849) < 1e-6

    def test_thousand_point_set(self, tmp_path, capsys):
        # Published at tau = 1, 10, 100 (NIST SP 1065); 1e-6 relative. f = 1 + y keeps
        # y to about 1e-16 absolute (y in (0, 1)).
        y = nist1000()
        p = write_csv(tmp_path / "nist1000.csv", range(1000), [1.0 + v for v in y])
        d = run_json(capsys, p, "--nominal", "1", "--taus", "1,10,100")
        want = {
            "adev_nonoverlapping": (0.2922319, 0.09965736, 0.03897804),
            "adev": (0.2922319, 0.09159953, 0.03241343),
            "mdev": (0.2922319, 0.06172376, 0.02170921),
        }
        for key, vals in want.items():
            assert d[key]["taus_s"] == [1.0, 10.0, 100.0]
            for got, ref in zip(d[key]["values"], vals, strict=True):
                assert rel(got, ref) < 1e-6, key

    def test_json_keys(self, tmp_path, capsys):
        p = write_csv(tmp_path / "r.csv", range(1000), [1.0 + v for v in nist1000()])
        d = run_json(capsys, p, "--nominal", "1")
        for key in ("hz_per_s", "ppm_per_min"):
            assert key in d["drift"]
        assert "warmup_s" in d
        for c in ("adev", "mdev", "tdev"):
            n = len(d[c]["taus_s"])
            assert n >= 8 and len(d[c]["values"]) == n
            assert len(d[c]["lower"]) == n and len(d[c]["upper"]) == n
            assert all(
                lo < v < hi
                for lo, v, hi in zip(d[c]["lower"], d[c]["values"], d[c]["upper"], strict=True)
            )
        # octave taus
        assert d["adev"]["taus_s"][:4] == [1.0, 2.0, 4.0, 8.0]
        assert d["quote"]["statistic"] == "oadev" and d["quote"]["gate_s"] == 1.0
        assert "Pi-type" in d["interpretation"]


class TestInputs:
    def test_json_object_and_lists(self, tmp_path, capsys):
        rd = [
            {"t_s": float(i), "frequency_hz": 1000.0 + 1e-3 * (i % 3), "uncertainty_hz": 1e-4}
            for i in range(64)
        ]
        one = tmp_path / "one.json"
        one.write_text(json.dumps({"file": "a.wav", "readings": rd}))
        d1 = run_json(capsys, one)
        plain = tmp_path / "plain.json"
        plain.write_text(json.dumps(rd))
        d2 = run_json(capsys, plain)
        assert d1["adev"]["values"] == d2["adev"]["values"]
        many = tmp_path / "many.json"
        many.write_text(
            json.dumps([{"file": "a.wav", "readings": rd}, {"file": "b.wav", "readings": rd[:40]}])
        )
        err = fail(capsys, many)
        assert "holds 2 recordings" in err and "--record" in err
        d3 = run_json(capsys, many, "--record", "2")
        assert d3["readings"]["count"] == 40 and "b.wav" in d3["source"]

    def test_csv_with_file_column_and_gaps(self, tmp_path, capsys, rng):
        t = list(range(30)) + list(range(40, 100))
        f = list(1e3 + 1e-4 * rng.standard_normal(len(t)))
        f[5] = None
        p = write_csv(tmp_path / "g.csv", t, f, [("file", ["x.wav"] * len(t))])
        d = run_json(capsys, p)
        assert d["readings"]["missing_count"] == 1
        assert d["readings"]["gap_count"] == 2
        assert any("gaps" in w for w in d["warnings"])

    def test_contiguous_column_marks_break(self, tmp_path, capsys):
        t = range(50)
        flags = ["True"] * 50
        flags[20] = "False"
        # constant readings: every deviation is 0, and nothing breaks on it
        p = write_csv(tmp_path / "c.csv", t, [1e3] * 50, [("contiguous", flags)])
        d = run_json(capsys, p)
        assert d["readings"]["segments"] == [[0, 20], [20, 50]]
        assert set(d["adev"]["values"]) == {0.0} and d["noise"]["noise_type"] == "unknown"

    def test_overlapping_gates_said(self, tmp_path, capsys, rng):
        t = np.arange(200.0)
        f = 1e3 + 1e-4 * rng.standard_normal(200)
        p = write_csv(tmp_path / "o.csv", t, f, [("gate_s", ["2.0"] * 200)])
        d = run_json(capsys, p)
        assert d["tau0_s"] == 1.0
        assert any("overlap" in w for w in d["warnings"])
        p = write_csv(tmp_path / "dead.csv", t * 2, f, [("gate_s", ["1.0"] * 200)])
        d = run_json(capsys, p)
        assert d["tau0_s"] == 2.0 and any("dead time" in w for w in d["warnings"])

    def test_counter_floor_from_uncertainty(self, tmp_path, capsys, rng):
        # Allan variance definition (NIST SP 1065 eq. 2): independent readings of standard
        # deviation u give AVAR(tau0) = u^2/f^2. Monte-Carlo: 4000 readings, 5%.
        n, u = 4000, 2e-3
        f = 1e3 + u * rng.standard_normal(n)
        p = write_csv(tmp_path / "u.csv", np.arange(n), f, [("uncertainty_hz", [u] * n)])
        d = run_json(capsys, p, "--nominal", "1k")
        assert d["counter_floor_adev_tau0"] == pytest.approx(u / 1e3, rel=1e-12)
        assert d["adev"]["values"][0] == pytest.approx(u / 1e3, rel=0.05)

    def test_malformed(self, tmp_path, capsys):
        p = tmp_path / "nohead.csv"
        p.write_text("time,freq\n0,1\n")
        err = fail(capsys, p)
        assert "nohead.csv" in err and "no 't_s' column" in err
        p = tmp_path / "bad.csv"
        p.write_text("t_s,frequency_hz\n0,1000\n1,abc\n")
        err = fail(capsys, p)
        assert "bad.csv:3" in err and "frequency_hz" in err
        p = tmp_path / "back.csv"
        p.write_text("t_s,frequency_hz\n0,1000\n2,1000\n1,1000\n")
        err = fail(capsys, p)
        assert "back.csv:4" in err and "increase" in err
        p = tmp_path / "cells.csv"
        p.write_text("t_s,frequency_hz\n0,1000,7\n")
        assert "3 cells" in fail(capsys, p)
        p = tmp_path / "bad.json"
        p.write_text("{not json")
        assert "invalid JSON" in fail(capsys, p)
        p = tmp_path / "shape.json"
        p.write_text(json.dumps({"summary": {}}))
        assert "'readings'" in fail(capsys, p)
        p = tmp_path / "empty.csv"
        p.write_text("")
        assert "empty file" in fail(capsys, p)
        assert "no such file" in fail(capsys, tmp_path / "missing.csv")
        assert "no such file" in fail(capsys, tmp_path / "missing.wav")

    def test_too_few_and_options(self, tmp_path, capsys):
        p = write_csv(tmp_path / "two.csv", [0, 1], [1000.0, 1000.0])
        assert "at least 3" in fail(capsys, p)
        p = write_csv(tmp_path / "ok.csv", range(100), [1e3] * 100)
        assert "holds 0 readings" in fail(capsys, p, "--span", 500, 600)
        assert "give INPUT" in fail(capsys)


class TestFloor:
    def test_reference_beside_dut(self, tmp_path, capsys, rng):
        n = 2048
        t = np.arange(n, dtype=float)
        ref_y = 1e-9 * rng.standard_normal(n)
        dut_y = ref_y + 1e-7 * np.cumsum(rng.standard_normal(n)) / 30
        ref = write_csv(tmp_path / "ref.csv", t, 1e3 * (1 + ref_y))
        dut = write_csv(tmp_path / "dut.csv", t, 10e6 * (1 + dut_y))
        d = run_json(capsys, dut, "--reference", ref)
        assert d["role"] == "dut"
        assert d["reference"]["source"].endswith("ref.csv")
        cmp_ = d["comparison"]
        assert [c["tau_s"] for c in cmp_] == d["adev"]["taus_s"]
        # fractional floor: ADEV of the reference tone alone (white FM, 1e-9 at 1 s)
        assert cmp_[0]["floor_oadev"] == pytest.approx(d["reference"]["adev"]["values"][0])
        assert cmp_[-1]["ratio"] > 3 and not cmp_[-1]["at_floor"]

    def test_floor_alone_and_table(self, tmp_path, capsys, rng):
        t = np.arange(512.0)
        ref = write_csv(tmp_path / "ref.csv", t, 1e3 * (1 + 1e-8 * rng.standard_normal(512)))
        assert main(["stability", "--reference", str(ref)]) == 0
        out = capsys.readouterr().out
        assert "floor:" in out and "OADEV" in out and "quote:" in out
        assert "Pi-type" in out


class TestPlot:
    def test_writes_png(self, tmp_path, capsys, rng):
        t = np.arange(600.0)
        p = write_csv(
            tmp_path / "r.csv", t, 1e6 + 0.1 * np.exp(-t / 100) + 1e-4 * rng.standard_normal(600)
        )
        ref = write_csv(tmp_path / "f.csv", t, 1e3 + 1e-6 * rng.standard_normal(600))
        png = tmp_path / "s.png"
        d = run_json(capsys, p, "--reference", ref, "--plot", png)
        assert d["plot"] == str(png)
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"

    def test_matplotlib_missing(self, tmp_path, capsys, monkeypatch):
        p = write_csv(tmp_path / "r.csv", range(100), [1e3] * 100)
        monkeypatch.setitem(sys.modules, "matplotlib", None)  # import now fails
        err = fail(capsys, p, "--plot", tmp_path / "x.png")
        assert "matplotlib" in err and "swingmeter[plot]" in err


class TestHelp:
    def test_help_has_example_and_defaults(self, capsys):
        with pytest.raises(SystemExit):
            main(["stability", "--help"])
        out = capsys.readouterr().out
        assert "swingmeter stability readings.csv" in out
        assert "default: 1 ppm/min" in out and "--reference" in out


class TestRecording:
    # Last, as asked: a recording is analysed first through monitor.engine.analyze_file.
    def test_sox_tone(self, tmp_path, capsys, sox):
        engine = pytest.importorskip("monitor.engine")
        if not hasattr(engine, "analyze_file"):
            pytest.skip("monitor.engine.analyze_file not written yet")
        wav = tmp_path / "tone.wav"
        # sox is an independent generator with an exact sample clock: a steady tone.
        sox("-n", "-r", 48000, "-b", 24, wav, "synth", 8, "sine", 1000.25, "vol", 0.5)
        d = run_json(capsys, wav, "--gate", 1)
        assert d["readings"]["count"] == 8 and d["tau0_s"] == 1.0
        assert d["nominal_hz"] == pytest.approx(1000.25, abs=1e-4)
        assert abs(d["drift"]["hz_per_s"]) < 1e-5
        assert d["adev"]["values"][0] < 1e-7

    def test_analyze_outputs_round_trip(self, tmp_path, capsys, sox):
        # The files `swingmeter analyze --readings --json` and `--csv` write read back to
        # the same figures as analysing the recording directly.
        engine = pytest.importorskip("monitor.engine")
        if not hasattr(engine, "analyze_file"):
            pytest.skip("monitor.engine.analyze_file not written yet")
        pytest.importorskip("monitor.commands.analyze")
        wav = tmp_path / "tone.wav"
        sox("-n", "-r", 48000, "-b", 24, wav, "synth", 6, "sine", 1500.5, "vol", 0.5)
        direct = run_json(capsys, wav)
        assert main(["analyze", str(wav), "--readings", "--json"]) == 0
        js = tmp_path / "r.json"
        js.write_text(capsys.readouterr().out)
        csv_path = tmp_path / "r.csv"
        assert main(["analyze", str(wav), str(wav), "--csv", str(csv_path)]) == 0
        capsys.readouterr()
        from_json = run_json(capsys, js)
        assert "holds 2 recordings" in fail(capsys, csv_path)
        from_csv = run_json(capsys, csv_path, "--record", "2")
        for d in (from_json, from_csv):
            assert d["readings"]["count"] == direct["readings"]["count"] == 6
            np.testing.assert_allclose(d["adev"]["values"], direct["adev"]["values"], rtol=1e-9)


@pytest.mark.fuzz
class TestFuzzedFiles:
    # Mutated readings files: the command either works or says what is wrong in one line
    # (exit 2); it never fails with a traceback-style exit 1. Seeded; SWINGMETER_FUZZ=full
    # runs many more.
    def test_mutations(self, tmp_path, capsys):
        import os

        rng = np.random.default_rng(99)
        trials = 2000 if os.environ.get("SWINGMETER_FUZZ") == "full" else 40
        rd = [{"t_s": float(i), "frequency_hz": 1e3 + 1e-4 * i, "uncertainty_hz": 1e-5}
              for i in range(40)]  # fmt: skip
        seeds = {
            "csv": write_csv(
                tmp_path / "s.csv", range(40), [1e3 + 1e-4 * i for i in range(40)]
            ).read_bytes(),
            "json": json.dumps({"file": "x.wav", "readings": rd}).encode(),
        }
        alphabet = b'0123456789.,-e\n"{}[]:nulNaN x\xff'
        for k in range(trials):
            ext = ("csv", "json")[k % 2]
            data = bytearray(seeds[ext])
            for _ in range(int(rng.integers(1, 8))):
                op = rng.integers(3)
                pos = int(rng.integers(len(data))) if data else 0
                if op == 0 and data:
                    del data[pos : pos + int(rng.integers(1, 20))]
                elif op == 1:
                    data[pos:pos] = bytes(rng.choice(list(alphabet), int(rng.integers(1, 6))))
                elif data:
                    data[pos] = int(rng.choice(list(alphabet)))
            p = tmp_path / f"m{k}.{ext}"
            p.write_bytes(bytes(data))
            code = main(["stability", str(p), "--json"])
            captured = capsys.readouterr()
            assert code in (0, 2), (p.read_bytes()[:200], captured.err)
            if code == 2:
                assert captured.err.count("\n") == 1
