"""Composite 2D Gaussian splats into a linear, premultiplied image.

The public functions check their inputs and call the tiled numba kernels in
:mod:`splatter.raster._kernels`.

Conventions (the look file's Python contract): ``means`` are in pixels with x
to the right and y down; pixel ``[row, col]`` covers ``[col, col+1) x
[row, row+1)``, so its centre is ``(col + 0.5, row + 0.5)`` and every footprint
is sampled at pixel centres. Splat ``i`` has footprint weight
``g_i(x) = exp(-d^2 / 2)`` for Mahalanobis distance ``d <= 3`` and exactly 0
beyond, and ``a_i(x) = opacity_i * g_i(x)``.
"""

from __future__ import annotations

import glob
import numbers
import os
import threading
import time

import numba
import numpy as np

from splatter.core.args import check_choice
from splatter.core.choices import BLENDS
from splatter.core.thresholds import MAX_OPACITY
from splatter.raster import _kernels as _k

TILE = (_k.TILE_H, _k.TILE_W)
"""Screen tile (height, width) in pixels: tiles are the unit of parallel work."""

_MODES = {"over": _k.MODE_OVER, "add": _k.MODE_ADD, "absorb": _k.MODE_ABSORB}

TABLE_BYTES = 64 * 2**20
"""Most bytes one frame's row-profile tables may take.

A table holds a splat's row profile across its whole 3-sigma width, which is
unbounded (a puff ten times the frame, or a camera zoomed far in, asks for
gigabytes). The widest splats beyond this budget take the direct path (a
vector ``exp`` per chunk, no table), so the memory a frame needs is bounded
by its splat count and image size, never by how large a footprint is; the
pixels drawn are the same to float32 rounding.
"""

_SCRATCH = threading.local()
"""Per-thread reusable work arrays (see :func:`_scratch`)."""


def kernels_cached() -> bool:
    """True when numba's on-disk cache already holds compiled compositor kernels."""
    cache_dir = os.environ.get("NUMBA_CACHE_DIR")
    here = os.path.dirname(os.path.abspath(_k.__file__))
    pattern = (os.path.join(cache_dir, "**", "_kernels*.nbi") if cache_dir
               else os.path.join(here, "__pycache__", "_kernels*.nbi"))
    return bool(glob.glob(pattern, recursive=True))


def composite(means, covs, colors, opacities, *, shape, blend="over"):
    """Composite coloured Gaussian splats into premultiplied linear RGBA.

    Parameters
    ----------
    means : (N, 2) float ndarray
        Splat centres in pixels, ``(x, y)`` with x to the right and y down.
    covs : (N, 2, 2) float ndarray
        Symmetric positive-definite covariances in pixels squared.
    colors : (N, 3) float ndarray
        Linear straight (not premultiplied) colour of each splat.
    opacities : (N,) float ndarray
        Peak opacity of each splat, in ``[0, 1]``.
    shape : (int, int)
        ``(H, W)`` of the image.
    blend : {"over", "add", "absorb"}
        How splats combine; see :func:`composite_features`.

    Returns
    -------
    (H, W, 4) float32 ndarray
        Linear premultiplied RGBA, indexed ``[row, col, channel]``.

    Notes
    -----
    This is :func:`composite_features` with ``features = colors`` (K = 3).

    Examples
    --------
    One round splat of sigma 1 px and peak opacity 0.8, centred on pixel
    ``[2, 2]`` of a 5 x 5 image: alpha along the middle row falls off as
    ``0.8 exp(-d^2 / 2)``.

    >>> import numpy as np
    >>> img = composite(np.array([[2.5, 2.5]]), np.array([[[1.0, 0.0], [0.0, 1.0]]]),
    ...                 np.array([[1.0, 0.5, 0.25]]), np.array([0.8]), shape=(5, 5))
    >>> img.shape, img.dtype
    ((5, 5, 4), dtype('float32'))
    >>> np.round(img[2, :, 3], 4)
    array([0.1083, 0.4852, 0.8   , 0.4852, 0.1083], dtype=float32)
    >>> np.round(img[2, 2], 4)  # premultiplied: colour times alpha
    array([0.8, 0.4, 0.2, 0.8], dtype=float32)
    """
    colors = _as_float_array(colors, "colors")
    if colors.ndim != 2 or colors.shape[1] != 3:
        raise ValueError(f"colors: expected shape (N, 3), got {colors.shape}")
    return composite_features(means, covs, colors, opacities, shape=shape, blend=blend)


def composite_features(means, covs, features, opacities, *, shape, blend="over"):
    """Composite splats carrying K arbitrary channels, premultiplied like colour.

    Parameters
    ----------
    means : (N, 2) float ndarray
        Splat centres in pixels, ``(x, y)`` with x to the right and y down.
    covs : (N, 2, 2) float ndarray
        Symmetric positive-definite covariances in pixels squared.
    features : (N, K) float ndarray
        Per-splat straight values, K >= 1 (colour, screen velocity, depth,
        lit intensities, ...). Each is composited exactly as colour is.
    opacities : (N,) float ndarray
        Peak opacity of each splat, in ``[0, 1]``.
    shape : (int, int)
        ``(H, W)`` of the image, both >= 1.
    blend : {"over", "add", "absorb"}
        ``"over"``: premultiplied Porter-Duff over (Porter & Duff 1984), splats
        given back to front: ``C = f_i a_i + (1 - a_i) C``,
        ``A = a_i + (1 - a_i) A``.

        ``"add"``: order independent, ``C = sum f_i a_i``,
        ``A = 1 - prod(1 - a_i)``.

        ``"absorb"``: order-independent Beer-Lambert optical depth. The
        opacity is read as the peak opacity the splat would have alone, so its
        peak optical depth is ``tau0_i = -ln(1 - min(opacity_i, 1 - 1e-6))`` and
        ``tau_i(x) = tau0_i g_i(x)``; then ``T = exp(-sum tau_i)``,
        ``A = 1 - T`` and ``C = (sum f_i tau_i) / (sum tau_i) * A`` (zero where
        ``sum tau_i = 0``). A lone splat therefore has the same alpha at its
        centre as with ``"over"`` (``1 - exp(-tau0) = opacity``), and the same
        colour there; away from the centre absorb gives
        ``1 - (1 - opacity)^g`` rather than ``opacity g``. Callers fold any
        extinction multiplier (a puff's ``density``) into ``opacities``
        before the call.

    Returns
    -------
    (H, W, K + 1) float32 ndarray
        Premultiplied channels ``0..K-1`` and alpha in channel ``K``, indexed
        ``[row, col, channel]``.

    Raises
    ------
    TypeError
        A parameter has a non-numeric dtype, or ``shape`` / ``blend`` has the
        wrong type.
    ValueError
        Shapes disagree, values are not finite, a covariance is not symmetric
        positive definite, an opacity lies outside ``[0, 1]``, or ``blend`` is
        unknown.

    Notes
    -----
    Footprints are sampled at pixel centres (no area integration). Work is
    split into screen tiles of :data:`TILE` pixels processed in parallel;
    every pixel is computed by one thread with the same operations in the same
    order, so the result is bit-identical for any thread count. Weights are
    evaluated in float32 from a per-splat table of the row profile and one
    exponential of a linear function per row (relative error below 2e-6
    against float64 for sigma up to 60 px; see
    :mod:`splatter.raster._kernels`). Splats with a peak weight below 1e-30
    are skipped.
    """
    height, width = _check_shape(shape)
    if not isinstance(blend, str):
        raise TypeError(f"blend: expected a str, got {type(blend).__name__}")
    check_choice(blend, "blend", BLENDS)
    means = _as_float_array(means, "means")
    covs = _as_float_array(covs, "covs")
    features = _as_float_array(features, "features")
    opacities = _as_float_array(opacities, "opacities")
    if means.ndim != 2 or means.shape[1] != 2:
        raise ValueError(f"means: expected shape (N, 2), got {means.shape}")
    n = means.shape[0]
    if covs.shape != (n, 2, 2):
        raise ValueError(f"covs: expected shape ({n}, 2, 2), got {covs.shape}")
    if features.ndim != 2 or features.shape[0] != n or features.shape[1] < 1:
        raise ValueError(f"features: expected shape ({n}, K) with K >= 1, got {features.shape}")
    if opacities.shape != (n,):
        raise ValueError(f"opacities: expected shape ({n},), got {opacities.shape}")
    for name, arr in (("means", means), ("covs", covs), ("features", features),
                      ("opacities", opacities)):
        if not np.all(np.isfinite(arr)):
            raise ValueError(f"{name}: expected finite values, got NaN or infinity")
    sxx = covs[:, 0, 0]
    syy = covs[:, 1, 1]
    sxy = 0.5 * (covs[:, 0, 1] + covs[:, 1, 0])
    det = sxx * syy - sxy * sxy
    asym = np.abs(covs[:, 0, 1] - covs[:, 1, 0])
    if np.any(asym > 1e-6 * np.maximum(np.abs(sxx), np.abs(syy))):
        raise ValueError("covs: expected symmetric matrices, got covs[:, 0, 1] != covs[:, 1, 0]")
    if not (np.all(sxx > 0) and np.all(det > 0)):
        bad = int(np.flatnonzero(~((sxx > 0) & (det > 0)))[0])
        raise ValueError(f"covs: expected positive-definite matrices, got covs[{bad}] = "
                         f"{covs[bad].tolist()}")
    if np.any(opacities < 0) or np.any(opacities > 1):
        raise ValueError("opacities: expected values in [0, 1], got values outside")

    return _render(means, covs, features, opacities, height, width, blend)


def _render(means, covs, features, opacities, height, width, blend, times=None):
    """Lay out checked splats and run the tile kernel; the steps after the checks.

    times : dict, optional
        When given, the seconds each step took are added to it under
        ``"prepare"``, ``"tables"``, ``"binning"`` and ``"kernel"`` (for
        ``scripts/bench_composite.py``).
    """
    clock = _Clock(times)
    nk = features.shape[1]
    out = np.empty((height, width, nk + 1), dtype=np.float32)
    mode = _MODES[blend]
    if blend == "absorb":
        peaks = -np.log1p(-np.minimum(opacities, MAX_OPACITY))
    else:
        peaks = opacities
    peaks = np.ascontiguousarray(peaks, dtype=np.float32)
    n = means.shape[0]
    ntx = -(-width // _k.TILE_W)
    nty = -(-height // _k.TILE_H)
    boxes = _scratch("boxes", (n, 4), np.int32)
    _k._tile_boxes(_as_kernel_floats(means), _as_kernel_floats(covs), peaks, height, width,
                   boxes)
    offsets = np.empty(ntx * nty + 1, dtype=np.int64)
    starts = np.empty(ntx * nty + 1, dtype=np.int64)
    counts = np.empty((_k.BIN_CHUNKS, ntx * nty), dtype=np.int64)
    firsts = np.empty((_k.BIN_CHUNKS, ntx * nty), dtype=np.int64)
    _k._count_pairs(boxes, ntx, counts, firsts, offsets, starts)
    order = _scratch("order", (int(offsets[-1]),), np.int64)
    # Records: the splats that change a pixel, grouped by first tile.
    m = int(starts[-1])
    source = _scratch("source", (m,), np.int64)
    _k._bin(boxes, ntx, offsets, counts, starts, firsts, source, order)
    clock.lap("binning")
    params = _scratch("params", (m, _k.N_PARAMS), np.float64)
    ranges = _scratch("ranges", (m, _k.N_RANGES), np.int64)
    tlen = _scratch("tlen", (m,), np.int64)
    rec_peaks = _scratch("peaks", (m,), np.float32)
    rec_feats = _scratch("feats", (m, nk), np.float32)
    _k._prepare(_as_kernel_floats(means), _as_kernel_floats(covs), peaks,
                np.ascontiguousarray(features, dtype=np.float32), source, starts, firsts,
                height, width, params, ranges, tlen, rec_peaks, rec_feats)
    _direct_beyond(ranges, tlen, TABLE_BYTES // 4)
    toff = np.cumsum(tlen, out=_scratch("toff", (m,), np.int64))
    ranges[:, _k.N_RANGES - 1] = toff - tlen
    clock.lap("prepare")
    tables = _scratch("tables", (int(toff[-1]) if m else 0,), np.float32)
    _k._fill_tables(params, ranges, rec_peaks, tables)
    clock.lap("tables")
    # numba hands each thread one contiguous run of the loop; taking the tiles
    # in order of (tile row + tile column) mod threads (alternate bands of a
    # frame up to a tile wide, a checkerboard on wider ones) gives every
    # thread tiles from all over the image, so smoke that sits in one band or
    # one corner still keeps every thread busy.
    ty, tx = np.divmod(np.arange(ntx * nty), ntx)
    tile_order = np.argsort((ty + tx) % numba.get_num_threads(), kind="stable")
    kernel = _k.render_kernel(mode, nk == 3)
    kernel(params, ranges, tables, rec_feats, rec_peaks, offsets, order, tile_order, out)
    clock.lap("kernel")
    return out


def _direct_beyond(ranges, tlen, budget):
    """Send the widest splats to the direct path until the tables fit ``budget`` floats.

    ``ranges`` and ``tlen`` are :func:`splatter.raster._kernels._prepare`'s
    outputs, changed in place: a demoted splat gets half-length -1 and
    table length 0.
    """
    total = int(tlen.sum())
    if total <= budget:
        return
    order = np.argsort(-tlen, kind="stable")
    left = total - np.cumsum(tlen[order])
    cut = order[: int(np.searchsorted(-left, -budget)) + 1]  # the widest, until what is left fits
    ranges[cut, _k._KH] = -1
    tlen[cut] = 0


class _Clock:
    """Adds the seconds since the last lap to ``times[name]`` (does nothing without ``times``)."""

    def __init__(self, times):
        self.times = times
        self.t = time.perf_counter() if times is not None else 0.0

    def lap(self, name):
        if self.times is not None:
            now = time.perf_counter()
            self.times[name] = self.times.get(name, 0.0) + now - self.t
            self.t = now


def _scratch(name, shape, dtype):
    """An uninitialised ``dtype`` array of ``shape``, reused by the calling thread.

    A frame's per-splat arrays (parameters, ranges, row-profile tables, the
    binned order) take tens of MB for 200,000 splats; fresh arrays each call
    cost more in page faults (about 3 ms for the tables of 20,000 splats
    here) than filling them. Each Python thread keeps its own, so concurrent
    calls never share one; callers must not keep a result past the call.
    """
    size = int(np.prod(shape))
    buf = getattr(_SCRATCH, name, None)
    if buf is None or buf.shape[0] < size or buf.dtype != dtype:
        buf = np.empty(max(size, 1 << 16), dtype=dtype)
        setattr(_SCRATCH, name, buf)
    return buf[:size].reshape(shape)


def _as_kernel_floats(arr):
    """``arr`` as C-contiguous float32 or float64 (the dtypes the layout kernel is built for)."""
    if arr.dtype == np.float32 or arr.dtype == np.float64:
        return np.ascontiguousarray(arr)
    return np.ascontiguousarray(arr, dtype=np.float64)


def _check_shape(shape):
    """Validate ``shape`` as ``(H, W)`` of positive ints."""
    if not isinstance(shape, (tuple, list)) or len(shape) != 2:
        raise TypeError(f"shape: expected a (height, width) pair, got {shape!r}")
    for v in shape:
        if isinstance(v, bool) or not isinstance(v, numbers.Integral):
            raise TypeError(f"shape: expected integers, got {shape!r}")
        if v < 1:
            raise ValueError(f"shape: expected positive sizes, got {tuple(shape)}")
    return int(shape[0]), int(shape[1])


def _as_float_array(value, name):
    """``value`` as an ndarray of a real numeric dtype (not bool), else TypeError."""
    arr = np.asarray(value)
    if arr.dtype == bool or not (np.issubdtype(arr.dtype, np.floating)
                                 or np.issubdtype(arr.dtype, np.integer)):
        raise TypeError(f"{name}: expected a real numeric array, got dtype {arr.dtype}")
    return arr
