"""Obstacles: planes and spheres puffs bounce off, slide along or die on.

Contact response, applied after each step's position update.  When the step
carried a puff from outside an obstacle (signed distance ``d0 >= 0``) to
inside (``d1 < 0``), the impact is resolved at the moment the straight step
path crosses the surface, fraction ``f = d0 / (d0 - d1)`` of the step ``h``,
consistently with semi-implicit Euler read as leapfrog (the stored velocity
is the one at mid-step, and the normal acceleration ``a_n = (v1_n - v0_n) / h``
is constant over the step):

* normal velocity at impact ``v_i = v1_n + a_n (f - 1/2) h``; it is
  reflected with restitution ``e``: ``v_n+ = -e v_i``;
* for the rest of the step ``r = (1 - f) h`` the puff flies ballistically:
  it ends ``v_n+ r + a_n r^2 / 2`` above the surface, and the stored
  (mid-step) normal velocity becomes ``v_n+ + a_n (1/2 - f) h``;
* the tangential velocity is damped by Coulomb friction ``mu`` applied over
  the same impulse (Bridson, Fedkiw, Anderson, "Robust Treatment of
  Collisions, Contact and Friction for Cloth Animation", ACM TOG 21(3),
  2002): ``v_t' = max(0, 1 - mu dv_n / |v_t|) v_t`` with
  ``dv_n = (1 + e) |v_i|``, and the tangential position moves by
  ``(v_t' - v_t) r``.

With constant gravity this makes the rebound height ratio ``e^2`` exact up to
round-off at any step.  A puff already inside at the step's start (born
there, or resting on the surface) is pushed back to the nearest surface point
and its velocity is reflected and damped in the same way (``v_i = v_n``).
With ``kill`` the puff dies on contact instead.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numba
import numpy as np

from splatter.core.jit import KERNEL

PLANE_COLS = 9  # point 0-2, unit normal 3-5, bounce 6, friction 7, kill 8
SPHERE_COLS = 7  # center 0-2, radius 3, bounce 4, friction 5, kill 6


@dataclass(frozen=True, eq=False)
class ObstacleTables:
    """Obstacles in the form the step kernel reads.

    Attributes
    ----------
    planes : (np, 9) float64 ndarray
    spheres : (ns, 7) float64 ndarray
    """

    planes: np.ndarray
    spheres: np.ndarray


def pack_obstacles(obstacles) -> ObstacleTables:
    """Pack obstacle records into :class:`ObstacleTables`.

    Parameters
    ----------
    obstacles : sequence of PlaneSpec or SphereSpec

    Returns
    -------
    ObstacleTables
    """
    planes, spheres = [], []
    for i, o in enumerate(obstacles):
        kind = getattr(o, "kind", None)
        if kind == "plane":
            n = np.asarray(o.normal, dtype=np.float64)
            length = float(np.sqrt(n @ n))
            if length == 0:
                raise ValueError(f"obstacle[{i}].normal must not be the zero vector")
            planes.append(np.concatenate([o.point, n / length, [o.bounce, o.friction, float(o.kill)]]))
        elif kind == "sphere":
            spheres.append(np.concatenate([o.center, [o.radius, o.bounce, o.friction, float(o.kill)]]))
        else:
            raise TypeError(f"obstacle[{i}]: expected an obstacle record of a kind in OBSTACLE_KINDS, got {type(o).__name__}")
    return ObstacleTables(planes=np.array(planes, dtype=np.float64).reshape(len(planes), PLANE_COLS),
                          spheres=np.array(spheres, dtype=np.float64).reshape(len(spheres), SPHERE_COLS))


@numba.njit(inline="always", **KERNEL)
def _bounce(x, y, z, vx, vy, vz, nx, ny, nz, d0, d1, an, h, e, mu):
    """Resolve one contact with a surface of unit normal n; positions relative to it.

    ``(x, y, z)`` is the puff's position after the step, ``d1 < 0`` its signed
    distance, ``d0`` the distance at the step's start (negative: no step
    information, plain projection), ``an`` the normal acceleration over the
    step and ``h`` the step.  Returns the new position and velocity.
    """
    vn = vx * nx + vy * ny + vz * nz
    tx = vx - vn * nx
    ty = vy - vn * ny
    tz = vz - vn * nz
    if d0 >= 0.0 and h > 0.0:
        f = d0 / (d0 - d1)
        vi = vn + an * (f - 0.5) * h
        r = (1.0 - f) * h
    else:
        f = 0.5
        vi = vn
        r = 0.0
    if vi >= 0.0:
        # Leaving the surface already: only take the puff out of it.
        return x - d1 * nx, y - d1 * ny, z - d1 * nz, vx, vy, vz
    vplus = -e * vi
    vt = math.sqrt(tx * tx + ty * ty + tz * tz)
    k = 0.0
    if vt > 0.0:
        k = max(0.0, 1.0 - mu * (1.0 + e) * (-vi) / vt)
    above = vplus * r + 0.5 * an * r * r
    if above < 0.0:
        above = 0.0
    vn2 = vplus + an * (0.5 - f) * h
    # Surface point below the puff, then the rebound height and the friction's
    # change of tangential path over the rest of the step.
    sx = x - d1 * nx + above * nx + (k - 1.0) * tx * r
    sy = y - d1 * ny + above * ny + (k - 1.0) * ty * r
    sz = z - d1 * nz + above * nz + (k - 1.0) * tz * r
    return sx, sy, sz, k * tx + vn2 * nx, k * ty + vn2 * ny, k * tz + vn2 * nz


@numba.njit(inline="always", **KERNEL)
def _collide(x, y, z, vx, vy, vz, planes, spheres, x0, y0, z0, vx0, vy0, vz0, h):
    """Resolve contacts of one puff; returns the new state and 1 if it was killed.

    ``(x0, y0, z0)`` and ``(vx0, vy0, vz0)`` are the state at the step's start
    and ``h`` the step; ``h = 0`` means no step information (plain projection).
    """
    for p in range(planes.shape[0]):
        nx = planes[p, 3]
        ny = planes[p, 4]
        nz = planes[p, 5]
        d = (x - planes[p, 0]) * nx + (y - planes[p, 1]) * ny + (z - planes[p, 2]) * nz
        if d < 0.0:
            if planes[p, 8] != 0.0:
                return x, y, z, vx, vy, vz, 1
            d0 = -1.0
            an = 0.0
            if h > 0.0:
                d0 = (x0 - planes[p, 0]) * nx + (y0 - planes[p, 1]) * ny + (z0 - planes[p, 2]) * nz
                an = ((vx - vx0) * nx + (vy - vy0) * ny + (vz - vz0) * nz) / h
            x, y, z, vx, vy, vz = _bounce(x, y, z, vx, vy, vz, nx, ny, nz, d0, d, an, h, planes[p, 6], planes[p, 7])
    for s in range(spheres.shape[0]):
        rx = x - spheres[s, 0]
        ry = y - spheres[s, 1]
        rz = z - spheres[s, 2]
        r0 = spheres[s, 3]
        dist = math.sqrt(rx * rx + ry * ry + rz * rz)
        if dist < r0:
            if spheres[s, 6] != 0.0:
                return x, y, z, vx, vy, vz, 1
            if dist > 0.0:
                nx = rx / dist
                ny = ry / dist
                nz = rz / dist
            else:
                nx = 0.0
                ny = 1.0
                nz = 0.0
            d0 = -1.0
            an = 0.0
            if h > 0.0:
                qx = x0 - spheres[s, 0]
                qy = y0 - spheres[s, 1]
                qz = z0 - spheres[s, 2]
                d0 = math.sqrt(qx * qx + qy * qy + qz * qz) - r0
                an = ((vx - vx0) * nx + (vy - vy0) * ny + (vz - vz0) * nz) / h
            x, y, z, vx, vy, vz = _bounce(x, y, z, vx, vy, vz, nx, ny, nz, d0, dist - r0, an, h,
                                          spheres[s, 4], spheres[s, 5])
    return x, y, z, vx, vy, vz, 0
