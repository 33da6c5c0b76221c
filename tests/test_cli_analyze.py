"""`swingmeter analyze`, `calibrate` and `demo` through the command line."""

from __future__ import annotations

import csv
import json
import struct
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from monitor import __version__
from monitor.cli import MODE_OPTIONS, build_parser, main, refuse_idle_options
from monitor.errors import SwingmeterError


def write_tone(path, f=1234.5, fs=48000, dur=3.0, amp=0.5, noise=1e-3, seed=3, subtype=None):
    rng = np.random.default_rng(seed)
    t = np.arange(int(fs * dur)) / fs
    x = amp * np.sin(2 * np.pi * f * t) + noise * rng.standard_normal(t.size)
    sf.write(path, x, fs, subtype=subtype or "PCM_24")
    return path


def run_json(capsys, *argv):
    rc = main(list(argv))
    out = capsys.readouterr()
    assert rc == 0, out.err
    return json.loads(out.out)


def dotted(d, key):
    for part in key.split("."):
        d = d[part]
    return d


SUMMARY_KEYS = [
    "file",
    "mode",
    "sample_rate_hz",
    "duration_s",
    "clock.ppm",
    "level.rms_dbfs",
    "level.peak_dbfs",
    "level.clipped_samples",
    "tone.frequency_hz",
    "tone.uncertainty_hz",
    "tone.amplitude_dbfs",
    "quality.snr_db",
    "quality.sinad_db",
    "quality.thd_percent",
    "quality.thd_n_percent",
    "quality.enob_bits",
    "warnings",
]


class TestAnalyze:
    def test_json_keys(self, tmp_path, capsys):
        p = write_tone(tmp_path / "a.wav")
        d = run_json(capsys, "analyze", str(p), "--json")
        for key in SUMMARY_KEYS:
            dotted(d, key)
        assert d["mode"] == "audio"
        assert d["tone"]["frequency_hz"] == pytest.approx(1234.5, abs=1e-4)
        assert "readings" not in d

    def test_too_few_cycles_in_a_gate_is_said_once_in_our_words(self, tmp_path, capsys):
        # 1.5 Hz in 1 s gates: the quality fit cannot separate the tone from DC; the
        # caveat comes once, as a line of ours, not as Python's warning with source
        p = write_tone(tmp_path / "slow.wav", f=1.5, dur=5.0)
        rc = main(["analyze", str(p)])
        err = capsys.readouterr().err
        assert rc == 0
        assert err.count("swingmeter: warning: the record holds only 1.5 cycles") == 1
        assert "UserWarning" not in err and ".py:" not in err

    def test_readings(self, tmp_path, capsys):
        p = write_tone(tmp_path / "a.wav")
        d = run_json(capsys, "analyze", str(p), "--json", "--readings", "--gate", "0.5")
        assert len(d["readings"]) == 6
        for r in d["readings"]:
            assert {"t_s", "frequency_hz", "uncertainty_hz"} <= set(r)

    def test_several_files_give_array(self, tmp_path, capsys):
        a = write_tone(tmp_path / "a.wav", f=440)
        b = write_tone(tmp_path / "b.wav", f=880)
        d = run_json(capsys, "analyze", str(a), str(b), "--json")
        assert [x["tone"]["frequency_hz"] for x in d] == pytest.approx([440, 880], abs=1e-3)

    def test_jobs(self, tmp_path, capsys):
        # 200 gates of 0.1 s at 8 kHz: two parts; the same figures as one process
        p = write_tone(tmp_path / "a.wav", fs=8000, dur=20.0, f=1000.25)
        one = run_json(capsys, "analyze", str(p), "--json", "--gate", "0.1", "--jobs", "1")
        two = run_json(capsys, "analyze", str(p), "--json", "--gate", "0.1", "--jobs", "2")
        assert two["tone"]["frequency_hz"] == pytest.approx(one["tone"]["frequency_hz"], rel=1e-13)
        assert two["quality"]["sinad_db"] == pytest.approx(one["quality"]["sinad_db"], abs=1e-6)
        for bad in ("0", "two"):
            with pytest.raises(SystemExit):
                main(["analyze", str(p), "--jobs", bad])
            assert "--jobs" in capsys.readouterr().err

    def test_csv(self, tmp_path, capsys):
        p = write_tone(tmp_path / "a.wav")
        out = tmp_path / "r.csv"
        assert main(["analyze", str(p), "--csv", str(out)]) == 0
        rows = list(csv.DictReader(out.open()))
        assert len(rows) == 3
        assert {"file", "t_s", "frequency_hz", "uncertainty_hz"} <= set(rows[0])
        assert float(rows[1]["t_s"]) == 1.0
        assert float(rows[0]["frequency_hz"]) == pytest.approx(1234.5, abs=1e-3)

    def test_table(self, tmp_path, capsys):
        p = write_tone(tmp_path / "a.wav")
        assert main(["analyze", str(p), "--readings"]) == 0
        out = capsys.readouterr().out
        assert "1234.5" in out and "±" in out and "SINAD" in out

    def test_near_band_and_clock(self, tmp_path, capsys):
        fs = 48000
        t = np.arange(fs * 2) / fs
        x = 0.5 * np.sin(2 * np.pi * 1000 * t) + 0.05 * np.sin(2 * np.pi * 2500 * t)
        p = tmp_path / "two.wav"
        sf.write(p, x, fs, subtype="FLOAT")
        d = run_json(capsys, "analyze", str(p), "--json", "--near", "2.4k")
        assert d["tone"]["frequency_hz"] == pytest.approx(2500, abs=1e-3)
        d = run_json(capsys, "analyze", str(p), "--json", "--band", "2000", "3000")
        assert d["tone"]["frequency_hz"] == pytest.approx(2500, abs=1e-3)
        d = run_json(capsys, "analyze", str(p), "--json", "--clock-ppm", "100")
        assert d["tone"]["frequency_hz"] == pytest.approx(1000.1, abs=1e-4)
        assert d["clock"]["ppm"] == 100

    def test_clipping_warning(self, tmp_path, capsys):
        fs = 48000
        x = np.clip(1.5 * np.sin(2 * np.pi * 1000 * np.arange(fs) / fs), -1, 1)
        p = tmp_path / "clip.wav"
        sf.write(p, x, fs, subtype="PCM_16")
        d = run_json(capsys, "analyze", str(p), "--json")
        assert any("clipping" in w for w in d["warnings"])
        assert d["level"]["clipped_samples"] > 0


def _header_only(path, rate):
    hdr = b"RIFF" + struct.pack("<I", 36 + 20) + b"WAVE"
    hdr += b"fmt " + struct.pack("<IHHIIHH", 16, 1, 1, rate, rate * 2, 2, 16)
    hdr += b"data" + struct.pack("<I", 20)
    path.write_bytes(hdr + b"\x00\x01" * 10)


class TestBadInput:
    def _fails(self, capsys, *argv, match):
        rc = main(list(argv))
        err = capsys.readouterr().err
        assert rc == 2
        assert "Traceback" not in err
        assert match in err
        assert err.count("\n") == 1  # one clear line
        return err

    def test_missing(self, tmp_path, capsys):
        self._fails(capsys, "analyze", str(tmp_path / "x.wav"), match="x.wav: file not found")

    def test_empty(self, tmp_path, capsys):
        (tmp_path / "e.wav").write_bytes(b"")
        self._fails(capsys, "analyze", str(tmp_path / "e.wav"), match="file is empty")

    def test_not_audio(self, tmp_path, capsys):
        (tmp_path / "n.wav").write_text("hello")
        self._fails(capsys, "analyze", str(tmp_path / "n.wav"), match="not a readable audio")

    def test_truncated(self, tmp_path, capsys):
        p = write_tone(tmp_path / "t.wav")
        p.write_bytes(p.read_bytes()[:40])
        self._fails(capsys, "analyze", str(p), match="t.wav")

    def test_zero_rate(self, tmp_path, capsys):
        _header_only(tmp_path / "z.wav", 0)
        self._fails(capsys, "analyze", str(tmp_path / "z.wav"), match="z.wav")

    def test_absurd_rate(self, tmp_path, capsys):
        _header_only(tmp_path / "r.wav", 50)
        self._fails(capsys, "analyze", str(tmp_path / "r.wav"), match="sample rate 50 Hz")

    def test_nan(self, tmp_path, capsys):
        # A NaN stretch is silenced and named; a file of nothing but NaN is unusable.
        x = np.zeros(48000)
        x[100] = np.nan
        sf.write(tmp_path / "nan.wav", x, 48000, subtype="FLOAT")
        d = run_json(capsys, "analyze", str(tmp_path / "nan.wav"), "--json")
        assert "1 NaN/Inf sample at 0.002 s replaced by silence" in " ".join(d["warnings"])
        sf.write(tmp_path / "allnan.wav", np.full(4800, np.nan), 48000, subtype="FLOAT")
        self._fails(capsys, "analyze", str(tmp_path / "allnan.wav"), match="NaN or infinite")

    def test_bad_gate(self, tmp_path, capsys):
        p = write_tone(tmp_path / "a.wav")
        self._fails(capsys, "analyze", str(p), "--gate", "0.01", match="gate_s=0.01")

    def test_unknown_profile(self, tmp_path, capsys):
        p = write_tone(tmp_path / "a.wav")
        self._fails(capsys, "analyze", str(p), "--profile", "nope", match="no bench profile")

    def test_iq_mode_on_mono(self, tmp_path, capsys):
        p = write_tone(tmp_path / "a.wav")
        self._fails(capsys, "analyze", str(p), "--mode", "iq", match="--mode iq needs a stereo")


DEMO = Path(__file__).resolve().parent.parent / "recordings_demo"

# An example value for each option that acts only in some modes.
MODE_OPTION_VALUES = {
    "--dial": ["97.29M"],
    "--sideband": ["lower"],
    "--harmonic": ["3"],
    "--carrier-near": ["10k"],
    "--if-bandwidth": ["8k"],
    "--post-filter": ["300-3000"],
    "--deemphasis": ["50us"],
    "--iq-correct": [],
    "--swap-iq": [],
}
# (option, mode it does nothing in, a word of the advice)
REFUSALS = [
    ("--dial", "audio", "--mode beat"),
    ("--sideband", "audio", "--mode beat"),
    ("--harmonic", "audio", "--mode beat"),
    ("--carrier-near", "audio", "--near HZ"),
    ("--if-bandwidth", "audio", "no FM demodulator"),
    ("--post-filter", "audio", "--filter"),
    ("--deemphasis", "audio", "calibrate deviation"),
    ("--iq-correct", "audio", "--mode iq"),
    ("--iq-correct", "beat", "--mode iq"),
    ("--sideband", "iq", "both sidebands"),
    ("--swap-iq", "audio", "--mode iq"),
    ("--swap-iq", "beat", "--mode iq"),
]


def write_iq_with_sidecar(path, mode="iq", sideband="upper"):
    """A short stereo I/Q recording with the metadata sidecar `swingmeter record` writes
    (which always holds a sideband, 'upper' by default, even in iq mode)."""
    fs = 48000
    t = np.arange(fs) / fs
    z = 0.3 * np.exp(2j * np.pi * 3000.0 * t)
    sf.write(path, np.stack([z.real, z.imag], axis=1), fs, subtype="FLOAT")
    side = {
        "format": "swingmeter-recording",
        "version": 1,
        "mode": mode,
        "fs_hz": fs,
        "channels": 2,
        "harmonic": 1,
        "clock_ppm": 0.0,
        "sideband": sideband,
        "center_hz": 7.0e6,
    }
    (path.parent / (path.name + ".swingmeter.json")).write_text(json.dumps(side))
    return path


def refused(argv):
    """refuse_idle_options on argv: the message, or None."""
    args = build_parser().parse_args(argv)
    try:
        refuse_idle_options(args, argv)
    except SwingmeterError as exc:
        return str(exc)
    return None


class TestModeOptions:
    """Options typed for a mode they do nothing in are refused, never ignored."""

    def _refused(self, capsys, argv, *parts):
        rc = main(list(argv))
        err = capsys.readouterr().err
        assert rc == 2
        assert err.startswith("swingmeter: error: ")
        assert err.count("\n") == 1  # one line
        for part in parts:
            assert part in err
        return err

    @pytest.mark.parametrize(("flag", "mode", "advice"), REFUSALS)
    def test_analyze_refuses(self, tmp_path, capsys, flag, mode, advice):
        p = write_tone(tmp_path / "a.wav")
        argv = ["analyze", str(p), "--mode", mode, flag, *MODE_OPTION_VALUES[flag]]
        self._refused(capsys, argv, f"{flag} has no effect in {mode} mode:", advice)

    def test_table_covers_every_option(self):
        assert {o.flag for o in MODE_OPTIONS} == set(MODE_OPTION_VALUES)
        for opt in MODE_OPTIONS:
            for mode in ("audio", "beat", "iq"):
                if mode in opt.modes:
                    assert mode not in opt.advice
                else:
                    assert (opt.flag, mode) in {(f, m) for f, m, _ in REFUSALS}

    @pytest.mark.parametrize("opt", MODE_OPTIONS, ids=lambda o: o.flag)
    def test_accepted_where_it_acts(self, opt):
        for mode in opt.modes:
            for cmd in (["analyze", "x.wav"], ["live", "--no-window"], ["report", "x.wav"]):
                argv = [*cmd, "--mode", mode, opt.flag, *MODE_OPTION_VALUES[opt.flag]]
                if cmd[0] == "report":
                    argv += ["-o", "r.html"]
                assert refused(argv) is None, argv

    def test_any_spelling_counts(self, tmp_path, capsys):
        p = str(write_tone(tmp_path / "a.wav"))
        self._refused(capsys, ["analyze", p, "--mode=iq", "--sideband=lower"], "--sideband")
        self._refused(capsys, ["analyze", p, "--side", "upper"], "--sideband has no effect")
        self._refused(capsys, ["analyze", p, "--deemphasis", "none"], "--deemphasis")

    def test_default_mode_is_named(self, tmp_path, capsys):
        p = write_tone(tmp_path / "a.wav")
        err = self._refused(capsys, ["analyze", str(p), "--iq-correct"], "in audio mode")
        assert f"(the default for {p}: no --mode given, and the recording names none)" in err

    def test_recorded_mode_counts_but_its_sidecar_never_fails(self, tmp_path, capsys):
        # an I/Q recording from `swingmeter record` carries sideband 'upper' in its
        # sidecar: analysing it is fine; typing --sideband is refused
        p = write_iq_with_sidecar(tmp_path / "iq.wav")
        d = run_json(capsys, "analyze", str(p), "--json")
        assert d["mode"] == "iq"
        d = run_json(capsys, "analyze", str(p), "--iq-correct", "--harmonic", "2", "--json")
        assert d["mode"] == "iq" and d["iq"]["corrected"] is True
        lower = write_iq_with_sidecar(tmp_path / "iq-lower.wav", sideband="lower")
        assert run_json(capsys, "analyze", str(lower), "--json")["mode"] == "iq"
        self._refused(
            capsys,
            ["analyze", str(p), "--sideband", "lower"],
            f"--sideband has no effect in iq mode ({p} was recorded in iq mode)",
            "RF = centre + offset",
        )
        # in a batch, an option that acts on one recording is not refused for another
        a = write_tone(tmp_path / "a.wav")
        assert refused(["analyze", str(p), str(a), "--iq-correct"]) is None
        err = self._refused(capsys, ["analyze", str(a), "--iq-correct"], str(a))
        assert "in audio mode" in err

    def test_profile_deemphasis_still_reads_audio_deviation(self, capsys):
        # the receiver's de-emphasis of audio mode comes from `calibrate deviation`,
        # whose --deemphasis is its own option and keeps working
        d = run_json(
            capsys, "calibrate", "deviation", "--audio", str(DEMO / "rx-fm-null.wav"),
            "--deviation", "2404.83", "--deemphasis", "50us", "--profile", "rx", "--json",
        )  # fmt: skip
        assert d["deemphasis"] == "50us"
        d = run_json(capsys, "analyze", str(DEMO / "rx-fm-adjusted.wav"), "--profile", "rx",
                     "--json")  # fmt: skip
        assert d["deviation"]["receiver_deemphasis"] == "50us"
        assert d["deviation"]["tone_peak_hz"] == pytest.approx(3000.0, rel=0.01)

    def test_valid_fm_commands_still_run(self, capsys):
        # the demo's own commands (recordings_demo/README.md)
        d = run_json(
            capsys, "analyze", str(DEMO / "to7-beat.wav"), "--mode", "beat", "--dial",
            "97.29M", "--sideband", "upper", "--harmonic", "3", "--json",
        )  # fmt: skip
        assert d["fm"]["rf_hz"] == pytest.approx(97.3e6, abs=5.0)
        assert d["fm"]["sideband"] == "upper"
        d = run_json(
            capsys, "analyze", str(DEMO / "to7-iq.wav"), "--mode", "iq", "--dial", "97.288M",
            "--harmonic", "3", "--iq-correct", "--deemphasis", "none", "--json",
        )  # fmt: skip
        assert d["fm"]["rf_hz"] == pytest.approx(97.3e6, abs=5.0)
        assert d["iq"]["corrected"] is True

    def test_live_headless_refuses(self, tmp_path, capsys):
        p = str(write_tone(tmp_path / "a.wav"))
        argv = ["live", "--no-window", "--file", p, "--mode", "iq", "--sideband", "lower"]
        self._refused(capsys, argv, "--sideband has no effect in iq mode:")
        argv = ["live", "--no-window", "--file", p, "--dial", "7M"]
        self._refused(capsys, argv, "--dial has no effect in audio mode")

    def test_live_window_keeps_its_controls_for_another_mode(self):
        # the window's mode can change: dial, sideband and harmonic are kept for it (and
        # beat/iq demodulator settings are carried between beat and iq); demodulator
        # settings given with an audio start are dropped, so they are refused
        for extra in (["--sideband", "lower"], ["--dial", "7M", "--harmonic", "2"]):
            assert refused(["live", "--mode", "audio", *extra]) is None
            assert refused(["live", "--mode", "iq", *extra]) is None
        assert refused(["live", "--mode", "beat", "--iq-correct"]) is None
        msg = refused(["live", "--iq-correct"])
        assert msg.startswith("--iq-correct has no effect in audio mode (the default mode)")
        msg = refused(["live", "--mode", "audio", "--post-filter", "none"])
        assert msg.startswith("--post-filter has no effect in audio mode:")

    def test_record_refuses_before_opening_a_device(self, tmp_path, capsys):
        out = tmp_path / "x.wav"
        argv = ["record", "--mode", "iq", "--sideband", "lower", "--duration", "1", str(out)]
        self._refused(capsys, argv, "--sideband has no effect in iq mode:")
        assert not out.exists()
        # an audio recording keeps dial, sideband and harmonic in its sidecar, for a
        # later analysis of it as a beat note (analyze --mode beat)
        argv = ["record", "--sideband", "lower", "--dial", "7.03M", "--duration", "1", "x.wav"]
        assert refused(argv) is None
        # record's defaults (sideband upper, harmonic 1) are not typed: nothing refused
        assert refused(["record", "--mode", "iq", "--dial", "7M", "--duration", "1", "x"]) is None
        argv = ["record", "--mode", "beat", "--sideband", "lower", "--harmonic", "2"]
        assert refused([*argv, "--dial", "7M", "--duration", "1", "x.wav"]) is None

    def test_batch_of_modes_and_missing_files(self, tmp_path, capsys):
        # a batch of an audio recording and a SigMF I/Q one (its datatype names the mode):
        # --iq-correct acts on the second, so it is not refused; alone, the first refuses
        from sigmf import SigMFFile

        audio = str(write_tone(tmp_path / "a.wav"))
        fs = 48000.0
        t = np.arange(int(fs)) / fs
        base = str(tmp_path / "cap")
        (0.5 * np.exp(2j * np.pi * 5000 * t)).astype(np.complex64).tofile(base + ".sigmf-data")
        SigMFFile(
            data_file=base + ".sigmf-data",
            global_info={"core:datatype": "cf32_le", "core:sample_rate": fs},
        ).tofile(base + ".sigmf-meta")
        assert refused(["analyze", audio, base + ".sigmf-meta", "--iq-correct"]) is None
        assert "in audio mode" in refused(["analyze", audio, "--iq-correct"])
        # a missing recording is the command's to report, not this check's
        rc = main(["analyze", str(tmp_path / "nothere.wav"), "--dial", "7M"])
        err = capsys.readouterr().err
        assert rc != 0 and "has no effect" not in err and "nothere.wav" in err

    def test_report_refuses(self, tmp_path, capsys):
        p = str(write_tone(tmp_path / "a.wav"))
        argv = ["report", p, "-o", str(tmp_path / "r.html"), "--mode", "beat", "--iq-correct"]
        self._refused(capsys, argv, "--iq-correct has no effect in beat mode:")
        assert not (tmp_path / "r.html").exists()


class TestCalibrateClock:
    def test_measures_and_applies(self, tmp_path, capsys, config_dir):
        # A card whose clock runs +50 ppm fast records a true 1000 Hz tone as
        # 1000 / (1 + 50e-6) Hz against its nominal rate.
        ppm_true = 50.0
        fs = 48000
        t = np.arange(fs * 4) / (fs * (1 + ppm_true * 1e-6))
        x = 0.5 * np.sin(2 * np.pi * 1000.0 * t)
        ref = tmp_path / "ref.wav"
        sf.write(ref, x, fs, subtype="PCM_24")
        d = run_json(
            capsys, "calibrate", "clock", "--reference", "1k", str(ref), "--profile", "bench-a",
            "--json",
        )  # fmt: skip
        assert d["clock_ppm"] == pytest.approx(ppm_true, abs=0.01)
        assert d["clock_uncertainty_ppm"] < 0.01
        saved = json.loads((config_dir / "bench-profiles.json").read_text())
        assert saved["profiles"]["bench-a"]["clock_ppm"] == pytest.approx(ppm_true, abs=0.01)
        # the same card's recording of the same tone now reads 1000 Hz
        d = run_json(capsys, "analyze", str(ref), "--profile", "bench-a", "--json")
        assert d["tone"]["frequency_hz"] == pytest.approx(1000.0, abs=1e-5)
        assert d["clock"]["profile"] == "bench-a"
        # listing and showing
        assert main(["calibrate"]) == 0
        assert "bench-a" in capsys.readouterr().out
        d = run_json(capsys, "calibrate", "show", "bench-a", "--json")
        assert d["bench-a"]["clock_reference_hz"] == 1000.0

    def test_implausible_reference(self, tmp_path, capsys):
        ref = write_tone(tmp_path / "ref.wav", f=1003.0)
        rc = main(["calibrate", "clock", "--reference", "1000", str(ref), "--profile", "x"])
        assert rc == 2
        assert "right recording" in capsys.readouterr().err

    def test_corrupt_profile_file_is_left_alone(self, tmp_path, capsys, config_dir):
        path = config_dir / "bench-profiles.json"
        path.write_text("{ broken")
        ref = write_tone(tmp_path / "ref.wav", f=1000.0)
        rc = main(["calibrate", "clock", "--reference", "1000", str(ref), "--profile", "x"])
        assert rc == 2
        assert "corrupt" in capsys.readouterr().err
        assert path.read_text() == "{ broken"

    def test_bad_profile_name(self, tmp_path, capsys):
        ref = write_tone(tmp_path / "ref.wav", f=1000.0)
        rc = main(["calibrate", "clock", "--reference", "1000", str(ref), "--profile", "../x"])
        assert rc == 2
        assert "not valid" in capsys.readouterr().err


class TestProgram:
    def test_version(self, capsys):
        with pytest.raises(SystemExit) as e:
            main(["--version"])
        assert e.value.code == 0
        assert __version__ in capsys.readouterr().out

    def test_every_command_has_an_example(self):
        parser = build_parser()
        sub = next(a for a in parser._actions if a.dest == "command")
        assert {"analyze", "calibrate", "demo"} <= set(sub.choices)
        for name, p in sub.choices.items():
            assert "swingmeter " + name in (p.epilog or ""), name

    def test_no_command_prints_help(self, capsys):
        assert main([]) == 2
        assert "analyze" in capsys.readouterr().err


class TestDemo:
    def test_demo_runs_on_bundled_recordings(self, capsys):
        d = run_json(capsys, "demo", "--json")
        files = {x["file"].rsplit("/", 1)[-1]: x for x in d}
        assert "rx-audio-1khz.wav" in files
        # the demo card runs +37.5 ppm fast (recordings_demo/make_recordings.py); after
        # the clock calibration from the reference the test tone reads 1 kHz again
        assert files["rx-audio-1khz.wav"]["tone"]["frequency_hz"] == pytest.approx(1000.0, abs=1e-4)
        assert files["rx-audio-1khz.wav"]["clock"]["ppm"] == pytest.approx(37.5, abs=0.01)


class TestLazyImports:
    def test_analyze_without_portaudio_or_qt(self, tmp_path):
        # file analysis must work on a machine without PortAudio or a display: block the
        # sound and GUI packages entirely in a fresh interpreter
        import subprocess
        import sys

        p = write_tone(tmp_path / "a.wav")
        code = (
            "import sys\n"
            "for m in ('sounddevice', 'PySide6', 'pyqtgraph', 'matplotlib'):\n"
            "    sys.modules[m] = None\n"
            "from monitor.cli import main\n"
            f"sys.exit(main(['analyze', {str(p)!r}, '--json']))\n"
        )
        r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
        assert r.returncode == 0, r.stderr
        assert json.loads(r.stdout)["tone"]["frequency_hz"] == pytest.approx(1234.5, abs=1e-3)
