"""`swingmeter report`: one self-contained HTML file (and optionally a PDF) of a session."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from monitor.commands.analyze import (
    add_fm_options,
    add_input_options,
    add_measure_options,
    meta_from_args,
    mode_for,
    settings_from_args,
)
from monitor.errors import InputError

HELP = "write an HTML (and PDF) report of recordings, or compare two of them"
EPILOG = """\
examples:
  swingmeter report recordings_demo/rx-audio-1khz.wav -o bench.html
  swingmeter report to7-beat.wav --mode beat --dial 97.29M --harmonic 3 -o to7.html --pdf
  swingmeter report before.wav after.wav --compare --mode beat -o trimmer.html

The HTML holds its plots as embedded PNG images: it opens offline and can be mailed as
one file. With --compare the two recordings (A before, B after an adjustment) stand side
by side and each figure's difference is marked significant when it exceeds twice the
combined 1-sigma uncertainty.
"""


def add_parser(sub) -> argparse.ArgumentParser:
    p = sub.add_parser(
        "report",
        help=HELP,
        description="Analyse recordings as `analyze` does (same options) and write one\n"
        "self-contained HTML report: the summary with uncertainties, the spectrum, the\n"
        "deviation waveform and histogram, the frequency history with its drift fit, the\n"
        "Allan plot, the harmonic and protected-band check, the metadata and bench profile.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("files", nargs="+", metavar="FILE", help="recordings to report on")
    p.add_argument(
        "-o",
        "--output",
        required=True,
        metavar="PATH",
        help="the HTML file to write (overwritten if it exists)",
    )
    p.add_argument(
        "--compare",
        action="store_true",
        help="two recordings (before, after) side by side with the differences of each figure",
    )
    p.add_argument(
        "--pdf",
        action="store_true",
        help="also write a PDF next to the HTML (same name, .pdf)",
    )
    p.add_argument("--title", metavar="TEXT", help="heading of the report")
    add_input_options(p)
    add_measure_options(p)
    add_fm_options(p)
    return p


def _say(text: str) -> None:
    print(f"swingmeter report: {text}", file=sys.stderr, flush=True)


def run(args) -> int:
    from monitor import report

    report._matplotlib()  # say it is missing before any analysis
    out = report.check_output_path(args.output)
    if out.suffix.lower() == ".pdf":
        raise InputError(
            f"{args.output}: the report is HTML; give -o NAME.html, and --pdf for a PDF beside it"
        )
    pdf_path = out.with_suffix(".pdf") if args.pdf else None
    if args.compare and len(args.files) != 2:
        raise InputError(f"--compare needs exactly two recordings, got {len(args.files)}")
    for path in args.files:
        if not Path(path).is_file():
            raise InputError(f"{path}: no such recording")
    profile = None
    if getattr(args, "profile", None):
        from monitor import profiles

        profile = profiles.load(args.profile)
    many = len(args.files) > 1
    recs = []
    for i, path in enumerate(args.files, 1):
        if many:
            _say(f"[{i}/{len(args.files)}] analysing {path}")
        settings = settings_from_args(args, mode_for(path, args))
        meta = meta_from_args(args)
        if settings.mode == "iq" and meta.get("dial_hz") is not None:
            meta["center_hz"] = meta["dial_hz"]  # the user's centre wins over the file's
        recs.append(
            report.analyze_for_report(
                path,
                settings=settings,
                meta=meta,
                channel=args.channel,
                mix=args.mix,
                swap_iq=args.swap_iq,
                profile=profile,
            )
        )
    if many:
        _say("drawing the plots")
    plots = [report.make_plots(r) for r in recs]
    html = report.render_html(recs, compare=args.compare, title=args.title, plots=plots)
    report.write_text(out, html)
    _say(f"wrote {out}")
    if pdf_path is not None:
        report.write_pdf(pdf_path, recs, compare=args.compare, title=args.title, plots=plots)
        _say(f"wrote {pdf_path}")
    return 0
