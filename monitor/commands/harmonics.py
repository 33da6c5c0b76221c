"""`swingmeter harmonics`: the harmonic ladder of a fundamental, or the fundamental behind
frequencies where a receiver heard the signal; both flag protected bands."""

from __future__ import annotations

import argparse
from dataclasses import asdict

from monitor.errors import InputError
from monitor.units import frequency_arg, positive_frequency_arg

HELP = "harmonics N*f0 in a range, or the fundamental behind heard frequencies"

DESCRIPTION = """\
Forward: from a fundamental (--fundamental, or measured in RECORDING) list the harmonics
N*f0 in a range (default the FM broadcast band, 88-108 MHz) with the deviation on each
(N times the fundamental's) and the fundamental deviation that gives a target deviation
on the harmonic.

Inverse: from two or more receiver frequencies where the signal was heard (--heard,
repeated), find the fundamentals and harmonic numbers that fit within --tolerance. Every
answer f0 also fits as f0/2, f0/3, ... with the harmonic numbers multiplied: those
sub-multiples are listed after the primitive answers, largest fundamental first.

Every listing flags harmonics on aeronautical (108-137 MHz), emergency (121.5 and
243 MHz), maritime distress (156.8 MHz, DSC 156.525 MHz) and distress-beacon (406-406.1
MHz) frequencies (table recalled from the ITU Radio Regulations, Article 5 and Appendix
15; check it against your national rules). Frequencies accept 100e6, 100M, 1.5k.

CAUTION: harmonics of an overdriven oscillator radiate. Check your local regulations and
licensed practice before putting anything on the air.
"""

EPILOG = """\
examples:
  swingmeter harmonics --fundamental 33.4M --deviation 25k --target-deviation 75k
  swingmeter harmonics --fundamental 40.5M --range 100M 250M
  swingmeter harmonics vfo.wav --range 144M 146M
  swingmeter harmonics --heard 100.2M --heard 133.6M --tolerance 2k
  swingmeter harmonics --heard 96.3M --heard 128.4M --heard 160.5M --json

caution: harmonics of an overdriven oscillator radiate, some onto aviation and distress
frequencies. Check local regulations and licensed practice before putting anything on
the air; filter the output and check its harmonics into a dummy load first.
"""


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "harmonics",
        help=HELP,
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument(
        "recording",
        nargs="?",
        metavar="RECORDING",
        help="measure the fundamental in this recording (instead of --fundamental)",
    )
    p.add_argument(
        "--fundamental",
        type=positive_frequency_arg,
        metavar="HZ",
        help="fundamental frequency f0 (forward mode)",
    )
    p.add_argument(
        "--heard",
        type=positive_frequency_arg,
        action="append",
        metavar="HZ",
        help="a receiver frequency where the signal was heard; give two or more (inverse mode)",
    )
    p.add_argument(
        "--tolerance",
        type=positive_frequency_arg,
        default=1e3,
        metavar="HZ",
        help="largest |heard - N*f0| accepted, dial plus reading error (default: 1k)",
    )
    p.add_argument(
        "--min-fundamental",
        type=positive_frequency_arg,
        default=100e3,
        metavar="HZ",
        help="lowest fundamental searched in inverse mode (default: 100k)",
    )
    p.add_argument(
        "--max-fundamental",
        type=positive_frequency_arg,
        metavar="HZ",
        help="highest fundamental searched (default: the lowest heard frequency)",
    )
    p.add_argument(
        "--max-candidates",
        type=int,
        default=20,
        metavar="N",
        help="answers listed in inverse mode (default: 20)",
    )
    p.add_argument(
        "--range",
        nargs=2,
        type=frequency_arg,
        default=[88e6, 108e6],
        metavar=("LO", "HI"),
        help="range for the harmonic listing (default: 88M 108M)",
    )
    p.add_argument(
        "--deviation",
        type=frequency_arg,
        default=0.0,
        metavar="HZ",
        help="peak deviation of the fundamental (default: 0, unmodulated)",
    )
    p.add_argument(
        "--target-deviation",
        type=positive_frequency_arg,
        metavar="HZ",
        help="wanted peak deviation on the harmonic; shows the fundamental deviation "
        "needed for each harmonic (default: none)",
    )
    p.add_argument(
        "--audio",
        type=frequency_arg,
        default=15e3,
        metavar="HZ",
        help="highest modulating frequency, for the occupied bandwidth by Carson's rule "
        "(default: 15k; 0 for a bare carrier)",
    )
    p.add_argument(
        "--guard",
        type=frequency_arg,
        default=12.5e3,
        metavar="HZ",
        help="guard either side of a protected spot frequency (default: 12.5k)",
    )
    p.add_argument(
        "--check-up-to",
        type=positive_frequency_arg,
        default=1e9,
        metavar="HZ",
        help="check harmonics up to this frequency for protected bands (default: 1G)",
    )
    p.add_argument("--json", action="store_true", help="print a JSON object instead of tables")
    return p


def _measured_fundamental(path: str) -> float:
    try:
        from monitor.engine import analyze_file
    except ImportError:
        raise InputError(f"{path}: recordings cannot be analysed by this build") from None
    from pathlib import Path

    if not Path(path).exists():
        raise InputError(f"{path}: no such file")
    from monitor.engine import AnalysisSettings
    from monitor.sources import recorded_mode

    # A beat-note or I/Q recording with its dial (sidecar or SigMF centre) and harmonic
    # gives the oscillator's fundamental; otherwise the tone counted in the recording is it.
    mode = recorded_mode(path) or "audio"
    analysis = analyze_file(path, settings=AnalysisSettings(mode=mode))
    fm = analysis.extra.get("fm") or {}
    f0 = fm.get("fundamental_hz") or getattr(analysis.summary, "frequency_hz", None)
    if f0 is None or not f0 > 0:
        raise InputError(f"{path}: no tone found to take as the fundamental")
    return float(f0)


def _fmt_hz(v: float | None) -> str:
    if v is None:
        return "—"
    a = abs(v)
    if a >= 1e6:
        return f"{v / 1e6:.6f} MHz"
    if a >= 1e3:
        return f"{v / 1e3:.4f} kHz"
    return f"{v:.4g} Hz"


def run(args) -> int:
    from dsp import harmonics as h
    from monitor import output

    modes = sum(x is not None for x in (args.fundamental, args.heard, args.recording))
    if modes != 1:
        raise InputError(
            "harmonics: give exactly one of --fundamental HZ, RECORDING, or --heard HZ "
            "(two or more)"
        )
    lo, hi = args.range
    try:
        if args.heard is not None:
            doc = _inverse(args, h)
        else:
            f0 = args.fundamental or _measured_fundamental(args.recording)
            doc = _forward(args, h, f0, lo, hi)
    except ValueError as exc:
        raise InputError(f"harmonics: {exc}") from None
    doc["guard_rule"] = h.GUARD_RULE
    doc["caution"] = h.CAUTION
    doc["band_table"] = [{**asdict(b), "spot": b.is_spot} for b in h.PROTECTED_BANDS]
    if args.json:
        print(output.dumps(doc))
    else:
        _print(doc)
    return 0


def _protect(h, f0: float, args) -> list[dict]:
    return [
        asdict(p)
        for p in h.protected_harmonics(
            f0,
            deviation_hz=args.deviation,
            max_hz=args.check_up_to,
            audio_hz=args.audio,
            guard_hz=args.guard,
        )
    ]


def _forward(args, h, f0: float, lo: float, hi: float) -> dict:
    lines = h.harmonic_ladder(
        f0,
        lo_hz=lo,
        hi_hz=hi,
        deviation_hz=args.deviation,
        target_deviation_hz=args.target_deviation,
        audio_hz=args.audio,
        guard_hz=args.guard,
    )
    return {
        "mode": "forward",
        "fundamental_hz": f0,
        "source": args.recording,
        "range_hz": [lo, hi],
        "deviation_hz": args.deviation,
        "target_deviation_hz": args.target_deviation,
        "harmonics": [asdict(x) for x in lines],
        "protected": _protect(h, f0, args),
        "check_up_to_hz": args.check_up_to,
    }


def _inverse(args, h) -> dict:
    if len(args.heard) < 2:
        raise InputError("harmonics: --heard needs two or more frequencies")
    res = h.infer_fundamental(
        args.heard,
        tolerance_hz=args.tolerance,
        min_fundamental_hz=args.min_fundamental,
        max_fundamental_hz=args.max_fundamental,
        max_candidates=args.max_candidates,
    )
    cands = []
    for c in res.candidates:
        d = asdict(c)
        d["protected"] = _protect(h, c.fundamental_hz, args)
        cands.append(d)
    return {
        "mode": "inverse",
        "heard_hz": list(res.heard_hz),
        "tolerance_hz": res.tolerance_hz,
        "min_fundamental_hz": res.min_fundamental_hz,
        "candidates": cands,
        "total_count": res.total_count,
        "omitted_count": res.omitted_count,
        "primitive_count": res.primitive_count,
        "explanation": res.explanation,
        "check_up_to_hz": args.check_up_to,
    }


def _protected_table(entries: list[dict], title: str):
    from rich.markup import escape
    from rich.table import Table

    t = Table(title=title, title_justify="left")
    t.add_column("protected band or frequency")
    t.add_column("harmonics N", justify="right")
    t.add_column("source")
    for e in entries:
        ns = e["harmonics"]
        shown = ", ".join(str(n) for n in ns[:12]) + (" …" if e["count"] > 12 else "")
        t.add_row(
            f"[bold red]{escape(e['band'])}[/bold red]",
            f"{shown} ({e['count']})" if e["count"] > 1 else shown,
            escape(e["source"]),
        )
    return t


def _print(doc: dict) -> None:
    from rich.console import Console
    from rich.markup import escape
    from rich.table import Table

    out = Console()
    top = _fmt_hz(doc["check_up_to_hz"])
    if doc["mode"] == "forward":
        lo, hi = doc["range_hz"]
        t = Table(
            title=f"harmonics of {_fmt_hz(doc['fundamental_hz'])} in {_fmt_hz(lo)} – "
            f"{_fmt_hz(hi)}" + (f" (measured in {escape(doc['source'])})" if doc["source"] else ""),
            title_justify="left",
        )
        t.add_column("N", justify="right")
        t.add_column("frequency", justify="right")
        t.add_column("deviation", justify="right")
        if doc["target_deviation_hz"]:
            t.add_column(f"f0 deviation for {_fmt_hz(doc['target_deviation_hz'])}", justify="right")
        t.add_column("protected")
        for x in doc["harmonics"]:
            row = [str(x["n"]), _fmt_hz(x["frequency_hz"]), _fmt_hz(x["deviation_hz"])]
            if doc["target_deviation_hz"]:
                row.append(_fmt_hz(x["fundamental_deviation_for_target_hz"]))
            row.append(
                "[bold red]" + escape("; ".join(b["name"] for b in x["protected"])) + "[/bold red]"
                if x["protected"]
                else ""
            )
            t.add_row(*row)
        if doc["harmonics"]:
            out.print(t)
        else:
            out.print(f"no harmonic of {_fmt_hz(doc['fundamental_hz'])} lands in the range")
        if doc["protected"]:
            out.print(
                _protected_table(
                    doc["protected"], f"WARNING: harmonics up to {top} on protected frequencies"
                )
            )
        else:
            out.print(f"no harmonic up to {top} touches a protected band in the table")
    else:
        heard = ", ".join(_fmt_hz(v) for v in doc["heard_hz"])
        if not doc["candidates"]:
            out.print(f"[bold]nothing fits[/bold]: heard {heard}")
            out.print(escape(doc["explanation"]))
        else:
            t = Table(
                title=f"fundamentals explaining {heard} within ±{_fmt_hz(doc['tolerance_hz'])}",
                title_justify="left",
            )
            for col in (
                "rank",
                "fundamental",
                "harmonic numbers",
                "residual",
                "max error",
                "kind",
                "protected",
            ):
                t.add_column(col, justify="left" if col in ("kind", "protected") else "right")
            for i, c in enumerate(doc["candidates"], 1):
                kind = (
                    "primitive"
                    if c["divisor"] == 1
                    else f"f0/{c['divisor']} of #{c['alias_of']}"
                    if c["alias_of"]
                    else f"sub-multiple (/{c['divisor']})"
                )
                prot = "; ".join(
                    f"N={','.join(str(n) for n in p['harmonics'][:4])}"
                    f"{'…' if p['count'] > 4 else ''} {p['band']}"
                    for p in c["protected"]
                )
                t.add_row(
                    str(i),
                    _fmt_hz(c["fundamental_hz"]),
                    ", ".join(str(n) for n in c["harmonics"]),
                    _fmt_hz(c["residual_hz"]),
                    _fmt_hz(c["max_error_hz"]),
                    kind,
                    f"[red]{escape(prot)}[/red]" if prot else "",
                )
            out.print(t)
            if doc["omitted_count"]:
                out.print(f"{doc['omitted_count']} more answers not shown (--max-candidates)")
            out.print(escape(doc["explanation"]))
            best = doc["candidates"][0]
            if best["protected"]:
                out.print(
                    _protected_table(
                        best["protected"],
                        f"WARNING: harmonics of {_fmt_hz(best['fundamental_hz'])} up to {top} "
                        "on protected frequencies",
                    )
                )
    out.print(f"[dim]{escape(doc['guard_rule'])}[/dim]")
    out.print(f"[bold yellow]{escape(doc['caution'])}[/bold yellow]")
