"""Sinks for results: JSON, CSV and the terminal table.

JSON keys are the dataclass field names, so the same names appear in JSON, CSV and the
live window. Non-finite numbers (e.g. -inf dBFS of silence) become null in JSON.
"""

from __future__ import annotations

import csv
import io
import json
import math
from collections.abc import Iterable, Sequence
from pathlib import Path

from monitor.errors import InputError


def clean(obj):
    """Make a result JSON-safe: non-finite floats -> None, tuples -> lists."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [clean(v) for v in obj]
    if hasattr(obj, "item") and callable(obj.item):  # numpy scalars
        return clean(obj.item())
    return obj


def dumps(obj) -> str:
    return json.dumps(clean(obj), indent=2, allow_nan=False)


def write_csv(path: str | Path, rows: Iterable[dict], columns: Sequence[str]) -> int:
    """Write rows (dicts) with a header row; missing values are empty cells."""
    try:
        f = open(path, "w", newline="", encoding="utf-8")
    except OSError as exc:
        raise InputError(f"{path}: cannot write CSV ({exc.strerror or exc})") from None
    n = 0
    with f:
        w = csv.writer(f)
        w.writerow(columns)
        for row in rows:
            w.writerow(["" if row.get(c) is None else _cell(row.get(c)) for c in columns])
            n += 1
    return n


def csv_line(row: dict, columns: Sequence[str]) -> str:
    buf = io.StringIO()
    csv.writer(buf).writerow(["" if row.get(c) is None else _cell(row.get(c)) for c in columns])
    return buf.getvalue()


def _cell(v):
    if isinstance(v, float):
        return repr(v) if math.isfinite(v) else ""
    return v
