"""Shared fixtures: an isolated config directory, independent signal generators."""

from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from hypothesis import settings

HERE = Path(__file__).parent

# Property tests (hypothesis) draw the same examples on every run of `make test`, so a
# red CI run is one anyone can repeat; under SWINGMETER_FUZZ=full they explore new ones
# (a failure prints its example: pin it with @example).
settings.register_profile("seeded", derandomize=True, database=None)
settings.register_profile("explore")
settings.load_profile("explore" if os.environ.get("SWINGMETER_FUZZ") == "full" else "seeded")
DEMO_DIR = HERE.parent / "recordings_demo"


@pytest.fixture(autouse=True)
def _isolated_config(tmp_path_factory, monkeypatch):
    """Bench profiles and settings never touch the real user config."""
    cfg = tmp_path_factory.mktemp("config")
    monkeypatch.setenv("SWINGMETER_CONFIG_DIR", str(cfg))
    return cfg


@pytest.fixture
def config_dir():
    return Path(os.environ["SWINGMETER_CONFIG_DIR"])


def _need(tool: str) -> str:
    path = shutil.which(tool)
    if path is None:
        if os.environ.get("CI") == "true":
            pytest.fail(f"{tool} is required in CI (installed by .ci/sysdeps)")
        pytest.skip(f"{tool} not installed")
    return path


@pytest.fixture
def sox():
    """Run sox (an independent signal generator): sox(*args)."""
    exe = _need("sox")

    def run(*args):
        subprocess.run([exe, *map(str, args)], check=True, capture_output=True)

    return run


@pytest.fixture
def ffmpeg():
    """Run ffmpeg (an independent signal generator): ffmpeg(*args)."""
    exe = _need("ffmpeg")

    def run(*args):
        subprocess.run(
            [exe, "-hide_banner", "-loglevel", "error", "-y", *map(str, args)],
            check=True,
            capture_output=True,
        )

    return run


@pytest.fixture
def rng():
    return np.random.default_rng(20261201)
