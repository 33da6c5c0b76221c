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
    if tone.get("frequency_hz") is not None:
        t.add_row(
            "frequency",
            format_with_uncertainty(tone["frequency_hz"], tone["uncertainty_hz"])
            + f"  (1σ, {tone['method']}, {tone['n_gates']} gates)",
        )
        t.add_row("tone level", _num(tone.get("amplitude_dbfs"), ".2f", "dBFS"))
        if tone.get("drift_hz_per_s") is not None:
            t.add_row("drift", _num(tone["drift_hz_per_s"] * 60, "+.4g", "Hz/min"))
    elif "tone" in summary:
        t.add_row("frequency", "no usable tone found")
    lvl = summary["level"]
    t.add_row(
        "level",
        f"{_num(lvl['rms_dbfs'], '.2f')} dBFS rms, {_num(lvl['peak_dbfs'], '.2f')} dBFS peak, "
        f"{lvl['clipped_samples']} clipped",
    )
    q = summary.get("quality") or {}
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
        # hum more than 80 dB below the tone is below anything a bench cares about
        if q.get("hum_hz") and q.get("hum_db") is not None and q["hum_db"] > -80.0:
            t.add_row("mains hum", f"{q['hum_hz']:g} Hz at {_num(q['hum_db'], '.1f')} dB re tone")
    for extra in summary.get("_rows", []):
        t.add_row(*extra)
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
