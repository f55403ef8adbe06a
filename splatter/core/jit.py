"""Numba compilation flags, defined once and reused by every kernel module.

``cache=True`` keeps compiled kernels on disk so a second process starts fast;
``nogil=True`` lets the background writer thread run while a kernel works.
``fastmath`` is left off: it allows reassociation, and bit-exact results across
thread counts and runs are a promise of the product.
"""

KERNEL = dict(cache=True, nogil=True, fastmath=False, error_model="numpy")
"""Flags for serial kernels."""

PARALLEL = dict(KERNEL, parallel=True)
"""Flags for kernels that use ``numba.prange``."""
