"""Data-map encodings: motion, depth and normal values to [0, 1] texture values.

Examples
--------
>>> encode_signed([0.0, 0.05, -0.2], 0.1).tolist()
[0.5, 0.75, 0.0]
>>> encode_normal([0.0, 0.0, 1.0]).tolist()  # flat normal, glTF 2.0 convention
[0.5, 0.5, 1.0]
"""

from __future__ import annotations

import numpy as np

__all__ = ["encode_signed", "encode_depth", "encode_normal"]


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
