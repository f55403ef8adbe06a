"""Eight-lane float64 vectors for the swirl's gradient and the shape relax.

The swirl's gradient sums, for every puff, one term per mode into twelve
running sums (three of velocity, nine of gradient). LLVM's loop vectorizer
keeps those sums in memory, loading and storing all twelve rows once per
mode; with a value type the sums of eight puffs stay in registers over all
the octaves of a direction. :data:`f64x8` lowers to LLVM's ``<8 x double>``
(one AVX-512 register, two AVX ones), like the compositor's float32 type in
:mod:`splatter.raster._simd`; loads, stores, splats and lane arithmetic are
the shared ones of :func:`splatter.core.lanes.lane_ops`. Division, square
root, absolute value, comparisons and a lane select serve the eigen
decomposition of eight puffs' shapes at once (:mod:`splatter.sim.shaping`).

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
>>> x = np.array([-4.0, -1, 0, 1, 4, 9, 16, 25])
>>> vwhere(vge(x, vsplat(0.0)), vsqrt(x), vabs(x))
array([4., 1., 0., 1., 2., 3., 4., 5.])
"""

from __future__ import annotations

import numpy as np
from llvmlite import ir
from numba.core import cgutils, types
from numba.extending import intrinsic, models, overload, register_model

from splatter.core.lanes import lane_ops

__all__ = ["f64x8", "vload", "vstore", "vsplat", "vadd", "vsub", "vmul", "vdiv", "vsqrt", "vabs", "vle", "vge", "veq",
           "vwhere", "vkeep_at_least", "vany_nonzero"]


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


# ---------------------------------------------------------------------------------------------------------------
# Division, square root, absolute value; comparisons as 1.0 / 0.0 lanes and a select on them.

def vdiv(a, b):
    """``a / b`` lane by lane (IEEE division: ``x / 0`` is an infinity or NaN, no error)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return (a / b).astype(_F64)


def vsqrt(a):
    """Square root lane by lane, correctly rounded (NaN for a negative lane)."""
    with np.errstate(invalid="ignore"):
        return np.sqrt(a).astype(_F64)


def vabs(a):
    """``|a|`` lane by lane."""
    return np.abs(a).astype(_F64)


def vle(a, b):
    """1.0 in lanes where ``a <= b``, else 0.0 (a NaN on either side gives 0.0)."""
    return (a <= b).astype(_F64)


def vge(a, b):
    """1.0 in lanes where ``a >= b``, else 0.0 (a NaN on either side gives 0.0)."""
    return (a >= b).astype(_F64)


def veq(a, b):
    """1.0 in lanes where ``a == b``, else 0.0 (a NaN on either side gives 0.0)."""
    return (a == b).astype(_F64)


def vwhere(m, a, b):
    """``a`` in lanes where ``m`` is not 0.0, ``b`` elsewhere (``m`` from :func:`vle` and its kin)."""
    return np.where(m != 0.0, a, b).astype(_F64)


def _call_vector_intrinsic(builder, name, *args):
    """Call LLVM's ``name.v8f64`` (for example ``llvm.sqrt``) on vector arguments."""
    fnty = ir.FunctionType(_VEC, [_VEC] * len(args))
    return builder.call(cgutils.get_or_insert_function(builder.module, fnty, name + ".v8f64"), list(args))


def _compare(op):
    def emit(builder, a, b):
        hit = builder.fcmp_ordered(op, a, b)
        return builder.select(hit, ir.Constant(_VEC, [1.0] * 8), ir.Constant(_VEC, [0.0] * 8))
    return emit


for _py, _emit in ((vdiv, lambda b, x, y: b.fdiv(x, y)), (vle, _compare("<=")), (vge, _compare(">=")),
                   (veq, _compare("=="))):
    _ops.overload_lanes(_py, _ops.binary_intrinsic(_emit), 2)


def _unary_intrinsic(llvm_name):
    @intrinsic
    def op(typingctx, a):
        if a != f64x8:
            return None

        def codegen(context, builder, signature, args):
            return _call_vector_intrinsic(builder, llvm_name, args[0])

        return f64x8(a), codegen

    return op


_ops.overload_lanes(vsqrt, _unary_intrinsic("llvm.sqrt"), 1)
_ops.overload_lanes(vabs, _unary_intrinsic("llvm.fabs"), 1)


@intrinsic
def _vwhere(typingctx, m, a, b):
    if not (m == f64x8 and a == f64x8 and b == f64x8):
        return None

    def codegen(context, builder, signature, args):
        # Unordered "not equal", as in vany_nonzero; masks here are only ever 1.0 or 0.0.
        pick = builder.fcmp_unordered("!=", args[0], ir.Constant(_VEC, [0.0] * 8))
        return builder.select(pick, args[1], args[2])

    return f64x8(m, a, b), codegen


_ops.overload_lanes(vwhere, _vwhere, 3)
