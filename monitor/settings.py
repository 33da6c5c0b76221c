"""Persistent settings of the live window (device, mode, rate, gate, filter, ...).

One small JSON file, `window-settings.json`, in the same configuration directory as the
bench profiles (`monitor.profiles.config_dir()`, or $SWINGMETER_CONFIG_DIR). Writes go to
a temporary file renamed over the old one (`os.replace`), so a crash never leaves half a
file. A corrupt file is reported (`LoadedSettings.problem`) and left in place: saving
does not overwrite it, so nothing the user might want to repair is lost.
"""

from __future__ import annotations

import json
import os
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

SETTINGS_FILE = "window-settings.json"
FORMAT = "swingmeter-window-settings"
VERSION = 1

# What the window stores, with the type each value must have; anything else is ignored.
KNOWN: dict[str, tuple[type, ...]] = {
    "device": (str, type(None)),
    "mode": (str,),
    "rate_hz": (int, float),
    "gate_s": (int, float),
    "filter": (str,),
    "deemphasis": (str,),
    "dial_hz": (int, float, type(None)),
    "sideband": (str,),
    "harmonic": (int,),
    "profile": (str, type(None)),
    "speed": (int, float),
    "record_dir": (str,),
    "geometry": (str,),
}


def settings_path() -> Path:
    """Where the window's settings live."""
    from monitor.profiles import config_dir

    return config_dir() / SETTINGS_FILE


@dataclass(frozen=True)
class LoadedSettings:
    """The stored settings and, if the file could not be used, why.

    Attributes
    ----------
    values : dict
        Known keys with values of the right type (unknown or mistyped ones dropped).
    problem : str or None
        A message naming the file and what is wrong with it, or None.
    path : Path
        The settings file.
    """

    values: dict = field(default_factory=dict)
    problem: str | None = None
    path: Path | None = None

    @property
    def corrupt(self) -> bool:
        return self.problem is not None


def _filter(values: dict) -> dict:
    out = {}
    for k, v in values.items():
        types = KNOWN.get(k)
        if types is None or (isinstance(v, bool) and bool not in types):
            continue
        if isinstance(v, types):
            out[k] = v
    return out


def load(path: str | os.PathLike | None = None) -> LoadedSettings:
    """Read the window settings; a missing file gives empty settings.

    Parameters
    ----------
    path : path-like or None
        The file (default: `settings_path()`).

    Returns
    -------
    LoadedSettings
        With `problem` set (and no values) if the file is unreadable or not ours.
    """
    p = Path(path) if path is not None else settings_path()
    if not p.exists():
        return LoadedSettings({}, None, p)
    try:
        data = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        return LoadedSettings({}, f"{p}: window settings are unreadable ({exc}); left as is", p)
    if not isinstance(data, dict) or data.get("format") != FORMAT:
        return LoadedSettings({}, f"{p}: not a swingmeter window-settings file; left as is", p)
    values = data.get("settings")
    if not isinstance(values, dict):
        return LoadedSettings({}, f"{p}: window settings hold no 'settings' object", p)
    return LoadedSettings(_filter(values), None, p)


def save(values: dict, path: str | os.PathLike | None = None) -> bool:
    """Write the window settings atomically (temporary file + os.replace).

    Parameters
    ----------
    values : dict
        Settings; keys not in `KNOWN` and values of the wrong type are left out.
    path : path-like or None
        The file (default: `settings_path()`).

    Returns
    -------
    bool
        False if the existing file is corrupt (it is left in place, nothing is written).

    Raises
    ------
    TypeError
        If `values` is not a dict.
    OSError
        If the directory cannot be created or written.
    """
    if not isinstance(values, dict):
        raise TypeError(f"values must be a dict, not {type(values).__name__}")
    p = Path(path) if path is not None else settings_path()
    if load(p).corrupt:
        return False
    p.parent.mkdir(parents=True, exist_ok=True)
    text = json.dumps({"format": FORMAT, "version": VERSION, "settings": _filter(values)}, indent=2)
    fd, tmp = tempfile.mkstemp(prefix=".window-settings-", suffix=".tmp", dir=p.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text + "\n")
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, p)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
    return True
