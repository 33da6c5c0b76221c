"""`swingmeter analyze`: readings and a summary of recordings."""

from __future__ import annotations

import argparse
import math
import sys
import time

from dsp.filters import FILTERS
from monitor.blocks import MODES
from monitor.errors import InputError
from monitor.units import frequency_arg, harmonic_arg, jobs_arg, positive_frequency_arg

HELP = "measure recordings: frequency with uncertainty, level, audio quality"
EPILOG = """\
examples:
  swingmeter analyze tone.wav
  swingmeter analyze to7-beat.wav --mode beat --dial 97.29M --sideband upper --harmonic 3
  swingmeter analyze capture.sigmf-meta --mode iq --iq-correct --json
  swingmeter analyze tone.wav --near 1000 --gate 0.5 --readings --json
  swingmeter analyze rx-audio.wav --filter psophometric --csv readings.csv
  swingmeter analyze ref-1khz.wav --profile bench-a
"""

FILTER_CHOICES = FILTERS


def add_input_options(p: argparse.ArgumentParser) -> None:
    """Options that say how to read a stream (shared with `live`)."""
    p.add_argument(
        "--mode",
        choices=MODES,
        default=None,
        help="audio: a receiver's demodulated audio; beat: the carrier as an audio beat "
        "note; iq: stereo I/Q (default: the mode a recording's sidecar or SigMF datatype "
        "says, else audio)",
    )
    p.add_argument(
        "--channel",
        type=int,
        default=0,
        metavar="N",
        help="channel to read in audio/beat mode, from 0 (default: 0)",
    )
    p.add_argument("--mix", action="store_true", help="use the mean of all channels")
    p.add_argument("--swap-iq", action="store_true", help="I/Q files: left is Q, right is I")
    clock = p.add_mutually_exclusive_group()
    clock.add_argument(
        "--clock-ppm",
        type=float,
        default=None,
        metavar="P",
        help="sound-card clock correction in ppm, P = (true rate / nominal - 1) * 1e6; "
        "frequencies are multiplied by (1 + P*1e-6) (default: 0, or the bench profile)",
    )
    clock.add_argument(
        "--profile",
        metavar="NAME",
        help="apply the bench profile NAME (see `swingmeter calibrate`)",
    )


def add_measure_options(p: argparse.ArgumentParser) -> None:
    """Options that say what to measure (shared with `live`)."""
    p.add_argument(
        "--gate",
        type=float,
        default=1.0,
        metavar="S",
        help="gate time in seconds, 0.1 to 100: one reading per gate (default: 1)",
    )
    p.add_argument(
        "--near",
        type=positive_frequency_arg,
        metavar="HZ",
        help="measure the tone nearest to HZ instead of the strongest",
    )
    p.add_argument(
        "--band",
        type=positive_frequency_arg,
        nargs=2,
        metavar=("LO", "HI"),
        help="measure the strongest tone between LO and HI Hz",
    )
    p.add_argument(
        "--filter",
        choices=FILTER_CHOICES,
        default="none",
        help="measurement filter before the quality figures (default: none)",
    )
    p.add_argument(
        "--mains",
        choices=("auto", "50", "60", "none"),
        default="auto",
        help="mains frequency for the hum figure (default: auto)",
    )


def add_fm_options(p: argparse.ArgumentParser) -> None:
    """FM options for beat / iq (shared with `live`)."""
    g = p.add_argument_group("FM (beat and iq modes)")
    g.add_argument(
        "--dial",
        type=frequency_arg,
        metavar="HZ",
        help="receiver dial frequency (beat) or I/Q centre frequency (iq; SigMF recordings "
        "carry it), giving the RF frequency; accepts 100.1M, 100.1e6",
    )
    g.add_argument(
        "--sideband",
        choices=("upper", "lower"),
        default=None,
        help="receiver sideband in beat mode: RF = dial + beat (upper) or dial - beat "
        "(lower) (default: upper)",
    )
    g.add_argument(
        "--harmonic",
        type=harmonic_arg,
        default=None,
        metavar="N",
        help="the receiver hears the Nth harmonic: fundamental = RF / N, fundamental "
        "deviation = RF deviation / N (default: 1)",
    )
    g.add_argument(
        "--carrier-near",
        type=frequency_arg,
        metavar="HZ",
        help="use the carrier near HZ (within the recording's band) instead of the strongest",
    )
    g.add_argument(
        "--if-bandwidth",
        type=positive_frequency_arg,
        metavar="HZ",
        help="demodulator bandwidth (default: from the measured signal width)",
    )
    g.add_argument(
        "--post-filter",
        choices=("none", "300-3000", "20-15k"),
        default=None,
        help="filter after the discriminator for the deviation figures (default: 300-3000 "
        "for beat, 20-15k for iq when the bandwidth allows)",
    )
    g.add_argument(
        "--deemphasis",
        choices=("none", "50us", "75us"),
        default="none",
        help="de-emphasis after the discriminator (default: none)",
    )
    g.add_argument(
        "--iq-correct",
        action="store_true",
        help="iq: correct DC offset, gain and phase imbalance before demodulating",
    )


def add_parser(sub) -> argparse.ArgumentParser:
    p = sub.add_parser(
        "analyze",
        help=HELP,
        description="Measure recordings (WAV, RF64, W64, SigMF): the tone's frequency with "
        "its 1-sigma uncertainty, level and audio quality, per gate and for the record.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("files", nargs="+", metavar="FILE", help="recordings to analyse")
    add_input_options(p)
    add_measure_options(p)
    add_fm_options(p)
    p.add_argument("--readings", action="store_true", help="include every gate's reading")
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.add_argument("--csv", metavar="PATH", help="write the readings to PATH as CSV")
    p.add_argument(
        "--jobs",
        type=jobs_arg,
        default=None,
        metavar="N",
        help="processes for one long recording: 'auto' (default: the CPUs, for an integer-PCM "
        "recording in audio mode long enough to gain) or a number (1: one)",
    )
    return p


def mode_for(path: str | None, args) -> str:
    """The mode given on the command line, else the recording's own, else audio."""
    if args.mode:
        return args.mode
    if path is not None:
        from monitor.sources import recorded_mode

        return recorded_mode(path) or "audio"
    return "audio"


def settings_from_args(args, mode: str | None = None):
    from monitor.engine import AnalysisSettings

    mode = mode or args.mode or "audio"
    try:
        fm = None
        if mode in ("beat", "iq"):
            # (imported only here: the FM modules bring scipy.signal, a second of start-up
            # that audio mode does not need)
            from monitor.fm_engine import FmSettings

            fm = FmSettings(
                carrier_near_hz=getattr(args, "carrier_near", None),
                if_bandwidth_hz=getattr(args, "if_bandwidth", None),
                post_filter=getattr(args, "post_filter", None),
                deemphasis=getattr(args, "deemphasis", "none") or "none",
                iq_correct=bool(getattr(args, "iq_correct", False)),
            )
        dev_factor, rx_deemph = None, "none"
        if mode == "audio" and getattr(args, "profile", None):
            from monitor import profiles

            prof = profiles.load(args.profile)
            dev_factor = prof.get("deviation_hz_per_unit")
            rx_deemph = prof.get("deviation_deemphasis", "none")
        return AnalysisSettings(
            deviation_hz_per_unit=dev_factor,
            receiver_deemphasis=rx_deemph,
            fm=fm,
            mode=mode,
            gate_s=args.gate,
            near_hz=args.near,
            band_hz=tuple(args.band) if args.band else None,
            filter=args.filter,
            mains=args.mains,
        )
    except ValueError as exc:
        raise InputError(str(exc)) from None


def meta_from_args(args) -> dict:
    """StreamMeta fields the user gave (clock correction or a bench profile)."""
    fields: dict = {}
    if getattr(args, "profile", None):
        from monitor import profiles

        prof = profiles.load(args.profile)
        fields["clock_ppm"] = float(prof.get("clock_ppm", 0.0))
        fields["profile"] = args.profile
    elif getattr(args, "clock_ppm", None) is not None:
        fields["clock_ppm"] = args.clock_ppm
    for key in ("dial", "sideband", "harmonic"):
        value = getattr(args, key, None)
        if value is not None:
            fields["dial_hz" if key == "dial" else key] = value
    return fields


def analyze_one(path: str, args, settings, progress=None):
    from monitor.engine import analyze_file

    meta = meta_from_args(args)
    if settings.mode == "iq" and meta.get("dial_hz") is not None:
        meta["center_hz"] = meta["dial_hz"]  # the user's centre wins over the file's
    return analyze_file(
        path,
        settings=settings,
        channel=args.channel,
        mix=args.mix,
        swap_iq=args.swap_iq,
        meta=meta,
        progress=progress,
        jobs=getattr(args, "jobs", 1),
    )


def _progress_factory(console):
    """A rich progress bar on stderr, only when stderr is a terminal."""
    if not sys.stderr.isatty():
        return None, None
    from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

    prog = Progress(
        TextColumn("{task.description}"),
        BarColumn(),
        TextColumn("{task.percentage:>3.0f}%"),
        TimeRemainingColumn(),
        console=console,
        transient=True,
        # redrawn from the progress callback, not by a thread of its own: with no other
        # thread running, a long recording's parts can go to workers started by a quick
        # fork (monitor.parallel)
        auto_refresh=False,
    )
    return prog, prog


def run(args) -> int:
    from rich.console import Console

    from monitor import output, render

    err = Console(stderr=True)
    results = []
    prog, _ = _progress_factory(err)
    for path in args.files:
        settings = settings_from_args(args, mode_for(path, args))
        if prog is not None:
            with prog:
                task = prog.add_task(path, total=None)

                shown = [-math.inf]

                def cb(done, total, _t=task, _shown=shown):
                    prog.update(_t, completed=done, total=total)
                    now = time.monotonic()
                    if now - _shown[0] >= 0.1 or (total is not None and done >= total):
                        _shown[0] = now
                        prog.refresh()

                analysis = analyze_one(path, args, settings, progress=cb)
        else:
            analysis = analyze_one(path, args, settings)
        results.append(analysis)

    dicts = []
    for a in results:
        d = a.summary.to_dict()
        d.update(a.extra)
        if args.readings:
            d["readings"] = [r.to_dict() for r in a.readings]
        dicts.append(d)

    if args.csv:
        rows = [{"file": a.meta.source, **r.to_dict()} for a in results for r in a.readings]
        columns: list[str] = []
        for row in rows:
            columns.extend(k for k in row if k not in columns)
        output.write_csv(args.csv, rows, columns or ["file", "t_s", "frequency_hz"])

    if args.json:
        print(output.dumps(dicts[0] if len(dicts) == 1 else dicts))
        return 0
    out = Console()
    for d, a in zip(dicts, results, strict=True):
        out.print(render.summary_table(output.clean(d)))
        if args.readings:
            out.print(render.readings_table([output.clean(r.to_dict()) for r in a.readings]))
        out.print()
    return 0
