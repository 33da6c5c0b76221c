"""A compact growing table of per-gate floats for the engine's summaries."""

from __future__ import annotations

import numpy as np


class GateTable:
    """Rows of floats appended gate by gate, in a numpy array that doubles as needed."""

    def __init__(self, width: int = 7):
        self._a = np.empty((64, width))
        self._n = 0

    def append(self, *row: float) -> None:
        if self._n == self._a.shape[0]:
            self._a = np.concatenate([self._a, np.empty_like(self._a)])
        self._a[self._n] = row
        self._n += 1

    @property
    def nbytes(self) -> int:
        """Bytes held (the capacity, which doubles as rows are added)."""
        return self._a.nbytes

    def __len__(self) -> int:
        return self._n

    def columns(self) -> tuple[np.ndarray, ...]:
        return tuple(self._a[: self._n].T.copy())
