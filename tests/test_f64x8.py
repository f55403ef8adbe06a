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


@numba.njit
def _more_ops(a, b, out):
    x = V.vload(a, 0)
    y = V.vload(b, 0)
    V.vstore(out, 0, V.vdiv(x, y))
    V.vstore(out, 8, V.vsqrt(x))
    V.vstore(out, 16, V.vabs(x))
    V.vstore(out, 24, V.vle(x, y))
    V.vstore(out, 32, V.vge(x, y))
    V.vstore(out, 40, V.veq(x, y))
    V.vstore(out, 48, V.vwhere(V.vge(x, y), x, y))


def test_division_roots_comparisons_and_select_match_numpy_bit_for_bit():
    # IEEE 754 division and square root are correctly rounded, so numpy's float64
    # results are the reference bit for bit; comparisons with a NaN are false.
    rng = np.random.default_rng(11)
    a = rng.uniform(0, 3, 8) * 10.0 ** rng.uniform(-12, 12, 8)
    b = rng.uniform(-3, 3, 8)
    a[1], b[1] = 2.0, 2.0  # equal lanes
    a[3] = -4.0  # a negative root: NaN
    b[4] = 0.0  # division by zero: an infinity, no error
    a[6] = np.nan
    out = np.empty(56)
    _more_ops(a, b, out)
    with np.errstate(divide="ignore", invalid="ignore"):
        np.testing.assert_array_equal(out[0:8], a / b)
        np.testing.assert_array_equal(out[8:16], np.sqrt(a))
    np.testing.assert_array_equal(out[16:24], np.abs(a))
    np.testing.assert_array_equal(out[24:32], (a <= b).astype(float))
    np.testing.assert_array_equal(out[32:40], (a >= b).astype(float))
    np.testing.assert_array_equal(out[40:48], (a == b).astype(float))
    np.testing.assert_array_equal(out[48:56], np.where(a >= b, a, b))
    assert out[30] == 0.0 and out[38] == 0.0 and out[46] == 0.0  # the NaN lane compares false
    plain = np.empty(56)
    _more_ops.py_func(a, b, plain)
    np.testing.assert_array_equal(plain, out)
