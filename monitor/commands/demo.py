"""`swingmeter demo`: the main job on the bundled demo recordings."""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path

from monitor.errors import InputError

HELP = "analyse the bundled demo recordings (calibrate the clock, then measure)"
EPILOG = """\
examples:
  swingmeter demo
  swingmeter demo --json
  swingmeter demo --dir path/to/recordings_demo
"""


def default_dir() -> Path:
    return Path(__file__).resolve().parents[2] / "recordings_demo"


def add_parser(sub) -> argparse.ArgumentParser:
    p = sub.add_parser(
        "demo",
        help=HELP,
        description="Run swingmeter on the demo recordings: measure the sound card's clock "
        "from the reference tone, then analyse every recording with that correction. "
        "Nothing is written to your bench profiles.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument(
        "--dir",
        type=Path,
        default=None,
        help="folder holding index.json and the recordings (default: the bundled one)",
    )
    p.add_argument("--json", action="store_true", help="print JSON summaries")
    return p


def load_index(folder: Path) -> list[dict]:
    path = folder / "index.json"
    try:
        index = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(
            f"{path}: not found; write the demo recordings with "
            "`python recordings_demo/make_recordings.py`"
        ) from None
    except (OSError, json.JSONDecodeError) as exc:
        raise InputError(f"{path}: unreadable ({exc})") from None
    if not isinstance(index, list):
        raise InputError(f"{path}: expected a list of recordings")
    return index


def run(args) -> int:
    from rich.console import Console

    from monitor import output, render
    from monitor.commands.calibrate import measure_clock_ppm
    from monitor.engine import AnalysisSettings, analyze_file

    folder = args.dir or default_dir()
    index = load_index(folder)
    con = Console()
    clock_ppm = 0.0
    results = []
    for entry in index:
        ref = entry.get("calibrate_clock_reference_hz")
        if ref:
            ppm, u_ppm, _ = measure_clock_ppm(str(folder / entry["file"]), float(ref))
            clock_ppm = ppm
            if not args.json:
                con.rule("sound-card clock")
                con.print(
                    f"{entry['file']}: a {ref:g} Hz reference reads as if the card's clock "
                    f"were off by [bold]{ppm:+.3f} ± {u_ppm:.3f} ppm[/bold]; the "
                    "recordings below are corrected by it (as `--clock-ppm` or a bench "
                    "profile would)."
                )
    dev_factor = None
    for entry in index:
        cal = entry.get("calibrate_deviation")
        if cal:
            from monitor.commands.calibrate_deviation import audio_tone, reference_deviation

            f_audio, amp, _ = audio_tone(str(folder / entry["file"]), cal["deemphasis"])
            _, dev, _ = reference_deviation(str(folder / cal["reference"]), cal["reference_mode"])
            dev_factor = (dev / amp, cal["deemphasis"])
            if not args.json:
                con.rule("deviation calibration")
                con.print(
                    f"{cal['reference']} (beat note) shows {dev:.1f} Hz peak deviation of the "
                    f"{f_audio:.0f} Hz tone; {entry['file']} (broadcast radio, "
                    f"{cal['deemphasis']} de-emphasis undone) carries it at "
                    f"{20 * math.log10(amp):.2f} dBFS: [bold]{dev / amp:.1f} Hz per unit of "
                    "full scale[/bold] (as `swingmeter calibrate deviation` would save)."
                )
    for entry in index:
        opts = dict(entry.get("options", {}))
        extra_settings = {}
        if entry.get("uses_deviation_calibration") and dev_factor is not None:
            extra_settings = {
                "deviation_hz_per_unit": dev_factor[0],
                "receiver_deemphasis": dev_factor[1],
            }
        settings = AnalysisSettings(
            mode=entry.get("mode", "audio"), **_settings_opts(opts), **extra_settings
        )
        meta = {"clock_ppm": clock_ppm, **opts.get("meta", {})}
        analysis = analyze_file(str(folder / entry["file"]), settings=settings, meta=meta)
        d = analysis.summary.to_dict()
        d.update(analysis.extra)
        d["description"] = entry.get("description", "")
        results.append(d)
        if not args.json:
            con.rule(entry["file"])
            con.print(entry.get("description", ""))
            if entry.get("command"):
                con.print(f"[dim]$ {entry['command']}[/dim]")
            con.print(render.summary_table(output.clean(d)))
    if args.json:
        print(output.dumps(results))
    return 0


def _settings_opts(opts: dict) -> dict:
    from monitor.fm_engine import FmSettings

    out = {k: (tuple(v) if isinstance(v, list) else v) for k, v in opts.items() if k != "meta"}
    if "fm" in out:
        out["fm"] = FmSettings(**out["fm"])
    return out
