"""Obstacles: planes and spheres puffs bounce off, slide along or die on.

Contact response, applied after each step's position update: a puff found
inside an obstacle at depth ``d`` is moved back to the nearest surface point
and, if it is moving into the surface (normal velocity ``v_n < 0``), a further
``e d`` out: the distance it would have rebounded in the part of the step
after the impact (this halves the rebound-height error of plain projection
at a given step).  Its normal velocity is reflected with restitution ``e`` (``v_n' = -e v_n``) and the tangential
velocity is damped by Coulomb friction ``mu`` applied over the same impulse,

    v_t' = max(0, 1 - mu dv_n / |v_t|) v_t,   dv_n = (1 + e) |v_n|

(Bridson, Fedkiw, Anderson, "Robust Treatment of Collisions, Contact and
Friction for Cloth Animation", ACM TOG 21(3), 2002).  With ``kill`` the puff
dies on contact instead.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numba
import numpy as np

from splatter.jit import KERNEL, PARALLEL
from splatter.look import PlaneSpec, SphereSpec

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
        if isinstance(o, PlaneSpec):
            n = np.asarray(o.normal, dtype=np.float64)
            length = float(np.sqrt(n @ n))
            if length == 0:
                raise ValueError(f"obstacle[{i}].normal must not be the zero vector")
            planes.append(np.concatenate([o.point, n / length, [o.bounce, o.friction, float(o.kill)]]))
        elif isinstance(o, SphereSpec):
            spheres.append(np.concatenate([o.center, [o.radius, o.bounce, o.friction, float(o.kill)]]))
        else:
            raise TypeError(f"obstacle[{i}] must be a plane or sphere record, got {type(o).__name__}")
    return ObstacleTables(planes=np.array(planes, dtype=np.float64).reshape(len(planes), PLANE_COLS),
                          spheres=np.array(spheres, dtype=np.float64).reshape(len(spheres), SPHERE_COLS))


@numba.njit(inline="always", **KERNEL)
def _respond(vx, vy, vz, nx, ny, nz, e, mu):
    """Velocity after contact with a surface of unit normal n (restitution e, friction mu)."""
    vn = vx * nx + vy * ny + vz * nz
    if vn >= 0.0:
        return vx, vy, vz  # already leaving the surface
    tx = vx - vn * nx
    ty = vy - vn * ny
    tz = vz - vn * nz
    vt = math.sqrt(tx * tx + ty * ty + tz * tz)
    f = 0.0
    if vt > 0.0:
        f = max(0.0, 1.0 - mu * (1.0 + e) * (-vn) / vt)
    vn2 = -e * vn
    return f * tx + vn2 * nx, f * ty + vn2 * ny, f * tz + vn2 * nz


@numba.njit(inline="always", **KERNEL)
def _collide(x, y, z, vx, vy, vz, planes, spheres):
    """Resolve contacts of one puff; returns the new state and 1 if it was killed."""
    for p in range(planes.shape[0]):
        nx = planes[p, 3]
        ny = planes[p, 4]
        nz = planes[p, 5]
        d = (x - planes[p, 0]) * nx + (y - planes[p, 1]) * ny + (z - planes[p, 2]) * nz
        if d < 0.0:
            if planes[p, 8] != 0.0:
                return x, y, z, vx, vy, vz, 1
            vn = vx * nx + vy * ny + vz * nz
            back = -d * (1.0 + planes[p, 6]) if vn < 0.0 else -d  # mirror the overshoot, scaled by e
            x += back * nx
            y += back * ny
            z += back * nz
            vx, vy, vz = _respond(vx, vy, vz, nx, ny, nz, planes[p, 6], planes[p, 7])
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
            vn = vx * nx + vy * ny + vz * nz
            out = r0 + (r0 - dist) * spheres[s, 4] if vn < 0.0 else r0  # mirror the overshoot, scaled by e
            x = spheres[s, 0] + out * nx
            y = spheres[s, 1] + out * ny
            z = spheres[s, 2] + out * nz
            vx, vy, vz = _respond(vx, vy, vz, nx, ny, nz, spheres[s, 4], spheres[s, 5])
    return x, y, z, vx, vy, vz, 0


@numba.njit(**PARALLEL)
def _collide_all(pos, vel, planes, spheres, killed):
    for i in numba.prange(pos.shape[0]):
        x, y, z, vx, vy, vz, k = _collide(pos[i, 0], pos[i, 1], pos[i, 2], vel[i, 0], vel[i, 1], vel[i, 2],
                                          planes, spheres)
        pos[i, 0] = x
        pos[i, 1] = y
        pos[i, 2] = z
        vel[i, 0] = vx
        vel[i, 1] = vy
        vel[i, 2] = vz
        killed[i] = k


def resolve_contacts(pos, vel, tables: ObstacleTables):
    """Resolve contacts of puffs with obstacles (the step kernel does this after each step).

    Parameters
    ----------
    pos, vel : (N, 3) float64 array_like
    tables : ObstacleTables

    Returns
    -------
    pos, vel : (N, 3) float64 ndarray
        New copies.
    killed : (N,) bool ndarray
    """
    pos = np.array(pos, dtype=np.float64, order="C")
    vel = np.array(vel, dtype=np.float64, order="C")
    if pos.ndim != 2 or pos.shape[1] != 3:
        raise ValueError(f"pos must have shape (N, 3), got {pos.shape}")
    if vel.shape != pos.shape:
        raise ValueError(f"vel must have the shape of pos {pos.shape}, got {vel.shape}")
    killed = np.zeros(pos.shape[0], dtype=np.int8)
    _collide_all(pos, vel, tables.planes, tables.spheres, killed)
    return pos, vel, killed.astype(bool)
