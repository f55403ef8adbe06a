"""Emission: when puffs are born (the schedule) and what they are born with.

Time is counted in simulation steps from the start of the warm-up (step 0).
A source's steady emission is a lattice of birth positions

    x_k = origin + k * steps / per      (k = 0, 1, 2, ...)

with integers ``per`` puffs every ``steps`` steps, so slot ``k + per`` is born
exactly ``steps`` steps after slot ``k`` at the same fractional position in its
step: integer arithmetic, no rounding drift.  A puff born at ``x`` (in
``(s - 1, s]``) appears at step boundary ``s = ceil(x)`` with age
``(s - x) * dt``; its launch position is advanced ballistically by that age.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import Optional, Tuple

import numpy as np

N_DRAWS = 16
"""Uniforms drawn per puff.  Columns: 0-2 position, 3-4 launch direction,
5 speed, 6 life, 7 size, 8 aspect, 9-11 orientation; 12-15 reserved."""


@dataclass(frozen=True)
class Schedule:
    """Birth times of one source, in steps from the start of the warm-up.

    Attributes
    ----------
    per, steps : int
        ``per`` puffs are born every ``steps`` steps (``per = 0``: no steady
        emission).
    origin : int
        Step of slot 0.
    lo, hi : float or None
        Only births with ``lo <= x_k < hi`` happen (``None``: unbounded).
    bursts : tuple of (int, float, int)
        ``(boundary step, age fraction of a step at that boundary, count)``.
    """

    per: int
    steps: int
    origin: int = 0
    lo: Optional[float] = None
    hi: Optional[float] = None
    bursts: Tuple[Tuple[int, float, int], ...] = ()

    def birth(self, k: np.ndarray):
        """Boundary step and age fraction (of one step) at that boundary of slots ``k``.

        Parameters
        ----------
        k : (n,) int64 ndarray

        Returns
        -------
        boundary : (n,) int64 ndarray
            ``ceil(x_k)``.
        frac : (n,) float64 ndarray
            ``boundary - x_k`` in [0, 1), computed from integers.
        """
        num = k * self.steps
        up = -((-num) // self.per)
        frac = (up * self.per - num) / self.per
        return self.origin + up, frac

    def due(self, k_next: int, s: int) -> np.ndarray:
        """Slots ``k >= k_next`` whose boundary is ``<= s`` (and inside the window).

        Returns
        -------
        (n,) int64 ndarray
            All slots from ``k_next`` through the last one due at ``s``;
            slots outside ``[lo, hi)`` are left out but still consumed.
        """
        if self.per == 0 or s < self.origin:
            return np.empty(0, dtype=np.int64)
        k_last = ((s - self.origin) * self.per) // self.steps  # ceil(x_k) <= s  <=>  k*steps <= (s-origin)*per
        if k_last < k_next:
            return np.empty(0, dtype=np.int64)
        return np.arange(k_next, k_last + 1, dtype=np.int64)

    def inside(self, k: np.ndarray) -> np.ndarray:
        """Mask of slots whose birth lies in ``[lo, hi)``."""
        x = self.origin + k * (self.steps / self.per)
        ok = np.ones(k.shape, dtype=bool)
        if self.lo is not None:
            ok &= x >= self.lo
        if self.hi is not None:
            ok &= x < self.hi
        return ok


def _cross(a, b):
    return (a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0])


@functools.lru_cache(maxsize=64)
def _basis_of(axis: tuple) -> tuple:
    n = math.sqrt(sum(c * c for c in axis))
    w = (0.0, 1.0, 0.0) if n == 0 else tuple(c / n for c in axis)
    helper = (1.0, 0.0, 0.0) if abs(w[0]) < 0.9 else (0.0, 0.0, 1.0)
    u = _cross(helper, w)
    nu = math.sqrt(sum(c * c for c in u))
    u = tuple(c / nu for c in u)
    return w, u, _cross(w, u)


def _basis(axis) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Unit ``axis`` and two unit vectors completing a right-handed basis."""
    return tuple(np.array(v) for v in _basis_of(tuple(float(c) for c in axis)))


def sample_positions(source, u: np.ndarray) -> np.ndarray:
    """Birth positions inside a source's shape.

    Parameters
    ----------
    source : SourceSpec
    u : (n, 3) float64 ndarray
        Uniforms in [0, 1).

    Returns
    -------
    (n, 3) float64 ndarray
        point: the centre; sphere: uniform in the ball; disc: uniform in the
        disc of ``radius`` normal to ``normal``; box: uniform in
        ``center +- extent``; line: uniform on ``center -> center + extent``.
    """
    c = np.asarray(source.center, dtype=np.float64)
    n = u.shape[0]
    shape = source.shape
    if shape == "point":
        return np.repeat(c[None, :], n, axis=0)
    if shape == "sphere":
        # Uniform direction (z uniform in [-1, 1]) times radius * u^(1/3): uniform in volume.
        z = 2.0 * u[:, 0] - 1.0
        phi = 2.0 * np.pi * u[:, 1]
        rxy = np.sqrt(np.maximum(0.0, 1.0 - z * z))
        r = source.radius * np.cbrt(u[:, 2])
        d = np.stack([rxy * np.cos(phi), rxy * np.sin(phi), z], axis=1)
        return c + r[:, None] * d
    if shape == "disc":
        _, e1, e2 = _basis(source.normal)
        r = source.radius * np.sqrt(u[:, 0])  # sqrt: uniform in area
        phi = 2.0 * np.pi * u[:, 1]
        return c + (r * np.cos(phi))[:, None] * e1 + (r * np.sin(phi))[:, None] * e2
    if shape == "box":
        return c + (2.0 * u - 1.0) * np.asarray(source.extent, dtype=np.float64)
    if shape == "line":
        return c + u[:, :1] * np.asarray(source.extent, dtype=np.float64)
    raise ValueError(f"source.shape must be one of point, sphere, disc, box, line; got {shape!r}")


def sample_directions(direction, spread_deg: float, u: np.ndarray) -> np.ndarray:
    """Unit launch directions uniform in solid angle inside a cone.

    Parameters
    ----------
    direction : 3-vector
        Cone axis.
    spread_deg : float
        Half-angle in degrees (0: all along the axis; 180: the whole sphere).
    u : (n, 2) float64 ndarray
        Uniforms in [0, 1).

    Returns
    -------
    (n, 3) float64 ndarray
    """
    w, e1, e2 = _basis(direction)
    cos_a = math.cos(math.radians(spread_deg))
    cos_t = 1.0 - u[:, 0] * (1.0 - cos_a)  # cos uniform on [cos a, 1]: uniform in solid angle
    sin_t = np.sqrt(np.maximum(0.0, 1.0 - cos_t * cos_t))
    phi = 2.0 * np.pi * u[:, 1]
    return (cos_t[:, None] * w + (sin_t * np.cos(phi))[:, None] * e1
            + (sin_t * np.sin(phi))[:, None] * e2)


def sample_quaternions(u: np.ndarray) -> np.ndarray:
    """Uniformly distributed unit quaternions (Shoemake, "Uniform random rotations", Graphics Gems III, 1992).

    Parameters
    ----------
    u : (n, 3) float64 ndarray
        Uniforms in [0, 1).

    Returns
    -------
    (n, 4) float64 ndarray
        ``(w, x, y, z)``.
    """
    a = np.sqrt(1.0 - u[:, 0])
    b = np.sqrt(u[:, 0])
    t1 = 2.0 * np.pi * u[:, 1]
    t2 = 2.0 * np.pi * u[:, 2]
    return np.stack([b * np.cos(t2), a * np.sin(t1), a * np.cos(t1), b * np.sin(t2)], axis=1)


def _range(r, u):
    lo, hi = float(r[0]), float(r[1])
    return lo + (hi - lo) * u


def sample_puffs(source, u: np.ndarray) -> dict:
    """Everything a puff is born with, from its uniforms.

    Parameters
    ----------
    source : SourceSpec
    u : (n, N_DRAWS) float64 ndarray

    Returns
    -------
    dict of ndarray
        ``pos (n,3)``, ``vel (n,3)``, ``life (n,)``, ``size (n,)`` (birth
        sigma), ``aspect (n,)``, ``quat (n,4)``.
    """
    n = u.shape[0]
    pos = sample_positions(source, u[:, 0:3])
    vel = sample_directions(source.direction, source.spread, u[:, 3:5]) * _range(source.speed, u[:, 5])[:, None]
    if tuple(source.aspect) == (1.0, 1.0):
        quat = np.zeros((n, 4))
        quat[:, 0] = 1.0
    else:
        quat = sample_quaternions(u[:, 9:12])
    return dict(pos=pos, vel=vel, life=_range(source.life, u[:, 6]), size=_range(source.size, u[:, 7]),
                aspect=_range(source.aspect, u[:, 8]), quat=quat)
