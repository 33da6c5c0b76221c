"""A guard against a reference-count bug in some PySide6 releases on Python < 3.12.

With PySide6 6.12.0 on Python 3.11 (6.11.3 is fine), every `SignalInstance.emit()` gives
back `True` without taking a reference to it, so each emitted signal (pyqtgraph emits
several per `setData`) removes one reference from `True`; calls into Python overrides of
Qt virtuals do the same to `None`. After a few hundred of them the interpreter aborts
with "bool_dealloc: deallocating True or False" (or "none_dealloc"). From Python 3.12 on
these objects are immortal and the bug is harmless.

`BoolRefGuard` detects the bug once (a few emits, compare `sys.getrefcount(True)`) and
then gives back the missing references with `Py_IncRef`: a headroom up front, and each
`top_up()` (called from the window's frame timer) replaces what was lost since the last
call. Nothing is held in memory, and nothing happens where the bug is absent.
"""

from __future__ import annotations

import ctypes
import sys

HEADROOM = 100_000  # far more than can be lost between two frames
# The same release also loses references to None (Python overrides of Qt virtuals such as
# paint(), which return None) and, less often, to False.
GUARDED = (True, False, None)


class BoolRefGuard:
    """Keep the reference counts of True, False and None from falling to zero under a
    leaking PySide6.

    Attributes
    ----------
    active : bool
        Whether the bug was detected (and the guard is holding references).
    """

    def __init__(self) -> None:
        self.given = 0
        self.active = sys.version_info < (3, 12) and _emit_leaks_true()
        self._target: dict[int, int] = {}
        if self.active:
            for obj in GUARDED:
                self._give(obj, HEADROOM)
                self._target[id(obj)] = sys.getrefcount(obj)

    def _give(self, obj, n: int) -> None:
        incref = ctypes.pythonapi.Py_IncRef
        ref = ctypes.py_object(obj)
        for _ in range(n):
            incref(ref)
        self.given += n

    def top_up(self) -> int:
        """Replace the references lost since the last call; returns how many."""
        if not self.active:
            return 0
        total = 0
        for obj in GUARDED:
            now = sys.getrefcount(obj)
            lost = self._target[id(obj)] - now
            if lost > 0:
                # Ordinary releases look the same as lost references; giving those back
                # too is harmless (these objects are never freed), so the target only
                # ratchets up.
                self._give(obj, lost)
                total += lost
            else:
                self._target[id(obj)] = now
        return total


def _emit_leaks_true() -> bool:
    from pyqtgraph.Qt import QtCore

    class _Probe(QtCore.QObject):
        sig = QtCore.Signal()

    p = _Probe()
    before = sys.getrefcount(True)
    for _ in range(8):
        p.sig.emit()
    return sys.getrefcount(True) < before - 4


_guard: BoolRefGuard | None = None


def bool_ref_guard() -> BoolRefGuard:
    """The process's one guard (made on first use)."""
    global _guard
    if _guard is None:
        _guard = BoolRefGuard()
    return _guard
