"""Test-session setup: numba gets more threads than the machine has cores.

Results must not depend on the thread count (DEVELOPERS.md). Comparing one
thread with ``NUMBA_NUM_THREADS`` proves nothing on a one-core runner, where
numba's default makes both 1, so the suite starts numba with
``max(4, 2 * cores)`` threads unless ``NUMBA_NUM_THREADS`` is set. Kernels
still run on as many threads as there are cores by default; the thread tests
(``thread_counts`` in tests/lookfiles.py) compare 1, the core count and the
oversubscribed count.
"""

import os

os.environ.setdefault("NUMBA_NUM_THREADS", str(max(4, 2 * (os.cpu_count() or 1))))

import numba  # noqa: E402  (after the variable: numba reads it on import)

numba.set_num_threads(min(os.cpu_count() or 1, numba.config.NUMBA_NUM_THREADS))
