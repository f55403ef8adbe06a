"""Turn one frame's puffs into screen splats: the project stage.

Takes the simulation's per-puff arrays (any object with the
:class:`~splatter.sim.driver.FrameState` fields; this module does not import the
simulation) and a :class:`~splatter.view.camera.Camera`, and returns what the
compositor needs: means, covariances, per-splat feature channels and
opacities, culled and ordered back to front.

Feature channels, in this order:

* ``r, g, b``: lit straight colour plus glow (glow adds emitted light in
  proportion to the puff's coverage and is never shadowed);
* ``motion.x, motion.y``: screen velocity in pixels per frame (x right,
  y down), when motion maps are asked for;
* ``depth.z``: view depth in world units, when depth maps are asked for;
* ``lightdirs_pos.x/y/z``, ``lightdirs_neg.x/y/z``: light reaching each puff
  from the camera's +x, +y, +z and -x, -y, -z sides (x right, y up, z toward
  the viewer), when light-direction maps are asked for.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Dict, Optional, Tuple

import numpy as np

from splatter.core.thresholds import MAX_OPACITY
from splatter.view._kernels import _gather_splats, _radix_order
from splatter.view.camera import Camera, footprint_ratio, project_puffs

__all__ = ["ScreenSplats", "make_splats", "effective_opacity", "feature_layout", "LIGHTDIR_CHANNELS"]


@dataclass(frozen=True)
class ScreenSplats:
    """Splats ready for :func:`splatter.raster.compositor.composite_features`.

    Attributes
    ----------
    means : (N, 2) float32 ndarray
    covs : (N, 2, 2) float32 ndarray
    features : (N, K) float32 ndarray
    opacities : (N,) float32 ndarray
    depth : (N,) float32 ndarray
    channels : dict of str to int
        Feature name to column (``"r"``, ``"motion.x"``, ...).
    """

    means: np.ndarray
    covs: np.ndarray
    features: np.ndarray
    opacities: np.ndarray
    depth: np.ndarray
    channels: Dict[str, int]


_NO_LIGHT = np.zeros((0, 3))

LIGHTDIR_CHANNELS = tuple(f"lightdirs_{sign}.{axis}" for sign in ("pos", "neg") for axis in "xyz")
"""Feature channels of the light-direction maps, in the column order of ``light_puffs``' factors."""


def feature_layout(*, motion: bool, depth: bool, lightdirs: bool) -> Dict[str, int]:
    """Column of each feature channel for the maps asked for."""
    names = ["r", "g", "b"]
    if motion:
        names += ["motion.x", "motion.y"]
    if depth:
        names += ["depth.z"]
    if lightdirs:
        names += list(LIGHTDIR_CHANNELS)
    return {n: i for i, n in enumerate(names)}


def effective_opacity(opacity, density, blend: str):
    """Peak opacity handed to the compositor.

    ``absorb`` reads opacity as the puff's own peak opacity and ``density``
    multiplies its optical depth: ``1 - (1 - opacity) ** density``. The other
    modes ignore ``density``.
    """
    opacity = np.clip(np.asarray(opacity, dtype=np.float64), 0.0, 1.0)
    if blend != "absorb":
        return opacity
    return 1.0 - np.power(1.0 - np.minimum(opacity, MAX_OPACITY), np.asarray(density, dtype=np.float64))


def seen_opacity(state, blend: str, camera: Camera) -> np.ndarray:
    """Each puff's peak opacity as composited: the blend's density rule, then thinning.

    The one rule behind the splats, ``camera.fit`` and ``check``'s border
    warnings, so all three see the same smoke.

    Parameters
    ----------
    state : FrameState-like
        ``opacity``, ``density`` and, for thinning, ``size``, ``aspect``,
        ``quat``, ``deform`` (``None`` for rigid puffs).
    blend : {"over", "add", "absorb"}
    camera : Camera

    Returns
    -------
    (M,) float64 ndarray
    """
    opac = effective_opacity(state.opacity, state.density, blend)
    if getattr(state, "deform", None) is not None:
        opac = thin_stretched(opac, state, camera)
    return opac


def thin_stretched(opacity, state, camera: Camera) -> np.ndarray:
    """Peak opacity of puffs the flow has stretched across the view, their smoke kept.

    A puff keeps its volume and its smoke as the flow deforms it
    (``det F = 1``), so when its footprint on screen grows, the smoke seen
    through each point thins in proportion: the line integral of a 3D
    Gaussian through its centre is ``rho0 sqrt(2 pi det S / det S2)`` with
    ``S2`` the covariance across the view (the Beer-Lambert formula in
    Pharr, Jakob and Humphreys, *Physically Based Rendering*, 4th ed., 11.2,
    for a Gaussian medium). Optical depth is scaled by
    ``r = sqrt(det S2_rigid / det S2_deformed)`` where that is below 1:
    ``a' = 1 - (1 - a)**r``. A filament drawn out by the flow fades as it
    thins, as a real wisp does, instead of standing out as a needle. A puff
    squeezed across the view (``r > 1``) is left as it is, so no bright dots
    appear. The view plane is the camera's (right, up) plane.

    Parameters
    ----------
    opacity : (M,) float64 ndarray
    state : FrameState-like
        ``size``, ``aspect``, ``quat``, ``deform (M, 3, 3)``.
    camera : Camera

    Returns
    -------
    (M,) float64 ndarray
        Unchanged (bit for bit) where ``F`` does not widen the footprint.
    """
    right, up, _ = camera.axes
    ratio = footprint_ratio(state.size, state.aspect, state.quat, state.deform, right, up)
    thin = ratio < 1.0
    out = np.array(opacity, dtype=np.float64)
    out[thin] = 1.0 - np.power(1.0 - np.minimum(out[thin], MAX_OPACITY), ratio[thin])
    return out


def make_splats(
    state,
    camera: Camera,
    *,
    blend: str,
    fps: float,
    channels: Dict[str, int],
    light_factor: Optional[np.ndarray] = None,
    lightdir_factors: Optional[np.ndarray] = None,
) -> ScreenSplats:
    """Project one frame's puffs to screen splats, culled and ordered.

    Parameters
    ----------
    state : FrameState-like
        Per-puff arrays ``pos (M, 3)``, ``vel (M, 3)``, ``size``, ``aspect``,
        ``quat (M, 4)``, ``stretch``, ``opacity``, ``density``, ``color (M, 3)``,
        ``glow (M, 3)``, ordered by source and spawn slot (as
        :func:`splatter.sim.driver.simulate` yields them).
    camera : Camera
    blend : {"over", "add", "absorb"}
    fps : float
        Frames per second, to express screen motion per frame.
    channels : dict
        From :func:`feature_layout`.
    light_factor : (M, 3) float ndarray, optional
        Linear light reaching each puff (multiplies its colour); ``None`` is unlit.
    lightdir_factors : (M, 6) float ndarray, optional
        Lighting factors for the six light-direction maps.

    Returns
    -------
    ScreenSplats
        Back to front for ``"over"`` (farthest first; ties broken by source
        and spawn slot so an exact loop's seam frames match bit for bit).
    """
    k = len(channels)
    m = len(state.size)
    if m == 0:
        return _empty(k, channels)
    screen = project_puffs(camera, state.pos, state.size, state.aspect, state.quat, state.vel, state.stretch,
                           state.deform)
    keep = np.asarray(screen.visible, dtype=bool)
    opac = seen_opacity(state, blend, camera)
    keep &= opac > 0.0
    idx = np.nonzero(keep)[0]
    if idx.size == 0:
        return _empty(k, channels)
    depth = np.asarray(screen.depth)[idx]
    if blend == "over":
        # The simulation hands puffs over ordered by (source, slot, id), so a
        # stable sort on depth breaks ties the same way at an exact loop's seam.
        order = farthest_first(depth)
        idx = idx[order]
        depth = depth[order]
    feats = np.empty((idx.size, k), dtype=np.float32)
    means = np.empty((idx.size, 2), dtype=np.float32)
    covs = np.empty((idx.size, 2, 2), dtype=np.float32)
    depth32 = np.empty(idx.size, dtype=np.float32)
    opac32 = np.empty(idx.size, dtype=np.float32)
    # One pass: the kept puffs' screen values in draw order, their lit colour plus glow.
    _gather_splats(idx, screen.means, screen.covs, screen.depth, np.ascontiguousarray(opac, dtype=np.float64),
                   np.ascontiguousarray(state.color, dtype=np.float64),
                   _NO_LIGHT if light_factor is None else np.ascontiguousarray(light_factor, dtype=np.float64),
                   np.ascontiguousarray(state.glow, dtype=np.float64), means, covs, depth32, opac32, feats)
    if "motion.x" in channels:
        vel_px = camera.project_velocity(state.pos[idx], state.vel[idx]) / fps
        feats[:, channels["motion.x"]] = vel_px[:, 0]
        feats[:, channels["motion.y"]] = vel_px[:, 1]
    if "depth.z" in channels:
        feats[:, channels["depth.z"]] = depth
    if LIGHTDIR_CHANNELS[0] in channels:
        c0 = channels[LIGHTDIR_CHANNELS[0]]
        feats[:, c0 : c0 + 6] = np.asarray(lightdir_factors, dtype=np.float32)[idx]
    return ScreenSplats(means=means, covs=covs, features=feats, opacities=opac32, depth=depth32, channels=channels)


def farthest_first(depth) -> np.ndarray:
    """``np.argsort(-depth, kind="stable")``, by a radix sort of the float32 depths' bits.

    IEEE 754 floats order like their bit patterns read as sign and magnitude:
    flipping every bit of a negative one and the sign bit of a positive one
    gives unsigned integers in the floats' order (a common practice of radix
    sorting floats).  ``-0`` is taken as ``+0`` and NaN goes last, as in numpy.

    Parameters
    ----------
    depth : (N,) float32 ndarray

    Returns
    -------
    (N,) int64 ndarray

    Examples
    --------
    >>> farthest_first(np.array([1.0, 3.0, 2.0, 3.0], dtype=np.float32)).tolist()
    [1, 3, 2, 0]
    """
    key = -np.asarray(depth, dtype=np.float32) + np.float32(0.0)  # the sort key; -0 made +0
    bits = key.view(np.uint32)
    keys = np.where(bits >> np.uint32(31) != 0, ~bits, bits | np.uint32(0x80000000))
    keys[np.isnan(key)] = np.uint32(0xFFFFFFFF)
    if keys.size == 0:
        return np.zeros(0, dtype=np.int64)
    return _radix_order(np.ascontiguousarray(keys, dtype=np.uint32))


def _empty(k: int, channels) -> ScreenSplats:
    return ScreenSplats(
        means=np.zeros((0, 2), np.float32),
        covs=np.zeros((0, 2, 2), np.float32),
        features=np.zeros((0, k), np.float32),
        opacities=np.zeros(0, np.float32),
        depth=np.zeros(0, np.float32),
        channels=channels,
    )


def split_layers(image: np.ndarray, channels: Dict[str, int]) -> Tuple[np.ndarray, Dict[str, np.ndarray]]:
    """Split a composited ``(H, W, K+1)`` image into RGBA and straight map layers.

    Parameters
    ----------
    image : (H, W, K + 1) float32 ndarray
        Premultiplied features with alpha last.
    channels : dict
        From :func:`feature_layout`.

    Returns
    -------
    rgba : (H, W, 4) float32 ndarray
        Premultiplied linear RGBA.
    layers : dict of str to (H, W) float32 ndarray
        Each extra channel divided by alpha (alpha-weighted average of the
        puffs' values), 0 where alpha is 0.
    """
    alpha = image[..., -1]
    rgba = np.concatenate([image[..., 0:3], alpha[..., None]], axis=2)
    layers = {}
    safe = np.where(alpha > 0, alpha, 1.0).astype(np.float32)
    for name, col in channels.items():
        if col < 3:
            continue
        layers[name] = np.where(alpha > 0, image[..., col] / safe, 0.0).astype(np.float32)
    return np.ascontiguousarray(rgba, dtype=np.float32), layers
