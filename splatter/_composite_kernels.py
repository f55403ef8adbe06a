"""Private numba kernels behind :func:`splatter.compositor.composite_features`.

Three steps, all writing into arrays they are given:

1. ``_prepare``: per splat, the float64 conic and the pixel rows, columns and
   screen tiles its Mahalanobis-radius-3 ellipse touches (serial).
2. ``_bin``: a counting sort of (tile, splat) pairs, serial, so every tile's
   list keeps the caller's back-to-front splat order.
3. ``_render``: ``prange`` over tiles; a tile accumulates its splats into a
   private planar float32 buffer ``(K+1, TILE, STRIDE)`` and then writes only
   its own part of the output. No two threads touch the same output pixel and
   each pixel sees the same operations in the same order, so the image is
   bit-identical for any thread count.

Inside a tile each splat is walked row by row. The exact float64 extent of the
ellipse on each row (a conditional Gaussian: centre ``mx + Sxy/Syy dy``,
half-width ``sqrt(det/Syy (9 - dy^2/Syy))``) bounds the pixels touched; these
spans are computed for all of the splat's rows in one vectorizable pass. Rows
are then taken in pairs sharing one column range, so each vector loop
iteration does two rows' work. The squared Mahalanobis distance along a row is
a quadratic in the column, evaluated in float32 with explicit FMAs and turned
into a weight by ``_fastexp.gauss_weight``. A span is padded to a multiple of
8 lanes (the buffer has spare columns) and lanes outside the row's exact span
get weight exactly 0, which leaves a pixel bit-for-bit unchanged, so the
vector loop needs no scalar tail. Loop indices are unsigned so numba emits no
negative-index wraparound code, and plane offsets are compile-time constants
so LLVM needs no run-time aliasing checks between planes.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from splatter._fastexp import fma, gauss_weight
from splatter.jit import KERNEL, PARALLEL

MODE_OVER = 0
MODE_ADD = 1
MODE_ABSORB = 2

TILE = 64
"""Screen tile edge in pixels: tiles are the unit of parallel work."""

LANES = 8
"""Row spans are padded to a multiple of this many pixels (AVX2 float32)."""

STRIDE = TILE + LANES
"""Row pitch of a tile buffer plane: room for a span padded past the tile edge."""

# Unsigned compile-time offsets: planes sit at constant distances, so LLVM
# vectorizes the row loops without run-time aliasing checks between planes.
_USTRIDE = np.uint64(STRIDE)
_PLANE = np.uint64(TILE * STRIDE)
_P1 = np.uint64(TILE * STRIDE)
_P2 = np.uint64(2 * TILE * STRIDE)
_P3 = np.uint64(3 * TILE * STRIDE)

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
def _spans(lo_out, hi_out, dy_out, ramp64, nrows, r0c, mx, my, isyy, wsq, slope, c_lo, c_hi):
    """Vectorizable: exact float64 spans [lo, hi] of rows r0c - 0.5 + i, i < nrows."""
    for i in range(nrows):
        dy = (r0c + ramp64[i]) - my
        left = 9.0 - dy * dy * isyy
        hw = math.sqrt(wsq * max(left, 0.0))
        xc = mx + slope * dy
        lo = max(np.ceil(xc - hw - 0.5), c_lo)
        hi = min(np.floor(xc + hw - 0.5), c_hi)
        lo_out[i] = lo
        hi_out[i] = hi if left >= 0.0 else lo - 1.0
        dy_out[i] = dy


@numba.njit(inline="always", **KERNEL)
def _pair_over3(buf, q0, ramp, n8, sa, ea, sb, eb, a2, b1a, c0a, b1b, c0b, peak, f0, f1, f2):
    """Premultiplied over of one K=3 splat on two buffer rows (q0 and q0 + STRIDE).

    Lane ``u`` of row a is inside the footprint when ``sa <= u < ea`` (row b
    likewise); other lanes get weight exactly 0, which leaves pixels unchanged.
    ``C + w (f - C)`` is the over update ``f w + (1 - w) C`` with one multiply.
    """
    for i in range(n8):
        u = ramp[i]
        au = a2 * u
        w = peak * gauss_weight(fma(au + b1a, u, c0a))
        w = w if (u >= sa) & (u < ea) else _F0
        q = q0 + i
        c = buf[q]
        buf[q] = fma(w, f0 - c, c)
        c = buf[q + _P1]
        buf[q + _P1] = fma(w, f1 - c, c)
        c = buf[q + _P2]
        buf[q + _P2] = fma(w, f2 - c, c)
        c = buf[q + _P3]
        buf[q + _P3] = fma(w, _F1 - c, c)
        w = peak * gauss_weight(fma(au + b1b, u, c0b))
        w = w if (u >= sb) & (u < eb) else _F0
        q = q + _USTRIDE
        c = buf[q]
        buf[q] = fma(w, f0 - c, c)
        c = buf[q + _P1]
        buf[q + _P1] = fma(w, f1 - c, c)
        c = buf[q + _P2]
        buf[q + _P2] = fma(w, f2 - c, c)
        c = buf[q + _P3]
        buf[q + _P3] = fma(w, _F1 - c, c)


@numba.njit(inline="always", **KERNEL)
def _pair_add3(buf, q0, ramp, n8, sa, ea, sb, eb, a2, b1a, c0a, b1b, c0b, peak, f0, f1, f2):
    """K=3 "add": colour sums ``f a``; the alpha plane holds transmittance."""
    for i in range(n8):
        u = ramp[i]
        w = peak * gauss_weight(fma(fma(a2, u, b1a), u, c0a))
        w = w if (u >= sa) & (u < ea) else _F0
        q = q0 + i
        buf[q] = fma(f0, w, buf[q])
        buf[q + _P1] = fma(f1, w, buf[q + _P1])
        buf[q + _P2] = fma(f2, w, buf[q + _P2])
        buf[q + _P3] = buf[q + _P3] * (_F1 - w)
        w = peak * gauss_weight(fma(fma(a2, u, b1b), u, c0b))
        w = w if (u >= sb) & (u < eb) else _F0
        q = q + _USTRIDE
        buf[q] = fma(f0, w, buf[q])
        buf[q + _P1] = fma(f1, w, buf[q + _P1])
        buf[q + _P2] = fma(f2, w, buf[q + _P2])
        buf[q + _P3] = buf[q + _P3] * (_F1 - w)


@numba.njit(inline="always", **KERNEL)
def _pair_absorb3(buf, q0, ramp, n8, sa, ea, sb, eb, a2, b1a, c0a, b1b, c0b, peak, f0, f1, f2):
    """K=3 "absorb": colour sums ``f tau``; the alpha plane sums ``tau``."""
    for i in range(n8):
        u = ramp[i]
        w = peak * gauss_weight(fma(fma(a2, u, b1a), u, c0a))
        w = w if (u >= sa) & (u < ea) else _F0
        q = q0 + i
        buf[q] = fma(f0, w, buf[q])
        buf[q + _P1] = fma(f1, w, buf[q + _P1])
        buf[q + _P2] = fma(f2, w, buf[q + _P2])
        buf[q + _P3] = buf[q + _P3] + w
        w = peak * gauss_weight(fma(fma(a2, u, b1b), u, c0b))
        w = w if (u >= sb) & (u < eb) else _F0
        q = q + _USTRIDE
        buf[q] = fma(f0, w, buf[q])
        buf[q + _P1] = fma(f1, w, buf[q + _P1])
        buf[q + _P2] = fma(f2, w, buf[q + _P2])
        buf[q + _P3] = buf[q + _P3] + w


@numba.njit(inline="always", **KERNEL)
def _pair_weights(wrow, ramp, n8, sa, ea, sb, eb, a2, b1a, c0a, b1b, c0b, peak):
    """Weights of two rows: wrow[i] (row a) and wrow[STRIDE + i] (row b)."""
    for i in range(n8):
        u = ramp[i]
        w = peak * gauss_weight(fma(fma(a2, u, b1a), u, c0a))
        wrow[i] = w if (u >= sa) & (u < ea) else _F0
        w = peak * gauss_weight(fma(fma(a2, u, b1b), u, c0b))
        wrow[i + _USTRIDE] = w if (u >= sb) & (u < eb) else _F0


@numba.njit(inline="always", **KERNEL)
def _pair_generic(buf, q0, wrow, n8, feat, mode):
    """Apply two rows of weights to every plane of ``buf`` (any K)."""
    k_alpha = feat.shape[0]
    n2 = n8 + _USTRIDE
    for k in range(k_alpha):
        fk = feat[k]
        base = q0 + numba.uint64(k) * _PLANE
        if mode == MODE_OVER:
            for i in range(n2):
                w = wrow[i]
                buf[base + i] = fma(buf[base + i], _F1 - w, fk * w)
        else:
            for i in range(n2):
                buf[base + i] = fma(fk, wrow[i], buf[base + i])
    base = q0 + numba.uint64(k_alpha) * _PLANE
    if mode == MODE_OVER:
        for i in range(n2):
            w = wrow[i]
            buf[base + i] = fma(buf[base + i], _F1 - w, w)
    elif mode == MODE_ADD:
        for i in range(n2):
            buf[base + i] = buf[base + i] * (_F1 - wrow[i])
    else:
        for i in range(n2):
            buf[base + i] = buf[base + i] + wrow[i]


@numba.njit(**KERNEL)
def _render_tile(t, ntx, params, ranges, feats, peaks, mode, offsets, order, ramp, out):
    """Composite every splat binned to tile ``t`` and write the tile into ``out``.

    Rows of a splat are taken in pairs sharing one column span (the union of
    both rows' exact spans) so each vector loop does twice the work per
    iteration; an odd last row pairs with an empty row.
    """
    height = out.shape[0]
    width = out.shape[1]
    nk = feats.shape[1]
    tr0 = (t // ntx) * TILE
    tc0 = (t % ntx) * TILE
    th = min(TILE, height - tr0)
    tw = min(TILE, width - tc0)
    tc1 = tc0 + tw - 1
    # One spare row: the empty partner of an odd last row may touch it.
    buf = np.zeros((nk + 1) * TILE * STRIDE + STRIDE, dtype=np.float32)
    if mode == MODE_ADD:
        buf[nk * TILE * STRIDE:] = _F1  # transmittance starts at 1
    wrow = np.empty(2 * STRIDE, dtype=np.float32)
    slo = np.empty(TILE + LANES, dtype=np.float64)
    shi = np.empty(TILE + LANES, dtype=np.float64)
    sdy = np.empty(TILE + LANES, dtype=np.float64)
    ramp64 = np.arange(TILE + LANES).astype(np.float64)
    for s in range(offsets[t], offsets[t + 1]):
        j = order[s]
        mx = params[j, 0]
        my = params[j, 1]
        det = params[j, 5]
        isyy = 1.0 / params[j, 4]
        slope = params[j, 3] * isyy
        wsq = det * isyy
        ca = params[j, 6]
        cb = params[j, 7]
        cc = params[j, 2] / det
        a2 = np.float32(ca)
        peak = peaks[j]
        ra = max(ranges[j, 0], tr0)
        rb = min(ranges[j, 1], tr0 + th - 1)
        if rb < ra:
            continue
        nrows = numba.uint64(rb - ra + 1)
        _spans(slo, shi, sdy, ramp64, nrows, ra + 0.5, mx, my, isyy, wsq, slope,
               np.float64(tc0), np.float64(tc1))
        # An odd last row pairs with an empty row.
        slo[nrows] = 1.0
        shi[nrows] = 0.0
        sdy[nrows] = sdy[nrows - 1]
        for ii in range(0, rb - ra + 1, 2):
            r = ra + ii
            loa = int(slo[ii])
            hia = int(shi[ii])
            dya = sdy[ii]
            lob = int(slo[ii + 1])
            hib = int(shi[ii + 1])
            dyb = sdy[ii + 1]
            if hia < loa:
                if hib < lob:
                    continue
                lo, hi = lob, hib
                loa, hia = lob, lob - 1
            elif hib < lob:
                lo, hi = loa, hia
                lob, hib = loa, loa - 1
            else:
                lo, hi = min(loa, lob), max(hia, hib)
            n8 = numba.uint64((hi - lo + LANES) // LANES * LANES)
            dx0 = lo + 0.5 - mx
            b1a = np.float32(2.0 * (ca * dx0 + cb * dya))
            c0a = np.float32((ca * dx0 + 2.0 * cb * dya) * dx0 + cc * dya * dya)
            b1b = np.float32(2.0 * (ca * dx0 + cb * dyb))
            c0b = np.float32((ca * dx0 + 2.0 * cb * dyb) * dx0 + cc * dyb * dyb)
            sa = np.float32(loa - lo)
            ea = np.float32(hia - lo + 1)
            sb = np.float32(lob - lo)
            eb = np.float32(hib - lo + 1)
            q0 = numba.uint64((r - tr0) * STRIDE + (lo - tc0))
            if nk == 3:
                if mode == MODE_OVER:
                    _pair_over3(buf, q0, ramp, n8, sa, ea, sb, eb, a2, b1a, c0a, b1b, c0b,
                                peak, feats[j, 0], feats[j, 1], feats[j, 2])
                elif mode == MODE_ADD:
                    _pair_add3(buf, q0, ramp, n8, sa, ea, sb, eb, a2, b1a, c0a, b1b, c0b,
                               peak, feats[j, 0], feats[j, 1], feats[j, 2])
                else:
                    _pair_absorb3(buf, q0, ramp, n8, sa, ea, sb, eb, a2, b1a, c0a, b1b, c0b,
                                  peak, feats[j, 0], feats[j, 1], feats[j, 2])
            else:
                # _pair_generic walks both rows as one run of STRIDE + n8 lanes;
                # the gap (lanes n8..STRIDE) must weigh 0 so it changes nothing.
                wrow[:] = _F0
                _pair_weights(wrow, ramp, n8, sa, ea, sb, eb, a2, b1a, c0a, b1b, c0b, peak)
                _pair_generic(buf, q0, wrow, n8, feats[j], mode)
    # Write the tile; add and absorb finish their alpha (and absorb its colour) here.
    for r in range(th):
        for c in range(tw):
            q = r * STRIDE + c
            a = buf[nk * TILE * STRIDE + q]
            if mode == MODE_OVER:
                for k in range(nk):
                    out[tr0 + r, tc0 + c, k] = buf[k * TILE * STRIDE + q]
                out[tr0 + r, tc0 + c, nk] = a
            elif mode == MODE_ADD:
                for k in range(nk):
                    out[tr0 + r, tc0 + c, k] = buf[k * TILE * STRIDE + q]
                out[tr0 + r, tc0 + c, nk] = _F1 - a
            else:
                if a > _F0:
                    alpha = -math.expm1(-np.float64(a))
                    scale = alpha / np.float64(a)
                    for k in range(nk):
                        out[tr0 + r, tc0 + c, k] = np.float32(buf[k * TILE * STRIDE + q] * scale)
                    out[tr0 + r, tc0 + c, nk] = np.float32(alpha)
                else:
                    for k in range(nk + 1):
                        out[tr0 + r, tc0 + c, k] = _F0


@numba.njit(**PARALLEL)
def _render(params, ranges, feats, peaks, mode, offsets, order, ramp, out):
    """prange over tiles; each tile writes only its own output pixels."""
    ntx = (out.shape[1] + TILE - 1) // TILE
    nty = (out.shape[0] + TILE - 1) // TILE
    for t in numba.prange(ntx * nty):
        _render_tile(t, ntx, params, ranges, feats, peaks, mode, offsets, order, ramp, out)
