"""`swingmeter stability`: drift, warm-up and the Allan family of a run of readings."""

from __future__ import annotations

import argparse
import math
from dataclasses import asdict, replace

from monitor.errors import InputError
from monitor.units import positive_frequency_arg

HELP = "drift, warm-up time and Allan deviation of a run of readings"

DESCRIPTION = """\
Frequency stability of an oscillator from a run of readings: linear and quadratic drift,
warm-up time, and overlapping Allan deviation (OADEV), modified Allan deviation (MDEV) and
time deviation (TDEV) with confidence intervals at octave taus, with a noise-type hint
from the slopes (NIST SP 1065).

INPUT is a readings file from `swingmeter analyze --readings --json` or `--csv`, a
`swingmeter live` log (CSV with at least t_s and frequency_hz), or a recording, which is
analysed first. Gaps and missing readings are found and reported; the Allan family is
pooled over the contiguous segments, nothing is interpolated.

The sound card's clock is part of every reading: give a run of readings of a reference
tone (a frequency standard, or a time-signal tone) with --reference to measure that floor;
the DUT's curve is shown beside it.
"""

EPILOG = """\
examples:
  swingmeter stability readings.csv
  swingmeter stability readings.json --settled --json
  swingmeter stability vfo-warmup.wav --gate 1 --plot vfo.png
  swingmeter stability vfo.csv --reference ref-1khz.csv --span 600 3600
  swingmeter stability --reference ref-1khz.csv        (the floor alone)

what to quote: OADEV at a stated tau with its confidence interval and the gate time.
The readings are averages over contiguous gates, so ADEV at the gate time is not the
figure instantaneous phase samples would give; see the README's stability section.
"""


def _taus_arg(text: str):
    if text.strip().lower() == "octave":
        return "octave"
    try:
        values = [float(v) for v in text.split(",") if v.strip()]
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"--taus must be 'octave' or seconds separated by commas, got {text!r}"
        ) from None
    if not values or any(not (math.isfinite(v) and v > 0) for v in values):
        raise argparse.ArgumentTypeError(f"--taus values must be positive, got {text!r}")
    return values


def _positive_float(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise argparse.ArgumentTypeError(f"must be positive: {text!r}")
    return v


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "stability",
        help=HELP,
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument(
        "input",
        nargs="?",
        metavar="INPUT",
        help="readings (CSV/JSON) or a recording (.wav, .rf64, .w64, .sigmf-meta)",
    )
    p.add_argument(
        "--reference",
        metavar="REF",
        help="readings or recording of a reference tone: measures the floor set by the "
        "sound card's clock (default: none)",
    )
    p.add_argument(
        "--record",
        type=int,
        metavar="K",
        help="which recording (from 1) when INPUT holds several (default: the only one)",
    )
    p.add_argument(
        "--reference-record",
        type=int,
        metavar="K",
        help="the same for REF (default: the only one)",
    )
    p.add_argument(
        "--gate",
        type=_positive_float,
        default=1.0,
        metavar="S",
        help="gate time for recordings, s (default: 1)",
    )
    p.add_argument(
        "--tau0",
        type=_positive_float,
        metavar="S",
        help="reading interval tau0, s (default: the file's gate_s, else the median "
        "interval between readings)",
    )
    p.add_argument(
        "--nominal",
        type=positive_frequency_arg,
        metavar="HZ",
        help="nominal frequency for ppm and fractional frequency y = f/nominal - 1; "
        "accepts 10M, 1.5k, 100e6 (default: the median reading)",
    )
    p.add_argument(
        "--settle",
        type=_positive_float,
        default=1.0,
        metavar="PPM_PER_MIN",
        help="warm-up ends when the drift rate stays below this (default: 1 ppm/min)",
    )
    p.add_argument(
        "--settle-window",
        type=_positive_float,
        default=60.0,
        metavar="S",
        help="window of the local drift-rate fit, s (default: 60)",
    )
    which = p.add_mutually_exclusive_group()
    which.add_argument(
        "--settled",
        action="store_true",
        help="Allan family of the part after the warm-up time only (default: whole record)",
    )
    which.add_argument(
        "--span",
        nargs=2,
        type=float,
        metavar=("T0", "T1"),
        help="Allan family of the readings with T0 <= t_s <= T1 (default: whole record)",
    )
    p.add_argument(
        "--taus",
        type=_taus_arg,
        default="octave",
        metavar="LIST",
        help="'octave' (tau0, 2*tau0, 4*tau0, ...) or seconds separated by commas, "
        "rounded to multiples of tau0 (default: octave)",
    )
    p.add_argument(
        "--remove-drift",
        action="store_true",
        help="subtract the linear drift before the Allan family (default: keep it)",
    )
    p.add_argument(
        "--confidence",
        type=float,
        default=0.683,
        metavar="P",
        help="two-sided probability of the confidence intervals (default: 0.683, 1 sigma)",
    )
    p.add_argument("--json", action="store_true", help="print a JSON object instead of tables")
    p.add_argument(
        "--plot",
        metavar="PATH.png",
        help="write frequency vs time with the fits and the Allan plot to PATH.png "
        "(needs matplotlib; default: no plot)",
    )
    return p


def _factors(taus, tau0: float):
    if taus == "octave":
        return None
    ms = sorted({max(1, round(t / tau0)) for t in taus})
    return ms


def _gate_notes(series, tau0: float | None) -> tuple[float | None, list[str]]:
    """Reading interval to use, and what to say when the gate and the spacing differ."""
    spacing = float(f"{_median_interval(series):.9g}")
    gate = series.gate_s
    if tau0 is not None or gate is None or abs(gate - spacing) <= 0.01 * spacing:
        return tau0 or gate, []
    if gate > spacing:
        note = (
            f"gates of {gate:g} s overlap (readings every {spacing:g} s): neighbouring "
            f"readings share data, so taus below {gate:g} s understate the noise; tau0 is "
            "taken as the spacing and only taus of at least the gate time should be quoted"
        )
    else:
        note = (
            f"dead time: gates of {gate:g} s every {spacing:g} s; tau0 is taken as the "
            "spacing, and the Allan figures are biased for noise other than white FM "
            "(NIST SP 1065, dead-time corrections)"
        )
    return spacing, [note]


def _analyze(series, args, which: str):
    from dsp.stability import analyze_stability

    tau0, notes = _gate_notes(series, args.tau0)
    try:
        if args.settled:
            select, span = "settled", None
        elif args.span:
            select, span = "span", tuple(args.span)
        else:
            select, span = "all", None
        result = analyze_stability(
            series.t_s,
            series.frequency_hz,
            nominal_hz=args.nominal,
            tau0_s=tau0,
            settle_ppm_per_min=args.settle,
            settle_window_s=args.settle_window,
            select=select,
            span_s=span,
            factors=_factors(args.taus, tau0 or _median_interval(series)),
            remove_drift=args.remove_drift,
            confidence=args.confidence,
            breaks_before=series.breaks_before,
        )
    except ValueError as exc:
        raise InputError(f"{which} {series.source}: {exc}") from None
    if notes:
        result = replace(result, warnings=(*result.warnings, *notes))
    return result


def _median_interval(series) -> float:
    import numpy as np

    if series.t_s.size < 2:
        return 1.0
    return float(np.median(np.diff(series.t_s)))


def _curve_dict(c) -> dict:
    d = asdict(c)
    d.pop("kind")
    return d


def _quote(result) -> dict:
    """The sentence to quote: OADEV at 1 s if measured, else at the shortest tau."""
    a = result.adev
    i = a.taus_s.index(1.0) if 1.0 in a.taus_s else 0
    tau = a.taus_s[i]
    text = (
        f"OADEV({tau:g} s) = {a.values[i]:.3g} "
        f"({100 * a.confidence:.0f}% interval {a.lower[i]:.3g} to {a.upper[i]:.3g}), "
        f"gate time {result.check.tau0_s:g} s, {result.check.usable_count} readings"
    )
    return {
        "statistic": "oadev",
        "tau_s": tau,
        "value": a.values[i],
        "lower": a.lower[i],
        "upper": a.upper[i],
        "gate_s": result.check.tau0_s,
        "text": text,
    }


def _counter_floor(series, result) -> float | None:
    """ADEV(tau0) the readings' own uncertainty implies: white readings of standard
    deviation u give sigma_y(tau0) = u/f (AVAR = E[(y2 - y1)^2]/2 = u^2/f^2)."""
    import numpy as np

    u = series.uncertainty_hz
    if u is None or not np.any(np.isfinite(u)):
        return None
    return float(np.nanmedian(u) / result.nominal_hz)


def _result_dict(series, result) -> dict:
    return {
        "counter_floor_adev_tau0": _counter_floor(series, result),
        "source": series.source,
        "readings": asdict(result.check),
        "nominal_hz": result.nominal_hz,
        "tau0_s": result.check.tau0_s,
        "span_s": list(result.span_s),
        "drift": asdict(result.drift),
        "span_drift": asdict(result.span_drift),
        "warmup_s": result.warmup.warmup_s,
        "warmup": asdict(result.warmup),
        "adev": _curve_dict(result.adev),
        "adev_nonoverlapping": _curve_dict(result.adev_nonoverlapping),
        "mdev": _curve_dict(result.mdev),
        "tdev": _curve_dict(result.tdev),
        "noise": asdict(result.noise),
        "quote": _quote(result),
        "warnings": list(result.warnings),
    }


FLOOR_RATIO = 3.0  # DUT within 3x of the floor: the figure is the sound card's, not the DUT's


def _comparison(dut, ref) -> list[dict]:
    rows = []
    ref_map = dict(zip(ref.adev.taus_s, ref.adev.values, strict=True))
    for tau, v in zip(dut.adev.taus_s, dut.adev.values, strict=True):
        fl = ref_map.get(tau)
        ratio = v / fl if fl else None
        rows.append(
            {
                "tau_s": tau,
                "dut_oadev": v,
                "floor_oadev": fl,
                "ratio": ratio,
                "at_floor": ratio is not None and ratio < FLOOR_RATIO,
            }
        )
    return rows


def run(args) -> int:
    from dsp.stability import INTERPRETATION
    from monitor import output
    from monitor.readings_io import load_series

    if not args.input and not args.reference:
        raise InputError("stability: give INPUT, --reference REF, or both")
    if not 0 < args.confidence < 1:
        raise InputError(f"--confidence={args.confidence} must be between 0 and 1")
    dut = ref = None
    if args.input:
        s = load_series(args.input, record=args.record, gate_s=args.gate)
        dut = (s, _analyze(s, args, "INPUT"))
    if args.reference:
        s = load_series(args.reference, record=args.reference_record, gate_s=args.gate)
        ref = (s, _analyze(s, args, "REF"))

    main_ = dut or ref
    doc = _result_dict(*main_)
    doc["role"] = "dut" if dut else "floor"
    doc["interpretation"] = INTERPRETATION
    doc["reference"] = _result_dict(*ref) if (dut and ref) else None
    doc["comparison"] = _comparison(dut[1], ref[1]) if (dut and ref) else None
    if dut and ref and abs(dut[1].check.tau0_s - ref[1].check.tau0_s) > 1e-9:
        doc["warnings"].append(
            f"the reference's gate time ({ref[1].check.tau0_s:g} s) differs from the DUT's "
            f"({dut[1].check.tau0_s:g} s): short-tau figures are not comparable"
        )
    if args.plot:
        _plot(args.plot, dut, ref)
        doc["plot"] = args.plot
    if args.json:
        print(output.dumps(doc))
        return 0
    _print(doc)
    return 0


# ---------------------------------------------------------------------------------------
# terminal


def _g(v, fmt=".3g", unit=""):
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "—"
    return f"{v:{fmt}}" + (f" {unit}" if unit else "")


def _print(doc: dict) -> None:
    from rich.console import Console
    from rich.markup import escape
    from rich.table import Table

    out = Console()
    rd = doc["readings"]
    head = Table(
        title=f"{'floor' if doc['role'] == 'floor' else 'stability'}: {escape(doc['source'])}",
        title_justify="left",
        show_header=False,
        box=None,
    )
    head.add_column(style="bold")
    head.add_column()
    head.add_row("readings", f"{rd['usable_count']} of {rd['count']}, tau0 {rd['tau0_s']:g} s")
    head.add_row("gaps", f"{rd['gap_count']} (about {rd['skipped_estimate']} readings missing)")
    head.add_row("nominal", _g(doc["nominal_hz"], ".10g", "Hz"))
    head.add_row("Allan span", f"{doc['span_s'][0]:g} s to {doc['span_s'][1]:g} s")
    d = doc["drift"]
    head.add_row(
        "drift (linear)",
        f"{_g(d['hz_per_s'], '.4g', 'Hz/s')}, {_g(d['ppm_per_min'], '.4g', 'ppm/min')}; "
        f"{_g(d['linear_change_hz'], '.4g', 'Hz')} over {d['duration_s']:g} s",
    )
    head.add_row(
        "drift (quadratic)",
        f"{_g(d['quadratic_hz_per_s2'], '.4g', 'Hz/s²')}; rate "
        f"{_g(d['quadratic_start_hz_per_s'], '.4g')} → "
        f"{_g(d['quadratic_end_hz_per_s'], '.4g', 'Hz/s')}",
    )
    sd = doc["span_drift"]
    if sd != d:
        head.add_row(
            "drift (Allan span)",
            f"{_g(sd['hz_per_s'], '.4g', 'Hz/s')}, {_g(sd['ppm_per_min'], '.4g', 'ppm/min')}",
        )
    head.add_row(
        "total excursion", f"{_g(d['excursion_hz'], '.4g', 'Hz')} ({_g(d['excursion_ppm'])} ppm)"
    )
    w = doc["warmup"]
    head.add_row(
        "warm-up",
        (f"{w['warmup_s']:.1f} s" if w["warmup_s"] is not None else "not settled within the record")
        + f" (rate below {w['threshold_ppm_per_min']:g} ppm/min, {w['window_s']:g} s window)",
    )
    out.print(head)

    cmp_map = {r["tau_s"]: r for r in (doc["comparison"] or [])}
    md = dict(zip(doc["mdev"]["taus_s"], range(len(doc["mdev"]["taus_s"])), strict=True))
    local = dict(doc["noise"]["per_tau"])
    t = Table(title="Allan family (fractional; TDEV in seconds)", title_justify="left")
    pct = f"{100 * doc['adev']['confidence']:.0f}%"
    for col in ("tau s", "OADEV", f"{pct} interval", "MDEV", "TDEV s", "slope →"):
        t.add_column(col, justify="right" if col != "slope →" else "left")
    if doc["comparison"]:
        t.add_column("floor OADEV", justify="right")
        t.add_column("DUT/floor", justify="right")
    a = doc["adev"]
    for i, tau in enumerate(a["taus_s"]):
        j = md.get(tau)
        row = [
            f"{tau:g}",
            _g(a["values"][i]),
            f"{_g(a['lower'][i])} – {_g(a['upper'][i])}",
            _g(doc["mdev"]["values"][j]) if j is not None else "—",
            _g(doc["tdev"]["values"][j]) if j is not None else "—",
            local.get(tau, ""),
        ]
        if doc["comparison"]:
            c = cmp_map.get(tau, {})
            ratio = c.get("ratio")
            row += [
                _g(c.get("floor_oadev")),
                (_g(ratio, ".2f") + (" at floor" if c.get("at_floor") else "")) if ratio else "—",
            ]
        t.add_row(*row)
    out.print(t)
    out.print(f"noise: {escape(doc['noise']['explanation'])}")
    out.print(f"quote: {escape(doc['quote']['text'])}")
    if doc.get("counter_floor_adev_tau0") is not None:
        out.print(
            f"the readings' own uncertainty (median uncertainty_hz / nominal) alone gives "
            f"ADEV({rd['tau0_s']:g} s) ≈ {doc['counter_floor_adev_tau0']:.3g}"
        )
    if doc["comparison"] and any(c["at_floor"] for c in doc["comparison"]):
        out.print(
            f"where DUT/floor < {FLOOR_RATIO:g} the figure is set by the sound card's clock "
            "and the counter, not by the oscillator: it is an upper bound at best."
        )
    for msg in doc["warnings"] + ((doc["reference"] or {}).get("warnings") or []):
        out.print(f"[yellow]warning:[/yellow] {escape(msg)}")
    out.print(f"[dim]{escape(doc['interpretation'])}[/dim]")
    if doc.get("plot"):
        out.print(f"plot written to {escape(doc['plot'])}")


# ---------------------------------------------------------------------------------------
# plot


def _plot(path: str, dut, ref) -> None:
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise InputError(
            "--plot needs matplotlib, which is not installed: pip install 'swingmeter[plot]'"
        ) from None
    import numpy as np

    main_ = dut or ref
    series, res = main_
    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(9, 9))
    t, f = series.t_s, series.frequency_hz
    ok = np.isfinite(f)
    d = res.drift
    tm = 0.5 * (t[ok][0] + t[ok][-1])
    ax1.plot(t[ok], f[ok] - res.nominal_hz, ".", ms=2, label="readings")
    lin = d.linear_mid_hz + d.hz_per_s * (t - tm) - res.nominal_hz
    ax1.plot(t, lin, "-", label=f"linear fit, {d.ppm_per_min:.3g} ppm/min")
    b_mid = 0.5 * (d.quadratic_start_hz_per_s + d.quadratic_end_hz_per_s)
    quad_mid = np.mean(f[ok] - (b_mid * (t[ok] - tm) + d.quadratic_hz_per_s2 * (t[ok] - tm) ** 2))
    quad = quad_mid + b_mid * (t - tm) + d.quadratic_hz_per_s2 * (t - tm) ** 2 - res.nominal_hz
    ax1.plot(t, quad, "--", label="quadratic fit")
    if res.warmup.settled_at_t_s is not None:
        ax1.axvline(res.warmup.settled_at_t_s, color="grey", ls=":", label="warm-up end")
    if res.span_s != (float(t[ok][0]), float(t[ok][-1])):
        ax1.axvspan(*res.span_s, color="0.9", zorder=0, label="Allan span")
    ax1.set_xlabel("t (s)")
    ax1.set_ylabel(f"frequency - {res.nominal_hz:.10g} Hz (Hz)")
    ax1.set_title(f"{series.source}")
    ax1.legend(fontsize="small")
    ax1.grid(True, alpha=0.3)

    def curve(ax, c, label, **kw):
        tau = np.asarray(c.taus_s)
        v = np.asarray(c.values)
        err = np.vstack([v - np.asarray(c.lower), np.asarray(c.upper) - v])
        ax.errorbar(tau, v, yerr=err, capsize=2, label=label, **kw)

    curve(ax2, res.adev, "OADEV" if dut else "floor OADEV", marker="o")
    curve(ax2, res.mdev, "MDEV", marker="s", ls="--")
    if dut and ref:
        curve(ax2, ref[1].adev, "floor OADEV (reference)", marker="^", color="grey")
    # Slope guides (NIST SP 1065 Table 5) through the middle of the measured curve; the
    # axis limits stay on the data so the steep guides do not squash it.
    vals = [v for c in (res.adev, res.mdev) for v in c.values if v > 0]
    if dut and ref:
        vals += [v for v in ref[1].adev.values if v > 0]
    lo, hi = min(vals) / 3, max(vals) * 3
    tau = np.asarray(res.adev.taus_s)
    k = len(tau) // 2
    t_mid, v_mid = tau[k], res.adev.values[k]
    guides = ((-1, "PM"), (-0.5, "white FM"), (0, "flicker FM"), (0.5, "RW FM"), (1, "drift"))
    for slope, name in guides:
        g = v_mid * (tau / t_mid) ** slope
        ax2.plot(tau, g, ":", lw=0.8, color="0.6")
        inside = np.nonzero((g > lo) & (g < hi))[0]
        if inside.size:
            j = inside[-1]
            ax2.annotate(f"τ^{slope:+g} {name}", (tau[j], g[j]), fontsize=7, color="0.4")
    if len(tau) > 1:
        ax2.set_xlim(tau[0] / 1.5, tau[-1] * 1.5)
    ax2.set_ylim(lo, hi)
    ax2.set_xscale("log")
    ax2.set_yscale("log")
    ax2.set_xlabel("τ (s)")
    ax2.set_ylabel("σ_y(τ)")
    ax2.set_title(
        f"Allan family, gate time {res.check.tau0_s:g} s, "
        f"t = {res.span_s[0]:g} to {res.span_s[1]:g} s"
    )
    ax2.legend(fontsize="small")
    ax2.grid(True, which="both", alpha=0.3)
    fig.tight_layout()
    try:
        fig.savefig(path, dpi=100)
    except OSError as exc:
        raise InputError(f"{path}: cannot write the plot ({exc.strerror or exc})") from None
    finally:
        plt.close(fig)
