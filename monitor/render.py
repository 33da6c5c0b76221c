"""Terminal rendering of summaries and readings (rich)."""

from __future__ import annotations

import math

from dsp.tone import format_with_uncertainty


def _num(v, fmt: str, unit: str = "") -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "—"
    return f"{v:{fmt}}{(' ' + unit) if unit else ''}"


def summary_table(summary: dict):
    """A rich Table for one summary dict (as produced by Summary.to_dict() + extras)."""
    from rich.table import Table

    t = Table(title=summary["file"], title_justify="left", show_header=False, box=None)
    t.add_column("what", style="bold")
    t.add_column("value")
    dur = summary["duration_s"]
    t.add_row(
        "input",
        f"{summary['mode']}, {summary['sample_rate_hz']:g} Hz, "
        f"{summary.get('channels', 1)} ch, {dur:.2f} s, gate {summary['gate_s']:g} s",
    )
    clock = summary["clock"]
    ctext = f"{clock['ppm']:+.2f} ppm"
    if clock.get("profile"):
        ctext += f" (bench profile {clock['profile']})"
    t.add_row("clock correction", ctext)
    tone = summary.get("tone") or {}
    if "fm" in summary or summary.get("mode") in ("beat", "iq"):
        tone = {}  # the FM section shows the carrier
    if tone.get("frequency_hz") is not None:
        t.add_row(
            "frequency",
            format_with_uncertainty(tone["frequency_hz"], tone["uncertainty_hz"])
            + f"  (1σ, {tone['method']}, {tone['n_gates']} gates)",
        )
        t.add_row("tone level", _num(tone.get("amplitude_dbfs"), ".2f", "dBFS"))
        if tone.get("drift_hz_per_s") is not None:
            t.add_row("drift", _num(tone["drift_hz_per_s"] * 60, "+.4g", "Hz/min"))
    elif summary.get("mode") == "audio":
        t.add_row("frequency", "no usable tone found")
    lvl = summary["level"]
    t.add_row(
        "level",
        f"{_num(lvl['rms_dbfs'], '.2f')} dBFS rms, {_num(lvl['peak_dbfs'], '.2f')} dBFS peak, "
        f"{lvl['clipped_samples']} clipped",
    )
    q = summary.get("quality") or {}
    if "fm" in summary:
        q = {}  # the FM section shows the demodulated audio's figures
    if q.get("snr_db") is not None:
        filt = "" if q.get("filter") in (None, "none") else f"  (filter {q['filter']})"
        t.add_row(
            "SNR / SINAD", f"{_num(q['snr_db'], '.2f')} dB / {_num(q['sinad_db'], '.2f')} dB{filt}"
        )
        t.add_row(
            "THD / THD+N",
            f"{_num(q['thd_percent'], '.4g')} % / {_num(q['thd_n_percent'], '.4g')} %",
        )
        t.add_row(
            "ENOB / SFDR", f"{_num(q['enob_bits'], '.2f')} bit / {_num(q['sfdr_db'], '.1f')} dB"
        )
        # hum more than 60 dB below the tone is below anything a bench cares about
        if q.get("hum_hz") and q.get("hum_db") is not None and q["hum_db"] > -60.0:
            t.add_row("mains hum", f"{q['hum_hz']:g} Hz at {_num(q['hum_db'], '.1f')} dB re tone")
    for row in fm_rows(summary):
        t.add_row(*row)
    dev = summary.get("deviation")
    if isinstance(dev, dict):
        if not dev.get("calibrated"):
            t.add_row("deviation", "not calibrated (swingmeter calibrate deviation)")
        elif dev.get("peak_pos_hz") is not None:
            t.add_row(
                "deviation",
                f"peak+ {_num(dev['peak_pos_hz'], '.1f')}  peak- {_num(dev['peak_neg_hz'], '.1f')}"
                f"  rms {_num(dev['rms_hz'], '.1f')} Hz  (calibrated audio, "
                f"{dev['factor_hz_per_unit']:.6g} Hz/FS)",
            )
            if dev.get("tone_peak_hz") is not None:
                t.add_row(
                    "tone deviation",
                    f"{dev['tone_peak_hz']:.2f} Hz peak at {dev['mod_tone_hz']:.2f} Hz, "
                    f"modulation index {dev['mod_index']:.4f}",
                )
    for w in summary.get("warnings", []):
        t.add_row("[yellow]warning[/yellow]", f"[yellow]{w}[/yellow]")
    return t


READING_COLUMNS_SHOWN = (
    ("t_s", "t (s)", ".2f"),
    ("frequency_hz", "frequency (Hz)", None),
    ("amplitude_dbfs", "tone dBFS", ".2f"),
    ("snr_db", "SNR dB", ".1f"),
    ("sinad_db", "SINAD dB", ".1f"),
    ("thd_percent", "THD %", ".3g"),
)


def readings_table(readings: list[dict], title: str | None = None):
    from rich.table import Table

    t = Table(title=title, title_justify="left")
    for _key, head, _fmt in READING_COLUMNS_SHOWN:
        t.add_column(head, justify="right")
    for r in readings:
        cells = []
        for key, _head, fmt in READING_COLUMNS_SHOWN:
            v = r.get(key)
            if key == "frequency_hz" and v is not None:
                cells.append(format_with_uncertainty(v, r.get("uncertainty_hz") or math.nan, ""))
            else:
                cells.append(_num(v, fmt) if fmt else _num(v, ".6g"))
        t.add_row(*cells)
    return t


def fm_rows(summary: dict) -> list[tuple[str, str]]:
    """Rows of the FM section (beat / iq summaries)."""
    fm = summary.get("fm")
    if not fm:
        if summary.get("mode") in ("beat", "iq"):
            return [("carrier", "no carrier measured")]
        return []
    rows = []
    u = fm["carrier_uncertainty_hz"]
    where = "beat note" if summary["mode"] == "beat" else "offset from centre"
    rows.append(("carrier", f"{format_with_uncertainty(fm['carrier_hz'], u)}  ({where}, 1σ)"))
    n = fm.get("harmonic") or 1
    if fm.get("rf_hz") is not None:
        side = f", {fm['sideband']} sideband" if fm.get("sideband") else ""
        rows.append(
            (
                "RF",
                f"{format_with_uncertainty(fm['rf_hz'], u)}  (dial {fm['dial_hz']:.0f} Hz{side})",
            )
        )
        if n > 1:
            rows.append(
                (
                    "fundamental",
                    f"{format_with_uncertainty(fm['fundamental_hz'], u / n)}  (RF / {n})",
                )
            )
    d = fm["deviation"]
    rows.append(
        (
            "deviation",
            f"peak+ {_num(d['peak_pos_hz'], '.1f')}  peak- {_num(d['peak_neg_hz'], '.1f')}  "
            f"peak avg {_num(d['peak_avg_hz'], '.1f')}  rms {_num(d['rms_hz'], '.1f')} Hz",
        )
    )
    if d.get("tone_peak_hz") is not None:
        rows.append(("tone deviation", f"{d['tone_peak_hz']:.2f} Hz peak (sine fit)"))
    rows.append(
        (
            "exceeded",
            f"10% of the time {_num(d['exceeded_10pct_hz'], '.1f')} Hz, "
            f"1% {_num(d['exceeded_1pct_hz'], '.1f')} Hz, "
            f"0.1% {_num(d['exceeded_0p1pct_hz'], '.1f')} Hz",
        )
    )
    if n > 1 and fm.get("fundamental_deviation_hz") is not None:
        rows.append(("fundamental deviation", f"{fm['fundamental_deviation_hz']:.2f} Hz (÷ {n})"))
    if fm.get("mod_tone_hz") is not None:
        rows.append(
            (
                "modulating tone",
                f"{format_with_uncertainty(fm['mod_tone_hz'], fm['mod_tone_uncertainty_hz'])}, "
                f"modulation index {fm['mod_index']:.4f}",
            )
        )
    b = fm.get("bessel")
    if b:
        rows.append(
            (
                "Bessel lines",
                f"index {b['mod_index']:.4f} (fit residual {b['residual']:.2g}); carrier "
                f"{b['carrier_depth_db']:.1f} dB, nearest null no. {b['nearest_carrier_null']} "
                f"at {b['nearest_null_mod_index']:.5f}",
            )
        )
    rows.append(
        (
            "bandwidth",
            f"Carson {_num(fm.get('carson_bw_hz'), '.0f')} Hz, 99% occupied "
            f"{_num(fm.get('occupied_bw_hz'), '.0f')} Hz, "
            f"-26 dB {_num(fm.get('bw_26db_hz'), '.0f')} Hz (IF {fm['if_bandwidth_hz']:.0f} Hz)",
        )
    )
    if fm.get("mod_power_dbr") is not None:
        over = "whole record" if fm.get("mod_power_whole_record") else "max over any 60 s"
        rows.append(("modulation power", f"{fm['mod_power_dbr']:+.2f} dBr ({over}, ITU-R BS.412)"))
    filt = fm.get("post_filter", "none")
    de = fm.get("deemphasis", "none")
    rows.append(
        (
            "demodulated audio",
            f"SNR {_num(fm.get('demod_snr_db'), '.1f')} dB, SINAD "
            f"{_num(fm.get('demod_sinad_db'), '.1f')} dB, "
            f"THD {_num(fm.get('demod_thd_percent'), '.3g')} %  (filter {filt}, de-emphasis {de})",
        )
    )
    if fm.get("cnr_db") is not None:
        rows.append(("carrier/noise", f"{fm['cnr_db']:.1f} dB in the IF bandwidth"))
    iq = summary.get("iq")
    if iq:
        rows.append(
            (
                "I/Q",
                f"image rejection {_num(iq['image_rejection_db'], '.1f')} dB, gain "
                f"{iq['gain_imbalance_db']:+.2f} dB, phase {iq['phase_imbalance_deg']:+.2f}°, "
                f"DC {iq['dc_i']:+.4f}/{iq['dc_q']:+.4f}"
                + (" (corrected)" if iq["corrected"] else ""),
            )
        )
    return rows
