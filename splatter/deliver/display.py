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

import numpy as np

from splatter.core.args import check_choice, check_image, fail
from splatter.core.choices import COLOR_ENCODINGS, PNG_ALPHAS, PNG_BITS
from splatter.core.colorspace import srgb_encode

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
    check_choice(bits, "bits", PNG_BITS)
    top = float(2**bits - 1)
    v = np.array(x, dtype=np.float64)  # one working copy, then in place
    np.nan_to_num(v, copy=False, nan=0.0)
    np.clip(v, 0.0, 1.0, out=v)
    v *= top
    v += 0.5
    np.floor(v, out=v)
    return v.astype(np.uint8 if bits == 8 else np.uint16)
