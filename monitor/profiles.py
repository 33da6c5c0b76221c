"""Bench profiles: per-bench calibration (sound-card clock, deviation factor) kept on disk.

All profiles live in one small JSON file, `bench-profiles.json`, in the user's
configuration directory (or in $SWINGMETER_CONFIG_DIR), keyed by profile name. Writes go
to a temporary file that is renamed over the old one, so a crash never leaves half a
file; a corrupt file is reported and left in place, never overwritten.
"""

from __future__ import annotations

import json
import math
import os
import re
import tempfile
from pathlib import Path

from monitor import jsonio
from monitor.errors import ProfileError

PROFILE_FILE = "bench-profiles.json"
SCHEMA = 1
_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")


def config_dir() -> Path:
    env = os.environ.get("SWINGMETER_CONFIG_DIR")
    if env:
        return Path(env)
    import platformdirs

    return Path(platformdirs.user_config_dir("swingmeter", appauthor=False))


def profile_path() -> Path:
    return config_dir() / PROFILE_FILE


def check_name(name: str) -> str:
    if not isinstance(name, str) or not _NAME_RE.match(name):
        raise ProfileError(
            f"profile name {name!r} is not valid: use 1-64 letters, digits, '.', '_' or '-'"
        )
    return name


def load_all() -> dict[str, dict]:
    """All profiles, {} when none were saved yet."""
    path = profile_path()
    if not path.exists():
        return {}
    try:
        data = jsonio.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise ProfileError(
            f"{path}: bench-profile file is corrupt ({exc}); it was left as it is — "
            "repair or move it"
        ) from None
    if not isinstance(data, dict) or not isinstance(data.get("profiles"), dict):
        raise ProfileError(
            f"{path}: bench-profile file has an unexpected layout; it was left as it is"
        )
    profiles = data["profiles"]
    for name, prof in profiles.items():
        if not isinstance(prof, dict):
            raise ProfileError(f"{path}: profile {name!r} is not an object")
    return profiles


def load(name: str) -> dict:
    profiles = load_all()
    if name not in profiles:
        known = ", ".join(sorted(profiles)) or "none saved yet"
        raise ProfileError(f"no bench profile named {name!r} (known: {known})")
    prof = profiles[name]
    ppm = prof.get("clock_ppm", 0.0)
    if not isinstance(ppm, (int, float)) or not math.isfinite(ppm):
        raise ProfileError(f"{profile_path()}: profile {name!r} has a bad clock_ppm {ppm!r}")
    return prof


def update(name: str, **fields) -> dict:
    """Merge `fields` into profile `name` (creating it) and save atomically."""
    check_name(name)
    profiles = load_all()
    prof = dict(profiles.get(name, {}))
    prof.update(fields)
    profiles[name] = prof
    _write({"schema": SCHEMA, "profiles": profiles})
    return prof


def _write(data: dict) -> None:
    path = profile_path()
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=".bench-profiles.", suffix=".tmp", dir=path.parent)
        try:
            with os.fdopen(fd, "w", encoding="utf-8") as f:
                json.dump(data, f, indent=2, sort_keys=True)
                f.write("\n")
                f.flush()
                os.fsync(f.fileno())
            os.replace(tmp, path)
        except BaseException:
            try:
                os.unlink(tmp)
            except OSError:
                pass
            raise
    except OSError as exc:
        raise ProfileError(f"{path}: cannot save bench profile ({exc})") from None
