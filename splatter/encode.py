"""Display encoding: linear premultiplied float images to file-ready values.

The renderer produces linear-light, premultiplied RGBA float32 images of shape
``(H, W, 4)`` indexed ``[row, col, channel]``. This module turns them into the
values the writers store:

* :func:`unpremultiply` and :func:`to_display` (exposure, straight or
  premultiplied alpha, sRGB or linear colour), :func:`quantize` to integer codes;
* :func:`dilate_colour`: fill the colour of fully transparent texels from the
  nearest covered texel so texture filtering does not pull in black;
* map encoders for data textures: :func:`encode_signed` (motion vectors),
  :func:`encode_depth`, :func:`encode_normal`.

Nothing here reads or writes files.
"""

from __future__ import annotations

import numba
import numpy as np

from splatter.colorspace import srgb_encode
from splatter.jit import PARALLEL

__all__ = [
    "unpremultiply",
    "to_display",
    "quantize",
    "dilate_colour",
    "encode_signed",
    "encode_depth",
    "encode_normal",
]

_ALPHAS = ("straight", "premultiplied")
_COLORS = ("srgb", "linear")


def _check_rgba(rgba, name="rgba"):
    a = np.asarray(rgba)
    if a.ndim != 3 or a.shape[2] != 4:
        raise ValueError(f"{name}: expected an (H, W, 4) array, got shape {a.shape}")
    if not np.issubdtype(a.dtype, np.floating):
        raise TypeError(f"{name}: expected a float array, got {a.dtype}")
    return a.astype(np.float32, copy=False)


def unpremultiply(rgba):
    """Divide colour by alpha: premultiplied to straight (unassociated) alpha.

    Parameters
    ----------
    rgba : (H, W, 4) float ndarray
        Premultiplied RGBA.

    Returns
    -------
    (H, W, 4) float32 ndarray
        Straight RGBA; alpha unchanged. Where alpha is 0 the colour is 0
        (the W3C PNG specification's rule for fully transparent pixels
        is that their colour carries no meaning; 0 is the tidy choice).
    """
    a = _check_rgba(rgba)
    out = np.zeros_like(a, dtype=np.float32)
    alpha = a[..., 3]
    covered = alpha > 0
    out[..., 3] = alpha
    # Divide only where covered: no 0/0 warnings, and alpha-0 colour stays 0.
    np.divide(a[..., :3], alpha[..., None], out=out[..., :3], where=covered[..., None])
    return out


def to_display(rgba_premult_linear, *, alpha="straight", color="srgb", exposure=0.0):
    """Apply exposure and encode colour and alpha for a display-referred file.

    Parameters
    ----------
    rgba_premult_linear : (H, W, 4) float ndarray
        Linear-light premultiplied RGBA.
    alpha : {"straight", "premultiplied"}
        Alpha association of the result.
    color : {"srgb", "linear"}
        ``"srgb"`` applies the IEC 61966-2-1 transfer function to colour;
        ``"linear"`` leaves it linear. Alpha is never transfer-encoded.
    exposure : float
        Stops: colour is multiplied by ``2 ** exposure`` before encoding.

    Returns
    -------
    (H, W, 4) float32 ndarray
        Values in [0, 1].

    Notes
    -----
    Straight colour (premultiplied / alpha) above 1 is clipped to 1; alpha is
    clipped to [0, 1]. A straight result cannot hold light at alpha 0 (pure
    emission from additive blending); it is dropped there.

    For ``alpha="premultiplied", color="srgb"`` the straight colour is encoded
    and then multiplied by alpha: ``out_rgb = srgb(straight) * alpha``. This is
    the usual convention for premultiplied 8-bit textures (common practice):
    the shader then composites ``src + (1 - a) * dst`` on encoded values.
    For ``color="linear"`` premultiplied output is simply the clipped input.
    """
    if alpha not in _ALPHAS:
        raise ValueError(f"alpha: expected one of {_ALPHAS}, got {alpha!r}")
    if color not in _COLORS:
        raise ValueError(f"color: expected one of {_COLORS}, got {color!r}")
    if not np.isfinite(exposure):
        raise ValueError(f"exposure: expected a finite number of stops, got {exposure!r}")
    a = _check_rgba(rgba_premult_linear, "rgba_premult_linear")
    scaled = a.copy()
    if exposure != 0.0:
        scaled[..., :3] *= np.float32(2.0 ** float(exposure))
    np.clip(scaled[..., 3], 0.0, 1.0, out=scaled[..., 3])
    if color == "linear" and alpha == "premultiplied":
        # Keep colour <= alpha so the result stays a valid premultiplied pixel.
        out = scaled
        np.clip(out[..., :3], 0.0, out[..., 3:4], out=out[..., :3])
        return out
    out = unpremultiply(scaled)
    np.clip(out[..., :3], 0.0, 1.0, out=out[..., :3])
    if color == "srgb":
        out[..., :3] = srgb_encode(out[..., :3])
    if alpha == "premultiplied":
        out[..., :3] *= out[..., 3:4]
    return out


def quantize(x, bits):
    """Round values in [0, 1] to unsigned integer codes.

    Parameters
    ----------
    x : (...) float ndarray
        Values; clipped to [0, 1]. NaN becomes 0.
    bits : {8, 16}
        Code width.

    Returns
    -------
    (...) uint8 or uint16 ndarray
        ``floor(x * (2**bits - 1) + 0.5)``: round half up.
    """
    if bits not in (8, 16):
        raise ValueError(f"bits: expected 8 or 16, got {bits!r}")
    top = float(2**bits - 1)
    v = np.array(x, dtype=np.float64)  # one working copy, then in place
    np.nan_to_num(v, copy=False, nan=0.0)
    np.clip(v, 0.0, 1.0, out=v)
    v *= top
    v += 0.5
    np.floor(v, out=v)
    return v.astype(np.uint8 if bits == 8 else np.uint16)


# --- dilation -------------------------------------------------------------


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


# --- data maps ------------------------------------------------------------


def encode_signed(x, strength):
    """Encode signed values into [0, 1] around 0.5.

    Parameters
    ----------
    x : (...) float ndarray
        Signed values (for example a UV displacement per frame).
    strength : float
        Value that maps to 1 (and ``-strength`` to 0); must be > 0.

    Returns
    -------
    (...) float32 ndarray
        ``0.5 + 0.5 * clip(x / strength, -1, 1)`` (common practice for motion
        vectors in 8-bit maps); 0 encodes as exactly 0.5.
    """
    if not (np.isfinite(strength) and strength > 0):
        raise ValueError(f"strength: expected a finite number > 0, got {strength!r}")
    v = np.asarray(x, dtype=np.float64) / float(strength)
    v = np.nan_to_num(v, nan=0.0, posinf=1.0, neginf=-1.0)
    return (0.5 + 0.5 * np.clip(v, -1.0, 1.0)).astype(np.float32)


def encode_depth(z, near, far):
    """Encode view depth linearly into [0, 1].

    Parameters
    ----------
    z : (...) float ndarray
        Depth along the view axis, world units. Non-finite values (``inf`` or
        ``nan``) mark background.
    near, far : float
        Depths that map to 0 and 1; ``far > near``.

    Returns
    -------
    (...) float32 ndarray
        ``clip((z - near) / (far - near), 0, 1)``; background is 1 (as far
        as possible).
    """
    if not (np.isfinite(near) and np.isfinite(far) and far > near):
        raise ValueError(f"near, far: expected finite numbers with far > near, got {near!r}, {far!r}")
    z = np.asarray(z, dtype=np.float64)
    v = (z - float(near)) / (float(far) - float(near))
    v = np.where(np.isfinite(v), np.clip(v, 0.0, 1.0), 1.0)
    return v.astype(np.float32)


def encode_normal(n, *, y_down=False):
    """Encode unit normals as colours.

    Parameters
    ----------
    n : (..., 3) float ndarray
        Normals in image space: +X right, +Y up, +Z toward the viewer.
    y_down : bool
        Flip the green channel (the "+Y down" convention some engines use).

    Returns
    -------
    (..., 3) float32 ndarray
        ``n * 0.5 + 0.5`` clipped to [0, 1]; a flat normal (0, 0, 1) encodes
        as (0.5, 0.5, 1.0). This is the glTF 2.0 normal-texture convention.
    """
    n = np.asarray(n, dtype=np.float64)
    if n.ndim < 1 or n.shape[-1] != 3:
        raise ValueError(f"n: expected an (..., 3) array, got shape {n.shape}")
    n = np.nan_to_num(n, nan=0.0)
    if y_down:
        n = n * np.array([1.0, -1.0, 1.0])
    return np.clip(n * 0.5 + 0.5, 0.0, 1.0).astype(np.float32)
