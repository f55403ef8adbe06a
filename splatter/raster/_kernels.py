"""Private numba kernels behind :func:`splatter.raster.compositor.composite_features`.

Five steps, all writing into arrays they are given:

1. ``_tile_boxes`` (parallel over splats): the screen tiles each splat's
   Mahalanobis-radius-3 ellipse touches.
2. ``_count_pairs`` and ``_bin`` (parallel over runs of splats): a
   counting sort of (tile, splat) pairs, so every tile's list keeps the
   caller's back-to-front order, and each splat that changes a pixel gets
   a record, the records grouped by the splat's first tile.
3. ``_prepare`` (parallel over runs of splats): each record's float64
   conic, pixel rows, row-profile table length, peak and features, asking
   for the inputs of the record ``PREPARE_AHEAD`` places on (they lie all
   over the input).
4. ``_fill_tables`` (parallel over records): each record's row-profile table.
5. ``render_kernel(mode, three)`` (parallel over tiles): each tile
   composites its splats into a private planar float32 buffer and then
   writes only its own output pixels. No two threads touch one pixel and each
   pixel sees the same operations in the same order, so the image is
   bit-identical for any thread count. There is one compiled kernel per blend
   mode and channel layout (K = 3 or any K), so a render compiles only what
   it uses.

Why records. A tile's splats come in depth order from all over the input;
read in place, every splat of the list costs the kernel a few cache misses
(its parameters, ranges, features and table lie in four arrays, each
splat's far from the last's). Grouped by first tile, the records of one
tile's splats lie together and in input order, so a tile's list walks
through memory in a few forward streams (for small splats: the records
starting in this tile row and in the one above), which the processor
prefetches. The pixels are the same bit for bit; for 200,000 splats of
sigma 0.7-3 px the kernel took a third to 40 % less time
(``scripts/bench_composite.py``, DEVELOPERS.md).

How a row is weighted. Along pixel row ``dy`` the squared Mahalanobis
distance is a 1-D quadratic, ``q = a (dx - m)^2 + dy^2 / Syy`` with
``m = Sxy/Syy dy`` (the conditional mean) and the same ``a = Syy/det`` on
every row. Writing the row's centre ``xc = mx + m`` as pixel ``n`` plus a
fraction, ``dx - m = k + phi`` for the pixel ``k`` columns right of ``n``,
``|phi| <= 1/2``, and

    peak exp(-q/2) = T[k] * exp(alpha + beta k),
    T[k] = peak exp(-a k^2 / 2),  beta = -a phi,
    alpha = -a phi^2 / 2 - dy^2 / (2 Syy),

where the table ``T`` belongs to the splat and the second factor is an
exponential of a linear function of ``k``. A row is walked in 8-lane chunks:
its first chunk's factor is ``exp(alpha') (1, rho, ..., rho^7)`` with
``rho = exp(beta)`` (``alpha'`` folds in the first pixel's ``k``), and
every further chunk multiplies it by ``exp(8 beta)``. The three exponentials
of every row are taken eight rows at a time, so a chunk of weights costs one
table load and two multiplies. Exponents stay within a few units
(``a <= A_MAX``), and a row longer than ``RESTART`` chunks starts again
from an exact factor, so the weights keep a relative error below 2e-6
(measured on splats of sigma 0.7-60 px; most of it from the per-chunk
multiplies).
Narrower splats (``a > A_MAX``, a row sigma under 0.5 px, at most a few
pixels a row) take the direct path: a vector ``exp`` of the quadratic on
every chunk.

The exact float64 extent of the ellipse on a row (``xc +- sqrt(det/Syy (9 -
dy^2/Syy))``) bounds the pixels touched; only a row's last chunk can reach
past it, and its extra lanes get weight exactly 0. Buffer rows have
``LANES`` spare columns for that chunk, and the planes are spaced so that no
two lie a multiple of 4 KiB apart (same-page-offset loads and stores make the
processor wait on each other).

How weights blend. ``over`` runs front to back (the tile's list in reverse)
with the transmittance ``T`` in the alpha plane: ``w' = T w``, ``C += w' f``,
``T -= w'``. That is Porter-Duff over reassociated: one multiply, one
subtraction and one FMA a channel instead of a subtraction and an FMA per
channel, which eases this processor's add ports (25 % faster in an isolated
loop here, about even on a real frame, where memory traffic dominates); the
tile is written with ``alpha = 1 - T``. ``add`` keeps ``C += w f`` and
``T -= T w``; ``absorb`` keeps ``C += w f`` and ``tau += w``.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from splatter.core.jit import KERNEL, PARALLEL
from splatter.raster._simd import (
    prefetch,
    vadd,
    vexp,
    vfma,
    vkeep_below,
    vload,
    vmul,
    vpowers,
    vramp,
    vsplat,
    vstore,
    vsub,
)

MODE_OVER = 0
MODE_ADD = 1
MODE_ABSORB = 2

TILE_H = 32
"""Screen tile height in pixels. Each piece of a splat cut at a tile edge costs a
setup: 200,000 splats of sigma 0.7-3 px make 1.62 splat-tile pairs a splat
with 16-row tiles, 1.30 with 32 (about 10 % less kernel time). 64 rows
measured the same as 32 within the noise and would leave fewer tiles than
threads on many-core machines."""

TILE_W = 512
"""Screen tile width in pixels: a whole row of most frames, so rows of a splat
are never cut at a tile edge (each piece of a row costs a setup; 16 x 512
measured 10 % faster than 32 x 128 here). A 32 x 512 tile's four planes take
270 KB, which a 512 KB or larger level-2 cache holds."""

LANES = 8
"""Pixels per vector chunk (one AVX register of float32)."""

STRIDE = TILE_W + LANES
"""Row pitch of a tile buffer plane: room for a chunk reaching past the tile edge."""

_PLANE = TILE_H * STRIDE + (272 - (TILE_H * STRIDE) % 1024) % 1024
"""Plane pitch in floats: 1088 bytes past a multiple of 4 KiB, so planes never alias."""

RESTART = 16
"""Chunks of a row walked by repeated multiplies before an exact restart."""

A_MAX = 4.0
"""Splats with conic ``a = Syy/det`` above this take the direct path."""

PEAK_MIN = 1e-30
"""Splats with a smaller peak weight change no pixel by more than this and are skipped."""

_P1 = np.uint64(_PLANE)
_P2 = np.uint64(2 * _PLANE)
_L = np.uint64(LANES)
_F0 = np.float32(0.0)
_F1 = np.float32(1.0)

# Columns of the per-splat float64 parameters.
_MX, _MY, _A, _B, _C, _SLOPE, _ISYY, _WSQ = range(8)
N_PARAMS = 8
# Columns of the per-splat int64 ranges; _TOFF is filled in by the caller.
_R0, _R1, _KH, _TOFF = range(4)
N_RANGES = 4


@numba.njit(inline="always", **KERNEL)
def _table_length(kh):
    """Entries of a table of half-length ``kh``: whole chunks plus one spare chunk."""
    return (2 * kh + LANES) // LANES * LANES + LANES


@numba.njit(inline="always", **KERNEL)
def _pixel_box(means, covs, peaks, j, height, width):
    """Inclusive pixel rows and columns ``(r0, r1, c0, c1)`` splat ``j`` touches.

    Pixel centres (col + 0.5, row + 0.5) inside the bounding box of the
    Mahalanobis-radius-3 ellipse, clipped to the image; ``r1 < r0`` (the box
    (0, -1, 0, -1)) marks a splat that changes no pixel.
    """
    mx = np.float64(means[j, 0])
    my = np.float64(means[j, 1])
    ry = 3.0 * math.sqrt(np.float64(covs[j, 1, 1]))
    rx = 3.0 * math.sqrt(np.float64(covs[j, 0, 0]))
    r0 = max(int(np.ceil(my - ry - 0.5)), 0)
    r1 = min(int(np.floor(my + ry - 0.5)), height - 1)
    c0 = max(int(np.ceil(mx - rx - 0.5)), 0)
    c1 = min(int(np.floor(mx + rx - 0.5)), width - 1)
    if r1 < r0 or c1 < c0 or not peaks[j] >= PEAK_MIN:
        return 0, -1, 0, -1
    return r0, r1, c0, c1


@numba.njit(**PARALLEL)
def _tile_boxes(means, covs, peaks, height, width, boxes):
    """boxes : (N, 4) int32 out: ty0, ty1, tx0, tx1, the inclusive tiles splat j touches.

    A splat that changes no pixel gets the empty range (0, -1, 0, -1).
    """
    for j in numba.prange(means.shape[0]):
        r0, r1, c0, c1 = _pixel_box(means, covs, peaks, j, height, width)
        live = r1 >= r0
        boxes[j, 0] = r0 // TILE_H if live else 0
        boxes[j, 1] = r1 // TILE_H if live else -1
        boxes[j, 2] = c0 // TILE_W if live else 0
        boxes[j, 3] = c1 // TILE_W if live else -1


@numba.njit(inline="always", **KERNEL)
def _prepare_one(means, covs, peaks, feats, j, p, height, width, params, ranges, tlen,
                 peaks_out, feats_out):
    """Fill record ``p`` from splat ``j`` (see :func:`_prepare`)."""
    r0, r1, _, _ = _pixel_box(means, covs, peaks, j, height, width)
    mx = np.float64(means[j, 0])
    my = np.float64(means[j, 1])
    sxx = np.float64(covs[j, 0, 0])
    sxy = 0.5 * (np.float64(covs[j, 0, 1]) + np.float64(covs[j, 1, 0]))
    syy = np.float64(covs[j, 1, 1])
    det = sxx * syy - sxy * sxy
    a = syy / det
    params[p, _MX] = mx
    params[p, _MY] = my
    params[p, _A] = a
    params[p, _B] = -sxy / det
    params[p, _C] = sxx / det
    params[p, _SLOPE] = sxy / syy
    params[p, _ISYY] = 1.0 / syy
    params[p, _WSQ] = det / syy
    ranges[p, _R0] = r0
    ranges[p, _R1] = r1
    if a <= A_MAX:
        # A row's pixels have |k + phi| <= 3 / sqrt(a) and |phi| <= 1/2.
        kh = int(3.0 / math.sqrt(a) + 0.5) + 1
        ranges[p, _KH] = kh
        tlen[p] = _table_length(kh)
    else:
        ranges[p, _KH] = -1
        tlen[p] = 0
    ranges[p, _TOFF] = 0
    peaks_out[p] = peaks[j]
    for k in range(feats.shape[1]):
        feats_out[p, k] = np.float32(feats[j, k])


PREPARE_AHEAD = 16
"""How many records ahead :func:`_prepare` asks for a splat's inputs. A record
takes some tens of ns, a miss to main memory about 100: 16 ahead keeps
several misses in flight (the splats of a run lie all over the input)."""


@numba.njit(inline="always", **KERNEL)
def _prefetch_splat(means, covs, peaks, feats, j):
    """Ask for splat ``j``'s mean, covariance, peak and features.

    The first and last element of each, so a row that straddles two cache
    lines is fetched whole. Only a hint: no value read or written changes.
    """
    prefetch(means, j * 2)
    prefetch(means, j * 2 + 1)
    prefetch(covs, j * 4)
    prefetch(covs, j * 4 + 3)
    prefetch(peaks, j)
    prefetch(feats, j * feats.shape[1])
    prefetch(feats, j * feats.shape[1] + feats.shape[1] - 1)


@numba.njit(**PARALLEL)
def _prepare(means, covs, peaks, feats, source, starts, ends, height, width, params, ranges,
             tlen, peaks_out, feats_out):
    """Per-splat float64 parameters, pixel ranges and table lengths, in record order.

    Record ``p`` holds splat ``source[p]`` (from :func:`_bin`), so the
    splats of one tile lie together in memory. Records are filled run of
    splats by run (run ``c``'s records of first tile ``t`` are ``ends[c - 1,
    t]`` (``starts[t]`` for the first run) up to ``ends[c, t]``): a run's
    inputs can stay in the cache while its records are written in order
    (walking the records in order instead reads the inputs all over memory
    once per tile row). Reading the splats where they lie makes this pass
    about three times the cost of one in input order; the kernel gains
    several times that. Asking for the inputs of the record
    ``PREPARE_AHEAD`` places further on (within the same run and tile) keeps
    several of those misses in flight: a quarter to a third less time
    (DEVELOPERS.md).

    params : (M, 8) float64 out: mx, my, conic a, b, c, slope ``Sxy/Syy``,
        ``1/Syy`` and ``det/Syy``.
    ranges : (M, 4) int64 out: row0, row1 (inclusive pixel rows clipped to
        the image), the table half-length ``kh`` (-1: direct path) and the
        table offset (left 0 here).
    tlen : (M,) int64 out: table length (0 on the direct path).
    peaks_out : (M,) float32 out and feats_out : (M, K) float32 out: the
        splat's peak weight and features, copied to its record.
    """
    for c in numba.prange(ends.shape[0]):
        for t in range(ends.shape[1]):
            hi = ends[c, t]
            for p in range(starts[t] if c == 0 else ends[c - 1, t], hi):
                if p + PREPARE_AHEAD < hi:
                    _prefetch_splat(means, covs, peaks, feats, source[p + PREPARE_AHEAD])
                _prepare_one(means, covs, peaks, feats, source[p], p, height, width, params,
                             ranges, tlen, peaks_out, feats_out)


@numba.njit(**PARALLEL)
def _fill_tables(params, ranges, peaks, tables):
    """``tables[off + kh + k] = peak exp(-a k^2 / 2)`` for ``|k| <= kh``; 0 after."""
    for j in numba.prange(params.shape[0]):
        kh = ranges[j, _KH]
        if kh < 0:
            continue
        off = ranges[j, _TOFF]
        eight = vsplat(np.float32(LANES))
        m = 2 * kh + 1
        ma = vsplat(np.float32(-0.5 * params[j, _A]))
        peak = vsplat(peaks[j])
        k = vadd(vramp(), vsplat(np.float32(-kh)))
        # The last chunk (the spare one) lies wholly past the m entries: store
        # its zeros without taking exponentials.
        spare = _table_length(kh) - LANES
        for i in range(0, spare, LANES):
            t = vmul(vexp(vmul(vmul(k, k), ma)), peak)
            vstore(tables, off + i, vkeep_below(t, np.float32(m - i)))
            k = vadd(k, eight)
        vstore(tables, off + spare, vsplat(_F0))


BIN_CHUNKS = 16
"""Runs of splats binned in parallel; any number gives the same lists."""


@numba.njit(**PARALLEL)
def _count_pairs(boxes, ntx, counts, firsts, offsets, starts):
    """Count (tile, splat) pairs, and splats by first tile, per run of splats and per tile.

    counts : (BIN_CHUNKS, ntiles) int64 out: counts[c, t] = splats of run
        ``c`` (splats ``c n / BIN_CHUNKS`` up to the next run's first)
        touching tile t.
    firsts : (BIN_CHUNKS, ntiles) int64 out: splats of run ``c`` whose
        first (top-left) tile is t.
    offsets : (ntiles + 1,) int64 out: offsets[t + 1] = pairs of tiles 0..t.
    starts : (ntiles + 1,) int64 out: starts[t + 1] = splats whose first
        tile is 0..t, so starts[-1] is the number of records.
    """
    n = boxes.shape[0]
    for c in numba.prange(BIN_CHUNKS):
        counts[c, :] = 0
        firsts[c, :] = 0
        for j in range(c * n // BIN_CHUNKS, (c + 1) * n // BIN_CHUNKS):
            ty0, ty1, tx0, tx1 = boxes[j, 0], boxes[j, 1], boxes[j, 2], boxes[j, 3]
            if ty1 >= ty0:
                firsts[c, ty0 * ntx + tx0] += 1
            for ty in range(ty0, ty1 + 1):
                for tx in range(tx0, tx1 + 1):
                    counts[c, ty * ntx + tx] += 1
    offsets[0] = 0
    starts[0] = 0
    for t in range(counts.shape[1]):
        offsets[t + 1] = offsets[t]
        starts[t + 1] = starts[t]
        for c in range(BIN_CHUNKS):
            offsets[t + 1] += counts[c, t]
            starts[t + 1] += firsts[c, t]


@numba.njit(inline="always", **KERNEL)
def _run_positions(counts, offsets):
    """Turn per-run counts into each run's first position (runs in order after one another)."""
    for t in range(counts.shape[1]):
        at = offsets[t]
        for c in range(BIN_CHUNKS):
            k = counts[c, t]
            counts[c, t] = at
            at += k


@numba.njit(**PARALLEL)
def _bin(boxes, ntx, offsets, counts, starts, firsts, source, order):
    """Give each splat its record and bin the records into tiles, in input order.

    A splat's record ``p`` (``source[p]`` is the splat) follows the splats
    of earlier first tiles and the earlier splats of its own; a splat that
    changes no pixel has none. So a tile's splats lie together in memory,
    in input order; order[offsets[t]:
    offsets[t+1]] = the records of tile t's splats, in input order (a
    counting sort). counts and firsts (from :func:`_count_pairs`) are used
    up as each run's write positions. Each run of splats writes its own part
    of every list, so the lists and records are the same for any thread count.
    """
    n = boxes.shape[0]
    _run_positions(counts, offsets)
    _run_positions(firsts, starts)
    for c in numba.prange(BIN_CHUNKS):
        for j in range(c * n // BIN_CHUNKS, (c + 1) * n // BIN_CHUNKS):
            ty0, ty1, tx0, tx1 = boxes[j, 0], boxes[j, 1], boxes[j, 2], boxes[j, 3]
            if ty1 < ty0:
                continue
            t0 = ty0 * ntx + tx0
            p = firsts[c, t0]
            firsts[c, t0] += 1
            source[p] = j
            for ty in range(ty0, ty1 + 1):
                for tx in range(tx0, tx1 + 1):
                    t = ty * ntx + tx
                    order[counts[c, t]] = p
                    counts[c, t] += 1


@numba.njit(inline="always", **KERNEL)
def _blend(buf, q, w, feat, fv0, fv1, fv2, mode, three):
    """Blend the weights ``w`` of one chunk into every plane of ``buf`` at ``q``.

    ``mode`` and ``three`` are constants where this is inlined, so only one
    branch is compiled. ``three``: K = 3 with the features as vectors
    ``fv0..fv2``; otherwise the K features ``feat`` are splatted per chunk.
    """
    nk = 3 if three else feat.shape[0]
    pa = q + numba.uint64(nk) * numba.uint64(_PLANE)
    t = vload(buf, pa)
    if mode == MODE_OVER:
        w = vmul(t, w)
        vstore(buf, pa, vsub(t, w))
    elif mode == MODE_ADD:
        vstore(buf, pa, vsub(t, vmul(t, w)))
    else:
        vstore(buf, pa, vadd(t, w))
    if three:
        vstore(buf, q, vfma(w, fv0, vload(buf, q)))
        vstore(buf, q + _P1, vfma(w, fv1, vload(buf, q + _P1)))
        vstore(buf, q + _P2, vfma(w, fv2, vload(buf, q + _P2)))
    else:
        for k in range(nk):
            p = q + numba.uint64(k) * numba.uint64(_PLANE)
            vstore(buf, p, vfma(w, vsplat(feat[k]), vload(buf, p)))


@numba.njit(inline="always", **KERNEL)
def _row_span(dy, mx, slope, isyy, wsq, ftc0, ftc1):
    """The pixels of row ``dy`` (from the splat's centre) inside the ellipse and the tile.

    Returns ``(xc, lo, count)``: the row's centre ``x``, its first pixel
    column (float64) and its pixel count (0 or less: none). Branch-free, so
    a loop over rows vectorizes.
    """
    left = 9.0 - dy * dy * isyy
    hw = math.sqrt(wsq * max(left, 0.0))
    xc = mx + slope * dy
    lo = max(np.ceil(xc - hw - 0.5), ftc0)
    hi = min(np.floor(xc + hw - 0.5), ftc1)
    return xc, lo, (hi - lo + 1.0 if left >= 0.0 else 0.0)


@numba.njit(inline="always", **KERNEL)
def _walk(buf, q, tables, tk, p, step, n, feat, fv0, fv1, fv2, mode, three):
    """Blend ``n`` full chunks of a row, each factor ``p`` times ``step`` the last.

    Returns the buffer index, table index and factor of the chunk after them.
    """
    for _ in range(n):
        _blend(buf, q, vmul(vload(tables, tk), p), feat, fv0, fv1, fv2, mode, three)
        p = vmul(p, step)
        tk += LANES
        q += _L
    return q, tk, p


@numba.njit(inline="always", **KERNEL)
def _rows_table(buf, j, ra, nrows, tr0, tc0, tc1, params, ranges, tables, feat,
                fv0, fv1, fv2, rf64, rf32, mode, three):
    """Blend rows ``ra .. ra + nrows - 1`` of splat ``j`` by its row-profile table.

    rf64 : (5, TILE_H) float64 scratch; rf32 : (3, TILE_H + LANES) float32 scratch.
    """
    mx = params[j, _MX]
    my = params[j, _MY]
    a = params[j, _A]
    slope = params[j, _SLOPE]
    isyy = params[j, _ISYY]
    wsq = params[j, _WSQ]
    rlo = rf64[0]
    rcnt = rf64[1]
    rtk = rf64[2]
    rexp = rf64[3]
    rbeta = rf64[4]
    rscale = rf32[0]
    rrho = rf32[1]
    rstep = rf32[2]
    toff = np.float64(ranges[j, _TOFF] + ranges[j, _KH])
    ftc0 = np.float64(tc0)
    ftc1 = np.float64(tc1)
    dy0 = np.float64(ra) + 0.5 - my
    # Each row in float64, with no integer conversion so the loop vectorizes.
    for i in range(nrows):
        dy = dy0 + i
        xc, lo, cnt = _row_span(dy, mx, slope, isyy, wsq, ftc0, ftc1)
        nc = np.floor(xc)
        phi = nc + 0.5 - xc
        beta = -a * phi
        k0 = lo - nc
        rlo[i] = lo - ftc0
        rcnt[i] = cnt
        rtk[i] = toff + k0
        rexp[i] = beta * k0 - 0.5 * (a * phi * phi + dy * dy * isyy)
        rbeta[i] = beta
        rscale[i] = np.float32(rexp[i])
        rrho[i] = np.float32(beta)
    eight = vsplat(np.float32(LANES))
    for i in range(0, nrows, LANES):
        beta = vload(rrho, i)
        vstore(rscale, i, vexp(vload(rscale, i)))
        vstore(rstep, i, vexp(vmul(beta, eight)))
        vstore(rrho, i, vexp(beta))
    for i in range(nrows):
        cnt = int(rcnt[i])
        if cnt <= 0:
            continue
        p = vmul(vpowers(rrho[i]), vsplat(rscale[i]))
        step = vsplat(rstep[i])
        tk = int(rtk[i])
        q = numba.uint64((ra + i - tr0) * STRIDE + int(rlo[i]))
        nfull = (cnt - 1) // LANES
        done = min(nfull, RESTART)
        q, tk, p = _walk(buf, q, tables, tk, p, step, done, feat, fv0, fv1, fv2, mode, three)
        while done < nfull:
            # A row longer than RESTART chunks starts again from an exact
            # factor, so the error of the repeated multiplies stays bounded.
            e = math.exp(rexp[i] + rbeta[i] * (LANES * done))
            p = vmul(vpowers(rrho[i]), vsplat(np.float32(e)))
            n = min(nfull - done, RESTART)
            q, tk, p = _walk(buf, q, tables, tk, p, step, n, feat, fv0, fv1, fv2, mode, three)
            done += n
        w = vkeep_below(vmul(vload(tables, tk), p), np.float32(cnt - nfull * LANES))
        _blend(buf, q, w, feat, fv0, fv1, fv2, mode, three)


@numba.njit(inline="always", **KERNEL)
def _rows_direct(buf, j, ra, nrows, tr0, tc0, tc1, params, peak, feat, fv0, fv1, fv2,
                 mode, three):
    """Blend rows of a narrow splat ``j``: a vector exp of the quadratic per chunk."""
    mx = params[j, _MX]
    my = params[j, _MY]
    a = params[j, _A]
    cb = params[j, _B]
    cc = params[j, _C]
    slope = params[j, _SLOPE]
    isyy = params[j, _ISYY]
    wsq = params[j, _WSQ]
    va = vsplat(np.float32(a))
    vpeak = vsplat(peak)
    mhalf = vsplat(np.float32(-0.5))
    eight = vsplat(np.float32(LANES))
    ftc0 = np.float64(tc0)
    ftc1 = np.float64(tc1)
    for i in range(nrows):
        dy = (ra + i) + 0.5 - my
        _, lo, fcnt = _row_span(dy, mx, slope, isyy, wsq, ftc0, ftc1)
        if fcnt <= 0.0:
            continue
        cnt = int(fcnt)
        # q(u) = a u^2 + b1 u + c0 along the row, u = pixel - lo.
        dx0 = lo + 0.5 - mx
        vb = vsplat(np.float32(2.0 * (a * dx0 + cb * dy)))
        vc = vsplat(np.float32((a * dx0 + 2.0 * cb * dy) * dx0 + cc * dy * dy))
        q = numba.uint64((ra + i - tr0) * STRIDE + int(lo) - tc0)
        u = vramp()
        for c in range(0, cnt, LANES):
            d2 = vfma(vfma(va, u, vb), u, vc)
            w = vkeep_below(vmul(vexp(vmul(d2, mhalf)), vpeak), np.float32(cnt - c))
            _blend(buf, q, w, feat, fv0, fv1, fv2, mode, three)
            u = vadd(u, eight)
            q += _L


@numba.njit(inline="always", **KERNEL)
def _prefetch_ahead(s, first, order, params, ranges, tables, feats):
    """Ask for the data of the splats two and one places further down the list.

    A tile's splats come in depth order; their records are grouped by first
    tile, so they lie in a few runs of memory rather than one, and a splat
    that starts in an earlier tile row sits far from the rest: asking ahead
    hides those misses.
    """
    if s - 2 >= first:
        j2 = order[s - 2]
        prefetch(ranges, j2 * N_RANGES)
        prefetch(ranges, j2 * N_RANGES + N_RANGES - 1)
        prefetch(params, j2 * N_PARAMS)
        prefetch(params, j2 * N_PARAMS + N_PARAMS - 1)
        prefetch(feats, j2 * feats.shape[1])
    if s - 1 >= first:
        j1 = order[s - 1]
        kh = ranges[j1, _KH]
        if kh >= 0:
            t0 = ranges[j1, _TOFF]
            for i in range(0, _table_length(kh), 16):
                prefetch(tables, t0 + i)


@numba.njit(inline="always", **KERNEL)
def _tile(t, ntx, params, ranges, tables, feats, peaks, offsets, order, out, mode, three):
    """Composite every splat binned to tile ``t`` and write the tile into ``out``."""
    height = out.shape[0]
    width = out.shape[1]
    nk = feats.shape[1]
    tr0 = (t // ntx) * TILE_H
    tc0 = (t % ntx) * TILE_W
    th = min(TILE_H, height - tr0)
    tw = min(TILE_W, width - tc0)
    tc1 = tc0 + tw - 1
    buf = np.zeros((nk + 1) * _PLANE, dtype=np.float32)
    if mode != MODE_ABSORB:
        buf[nk * _PLANE:] = _F1  # transmittance starts at 1
    rf64 = np.empty((5, TILE_H), dtype=np.float64)
    rf32 = np.empty((3, TILE_H + LANES), dtype=np.float32)
    # Front to back: the tile's list holds the caller's back-to-front order.
    first = offsets[t]
    for s in range(offsets[t + 1] - 1, first - 1, -1):
        j = order[s]
        _prefetch_ahead(s, first, order, params, ranges, tables, feats)
        ra = max(ranges[j, _R0], tr0)
        rb = min(ranges[j, _R1], tr0 + th - 1)
        if rb < ra:
            continue
        feat = feats[j]
        fv0 = vsplat(feat[0])
        fv1 = vsplat(feat[min(1, nk - 1)])
        fv2 = vsplat(feat[min(2, nk - 1)])
        if ranges[j, _KH] >= 0:
            _rows_table(buf, j, ra, rb - ra + 1, tr0, tc0, tc1, params, ranges, tables, feat,
                        fv0, fv1, fv2, rf64, rf32, mode, three)
        else:
            _rows_direct(buf, j, ra, rb - ra + 1, tr0, tc0, tc1, params, peaks[j], feat,
                         fv0, fv1, fv2, mode, three)
    # Write the tile; the alpha plane holds T (over, add) or tau (absorb).
    for r in range(th):
        for c in range(tw):
            qq = r * STRIDE + c
            av = buf[nk * _PLANE + qq]
            if mode != MODE_ABSORB:
                for k in range(nk):
                    out[tr0 + r, tc0 + c, k] = buf[k * _PLANE + qq]
                out[tr0 + r, tc0 + c, nk] = _F1 - av
            elif av > _F0:
                alpha = -math.expm1(-np.float64(av))
                scale = alpha / np.float64(av)
                for k in range(nk):
                    out[tr0 + r, tc0 + c, k] = np.float32(buf[k * _PLANE + qq] * scale)
                out[tr0 + r, tc0 + c, nk] = np.float32(alpha)
            else:
                for k in range(nk + 1):
                    out[tr0 + r, tc0 + c, k] = _F0


@numba.njit(inline="always", **KERNEL)
def _tiles(params, ranges, tables, feats, peaks, offsets, order, tile_order, out, mode, three):
    """Every tile, in ``tile_order`` (the order the parallel loop takes them)."""
    ntx = (out.shape[1] + TILE_W - 1) // TILE_W
    for i in numba.prange(tile_order.shape[0]):
        _tile(tile_order[i], ntx, params, ranges, tables, feats, peaks, offsets, order, out,
              mode, three)


def _make_render_kernel(mode, three):
    """The parallel tile kernel with ``mode`` and ``three`` fixed.

    numba treats the closure's ``mode`` and ``three`` as constants, so the
    inlined tile code holds only the operations of that blend mode and
    channel layout; numba's cache keys each variant by those values, so each
    is compiled (and cached) on its own, when first used.
    """
    @numba.njit(**PARALLEL)
    def render(params, ranges, tables, feats, peaks, offsets, order, tile_order, out):
        _tiles(params, ranges, tables, feats, peaks, offsets, order, tile_order, out, mode, three)

    return render


_KERNELS = {(mode, three): _make_render_kernel(mode, three)
            for mode in (MODE_OVER, MODE_ADD, MODE_ABSORB) for three in (True, False)}


def render_kernel(mode, three):
    """The parallel tile kernel for blend ``mode`` and K == 3 (``three``) or any K."""
    return _KERNELS[(mode, bool(three))]
