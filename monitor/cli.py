"""The `swingmeter` command line.

Each command lives in `monitor/commands/<name>.py` and provides `add_parser(subparsers)`
and `run(args) -> int`. This module only wires them together and turns errors into
messages and exit codes, in one place; that includes refusing an option typed for a mode
it does nothing in (`refuse_idle_options`, shared by analyze, report, live and record).
"""

from __future__ import annotations

import argparse
import importlib
import sys
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from monitor import __version__
from monitor.errors import SwingmeterError

# Order is the order shown in --help.
COMMAND_MODULES = (
    "analyze",
    "live",
    "record",
    "devices",
    "calibrate",
    "stability",
    "harmonics",
    "report",
    "demo",
)

DESCRIPTION = """\
Sound-card frequency counter and FM modulation monitor for the oscillator bench.

Input modes: 'audio' (a receiver's demodulated audio), 'beat' (a receiver in SSB/CW
mode or a mixer: the carrier arrives as an audio beat note), 'iq' (stereo I/Q).
"""

EPILOG = """\
caution: check the rules for your location before you put any signal on the air; an
overdriven oscillator radiates harmonics, some of which may fall in aviation or distress
bands. See the README's Cautions section.
"""


def _available_commands():
    for name in COMMAND_MODULES:
        try:
            mod = importlib.import_module(f"monitor.commands.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"monitor.commands.{name}":
                continue  # not built yet
            raise
        yield name, mod


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="swingmeter",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"swingmeter {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for _name, mod in _available_commands():
        p = mod.add_parser(sub)
        p.set_defaults(_run=mod.run)
    return parser


@dataclass(frozen=True)
class ModeOption:
    """An option that acts only in some input modes.

    `advice` maps a mode the option does nothing in to what to do instead. `window_keeps`:
    the live window keeps the value when its mode control changes (a stream field in
    its controls), rather than dropping it with the FM demodulator's settings.
    """

    dest: str
    flag: str
    modes: tuple[str, ...]
    advice: dict[str, str]
    window_keeps: bool = False


_CARRIER = "use --mode beat for a beat note or --mode iq for stereo I/Q"
_AUDIO_DEMOD = "there is no FM demodulator in audio mode: " + _CARRIER

#: The options of `analyze`, `report`, `live` and `record` that act only in some modes.
MODE_OPTIONS = (
    ModeOption(
        "dial",
        "--dial",
        ("beat", "iq"),
        {"audio": "it turns a carrier into an RF frequency: " + _CARRIER},
        window_keeps=True,
    ),
    ModeOption(
        "sideband",
        "--sideband",
        ("beat",),
        {
            "audio": "it says how a beat note maps to RF: use --mode beat",
            "iq": "I/Q carries both sidebands and RF = centre + offset; leave --sideband "
            "out and give the centre with --dial",
        },
        window_keeps=True,
    ),
    ModeOption(
        "harmonic",
        "--harmonic",
        ("beat", "iq"),
        {"audio": "it divides a carrier's RF frequency and deviation: " + _CARRIER},
        window_keeps=True,
    ),
    ModeOption(
        "carrier_near",
        "--carrier-near",
        ("beat", "iq"),
        {"audio": "pick the tone with --near HZ instead, or " + _CARRIER},
    ),
    ModeOption("if_bandwidth", "--if-bandwidth", ("beat", "iq"), {"audio": _AUDIO_DEMOD}),
    ModeOption(
        "post_filter",
        "--post-filter",
        ("beat", "iq"),
        {"audio": "use --filter for the measurement filter, or " + _CARRIER},
    ),
    ModeOption(
        "deemphasis",
        "--deemphasis",
        ("beat", "iq"),
        {
            "audio": "audio-mode deviation undoes the receiver's de-emphasis saved by "
            "`swingmeter calibrate deviation --deemphasis ... --profile NAME` (then give "
            "--profile NAME); to weight the quality figures use --filter deemph-50us or "
            "deemph-75us"
        },
    ),
    ModeOption(
        "swap_iq",
        "--swap-iq",
        ("iq",),
        {
            mode: "it swaps the two channels of a stereo I/Q recording: use --mode iq for "
            "one, else leave it out (--channel N picks a channel)"
            for mode in ("audio", "beat")
        },
        window_keeps=True,  # a source setting the window keeps for a switch to iq
    ),
    ModeOption(
        "iq_correct",
        "--iq-correct",
        ("iq",),
        {
            mode: "it corrects the DC offset and imbalance of stereo I/Q: use --mode iq for "
            "an I/Q recording, else leave it out"
            for mode in ("audio", "beat")
        },
    ),
)


def _typed_dests(argv: Sequence[str] | None, command: str, dests: set[str]) -> set[str]:
    """Which of `dests` the user typed for `command` (however spelt: `--side lower`,
    `--sideband=lower`), as opposed to left at their defaults: `argv` parsed again with
    those defaults suppressed, so that only what was typed lands in the namespace."""
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    for action in sub.choices[command]._actions:
        if action.dest in dests:
            action.default = argparse.SUPPRESS
    return dests & set(vars(parser.parse_args(argv)))


def _runs(args) -> list[tuple[str, str | None]]:
    """(mode, recording or None) of each run the command would make, the mode decided as
    the command decides it (`analyze.mode_for`: the mode typed, else the recording's own
    from its sidecar or SigMF datatype, else audio)."""
    from monitor.commands.analyze import mode_for

    if args.command in ("analyze", "report"):
        return [(mode_for(path, args), path) for path in args.files]
    if args.command == "live":
        return [(mode_for(args.file, args), args.file)]
    return [(args.mode, None)]  # record: the mode it records in (default audio)


def _whence(mode: str, path: str | None) -> str:
    """Why a run is in `mode` when --mode was not typed."""
    from monitor.sources import recorded_mode

    if path is not None and recorded_mode(path) == mode:
        return f" ({path} was recorded in {mode} mode)"
    if path is not None:
        return f" (the default for {path}: no --mode given, and the recording names none)"
    return " (the default mode)"


def refuse_idle_options(args, argv: Sequence[str] | None) -> None:
    """Refuse an option typed for `analyze`, `report`, `live` or `record` that does
    nothing in the mode the command runs in (`--sideband` with I/Q, `--iq-correct` with
    audio, ...), instead of ignoring it without a word.

    Only what is on the command line counts: a bench profile's or a recording's sidecar
    fields never fail an analysis. The live window can change its mode, so there the
    stream fields of its controls (dial, sideband, harmonic) are kept for another mode,
    and the FM demodulator's settings are refused only when it starts in audio mode
    (which drops them); the recorder keeps the stream fields in its sidecar for a later
    analysis in another mode. In a batch of recordings an option is refused only when
    it acts on none of them; a recording that does not exist is left to the command.

    Raises
    ------
    SwingmeterError
        One line naming the option, the mode and what to do instead (exit code 2).
    """
    if args.command not in ("analyze", "report", "live", "record"):
        return
    present = {o.dest for o in MODE_OPTIONS if hasattr(args, o.dest)}
    typed = _typed_dests(argv, args.command, present | {"mode"})
    if not typed - {"mode"}:
        return
    # the live window and the recorder keep the stream fields (dial, sideband, harmonic)
    # for another mode: the window's controls; the sidecar of an audio recording, which a
    # later analysis may read as a beat note. The window drops the demodulator's settings
    # only when it starts in audio mode
    window = args.command == "live" and not args.no_window
    recorder = args.command == "record"
    # a recording that does not exist is the command's to report, not this check's
    runs = [(mode, path) for mode, path in _runs(args) if path is None or Path(path).exists()]
    for opt in MODE_OPTIONS:
        if opt.dest not in typed or not runs or any(mode in opt.modes for mode, _ in runs):
            continue  # acts on at least one of the runs (a batch may mix modes)
        mode, path = runs[0]
        if window and (opt.window_keeps or mode != "audio"):
            continue
        if recorder and opt.window_keeps and mode == "audio":
            continue
        why = "" if "mode" in typed else _whence(mode, path)
        raise SwingmeterError(f"{opt.flag} has no effect in {mode} mode{why}: {opt.advice[mode]}")


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """A measurement's caveat (a record too short, a silent input) as one line of ours,
    not Python's warning format with its source line."""
    print(f"swingmeter: warning: {message}", file=file or sys.stderr)


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "_run", None):
        parser.print_help(sys.stderr)
        return 2
    with warnings.catch_warnings():  # each caveat once, as ours (restored on return)
        warnings.simplefilter("once")
        warnings.showwarning = _show_warning
        return _run(args, argv)


def _run(args, argv: Sequence[str] | None = None) -> int:
    try:
        refuse_idle_options(args, argv)
        return int(args._run(args) or 0)
    except SwingmeterError as exc:
        print(f"swingmeter: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("swingmeter: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except Exception as exc:  # the one place that turns a failure into a message
        print(f"swingmeter: {type(exc).__name__}: {exc}", file=sys.stderr)
        return 1


def entry() -> None:
    sys.exit(main())


if __name__ == "__main__":
    entry()
