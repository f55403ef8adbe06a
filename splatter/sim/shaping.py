"""Puff shapes that follow the flow: each puff's deformation gradient ``F``.

A small blob of air carried by a velocity field ``u`` is deformed by the
local velocity gradient ``G = grad(u)`` (``G_ij = du_i / dx_j``):

    dF/dt = G F,   F(0) = I

(the deformation gradient of a material element, as in any continuum
mechanics text).  A Gaussian puff of covariance ``S0`` carried this way has
covariance ``F S0 F^T``; in a divergence-free flow ``det F = 1`` for all
time (Liouville), so the puff keeps its volume.  A source's ``follow`` in
[0, 1] scales ``G`` (0 keeps today's rigid puffs exactly: ``F`` stays the
identity bit for bit).

One step ``h`` with ``A = follow * G`` held fixed over the step uses the
Cayley (trapezoidal) map

    F <- (I - h A / 2)^-1 (I + h A / 2) F,

which is exact when ``A`` is nilpotent (simple shear) and maps a traceless
``A`` to a matrix of determinant 1 up to ``O(h^3)``; the remaining drift
(and round-off) is removed by rescaling ``F`` with ``det(F)^(-1/3)``.

Shapes are bounded: when the stretch ratio (largest over smallest singular
value of ``F``) exceeds the source's ``elongation``, the puff *relaxes*.
With the polar decomposition ``F = R U`` and ``U = V diag(s) V^T``, the log
stretches ``log s_i`` are clamped into a window of width
``log(elongation)`` placed so their sum stays 0 (``det F = 1``); the new
``F = R U' = F V diag(s' / s) V^T`` keeps the puff's rotation and the
directions of its axes.  The singular values are only computed for puffs
that may exceed the limit: with ``det F = 1``,
``s_max / s_min = s_max**2 s_mid <= ||F||_F**3``.

Kernels here are inlined into :mod:`splatter.sim.integrate`'s step; numba's
cache does not notice edits to this file, so touch ``integrate.py`` (or
delete ``splatter/__pycache__``) after changing one.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from splatter.core.jit import KERNEL, PARALLEL

_JACOBI_SWEEPS = 12  # cyclic Jacobi on 3x3 converges to round-off in about 5 sweeps


@numba.njit(inline="always", **KERNEL)
def _rotate(a, v, p, q):
    """One Jacobi rotation zeroing ``a[p, q]`` of the symmetric ``a``; accumulates into ``v``."""
    apq = a[p, q]
    if apq == 0.0:
        return
    theta = (a[q, q] - a[p, p]) / (2.0 * apq)
    t = (1.0 if theta >= 0.0 else -1.0) / (abs(theta) + math.sqrt(theta * theta + 1.0))
    c = 1.0 / math.sqrt(t * t + 1.0)
    s = t * c
    for k in range(3):
        akp = a[k, p]
        akq = a[k, q]
        a[k, p] = c * akp - s * akq
        a[k, q] = s * akp + c * akq
    for k in range(3):
        apk = a[p, k]
        aqk = a[q, k]
        a[p, k] = c * apk - s * aqk
        a[q, k] = s * apk + c * aqk
    for k in range(3):
        vkp = v[k, p]
        vkq = v[k, q]
        v[k, p] = c * vkp - s * vkq
        v[k, q] = s * vkp + c * vkq


@numba.njit(**KERNEL)
def _sym_eig3(a, v):
    """Eigen-decompose the symmetric (3, 3) ``a`` in place: its diagonal becomes the
    eigenvalues, the columns of ``v`` (set here) the eigenvectors."""
    for i in range(3):
        for j in range(3):
            v[i, j] = 1.0 if i == j else 0.0
    for _ in range(_JACOBI_SWEEPS):
        off = a[0, 1] * a[0, 1] + a[0, 2] * a[0, 2] + a[1, 2] * a[1, 2]
        diag = a[0, 0] * a[0, 0] + a[1, 1] * a[1, 1] + a[2, 2] * a[2, 2]
        if off <= 1e-36 * diag:
            break
        _rotate(a, v, 0, 1)
        _rotate(a, v, 0, 2)
        _rotate(a, v, 1, 2)


@numba.njit(**KERNEL)
def _relax(f, i, elongation, work):
    """Bound the stretch ratio of ``f[i]`` ((3, 3), det 1) at ``elongation``.

    ``work`` is (2, 3, 3) float64 scratch.  Returns True when ``f[i]`` changed.
    """
    c = work[0]
    v = work[1]
    for p in range(3):
        for q in range(3):
            c[p, q] = f[i, 0, p] * f[i, 0, q] + f[i, 1, p] * f[i, 1, q] + f[i, 2, p] * f[i, 2, q]
    _sym_eig3(c, v)  # F^T F = V diag(s^2) V^T
    l0 = 0.5 * math.log(max(c[0, 0], 1e-300))
    l1 = 0.5 * math.log(max(c[1, 1], 1e-300))
    l2 = 0.5 * math.log(max(c[2, 2], 1e-300))
    width = math.log(elongation)
    if max(l0, l1, l2) - min(l0, l1, l2) <= width:
        return False
    # Window [m - width/2, m + width/2] with the clamped log stretches summing
    # to 0 (volume kept). The largest is clamped down, the smallest up; the
    # middle one stays where the window holds it (m = -mid / 2), else it is
    # clamped with the extreme on its side (m = -+width / 6).
    half = 0.5 * width
    mid = l0 + l1 + l2 - max(l0, l1, l2) - min(l0, l1, l2)
    m = -0.5 * mid
    if mid > m + half:
        m = -width / 6.0
    elif mid < m - half:
        m = width / 6.0
    g0 = math.exp(min(max(l0, m - half), m + half) - l0)
    g1 = math.exp(min(max(l1, m - half), m + half) - l1)
    g2 = math.exp(min(max(l2, m - half), m + half) - l2)
    # F <- F V diag(g) V^T: the rotation R = F U^-1 and the axes V are kept.
    for p in range(3):
        for q in range(3):
            c[p, q] = v[p, 0] * g0 * v[q, 0] + v[p, 1] * g1 * v[q, 1] + v[p, 2] * g2 * v[q, 2]
    for r in range(3):
        x0 = f[i, r, 0]
        x1 = f[i, r, 1]
        x2 = f[i, r, 2]
        for q in range(3):
            f[i, r, q] = x0 * c[0, q] + x1 * c[1, q] + x2 * c[2, q]
    return True


@numba.njit(inline="always", **KERNEL)
def _det3(f, i):
    return (f[i, 0, 0] * (f[i, 1, 1] * f[i, 2, 2] - f[i, 1, 2] * f[i, 2, 1])
            - f[i, 0, 1] * (f[i, 1, 0] * f[i, 2, 2] - f[i, 1, 2] * f[i, 2, 0])
            + f[i, 0, 2] * (f[i, 1, 0] * f[i, 2, 1] - f[i, 1, 1] * f[i, 2, 0]))


@numba.njit(**KERNEL)
def _advance_one(f, i, g00, g01, g02, g10, g11, g12, g20, g21, g22, h, follow, elongation, work):
    """One Cayley step of ``f[i]`` ((3, 3) float64) with ``A = follow * G``, then the
    determinant rescale and, if the stretch may exceed ``elongation``, the relax."""
    if follow == 0.0:
        return  # rigid puffs: F stays exactly the identity
    k = 0.5 * h * follow
    # P = I - k G (to invert), Q = I + k G.
    p00 = 1.0 - k * g00
    p01 = -k * g01
    p02 = -k * g02
    p10 = -k * g10
    p11 = 1.0 - k * g11
    p12 = -k * g12
    p20 = -k * g20
    p21 = -k * g21
    p22 = 1.0 - k * g22
    # Adjugate of P; P^-1 = adj(P) / det(P).
    i00 = p11 * p22 - p12 * p21
    i01 = p02 * p21 - p01 * p22
    i02 = p01 * p12 - p02 * p11
    i10 = p12 * p20 - p10 * p22
    i11 = p00 * p22 - p02 * p20
    i12 = p02 * p10 - p00 * p12
    i20 = p10 * p21 - p11 * p20
    i21 = p01 * p20 - p00 * p21
    i22 = p00 * p11 - p01 * p10
    inv = 1.0 / (p00 * i00 + p01 * i10 + p02 * i20)
    # (I + kG) F first, then P^-1.
    for q in range(3):
        x0 = f[i, 0, q]
        x1 = f[i, 1, q]
        x2 = f[i, 2, q]
        y0 = x0 + k * (g00 * x0 + g01 * x1 + g02 * x2)
        y1 = x1 + k * (g10 * x0 + g11 * x1 + g12 * x2)
        y2 = x2 + k * (g20 * x0 + g21 * x1 + g22 * x2)
        f[i, 0, q] = (i00 * y0 + i01 * y1 + i02 * y2) * inv
        f[i, 1, q] = (i10 * y0 + i11 * y1 + i12 * y2) * inv
        f[i, 2, q] = (i20 * y0 + i21 * y1 + i22 * y2) * inv
    _unit_det(f, i)
    nrm2 = 0.0
    for r in range(3):
        for q in range(3):
            nrm2 += f[i, r, q] * f[i, r, q]
    # ratio <= ||F||_F^3 when det F = 1: skip the eigen work below that.
    if nrm2 * nrm2 * nrm2 > elongation * elongation:
        if _relax(f, i, elongation, work):
            _unit_det(f, i)


@numba.njit(inline="always", **KERNEL)
def _unit_det(f, i):
    d = _det3(f, i)
    if d > 0.0:
        s = 1.0 / np.cbrt(d)
        for r in range(3):
            for q in range(3):
                f[i, r, q] *= s


@numba.njit(**PARALLEL)
def _advance(f, grad, h, follow, elongation):
    for i in numba.prange(f.shape[0]):
        work = np.empty((2, 3, 3))
        _advance_one(f, i, grad[i, 0, 0], grad[i, 0, 1], grad[i, 0, 2], grad[i, 1, 0], grad[i, 1, 1],
                     grad[i, 1, 2], grad[i, 2, 0], grad[i, 2, 1], grad[i, 2, 2], h, follow[i], elongation[i], work)


@numba.njit(**PARALLEL)
def _relax_all(f, elongation, changed):
    for i in numba.prange(f.shape[0]):
        work = np.empty((2, 3, 3))
        changed[i] = _relax(f, i, elongation[i], work)
        if changed[i]:
            _unit_det(f, i)


def _check_deform(deform, n=None):
    if not isinstance(deform, np.ndarray) or deform.dtype != np.float64 or deform.ndim != 3 \
            or deform.shape[1:] != (3, 3) or not deform.flags.c_contiguous:
        raise TypeError("deform: expected a C-contiguous (N, 3, 3) float64 ndarray")
    if n is not None and deform.shape[0] != n:
        raise ValueError(f"deform: expected {n} matrices, got {deform.shape[0]}")


def _per_puff(value, n, name):
    arr = np.ascontiguousarray(np.broadcast_to(np.asarray(value, dtype=np.float64), (n,)))
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name}: expected finite values")
    return arr


def advance_deform(deform: np.ndarray, grad, *, dt: float, follow=1.0, elongation=1e300) -> None:
    """Advance deformation gradients by one step with given velocity gradients, in place.

    Parameters
    ----------
    deform : (N, 3, 3) float64 ndarray, C-contiguous
        ``F`` of each puff; overwritten.
    grad : (N, 3, 3) float64 array_like
        Air velocity gradient ``G[i, a, b] = du_a / dx_b`` at each puff, 1/s.
    dt : float
        Step, seconds (> 0).
    follow : float or (N,) float64 array_like
        How strongly the shape follows the flow, in [0, 1].
    elongation : float or (N,) float64 array_like
        Stretch ratio above which a puff relaxes (> 1).

    Examples
    --------
    >>> f = np.eye(3)[None].copy()
    >>> g = np.zeros((1, 3, 3)); g[0, 0, 1] = 2.0   # shear u = (2 y, 0, 0)
    >>> advance_deform(f, g, dt=0.5)
    >>> float(f[0, 0, 1])
    1.0
    """
    _check_deform(deform)
    n = deform.shape[0]
    grad = np.ascontiguousarray(np.broadcast_to(np.asarray(grad, dtype=np.float64), (n, 3, 3)))
    if not dt > 0:
        raise ValueError(f"dt must be > 0, got {dt}")
    _advance(deform, grad, float(dt), _per_puff(follow, n, "follow"), _per_puff(elongation, n, "elongation"))


def relax_deform(deform: np.ndarray, elongation) -> np.ndarray:
    """Bound each ``F``'s stretch ratio at ``elongation`` (see the module docstring), in place.

    Parameters
    ----------
    deform : (N, 3, 3) float64 ndarray, C-contiguous, each with det 1
    elongation : float or (N,) float64 array_like (> 1)

    Returns
    -------
    (N,) bool ndarray
        True where the puff was relaxed.
    """
    _check_deform(deform)
    n = deform.shape[0]
    changed = np.zeros(n, dtype=np.bool_)
    _relax_all(deform, _per_puff(elongation, n, "elongation"), changed)
    return changed


def stretch_ratio(deform) -> np.ndarray:
    """Largest over smallest singular value of each ``F``: (N,) float64 (numpy's SVD)."""
    s = np.linalg.svd(np.asarray(deform, dtype=np.float64), compute_uv=False)
    return s[:, 0] / s[:, -1]


def largest_stretch(deform) -> np.ndarray:
    """Largest singular value of each ``F`` ((N, 3, 3)): (N,) float64, exactly 1.0 where ``F = I``."""
    deform = np.asarray(deform, dtype=np.float64)
    out = np.ones(deform.shape[0])
    moved = np.any(deform.reshape(-1, 9) != np.eye(3).reshape(9), axis=1)
    if moved.any():
        out[moved] = np.linalg.svd(deform[moved], compute_uv=False)[:, 0]
    return out
