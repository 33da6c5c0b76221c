"""JSON from users' files, parsed so that no input can raise anything but ValueError.

The standard parser turns a 5000-digit integer into a ValueError of its own kind, a
deeply nested document into RecursionError, and huge integers into values that overflow
later in float arithmetic. Here integers longer than any real measurement become floats
(inf when out of range, which the readers' finiteness checks then refuse) and nesting
errors become ValueError, like every other malformed document.
"""

from __future__ import annotations

import json

_MAX_INT_DIGITS = 30


def _parse_int(text: str):
    return int(text) if len(text) <= _MAX_INT_DIGITS else float(text)


def loads(text: str | bytes):
    """Parse JSON text; ValueError (json.JSONDecodeError included) for anything unusable."""
    try:
        return json.loads(text, parse_int=_parse_int)
    except RecursionError:
        raise ValueError("JSON is nested too deeply") from None


def describe(exc: ValueError) -> str:
    """A short reason for an error raised by `loads`."""
    if isinstance(exc, json.JSONDecodeError):
        return f"invalid JSON ({exc.msg} at line {exc.lineno})"
    return str(exc)
