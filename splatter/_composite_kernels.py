"""Private numba kernels behind :func:`splatter.composite.composite_features`.

Three steps, all writing into arrays they are given:

1. ``_prepare``: per splat, the float64 conic and the pixel rows, columns and
   screen tiles its Mahalanobis-radius-3 ellipse touches (serial).
2. ``_bin``: a counting sort of (tile, splat) pairs, serial, so every tile's
   list keeps the caller's back-to-front splat order.
3. ``_render``: ``prange`` over tiles; a tile accumulates its splats into a
   private planar float32 buffer ``(K+1, th, stride)`` and then writes only
   its own part of the output. No two threads touch the same output pixel and
   each pixel sees the same operations in the same order, so the image is
   bit-identical for any thread count.

Inside a tile each splat is walked row by row. The exact float64 extent of the
ellipse on the row (a conditional Gaussian: centre ``mx + Sxy/Syy dy``,
half-width ``sqrt(det/Syy (9 - dy^2/Syy))``) bounds the pixels touched; the
squared Mahalanobis distance along the row is a quadratic in the column,
evaluated in float32 and turned into a weight by ``_fastexp.gauss_weight``.
The span is padded to a multiple of 8 lanes (the buffer has spare columns)
and the padding lanes get weight exactly 0, so the vector loop needs no
scalar tail and a zero weight leaves a pixel bit-for-bit unchanged.
Loop indices are unsigned so numba emits no negative-index wraparound code.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from splatter._fastexp import gauss_weight
from splatter.jit import KERNEL, PARALLEL

MODE_OVER = 0
MODE_ADD = 1
MODE_ABSORB = 2

LANES = 8
"""Row spans are padded to a multiple of this many pixels (AVX2 float32)."""

_F0 = np.float32(0.0)
_F1 = np.float32(1.0)


@numba.njit(**KERNEL)
def _prepare(means, covs, height, width, tile, params, ranges):
    """Per-splat float64 parameters and pixel/tile ranges.

    params : (N, 8) float64 out: mx, my, Sxx, Sxy, Syy, det, a, b
        (conic ``a = Syy/det``, ``b = -Sxy/det``; ``c = Sxx/det`` is rebuilt).
    ranges : (N, 8) int64 out: row0, row1, col0, col1 (inclusive pixel
        ranges clipped to the image) and ty0, ty1, tx0, tx1 (inclusive tile
        ranges); row1 < row0 marks a splat that touches no pixel.
    """
    n = means.shape[0]
    for j in range(n):
        mx = np.float64(means[j, 0])
        my = np.float64(means[j, 1])
        sxx = np.float64(covs[j, 0, 0])
        sxy = 0.5 * (np.float64(covs[j, 0, 1]) + np.float64(covs[j, 1, 0]))
        syy = np.float64(covs[j, 1, 1])
        det = sxx * syy - sxy * sxy
        params[j, 0] = mx
        params[j, 1] = my
        params[j, 2] = sxx
        params[j, 3] = sxy
        params[j, 4] = syy
        params[j, 5] = det
        params[j, 6] = syy / det
        params[j, 7] = -sxy / det
        # Pixel centre (col + 0.5, row + 0.5) inside the bounding box of the ellipse.
        ry = 3.0 * math.sqrt(syy)
        rx = 3.0 * math.sqrt(sxx)
        r0 = max(int(np.ceil(my - ry - 0.5)), 0)
        r1 = min(int(np.floor(my + ry - 0.5)), height - 1)
        c0 = max(int(np.ceil(mx - rx - 0.5)), 0)
        c1 = min(int(np.floor(mx + rx - 0.5)), width - 1)
        if r1 < r0 or c1 < c0:
            r0 = 0
            r1 = -1
            c0 = 0
            c1 = -1
        ranges[j, 0] = r0
        ranges[j, 1] = r1
        ranges[j, 2] = c0
        ranges[j, 3] = c1
        if r1 >= r0:
            ranges[j, 4] = r0 // tile
            ranges[j, 5] = r1 // tile
            ranges[j, 6] = c0 // tile
            ranges[j, 7] = c1 // tile
        else:
            ranges[j, 4] = 0
            ranges[j, 5] = -1
            ranges[j, 6] = 0
            ranges[j, 7] = -1


@numba.njit(**KERNEL)
def _count_pairs(ranges, ntx, counts):
    """counts (ntiles + 1,) int64 out: counts[t + 1] = splats touching tile t."""
    counts[:] = 0
    for j in range(ranges.shape[0]):
        for ty in range(ranges[j, 4], ranges[j, 5] + 1):
            for tx in range(ranges[j, 6], ranges[j, 7] + 1):
                counts[ty * ntx + tx + 1] += 1
    for t in range(1, counts.shape[0]):
        counts[t] += counts[t - 1]


@numba.njit(**KERNEL)
def _bin(ranges, ntx, offsets, fill, order):
    """Counting sort: order[offsets[t]:offsets[t+1]] = splats of tile t, in input order.

    fill : (ntiles,) int64 scratch.
    """
    for t in range(fill.shape[0]):
        fill[t] = offsets[t]
    for j in range(ranges.shape[0]):
        for ty in range(ranges[j, 4], ranges[j, 5] + 1):
            for tx in range(ranges[j, 6], ranges[j, 7] + 1):
                t = ty * ntx + tx
                order[fill[t]] = j
                fill[t] += 1


@numba.njit(inline="always", **KERNEL)
def _row_weights(wrow, ramp, n8, nf, a2, b1, c0, peak):
    """wrow[i] = peak * exp(-d2(i)/2) for i < nf, exactly 0 for nf <= i < n8."""
    for i in range(n8):
        u = ramp[i]
        d2 = (a2 * u + b1) * u + c0
        g = peak * gauss_weight(d2)
        wrow[i] = g if u < nf else _F0


@numba.njit(inline="always", **KERNEL)
def _row_over3(buf, off, ramp, n8, nf, a2, b1, c0, peak, f0, f1, f2):
    """Premultiplied over of one K=3 splat row onto planes 0..3 of ``buf``."""
    p0 = buf[0]
    p1 = buf[1]
    p2 = buf[2]
    p3 = buf[3]
    for i in range(n8):
        u = ramp[i]
        d2 = (a2 * u + b1) * u + c0
        g = peak * gauss_weight(d2)
        w = g if u < nf else _F0
        om = _F1 - w
        q = off + i
        p0[q] = p0[q] * om + f0 * w
        p1[q] = p1[q] * om + f1 * w
        p2[q] = p2[q] * om + f2 * w
        p3[q] = p3[q] * om + w


@numba.njit(inline="always", **KERNEL)
def _row_sum3(buf, off, ramp, n8, nf, a2, b1, c0, peak, f0, f1, f2, mode):
    """K=3 add (alpha plane holds transmittance) or absorb (alpha plane holds tau)."""
    p0 = buf[0]
    p1 = buf[1]
    p2 = buf[2]
    p3 = buf[3]
    if mode == MODE_ADD:
        for i in range(n8):
            u = ramp[i]
            d2 = (a2 * u + b1) * u + c0
            g = peak * gauss_weight(d2)
            w = g if u < nf else _F0
            q = off + i
            p0[q] = p0[q] + f0 * w
            p1[q] = p1[q] + f1 * w
            p2[q] = p2[q] + f2 * w
            p3[q] = p3[q] * (_F1 - w)
    else:
        for i in range(n8):
            u = ramp[i]
            d2 = (a2 * u + b1) * u + c0
            g = peak * gauss_weight(d2)
            w = g if u < nf else _F0
            q = off + i
            p0[q] = p0[q] + f0 * w
            p1[q] = p1[q] + f1 * w
            p2[q] = p2[q] + f2 * w
            p3[q] = p3[q] + w


@numba.njit(inline="always", **KERNEL)
def _row_generic(buf, off, wrow, n8, feat, mode):
    """Apply one row of weights ``wrow[:n8]`` to every plane of ``buf`` (any K)."""
    k_alpha = buf.shape[0] - 1
    for k in range(k_alpha):
        plane = buf[k]
        fk = feat[k]
        if mode == MODE_OVER:
            for i in range(n8):
                q = off + i
                w = wrow[i]
                plane[q] = plane[q] * (_F1 - w) + fk * w
        else:
            for i in range(n8):
                q = off + i
                plane[q] = plane[q] + fk * wrow[i]
    plane = buf[k_alpha]
    if mode == MODE_OVER:
        for i in range(n8):
            q = off + i
            w = wrow[i]
            plane[q] = plane[q] * (_F1 - w) + w
    elif mode == MODE_ADD:
        for i in range(n8):
            q = off + i
            plane[q] = plane[q] * (_F1 - wrow[i])
    else:
        for i in range(n8):
            q = off + i
            plane[q] = plane[q] + wrow[i]


@numba.njit(**KERNEL)
def _render_tile(t, ntx, tile, height, width, params, ranges, feats, peaks,
                 mode, offsets, order, ramp, out):
    """Composite every splat binned to tile ``t`` and write the tile into ``out``."""
    nk = feats.shape[1]
    ty = t // ntx
    tx = t % ntx
    tr0 = ty * tile
    tc0 = tx * tile
    th = min(tile, height - tr0)
    tw = min(tile, width - tc0)
    stride = tile + LANES
    buf = np.zeros((nk + 1, th * stride), dtype=np.float32)
    if mode == MODE_ADD:
        buf[nk, :] = _F1  # transmittance starts at 1
    wrow = np.empty(stride, dtype=np.float32)
    for s in range(offsets[t], offsets[t + 1]):
        j = order[s]
        mx = params[j, 0]
        my = params[j, 1]
        sxy = params[j, 3]
        syy = params[j, 4]
        det = params[j, 5]
        ca = params[j, 6]
        cb = params[j, 7]
        cc = params[j, 2] / det
        slope = sxy / syy
        wsq = det / syy
        peak = peaks[j]
        ra = max(ranges[j, 0], tr0)
        rb = min(ranges[j, 1], tr0 + th - 1)
        ca32 = np.float32(ca)
        for r in range(ra, rb + 1):
            dy = r + 0.5 - my
            left = 9.0 - dy * dy / syy
            if left < 0.0:
                continue
            hw = math.sqrt(wsq * left)
            xc = mx + slope * dy
            lo = max(int(np.ceil(xc - hw - 0.5)), tc0)
            hi = min(int(np.floor(xc + hw - 0.5)), tc0 + tw - 1)
            if hi < lo:
                continue
            n = hi - lo + 1
            n8 = numba.uint64((n + LANES - 1) // LANES * LANES)
            dx0 = lo + 0.5 - mx
            b1 = np.float32(2.0 * (ca * dx0 + cb * dy))
            c0 = np.float32(ca * dx0 * dx0 + 2.0 * cb * dx0 * dy + cc * dy * dy)
            nf = np.float32(n)
            off = numba.uint64((r - tr0) * stride + (lo - tc0))
            if nk == 3:
                if mode == MODE_OVER:
                    _row_over3(buf, off, ramp, n8, nf, ca32, b1, c0, peak,
                               feats[j, 0], feats[j, 1], feats[j, 2])
                else:
                    _row_sum3(buf, off, ramp, n8, nf, ca32, b1, c0, peak,
                              feats[j, 0], feats[j, 1], feats[j, 2], mode)
            else:
                _row_weights(wrow, ramp, n8, nf, ca32, b1, c0, peak)
                _row_generic(buf, off, wrow, n8, feats[j], mode)
    # Write the tile; add and absorb finish their alpha (and absorb its colour) here.
    for r in range(th):
        for c in range(tw):
            q = r * stride + c
            a = buf[nk, q]
            if mode == MODE_OVER:
                for k in range(nk):
                    out[tr0 + r, tc0 + c, k] = buf[k, q]
                out[tr0 + r, tc0 + c, nk] = a
            elif mode == MODE_ADD:
                for k in range(nk):
                    out[tr0 + r, tc0 + c, k] = buf[k, q]
                out[tr0 + r, tc0 + c, nk] = _F1 - a
            else:
                if a > _F0:
                    alpha = -math.expm1(-np.float64(a))
                    scale = alpha / np.float64(a)
                    for k in range(nk):
                        out[tr0 + r, tc0 + c, k] = np.float32(buf[k, q] * scale)
                    out[tr0 + r, tc0 + c, nk] = np.float32(alpha)
                else:
                    for k in range(nk + 1):
                        out[tr0 + r, tc0 + c, k] = _F0


@numba.njit(**PARALLEL)
def _render(ntx, nty, tile, params, ranges, feats, peaks, mode, offsets, order, ramp, out):
    """prange over tiles; each tile writes only its own output pixels."""
    for t in numba.prange(ntx * nty):
        _render_tile(t, ntx, tile, out.shape[0], out.shape[1], params, ranges,
                     feats, peaks, mode, offsets, order, ramp, out)
