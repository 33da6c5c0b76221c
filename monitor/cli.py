"""The `swingmeter` command line.

Each command lives in `monitor/commands/<name>.py` and provides `add_parser(subparsers)`
and `run(args) -> int`. This module only wires them together and turns errors into
messages and exit codes, in one place.
"""

from __future__ import annotations

import argparse
import importlib
import sys
import warnings
from collections.abc import Sequence

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
        return _run(args)


def _run(args) -> int:
    try:
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
