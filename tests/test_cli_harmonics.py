"""`swingmeter harmonics` end to end: forward and inverse listings, JSON, warnings on
protected frequencies, frequency syntax, errors, and a fundamental measured by analysis
of a sox recording."""

from __future__ import annotations

import json

import pytest

from monitor.cli import main


@pytest.fixture(autouse=True)
def _wide_terminal(monkeypatch):
    # rich wraps at the terminal width; a wide one keeps phrases on one line for the checks
    monkeypatch.setenv("COLUMNS", "400")


def run_json(capsys, *argv) -> dict:
    assert main(["harmonics", *map(str, argv), "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def run_text(capsys, *argv) -> str:
    assert main(["harmonics", *map(str, argv)]) == 0
    return capsys.readouterr().out


def fail(capsys, *argv) -> str:
    assert main(["harmonics", *map(str, argv)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1, err
    return err


class TestForward:
    def test_json(self, capsys):
        # 33.4 MHz: only N = 3 (100.2 MHz) in 88-108 MHz; deviation 3 x 25 kHz (arithmetic)
        d = run_json(
            capsys, "--fundamental", "33.4M", "--deviation", "25k", "--target-deviation", "75k"
        )
        assert d["mode"] == "forward" and d["fundamental_hz"] == 33.4e6
        assert d["range_hz"] == [88e6, 108e6]
        (line,) = d["harmonics"]
        assert line["n"] == 3 and line["frequency_hz"] == pytest.approx(100.2e6)
        assert line["deviation_hz"] == pytest.approx(75e3)
        assert line["fundamental_deviation_for_target_hz"] == pytest.approx(25e3)
        # its 4th harmonic, 133.6 MHz, is in the aeronautical band: flagged even though
        # it is outside the listed range
        bands = {p["band"]: p["harmonics"] for p in d["protected"]}
        assert any("108-137" in b for b in bands) and [4] in bands.values()
        assert "regulations" in d["caution"] and d["band_table"]

    def test_frequency_syntax(self, capsys):
        # plain Hz, scientific notation and k/M/G suffixes give the same listing
        a = run_json(capsys, "--fundamental", "33400000", "--range", "88e6", "0.108G")
        b = run_json(capsys, "--fundamental", "33.4e6", "--range", "88M", "108M")
        c = run_json(capsys, "--fundamental", "33400k", "--range", "88000k", "108M")
        assert a["harmonics"] == b["harmonics"] == c["harmonics"]

    def test_warning_on_121_5(self, capsys):
        # 40.5 MHz x 3 = 121.5 MHz: the table row and the warning table say so
        out = run_text(capsys, "--fundamental", "40.5M", "--range", "100M", "130M")
        assert "121.500000 MHz" in out
        assert "aeronautical emergency 121.5 MHz" in out
        assert "WARNING" in out and "[memory]" in out
        assert "local regulations" in out

    def test_nothing_in_range(self, capsys):
        out = run_text(capsys, "--fundamental", "60M")  # 60, 120 MHz: none in 88-108
        assert "no harmonic of 60.000000 MHz lands in the range" in out


class TestInverse:
    def test_json_candidates(self, capsys):
        d = run_json(capsys, "--heard", "100.2M", "--heard", "133.6M", "--tolerance", "2k")
        assert d["mode"] == "inverse"
        c = d["candidates"][0]
        assert set(c) >= {"fundamental_hz", "harmonics", "residual_hz"}
        assert c["fundamental_hz"] == pytest.approx(33.4e6) and c["harmonics"] == [3, 4]
        assert d["candidates"][1]["harmonics"] == [6, 8]
        assert d["candidates"][1]["alias_of"] == 1
        assert len(d["candidates"]) == 20 and d["omitted_count"] == 334 - 20
        assert "f0/2" in d["explanation"]

    def test_ambiguous_text(self, capsys):
        out = run_text(
            capsys, "--heard", "100M", "--heard", "134M", "--tolerance", "900k",
            "--min-fundamental", "5M",
        )  # fmt: skip
        assert "primitive" in out and "too wide to decide" in out
        assert "f0/2 of #1" in out

    def test_nothing_fits(self, capsys):
        d = run_json(
            capsys, "--heard", "100M", "--heard", "101.7M", "--heard", "150.3M",
            "--tolerance", "200", "--min-fundamental", "1M",
        )  # fmt: skip
        assert d["candidates"] == [] and "No fundamental" in d["explanation"]
        out = run_text(
            capsys, "--heard", "100M", "--heard", "101.7M", "--heard", "150.3M",
            "--tolerance", "200", "--min-fundamental", "1M",
        )  # fmt: skip
        assert "nothing fits" in out


class TestErrors:
    def test_errors(self, capsys):
        assert "exactly one of" in fail(capsys)
        assert "exactly one of" in fail(capsys, "--fundamental", "1M", "--heard", "2M")
        assert "two or more" in fail(capsys, "--heard", "100M")
        assert "must not exceed" in fail(capsys, "--fundamental", "1M", "--range", "108M", "88M")
        assert "no such file" in fail(capsys, "missing.wav")

    def test_bad_frequency(self, capsys):
        with pytest.raises(SystemExit) as exc:
            main(["harmonics", "--fundamental", "12 parsecs"])
        assert exc.value.code == 2
        assert "not a frequency" in capsys.readouterr().err


class TestHelp:
    def test_caution_and_examples(self, capsys):
        with pytest.raises(SystemExit):
            main(["harmonics", "--help"])
        out = capsys.readouterr().out
        assert "swingmeter harmonics --fundamental 33.4M" in out
        assert "harmonics of an overdriven oscillator radiate" in out
        assert "local regulations" in out and "default: 88M 108M" in out


class TestRecording:
    # Last: the fundamental measured in a recording through monitor.engine.analyze_file.
    def test_measured_fundamental(self, tmp_path, capsys, sox):
        engine = pytest.importorskip("monitor.engine")
        if not hasattr(engine, "analyze_file"):
            pytest.skip("monitor.engine.analyze_file not written yet")
        wav = tmp_path / "osc.wav"
        # sox as the independent generator: a 1234.5 Hz tone stands in for a (divided-
        # down) oscillator; its harmonics in 8-12 kHz are N = 7, 8, 9.
        sox("-n", "-r", 48000, "-b", 24, wav, "synth", 3, "sine", 1234.5, "vol", 0.5)
        d = run_json(capsys, wav, "--range", "8k", "12k")
        assert d["fundamental_hz"] == pytest.approx(1234.5, abs=0.01)
        assert [x["n"] for x in d["harmonics"]] == [7, 8, 9]
        assert d["source"] == str(wav)
