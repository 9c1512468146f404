"""Test-session settings.

The suite does many small dense linear-algebra calls; on a machine with few cores a
multi-threaded BLAS spends more time synchronising threads than computing (measured here:
5-30x slower), so the test session uses one BLAS thread, and so do the subprocesses the
tests start. OPENBLAS_CORETYPE is left as the machine sets it.
"""

import os

from threadpoolctl import threadpool_limits

for _name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

_BLAS_LIMIT = threadpool_limits(limits=1)
