"""swingmeter application: sources, the block engine, sinks and the command line.

`monitor` imports `dsp`; `dsp` never imports `monitor`.
"""

import os as _os

# The engine makes many small BLAS calls per gate (48000-sample dot products and thin
# matrix products). A multi-threaded BLAS spends more on waking threads than on the work,
# and on a busy machine each call can cost 30x more; one thread is fastest here. Set
# before numpy is first imported; a user's own setting wins.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    _os.environ.setdefault(_var, "1")

__version__ = "0.1.0"
