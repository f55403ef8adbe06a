"""A vectorizable float32 Gaussian weight, exp(-d2 / 2), for 0 <= d2 <= 9.

numba has no vector ``exp`` here (SVML is not available), so the kernels use
a polynomial that LLVM turns into plain SIMD multiplies and adds:

    exp(-d2 / 2) = exp(-d2 / 16) ** 8,   exp(-d2 / 16) ~ 1 + d2 * Q(d2)

``Q`` is a degree-4 polynomial fitted (relative minimax, Lawson iterations,
float64) to ``(exp(-y/16) - 1) / y`` on ``[0, 9]``; three squarings give the
eighth power. The constant term is exactly 1, so the weight at d2 = 0 is
exactly 1. Measured in float32 against float64 ``exp`` over ``[0, 9]``: largest
absolute error 5.1e-7, largest relative error 1.3e-6 (rounding of the three
squarings dominates; the fit itself is good to 2.4e-8).
"""

from __future__ import annotations

import numba
import numpy as np

from splatter.jit import KERNEL

_Q1 = np.float32(-0.062499891966581345)
_Q2 = np.float32(0.0019529589917510748)
_Q3 = np.float32(-4.0606937545817345e-05)
_Q4 = np.float32(6.172668349790911e-07)
_Q5 = np.float32(-6.016742659653573e-09)
_ONE = np.float32(1.0)


@numba.njit(inline="always", **KERNEL)
def gauss_weight(d2):
    """exp(-d2 / 2) in float32 for a float32 ``d2`` in [0, 9] (garbage outside)."""
    q = (((_Q5 * d2 + _Q4) * d2 + _Q3) * d2 + _Q2) * d2 + _Q1
    p = _ONE + d2 * q
    p = p * p
    p = p * p
    return p * p
