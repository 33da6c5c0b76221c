"""swingmeter application: sources, the block engine, sinks and the command line.

`monitor` imports `dsp`; `dsp` never imports `monitor`.
"""

import os as _os

# The engine makes many small BLAS calls per gate (48000-sample dot products and thin
# matrix products). A multi-threaded BLAS spends more on waking threads than on the work,
# and on a busy machine each call can cost 30x more; one thread is fastest here. Set
# before numpy is first imported; a user's own setting wins.
_BLAS_VARS = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")
_user_set = any(v in _os.environ for v in _BLAS_VARS)
for _var in _BLAS_VARS:
    _os.environ.setdefault(_var, "1")

# numpy imported before us has read those variables already (a script or notebook that
# imports numpy first): cap its BLAS pool at run time instead, unless the user chose.
# The parallel analysis's workers, forked from this process, inherit the cap.
if "numpy" in __import__("sys").modules and not _user_set:
    try:
        from threadpoolctl import threadpool_limits as _limits

        _limits(1, user_api="blas")
    except ImportError:  # pragma: no cover - a dependency; keep working without it
        pass

__version__ = "0.1.0"
