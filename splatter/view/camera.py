"""Project 3D Gaussian puffs to 2D screen splats.

Frames used here:

* **view space**: x right, y up, the camera looks down -z; depth = -z_view
  (positive in front of the camera).
* **camera frame** (for the projection Jacobian): x right, y down, z forward,
  i.e. ``(x_view, -y_view, depth)``, a proper rotation of view space.
* **pixels**: x right, y down, pixel ``[row, col]`` covering
  ``[col, col+1) x [row, row+1)``; the optical axis meets the image at
  ``(width / 2, height / 2)``.

3D covariances are projected with the EWA local affine approximation
``S2 = J W S W^T J^T`` (Zwicker, Pfister, van Baar & Gross, "EWA Volume
Splatting", IEEE Visualization 2001; the form used by Kerbl et al., "3D
Gaussian Splatting for Real-Time Radiance Field Rendering", ACM TOG 42(4),
2023), plus a 0.3 px^2 low-pass on the diagonal so no splat is thinner than a
pixel can show.

The per-puff arithmetic runs in the numba kernels of
:mod:`splatter.view._kernels` (one pass per puff, each writing its own
row); :func:`project_puffs` fuses :func:`puff_covariances` and
:meth:`Camera.project`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from splatter.core.args import check_choice
from splatter.core.choices import PROJECTIONS
from splatter.view import _kernels as _ck

LOW_PASS = 0.3
"""Pixels squared added to the diagonal of every projected covariance."""



@dataclass(frozen=True)
class Splats:
    """Screen-space splats, one entry per puff (equal-length arrays).

    Attributes
    ----------
    means : (N, 2) float32 ndarray
        Centres in pixels, x right, y down.
    covs : (N, 2, 2) float32 ndarray
        Covariances in pixels squared, low-pass included.
    depth : (N,) float32 ndarray
        View depth (distance in front of the camera along the view axis).
    visible : (N,) bool ndarray
        False for puffs at or behind the near plane or whose radius-3 screen
        ellipse lies wholly off the image. ``means`` and ``covs`` of puffs
        behind the near plane are finite placeholders, not projections.
    """

    means: np.ndarray
    covs: np.ndarray
    depth: np.ndarray
    visible: np.ndarray


@dataclass(frozen=True)
class Camera:
    """A pinhole or orthographic camera from plain parameters.

    Parameters
    ----------
    projection : {"orthographic", "perspective"}
    eye, target, up : 3-tuples of float
        Camera position, the point it looks at, and the up hint.
    width, height : int
        Image size in pixels.
    view_width : float
        Orthographic: world units across the image width.
    fov : float
        Perspective: vertical field of view in degrees, in (0, 180).
    near : float
        Puffs with depth at or below this (world units) are not visible.
    """

    projection: str = "orthographic"
    eye: tuple = (0.0, 0.0, 10.0)
    target: tuple = (0.0, 0.0, 0.0)
    up: tuple = (0.0, 1.0, 0.0)
    width: int = 256
    height: int = 256
    view_width: float = 4.0
    fov: float = 40.0
    near: float = 1e-3

    def __post_init__(self):
        check_choice(self.projection, "projection", PROJECTIONS)
        for name in ("eye", "target", "up"):
            v = np.asarray(getattr(self, name), dtype=np.float64)
            if v.shape != (3,) or not np.all(np.isfinite(v)):
                raise ValueError(f"{name}: expected 3 finite numbers, got {getattr(self, name)!r}")
            object.__setattr__(self, name, tuple(float(x) for x in v))
        for name in ("width", "height"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < 1:
                raise ValueError(f"{name}: expected a positive integer, got {v!r}")
        if not (math.isfinite(self.view_width) and self.view_width > 0):
            raise ValueError(f"view_width: expected a positive number, got {self.view_width!r}")
        if not (0.0 < self.fov < 180.0):
            raise ValueError(f"fov: expected degrees in (0, 180), got {self.fov!r}")
        if not (math.isfinite(self.near) and self.near >= 0):
            raise ValueError(f"near: expected a number >= 0, got {self.near!r}")
        fwd = np.subtract(self.target, self.eye)
        if np.linalg.norm(fwd) == 0:
            raise ValueError("target: expected a point different from eye")
        if np.linalg.norm(np.cross(fwd, self.up)) <= 1e-9 * np.linalg.norm(fwd) * np.linalg.norm(self.up):
            raise ValueError("up: expected a direction not parallel to target - eye")

    # -- frame ---------------------------------------------------------------
    @property
    def axes(self):
        """(right, up, forward) orthonormal world vectors, each (3,) float64."""
        f = np.subtract(self.target, self.eye).astype(np.float64)
        f /= np.linalg.norm(f)
        s = np.cross(f, self.up)
        s /= np.linalg.norm(s)
        u = np.cross(s, f)
        return s, u, f

    @property
    def world_to_view(self):
        """(4, 4) float64 matrix taking homogeneous world points to view space."""
        s, u, f = self.axes
        eye = np.asarray(self.eye)
        m = np.eye(4)
        m[0, :3], m[1, :3], m[2, :3] = s, u, -f
        m[:3, 3] = -m[:3, :3] @ eye
        return m

    @property
    def focal_px(self):
        """Perspective focal length in pixels (square pixels: fx = fy)."""
        return 0.5 * self.height / math.tan(math.radians(self.fov) / 2)

    def pixels_per_unit(self, depth):
        """Pixels per world unit for a length facing the camera at ``depth``.

        Parameters
        ----------
        depth : float or ndarray
            View depth; ignored by the orthographic projection.
        """
        if self.projection == "orthographic":
            return np.full(np.shape(depth), self.width / self.view_width)
        return self.focal_px / np.asarray(depth, dtype=np.float64)

    def _camera_frame(self, pos):
        """World points (N, 3) -> camera frame (x right, y down, z = depth)."""
        s, u, f = self.axes
        rel = pos - np.asarray(self.eye)
        rot = np.stack([s, -u, f])
        return rel @ rot.T, rot

    # -- projection ----------------------------------------------------------
    def project(self, pos, cov):
        """Project puffs to screen splats.

        Parameters
        ----------
        pos : (N, 3) float64 ndarray
            World positions.
        cov : (N, 3, 3) float64 ndarray
            World covariances (see :func:`puff_covariances`).

        Returns
        -------
        Splats
        """
        pos = _check_array(pos, "pos", (3,))
        cov = _check_array(cov, "cov", (3, 3))
        if cov.shape[0] != pos.shape[0]:
            raise ValueError(f"cov: expected {pos.shape[0]} matrices, got {cov.shape[0]}")
        return _run_project(self, pos, lambda *o: _ck._project(pos, cov, *self._kernel_frame(), *o))

    def _kernel_frame(self):
        """(rot, eye, ortho, scale, width, height, near, low_pass) for the kernels."""
        s, u, f = self.axes
        rot = np.ascontiguousarray(np.stack([s, -u, f]))
        ortho = self.projection == "orthographic"
        scale = self.width / self.view_width if ortho else self.focal_px
        return (rot, np.asarray(self.eye, dtype=np.float64), ortho, float(scale),
                float(self.width), float(self.height), float(self.near), LOW_PASS)

    def project_velocity(self, pos, vel):
        """Screen velocity of puffs in pixels per second (x right, y down).

        Exact for the orthographic projection; for perspective the projection
        is linearised at each position (the same Jacobian as EWA), which is the
        instantaneous rate of change of the projected centre.

        Parameters
        ----------
        pos, vel : (N, 3) float64 ndarray
            World positions and velocities (world units per second).

        Returns
        -------
        (N, 2) float32 ndarray
        """
        pos = _check_array(pos, "pos", (3,))
        vel = _check_array(vel, "vel", (3,))
        if vel.shape != pos.shape:
            raise ValueError(f"vel: expected shape {pos.shape}, got {vel.shape}")
        t, rot = self._camera_frame(pos)
        v = vel @ rot.T
        if self.projection == "orthographic":
            out = (self.width / self.view_width) * v[:, :2]
        else:
            fpx = self.focal_px
            tz = np.where(t[:, 2] > self.near, t[:, 2], np.inf)
            out = np.stack([fpx * (v[:, 0] / tz - t[:, 0] * v[:, 2] / tz**2),
                            fpx * (v[:, 1] / tz - t[:, 1] * v[:, 2] / tz**2)], 1)
            out = np.nan_to_num(out, nan=0.0)
        return out.astype(np.float32)


def ewa_covariance(t_view, cov_view, fx, fy):
    """EWA projection of 3D covariances, ``S2 = J S J^T``, without the low-pass.

    Parameters
    ----------
    t_view : (N, 3) float64 ndarray
        Centres in the camera frame: x right, y down, z forward (> 0).
    cov_view : (N, 3, 3) float64 ndarray
        Covariances already rotated into the camera frame (``W S W^T``).
    fx, fy : float
        Focal lengths in pixels.

    Returns
    -------
    (N, 2, 2) float64 ndarray
        ``J = [[fx/tz, 0, -fx tx/tz^2], [0, fy/tz, -fy ty/tz^2]]`` applied on
        both sides (Zwicker et al. 2001; Kerbl et al. 2023).
    """
    t = np.asarray(t_view, dtype=np.float64)
    c = np.asarray(cov_view, dtype=np.float64)
    tz = t[:, 2]
    jac = np.zeros((t.shape[0], 2, 3))
    jac[:, 0, 0] = fx / tz
    jac[:, 0, 2] = -fx * t[:, 0] / tz**2
    jac[:, 1, 1] = fy / tz
    jac[:, 1, 2] = -fy * t[:, 1] / tz**2
    return jac @ c @ jac.transpose(0, 2, 1)


def puff_covariances(size, aspect, quat, vel, stretch, deform=None):
    """3D covariance of each puff, deformed by the flow, with motion stretch.

    Parameters
    ----------
    size : (N,) float64 ndarray
        Sigma along the puff's first axis (world units).
    aspect : (N,) float64 ndarray
        Ratio of the two other sigmas to ``size``.
    quat : (N, 4) float64 ndarray
        Orientation as quaternions ``(w, x, y, z)``; normalised here.
    vel : (N, 3) float64 ndarray
        Velocity (world units per second).
    stretch : (N,) float64 ndarray
        Seconds of motion to smear each puff over.
    deform : (N, 3, 3) float64 ndarray, optional
        Deformation gradient ``F`` of each puff (``FrameState.deform``);
        None means rigid puffs (``F = I``).

    Returns
    -------
    (N, 3, 3) float64 ndarray
        ``F S0 F^T + L L^T / 12`` with the rigid covariance
        ``S0 = R diag(size^2, (size aspect)^2, (size aspect)^2) R^T`` and
        ``L = stretch * vel``: a uniform segment of length ``|L|`` has
        variance ``|L|^2 / 12`` along it.
    """
    size, aspect, quat, vel, stretch = _check_puffs(size, aspect, quat, vel, stretch)
    n = size.shape[0]
    out = np.empty((n, 3, 3))
    _ck._puff_covariances(size, aspect, quat, vel, stretch, _check_deform(deform, n), out)
    return out


def footprint_ratio(size, aspect, quat, deform, right, up) -> np.ndarray:
    """How much the flow's deformation widens each puff's footprint across a view plane.

    ``sqrt(det S2_rigid / det S2_deformed)``, with ``S2 = P S P^T`` the 2 x 2
    covariance across the plane spanned by the unit rows ``P = (right, up)``,
    ``S0`` the rigid covariance and ``F S0 F^T`` the deformed one (no motion
    smear): below 1 where the flow has spread the puff across the view.

    Parameters
    ----------
    size, aspect : (N,) float64 array_like
    quat : (N, 4) float64 array_like
    deform : (N, 3, 3) float64 ndarray
    right, up : (3,) float64 array_like

    Returns
    -------
    (N,) float64 ndarray

    Examples
    --------
    >>> f = np.diag([2.0, 0.5, 1.0])[None]  # stretched along x, squeezed along y: same area in xy
    >>> float(footprint_ratio([1.0], [1.0], [[1.0, 0, 0, 0]], f, [1, 0, 0], [0, 1, 0])[0])
    1.0
    >>> float(footprint_ratio([1.0], [1.0], [[1.0, 0, 0, 0]], f, [1, 0, 0], [0, 0, 1])[0])
    0.5
    """
    n = np.shape(size)[0]
    size, aspect, quat, vel, stretch = _check_puffs(size, aspect, quat, np.zeros((n, 3)), np.zeros(n))
    deform = _check_deform(deform, n)
    out = np.empty(n)
    _ck._footprint_ratio(size, aspect, quat, vel, stretch, deform, np.asarray(right, dtype=np.float64),
                         np.asarray(up, dtype=np.float64), out)
    return out


def project_puffs(camera, pos, size, aspect, quat, vel, stretch, deform=None):
    """Puff covariances and their projection in one pass: ``camera.project(pos,
    puff_covariances(size, aspect, quat, vel, stretch, deform))`` without the (N, 3, 3)
    intermediate.

    Parameters
    ----------
    camera : Camera
    pos : (N, 3) float64 ndarray
        World positions.
    size, aspect, quat, vel, stretch, deform
        As for :func:`puff_covariances`.

    Returns
    -------
    Splats
        The same values as the two-step path to float64 round-off.
    """
    if not isinstance(camera, Camera):
        raise TypeError(f"camera: expected a Camera, got {type(camera).__name__}")
    pos = _check_array(pos, "pos", (3,))
    n = pos.shape[0]
    if np.shape(size) != (n,):
        raise ValueError(f"size: expected shape ({n},), got {np.shape(size)}")
    size, aspect, quat, vel, stretch = _check_puffs(size, aspect, quat, vel, stretch)
    deform = _check_deform(deform, n)
    return _run_project(camera, pos, lambda *o: _ck._project_puffs(
        pos, size, aspect, quat, vel, stretch, deform, *camera._kernel_frame(), *o))


_RIGID = np.zeros((0, 3, 3))


def _check_deform(deform, n):
    """``deform`` as a contiguous (n, 3, 3) float64 array, or the empty table for rigid puffs."""
    if deform is None:
        return _RIGID
    deform = np.ascontiguousarray(deform, dtype=np.float64)
    if deform.shape != (n, 3, 3):
        raise ValueError(f"deform: expected shape ({n}, 3, 3), got {deform.shape}")
    if not np.all(np.isfinite(deform)):
        raise ValueError("deform: expected finite values, got NaN or infinity")
    return deform


def _check_puffs(size, aspect, quat, vel, stretch):
    """The puff arrays as contiguous float64, shapes checked against ``size``."""
    size = np.ascontiguousarray(size, dtype=np.float64)
    if size.ndim != 1:
        raise ValueError(f"size: expected shape (N,), got {size.shape}")
    n = size.shape[0]
    out = [size]
    for name, arr, shp in (("aspect", aspect, (n,)), ("quat", quat, (n, 4)),
                           ("vel", vel, (n, 3)), ("stretch", stretch, (n,))):
        arr = np.ascontiguousarray(arr, dtype=np.float64)
        if arr.shape != shp:
            raise ValueError(f"{name}: expected shape {shp}, got {arr.shape}")
        out.append(arr)
    # One pass over the quaternions (np.all(..., axis=1) is several times slower).
    if n and not np.einsum("ij,ij->i", out[2], out[2]).all():
        raise ValueError("quat: expected non-zero quaternions")
    return out


def _run_project(camera, pos, kernel):
    """Allocate the Splats arrays for ``pos.shape[0]`` puffs and fill them with ``kernel``."""
    n = pos.shape[0]
    means = np.empty((n, 2), dtype=np.float32)
    covs = np.empty((n, 2, 2), dtype=np.float32)
    depth = np.empty(n, dtype=np.float32)
    visible = np.empty(n, dtype=np.bool_)
    if n:
        kernel(means, covs, depth, visible)
    return Splats(means=means, covs=covs, depth=depth, visible=visible)


def _check_array(value, name, tail):
    arr = np.ascontiguousarray(value, dtype=np.float64)
    if arr.ndim != 1 + len(tail) or arr.shape[1:] != tail:
        raise ValueError(f"{name}: expected shape (N, {', '.join(map(str, tail))}), got {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name}: expected finite values, got NaN or infinity")
    return arr
