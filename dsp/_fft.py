"""One-dimensional FFTs for the per-gate hot paths, without scipy.fft's per-call cost.

scipy.fft checks, reshapes and dispatches every call (backends, workers, axes): about
10 microseconds, which on the FM path (a dozen transforms of a few thousand points per
gate) came to a tenth of the whole analysis. Here the same pocketfft routines scipy.fft
calls are called directly, into buffers the caller keeps. They belong to scipy's private
API, so they are checked against scipy.fft once at import; if they are missing or differ,
the public functions are used instead (same results, the per-call cost back).

Inputs must be one-dimensional and contiguous (float64 for `rfft`, complex128 for `fft`
and `ifft`); outputs are written to `out` when given.
"""

from __future__ import annotations

import numpy as np
import scipy.fft as sfft

__all__ = ["fft", "ifft", "rfft"]


def _load():
    try:
        from scipy.fft._pocketfft import pypocketfft as pp

        x = np.arange(12, dtype=np.float64) * 0.37 - 1.1
        z = x + 1j * x[::-1]
        out_r = np.empty(7, dtype=np.complex128)
        out_c = z.copy()
        checks = (
            (pp.r2c(x, (0,), True, 0, None, 1), sfft.rfft(x)),
            (pp.c2c(z, (0,), True, 0, None, 1), sfft.fft(z)),
            (pp.c2c(z, (0,), False, 2, None, 1), sfft.ifft(z)),
            # and the results written where they are asked to go (in place, too)
            (pp.r2c(x, (0,), True, 0, out_r, 1) is out_r and out_r, sfft.rfft(x)),
            (pp.c2c(out_c, (0,), False, 2, out_c, 1) is out_c and out_c, sfft.ifft(z)),
        )
        if all(a is not False and np.allclose(a, b, rtol=1e-12, atol=1e-12) for a, b in checks):
            return pp
    except Exception:  # private API: any failure means "use the public one"
        pass
    return None


_PP = _load()


def _into(y: np.ndarray, out: np.ndarray | None) -> np.ndarray:
    if out is None:
        return y
    out[:] = y
    return out


def rfft(x: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """Real-input FFT of all of x (len(x) // 2 + 1 bins), into `out` when given."""
    if _PP is not None:
        return _PP.r2c(x, (0,), True, 0, out, 1)
    return _into(sfft.rfft(x), out)


def fft(x: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """Complex FFT of all of x, into `out` when given (out may be x)."""
    if _PP is not None:
        return _PP.c2c(x, (0,), True, 0, out, 1)
    return _into(sfft.fft(x), out)


def ifft(x: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """Inverse complex FFT (1/n normalised), into `out` when given (out may be x)."""
    if _PP is not None:
        return _PP.c2c(x, (0,), False, 2, out, 1)
    return _into(sfft.ifft(x), out)
