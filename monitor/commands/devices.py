"""`swingmeter devices`: the sound-card inputs PortAudio offers."""

from __future__ import annotations

import argparse
import dataclasses

HELP = "list the sound-card inputs (index, name, host API, channels, default rate)"
EPILOG = """\
examples:
  swingmeter devices
  swingmeter devices --json
  swingmeter record --device 3 --duration 10 take1.wav
  swingmeter record --device "USB Audio" --duration 10 take1.wav

--device accepts the index or any part of the name (case does not matter). swingmeter
always sets the sample rate itself (--rate), whatever the default rate shown here.
"""


def add_parser(sub) -> argparse.ArgumentParser:
    p = sub.add_parser(
        "devices",
        help=HELP,
        description="List the sound-card inputs that PortAudio offers, with the index and "
        "name that --device accepts. On Linux the PulseAudio/PipeWire server is usually "
        "reached through the ALSA devices 'pulse' and 'default'.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    return p


def run(args) -> int:
    from monitor.audio import list_input_devices

    devices = list_input_devices()
    if args.json:
        from monitor import output

        print(output.dumps([dataclasses.asdict(d) for d in devices]))
        return 0
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    console = Console()
    if not devices:
        console.print("no sound-card inputs found")
        return 0
    table = Table(title="sound-card inputs", title_justify="left")
    table.add_column("index", justify="right")
    table.add_column("name")
    table.add_column("host API")
    table.add_column("inputs", justify="right")
    table.add_column("default rate (Hz)", justify="right")
    table.add_column("default")
    for d in devices:
        table.add_row(
            str(d.index),
            Text(d.name),  # Text: names like "[hw:1,0]" are not rich markup
            Text(d.hostapi),
            str(d.max_input_channels),
            f"{d.default_fs_hz:g}",
            "yes" if d.is_default else "",
        )
    console.print(table)
    return 0
