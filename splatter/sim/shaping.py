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
cache keys that step on ``integrate.py``'s own bytes and does not notice
edits to this file, so delete the cache (``$NUMBA_CACHE_DIR``, else
``splatter/sim/__pycache__``) after changing one: touching a file is not
enough.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from splatter.core.jit import KERNEL, PARALLEL
from splatter.sim import _f64x8 as V

_JACOBI_SWEEPS = 12  # cyclic Jacobi on 3x3 converges to round-off in about 5 sweeps


@numba.njit(inline="always", **KERNEL)
def _rotate(app, apq, apr, aqp, aqq, aqr, arp, arq, arr, vp0, vp1, vp2, vq0, vq1, vq2):
    """One Jacobi rotation zeroing ``a[p, q]`` of the symmetric 3 x 3 ``a``, on scalars.

    Arguments: the entries of ``a`` in the order of indices ``(p, q, r)`` (``r``
    the third), and columns ``p`` and ``q`` of the eigenvector matrix ``v``;
    returns them rotated, in the same order (``arr`` and column ``r`` of ``v``
    do not change).  Columns are rotated first, then rows, so every entry,
    round-off included, is the one a rotation of the whole matrix in memory
    gives; held in scalars, the sweeps stay in registers.
    """
    if apq == 0.0:
        return app, apq, apr, aqp, aqq, aqr, arp, arq, vp0, vp1, vp2, vq0, vq1, vq2
    theta = (aqq - app) / (2.0 * apq)
    t = (1.0 if theta >= 0.0 else -1.0) / (abs(theta) + math.sqrt(theta * theta + 1.0))
    c = 1.0 / math.sqrt(t * t + 1.0)
    s = t * c
    # Columns p and q.
    app1 = c * app - s * apq
    apq1 = s * app + c * apq
    aqp1 = c * aqp - s * aqq
    aqq1 = s * aqp + c * aqq
    arp1 = c * arp - s * arq
    arq1 = s * arp + c * arq
    # Then rows p and q.
    return (c * app1 - s * aqp1, c * apq1 - s * aqq1, c * apr - s * aqr,
            s * app1 + c * aqp1, s * apq1 + c * aqq1, s * apr + c * aqr, arp1, arq1,
            c * vp0 - s * vq0, c * vp1 - s * vq1, c * vp2 - s * vq2,
            s * vp0 + c * vq0, s * vp1 + c * vq1, s * vp2 + c * vq2)


@numba.njit(inline="always", **KERNEL)
def _sym_eig3(a00, a01, a02, a10, a11, a12, a20, a21, a22):
    """Eigen-decompose the symmetric 3 x 3 ``a`` (given by its entries) by cyclic Jacobi.

    Returns the eigenvalues ``(l0, l1, l2)`` and the eigenvector matrix ``v``
    (the eigenvectors are its columns) as the tuple ``(l0, l1, l2, v00, v01,
    ..., v22)``.
    """
    v00, v01, v02 = 1.0, 0.0, 0.0
    v10, v11, v12 = 0.0, 1.0, 0.0
    v20, v21, v22 = 0.0, 0.0, 1.0
    for _ in range(_JACOBI_SWEEPS):
        off = a01 * a01 + a02 * a02 + a12 * a12
        diag = a00 * a00 + a11 * a11 + a22 * a22
        if off <= 1e-36 * diag:
            break
        # (p, q, r) = (0, 1, 2), (0, 2, 1), (1, 2, 0).
        a00, a01, a02, a10, a11, a12, a20, a21, v00, v10, v20, v01, v11, v21 = _rotate(
            a00, a01, a02, a10, a11, a12, a20, a21, a22, v00, v10, v20, v01, v11, v21)
        a00, a02, a01, a20, a22, a21, a10, a12, v00, v10, v20, v02, v12, v22 = _rotate(
            a00, a02, a01, a20, a22, a21, a10, a12, a11, v00, v10, v20, v02, v12, v22)
        a11, a12, a10, a21, a22, a20, a01, a02, v01, v11, v21, v02, v12, v22 = _rotate(
            a11, a12, a10, a21, a22, a20, a01, a02, a00, v01, v11, v21, v02, v12, v22)
    return a00, a11, a22, v00, v01, v02, v10, v11, v12, v20, v21, v22


# ---------------------------------------------------------------------------------------------------------------
# The same Jacobi sweeps on eight matrices at once.
#
# Each rotation is a chain of divisions and square roots that depend on one
# another, so one matrix at a time leaves the core waiting on their latency;
# in the chimney demo half the puffs relax every step, and the sweeps were a
# quarter of the step. Eight matrices in the lanes of a vector register run
# the same operations side by side. A lane whose matrix has converged (or
# whose ``a[p, q]`` is already 0) keeps its values through a select, exactly
# as the scalar code leaves the loop, so every lane gets the scalar bits.


@numba.njit(inline="always", **KERNEL)
def _rotate8(go, app, apq, apr, aqp, aqq, aqr, arp, arq, arr, vp0, vp1, vp2, vq0, vq1, vq2):
    """:func:`_rotate` on eight matrices (``f64x8`` lanes); lanes where ``go`` is 0.0 or
    ``apq == 0`` come back unchanged."""
    zero = V.vsplat(0.0)
    one = V.vsplat(1.0)
    go = V.vmul(go, V.vsub(one, V.veq(apq, zero)))
    theta = V.vdiv(V.vsub(aqq, app), V.vmul(V.vsplat(2.0), apq))
    sign = V.vwhere(V.vge(theta, zero), one, V.vsplat(-1.0))
    t = V.vdiv(sign, V.vadd(V.vabs(theta), V.vsqrt(V.vadd(V.vmul(theta, theta), one))))
    c = V.vdiv(one, V.vsqrt(V.vadd(V.vmul(t, t), one)))
    s = V.vmul(t, c)
    # Columns p and q.
    app1 = V.vsub(V.vmul(c, app), V.vmul(s, apq))
    apq1 = V.vadd(V.vmul(s, app), V.vmul(c, apq))
    aqp1 = V.vsub(V.vmul(c, aqp), V.vmul(s, aqq))
    aqq1 = V.vadd(V.vmul(s, aqp), V.vmul(c, aqq))
    arp1 = V.vsub(V.vmul(c, arp), V.vmul(s, arq))
    arq1 = V.vadd(V.vmul(s, arp), V.vmul(c, arq))
    # Then rows p and q.
    return (V.vwhere(go, V.vsub(V.vmul(c, app1), V.vmul(s, aqp1)), app),
            V.vwhere(go, V.vsub(V.vmul(c, apq1), V.vmul(s, aqq1)), apq),
            V.vwhere(go, V.vsub(V.vmul(c, apr), V.vmul(s, aqr)), apr),
            V.vwhere(go, V.vadd(V.vmul(s, app1), V.vmul(c, aqp1)), aqp),
            V.vwhere(go, V.vadd(V.vmul(s, apq1), V.vmul(c, aqq1)), aqq),
            V.vwhere(go, V.vadd(V.vmul(s, apr), V.vmul(c, aqr)), aqr),
            V.vwhere(go, arp1, arp), V.vwhere(go, arq1, arq),
            V.vwhere(go, V.vsub(V.vmul(c, vp0), V.vmul(s, vq0)), vp0),
            V.vwhere(go, V.vsub(V.vmul(c, vp1), V.vmul(s, vq1)), vp1),
            V.vwhere(go, V.vsub(V.vmul(c, vp2), V.vmul(s, vq2)), vp2),
            V.vwhere(go, V.vadd(V.vmul(s, vp0), V.vmul(c, vq0)), vq0),
            V.vwhere(go, V.vadd(V.vmul(s, vp1), V.vmul(c, vq1)), vq1),
            V.vwhere(go, V.vadd(V.vmul(s, vp2), V.vmul(c, vq2)), vq2))


@numba.njit(inline="always", **KERNEL)
def _sym_eig3x8(live, a00, a01, a02, a10, a11, a12, a20, a21, a22):
    """:func:`_sym_eig3` on eight matrices (``f64x8`` lanes); lanes where ``live`` is 0.0 are
    not rotated (their results are the identity's)."""
    zero = V.vsplat(0.0)
    one = V.vsplat(1.0)
    v00, v01, v02 = one, zero, zero
    v10, v11, v12 = zero, one, zero
    v20, v21, v22 = zero, zero, one
    tiny = V.vsplat(1e-36)
    for _ in range(_JACOBI_SWEEPS):
        off = V.vadd(V.vadd(V.vmul(a01, a01), V.vmul(a02, a02)), V.vmul(a12, a12))
        diag = V.vadd(V.vadd(V.vmul(a00, a00), V.vmul(a11, a11)), V.vmul(a22, a22))
        live = V.vmul(live, V.vsub(one, V.vle(off, V.vmul(tiny, diag))))  # converged lanes stop for good
        if not V.vany_nonzero(live):
            break
        a00, a01, a02, a10, a11, a12, a20, a21, v00, v10, v20, v01, v11, v21 = _rotate8(
            live, a00, a01, a02, a10, a11, a12, a20, a21, a22, v00, v10, v20, v01, v11, v21)
        a00, a02, a01, a20, a22, a21, a10, a12, v00, v10, v20, v02, v12, v22 = _rotate8(
            live, a00, a02, a01, a20, a22, a21, a10, a12, a11, v00, v10, v20, v02, v12, v22)
        a11, a12, a10, a21, a22, a20, a01, a02, v01, v11, v21, v02, v12, v22 = _rotate8(
            live, a11, a12, a10, a21, a22, a20, a01, a02, a00, v01, v11, v21, v02, v12, v22)
    return a00, a11, a22, v00, v01, v02, v10, v11, v12, v20, v21, v22


LANE_ROWS = 22
"""Rows of the ``(LANE_ROWS, 8)`` float64 scratch :func:`_relax_listed` takes."""


@numba.njit(**KERNEL)
def _relax_listed(f, idx, m, elongation, lanes):
    """Relax ``f[idx[k]]`` for ``k < m`` at ``elongation[idx[k]]`` (then rescale the
    determinant where one changed), eight at a time: the bits of :func:`_relax`
    and :func:`_unit_det` puff by puff.

    ``idx`` (>= m,) int64; ``lanes`` (:data:`LANE_ROWS`, 8) float64 scratch:
    rows 0-8 ``F^T F``, 9 the live lanes, 10-21 the eigen decomposition.
    """
    for k0 in range(0, m, 8):
        count = min(8, m - k0)
        for j in range(8):
            # A spare lane holds the identity, converged at once.
            c = _gram(f, idx[k0 + j]) if j < count else (1.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0)
            for r in range(9):
                lanes[r, j] = c[r]
            lanes[9, j] = 1.0 if j < count else 0.0
        eig = _sym_eig3x8(V.vload(lanes[9], 0), V.vload(lanes[0], 0), V.vload(lanes[1], 0), V.vload(lanes[2], 0),
                          V.vload(lanes[3], 0), V.vload(lanes[4], 0), V.vload(lanes[5], 0), V.vload(lanes[6], 0),
                          V.vload(lanes[7], 0), V.vload(lanes[8], 0))
        for r in range(12):
            V.vstore(lanes[10 + r], 0, eig[r])
        for j in range(count):
            i = idx[k0 + j]
            if _relax_with(f, i, elongation[i], lanes[10, j], lanes[11, j], lanes[12, j], lanes[13, j], lanes[14, j],
                           lanes[15, j], lanes[16, j], lanes[17, j], lanes[18, j], lanes[19, j], lanes[20, j],
                           lanes[21, j]):
                _unit_det(f, i)


@numba.njit(inline="always", **KERNEL)
def _gram(f, i):
    """The entries of ``C = F^T F`` of ``f[i]``, row by row (``c00, c01, ..., c22``)."""
    c00 = f[i, 0, 0] * f[i, 0, 0] + f[i, 1, 0] * f[i, 1, 0] + f[i, 2, 0] * f[i, 2, 0]
    c01 = f[i, 0, 0] * f[i, 0, 1] + f[i, 1, 0] * f[i, 1, 1] + f[i, 2, 0] * f[i, 2, 1]
    c02 = f[i, 0, 0] * f[i, 0, 2] + f[i, 1, 0] * f[i, 1, 2] + f[i, 2, 0] * f[i, 2, 2]
    c10 = f[i, 0, 1] * f[i, 0, 0] + f[i, 1, 1] * f[i, 1, 0] + f[i, 2, 1] * f[i, 2, 0]
    c11 = f[i, 0, 1] * f[i, 0, 1] + f[i, 1, 1] * f[i, 1, 1] + f[i, 2, 1] * f[i, 2, 1]
    c12 = f[i, 0, 1] * f[i, 0, 2] + f[i, 1, 1] * f[i, 1, 2] + f[i, 2, 1] * f[i, 2, 2]
    c20 = f[i, 0, 2] * f[i, 0, 0] + f[i, 1, 2] * f[i, 1, 0] + f[i, 2, 2] * f[i, 2, 0]
    c21 = f[i, 0, 2] * f[i, 0, 1] + f[i, 1, 2] * f[i, 1, 1] + f[i, 2, 2] * f[i, 2, 1]
    c22 = f[i, 0, 2] * f[i, 0, 2] + f[i, 1, 2] * f[i, 1, 2] + f[i, 2, 2] * f[i, 2, 2]
    return c00, c01, c02, c10, c11, c12, c20, c21, c22


@numba.njit(**KERNEL)
def _relax(f, i, elongation):
    """Bound the stretch ratio of ``f[i]`` ((3, 3), det 1) at ``elongation``.

    Returns True when ``f[i]`` changed.
    """
    c00, c01, c02, c10, c11, c12, c20, c21, c22 = _gram(f, i)
    # F^T F = V diag(s^2) V^T
    e0, e1, e2, v00, v01, v02, v10, v11, v12, v20, v21, v22 = _sym_eig3(c00, c01, c02, c10, c11, c12, c20, c21,
                                                                        c22)
    return _relax_with(f, i, elongation, e0, e1, e2, v00, v01, v02, v10, v11, v12, v20, v21, v22)


@numba.njit(inline="always", **KERNEL)
def _relax_with(f, i, elongation, e0, e1, e2, v00, v01, v02, v10, v11, v12, v20, v21, v22):
    """:func:`_relax` given the eigenvalues ``e`` and eigenvector matrix ``v`` of ``F^T F``."""
    l0 = 0.5 * math.log(max(e0, 1e-300))
    l1 = 0.5 * math.log(max(e1, 1e-300))
    l2 = 0.5 * math.log(max(e2, 1e-300))
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
    u00 = v00 * g0 * v00 + v01 * g1 * v01 + v02 * g2 * v02
    u01 = v00 * g0 * v10 + v01 * g1 * v11 + v02 * g2 * v12
    u02 = v00 * g0 * v20 + v01 * g1 * v21 + v02 * g2 * v22
    u10 = v10 * g0 * v00 + v11 * g1 * v01 + v12 * g2 * v02
    u11 = v10 * g0 * v10 + v11 * g1 * v11 + v12 * g2 * v12
    u12 = v10 * g0 * v20 + v11 * g1 * v21 + v12 * g2 * v22
    u20 = v20 * g0 * v00 + v21 * g1 * v01 + v22 * g2 * v02
    u21 = v20 * g0 * v10 + v21 * g1 * v11 + v22 * g2 * v12
    u22 = v20 * g0 * v20 + v21 * g1 * v21 + v22 * g2 * v22
    for r in range(3):
        x0 = f[i, r, 0]
        x1 = f[i, r, 1]
        x2 = f[i, r, 2]
        f[i, r, 0] = x0 * u00 + x1 * u10 + x2 * u20
        f[i, r, 1] = x0 * u01 + x1 * u11 + x2 * u21
        f[i, r, 2] = x0 * u02 + x1 * u12 + x2 * u22
    return True


@numba.njit(inline="always", **KERNEL)
def _det3(f, i):
    return (f[i, 0, 0] * (f[i, 1, 1] * f[i, 2, 2] - f[i, 1, 2] * f[i, 2, 1])
            - f[i, 0, 1] * (f[i, 1, 0] * f[i, 2, 2] - f[i, 1, 2] * f[i, 2, 0])
            + f[i, 0, 2] * (f[i, 1, 0] * f[i, 2, 1] - f[i, 1, 1] * f[i, 2, 0]))


@numba.njit(inline="always", **KERNEL)
def _may_exceed(f, i, nrm2, elongation):
    """False only when the stretch ratio of ``f[i]`` is surely below ``elongation``, so
    :func:`_relax` would leave it as it is; ``nrm2`` is ``||F||_F^2``.

    With ``C = F^T F`` (eigenvalues ``l1 >= l2 >= l3``), ``l1 <= tr C = ||F||_F^2``
    and ``1 / l3 <= tr C^-1 = ||cof F||_F^2 / det(F)^2``, so
    ``ratio^2 = l1 / l3 <= ||F||_F^2 ||cof F||_F^2 / det(F)^2``: within a factor
    of about 1 of the ratio for a long puff, where ``||F||_F^3`` is a factor of
    the ratio too large.  The margin of 1e-9 is far above the round-off of
    either side (about 1e-14 relative), so the decision never differs from the
    eigenvalues' own test in :func:`_relax`.

    That bound is still loose by up to ``(1 + 2 / ratio^2)`` for a puff near
    the limit (a third of the chimney demo's puffs sit between 7 and 8 of an
    elongation of 8), so a puff it passes gets a tight one:
    :func:`_ratio_bound`, from the same invariants.
    """
    cof2 = 0.0
    for r in range(3):
        r1 = (r + 1) % 3
        r2 = (r + 2) % 3
        for q in range(3):
            q1 = (q + 1) % 3
            q2 = (q + 2) % 3
            m = f[i, r1, q1] * f[i, r2, q2] - f[i, r1, q2] * f[i, r2, q1]
            cof2 += m * m
    d = _det3(f, i)
    limit = elongation * elongation * (d * d)
    if nrm2 * cof2 < (1.0 - 1e-9) * limit:
        return False
    return not _ratio_bound(nrm2, cof2, d * d) < (1.0 - 1e-6) * limit


_NEWTON_STEPS = 6
"""Newton steps from each side in :func:`_ratio_bound` (quadratic convergence: a puff 1e-3 inside
the limit is told apart in three or four)."""


@numba.njit(inline="always", **KERNEL)
def _ratio_bound(i1, i2, i3):
    """An upper bound of ``l1 / l3 * i3`` for the symmetric positive definite ``C`` with
    invariants ``i1 = tr C``, ``i2`` (sum of its principal 2 x 2 minors) and ``i3 = det C``.

    ``l1 >= l2 >= l3 > 0`` are the roots of ``p(x) = x^3 - i1 x^2 + i2 x - i3``.
    ``p`` is convex right of its inflection ``i1 / 3`` and concave left of
    it, and ``l3 <= i1 / 3 <= l1``; so Newton's method from ``x = i1``
    (``>= l1``) falls towards ``l1`` and stays above it, and from ``x = 0``
    (``p(0) = -i3 < 0``) rises towards ``l3`` and stays below it (the
    monotone convergence of Newton's method on a convex function; any
    numerical analysis text).  Then ``l1 / l3 <= upper / lower``; it is
    returned times ``i3`` so the caller compares it with ``elongation^2
    det(F)^2`` without a division.  Near a double root Newton slows down and
    the bound stays loose, never wrong: the caller then does the eigen
    work.  Round-off moves either side by about 1e-15 relative (1e-8 at a
    double root), far below the caller's margin of 1e-6.
    """
    hi = i1
    lo = 0.0
    for _ in range(_NEWTON_STEPS):
        ph = ((hi - i1) * hi + i2) * hi - i3
        dh = (3.0 * hi - 2.0 * i1) * hi + i2
        if ph > 0.0 and dh > 0.0:
            hi -= ph / dh
        pl = ((lo - i1) * lo + i2) * lo - i3
        dl = (3.0 * lo - 2.0 * i1) * lo + i2
        if pl < 0.0 and dl > 0.0:
            lo -= pl / dl
    if not lo > 0.0:
        return math.inf
    return hi / lo * i3


@numba.njit(**KERNEL)
def _shape_step(f, i, g00, g01, g02, g10, g11, g12, g20, g21, g22, h, follow, elongation):
    """One Cayley step of ``f[i]`` ((3, 3) float64) with ``A = follow * G``, then the
    determinant rescale; True when the stretch may now exceed ``elongation`` (the
    caller then relaxes the puff: :func:`_relax`, or :func:`_relax_listed` for many)."""
    if follow == 0.0:
        return False  # rigid puffs: F stays exactly the identity
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
    return nrm2 * nrm2 * nrm2 > elongation * elongation and _may_exceed(f, i, nrm2, elongation)


@numba.njit(**KERNEL)
def _advance_one(f, i, g00, g01, g02, g10, g11, g12, g20, g21, g22, h, follow, elongation):
    """:func:`_shape_step`, then the relax and the determinant rescale if needed, for one puff
    (the reference the batched step is checked against)."""
    if _shape_step(f, i, g00, g01, g02, g10, g11, g12, g20, g21, g22, h, follow, elongation):
        if _relax(f, i, elongation):
            _unit_det(f, i)


@numba.njit(inline="always", **KERNEL)
def _unit_det(f, i):
    d = _det3(f, i)
    if d > 0.0:
        s = 1.0 / np.cbrt(d)
        for r in range(3):
            for q in range(3):
                f[i, r, q] *= s


_BLOCK = 64  # puffs stepped before their relaxes run eight at a time (any size gives the same bits)


@numba.njit(**PARALLEL)
def _advance(f, grad, h, follow, elongation):
    nblocks = (f.shape[0] + _BLOCK - 1) // _BLOCK
    for blk in numba.prange(nblocks):
        todo = np.empty(_BLOCK, dtype=np.int64)
        lanes = np.empty((LANE_ROWS, 8))
        m = 0
        for i in range(blk * _BLOCK, min(f.shape[0], (blk + 1) * _BLOCK)):
            if _shape_step(f, i, grad[i, 0, 0], grad[i, 0, 1], grad[i, 0, 2], grad[i, 1, 0], grad[i, 1, 1],
                           grad[i, 1, 2], grad[i, 2, 0], grad[i, 2, 1], grad[i, 2, 2], h, follow[i], elongation[i]):
                todo[m] = i
                m += 1
        _relax_listed(f, todo, m, elongation, lanes)


@numba.njit(**PARALLEL)
def _relax_all(f, elongation, changed):
    for i in numba.prange(f.shape[0]):
        changed[i] = _relax(f, i, elongation[i])
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
    """Largest singular value of each ``F`` ((N, 3, 3)): (N,) float64, exactly 1.0 where ``F = I``.

    Taken as the root of ``F^T F``'s largest eigenvalue: the singular value to
    round-off, in half the time of an SVD (no singular vectors); the camera fit
    takes it for every sampled puff of every frame.
    """
    deform = np.asarray(deform, dtype=np.float64)
    out = np.ones(deform.shape[0])
    moved = np.any(deform.reshape(-1, 9) != np.eye(3).reshape(9), axis=1)
    if moved.any():
        f = deform[moved]
        gram = np.einsum("nji,njk->nik", f, f)
        out[moved] = np.sqrt(np.maximum(np.linalg.eigvalsh(gram)[:, -1], 0.0))
    return out
