"""Error types of the application layer.

`dsp` raises ValueError / TypeError for bad values; the application turns unusable input
(files, devices, profiles) into `InputError`, which the command line reports as one line
and exit code 2.
"""

from __future__ import annotations


class SwingmeterError(Exception):
    """Base of the errors the command line reports without a traceback (exit code 2)."""

    exit_code = 2


class InputError(SwingmeterError):
    """An input file or stream that cannot be used; the message names it and the problem."""


class DeviceError(SwingmeterError):
    """A sound-card device that cannot be opened or fails while in use."""


class ProfileError(SwingmeterError):
    """A bench profile that is missing, corrupt or cannot be written."""
