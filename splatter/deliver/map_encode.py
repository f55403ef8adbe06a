"""Data-map encodings: motion, depth and normal values to [0, 1] texture values.

The same functions encode map sheets and per-frame map PNGs, so both hold
the same values for the same texel. The clip-wide ranges (motion scale,
depth near and far) are measured on texels whose alpha exceeds
:data:`MAP_COVERED`.

Examples
--------
>>> encode_signed([0.0, 0.05, -0.2], 0.1).tolist()
[0.5, 0.75, 0.0]
>>> encode_normal([0.0, 0.0, 1.0]).tolist()  # flat normal, glTF 2.0 convention
[0.5, 0.5, 1.0]
"""

from __future__ import annotations

import math

import numpy as np

from splatter.core.thresholds import VISIBLE_ALPHA

__all__ = ["encode_signed", "encode_depth", "encode_normal", "fade_to_neutral", "motion_scale", "depth_range",
           "encode_motion_rgb", "encode_depth_grey", "MAP_COVERED", "MOTION_ENCODING", "LIGHT_RELIGHT"]

MAP_COVERED = VISIBLE_ALPHA
"""Alpha above which a texel counts when a map's range (motion scale, depth near and far) is measured."""

MOTION_ENCODING = "0.5+0.5*clamp(d/s,-1,1)"
"""How a motion texel ``c`` in [0, 1] reads back: ``d = (2c - 1) s``."""

LIGHT_RELIGHT = ("L = x*x*(x>=0 ? pos.r : neg.r) + y*y*(y>=0 ? pos.g : neg.g) + z*z*(z>=0 ? pos.b : neg.b); "
                 "colour = base * intensity * (ambient * ambient_colour + (1 - ambient) * light_colour * L)")
"""The relighting formula stored with the light-direction maps (see ``docs/sheet-metadata.md``).

``(x, y, z)`` is the unit direction from the smoke toward the light in the
camera's axes (+x right, +y up, +z toward the viewer); ``base`` is the
unlit colour. For a light along an axis it picks one map exactly; the
squared components sum to 1, so smoke that no side shadows relights
uniformly from every direction.
"""

_MAP_FADE = 1.0 / 32.0  # motion and depth texels fade to neutral below this alpha


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


def normal_convention(y_down: bool) -> str:
    """What a normal map's stored y holds, as the metadata and EXR attribute say it.

    >>> normal_convention(False), normal_convention(True)
    ('+y up', '+y down')
    """
    return "+y down" if y_down else "+y up"


def encode_normal(n):
    """Encode unit normals as colours.

    Parameters
    ----------
    n : (..., 3) float ndarray
        Normals as the map holds them: +X right, +Z toward the viewer, +Y in
        the look's ``normal_y`` convention (the renderer flips y before this).

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
    return np.clip(n * 0.5 + 0.5, 0.0, 1.0).astype(np.float32)


def fade_to_neutral(value, alpha, neutral):
    """Blend a straight map value toward ``neutral`` where the smoke is nearly transparent.

    A map holds each texel's alpha-weighted mean, which stays at full
    strength out to a puff's faint 3-sigma rim; fading it below alpha 1/32
    keeps those rims from showing as hard discs in the map, where nothing
    can be seen.

    Parameters
    ----------
    value : (H, W) or (H, W, C) float ndarray
    alpha : (H, W) float ndarray
    neutral : float or (C,) float

    Returns
    -------
    float32 ndarray, the shape of ``value``

    Examples
    --------
    >>> fade_to_neutral(np.array([1.0, 1.0]), np.array([1.0, 1.0 / 64]), 0.0).tolist()
    [1.0, 0.5]
    """
    value = np.asarray(value, dtype=np.float64)
    w = np.minimum(1.0, np.asarray(alpha, dtype=np.float64) / _MAP_FADE)
    if value.ndim == w.ndim + 1:
        w = w[..., None]
    return (neutral + (value - neutral) * w).astype(np.float32)


def _round_up_2sig(x: float) -> float:
    """Round up to two significant digits, so the stored scale reads cleanly."""
    e = math.floor(math.log10(x)) - 1
    return round(math.ceil(x / 10.0**e) * 10.0**e, -e)  # round(): 0.013, not 0.013000000000000001


def motion_scale(motions, alphas):
    """The clip's largest displacement on covered texels, rounded up to two significant digits.

    Parameters
    ----------
    motions : sequence of (H, W, 2) float ndarray
        Displacement per frame (any units).
    alphas : sequence of (H, W) float ndarray

    Returns
    -------
    float
        At least 1e-6, so a still clip still has a valid scale.

    Examples
    --------
    >>> motion_scale([np.full((1, 1, 2), -0.01234)], [np.ones((1, 1))])
    0.013
    """
    peak = max((float(np.abs(d[a > MAP_COVERED]).max(initial=0.0)) for d, a in zip(motions, alphas)), default=0.0)
    return _round_up_2sig(max(peak, 1e-6))


def depth_range(depths, alphas):
    """Nearest and farthest covered view depth of the clip (``far > near``).

    Examples
    --------
    >>> depth_range([np.array([[3.0, 9.0]])], [np.array([[1.0, 0.0]])])
    (3.0, 4.0)
    """
    near, far = math.inf, -math.inf
    for z, a in zip(depths, alphas):  # one frame at a time: depths may be a generator
        covered = np.asarray(z)[np.asarray(a) > MAP_COVERED]
        if covered.size:
            near, far = min(near, float(covered.min())), max(far, float(covered.max()))
    if near == math.inf:
        near, far = 0.0, 1.0
    return near, (far if far > near else near + 1.0)


def encode_motion_rgb(d, alpha, scale):
    """Motion as an RGB texture: red = x, green = y, blue 0.

    Parameters
    ----------
    d : (H, W, 2) float ndarray
        Displacement per frame, x right and y down.
    alpha : (H, W) float ndarray
    scale : float
        Displacement stored as 1 (see :data:`MOTION_ENCODING`).

    Returns
    -------
    (H, W, 3) float32 ndarray
        ``encode_signed`` of the faded displacement in red and green, 0 in blue.

    Examples
    --------
    >>> encode_motion_rgb(np.array([[[0.1, -0.1]]]), np.ones((1, 1)), 0.2)[0, 0].tolist()
    [0.75, 0.25, 0.0]
    """
    d = np.asarray(d)
    out = np.zeros(d.shape[:2] + (3,), dtype=np.float32)
    out[..., :2] = encode_signed(fade_to_neutral(d, alpha, 0.0), scale)
    return out


def encode_depth_grey(z, alpha, near, far):
    """Depth as one grey channel: ``(z - near) / (far - near)``, 1 where there is no smoke.

    Returns
    -------
    (H, W, 1) float32 ndarray

    Examples
    --------
    >>> encode_depth_grey(np.array([[2.0, 0.0]]), np.array([[1.0, 0.0]]), 1.0, 3.0)[..., 0].tolist()
    [[0.5, 1.0]]
    """
    a = np.asarray(alpha)
    return fade_to_neutral(np.where(a > 0, encode_depth(z, near, far), 1.0), a, 1.0)[..., None]
