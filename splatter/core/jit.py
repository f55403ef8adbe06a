"""Numba compilation flags, defined once and reused by every kernel module.

``cache=True`` keeps compiled kernels on disk so a second process starts fast;
``nogil=True`` lets the background writer thread run while a kernel works.
``fastmath`` is left off: it allows reassociation, and bit-exact results across
thread counts and runs are a promise of the product.
"""

import os

# numba's OpenMP threading layer (GNU libgomp here) keeps its workers
# spinning after each parallel region by default. On a machine whose cores
# are shared, those spinning workers take the core from the serial work in
# between (binning, numpy glue): on this 2-core VM under other load, 200,000
# small splats took 110 ms on two threads with spinning workers and 81 ms
# with waiting ones (scripts/bench_composite.py, same minute). libgomp reads
# this when numba first loads it, after this import; a user's own setting wins.
os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")

KERNEL = dict(cache=True, nogil=True, fastmath=False, error_model="numpy")
"""Flags for serial kernels."""

PARALLEL = dict(KERNEL, parallel=True)
"""Flags for kernels that use ``numba.prange``."""
