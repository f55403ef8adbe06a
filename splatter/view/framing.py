"""Framing: what counts as visible smoke, cameras fitted to it, smoke cut off at the border.

One rule decides what is visible: smoke is visible where its alpha reaches
:data:`~splatter.core.thresholds.VISIBLE_ALPHA` (one 8-bit step), or
``camera.fit_alpha`` for the fit. A puff of peak opacity ``a`` shows alpha
``>= t`` out to ``sigma sqrt(2 ln(a / t))``, never past the footprint's
cutoff (:data:`~splatter.core.thresholds.CUTOFF` sigmas). This module holds
the geometry: spheres a camera is framed on (:func:`fit_spheres`, keeping
the view direction), the per-puff fit that frames each puff out to where it
alone fades to a quarter of ``fit_alpha`` (:data:`RIM_SHARE`;
:mod:`splatter.fit` starts from it and frames the smoke's accumulated alpha),
a widened coarse camera and its pixels' world points for that measurement;
``check`` flags puffs whose cut-off rim is still visible; ``render``
measures the alpha on the image's outermost pixels.

Examples
--------
>>> import numpy as np
>>> np.round(visible_reach(np.array([0.001, 0.05, 0.9]), VISIBLE_ALPHA), 3)  # in sigmas
array([0.   , 2.256, 3.   ])
>>> alpha = np.zeros((4, 4)); alpha[1:3, 1:3] = 0.5; alpha[0, 0] = 0.5
>>> max_border_alpha(alpha), border_alpha_share(alpha)
(0.5, 0.2)
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from splatter.core.thresholds import CUTOFF, VISIBLE_ALPHA
from splatter.sim.shaping import largest_stretch
from splatter.view.camera import _check_array

__all__ = ["visible_reach", "fit_view", "fit_spheres", "deciding_spheres", "widened", "pixel_points",
           "puff_spheres", "deciding_puff_spheres", "fit_camera", "border_alpha_share", "max_border_alpha",
           "cut_by_border", "RIM_VISIBLE_OPACITY"]

RIM_SHARE = 0.25
"""Share of ``camera.fit_alpha`` each puff is framed out to: overlapping rims of steam
(thousands of puffs of opacity 0.01) reached 0.05 at the edge when each was framed to
the full 1/255 (measured on the quay vent and lamplit steam demos)."""

RIM_VISIBLE_OPACITY = VISIBLE_ALPHA / np.exp(-0.5 * CUTOFF**2)
"""Peak opacity at which a puff's alpha at its cutoff rim is still visible: a cut there shows."""


def visible_reach(peak, alpha):
    """How far out, in sigmas, a puff of peak opacity ``peak`` shows alpha ``>= alpha``.

    Parameters
    ----------
    peak : (N,) float ndarray
    alpha : float

    Returns
    -------
    (N,) float64 ndarray
        ``min(CUTOFF, sqrt(2 ln(peak / alpha)))``, 0 where ``peak <= alpha``.
    """
    ratio = np.maximum(np.asarray(peak, dtype=np.float64) * (1.0 / alpha), 1.0)
    return np.minimum(CUTOFF, np.sqrt(2.0 * np.log(ratio)))


def fit_view(camera, points, radii, *, margin):
    """A camera framed so every puff's cutoff sphere lands inside the image.

    The view direction (``target - eye``) and ``up`` are kept; see
    :func:`fit_spheres`, here with spheres of radius ``CUTOFF * radii``.

    Parameters
    ----------
    camera : Camera
    points : (M, 3) float64 ndarray
        Puff centres over the whole clip.
    radii : (M,) float64 ndarray
        Puff sigmas; each sphere has radius ``CUTOFF * radii``.
    margin : float
        Fraction of the image width (height) kept clear at the left and right
        (top and bottom) edges, in [0, 0.5).

    Returns
    -------
    Camera
    """
    points = _check_array(points, "points", (3,))
    radii = np.asarray(radii, dtype=np.float64)
    if radii.shape != (points.shape[0],) or not np.all(np.isfinite(radii)) or np.any(radii < 0):
        raise ValueError(f"radii: expected {points.shape[0]} finite values >= 0")
    return fit_spheres(camera, points, CUTOFF * radii, margin=margin)


def fit_spheres(camera, points, rho, *, margin):
    """A camera framed so every sphere (centre ``points``, radius ``rho``) lands inside the image.

    The view direction (``target - eye``) and ``up`` are kept. Orthographic:
    eye and target move sideways to centre the spheres' extent and
    ``view_width`` is chosen so the tighter axis just fits. Perspective:
    ``fov`` is kept; the eye moves sideways and along the view direction to
    the closest position from which every sphere lies inside the view cone
    shrunk by the margin (one axis touches both edges, the other is centred);
    the target is put on the new axis at the mean depth of ``points``.

    Parameters
    ----------
    camera : Camera
    points : (M, 3) float64 ndarray
    rho : (M,) float64 ndarray
        Sphere radii, world units.
    margin : float
        Fraction of the image width (height) kept clear at each edge, in [0, 0.5).

    Returns
    -------
    Camera
        ``camera`` itself when there are no spheres.

    Examples
    --------
    >>> from splatter.view.camera import Camera
    >>> cam = fit_spheres(Camera(width=200, height=100), np.array([[1.0, 0, 0]]), np.array([0.5]), margin=0.0)
    >>> cam.eye[0], cam.view_width  # centred on the sphere; its height (1 unit) fills the frame's 100 px
    (1.0, 2.0)
    """
    points = _check_array(points, "points", (3,))
    rho = np.asarray(rho, dtype=np.float64)
    if not (0.0 <= margin < 0.5):
        raise ValueError(f"margin: expected a fraction in [0, 0.5), got {margin!r}")
    if points.shape[0] == 0:
        return camera
    s, u, f = camera.axes
    xs, ys, zs = points @ s, points @ u, points @ f
    keep = 1.0 - 2.0 * margin
    aspect = camera.width / camera.height
    if camera.projection == "orthographic":
        x0, x1 = np.min(xs - rho), np.max(xs + rho)
        y0, y1 = np.min(ys - rho), np.max(ys + rho)
        cx, cy = 0.5 * (x0 + x1), 0.5 * (y0 + y1)
        span = max(x1 - x0, (y1 - y0) * aspect, 1e-9)
        eye = np.asarray(camera.eye)
        shift = (cx - eye @ s) * s + (cy - eye @ u) * u
        return replace(camera, eye=tuple(eye + shift), target=tuple(np.asarray(camera.target) + shift),
                       view_width=float(span / keep))
    ty = math.tan(math.radians(camera.fov) / 2) * keep
    tx = ty * aspect
    # Sphere inside the wedge |x| <= T z  <=>  T z -+ x >= rho sqrt(1 + T^2).
    ex, ezx = _fit_axis(xs, zs, rho, tx)
    ey, ezy = _fit_axis(ys, zs, rho, ty)
    ez = min(ezx, ezy)
    eye = ex * s + ey * u + ez * f
    depth = max(float(np.mean(zs)) - ez, 1e-6)
    return replace(camera, eye=tuple(eye), target=tuple(eye + depth * f))


def deciding_spheres(camera, points, rho, *, margin):
    """Indices of the (at most 8) spheres that alone decide :func:`fit_spheres`.

    :func:`fit_spheres` depends on the spheres only through the extremes of
    four linear functions of their centres and radii (the extent's sides for
    the orthographic projection, the view wedge's four planes for the
    perspective one), so these few spheres give the same camera as all of
    them, the mean depth of the perspective target aside. The fit keeps
    just these from each frame.

    Parameters
    ----------
    camera : Camera
    points : (M, 3) float64 ndarray
    rho : (M,) float64 ndarray
    margin : float

    Returns
    -------
    (K,) int64 ndarray, K <= 8
    """
    if len(rho) == 0:
        return np.zeros(0, dtype=np.int64)
    xs, ys, zs = _view_coords(camera, points)
    tx, ty = _wedge(camera, margin)
    return np.unique(np.array([np.argmin(side) for side in _sides(xs, ys, zs, rho, tx, ty)], dtype=np.int64))


def _view_coords(camera, points):
    s, u, f = camera.axes
    return points @ s, points @ u, points @ f


def _wedge(camera, margin):
    """Tangents of the half view angles inside the margin, across and up."""
    ty = math.tan(math.radians(camera.fov) / 2) * (1.0 - 2.0 * margin)
    return ty * camera.width / camera.height, ty


def _sides(xs, ys, zs, rho, tx, ty):
    """The eight quantities whose smallest values decide :func:`fit_spheres`: the extent's
    four sides and the view wedge's four planes. Each falls as ``rho`` grows."""
    kx, ky = rho * math.sqrt(1.0 + tx**2), rho * math.sqrt(1.0 + ty**2)
    return [xs - rho, -(xs + rho), ys - rho, -(ys + rho),
            tx * zs - xs - kx, tx * zs + xs - kx, ty * zs - ys - ky, ty * zs + ys - ky]


def widened(camera, factor, pixels):
    """``camera`` seeing ``factor`` times as far across, on a coarse image ``pixels`` on its longer side.

    The eye, view direction and the frame's aspect are kept (to a pixel's
    rounding): orthographic ``view_width`` grows by ``factor``, perspective
    ``tan(fov / 2)`` does.

    Examples
    --------
    >>> from splatter.view.camera import Camera
    >>> c = widened(Camera(width=512, height=256, view_width=2.0), 1.5, 128)
    >>> c.width, c.height, c.view_width
    (128, 64, 3.0)
    """
    scale = pixels / max(camera.width, camera.height)
    w, h = max(1, round(camera.width * scale)), max(1, round(camera.height * scale))
    if camera.projection == "orthographic":
        return replace(camera, width=w, height=h, view_width=camera.view_width * factor * w / (camera.width * scale))
    fov = 2.0 * math.degrees(math.atan(factor * math.tan(math.radians(camera.fov) / 2) * h / (camera.height * scale)))
    return replace(camera, width=w, height=h, fov=min(fov, 179.0))


def pixel_points(camera, rows, cols, depth):
    """World points seen at pixel centres ``(rows, cols)`` at view depth ``depth``, and a pixel's size there.

    Parameters
    ----------
    camera : Camera
    rows, cols : (K,) int ndarray
    depth : (K,) float ndarray
        View depth (along the view axis) of each point.

    Returns
    -------
    points : (K, 3) float64 ndarray
    pixel : (K,) float64 ndarray
        World units one pixel spans at each point.

    Examples
    --------
    >>> from splatter.view.camera import Camera
    >>> p, px = pixel_points(Camera(width=4, height=4, view_width=4.0), np.array([0]), np.array([3]), np.array([10.0]))
    >>> p.tolist(), px.tolist()  # the top right pixel's centre, on the plane through the target
    ([[1.5, 1.5, 0.0]], [1.0])
    """
    s, u, f = camera.axes
    depth = np.asarray(depth, dtype=np.float64)
    dx = np.asarray(cols, dtype=np.float64) + 0.5 - 0.5 * camera.width
    dy = 0.5 * camera.height - (np.asarray(rows, dtype=np.float64) + 0.5)
    if camera.projection == "orthographic":
        pixel = np.full(depth.shape, camera.view_width / camera.width)
        across = dx * pixel
        up = dy * pixel
    else:
        pixel = depth / camera.focal_px
        across, up = dx * pixel, dy * pixel
    points = np.asarray(camera.eye) + across[:, None] * s + up[:, None] * u + depth[:, None] * f
    return points, pixel


def _fit_axis(xs, zs, rho, tan_half):
    """Eye offset (across, along) so spheres fit |x - e| <= tan_half (z - ez)."""
    k = rho * math.sqrt(1.0 + tan_half**2)
    a = np.min(tan_half * zs - xs - k)
    b = np.min(tan_half * zs + xs - k)
    return 0.5 * (b - a), 0.5 * (a + b) / tan_half


def border_alpha_share(alpha):
    """Share of the total alpha lying in the image's 1-pixel frame.

    The frame is the first and last rows and columns (each pixel counted
    once). A large share means sprites are cut off at the edge.

    Parameters
    ----------
    alpha : (H, W) float ndarray

    Returns
    -------
    float
        ``sum(alpha on the frame) / sum(alpha)``, 0.0 for an empty image.
    """
    alpha = np.asarray(alpha, dtype=np.float64)
    if alpha.ndim != 2:
        raise ValueError(f"alpha: expected shape (H, W), got {alpha.shape}")
    total = alpha.sum()
    if total <= 0:
        return 0.0
    inner = alpha[1:-1, 1:-1].sum() if min(alpha.shape) > 2 else 0.0
    return float((total - inner) / total)


def puff_spheres(state, peak, alpha):
    """Each visible puff of one frame as a sphere reaching out to where it alone fades to ``alpha``.

    Parameters
    ----------
    state : FrameState-like
        ``pos``, ``vel``, ``size``, ``stretch`` and ``deform`` (``None`` for rigid puffs).
    peak : (M,) float ndarray
        Each puff's peak opacity as composited.
    alpha : float

    Returns
    -------
    points : (K, 3) float64 ndarray
        Centres of the puffs whose peak reaches ``alpha``.
    radii : (K,) float64 ndarray
        Sigmas: each sphere has radius ``CUTOFF * radii``.
    """
    pos, axis, smear, reach, deform = _sphere_parts(state, peak, alpha)
    if deform is not None:
        axis = axis * largest_stretch(deform)
    return pos, _sphere_sigmas(axis, smear, reach)


def _sphere_parts(state, peak, alpha):
    """What a visible puff's sphere is made of: centre, size, smear, reach, and ``F`` (or None)."""
    visible = peak * (1.0 / alpha) > 1.0
    reach = visible_reach(peak[visible], alpha) / CUTOFF
    # The long axis of a stretched puff: size times the flow's largest
    # stretch of it (exactly 1 for rigid puffs), or half the smear length.
    smear = np.linalg.norm(state.vel[visible], axis=1) * state.stretch[visible] * 0.5
    deform = getattr(state, "deform", None)
    return (np.asarray(state.pos[visible], dtype=np.float64), state.size[visible], smear, reach,
            None if deform is None else deform[visible])


def _sphere_sigmas(axis, smear, reach):
    return np.maximum(axis, smear / CUTOFF) * reach


def deciding_puff_spheres(camera, state, peak, alpha, *, margin):
    """The deciding spheres (:func:`deciding_spheres`) among :func:`puff_spheres`, found without
    the largest stretch of every puff.

    The largest stretch ``s`` of ``F`` lies between ``||F||_F / sqrt(3)`` and
    ``||F||_F`` (``s^2`` is the largest of ``F^T F``'s three eigenvalues, whose
    sum is ``||F||_F^2``), so each sphere's radius lies between two cheap
    bounds; each of the eight sides :func:`deciding_spheres` minimises falls
    as the radius grows.  A puff whose side, at its largest radius, is above
    another puff's side at that one's smallest radius cannot be the smallest,
    nor tie with it; the exact stretch (an eigenvalue problem per puff, most
    of the fit's time) is taken only for the few puffs left, and the picks are
    those of :func:`deciding_spheres` on every puff, to the bit.  The bounds
    are widened by 1e-9, far above their round-off.

    Parameters
    ----------
    camera : Camera
    state : FrameState-like
        As for :func:`puff_spheres`.
    peak : (M,) float ndarray
    alpha : float
    margin : float

    Returns
    -------
    points : (K, 3) float64 ndarray
    radii : (K,) float64 ndarray
        Sigmas, as :func:`puff_spheres` gives them (``K <= 8``).
    """
    pos, axis, smear, reach, deform = _sphere_parts(state, peak, alpha)
    if deform is None or pos.shape[0] == 0:
        r = _sphere_sigmas(axis, smear, reach)
        keep = deciding_spheres(camera, pos, r * CUTOFF, margin=margin)
        return pos[keep], r[keep]
    frob = np.sqrt(np.einsum("nij,nij->n", deform, deform))
    xs, ys, zs = _view_coords(camera, pos)
    tx, ty = _wedge(camera, margin)
    low = _sides(xs, ys, zs, _sphere_sigmas(axis * (frob * (1.0 + 1e-9)), smear, reach) * CUTOFF, tx, ty)
    high = _sides(xs, ys, zs, _sphere_sigmas(axis * (frob * ((1.0 - 1e-9) / math.sqrt(3.0))), smear, reach)
                  * CUTOFF, tx, ty)
    cand = np.zeros(pos.shape[0], dtype=bool)
    for lo, hi in zip(low, high):
        cand |= lo <= hi.min()
    idx = np.flatnonzero(cand)
    r = _sphere_sigmas(axis[idx] * largest_stretch(deform[idx]), smear[idx], reach[idx])
    picks = [np.argmin(side) for side in _sides(xs[idx], ys[idx], zs[idx], r * CUTOFF, tx, ty)]
    keep = np.unique(np.array(picks, dtype=np.int64))
    return pos[idx[keep]], r[keep]


def fit_camera(camera, states, *, opacity_of, margin, alpha=VISIBLE_ALPHA):
    """``camera`` framed on each puff of ``states`` separately: the conservative per-puff fit.

    Each puff is framed out to where it alone fades to ``RIM_SHARE * alpha``.
    This is where ``camera.fit`` starts: :func:`splatter.fit.fit_to_smoke`
    widens it, measures the smoke's accumulated alpha and frames that.

    Parameters
    ----------
    camera : Camera
    states : iterable of FrameState
        The frames to frame (usually the whole clip).
    opacity_of : callable
        ``opacity_of(state) -> (N,)`` each puff's peak opacity as composited.
    margin : float
        Fraction of the image kept clear at each edge.
    alpha : float
        ``camera.fit_alpha``.

    Returns
    -------
    Camera
    """
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha: expected a number in (0, 1), got {alpha!r}")
    pts, rad = [], []
    for state in states:
        p, r = puff_spheres(state, opacity_of(state), RIM_SHARE * alpha)
        pts.append(p)
        rad.append(r)
    points = np.concatenate(pts) if pts else np.zeros((0, 3))
    radii = np.concatenate(rad) if rad else np.zeros(0)
    if points.shape[0] == 0:
        return camera
    return fit_view(camera, points, radii, margin=margin)


def max_border_alpha(alpha) -> float:
    """The highest alpha on the image's outermost pixel ring; :data:`VISIBLE_ALPHA` or more shows a cut."""
    alpha = np.asarray(alpha)
    return float(max(alpha[0].max(), alpha[-1].max(), alpha[:, 0].max(), alpha[:, -1].max()))


def cut_by_border(splats, peak, width, height):
    """Which projected puffs have a visible rim cut by the image edge.

    Parameters
    ----------
    splats : Splats
        Projected puffs (``means (N, 2)``, ``covs (N, 2, 2)``, ``visible (N,)``).
    peak : (N,) float ndarray
        Peak opacity as composited.
    width, height : int

    Returns
    -------
    (N,) bool ndarray
    """
    rx = CUTOFF * np.sqrt(np.asarray(splats.covs[:, 0, 0], dtype=np.float64))
    ry = CUTOFF * np.sqrt(np.asarray(splats.covs[:, 1, 1], dtype=np.float64))
    mx = np.asarray(splats.means[:, 0], dtype=np.float64)
    my = np.asarray(splats.means[:, 1], dtype=np.float64)
    cut = (mx - rx < 0) | (mx + rx > width) | (my - ry < 0) | (my + ry > height)
    return cut & np.asarray(splats.visible, dtype=bool) & (peak >= RIM_VISIBLE_OPACITY)
