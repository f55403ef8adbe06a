"""What the eight-lane vector types share: loads, stores, splats and lane arithmetic.

The compositor's float32 lanes (:mod:`splatter.raster._simd`) and the
swirl's float64 lanes (:mod:`splatter.sim._f64x8`) are the same machinery
over a different element type: each module declares its numba type and
LLVM vector type, and :func:`lane_ops` builds the common operations for it.
Every operation is one IEEE operation per lane with round-to-nearest; plain
``fadd``/``fsub``/``fmul`` carry no fast-math flags, so LLVM may neither fuse
nor reorder them.

Each operation is a plain Python function on ``(8,)`` ndarrays of the
element type, overloaded for compiled code with an LLVM intrinsic; with
``NUMBA_DISABLE_JIT=1`` the kernels run as ordinary (slow) Python.

Examples
--------
>>> import numpy as np
>>> from splatter.sim._f64x8 import vadd, vmul, vsplat
>>> vadd(vmul(np.arange(8.0), vsplat(2.0)), vsplat(1.0))
array([ 1.,  3.,  5.,  7.,  9., 11., 13., 15.])
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
from llvmlite import ir
from numba.core import types
from numba.extending import intrinsic, overload

__all__ = ["LANES", "lane_ops"]

LANES = 8
"""Lanes of every vector type."""

_IVEC = ir.VectorType(ir.IntType(32), LANES)


def lane_ops(lane_type, vec, element, np_dtype, *, align: int, contiguous: bool) -> SimpleNamespace:
    """The common operations of one eight-lane vector type.

    Parameters
    ----------
    lane_type : numba.core.types.Type
        The vector's numba type (its module registers its data model).
    vec : llvmlite.ir.VectorType
        Its LLVM type, ``<8 x float>`` or ``<8 x double>``.
    element : numba.core.types.Float
        The element's numba type.
    np_dtype : numpy dtype
        The element's numpy type, for the plain Python versions.
    align : int
        Alignment, in bytes, the loads and stores assume (the element's size).
    contiguous : bool
        Accept only C-contiguous arrays (layout ``"C"``) for loads and stores.

    Returns
    -------
    SimpleNamespace
        ``vload(arr, i)``, ``vstore(arr, i, v)``, ``vsplat(x)``, ``vadd``,
        ``vsub``, ``vmul`` (overloaded Python functions), and for the
        module's own operations ``splat_ir(builder, x)``,
        ``binary_intrinsic(emit)`` and ``overload_lanes(pyfunc, impl, nargs)``.
    """
    name = np.dtype(np_dtype).name

    def is_row(arr):
        return (isinstance(arr, types.Array) and arr.dtype == element and arr.ndim == 1
                and (not contiguous or arr.layout == "C"))

    def splat_ir(builder, x):
        """LLVM IR: the scalar ``x`` in all 8 lanes."""
        v = builder.insert_element(ir.Constant(vec, ir.Undefined), x, ir.Constant(ir.IntType(32), 0))
        return builder.shuffle_vector(v, v, ir.Constant(_IVEC, [0] * LANES))

    def lane_ptr(context, builder, arrty, arr, idx, idxty):
        """Pointer to ``arr[idx]`` as a pointer to the vector type (no bounds check)."""
        ary = context.make_array(arrty)(context, builder, arr)
        idx = context.cast(builder, idx, idxty, types.intp)
        return builder.bitcast(builder.gep(ary.data, [idx]), vec.as_pointer())

    @intrinsic
    def _vload(typingctx, arr, idx):
        if not (is_row(arr) and isinstance(idx, types.Integer)):
            return None

        def codegen(context, builder, signature, args):
            ptr = lane_ptr(context, builder, signature.args[0], args[0], args[1], signature.args[1])
            return builder.load(ptr, align=align)

        return lane_type(arr, idx), codegen

    @intrinsic
    def _vstore(typingctx, arr, idx, v):
        if not (is_row(arr) and isinstance(idx, types.Integer) and v == lane_type):
            return None

        def codegen(context, builder, signature, args):
            ptr = lane_ptr(context, builder, signature.args[0], args[0], args[1], signature.args[1])
            builder.store(args[2], ptr, align=align)
            return context.get_dummy_value()

        return types.none(arr, idx, v), codegen

    @intrinsic
    def _vsplat(typingctx, x):
        if x != element:
            return None

        def codegen(context, builder, signature, args):
            return splat_ir(builder, args[0])

        return lane_type(x), codegen

    def binary_intrinsic(emit):
        """An intrinsic of two vectors to a vector, its IR from ``emit(builder, a, b)``."""
        @intrinsic
        def op(typingctx, a, b):
            if not (a == lane_type and b == lane_type):
                return None

            def codegen(context, builder, signature, args):
                return emit(builder, args[0], args[1])

            return lane_type(a, b), codegen

        return op

    def overload_lanes(pyfunc, impl, nargs):
        """Compile ``pyfunc`` of ``nargs`` (1 to 3) vectors as the intrinsic ``impl``."""
        if nargs == 1:
            @overload(pyfunc)
            def _ov(a):
                if a == lane_type:
                    return lambda a: impl(a)
                return None
        elif nargs == 2:
            @overload(pyfunc)
            def _ov(a, b):
                if a == lane_type and b == lane_type:
                    return lambda a, b: impl(a, b)
                return None
        else:
            @overload(pyfunc)
            def _ov(a, b, c):
                if a == lane_type and b == lane_type and c == lane_type:
                    return lambda a, b, c: impl(a, b, c)
                return None

    def vload(arr, i):
        return np.array(arr[i:i + LANES], dtype=np_dtype)

    def vstore(arr, i, v):
        arr[i:i + LANES] = v

    def vsplat(x):
        return np.full(LANES, x, dtype=np_dtype)

    def vadd(a, b):
        return (a + b).astype(np_dtype)

    def vsub(a, b):
        return (a - b).astype(np_dtype)

    def vmul(a, b):
        return (a * b).astype(np_dtype)

    layout = "contiguous " if contiguous else ""
    vload.__doc__ = f"``arr[i:i+8]`` of a {layout}1-D {name} array, as a vector (no bounds check when compiled)."
    vstore.__doc__ = "``arr[i:i+8] = v`` (no bounds check when compiled)."
    vsplat.__doc__ = f"A vector with ``x`` ({name}) in every lane."
    vadd.__doc__ = "``a + b`` lane by lane."
    vsub.__doc__ = "``a - b`` lane by lane."
    vmul.__doc__ = "``a * b`` lane by lane."

    @overload(vload)
    def _ov_vload(arr, i):
        if is_row(arr) and isinstance(i, types.Integer):
            return lambda arr, i: _vload(arr, i)
        return None

    @overload(vstore)
    def _ov_vstore(arr, i, v):
        if is_row(arr) and isinstance(i, types.Integer) and v == lane_type:
            return lambda arr, i, v: _vstore(arr, i, v)
        return None

    @overload(vsplat)
    def _ov_vsplat(x):
        if x == element:
            return lambda x: _vsplat(x)
        return None

    for py, emit in ((vadd, lambda b, x, y: b.fadd(x, y)), (vsub, lambda b, x, y: b.fsub(x, y)),
                     (vmul, lambda b, x, y: b.fmul(x, y))):
        overload_lanes(py, binary_intrinsic(emit), 2)

    return SimpleNamespace(vload=vload, vstore=vstore, vsplat=vsplat, vadd=vadd, vsub=vsub, vmul=vmul,
                           splat_ir=splat_ir, binary_intrinsic=binary_intrinsic, overload_lanes=overload_lanes)
