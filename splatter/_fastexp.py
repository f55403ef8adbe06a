"""Vectorizable float32 helpers for the compositor kernels.

``fma(a, b, c)``: ``a * b + c`` with one rounding (LLVM's ``llvm.fma.f32``,
which becomes a vector FMA instruction inside vectorized loops). It is exact
IEEE arithmetic, so results do not depend on thread count or vector width;
it is used explicitly because ``fastmath`` (which would fuse on its own) also
allows reassociation, which the project rules out. With ``NUMBA_DISABLE_JIT``
it falls back to the plain Python expression.

``gauss_weight(d2)``: exp(-d2 / 2) for 0 <= d2 <= 9. numba has no vector
``exp`` here (SVML is not available), so the kernels use a polynomial that
LLVM turns into SIMD multiplies and adds:

    exp(-d2 / 2) = exp(-d2 / 16) ** 8,   exp(-d2 / 16) ~ 1 + d2 * Q(d2)

``Q`` is a degree-4 polynomial fitted (relative minimax by Lawson iterations,
float64) to ``(exp(-y/16) - 1) / y`` on ``[0, 9]``; three squarings give the
eighth power. The constant term is exactly 1, so the weight at d2 = 0 is
exactly 1. ``d2`` is clamped to 9 first so lanes outside a footprint (whose
weight is discarded) never produce denormals. Measured in float32 against
float64 ``exp`` over ``[0, 9]``: largest absolute error 5.1e-7, largest
relative error 1.3e-6 (rounding in the three squarings dominates; the fit
itself is good to 2.4e-8).
"""

from __future__ import annotations

import numba
import numpy as np
from llvmlite import ir
from numba.core import cgutils, types
from numba.extending import intrinsic, overload

from splatter.jit import KERNEL

_Q1 = np.float32(-0.062499891966581345)
_Q2 = np.float32(0.0019529589917510748)
_Q3 = np.float32(-4.0606937545817345e-05)
_Q4 = np.float32(6.172668349790911e-07)
_Q5 = np.float32(-6.016742659653573e-09)
_ONE = np.float32(1.0)
_NINE = np.float32(9.0)


@intrinsic
def _fma_f32(typingctx, a, b, c):
    """llvm.fma.f32 on three float32 values."""
    sig = types.float32(types.float32, types.float32, types.float32)

    def codegen(context, builder, signature, args):
        fnty = ir.FunctionType(ir.FloatType(), [ir.FloatType()] * 3)
        fn = cgutils.get_or_insert_function(builder.module, fnty, "llvm.fma.f32")
        return builder.call(fn, args)

    return sig, codegen


def fma(a, b, c):
    """``a * b + c`` (fused, single rounding, when compiled)."""
    return a * b + c


@overload(fma, inline="always")
def _fma_overload(a, b, c):
    if all(isinstance(x, types.Float) and x.bitwidth == 32 for x in (a, b, c)):
        def impl(a, b, c):
            return _fma_f32(a, b, c)
        return impl
    return None


@numba.njit(inline="always", **KERNEL)
def gauss_weight(d2):
    """exp(-d2 / 2) in float32 for a float32 ``d2`` in [0, 9] (clamped to 9 above)."""
    d2 = min(d2, _NINE)
    q = fma(fma(fma(fma(_Q5, d2, _Q4), d2, _Q3), d2, _Q2), d2, _Q1)
    p = fma(d2, q, _ONE)
    p = p * p
    p = p * p
    return p * p
