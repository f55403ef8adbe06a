"""Display encoding: linear premultiplied float images to file-ready values.

The renderer produces linear-light, premultiplied RGBA float32 images of shape
``(H, W, 4)`` indexed ``[row, col, channel]``. :func:`to_display` applies
exposure and turns them into straight or premultiplied alpha with sRGB or
linear colour; :func:`unpremultiply` divides colour by alpha; :func:`quantize`
rounds to integer codes. Nothing here reads or writes files.

Examples
--------
>>> import numpy as np
>>> px = np.array([[[0.25, 0.25, 0.25, 0.5]]], dtype=np.float32)  # premultiplied linear
>>> quantize(to_display(px), 8)[0, 0].tolist()  # straight linear 0.5 -> sRGB code 188
[188, 188, 188, 128]
"""

from __future__ import annotations

import numba
import numpy as np

from splatter.core.args import check_choice, check_image, fail
from splatter.core.choices import COLOR_ENCODINGS, PNG_ALPHAS, PNG_BITS
from splatter.core.colorspace import LINEAR_KNEE
from splatter.core.jit import KERNEL

__all__ = ["unpremultiply", "to_display", "quantize"]


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
    a = check_image(rgba, "rgba")
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
    check_choice(alpha, "alpha", PNG_ALPHAS)
    check_choice(color, "color", COLOR_ENCODINGS)
    if not np.isfinite(exposure):
        fail("exposure", "a finite number of stops", exposure)
    a = check_image(rgba_premult_linear, "rgba_premult_linear")
    scaled = a.copy()
    if exposure != 0.0:
        scaled[..., :3] *= np.float32(2.0 ** float(exposure))
    np.clip(scaled[..., 3], 0.0, 1.0, out=scaled[..., 3])
    if color == "linear" and alpha == "premultiplied":
        # Keep colour <= alpha so the result stays a valid premultiplied pixel.
        out = scaled
        np.clip(out[..., :3], 0.0, out[..., 3:4], out=out[..., :3])
        return out
    h, w, _ = scaled.shape
    colour = np.empty((h, w, 3), dtype=np.float32)
    straight_alpha = np.empty((h, w), dtype=np.float32)
    _straight_clipped(scaled, colour, straight_alpha)
    out = np.empty((h, w, 4), dtype=np.float32)
    if color == "linear":  # straight: premultiplied linear returned above
        out[..., :3] = colour
        out[..., 3] = straight_alpha
        return out
    power = np.power(colour, _F32_INV_GAMMA)  # numpy's float32 power, as srgb_encode takes it
    _srgb_finish(colour, power, straight_alpha, alpha == "premultiplied", out)
    return out


# ---------------------------------------------------------------------------------------------------------------
# Straight and sRGB values in two passes over the image (the frame writer runs them beside the render; as
# a chain of numpy operations they made ten). Every value is the one the numpy chain gives: the same float32
# divisions and products, NaN kept where np.clip keeps it, and the power itself left to numpy.

_F32_0 = np.float32(0.0)
_F32_1 = np.float32(1.0)
_F32_KNEE = np.float32(LINEAR_KNEE)
_F32_SLOPE = np.float32(12.92)
_F32_OFFSET = np.float32(0.055)
_F32_INV_GAMMA = np.float32(1.0 / 2.4)


@numba.njit(inline="always", **KERNEL)
def _clip01(v):
    """``np.clip(v, 0, 1)`` for a float32 (a NaN stays NaN)."""
    if v < _F32_0:
        return _F32_0
    if v > _F32_1:
        return _F32_1
    return v


@numba.njit(**KERNEL)
def _straight_clipped(rgba, colour, alpha):
    """Straight colour clipped to [0, 1] (0 where alpha is not above 0) and alpha, of an image
    whose alpha is already clipped: :func:`unpremultiply` then ``np.clip``."""
    h, w, _ = rgba.shape
    for y in range(h):
        for x in range(w):
            a = rgba[y, x, 3]
            alpha[y, x] = a
            for k in range(3):
                colour[y, x, k] = _clip01(rgba[y, x, k] / a) if a > _F32_0 else _F32_0


@numba.njit(**KERNEL)
def _srgb_finish(colour, power, alpha, premultiply, out):
    """``srgb_encode``'s two branches from ``power = colour ** (1 / 2.4)``, then alpha (and its product)."""
    h, w, _ = colour.shape
    for y in range(h):
        for x in range(w):
            a = alpha[y, x]
            for k in range(3):
                c = colour[y, x, k]
                p = power[y, x, k]
                v = _F32_SLOPE * c if c <= _F32_KNEE else p + _F32_OFFSET * (p - _F32_1)
                out[y, x, k] = v * a if premultiply else v
            out[y, x, 3] = a


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
    check_choice(bits, "bits", PNG_BITS)
    x = np.asarray(x)
    out = np.empty(x.shape, dtype=np.uint8 if bits == 8 else np.uint16)
    if x.dtype in (np.float32, np.float64):
        _quantize(x.reshape(-1), float(2**bits - 1), out.reshape(-1))
    else:
        _quantize(x.astype(np.float64).reshape(-1), float(2**bits - 1), out.reshape(-1))
    return out


@numba.njit(**KERNEL)
def _quantize(x, top, out):
    """``out = floor(clip(nan_to_num(x), 0, 1) * top + 0.5)`` in float64, value by value."""
    for i in range(x.shape[0]):
        v = np.float64(x[i])
        if v != v:
            v = 0.0
        v = min(max(v, 0.0), 1.0)
        out[i] = np.floor(v * top + 0.5)
