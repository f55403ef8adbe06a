"""Dilation: transparent texels take the colour of the nearest covered texel.

Straight-alpha textures are filtered on straight colour, so transparent
texels left black pull a dark fringe into every edge; filling them from the
nearest covered texel removes it (common practice for straight-alpha sprite
sheets). The nearest texel is found exactly (Euclidean distance) by two
parallel passes, columns then rows.
"""

from __future__ import annotations

import numba
import numpy as np

from splatter.core.jit import PARALLEL

__all__ = ["dilate_colour"]


@numba.njit(**PARALLEL)
def _nearest_in_columns(covered, out_row):
    """Per column, the row of the nearest covered texel (-1 if none); ties go up."""
    h, w = covered.shape
    for c in numba.prange(w):
        last = -1
        for r in range(h):
            if covered[r, c]:
                last = r
            out_row[r, c] = last
        last = -1
        for r in range(h - 1, -1, -1):
            if covered[r, c]:
                last = r
            if last >= 0 and (out_row[r, c] < 0 or last - r < r - out_row[r, c]):
                out_row[r, c] = last


@numba.njit(**PARALLEL)
def _nearest_in_rows(near_row, out_row, out_col):
    """Per row, the lower envelope of parabolas (Felzenszwalb and Huttenlocher).

    ``near_row[r, q]`` is the nearest covered row in column ``q``; a texel's
    nearest covered texel minimises ``(x - q)**2 + (r - near_row[r, q])**2``
    over ``q``. Writes its row and column, or -1 where nothing is covered.
    """
    h, w = near_row.shape
    for r in numba.prange(h):
        v = np.empty(w, dtype=np.int64)
        z = np.empty(w + 1, dtype=np.float64)
        k = -1
        for q in range(w):
            if near_row[r, q] < 0:
                continue
            fq = float((r - near_row[r, q]) ** 2 + q * q)
            if k < 0:
                k = 0
                v[0] = q
                z[0] = -np.inf
                z[1] = np.inf
                continue
            while True:
                p = v[k]
                fp = float((r - near_row[r, p]) ** 2 + p * p)
                s = (fq - fp) / (2.0 * (q - p))
                if s <= z[k] and k > 0:
                    k -= 1
                else:
                    break
            k += 1
            v[k] = q
            z[k] = s
            z[k + 1] = np.inf
        if k < 0:
            for x in range(w):
                out_row[r, x] = -1
                out_col[r, x] = -1
            continue
        k = 0
        for x in range(w):
            while z[k + 1] < x:
                k += 1
            out_col[r, x] = v[k]
            out_row[r, x] = near_row[r, v[k]]


@numba.njit(**PARALLEL)
def _fill_from(img, covered, sy, sx, out):
    """``out`` = ``img``, with every uncovered texel's colour (all but the last
    channel) copied from texel ``(sy, sx)``; rows are independent."""
    h, w, c = img.shape
    for r in numba.prange(h):
        for x in range(w):
            src_r = np.int64(r)
            src_c = np.int64(x)
            if not covered[r, x] and sy[r, x] >= 0:
                src_r = sy[r, x]
                src_c = sx[r, x]
            for k in range(c - 1):
                out[r, x, k] = img[src_r, src_c, k]
            out[r, x, c - 1] = img[r, x, c - 1]


def _nearest_covered(covered):
    """Row and column of the nearest covered texel of every texel.

    Parameters
    ----------
    covered : (H, W) bool ndarray

    Returns
    -------
    sy, sx : (H, W) int64 ndarrays
        Exact Euclidean nearest (a covered texel maps to itself); -1 when
        nothing is covered.

    Notes
    -----
    The separable exact distance transform of Felzenszwalb and Huttenlocher
    ("Distance Transforms of Sampled Functions", Theory of Computing 8, 2012):
    a column pass, then a lower envelope of parabolas per row. O(pixels);
    rows and columns are independent, so the result does not depend on the
    thread count, and ties are resolved in a fixed scan order.
    """
    covered = np.ascontiguousarray(covered, dtype=np.bool_)
    h, w = covered.shape
    near = np.empty((h, w), dtype=np.int64)
    _nearest_in_columns(covered, near)
    sy = np.empty((h, w), dtype=np.int64)
    sx = np.empty((h, w), dtype=np.int64)
    _nearest_in_rows(near, sy, sx)
    return sy, sx


def dilate_colour(straight_rgba, *, mask=None):
    """Give uncovered texels the colour of the nearest covered texel.

    Straight-alpha textures are filtered (bilinear, mipmaps) on straight
    colour; transparent texels with colour 0 then pull black into the edges of
    every puff. Filling them with the nearest covered colour (dilation, common
    practice for straight-alpha sprite sheets) removes the fringe. Alpha is not
    changed, so the image composites exactly as before at full resolution.

    Parameters
    ----------
    straight_rgba : (H, W, C) float ndarray
        Straight (unassociated) colour in the first ``C - 1`` channels and
        alpha last (``C`` is usually 4).
    mask : (H, W) bool ndarray, optional
        Texels whose colour is kept. Default: ``alpha > 0``.

    Returns
    -------
    (H, W, C) float32 ndarray
        Covered texels unchanged; the rest take the colour of the nearest
        covered texel (exact Euclidean distance; ties resolved in a fixed
        order). If nothing is covered the image is returned unchanged.
    """
    a = np.asarray(straight_rgba)
    if a.ndim != 3 or a.shape[2] < 2:
        raise ValueError(f"straight_rgba: expected an (H, W, C>=2) array, got shape {a.shape}")
    img = np.ascontiguousarray(a, dtype=np.float32)
    if mask is None:
        covered = img[..., -1] > 0
    else:
        covered = np.ascontiguousarray(mask, dtype=np.bool_)
        if covered.shape != img.shape[:2]:
            raise ValueError(f"mask: expected shape {img.shape[:2]}, got {covered.shape}")
    if covered.all() or not covered.any():
        return img.copy()
    sy, sx = _nearest_covered(covered)
    out = np.empty_like(img)
    _fill_from(img, covered, sy, sx, out)
    return out
