"""``camera.fit``: a camera framed on where the smoke's accumulated alpha is visible.

Framing each puff out to where it alone fades below ``camera.fit_alpha``
wastes the texture on thin steam (thousands of faint rims add up, so each
must be framed to a fraction of the threshold, and the dense core ends up
small), and still says nothing about what the composited image shows. This
module frames what the composited image shows:

1. the conservative per-puff fit (each puff out to where it alone fades to a
   quarter of ``fit_alpha``, or of one 8-bit step if that is lower),
   widened :data:`WIDEN` times, looks at every fitted frame on a coarse image
   (:data:`FIT_PIXELS` on its longer side);
2. each frame's puffs are composited there with alpha and view depth only
   (the compositor's ``add`` alpha ``1 - prod(1 - a_i)``, equal to ``over``'s
   and order free, or ``absorb``'s optical depth for an absorb look);
3. every coarse pixel whose alpha reaches ``fit_alpha`` becomes a sphere of
   one coarse pixel's radius at its mean view depth (so the threshold, which
   lies within a pixel of such a centre, is inside it);
4. the camera is framed on those spheres with ``camera.margin`` kept clear
   (:func:`splatter.view.framing.fit_spheres`): orthographic, the width and
   centre; perspective, ``fov`` kept and the eye moved. Depth makes the
   perspective fit approximate (a pixel's smoke spans a range of depths), so
   it is measured again through the new camera until the eye settles.

Where the coarse image's own edge reaches ``fit_alpha`` it is widened and
measured again. When no pixel reaches ``fit_alpha`` (the threshold is above
the smoke's densest alpha) the per-puff fit is kept.
"""

from __future__ import annotations

import contextlib
import math
from typing import Callable, Iterable, List, Tuple

import numba
import numpy as np

from splatter.core.thresholds import CUTOFF, VISIBLE_ALPHA
from splatter.raster.compositor import composite_features
from splatter.view.camera import LOW_PASS, Camera, puff_covariances
from splatter.view.framing import (
    RIM_SHARE,
    deciding_puff_spheres,
    deciding_spheres,
    fit_spheres,
    max_border_alpha,
    pixel_points,
    widened,
)

__all__ = ["fit_to_smoke", "smoke_alpha", "FIT_PIXELS", "WIDEN", "PASSES"]

FIT_PIXELS = 192
"""Pixels on the longer side of the coarse image the accumulated alpha is measured on."""

WIDEN = 1.5
"""How many times wider than the per-puff fit (or than the last fit) the coarse image sees."""

WIDEST = 2 * 2 * 2 * 2 * WIDEN
"""The coarse image widens (doubling) up to this many times the fit it starts from; smoke still
reaching its edge then (a camera inside the smoke) is framed on what it shows."""

PASSES = 4
"""Most measurements a perspective fit takes (an orthographic one needs one), not counting widenings."""

SETTLED = 1.0 / FIT_PIXELS
"""A perspective fit stops when the eye moves less than this share of its distance to the target
(about a coarse pixel's worth of the view; pixel rounding makes the fit wander by that much)."""

SHARPEN = 0.5
"""Pixels squared added to each coarse splat's covariance, its peak kept: a puff smaller than a
coarse pixel is not missed between pixel centres (its footprint only grows, so the box does)."""

FIT_PUFFS = 8000
"""About how many live puffs ``camera.fit`` frames on.

A dense look is framed on every ``n``-th spawn slot (an exact subset of its
puffs, see :func:`~splatter.sim.driver.simulate`), so framing costs a fraction
of the render; the outermost puffs of thousands are as good a bound as those
of all of them, and ``camera.margin`` holds the rest.
"""


class _Cloud:
    """One frame's puffs as the fit needs them: centres, 3D covariances, composited peaks (float32)."""

    __slots__ = ("pos", "cov", "peak")

    def __init__(self, pos, cov, peak):
        self.pos, self.cov, self.peak = pos, cov, peak


def fit_to_smoke(camera: Camera, states: Iterable, *, opacity_of: Callable, margin: float,
                 alpha: float = VISIBLE_ALPHA, blend: str = "over", sample: int = 1) -> Camera:
    """``camera`` framed on the region where the composited alpha of ``states`` reaches ``alpha``.

    Parameters
    ----------
    camera : Camera
        The look's camera; its view direction, ``up``, image size and (perspective) ``fov`` are kept.
    states : iterable of FrameState
        The frames to frame (:func:`splatter.render.fit_frames`), possibly one puff in ``sample``.
    opacity_of : callable
        ``opacity_of(state) -> (N,)`` each puff's peak opacity as composited.
    margin : float
        Fraction of the image kept clear at each edge (``camera.margin``).
    alpha : float
        ``camera.fit_alpha``: the smoke's alpha at the kept region's edge.
    blend : {"over", "add", "absorb"}
        The look's blend: ``absorb`` accumulates optical depth, the others ``1 - prod(1 - a)``.
    sample : int
        The states hold one puff in ``sample``; each then stands for ``sample``
        puffs in its place (peak ``a`` counts as ``1 - (1 - a)^sample``).

    Returns
    -------
    Camera

    Examples
    --------
    >>> from types import SimpleNamespace as NS
    >>> one = NS(pos=np.zeros((1, 3)), vel=np.zeros((1, 3)), size=np.array([0.25]), aspect=np.ones(1),
    ...          quat=np.array([[1.0, 0, 0, 0]]), stretch=np.zeros(1), deform=None, opacity=np.array([0.5]))
    >>> cam = fit_to_smoke(Camera(width=64, height=64), [one], opacity_of=lambda s: s.opacity, margin=0.0,
    ...                    alpha=0.05)
    >>> reach = 0.25 * np.sqrt(2 * np.log(0.5 / 0.05))  # a lone Gaussian's alpha is 0.05 this far out
    >>> # framed there, padded on each side by at most a coarse pixel and half an image pixel
    >>> bool(1.0 <= cam.view_width / (2 * reach) < 1.04)
    True
    """
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha: expected a number in (0, 1), got {alpha!r}")
    with _one_thread():
        clouds, spheres = _gather(camera, states, opacity_of, alpha, sample)
        if not clouds:
            return camera
        wide = fit_spheres(camera, *spheres, margin=0.0)
        mode = "absorb" if blend == "absorb" else "add"
        cam, factor, passes = wide, WIDEN, 0
        while passes < PASSES:
            coarse = widened(cam, factor, FIT_PIXELS)
            *found, touched = _visible_spheres(coarse, clouds, alpha, mode, margin, camera, factor)
            if touched and factor < WIDEST:  # the coarse image's edge reaches alpha: look wider
                factor *= 2.0
                continue
            passes += 1
            if found[0].shape[0] == 0:
                return fit_spheres(camera, *spheres, margin=margin)
            fitted = _fit_to_pixel_centres(camera, *found, margin)
            if fitted.projection == "orthographic" or _settled(cam, fitted):
                return fitted
            cam, factor = fitted, WIDEN
        return fitted


def _fit_to_pixel_centres(camera, points, rho, margin):
    """:func:`fit_spheres`, each sphere grown by half a pixel of the fitted image.

    The image samples alpha at pixel centres, half a pixel inside its edge,
    so the contour must clear the edge by that much more. The half pixel is
    that of the camera fitted without it (the frame it grows is a fraction of
    a pixel larger).
    """
    first = fit_spheres(camera, points, rho, margin=margin)
    depth = (points - np.asarray(first.eye)) @ first.axes[2]
    half = 0.5 / first.pixels_per_unit(np.maximum(depth, 1e-9))
    return fit_spheres(camera, points, rho + half, margin=margin)


@contextlib.contextmanager
def _one_thread():
    """Run the fit's kernels on one thread: a frame of a few thousand coarse splats gains nothing from
    more, and on a busy machine each parallel call waits far longer than its work (halved the fit here)."""
    threads = numba.get_num_threads()
    numba.set_num_threads(1)
    try:
        yield
    finally:
        numba.set_num_threads(threads)


def _gather(camera, states, opacity_of, alpha, sample) -> Tuple[List[_Cloud], Tuple[np.ndarray, np.ndarray]]:
    """Each frame's cloud, and the per-puff fit's deciding spheres over all frames."""
    clouds, pts, rho = [], [], []
    # Puffs too faint alone may still add up to alpha: the wide view frames them out to a quarter
    # of one 8-bit step at least (or, failing any, to their cutoff).
    rim = RIM_SHARE * min(alpha, VISIBLE_ALPHA)
    for state in states:
        peak = np.asarray(opacity_of(state), dtype=np.float64)
        show = peak > 0
        if not show.any():
            continue
        p, r = deciding_puff_spheres(camera, state, peak, rim, margin=0.0)
        if p.shape[0] == 0:
            p, r = deciding_puff_spheres(camera, state, peak, 0.5 * float(peak[show].min()), margin=0.0)
        pts.append(p)
        rho.append(r * CUTOFF)  # sigmas to the cutoff sphere
        deform = getattr(state, "deform", None)
        cov = puff_covariances(state.size[show], state.aspect[show], state.quat[show], state.vel[show],
                               state.stretch[show], None if deform is None else deform[show])
        seen = -np.expm1(np.log1p(-np.minimum(peak[show], 1.0 - 1e-6)) * sample)
        clouds.append(_Cloud(np.asarray(state.pos[show], dtype=np.float32), cov.astype(np.float32),
                             seen.astype(np.float32)))
    if not pts:
        return [], (np.zeros((0, 3)), np.zeros(0))
    return clouds, (np.concatenate(pts), np.concatenate(rho))


def smoke_alpha(coarse: Camera, cloud, mode: str, blur: float = 0.0):
    """One frame's alpha and mean view depth through ``coarse``.

    Parameters
    ----------
    coarse : Camera
    cloud : _Cloud
    mode : {"add", "absorb"}
    blur : float
        Pixels squared added to each splat's covariance beside :data:`SHARPEN`.

    Returns
    -------
    alpha, depth : (H, W) float32 ndarray
        Depth is 0 where alpha is.
    """
    sp = coarse.project(np.asarray(cloud.pos, dtype=np.float64), np.asarray(cloud.cov, dtype=np.float64))
    vis = np.asarray(sp.visible, dtype=bool)
    shape = (coarse.height, coarse.width)
    if not vis.any():
        return np.zeros(shape, np.float32), np.zeros(shape, np.float32)
    covs = np.asarray(sp.covs[vis], dtype=np.float64) + (SHARPEN + blur) * np.eye(2)
    feats = np.stack([np.asarray(sp.depth[vis], dtype=np.float32), np.ones(int(vis.sum()), np.float32)], 1)
    img = composite_features(np.asarray(sp.means[vis], dtype=np.float64), covs, feats, cloud.peak[vis],
                             shape=shape, blend=mode)
    weight = img[..., 1]
    depth = np.where(weight > 0, img[..., 0] / np.where(weight > 0, weight, 1.0), 0.0)
    return img[..., 2], depth.astype(np.float32)


def _visible_spheres(coarse, clouds, alpha, mode, margin, camera, factor):
    """The deciding one-pixel spheres of every frame's pixels at ``alpha`` or more, and whether the coarse edge has any."""
    pts, rho, touched = [], [], False
    # A coarse pixel smaller than the image's (a small image) gets the image's low-pass in its own pixels.
    finer = coarse.width / (factor * camera.width)
    blur = LOW_PASS * max(0.0, finer**2 - 1.0)
    for cloud in clouds:
        a, depth = smoke_alpha(coarse, cloud, mode, blur)
        mask = a >= alpha
        if not mask.any():
            continue
        touched = touched or max_border_alpha(a) >= alpha
        rows, cols = np.nonzero(mask)
        p, px = pixel_points(coarse, rows, cols, depth[rows, cols])
        keep = deciding_spheres(camera, p, px, margin=margin)
        pts.append(p[keep])
        rho.append(px[keep])
    if not pts:
        return np.zeros((0, 3)), np.zeros(0), touched
    return np.concatenate(pts), np.concatenate(rho), touched


def _settled(old: Camera, new: Camera) -> bool:
    """The perspective eye moved less than :data:`SETTLED` of its distance to the target."""
    dist = float(np.linalg.norm(np.subtract(new.target, new.eye)))
    return float(np.linalg.norm(np.subtract(new.eye, old.eye))) <= SETTLED * max(dist, 1e-12) or math.isclose(dist, 0)
