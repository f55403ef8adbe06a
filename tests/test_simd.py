"""Tests for splatter.raster._simd, the 8-lane float32 vector type of the compositor
kernels: each operation against numpy (the general-purpose reference here),
compiled and as plain Python."""

from __future__ import annotations

import platform

import numba
import numpy as np

from splatter.raster import _simd as S


@numba.njit
def _exp_all(x, out):
    for i in range(0, x.shape[0], 8):
        S.vstore(out, i, S.vexp(S.vload(x, i)))


@numba.njit
def _powers(rs, out):
    for i in range(rs.shape[0]):
        S.vstore(out, 8 * i, S.vpowers(rs[i]))


@numba.njit
def _keep(v, counts, out):
    x = S.vload(v, 0)
    for i in range(counts.shape[0]):
        S.vstore(out, 8 * i, S.vkeep_below(x, counts[i]))


@numba.njit
def _arith(a, b, c, out):
    x = S.vload(a, 0)
    y = S.vload(b, 0)
    z = S.vload(c, 0)
    S.vstore(out, 0, S.vadd(x, y))
    S.vstore(out, 8, S.vsub(x, y))
    S.vstore(out, 16, S.vmul(x, y))
    S.vstore(out, 24, S.vfma(x, y, z))
    S.vstore(out, 32, S.vmin(x, y))
    S.vstore(out, 40, S.vmax(x, y))
    S.vstore(out, 48, S.vfloor(x))
    S.vstore(out, 56, S.vadd(S.vramp(), S.vsplat(np.float32(0.5))))


def test_vexp_matches_numpy_exp_to_two_ulp():
    # numpy's float64 exp as the oracle; float32 ulp is 2^-23 = 1.19e-7.
    x = np.linspace(-87.0, 88.0, 400_000).astype(np.float32)
    out = np.empty_like(x)
    _exp_all(x, out)
    rel = np.abs(out / np.exp(x.astype(np.float64)) - 1.0)
    assert rel.max() < 2.4e-7
    # Exact at 0, and clamped (finite, no denormals) past the range.
    z = np.array([0, -200, 200, -87.5, 88.5, 1, -1, 10], dtype=np.float32)
    oz = np.empty_like(z)
    _exp_all(z, oz)
    assert oz[0] == 1.0
    assert np.all(np.isfinite(oz)) and oz.min() >= np.finfo(np.float32).tiny


def test_vexp_plain_python_agrees():
    x = np.linspace(-20, 20, 8).astype(np.float32)
    got = getattr(S.vexp, "py_func", S.vexp)(x)
    np.testing.assert_allclose(got, np.exp(x.astype(np.float64)), rtol=3e-7)


def test_vpowers_are_powers():
    rs = np.array([0.5, 1.0, 1.7, 0.03, 2.9], dtype=np.float32)
    out = np.empty(8 * len(rs), dtype=np.float32)
    _powers(rs, out)
    want = rs.astype(np.float64)[:, None] ** np.arange(8)
    np.testing.assert_allclose(out.reshape(-1, 8), want, rtol=6e-7)
    np.testing.assert_allclose(S.vpowers(np.float32(1.7)), want[2], rtol=6e-7)


def test_vkeep_below_zeroes_the_tail_lanes():
    v = np.arange(1, 9, dtype=np.float32)
    counts = np.array([-3, 0, 1, 5, 8, 20], dtype=np.float32)
    out = np.empty(8 * len(counts), dtype=np.float32)
    _keep(v, counts, out)
    for i, c in enumerate(counts):
        want = np.where(np.arange(8) < c, v, 0.0)
        np.testing.assert_array_equal(out[8 * i:8 * i + 8], want)
        np.testing.assert_array_equal(S.vkeep_below(v, c), want)


def test_arithmetic_matches_numpy():
    rng = np.random.default_rng(4)
    a, b, c = (rng.uniform(-3, 3, 8).astype(np.float32) for _ in range(3))
    out = np.empty(64, dtype=np.float32)
    _arith(a, b, c, out)
    np.testing.assert_array_equal(out[0:8], a + b)
    np.testing.assert_array_equal(out[8:16], a - b)
    np.testing.assert_array_equal(out[16:24], a * b)
    # One rounding: float64 product plus c, rounded once to float32.
    np.testing.assert_array_equal(out[24:32], (a.astype(np.float64) * b + c).astype(np.float32))
    np.testing.assert_array_equal(out[32:40], np.minimum(a, b))
    np.testing.assert_array_equal(out[40:48], np.maximum(a, b))
    np.testing.assert_array_equal(out[48:56], np.floor(a))
    np.testing.assert_array_equal(out[56:64], np.arange(8) + 0.5)


@numba.njit
def _sum_with_prefetch(a, ahead):
    s = 0.0
    for i in range(a.shape[0]):
        S.prefetch(a, i + ahead)  # past the end too: a prefetch never faults
        s += a[i]
    return s


def test_prefetch_compiles_and_leaves_results_alone():
    # A prefetch is only a hint; the one thing to check is that it lowers to
    # code that runs, also for addresses outside the array, and changes nothing.
    a = np.arange(1000, dtype=np.float64)
    for ahead in (0, 16, 4096, -4096):
        assert _sum_with_prefetch(a, ahead) == a.sum()
    assert _sum_with_prefetch.py_func(a, 16) == a.sum()
    asm = _sum_with_prefetch.inspect_asm(_sum_with_prefetch.signatures[0])
    if platform.machine() in ("x86_64", "AMD64"):
        assert "prefetcht0" in asm
