"""Parsing of user-entered quantities (frequencies with k/M/G suffixes, durations)."""

from __future__ import annotations

import argparse
import math
import re

_SUFFIX = {"": 1.0, "k": 1e3, "K": 1e3, "M": 1e6, "G": 1e9}
_FREQ_RE = re.compile(
    r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([kKMG]?)\s*(?:Hz|hz)?\s*$"
)


def parse_frequency(text: str) -> float:
    """Parse '100e6', '100M', '100 MHz', '1.5k', '440' into hertz.

    Raises
    ------
    ValueError
        If the text is not a finite frequency.
    """
    m = _FREQ_RE.match(str(text))
    if not m:
        raise ValueError(f"not a frequency: {text!r} (examples: 440, 1.5k, 100M, 100e6)")
    value = float(m.group(1)) * _SUFFIX[m.group(2)]
    if not math.isfinite(value):
        raise ValueError(f"frequency must be finite: {text!r}")
    return value


def frequency_arg(text: str) -> float:
    """argparse `type=` for frequencies."""
    try:
        return parse_frequency(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def positive_frequency_arg(text: str) -> float:
    value = frequency_arg(text)
    if value <= 0:
        raise argparse.ArgumentTypeError(f"frequency must be positive: {text!r}")
    return value


def _whole_number(text: str, what: str, lo: int, hi: int | None, limits: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not {what}: {text!r}") from None
    if value < lo or (hi is not None and value > hi):
        raise argparse.ArgumentTypeError(f"{limits}: {text!r}")
    return value


def harmonic_arg(text: str) -> int:
    """argparse `type=` for a harmonic number N (1 to 1000)."""
    return _whole_number(
        text, "a harmonic number", 1, 1000, "harmonic must be 1 or more (at most 1000)"
    )


def channel_arg(text: str) -> int:
    """argparse `type=` for a zero-based channel number."""
    return _whole_number(text, "a channel number", 0, None, "channel must be 0 or more")


def jobs_arg(text: str) -> int | None:
    """argparse `type=` for a number of processes: 'auto' (None) or a whole number >= 1."""
    if text.strip().lower() == "auto":
        return None
    return _whole_number(text, "'auto' or a whole number", 1, None, "need at least 1 process")


def duration_arg(text: str) -> float:
    """argparse `type=` for a duration in seconds."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a duration in seconds: {text!r}") from None
    if not 0 < value < 1e7:
        raise argparse.ArgumentTypeError(f"duration must be positive seconds: {text!r}")
    return value
