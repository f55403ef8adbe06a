"""Eight-lane float64 vectors for the swirl's gradient kernel.

The swirl's gradient sums, for every puff, one term per mode into twelve
running sums (three of velocity, nine of gradient). LLVM's loop vectorizer
keeps those sums in memory, loading and storing all twelve rows once per
mode; with a value type the sums of eight puffs stay in registers over all
the octaves of a direction. :data:`f64x8` lowers to LLVM's ``<8 x double>``
(one AVX-512 register, two AVX ones), like the compositor's float32 type in
:mod:`splatter.raster._simd`, whose pattern this module follows.

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

__all__ = ["f64x8", "vload", "vstore", "vsplat", "vadd", "vsub", "vmul", "vkeep_at_least", "vany_nonzero"]


class F64x8Type(types.Type):
    """numba type of an 8-lane float64 vector value."""

    def __init__(self):
        super().__init__(name="f64x8")


f64x8 = F64x8Type()
"""The numba type of an 8-lane float64 vector."""

_VEC = ir.VectorType(ir.DoubleType(), 8)
_IVEC = ir.VectorType(ir.IntType(32), 8)
_F64 = np.float64


@register_model(F64x8Type)
class _F64x8Model(models.PrimitiveModel):
    def __init__(self, dmm, fe_type):
        super().__init__(dmm, fe_type, _VEC)


def _is_f64_row(arr):
    # Contiguous only: lanes are read from consecutive addresses.
    return isinstance(arr, types.Array) and arr.dtype == types.float64 and arr.ndim == 1 and arr.layout == "C"


def _splat_ir(builder, x):
    """LLVM IR: the double ``x`` in all 8 lanes."""
    v = builder.insert_element(ir.Constant(_VEC, ir.Undefined), x, ir.Constant(ir.IntType(32), 0))
    return builder.shuffle_vector(v, v, ir.Constant(_IVEC, [0] * 8))


def _lane_ptr(context, builder, arrty, arr, idx, idxty):
    """Pointer to ``arr[idx]`` as ``<8 x double>*`` (no bounds check)."""
    ary = context.make_array(arrty)(context, builder, arr)
    idx = context.cast(builder, idx, idxty, types.intp)
    ptr = builder.gep(ary.data, [idx])
    return builder.bitcast(ptr, _VEC.as_pointer())


# --- loads, stores, constants ----------------------------------------------------------

@intrinsic
def _vload(typingctx, arr, idx):
    if not (_is_f64_row(arr) and isinstance(idx, types.Integer)):
        return None

    def codegen(context, builder, signature, args):
        ptr = _lane_ptr(context, builder, signature.args[0], args[0], args[1], signature.args[1])
        return builder.load(ptr, align=8)

    return f64x8(arr, idx), codegen


@intrinsic
def _vstore(typingctx, arr, idx, v):
    if not (_is_f64_row(arr) and isinstance(idx, types.Integer) and v == f64x8):
        return None

    def codegen(context, builder, signature, args):
        ptr = _lane_ptr(context, builder, signature.args[0], args[0], args[1], signature.args[1])
        builder.store(args[2], ptr, align=8)
        return context.get_dummy_value()

    return types.none(arr, idx, v), codegen


@intrinsic
def _vsplat(typingctx, x):
    if x != types.float64:
        return None

    def codegen(context, builder, signature, args):
        return _splat_ir(builder, args[0])

    return f64x8(x), codegen


def vload(arr, i):
    """``arr[i:i+8]`` of a contiguous 1-D float64 array, as a vector (no bounds check when compiled)."""
    return np.array(arr[i:i + 8], dtype=_F64)


def vstore(arr, i, v):
    """``arr[i:i+8] = v`` (no bounds check when compiled)."""
    arr[i:i + 8] = v


def vsplat(x):
    """A vector with ``x`` (float64) in every lane."""
    return np.full(8, x, dtype=_F64)


@overload(vload)
def _ov_vload(arr, i):
    if _is_f64_row(arr) and isinstance(i, types.Integer):
        return lambda arr, i: _vload(arr, i)
    return None


@overload(vstore)
def _ov_vstore(arr, i, v):
    if _is_f64_row(arr) and isinstance(i, types.Integer) and v == f64x8:
        return lambda arr, i, v: _vstore(arr, i, v)
    return None


@overload(vsplat)
def _ov_vsplat(x):
    if x == types.float64:
        return lambda x: _vsplat(x)
    return None


# --- arithmetic ---------------------------------------------------------------------

def _binary_intrinsic(emit):
    @intrinsic
    def op(typingctx, a, b):
        if not (a == f64x8 and b == f64x8):
            return None

        def codegen(context, builder, signature, args):
            return emit(builder, args[0], args[1])

        return f64x8(a, b), codegen

    return op


# Plain fadd/fsub/fmul carry no fast-math flags: LLVM may neither fuse nor reorder them.
_vadd = _binary_intrinsic(lambda b, x, y: b.fadd(x, y))
_vsub = _binary_intrinsic(lambda b, x, y: b.fsub(x, y))
_vmul = _binary_intrinsic(lambda b, x, y: b.fmul(x, y))


def vadd(a, b):
    """``a + b`` lane by lane."""
    return np.add(a, b, dtype=_F64)


def vsub(a, b):
    """``a - b`` lane by lane."""
    return np.subtract(a, b, dtype=_F64)


def vmul(a, b):
    """``a * b`` lane by lane."""
    return np.multiply(a, b, dtype=_F64)


for _py, _ir in ((vadd, _vadd), (vsub, _vsub), (vmul, _vmul)):
    def _register(py, impl):
        @overload(py)
        def _ov(a, b):
            if a == f64x8 and b == f64x8:
                return lambda a, b: impl(a, b)
            return None

    _register(_py, _ir)


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
