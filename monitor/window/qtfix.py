"""A guard against a reference-count bug in some PySide6 releases on Python < 3.12.

With PySide6 6.12.0 on Python 3.11, every `SignalInstance.emit()` gives back `True`
without taking a reference to it, so each emitted signal (pyqtgraph emits several per
`setData`) removes one reference from `True`. After a few hundred emits the interpreter
aborts with "bool_dealloc: deallocating True or False". From Python 3.12 on, `True` is
immortal and the bug is harmless.

`BoolRefGuard` detects the bug once (a few emits, compare `sys.getrefcount(True)`) and
then gives back the missing references with `Py_IncRef`: a headroom up front, and each
`top_up()` (called from the window's frame timer) replaces what was lost since the last
call. Nothing is held in memory, and nothing happens where the bug is absent.
"""

from __future__ import annotations

import ctypes
import sys

HEADROOM = 200_000  # more emits than can happen between two frames


class BoolRefGuard:
    """Keep `True`'s reference count from falling to zero under a leaking PySide6.

    Attributes
    ----------
    active : bool
        Whether the bug was detected (and the guard is holding references).
    """

    def __init__(self) -> None:
        self.given = 0
        self.active = sys.version_info < (3, 12) and _emit_leaks_true()
        if self.active:
            self._give(HEADROOM)
            self._target = sys.getrefcount(True)

    def _give(self, n: int) -> None:
        incref = ctypes.pythonapi.Py_IncRef
        obj = ctypes.py_object(True)
        for _ in range(n):
            incref(obj)
        self.given += n

    def top_up(self) -> int:
        """Replace the references lost since the last call; returns how many."""
        if not self.active:
            return 0
        now = sys.getrefcount(True)
        lost = self._target - now
        if lost > 0:
            # Ordinary releases look the same as lost references; giving those back too
            # is harmless (True is never freed anyway), so the target only ratchets up.
            self._give(lost)
        else:
            self._target = now
        return max(lost, 0)


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
