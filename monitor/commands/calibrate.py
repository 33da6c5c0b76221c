"""`swingmeter calibrate`: bench profiles (sound-card clock, deviation factor)."""

from __future__ import annotations

import argparse
import datetime as _dt
import math

from monitor.errors import InputError
from monitor.units import positive_frequency_arg

HELP = "measure the sound card's clock error; list and show bench profiles"
EPILOG = """\
examples:
  swingmeter calibrate                                  # list bench profiles
  swingmeter calibrate show bench-a
  swingmeter calibrate clock --reference 1000 ref-1khz.wav --profile bench-a
  swingmeter analyze dut.wav --profile bench-a          # apply it

The clock correction is P = (true sample rate / nominal - 1) * 1e6 ppm; every measured
frequency is multiplied by (1 + P*1e-6). Record a tone whose frequency you trust (a
GPS-disciplined generator, a standard-time station's tone, a calibrated counter's
output) through the same sound card at the same sample rate.
"""

# A sound card's crystal is typically within +/-100 ppm (common practice); beyond this the
# recording is more likely the wrong file or the wrong reference frequency.
MAX_PLAUSIBLE_PPM = 2000.0


def add_parser(sub) -> argparse.ArgumentParser:
    p = sub.add_parser(
        "calibrate",
        help=HELP,
        description="Bench profiles hold this bench's calibration: the sound card's clock "
        "correction and (for audio mode) the deviation factor. Without an action, list "
        "the profiles.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--json", action="store_true", help="print JSON")
    acts = p.add_subparsers(dest="action", metavar="ACTION")
    lst = acts.add_parser("list", help="list bench profiles (the default)")
    lst.add_argument("--json", action="store_true", dest="json_sub", help="print JSON")
    show = acts.add_parser("show", help="show one bench profile")
    show.add_argument("name", metavar="NAME")
    show.add_argument("--json", action="store_true", dest="json_sub", help="print JSON")
    clock = acts.add_parser(
        "clock",
        help="measure the clock correction from a recording of a known tone",
        description="Measure the sound card's clock correction from a recording of a tone "
        "of known frequency and save it in a bench profile.",
        epilog="example:\n  swingmeter calibrate clock --reference 1000 ref.wav --profile bench-a",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    clock.add_argument("file", metavar="FILE", help="recording of the reference tone")
    clock.add_argument(
        "--reference",
        type=positive_frequency_arg,
        required=True,
        metavar="HZ",
        help="the reference tone's true frequency",
    )
    clock.add_argument(
        "--reference-ppm",
        type=float,
        default=0.0,
        metavar="U",
        help="1-sigma uncertainty of the reference itself, ppm (default: 0)",
    )
    clock.add_argument(
        "--profile",
        required=True,
        metavar="NAME",
        help="bench profile to save the correction in",
    )
    clock.add_argument("--channel", type=int, default=0, metavar="N", help="channel (default 0)")
    clock.add_argument("--gate", type=float, default=1.0, metavar="S", help="gate time (default 1)")
    clock.add_argument("--json", action="store_true", dest="json_sub", help="print JSON")
    extra = getattr(_deviation_module(), "add_action", None)
    if extra is not None:
        extra(acts)
    return p


def _deviation_module():
    import importlib

    name = "monitor.commands.calibrate_deviation"
    try:
        return importlib.import_module(name)
    except ModuleNotFoundError as exc:
        if exc.name != name:
            raise
        return None


def measure_clock_ppm(path: str, reference_hz: float, *, channel=0, gate_s=1.0):
    """Clock correction (ppm) and its 1-sigma uncertainty from a reference-tone recording.

    The tone is measured against the nominal sample clock; true rate / nominal rate =
    f_reference / f_measured, so P = (f_ref / f_meas - 1) * 1e6.
    """
    from monitor.engine import AnalysisSettings, analyze_file

    band = (reference_hz * 0.99, reference_hz * 1.01)
    settings = AnalysisSettings(mode="audio", gate_s=gate_s, band_hz=band)
    analysis = analyze_file(path, settings=settings, channel=channel, meta={"clock_ppm": 0.0})
    tone = analysis.summary.tone
    if tone.frequency_hz is None:
        raise InputError(f"{path}: no tone found within 1% of {reference_hz:g} Hz")
    f_meas, s_meas = tone.frequency_hz, tone.uncertainty_hz
    ppm = (reference_hz / f_meas - 1.0) * 1e6
    if abs(ppm) > MAX_PLAUSIBLE_PPM:
        raise InputError(
            f"{path}: measured {f_meas:.4f} Hz is {ppm:+.0f} ppm from the reference "
            f"{reference_hz:g} Hz; is this the right recording and reference?"
        )
    u_ppm = 1e6 * reference_hz * s_meas / f_meas**2
    return ppm, u_ppm, analysis


def run(args) -> int:
    from rich.console import Console
    from rich.table import Table

    from monitor import output, profiles

    action = args.action or "list"
    args.json = args.json or getattr(args, "json_sub", False)
    con = Console()
    if action == "list":
        profs = profiles.load_all()
        if args.json:
            print(output.dumps(profs))
            return 0
        if not profs:
            con.print(f"no bench profiles yet ({profiles.profile_path()})")
            return 0
        t = Table(title=str(profiles.profile_path()), title_justify="left")
        for col in ("profile", "clock ppm", "± ppm", "measured (UTC)", "deviation factor"):
            t.add_column(col)
        for name, prof in sorted(profs.items()):
            t.add_row(
                name,
                _fmt(prof.get("clock_ppm"), "+.3f"),
                _fmt(prof.get("clock_uncertainty_ppm"), ".3f"),
                str(prof.get("clock_measured_utc", "—")),
                _fmt(prof.get("deviation_hz_per_unit"), ".6g"),
            )
        con.print(t)
        return 0
    if action == "show":
        prof = profiles.load(args.name)
        if args.json:
            print(output.dumps({args.name: prof}))
        else:
            t = Table(title=f"bench profile {args.name}", title_justify="left", show_header=False)
            t.add_column("key", style="bold")
            t.add_column("value")
            for k, v in sorted(prof.items()):
                t.add_row(k, str(v))
            con.print(t)
        return 0
    if action == "clock":
        profiles.check_name(args.profile)
        ppm, u_ppm, analysis = measure_clock_ppm(
            args.file, args.reference, channel=args.channel, gate_s=args.gate
        )
        u_total = math.hypot(u_ppm, args.reference_ppm)
        now = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
        prof = profiles.update(
            args.profile,
            clock_ppm=ppm,
            clock_uncertainty_ppm=u_total,
            clock_reference_hz=args.reference,
            clock_source_file=str(args.file),
            clock_sample_rate_hz=analysis.meta.fs_hz,
            clock_measured_utc=now,
        )
        result = {
            "profile": args.profile,
            "clock_ppm": ppm,
            "clock_uncertainty_ppm": u_total,
            "measured_hz": analysis.summary.tone.frequency_hz,
            "reference_hz": args.reference,
            "warnings": list(analysis.summary.warnings),
        }
        if args.json:
            print(output.dumps(result))
        else:
            from dsp.tone import format_with_uncertainty

            con.print(
                f"clock correction {format_with_uncertainty(ppm, u_total, 'ppm')} (1σ) saved "
                "in bench profile "
                f"[bold]{args.profile}[/bold]\n"
                f"  measured {analysis.summary.tone.frequency_hz:.6f} Hz for a "
                f"{args.reference:g} Hz reference at {analysis.meta.fs_hz:g} Hz nominal"
            )
            for w in analysis.summary.warnings:
                con.print(f"[yellow]warning: {w}[/yellow]")
        del prof
        return 0
    mod = _deviation_module()
    if mod is not None and action == getattr(mod, "ACTION", None):
        return mod.run(args)
    raise InputError(f"unknown calibrate action {action!r}")


def _fmt(v, fmt):
    if isinstance(v, (int, float)) and math.isfinite(v):
        return format(v, fmt)
    return "—"
