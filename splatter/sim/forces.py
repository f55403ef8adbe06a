"""Forces: the look's ``[[force]]`` records packed into tables for the kernels.

A puff has a position ``x`` and its own velocity ``v``; it moves with

    dx/dt = v + u(x, t)          u: swirl + vortex air motion (advection)
    dv/dt = g - d v + sum_w grip_w (U_w(t) - v) + sum_l A_l exp(-c_l age) n_l

* gravity ``g`` (sum of all gravity forces); drag ``d`` (sum of rates);
* wind ``w``: ``U_w(t) = velocity * (1 + gust * gust_w(t))``, where
  ``gust_w`` is a smooth periodic function in [-1, 1], a sum of three
  sinusoids with periods ``gust_period / (1, 1.93, 3.71)``, weights
  ``(0.6, 0.3, 0.1)`` and random phases keyed by ``(seed, force index)``;
  when the clip loops exactly each period is snapped to the loop period
  divided by a whole number;
* lift ``l``: buoyancy ``accel`` along ``direction`` cooling at rate ``c``;
* swirl and vortex are air motion that **carries** the puff directly (added
  to ``dx/dt``), not a force on ``v``.  Why: curl noise is meant to advect
  (a divergence-free flow keeps puffs evenly spread, while inertial puffs in
  it would bunch up in strain regions); ``strength`` is then the speed puffs
  actually drift with; and adding a swirl does not quietly add drag toward
  still air.  The reported puff velocity is ``v + u(x, t)``.
* convection: a buoyant flow on a coarse grid (:mod:`splatter.sim.flow`),
  state shared by all puffs, so the driver steps it and hands each puff the
  air velocity (and gradient) there; the step kernel adds it to ``u``.
* vortex: tangential air speed about ``axis`` through ``center``, a Rankine
  profile (solid-body rotation inside ``radius``, ``1/r`` outside) scaled so
  the speed at ``radius`` is ``strength``; positive strength turns
  counter-clockwise seen from the tip of ``axis``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Optional

import numba
import numpy as np

from splatter.core.jit import KERNEL
from splatter.sim.flow import ConvectionTable
from splatter.sim.rng import force_generator
from splatter.sim.swirl import build_swirl, modified_wavenumbers, phase_table

GUST_RATIOS = (1.0, 1.93, 3.71)  # frequency multiples of 1/gust_period
GUST_WEIGHTS = (0.6, 0.3, 0.1)

# Column layouts of the tables.
WIND_COLS = 14  # velocity 0-2, grip 3, gust 4, omega 5-7, weight 8-10, phase 11-13
LIFT_COLS = 5  # accel 0, cooling 1, unit direction 2-4
VORTEX_COLS = 8  # center 0-2, unit axis 3-5, strength 6, radius 7


@dataclass(frozen=True, eq=False)
class ForceTables:
    """Every force of a look, in the form the step kernel reads.

    Attributes
    ----------
    gravity : (3,) float64 ndarray
    drag : float
    wind : (nw, 14) float64 ndarray
    lift : (nl, 5) float64 ndarray
    swirl_q : (D, 3) float64 ndarray
        Base wavevectors of all swirl forces, concatenated.
    swirl_oct : (D,) int64 ndarray
        Octaves (modes) of each base wavevector.
    swirl_b : (M, 3) float64 ndarray
        Velocity amplitudes of all modes, direction-major.
    swirl_w, swirl_phi : (M,) float64 ndarray
    vortex : (nv, 8) float64 ndarray
    swirls : tuple of SwirlField
        The swirl fields themselves, one per swirl force.
    gust_periods : tuple of tuple of float
        Per wind, the three gust periods used, seconds.
    convection : ConvectionTable or None
        The buoyant flow, stepped by the driver (:mod:`splatter.sim.flow`), not by the step kernel.
    swirl_kt : (M, 3) float64 ndarray
        Modified wavenumbers ``sin(k h) / h`` of all modes, for the velocity
        gradient (see :mod:`splatter.sim.swirl`).
    """

    gravity: np.ndarray
    drag: float
    wind: np.ndarray
    lift: np.ndarray
    swirl_q: np.ndarray
    swirl_oct: np.ndarray
    swirl_b: np.ndarray
    swirl_w: np.ndarray
    swirl_phi: np.ndarray
    vortex: np.ndarray
    swirls: tuple = ()
    gust_periods: tuple = ()
    swirl_kt: np.ndarray = field(default_factory=lambda: np.zeros((0, 3)))
    convection: Optional[ConvectionTable] = None

    def swirl_phases(self, t: float) -> np.ndarray:
        """cos and sin of ``w t + phi`` for all swirl modes, (2, M) float64."""
        return phase_table(self.swirl_w * float(t) + self.swirl_phi)

    def wind_target(self, t: float) -> tuple[float, np.ndarray]:
        """Total grip ``K`` and ``sum_w grip_w U_w(t)`` (3,) at time ``t``."""
        out = np.zeros(4)
        _wind_sum(self.wind, float(t), out)
        return out[0], out[1:]


def _unit(v, name):
    v = np.asarray(v, dtype=np.float64)
    n = float(np.sqrt(v @ v))
    if n == 0:
        raise ValueError(f"{name} must not be the zero vector")
    return v / n


def snap_period(period: float, loop_period: float) -> float:
    """The loop period divided by the whole number (>= 1) nearest to ``loop_period / period``."""
    return loop_period / max(1, round(loop_period / period))


def pack_forces(forces, *, seed: int, loop_period=None, heat=()) -> ForceTables:
    """Pack force records into :class:`ForceTables`.

    Parameters
    ----------
    forces : sequence of ForceSpec
    seed : int
        The look's seed (random gust phases and swirl modes).
    loop_period : float or None
        Exact-loop period in seconds; time-varying forces are made periodic in it.
    heat : sequence of float
        Each source's ``heat`` (for a convection force).

    Returns
    -------
    ForceTables
    """
    gravity = np.zeros(3)
    drag = 0.0
    winds, lifts, vortices, swirls, gust_periods = [], [], [], [], []
    convection = None
    for i, f in enumerate(forces):
        kind = getattr(f, "kind", None)
        if kind == "gravity":
            gravity = gravity + np.asarray(f.accel, dtype=np.float64)
        elif kind == "drag":
            drag += float(f.rate)
        elif kind == "wind":
            row = np.zeros(WIND_COLS)
            row[0:3] = f.velocity
            row[3] = f.grip
            row[4] = f.gust
            periods = []
            rng = force_generator(seed, i)
            phases = rng.uniform(0.0, 2.0 * np.pi, 3)
            for j, (ratio, weight) in enumerate(zip(GUST_RATIOS, GUST_WEIGHTS)):
                p = f.gust_period / ratio
                if loop_period is not None:
                    p = snap_period(p, loop_period)
                periods.append(p)
                row[5 + j] = 2.0 * np.pi / p
                row[8 + j] = weight
                row[11 + j] = phases[j]
            winds.append(row)
            gust_periods.append(tuple(periods))
        elif kind == "lift":
            lifts.append(np.concatenate([[f.accel, f.cooling], _unit(f.direction, f"force[{i}].direction")]))
        elif kind == "swirl":
            swirls.append(build_swirl(f, seed=seed, force_index=i, period=loop_period))
        elif kind == "convection":
            convection = ConvectionTable(cells=int(f.cells), buoyancy=float(f.buoyancy), cooling=float(f.cooling),
                                         confinement=float(f.confinement), heat=tuple(float(x) for x in heat))
        elif kind == "vortex":
            vortices.append(np.concatenate([f.center, _unit(f.axis, f"force[{i}].axis"), [f.strength, f.radius]]))
        else:
            raise TypeError(f"force[{i}]: expected a force record of a kind in FORCE_KINDS, got {type(f).__name__}")

    def table(rows, cols):
        return np.array(rows, dtype=np.float64).reshape(len(rows), cols)

    def cat(name, width):
        if not swirls:
            return np.zeros((0, width)) if width else np.zeros(0)
        parts = [getattr(s, name) for s in swirls]
        return np.ascontiguousarray(np.concatenate(parts, axis=0))

    octs = np.array([s.octaves for s in swirls for _ in range(s.q.shape[0])], dtype=np.int64)

    return ForceTables(gravity=gravity, drag=drag, wind=table(winds, WIND_COLS), lift=table(lifts, LIFT_COLS),
                       swirl_q=cat("q", 3), swirl_oct=octs, swirl_b=cat("b", 3), swirl_w=cat("w", 0), swirl_phi=cat("phi", 0),
                       vortex=table(vortices, VORTEX_COLS), swirls=tuple(swirls),
                       gust_periods=tuple(gust_periods), convection=convection,
                       swirl_kt=np.ascontiguousarray(np.concatenate([modified_wavenumbers(s) for s in swirls]))
                       if swirls else np.zeros((0, 3)))


@numba.njit(**KERNEL)
def _wind_sum(wind, t, out):
    """``out = (sum grip, sum grip * U(t))``: the winds at time ``t``."""
    out[:] = 0.0
    for w in range(wind.shape[0]):
        g = 0.0
        for j in range(3):
            g += wind[w, 8 + j] * math.sin(wind[w, 5 + j] * t + wind[w, 11 + j])
        scale = wind[w, 3] * (1.0 + wind[w, 4] * g)
        out[0] += wind[w, 3]
        out[1] += scale * wind[w, 0]
        out[2] += scale * wind[w, 1]
        out[3] += scale * wind[w, 2]


@numba.njit(inline="always", **KERNEL)
def _accel(vx, vy, vz, age, gravity, drag, wk, wu, lift):
    """dv/dt at one puff; ``wk, wu`` from :func:`_wind_sum`."""
    k = drag + wk
    ax = gravity[0] - k * vx + wu[0]
    ay = gravity[1] - k * vy + wu[1]
    az = gravity[2] - k * vz + wu[2]
    for l in range(lift.shape[0]):
        a = lift[l, 0] * math.exp(-lift[l, 1] * age)
        ax += a * lift[l, 2]
        ay += a * lift[l, 3]
        az += a * lift[l, 4]
    return ax, ay, az


@numba.njit(inline="always", **KERNEL)
def _vortex_at(x, y, z, vortex):
    """Rankine vortex air velocity at one point."""
    ux = 0.0
    uy = 0.0
    uz = 0.0
    for v in range(vortex.shape[0]):
        rx, ry, rz, ax, ay, az, gain, _ = _vortex_geometry(x, y, z, vortex, v)
        ux += gain * (ay * rz - az * ry)
        uy += gain * (az * rx - ax * rz)
        uz += gain * (ax * ry - ay * rx)
    return ux, uy, uz


@numba.njit(inline="always", **KERNEL)
def _vortex_geometry(x, y, z, vortex, v):
    """Vortex ``v`` seen from one point: the offset ``r_perp`` across its axis, the
    axis, the Rankine ``gain`` (``u = gain (axis x r_perp)``) and ``d gain / d(rho^2)`` times 2."""
    rx = x - vortex[v, 0]
    ry = y - vortex[v, 1]
    rz = z - vortex[v, 2]
    ax = vortex[v, 3]
    ay = vortex[v, 4]
    az = vortex[v, 5]
    along = rx * ax + ry * ay + rz * az
    rx -= along * ax
    ry -= along * ay
    rz -= along * az
    rho2 = rx * rx + ry * ry + rz * rz
    s = vortex[v, 6]
    r0 = vortex[v, 7]
    if rho2 <= r0 * r0:
        gain = s / r0 if r0 > 0.0 else 0.0  # solid body: speed s * rho / r0
        dg = 0.0
    else:
        gain = s * r0 / rho2  # speed s * r0 / rho
        dg = -2.0 * s * r0 / (rho2 * rho2)
    return rx, ry, rz, ax, ay, az, gain, dg


@numba.njit(inline="always", **KERNEL)
def _vortex_grad_at(x, y, z, vortex, g, j):
    """Add the Rankine vortices' velocity gradient at one point into ``g[0:9, j]``
    (``g[3 a + b] = du_a/dx_b``).

    ``u = gain(rho) (axis x r)``: inside the core ``gain`` is constant, so the
    gradient is the solid rotation ``gain [axis]_x``; outside
    ``gain = s r0 / rho^2`` adds ``-2 s r0 / rho^4 (axis x r) r_perp^T``.  Both
    are traceless (``(axis x r) . r_perp = 0``), as the flow is divergence-free.
    """
    for v in range(vortex.shape[0]):
        rx, ry, rz, ax, ay, az, gain, dg = _vortex_geometry(x, y, z, vortex, v)
        cx = ay * rz - az * ry
        cy = az * rx - ax * rz
        cz = ax * ry - ay * rx
        # [axis]_x = [[0, -az, ay], [az, 0, -ax], [-ay, ax, 0]]
        g[0, j] += dg * cx * rx
        g[1, j] += gain * -az + dg * cx * ry
        g[2, j] += gain * ay + dg * cx * rz
        g[3, j] += gain * az + dg * cy * rx
        g[4, j] += dg * cy * ry
        g[5, j] += gain * -ax + dg * cy * rz
        g[6, j] += gain * -ay + dg * cz * rx
        g[7, j] += gain * ax + dg * cz * ry
        g[8, j] += dg * cz * rz
