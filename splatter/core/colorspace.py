"""sRGB transfer functions (IEC 61966-2-1:1999) and colour parsing helpers.

A leaf module: the look loader uses it to decode ``"#rrggbb"`` colours to
linear light, and the encoders use it to write display-referred PNGs.
"""

from __future__ import annotations

import numpy as np

__all__ = ["srgb_encode", "srgb_decode", "hex_to_linear"]

LINEAR_KNEE = 0.0031308
"""Linear value at or below which sRGB encoding is the straight line ``12.92 L`` (IEC 61966-2-1)."""
_ENCODED_KNEE = 0.04045


def srgb_encode(linear):
    """Encode linear light to sRGB values in [0, 1].

    Parameters
    ----------
    linear : array_like of float
        Linear-light values; clipped to [0, 1] before encoding.

    Returns
    -------
    ndarray
        Encoded values, same shape; float32 for float32 input (computed in
        float32), else float64.
    """
    x = np.asarray(linear)
    # float32 images are encoded in float32 (about 1e-7 relative error, far
    # below a 16-bit step); everything else in float64.
    dtype = np.float32 if x.dtype == np.float32 else np.float64
    x = np.clip(x.astype(dtype, copy=False), dtype(0.0), dtype(1.0))
    p = np.power(x, dtype(1.0 / 2.4))
    high = p + dtype(0.055) * (p - dtype(1.0))  # = 1.055 p - 0.055, exactly 1 at 1
    return np.where(x <= dtype(LINEAR_KNEE), dtype(12.92) * x, high).astype(dtype, copy=False)


def srgb_decode(encoded):
    """Decode sRGB values in [0, 1] to linear light.

    Parameters
    ----------
    encoded : array_like of float
        sRGB-encoded values; clipped to [0, 1].

    Returns
    -------
    ndarray
        Linear values, same shape; float32 for float32 input, else float64.
    """
    v = np.asarray(encoded)
    dtype = np.float32 if v.dtype == np.float32 else np.float64
    v = np.clip(v.astype(np.float64), 0.0, 1.0)
    out = np.where(v <= _ENCODED_KNEE, v / 12.92, np.power((v + 0.055) / 1.055, 2.4))
    return out.astype(dtype)


def hex_to_linear(text: str):
    """Parse ``"#rrggbb"`` as sRGB and return linear ``(r, g, b)`` floats.

    Returns ``None`` when ``text`` is not of that form, so the caller can
    raise a :class:`~splatter.core.errors.LookError` naming the key.
    """
    if not (isinstance(text, str) and len(text) == 7 and text[0] == "#"):
        return None
    try:
        codes = [int(text[i : i + 2], 16) for i in (1, 3, 5)]
    except ValueError:
        return None
    return tuple(float(c) for c in srgb_decode(np.array(codes, dtype=np.float64) / 255.0))
