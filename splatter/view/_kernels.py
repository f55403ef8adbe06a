"""Private numba kernels behind :mod:`splatter.view.camera`.

One family, three entry points, all ``prange`` over puffs where puff ``i``
writes only row ``i`` of each output (so results do not depend on the thread
count):

* ``_puff_covariances``: world covariance of each puff (rotation, per-axis
  sigmas, the flow's deformation ``F``, motion stretch);
* ``_project``: camera frame, EWA projection (or the orthographic scale), low
  pass and visibility, from given world covariances;
* ``_project_puffs``: both in one pass, the 3x3 covariance kept in registers.

Beside them, for :mod:`splatter.view.splats`: ``_gather_splats`` picks the
kept puffs' screen values in draw order and their lit colours in one pass,
and ``_radix_order`` is the stable sort that gives the draw order.

The arithmetic mirrors the numpy formulas in :mod:`splatter.view.camera` term by
term, so values agree with them to float64 round-off. Helpers are defined in
this module (numba's cache does not see edits to inlined helpers elsewhere).
"""

from __future__ import annotations

import math

import numba
import numpy as np

from splatter.core.jit import KERNEL, PARALLEL


@numba.njit(inline="always", **KERNEL)
def _cov_one(i, size, aspect, quat, vel, stretch, deform):
    """(c00, c01, c02, c11, c12, c22): F R diag(s^2, (s a)^2, (s a)^2) R^T F^T + L L^T / 12.

    ``deform`` (N, 3, 3) or (0, 3, 3) (no shapes); an identity ``F`` is
    skipped, so rigid puffs get exactly the arithmetic of the rigid formula.
    """
    qw = quat[i, 0]
    qx = quat[i, 1]
    qy = quat[i, 2]
    qz = quat[i, 3]
    norm = math.sqrt(qw * qw + qx * qx + qy * qy + qz * qz)
    w = qw / norm
    x = qx / norm
    y = qy / norm
    z = qz / norm
    r00 = 1 - 2 * (y * y + z * z)
    r01 = 2 * (x * y - w * z)
    r02 = 2 * (x * z + w * y)
    r10 = 2 * (x * y + w * z)
    r11 = 1 - 2 * (x * x + z * z)
    r12 = 2 * (y * z - w * x)
    r20 = 2 * (x * z - w * y)
    r21 = 2 * (y * z + w * x)
    r22 = 1 - 2 * (x * x + y * y)
    s = size[i]
    sa = s * aspect[i]
    v0 = s * s
    v1 = sa * sa
    l0 = stretch[i] * vel[i, 0]
    l1 = stretch[i] * vel[i, 1]
    l2 = stretch[i] * vel[i, 2]
    s00 = r00 * v0 * r00 + r01 * v1 * r01 + r02 * v1 * r02
    s01 = r00 * v0 * r10 + r01 * v1 * r11 + r02 * v1 * r12
    s02 = r00 * v0 * r20 + r01 * v1 * r21 + r02 * v1 * r22
    s11 = r10 * v0 * r10 + r11 * v1 * r11 + r12 * v1 * r12
    s12 = r10 * v0 * r20 + r11 * v1 * r21 + r12 * v1 * r22
    s22 = r20 * v0 * r20 + r21 * v1 * r21 + r22 * v1 * r22
    if deform.shape[0] > 0:
        f00 = deform[i, 0, 0]
        f01 = deform[i, 0, 1]
        f02 = deform[i, 0, 2]
        f10 = deform[i, 1, 0]
        f11 = deform[i, 1, 1]
        f12 = deform[i, 1, 2]
        f20 = deform[i, 2, 0]
        f21 = deform[i, 2, 1]
        f22 = deform[i, 2, 2]
        ident = (f00 == 1.0 and f11 == 1.0 and f22 == 1.0 and f01 == 0.0 and f02 == 0.0 and f10 == 0.0
                 and f12 == 0.0 and f20 == 0.0 and f21 == 0.0)
        if not ident:
            # T = F S0, then F S0 F^T (symmetric: six entries).
            t00 = f00 * s00 + f01 * s01 + f02 * s02
            t01 = f00 * s01 + f01 * s11 + f02 * s12
            t02 = f00 * s02 + f01 * s12 + f02 * s22
            t10 = f10 * s00 + f11 * s01 + f12 * s02
            t11 = f10 * s01 + f11 * s11 + f12 * s12
            t12 = f10 * s02 + f11 * s12 + f12 * s22
            t20 = f20 * s00 + f21 * s01 + f22 * s02
            t21 = f20 * s01 + f21 * s11 + f22 * s12
            t22 = f20 * s02 + f21 * s12 + f22 * s22
            s00 = t00 * f00 + t01 * f01 + t02 * f02
            s01 = t00 * f10 + t01 * f11 + t02 * f12
            s02 = t00 * f20 + t01 * f21 + t02 * f22
            s11 = t10 * f10 + t11 * f11 + t12 * f12
            s12 = t10 * f20 + t11 * f21 + t12 * f22
            s22 = t20 * f20 + t21 * f21 + t22 * f22
    # The motion smear is added after the shape: it is the puff's travel during the exposure.
    c00 = s00 + l0 * l0 / 12.0
    c01 = s01 + l0 * l1 / 12.0
    c02 = s02 + l0 * l2 / 12.0
    c11 = s11 + l1 * l1 / 12.0
    c12 = s12 + l1 * l2 / 12.0
    c22 = s22 + l2 * l2 / 12.0
    return c00, c01, c02, c11, c12, c22


@numba.njit(inline="always", **KERNEL)
def _project_one(i, pos, c00, c01, c02, c10, c11, c12, c20, c21, c22, rot, eye, ortho,
                 scale, width, height, near, low_pass, means, covs, depth, visible):
    """Project puff ``i`` (world covariance ``c``) into row ``i`` of the outputs.

    rot : (3, 3) float64, rows = camera-frame axes (x right, y down, z forward).
    scale : pixels per world unit (orthographic) or focal length in pixels.
    """
    p0 = pos[i, 0] - eye[0]
    p1 = pos[i, 1] - eye[1]
    p2 = pos[i, 2] - eye[2]
    t0 = p0 * rot[0, 0] + p1 * rot[0, 1] + p2 * rot[0, 2]
    t1 = p0 * rot[1, 0] + p1 * rot[1, 1] + p2 * rot[1, 2]
    t2 = p0 * rot[2, 0] + p1 * rot[2, 1] + p2 * rot[2, 2]
    front = t2 > near
    # m = rot c, then cc = m rot^T (the camera-frame covariance).
    m00 = rot[0, 0] * c00 + rot[0, 1] * c10 + rot[0, 2] * c20
    m01 = rot[0, 0] * c01 + rot[0, 1] * c11 + rot[0, 2] * c21
    m02 = rot[0, 0] * c02 + rot[0, 1] * c12 + rot[0, 2] * c22
    m10 = rot[1, 0] * c00 + rot[1, 1] * c10 + rot[1, 2] * c20
    m11 = rot[1, 0] * c01 + rot[1, 1] * c11 + rot[1, 2] * c21
    m12 = rot[1, 0] * c02 + rot[1, 1] * c12 + rot[1, 2] * c22
    m20 = rot[2, 0] * c00 + rot[2, 1] * c10 + rot[2, 2] * c20
    m21 = rot[2, 0] * c01 + rot[2, 1] * c11 + rot[2, 2] * c21
    m22 = rot[2, 0] * c02 + rot[2, 1] * c12 + rot[2, 2] * c22
    cc00 = m00 * rot[0, 0] + m01 * rot[0, 1] + m02 * rot[0, 2]
    cc01 = m00 * rot[1, 0] + m01 * rot[1, 1] + m02 * rot[1, 2]
    cc02 = m00 * rot[2, 0] + m01 * rot[2, 1] + m02 * rot[2, 2]
    cc10 = m10 * rot[0, 0] + m11 * rot[0, 1] + m12 * rot[0, 2]
    cc11 = m10 * rot[1, 0] + m11 * rot[1, 1] + m12 * rot[1, 2]
    cc12 = m10 * rot[2, 0] + m11 * rot[2, 1] + m12 * rot[2, 2]
    cc20 = m20 * rot[0, 0] + m21 * rot[0, 1] + m22 * rot[0, 2]
    cc21 = m20 * rot[1, 0] + m21 * rot[1, 1] + m22 * rot[1, 2]
    cc22 = m20 * rot[2, 0] + m21 * rot[2, 1] + m22 * rot[2, 2]
    if ortho:
        mx = 0.5 * width + scale * t0
        my = 0.5 * height + scale * t1
        k2 = scale * scale
        sxx = k2 * cc00
        sxy = k2 * cc01
        syx = k2 * cc10
        syy = k2 * cc11
    elif front:
        mx = 0.5 * width + scale * t0 / t2
        my = 0.5 * height + scale * t1 / t2
        # J = [[f/tz, 0, -f tx/tz^2], [0, f/tz, -f ty/tz^2]]; S2 = J cc J^T.
        j00 = scale / t2
        j02 = -scale * t0 / t2**2
        j11 = scale / t2
        j12 = -scale * t1 / t2**2
        a0 = j00 * cc00 + j02 * cc20
        a1 = j00 * cc01 + j02 * cc21
        a2 = j00 * cc02 + j02 * cc22
        b0 = j11 * cc10 + j12 * cc20
        b1 = j11 * cc11 + j12 * cc21
        b2 = j11 * cc12 + j12 * cc22
        sxx = a0 * j00 + a2 * j02
        sxy = a1 * j11 + a2 * j12
        syx = b0 * j00 + b2 * j02
        syy = b1 * j11 + b2 * j12
    else:
        # Finite placeholder: a unit covariance on the axis, as the numpy path.
        mx = 0.0
        my = 0.0
        sxx = scale * scale
        sxy = 0.0
        syx = 0.0
        syy = scale * scale
    sxx += low_pass
    syy += low_pass
    # A footprint over 700 times longer than wide (a puff of size 1e4 and aspect 1e-6) stored as
    # float32 can round to a determinant <= 0; keeping the correlation within 1 - 1e-6 (the
    # short axis at least 1/700 of the long) leaves it positive after rounding.
    lim = (1.0 - 1e-6) * math.sqrt(sxx * syy)
    if abs(sxy) > lim:
        sxy = math.copysign(lim, sxy)
    if abs(syx) > lim:
        syx = math.copysign(lim, syx)
    rx = 3.0 * math.sqrt(sxx)
    ry = 3.0 * math.sqrt(syy)
    on = (mx + rx > 0) & (mx - rx < width) & (my + ry > 0) & (my - ry < height)
    finite = (math.isfinite(sxx) & math.isfinite(sxy) & math.isfinite(syx)
              & math.isfinite(syy))
    means[i, 0] = np.float32(mx)
    means[i, 1] = np.float32(my)
    covs[i, 0, 0] = np.float32(sxx)
    covs[i, 0, 1] = np.float32(sxy)
    covs[i, 1, 0] = np.float32(syx)
    covs[i, 1, 1] = np.float32(syy)
    depth[i] = np.float32(t2)
    visible[i] = front & on & finite


@numba.njit(**PARALLEL)
def _puff_covariances(size, aspect, quat, vel, stretch, deform, out):
    """out (N, 3, 3) float64: world covariance of each puff."""
    for i in numba.prange(size.shape[0]):
        c00, c01, c02, c11, c12, c22 = _cov_one(i, size, aspect, quat, vel, stretch, deform)
        out[i, 0, 0] = c00
        out[i, 0, 1] = c01
        out[i, 0, 2] = c02
        out[i, 1, 0] = c01
        out[i, 1, 1] = c11
        out[i, 1, 2] = c12
        out[i, 2, 0] = c02
        out[i, 2, 1] = c12
        out[i, 2, 2] = c22


@numba.njit(**PARALLEL)
def _project(pos, cov, rot, eye, ortho, scale, width, height, near, low_pass,
             means, covs, depth, visible):
    """Project puffs with given world covariances (N, 3, 3) float64."""
    for i in numba.prange(pos.shape[0]):
        _project_one(i, pos, cov[i, 0, 0], cov[i, 0, 1], cov[i, 0, 2],
                     cov[i, 1, 0], cov[i, 1, 1], cov[i, 1, 2],
                     cov[i, 2, 0], cov[i, 2, 1], cov[i, 2, 2], rot, eye, ortho, scale,
                     width, height, near, low_pass, means, covs, depth, visible)


@numba.njit(**PARALLEL)
def _project_puffs(pos, size, aspect, quat, vel, stretch, deform, rot, eye, ortho, scale, width,
                   height, near, low_pass, means, covs, depth, visible):
    """Puff covariance and projection in one pass per puff."""
    for i in numba.prange(pos.shape[0]):
        c00, c01, c02, c11, c12, c22 = _cov_one(i, size, aspect, quat, vel, stretch, deform)
        _project_one(i, pos, c00, c01, c02, c01, c11, c12, c02, c12, c22, rot, eye, ortho,
                     scale, width, height, near, low_pass, means, covs, depth, visible)


@numba.njit(inline="always", **KERNEL)
def _across_det(c00, c01, c02, c11, c12, c22, right, up):
    """det of ``P C P^T`` for the symmetric 3 x 3 ``C`` and ``P`` = rows ``right``, ``up``."""
    r0, r1, r2 = right[0], right[1], right[2]
    u0, u1, u2 = up[0], up[1], up[2]
    cr0 = c00 * r0 + c01 * r1 + c02 * r2
    cr1 = c01 * r0 + c11 * r1 + c12 * r2
    cr2 = c02 * r0 + c12 * r1 + c22 * r2
    cu0 = c00 * u0 + c01 * u1 + c02 * u2
    cu1 = c01 * u0 + c11 * u1 + c12 * u2
    cu2 = c02 * u0 + c12 * u1 + c22 * u2
    m00 = r0 * cr0 + r1 * cr1 + r2 * cr2
    m01 = r0 * cu0 + r1 * cu1 + r2 * cu2
    m11 = u0 * cu0 + u1 * cu1 + u2 * cu2
    return m00 * m11 - m01 * m01


@numba.njit(**PARALLEL)
def _footprint_ratio(size, aspect, quat, vel, stretch, deform, right, up, out):
    """out (N,): ``sqrt(det S2_rigid / det S2_deformed)`` across the plane (right, up); ``vel``
    and ``stretch`` are zeros (no motion smear) and ``deform`` (N, 3, 3)."""
    rigid = deform[:0]
    for i in numba.prange(size.shape[0]):
        c00, c01, c02, c11, c12, c22 = _cov_one(i, size, aspect, quat, vel, stretch, rigid)
        d_rigid = _across_det(c00, c01, c02, c11, c12, c22, right, up)
        c00, c01, c02, c11, c12, c22 = _cov_one(i, size, aspect, quat, vel, stretch, deform)
        d_deformed = _across_det(c00, c01, c02, c11, c12, c22, right, up)
        out[i] = math.sqrt(d_rigid / max(d_deformed, 1e-300))


@numba.njit(**PARALLEL)
def _gather_splats(idx, means, covs, depth, opac, color, light, glow, out_means, out_covs, out_depth, out_opac,
                   feats):
    """Row ``j`` of each output from puff ``idx[j]``: means, covariances, depth, opacity and
    ``r, g, b = colour * light + glow`` (``colour + glow`` when ``light`` has no rows) into
    ``feats[:, 0:3]``.

    The arithmetic is numpy's for the same formula (a float64 product, then the sum, rounded
    once to float32), so the values are the same bits as gathering with fancy indexing.
    """
    lit = light.shape[0] > 0
    for j in numba.prange(idx.shape[0]):
        i = idx[j]
        out_means[j, 0] = means[i, 0]
        out_means[j, 1] = means[i, 1]
        out_covs[j, 0, 0] = covs[i, 0, 0]
        out_covs[j, 0, 1] = covs[i, 0, 1]
        out_covs[j, 1, 0] = covs[i, 1, 0]
        out_covs[j, 1, 1] = covs[i, 1, 1]
        out_depth[j] = depth[i]
        out_opac[j] = np.float32(opac[i])
        for c in range(3):
            col = color[i, c] * light[i, c] if lit else color[i, c]
            feats[j, c] = np.float32(col + glow[i, c])


@numba.njit(**KERNEL)
def _radix_order(keys):
    """The stable ascending order of ``keys`` ((N,) uint32): ``np.argsort(keys, kind="stable")``.

    Least-significant-digit radix sort, four passes of 8 bits; each pass is a
    stable counting sort, so equal keys keep their input order (Knuth, *The Art
    of Computer Programming* vol. 3, 5.2.5, from memory).  (N,) int64.
    """
    n = keys.shape[0]
    order = np.arange(n)
    other = np.empty(n, dtype=np.int64)
    count = np.empty(257, dtype=np.int64)
    for shift in range(0, 32, 8):
        count[:] = 0
        for i in range(n):
            count[((keys[i] >> shift) & 255) + 1] += 1
        if count[1 + ((keys[0] >> shift) & 255)] == n:
            continue  # every key has this digit: the pass would not move anything
        for d in range(256):
            count[d + 1] += count[d]
        for j in range(n):
            i = order[j]
            d = (keys[i] >> shift) & 255
            other[count[d]] = i
            count[d] += 1
        order, other = other, order
    return order
