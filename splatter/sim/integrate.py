"""One simulation step for every puff: integrate the motion, then resolve contacts.

The motion is ``dx/dt = v + u(x, t)``, ``dv/dt = a(x, v, age, t)`` (see
:mod:`splatter.sim.forces`).  Integrators, with step ``h``:

* ``"euler"`` (explicit): ``x1 = x + h (v + u(x))``, ``v1 = v + h a(x, v)``;
* ``"symplectic"`` (semi-implicit Euler, velocity first):
  ``v1 = v + h a(x, v)``, ``x1 = x + h (v1 + u(x))``;
* ``"midpoint"`` (explicit RK2): evaluate at ``(x, v, age, t)``, take half a
  step, evaluate there at ``age + h/2, t + h/2`` and take the whole step
  with that slope.

The linear part of ``a``, the pull ``-k v`` of drag and wind grip (``k`` the
sum of drag rates and grips), is integrated exactly in every method: each
velocity update ``v + h a`` is ``v + phi(h) a`` with
``phi(h) = (1 - exp(-k h)) / k``, so ``v' = -k v + f`` with constant ``f``
gives ``v1 = exp(-k h) v + phi(h) f`` (the exponential Euler method), and the
midpoint rule evaluates the forcing ``f`` at the half step but keeps ``-k v``
at the start (the exponential midpoint rule; Hochbruck & Ostermann,
"Exponential integrators", Acta Numerica 19, 2010, section 2 [from memory]).
Since ``phi(h) <= h`` and ``exp(-k h) <= 1``, no drag or grip, however
strong, makes a velocity grow: ``|v1| <= |v| + h |f|`` at any step.  For
``k h`` small it is the plain method to within ``O((k h)^2)``.

Each puff is independent (no sum crosses puffs), so the parallel loop gives
the same bits on any thread count.

The kernels here inline helpers from :mod:`splatter.sim.forces`,
:mod:`splatter.sim.obstacles` and :mod:`splatter.sim.swirl`; numba's on-disk cache
only notices edits to this file, so after changing a helper delete the cache
(``$NUMBA_CACHE_DIR``, else ``splatter/__pycache__``). Touching this file is not
enough: numba (0.68) stamps a source file by a hash of its bytes, not its time.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from splatter.core.args import check_choice
from splatter.core.choices import INTEGRATORS
from splatter.core.jit import KERNEL, PARALLEL
from splatter.sim.forces import (
    ForceTables,
    _accel,
    _vortex_at,
    _vortex_grad_at,
    _wind_sum,
)
from splatter.sim.obstacles import ObstacleTables, _collide
from splatter.sim.shaping import LANE_ROWS, _check_deform, _relax_listed, _shape_step
from splatter.sim.swirl import BLOCK, _swirl_block, _swirl_grad_block, load_points


@numba.njit(**KERNEL)
def _air_block(buf, px, ux, n, sq, so, sb, cs, vortex, skt, gx):
    """Swirl plus vortex air velocity at points in ``buf[px:px+3]`` into ``buf[ux:ux+3]``; rows 12-13 scratch.

    When ``gx > 0`` also the velocity gradient into ``buf[gx:gx+9]``
    (row ``gx + 3 a + b`` holds ``du_a/dx_b``), in the same pass over the modes,
    as seen by puffs of the sigmas in ``buf[23]`` (rows 24-25 scratch).
    """
    for j in range(n):
        buf[ux, j] = 0.0
        buf[ux + 1, j] = 0.0
        buf[ux + 2, j] = 0.0
    g = buf[gx:gx + 9]
    if gx > 0:
        for r in range(9):
            for j in range(n):
                g[r, j] = 0.0
    if sq.shape[0]:
        if gx > 0:
            _swirl_grad_block(buf[px], buf[px + 1], buf[px + 2], n, sq, so, sb, skt, cs, buf[ux], buf[ux + 1],
                              buf[ux + 2], g, buf[12], buf[13], buf[23], buf[24], buf[25])
        else:
            _swirl_block(buf[px], buf[px + 1], buf[px + 2], n, sq, so, sb, cs, buf[ux], buf[ux + 1], buf[ux + 2],
                         buf[12], buf[13])
    if vortex.shape[0]:
        for j in range(n):
            wx, wy, wz = _vortex_at(buf[px, j], buf[px + 1, j], buf[px + 2, j], vortex)
            buf[ux, j] += wx
            buf[ux + 1, j] += wy
            buf[ux + 2, j] += wz
            if gx > 0:
                _vortex_grad_at(buf[px, j], buf[px + 1, j], buf[px + 2, j], vortex, g, j)


@numba.njit(inline="always", **KERNEL)
def _phi(k, h):
    """``(1 - exp(-k h)) / k``: the step a velocity takes under the pull ``-k v`` (``h`` when ``k = 0``)."""
    kh = k * h
    if kh < 1e-8:
        return h * (1.0 - 0.5 * kh)
    return -math.expm1(-kh) / k


@numba.njit(inline="always", **KERNEL)
def _add_flow(buf, ux, i0, n, flow, gradient):
    """Add the convection flow of puffs ``i0 ..`` to the air in ``buf[ux:ux+3]`` (and its gradient to rows 14-22)."""
    if flow.shape[0] == 0:
        return
    for j in range(n):
        buf[ux, j] += flow[i0 + j, 0]
        buf[ux + 1, j] += flow[i0 + j, 1]
        buf[ux + 2, j] += flow[i0 + j, 2]
    if gradient and flow.shape[1] == 12:
        for r in range(9):
            for j in range(n):
                buf[14 + r, j] += flow[i0 + j, 3 + r]


@numba.njit(**KERNEL)
def _step_block(pos, vel, age, i0, n, h, method, gravity, drag, wind0, wind1, lift, sq, so, sb, ph0, ph1,
                vortex, planes, spheres, killed, buf, skt, deform, follow, elong, sigma, flow, todo, lanes):
    """Advance puffs ``i0 .. i0+n-1``; ``buf`` is (26, BLOCK) scratch.

    Rows: 0-2 position, 3-5 air velocity there, 6-8 midpoint position,
    9-11 air velocity at the midpoint, 12-13 swirl scratch, 14-22 the air
    velocity gradient (only when ``deform`` has rows: shapes follow the flow),
    23 the puffs' sigmas (the gradient is the one each puff feels as a whole),
    24-25 scratch.
    The gradient is taken where the step's air velocity is: at the start for
    Euler and symplectic Euler, at the midpoint for the midpoint rule.
    ``flow`` (N, 3) or (N, 12), or no rows: the convection flow's velocity
    (and gradient) at each puff's start, added to the air at both points.
    ``todo`` (BLOCK,) int64 and ``lanes`` (LANE_ROWS, 8) float64 are scratch for
    the shapes that may need relaxing, which relax together after the loop.
    """
    shaping = deform.shape[0] > 0
    m = 0
    wk0 = wind0[0]
    wu0 = wind0[1:]
    wk1 = wind1[0]
    wu1 = wind1[1:]
    half = 0.5 * h
    k0 = drag + wk0
    k1 = drag + wk1
    ph = _phi(k0, h)  # the step the velocity takes: exact for the linear pull -k v
    phh = _phi(k0, half)
    load_points(pos, i0, n, buf)
    for j in range(n):
        buf[23, j] = sigma[i0 + j] if shaping else 0.0
    _air_block(buf, 0, 3, n, sq, so, sb, ph0, vortex, skt, 14 if shaping and method != 2 else 0)
    _add_flow(buf, 3, i0, n, flow, shaping and method != 2)
    if method == 2:
        for j in range(n):
            i = i0 + j
            buf[6, j] = buf[0, j] + half * (vel[i, 0] + buf[3, j])
            buf[7, j] = buf[1, j] + half * (vel[i, 1] + buf[4, j])
            buf[8, j] = buf[2, j] + half * (vel[i, 2] + buf[5, j])
        _air_block(buf, 6, 9, n, sq, so, sb, ph1, vortex, skt, 14 if shaping else 0)
        _add_flow(buf, 9, i0, n, flow, shaping)
    for j in range(n):
        i = i0 + j
        x = buf[0, j]
        y = buf[1, j]
        z = buf[2, j]
        vx = vel[i, 0]
        vy = vel[i, 1]
        vz = vel[i, 2]
        a = age[i]
        ax, ay, az = _accel(vx, vy, vz, a, gravity, drag, wk0, wu0, lift)
        if method == 0:
            x1 = x + h * (vx + buf[3, j])
            y1 = y + h * (vy + buf[4, j])
            z1 = z + h * (vz + buf[5, j])
            vx1 = vx + ph * ax
            vy1 = vy + ph * ay
            vz1 = vz + ph * az
        elif method == 1:
            vx1 = vx + ph * ax
            vy1 = vy + ph * ay
            vz1 = vz + ph * az
            x1 = x + h * (vx1 + buf[3, j])
            y1 = y + h * (vy1 + buf[4, j])
            z1 = z + h * (vz1 + buf[5, j])
        else:
            vxm = vx + phh * ax
            vym = vy + phh * ay
            vzm = vz + phh * az
            ax, ay, az = _accel(vxm, vym, vzm, a + half, gravity, drag, wk1, wu1, lift)
            # The forcing from the half step, the linear pull from the start.
            ax += k1 * vxm - k0 * vx
            ay += k1 * vym - k0 * vy
            az += k1 * vzm - k0 * vz
            x1 = x + h * (vxm + buf[9, j])
            y1 = y + h * (vym + buf[10, j])
            z1 = z + h * (vzm + buf[11, j])
            vx1 = vx + ph * ax
            vy1 = vy + ph * ay
            vz1 = vz + ph * az
        x1, y1, z1, vx1, vy1, vz1, k = _collide(x1, y1, z1, vx1, vy1, vz1, planes, spheres, x, y, z, vx, vy, vz, h)
        pos[i, 0] = x1
        pos[i, 1] = y1
        pos[i, 2] = z1
        vel[i, 0] = vx1
        vel[i, 1] = vy1
        vel[i, 2] = vz1
        killed[i] = k
        if shaping and _shape_step(deform, i, buf[14, j], buf[15, j], buf[16, j], buf[17, j], buf[18, j],
                                   buf[19, j], buf[20, j], buf[21, j], buf[22, j], h, follow[i], elong[i]):
            todo[m] = i
            m += 1
    _relax_listed(deform, todo, m, elong, lanes)


@numba.njit(**PARALLEL)
def _step(pos, vel, age, h, method, gravity, drag, wind0, wind1, lift, sq, so, sb, ph0, ph1, vortex,
          planes, spheres, killed, skt, deform, follow, elong, sigma, flow):
    """Advance every puff by one step ``h``; ``wind0/ph0`` at the step's start, ``wind1/ph1`` half-way."""
    nblocks = (pos.shape[0] + BLOCK - 1) // BLOCK
    for blk in numba.prange(nblocks):
        i0 = blk * BLOCK
        n = min(pos.shape[0], i0 + BLOCK) - i0
        buf = np.empty((26, BLOCK))
        todo = np.empty(BLOCK, dtype=np.int64)
        lanes = np.empty((LANE_ROWS, 8))
        _step_block(pos, vel, age, i0, n, h, method, gravity, drag, wind0, wind1, lift, sq, so, sb, ph0, ph1,
                    vortex, planes, spheres, killed, buf, skt, deform, follow, elong, sigma, flow, todo, lanes)


@numba.njit(**PARALLEL)
def _air_velocity(pos, sq, so, sb, cs, vortex, out):
    nblocks = (pos.shape[0] + BLOCK - 1) // BLOCK
    for blk in numba.prange(nblocks):
        i0 = blk * BLOCK
        n = min(pos.shape[0], i0 + BLOCK) - i0
        buf = np.empty((14, BLOCK))
        load_points(pos, i0, n, buf)
        _air_block(buf, 0, 3, n, sq, so, sb, cs, vortex, sq, 0)
        for j in range(n):
            out[i0 + j, 0] = buf[3, j]
            out[i0 + j, 1] = buf[4, j]
            out[i0 + j, 2] = buf[5, j]


@numba.njit(**PARALLEL)
def _air_gradient(pos, sq, so, sb, skt, cs, vortex, sigma, out):
    """out (N, 3, 3): the air velocity gradient at each position, felt by a puff of ``sigma`` there."""
    nblocks = (pos.shape[0] + BLOCK - 1) // BLOCK
    for blk in numba.prange(nblocks):
        i0 = blk * BLOCK
        n = min(pos.shape[0], i0 + BLOCK) - i0
        buf = np.empty((26, BLOCK))
        load_points(pos, i0, n, buf)
        for j in range(n):
            buf[23, j] = sigma[i0 + j]
        _air_block(buf, 0, 3, n, sq, so, sb, cs, vortex, skt, 14)
        for j in range(n):
            for r in range(9):
                out[i0 + j, r // 3, r % 3] = buf[14 + r, j]


_NO_DEFORM = np.zeros((0, 3, 3))
_NO_FLOW = np.zeros((0, 3))


def _check_state(pos, vel):
    for name, arr in (("pos", pos), ("vel", vel)):
        if not isinstance(arr, np.ndarray) or arr.dtype != np.float64 or arr.ndim != 2 or arr.shape[1] != 3:
            raise TypeError(f"{name} must be an (N, 3) float64 ndarray")
        if not arr.flags.c_contiguous:
            raise ValueError(f"{name} must be C-contiguous")
    if vel.shape != pos.shape:
        raise ValueError(f"vel must have the shape of pos {pos.shape}, got {vel.shape}")


def step_puffs(pos: np.ndarray, vel: np.ndarray, age: np.ndarray, *, dt: float, time: float,
               forces: ForceTables, obstacles: ObstacleTables, integrator: str = "symplectic",
               deform: np.ndarray = None, follow=None, elongation=None, sigma=None, flow=None) -> np.ndarray:
    """Advance puffs by one step, in place.

    Parameters
    ----------
    pos, vel : (N, 3) float64 ndarray, C-contiguous
        Position and own velocity; overwritten with the values after the step.
    age : (N,) float64 ndarray
        Ages at the start of the step, seconds.
    dt : float
        Step, seconds (> 0).
    time : float
        Force time at the start of the step (the phase time when looping).
    forces : ForceTables
    obstacles : ObstacleTables
    integrator : {"euler", "symplectic", "midpoint"}
    deform : (N, 3, 3) float64 ndarray, C-contiguous, optional
        Deformation gradients ``F``, advanced in place with the air velocity
        gradient (see :mod:`splatter.sim.shaping`); None leaves shapes out.
    follow, elongation : (N,) float64 array_like, optional
        Per puff, with ``deform``: how strongly ``F`` follows the flow, and
        the stretch ratio above which it relaxes.
    sigma : (N,) float64 array_like, optional
        Per puff, with ``deform``: its current sigma; the flow's gradient is
        the one the whole puff feels (eddies smaller than it are filtered out).
        Default 0 (the point gradient).
    flow : (N, 3) or (N, 12) float64 ndarray, optional
        The convection flow's air velocity at each puff (and its gradient
        ``du_a/dx_b`` in columns ``3 + 3 a + b``, which shapes puffs with
        ``deform``), from :class:`splatter.sim.flow.Convection`; added to the
        swirl and vortex air for the whole step.

    Returns
    -------
    (N,) bool ndarray
        True where the puff touched an obstacle with ``kill`` during the step.
    """
    _check_state(pos, vel)
    age = np.ascontiguousarray(age, dtype=np.float64)
    if age.shape != (pos.shape[0],):
        raise ValueError(f"age must have shape ({pos.shape[0]},), got {age.shape}")
    check_choice(integrator, "integrator", INTEGRATORS)
    if not dt > 0:
        raise ValueError(f"dt must be > 0, got {dt}")
    t = float(time)
    half = 0.5 * float(dt)
    wind0 = np.zeros(4)
    wind1 = np.zeros(4)
    _wind_sum(forces.wind, t, wind0)
    _wind_sum(forces.wind, t + half, wind1)
    killed = np.zeros(pos.shape[0], dtype=np.int8)
    n = pos.shape[0]
    if deform is None:
        deform, follow, elongation, sigma = _NO_DEFORM, np.zeros(0), np.zeros(0), np.zeros(0)
    else:
        _check_deform(deform, n)
        follow = np.ascontiguousarray(np.broadcast_to(np.asarray(follow, dtype=np.float64), (n,)))
        elongation = np.ascontiguousarray(np.broadcast_to(np.asarray(elongation, dtype=np.float64), (n,)))
        sigma = np.ascontiguousarray(np.broadcast_to(np.asarray(0.0 if sigma is None else sigma, dtype=np.float64),
                                                     (n,)))
    _step(pos, vel, age, float(dt), INTEGRATORS.index(integrator), forces.gravity, forces.drag, wind0, wind1,
          forces.lift, forces.swirl_q, forces.swirl_oct, forces.swirl_b, forces.swirl_phases(t),
          forces.swirl_phases(t + half), forces.vortex, obstacles.planes, obstacles.spheres, killed,
          forces.swirl_kt, deform, follow, elongation, sigma, _check_flow(flow, n))
    return killed.astype(bool)


def _check_flow(flow, n):
    if flow is None:
        return _NO_FLOW
    if not isinstance(flow, np.ndarray) or flow.dtype != np.float64 or flow.ndim != 2 or flow.shape[0] != n \
            or flow.shape[1] not in (3, 12):
        raise ValueError(f"flow: expected an ({n}, 3) or ({n}, 12) float64 ndarray, got "
                         f"{getattr(flow, 'shape', type(flow).__name__)}")
    return np.ascontiguousarray(flow)


def air_velocity(pos: np.ndarray, *, time: float, forces: ForceTables) -> np.ndarray:
    """Swirl plus vortex air velocity at ``pos`` ((N, 3) float64) and force time ``time``: (N, 3) float64."""
    pos = np.ascontiguousarray(pos, dtype=np.float64)
    if pos.ndim != 2 or pos.shape[1] != 3:
        raise ValueError(f"pos must have shape (N, 3), got {pos.shape}")
    out = np.empty_like(pos)
    _air_velocity(pos, forces.swirl_q, forces.swirl_oct, forces.swirl_b, forces.swirl_phases(float(time)), forces.vortex, out)
    return out


def air_gradient(pos: np.ndarray, *, time: float, forces: ForceTables, sigma=0.0) -> np.ndarray:
    """Air velocity gradient ``G[i, a, b] = du_a/dx_b`` at ``pos`` ((N, 3) float64) and force time
    ``time``: (N, 3, 3) float64, 1/s.  Wind, gusts, gravity, drag and lift are uniform: they add nothing.

    ``sigma`` (scalar or (N,)): the swirl's gradient as felt by a Gaussian puff of that sigma
    (each mode weighted by ``exp(-|k|^2 sigma^2 / 2)``); 0 gives the point gradient."""
    pos = np.ascontiguousarray(pos, dtype=np.float64)
    if pos.ndim != 2 or pos.shape[1] != 3:
        raise ValueError(f"pos must have shape (N, 3), got {pos.shape}")
    out = np.empty((pos.shape[0], 3, 3))
    sigma = np.ascontiguousarray(np.broadcast_to(np.asarray(sigma, dtype=np.float64), (pos.shape[0],)))
    _air_gradient(pos, forces.swirl_q, forces.swirl_oct, forces.swirl_b, forces.swirl_kt,
                  forces.swirl_phases(float(time)), forces.vortex, sigma, out)
    return out
