"""Eight-lane float64 vectors for the swirl's gradient kernel.

The swirl's gradient sums, for every puff, one term per mode into twelve
running sums (three of velocity, nine of gradient). LLVM's loop vectorizer
keeps those sums in memory, loading and storing all twelve rows once per
mode; with a value type the sums of eight puffs stay in registers over all
the octaves of a direction. :data:`f64x8` lowers to LLVM's ``<8 x double>``
(one AVX-512 register, two AVX ones), like the compositor's float32 type in
:mod:`splatter.raster._simd`; loads, stores, splats and lane arithmetic are
the shared ones of :func:`splatter.core.lanes.lane_ops`.

Every operation is one IEEE operation per lane with round-to-nearest and no
fused multiply-add, so a sum built from them has the bits of the same sum
written with scalars in the same order.

Each operation is a plain Python function on ``(8,) float64`` ndarrays,
overloaded for compiled code with an LLVM intrinsic. With
``NUMBA_DISABLE_JIT=1`` the kernels therefore run as ordinary (slow) Python.

Examples
--------
>>> import numpy as np
>>> a = np.arange(8.0)
>>> vadd(vmul(a, vsplat(2.0)), vsplat(1.0))
array([ 1.,  3.,  5.,  7.,  9., 11., 13., 15.])
>>> vkeep_at_least(np.array([0.5, 1e-13, 2e-12, 0, 1, 1e-12, 3, 4]), 1e-12)
array([5.e-01, 0.e+00, 2.e-12, 0.e+00, 1.e+00, 1.e-12, 3.e+00, 4.e+00])
>>> vany_nonzero(np.zeros(8)), vany_nonzero(np.eye(8)[3])
(False, True)
"""

from __future__ import annotations

import numpy as np
from llvmlite import ir
from numba.core import types
from numba.extending import intrinsic, models, overload, register_model

from splatter.core.lanes import lane_ops

__all__ = ["f64x8", "vload", "vstore", "vsplat", "vadd", "vsub", "vmul", "vkeep_at_least", "vany_nonzero"]


class F64x8Type(types.Type):
    """numba type of an 8-lane float64 vector value."""

    def __init__(self):
        super().__init__(name="f64x8")


f64x8 = F64x8Type()
"""The numba type of an 8-lane float64 vector."""

_VEC = ir.VectorType(ir.DoubleType(), 8)
_F64 = np.float64


@register_model(F64x8Type)
class _F64x8Model(models.PrimitiveModel):
    def __init__(self, dmm, fe_type):
        super().__init__(dmm, fe_type, _VEC)


# Contiguous rows only: lanes are read from consecutive addresses.
_ops = lane_ops(f64x8, _VEC, types.float64, _F64, align=8, contiguous=True)
vload, vstore, vsplat, vadd, vsub, vmul = _ops.vload, _ops.vstore, _ops.vsplat, _ops.vadd, _ops.vsub, _ops.vmul
_splat_ir = _ops.splat_ir


@intrinsic
def _vkeep_at_least(typingctx, v, floor):
    if not (v == f64x8 and floor == types.float64):
        return None

    def codegen(context, builder, signature, args):
        keep = builder.fcmp_ordered(">=", args[0], _splat_ir(builder, args[1]))
        return builder.select(keep, args[0], ir.Constant(_VEC, [0.0] * 8))

    return f64x8(v, floor), codegen


def vkeep_at_least(v, floor):
    """Lanes with ``v >= floor`` keep ``v``; the others (NaN too) become +0."""
    return np.where(v >= floor, v, _F64(0.0))


@overload(vkeep_at_least)
def _ov_vkeep_at_least(v, floor):
    if v == f64x8 and floor == types.float64:
        return lambda v, floor: _vkeep_at_least(v, floor)
    return None


@intrinsic
def _vany_nonzero(typingctx, v):
    if v != f64x8:
        return None

    def codegen(context, builder, signature, args):
        # Unordered "not equal": a NaN lane counts as nonzero.
        ne = builder.fcmp_unordered("!=", args[0], ir.Constant(_VEC, [0.0] * 8))
        bits = builder.bitcast(ne, ir.IntType(8))
        return builder.icmp_unsigned("!=", bits, ir.Constant(ir.IntType(8), 0))

    return types.boolean(v), codegen


def vany_nonzero(v):
    """True when some lane of ``v`` is not zero (a NaN lane counts)."""
    return bool(np.any(v != 0.0))


@overload(vany_nonzero)
def _ov_vany_nonzero(v):
    if v == f64x8:
        return lambda v: _vany_nonzero(v)
    return None
