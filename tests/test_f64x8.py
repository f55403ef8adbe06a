"""Tests for splatter.sim._f64x8, the 8-lane float64 value type of the swirl's
gradient kernel: each operation against numpy's elementwise float64
arithmetic (IEEE 754 round-to-nearest, the general-purpose reference here),
compiled and as plain Python."""

from __future__ import annotations

import numba
import numpy as np

from splatter.sim import _f64x8 as V


@numba.njit
def _ops(a, b, floor, out):
    x = V.vload(a, 0)
    y = V.vload(b, 0)
    V.vstore(out, 0, V.vadd(x, y))
    V.vstore(out, 8, V.vsub(x, y))
    V.vstore(out, 16, V.vmul(x, y))
    V.vstore(out, 24, V.vkeep_at_least(x, floor))
    V.vstore(out, 32, V.vsplat(floor))
    # a * b + a in two roundings (no fused multiply-add)
    V.vstore(out, 40, V.vadd(V.vmul(x, y), x))
    return V.vany_nonzero(x), V.vany_nonzero(y)


def _cases():
    rng = np.random.default_rng(5)
    a = rng.uniform(-3, 3, 8) * 10.0 ** rng.uniform(-15, 3, 8)
    b = rng.uniform(-3, 3, 8)
    a[2] = 1e-12  # exactly at the floor: kept
    a[5] = np.nan
    return a, b


def test_operations_match_numpy_bit_for_bit():
    a, b = _cases()
    out = np.empty(48)
    any_a, any_b = _ops(a, b, 1e-12, out)
    np.testing.assert_array_equal(out[0:8], a + b)
    np.testing.assert_array_equal(out[8:16], a - b)
    np.testing.assert_array_equal(out[16:24], a * b)
    np.testing.assert_array_equal(out[24:32], np.where(a >= 1e-12, a, 0.0))
    np.testing.assert_array_equal(out[32:40], np.full(8, 1e-12))
    np.testing.assert_array_equal(out[40:48], a * b + a)
    assert any_a and any_b


def test_plain_python_agrees():
    a, b = _cases()
    out = np.empty(48)
    _ops.py_func(a, b, 1e-12, out)
    np.testing.assert_array_equal(out[24:32], np.where(a >= 1e-12, a, 0.0))
    np.testing.assert_array_equal(out[40:48], a * b + a)


@numba.njit
def _any(v):
    return V.vany_nonzero(V.vload(v, 0))


def test_any_nonzero():
    assert not _any(np.zeros(8))
    assert not _any(-np.zeros(8))  # -0 == 0
    for lane in range(8):
        assert _any(np.eye(8)[lane] * 1e-300)
    assert _any(np.array([0, 0, 0, np.nan, 0, 0, 0, 0.0]))
    assert not V.vany_nonzero(np.zeros(8)) and V.vany_nonzero(np.eye(8)[7])
