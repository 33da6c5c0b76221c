"""`swingmeter live`: the live window, or a headless reading stream, from a sound card or
a replayed recording; the same engine as `analyze`."""

from __future__ import annotations

import argparse
import json
import math
import sys
import time

from monitor.commands import analyze
from monitor.errors import InputError
from monitor.units import duration_arg, frequency_arg, harmonic_arg, positive_frequency_arg

HELP = "live window (or headless readings) from a sound card or a replayed recording"
EPILOG = """\
examples:
  swingmeter live                                   # the window, default input, 48 kHz
  swingmeter live --device pulse --rate 48000 --gate 0.5
  swingmeter live --file take1.wav --speed 4        # replay four times faster
  swingmeter live --no-window --duration 60 --log bench.csv
  swingmeter live --no-window --json-lines --file take1.wav --speed max

Headless (--no-window) prints one line per reading (with --json-lines one JSON object,
the keys of `analyze --readings`) and logs readings to CSV with --log (flushed row by
row). Ctrl+C stops cleanly. A replay gives the same readings as `analyze` on the file;
in the window, seeking starts a new run of the engine from the seek point.
"""

SPEED_MAX = ("max", "inf")


def _speed_arg(text: str) -> float:
    if text.strip().lower() in SPEED_MAX:
        return math.inf
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a replay speed: {text!r}") from None
    if not value > 0:
        raise argparse.ArgumentTypeError(f"speed must be positive (or 'max'): {text!r}")
    return value


def _add_fm_options(p: argparse.ArgumentParser) -> None:
    """The FM options of `analyze` when it has them, else the stream fields we need."""
    add = getattr(analyze, "add_fm_options", None)
    if add is not None:
        add(p)
    have = {a.dest for a in p._actions}
    if "dial" not in have:
        p.add_argument(
            "--dial",
            type=frequency_arg,
            metavar="HZ",
            help="receiver dial frequency, e.g. 7.030M (default: none)",
        )
    if "sideband" not in have:
        p.add_argument(
            "--sideband",
            choices=("upper", "lower"),
            default="upper",
            help="receiver sideband in beat mode (default: upper)",
        )
    if "harmonic" not in have:
        p.add_argument(
            "--harmonic",
            type=harmonic_arg,
            default=1,
            metavar="N",
            help="the receiver hears harmonic N of the oscillator (default: 1)",
        )


def add_parser(sub) -> argparse.ArgumentParser:
    p = sub.add_parser(
        "live",
        help=HELP,
        description="Measure a sound-card input (or replay a recording) as it goes: "
        "frequency, deviation, level and audio quality per gate, in a window or as lines "
        "of text.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    src = p.add_argument_group("input")
    src.add_argument(
        "--file", metavar="REC", help="replay a recording instead of a sound card (any source)"
    )
    src.add_argument(
        "--speed",
        type=_speed_arg,
        default=1.0,
        metavar="X",
        help="replay speed: 1 is real time, 'max' as fast as possible (default: 1)",
    )
    src.add_argument(
        "--device",
        metavar="DEV",
        help="input device: index or part of the name, see `swingmeter devices` "
        "(default: the system's default input)",
    )
    src.add_argument(
        "--rate",
        type=positive_frequency_arg,
        default=48000.0,
        metavar="HZ",
        help="sound-card sample rate, always set on the device (default: 48000)",
    )
    analyze.add_input_options(p)
    analyze.add_measure_options(p)
    _add_fm_options(p)
    out = p.add_argument_group("headless")
    out.add_argument(
        "--no-window", action="store_true", help="no window: print one line per reading"
    )
    out.add_argument(
        "--duration",
        type=duration_arg,
        metavar="S",
        help="stop after S seconds of signal (default: until the end or Ctrl+C)",
    )
    out.add_argument(
        "--json-lines",
        action="store_true",
        help="print one JSON object per reading (the keys of `analyze --readings`)",
    )
    out.add_argument(
        "--log",
        metavar="PATH.csv",
        help="write every reading to PATH.csv as it comes (header first, rows flushed)",
    )
    return p


def config_from_args(args):
    """The LiveConfig the command-line options describe.

    Raises
    ------
    InputError
        For measurement settings the engine refuses.
    ProfileError
        If `--profile` names no saved bench profile.
    """
    from monitor.live import LiveConfig

    mode_for = getattr(analyze, "mode_for", None)
    mode = mode_for(args.file, args) if mode_for is not None else (args.mode or "audio")
    try:
        settings = analyze.settings_from_args(args, mode)
    except TypeError:  # an analyze without the mode argument
        args.mode = mode
        settings = analyze.settings_from_args(args)
    meta = dict(analyze.meta_from_args(args))
    for key, dest in (("dial_hz", "dial"), ("sideband", "sideband"), ("harmonic", "harmonic")):
        value = getattr(args, dest, None)
        if value is not None:
            meta.setdefault(key, value)
    if mode == "iq" and meta.get("dial_hz") is not None:
        meta.setdefault("center_hz", meta["dial_hz"])
    return LiveConfig(
        file=args.file,
        device=args.device,
        rate_hz=float(args.rate),
        settings=settings,
        meta=meta,
        channel=args.channel,
        mix=args.mix,
        swap_iq=args.swap_iq,
        speed=args.speed,
        duration_s=args.duration,
    )


# -- headless ------------------------------------------------------------------------------

_TABLE = (
    ("t_s", "t s", 9),
    ("frequency", "frequency", 26),
    ("rms_dbfs", "level dBFS", 10),
    ("snr_db", "SNR dB", 7),
    ("sinad_db", "SINAD dB", 8),
    ("thd_percent", "THD %", 8),
    ("deviation", "dev +/- Hz", 16),
    ("flags", "", 8),
)


def table_header() -> str:
    return " ".join(f"{head:>{w}}" for _k, head, w in _TABLE).rstrip()


def table_line(r) -> str:
    """One compact line of a reading for the terminal."""
    from dsp.tone import format_with_uncertainty

    def num(v, fmt):
        return "-" if v is None or not math.isfinite(v) else format(v, fmt)

    f = r.rf_hz if r.rf_hz is not None else r.frequency_hz
    if r.fundamental_hz is not None:
        f = r.fundamental_hz
    unc = r.uncertainty_hz if r.uncertainty_hz is not None else math.nan
    if f is r.rf_hz or f is r.fundamental_hz:
        unc = r.carrier_uncertainty_hz if r.carrier_uncertainty_hz is not None else unc
    cells = {
        "t_s": num(r.t_s, ".2f"),
        "frequency": "no tone" if f is None else format_with_uncertainty(f, unc),
        "rms_dbfs": num(r.rms_dbfs, ".1f"),
        "snr_db": num(r.snr_db, ".1f"),
        "sinad_db": num(r.sinad_db, ".1f"),
        "thd_percent": num(r.thd_percent, ".3g"),
        "deviation": (
            "-"
            if r.deviation_peak_pos_hz is None
            else f"{r.deviation_peak_pos_hz:+.0f}/{r.deviation_peak_neg_hz:+.0f}"
        ),
        "flags": " ".join(
            s
            for s, on in (
                ("CLIP", r.clipped_samples > 0),
                ("GAP", not r.contiguous),
                ("OVF", r.overflow),
            )
            if on
        ),
    }
    return " ".join(f"{cells[k]:>{w}}" for k, _h, w in _TABLE).rstrip()


class CsvLog:
    """Readings to CSV as they come: header first, every row flushed to the OS at once."""

    def __init__(self, path: str):
        from monitor.engine import Reading

        self.path = path
        self.columns = Reading.columns()
        try:
            self._f = open(path, "w", newline="", encoding="utf-8")
        except OSError as exc:
            raise InputError(f"{path}: cannot write CSV ({exc.strerror or exc})") from None
        self._write(",".join(self.columns) + "\r\n")
        self.rows = 0

    def _write(self, text: str) -> None:
        try:
            self._f.write(text)
            self._f.flush()
        except OSError as exc:
            raise InputError(f"{self.path}: cannot write CSV ({exc.strerror or exc})") from None

    def add(self, reading) -> None:
        from monitor import output

        self._write(output.csv_line(reading.to_dict(), self.columns))
        self.rows += 1

    def close(self) -> None:
        if not self._f.closed:
            self._f.close()


def run_headless(args, config) -> int:
    from monitor import output
    from monitor.live import start_session

    log = CsvLog(args.log) if args.log else None
    session = None
    interrupted = False
    seq = 0
    skipped = 0
    tty = sys.stdout.isatty()
    out = sys.stdout

    def emit(batch):
        nonlocal seq, skipped
        for lr in batch:
            if lr.seq > seq + 1:
                skipped += lr.seq - seq - 1
            seq = lr.seq
            r = lr.reading
            if log is not None:
                log.add(r)
            if args.json_lines:
                out.write(json.dumps(output.clean(r.to_dict()), allow_nan=False) + "\n")
            else:
                out.write(table_line(r) + "\n")
        if batch:
            out.flush()

    try:
        session = start_session(config, keep_readings=8192)
        what = config.file or (session.meta.source if session.meta else "sound card")
        print(
            f"live: {what}, {config.settings.mode}, gate {config.settings.gate_s:g} s; "
            "Ctrl+C stops",
            file=sys.stderr,
        )
        if not args.json_lines:
            out.write(table_header() + "\n")
            out.flush()
        while True:
            done = session.done
            emit(session.readings_since(seq))
            if done:
                break
            time.sleep(0.05 if tty else 0.02)
    except KeyboardInterrupt:
        interrupted = True
    finally:
        if session is not None:
            session.stop()
            try:
                emit(session.readings_since(seq))
            except KeyboardInterrupt:
                interrupted = True
        if log is not None:
            log.close()
    if session is None:  # interrupted while the input was being opened
        print("stopped by Ctrl+C before the first block", file=sys.stderr)
        return 0
    stats = session.stats
    note = f"{stats.readings} readings, {stats.dropped_blocks} dropped blocks"
    if skipped:
        note += f", {skipped} readings not shown (the terminal was too slow)"
    if interrupted:
        note = "stopped by Ctrl+C; " + note
    if log is not None:
        note += f"; {log.rows} rows in {log.path}"
    print(note, file=sys.stderr)
    if session.error is not None and not interrupted:
        raise session.error
    return 0


def run(args) -> int:
    config = config_from_args(args)
    if args.json_lines and not args.no_window:
        raise InputError("--json-lines needs --no-window")
    if args.no_window:
        return run_headless(args, config)
    from monitor.window.app import run_window

    return run_window(config, log_path=args.log)
