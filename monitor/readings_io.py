"""Readers for runs of readings: `analyze` CSV/JSON, `live` logs, or recordings.

A reading file is one of:

- CSV with a header row and columns named as in JSON: at least `t_s` and `frequency_hz`,
  optionally `uncertainty_hz`, `gate_s`, `contiguous` and `file` (several recordings in
  one file, as `analyze --csv` writes them). An empty cell is a reading without a value.
  Lines starting with `#` are comments.
- JSON from `analyze --json --readings`: an object with a "readings" list of objects with
  `t_s`, `frequency_hz`, `uncertainty_hz`; a list of such objects (several recordings);
  or a plain list of reading objects.
- A recording (.wav, .rf64, .w64, .sigmf-meta, .sigmf-data), analysed first.

Everything that makes a file unusable raises `InputError` naming the file and the problem.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from monitor import jsonio
from monitor.errors import InputError

__all__ = [
    "RECORDING_SUFFIXES",
    "ReadingSeries",
    "load_series",
    "read_readings_csv",
    "read_readings_json",
    "readings_from_recording",
]

RECORDING_SUFFIXES = (".wav", ".rf64", ".w64", ".sigmf-meta", ".sigmf-data", ".sigmf")


@dataclass(frozen=True)
class ReadingSeries:
    """A run of readings from one recording.

    Attributes
    ----------
    source : str
        File (and record) the readings came from, for messages.
    t_s : numpy.ndarray
        Reading times, s, strictly increasing.
    frequency_hz : numpy.ndarray
        Readings, Hz; NaN where a reading has no frequency.
    uncertainty_hz : numpy.ndarray or None
        Standard uncertainty per reading, Hz (NaN where not given), or None.
    gate_s : float or None
        Gate time if the file states it.
    breaks_before : numpy.ndarray or None
        True where a reading is marked as not contiguous with the previous one.
    """

    source: str
    t_s: np.ndarray
    frequency_hz: np.ndarray
    uncertainty_hz: np.ndarray | None = None
    gate_s: float | None = None
    breaks_before: np.ndarray | None = None

    def __len__(self) -> int:
        return int(self.t_s.size)


def _number(value, where: str, column: str) -> float:
    """A cell or JSON value as float; empty/None is NaN (a reading without a value)."""
    if value is None or (isinstance(value, str) and value.strip() == ""):
        return math.nan
    if isinstance(value, bool):
        raise InputError(f"{where}: {column} must be a number, got {value!r}")
    try:
        return float(value)
    except (TypeError, ValueError):
        raise InputError(f"{where}: {column} must be a number, got {value!r}") from None


def _flag(value, where: str) -> bool:
    if value is None or value == "":
        return True
    if isinstance(value, bool):
        return value
    text = str(value).strip().lower()
    if text in ("1", "true", "yes"):
        return True
    if text in ("0", "false", "no"):
        return False
    raise InputError(f"{where}: contiguous must be true or false, got {value!r}")


def _series(source: str, rows: list[tuple[str, dict]]) -> ReadingSeries:
    """Build a series from (location, mapping) rows; checks times."""
    if not rows:
        raise InputError(f"{source}: no readings")
    t = np.array([_number(r.get("t_s"), w, "t_s") for w, r in rows])
    f = np.array([_number(r.get("frequency_hz"), w, "frequency_hz") for w, r in rows])
    has_u = any(r.get("uncertainty_hz") not in (None, "") for _, r in rows)
    u = (
        np.array([_number(r.get("uncertainty_hz"), w, "uncertainty_hz") for w, r in rows])
        if has_u
        else None
    )
    gates = [_number(r.get("gate_s"), w, "gate_s") for w, r in rows if "gate_s" in r]
    gates = [g for g in gates if math.isfinite(g)]
    gate = float(np.median(gates)) if gates else None
    if gate is not None and gate <= 0:
        raise InputError(f"{source}: gate_s must be positive, got {gate}")
    has_c = any("contiguous" in r for _, r in rows)
    brk = np.array([not _flag(r.get("contiguous"), w) for w, r in rows]) if has_c else None
    bad_t = np.nonzero(~np.isfinite(t))[0]
    if bad_t.size:
        raise InputError(f"{rows[bad_t[0]][0]}: t_s is missing (every reading needs a time)")
    bad_f = np.nonzero(np.isinf(f) | (f < 0))[0]
    if bad_f.size:
        raise InputError(f"{rows[bad_f[0]][0]}: frequency_hz must be a finite frequency >= 0")
    back = np.nonzero(np.diff(t) <= 0)[0]
    if back.size:
        w = rows[back[0] + 1][0]
        raise InputError(
            f"{w}: t_s={t[back[0] + 1]:g} does not follow t_s={t[back[0]]:g}; times must "
            "increase (several runs in one file? give them a 'file' column)"
        )
    return ReadingSeries(source, t, f, u, gate, brk)


def _open_text(path: Path):
    try:
        return open(path, newline="", encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a directory, not a readings file") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot open ({exc.strerror or exc})") from None


def read_readings_csv(path: str | Path) -> list[ReadingSeries]:
    """Read a readings CSV; one series per value of its `file` column (or one).

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    list of ReadingSeries

    Raises
    ------
    InputError
        Missing file, no header, missing `t_s`/`frequency_hz` columns, a cell that is not a
        number, times that do not increase, no readings.
    """
    path = Path(path)
    with _open_text(path) as fh:
        try:
            lines = [(i, line) for i, line in enumerate(fh, 1) if line.strip() and line[0] != "#"]
        except UnicodeDecodeError:
            raise InputError(f"{path}: not a text (UTF-8) CSV file") from None
    if not lines:
        raise InputError(f"{path}: empty file, expected a header row with t_s,frequency_hz")
    # One line, one row: a quoted field never spans lines in a readings file.
    rows_raw = []
    for lineno, line in lines:
        try:
            rows_raw.append(next(csv.reader([line.rstrip("\r\n")]), []))
        except csv.Error as exc:
            raise InputError(f"{path}:{lineno}: not a readable CSV line ({exc})") from None
    header = [h.strip() for h in rows_raw[0]]
    for need in ("t_s", "frequency_hz"):
        if need not in header:
            raise InputError(
                f"{path}: no {need!r} column in the header (found: {', '.join(header)[:200]})"
            )
    # One run per stretch of rows with the same `file` value; with a `file` column, a
    # time that goes back also starts a new run (the same recording analysed twice).
    runs: list[tuple[str, list[tuple[str, dict]]]] = []
    has_file = "file" in header
    for (lineno, _), cells in zip(lines[1:], rows_raw[1:], strict=True):
        where = f"{path}:{lineno}"
        if len(cells) != len(header):
            raise InputError(f"{where}: {len(cells)} cells, the header has {len(header)}")
        row = dict(zip(header, cells, strict=True))
        name = row.get("file", "") or ""
        if not runs or runs[-1][0] != name or (has_file and _goes_back(runs[-1][1], row)):
            runs.append((name, []))
        runs[-1][1].append((where, row))
    if not runs:
        raise InputError(f"{path}: a header row but no readings")
    return [
        _series(f"{path}" + (f" [{name}]" if name and len(runs) > 1 else ""), rows)
        for name, rows in runs
    ]


def _goes_back(rows: list[tuple[str, dict]], row: dict) -> bool:
    try:
        return float(row.get("t_s", "")) <= float(rows[-1][1].get("t_s", ""))
    except ValueError:
        return False  # reported with its line by _series


def read_readings_json(path: str | Path) -> list[ReadingSeries]:
    """Read readings JSON (`analyze --json --readings`); one series per recording.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    list of ReadingSeries

    Raises
    ------
    InputError
        Missing file, invalid JSON, no "readings" list, a reading that is not an object
        or lacks `t_s`, values that are not numbers, times that do not increase.
    """
    path = Path(path)
    with _open_text(path) as fh:
        try:
            doc = jsonio.loads(fh.read())
        except ValueError as exc:
            if isinstance(exc, UnicodeDecodeError):
                raise InputError(f"{path}: not a text (UTF-8) JSON file") from None
            raise InputError(f"{path}: {jsonio.describe(exc)}") from None
        except UnicodeDecodeError:
            raise InputError(f"{path}: not a text (UTF-8) JSON file") from None

    def one(obj, label: str) -> ReadingSeries:
        if not isinstance(obj, dict) or "readings" not in obj:
            raise InputError(
                f"{label}: expected an object with a 'readings' list "
                "(from `swingmeter analyze --json --readings`)"
            )
        items = obj["readings"]
        if not isinstance(items, list):
            raise InputError(f"{label}: 'readings' must be a list")
        rows = []
        for i, r in enumerate(items):
            where = f"{label} reading {i}"
            if not isinstance(r, dict):
                raise InputError(f"{where}: expected an object, got {type(r).__name__}")
            if "t_s" not in r:
                raise InputError(f"{where}: no t_s")
            rows.append((where, r))
        name = obj.get("file")
        return _series(f"{label}" + (f" [{name}]" if name else ""), rows)

    if isinstance(doc, dict):
        return [one(doc, str(path))]
    if isinstance(doc, list):
        if doc and all(isinstance(d, dict) and "readings" not in d for d in doc):
            return [one({"readings": doc}, str(path))]
        return [one(d, f"{path} record {i + 1}") for i, d in enumerate(doc)]
    raise InputError(f"{path}: expected a JSON object or list, got {type(doc).__name__}")


def readings_from_recording(path: str | Path, *, gate_s: float = 1.0) -> ReadingSeries:
    """Analyse a recording and return its readings.

    Parameters
    ----------
    path : str or Path
        A WAV/RF64/W64/SigMF recording.
    gate_s : float, default 1.0
        Gate time of the analysis.

    Returns
    -------
    ReadingSeries

    Raises
    ------
    InputError
        If the file cannot be analysed, or this build cannot analyse recordings.
    """
    try:
        from monitor.engine import analyze_file
    except ImportError:
        raise InputError(f"{path}: recordings cannot be analysed by this build") from None
    try:
        analysis = analyze_file(str(path), gate_s=gate_s)
    except ValueError as exc:
        raise InputError(f"{path}: {exc}") from None
    rows = []
    for i, r in enumerate(analysis.readings):
        d = {
            "t_s": r.t_s,
            "frequency_hz": r.frequency_hz,
            "uncertainty_hz": getattr(r, "uncertainty_hz", None),
            "gate_s": getattr(r, "gate_s", gate_s),
        }
        if hasattr(r, "contiguous"):
            d["contiguous"] = bool(r.contiguous)
        rows.append((f"{path} gate {i}", d))
    if not rows:
        raise InputError(f"{path}: the recording is shorter than one {gate_s:g} s gate")
    return _series(str(path), rows)


def load_series(
    path: str | Path, *, record: int | None = None, gate_s: float = 1.0
) -> ReadingSeries:
    """Read one run of readings from a readings file or a recording.

    Parameters
    ----------
    path : str or Path
        CSV, JSON or a recording (chosen by the file name's ending).
    record : int, optional
        Which recording (from 1) when the file holds several. Required then.
    gate_s : float, default 1.0
        Gate time for recordings.

    Returns
    -------
    ReadingSeries

    Raises
    ------
    InputError
        As the readers; also when the file holds several recordings and `record` is not
        given or out of range.
    """
    p = Path(path)
    name = p.name.lower()
    if name.endswith(RECORDING_SUFFIXES):
        if not p.exists():
            raise InputError(f"{p}: no such file")
        return readings_from_recording(p, gate_s=gate_s)
    if name.endswith(".json"):
        many = read_readings_json(p)
    else:
        many = read_readings_csv(p)
    if not many:
        raise InputError(f"{p}: holds no readings")
    if record is None:
        if len(many) > 1:
            raise InputError(
                f"{p}: holds {len(many)} recordings; choose one with --record 1..{len(many)}"
            )
        return many[0]
    if not 1 <= record <= len(many):
        raise InputError(f"{p}: record {record} asked for, the file holds {len(many)}")
    return many[record - 1]
