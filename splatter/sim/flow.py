"""The buoyant flow (``kind = "convection"``): a coarse grid of moving air that puffs ride.

Puffs carry heat (their source's ``heat`` at birth, cooling as
``exp(-cooling age)``) and lay it on a coarse grid of cubic cells around the
smoke; the air there rises on it and puffs move with the air.  One step of
the air, ``dt`` seconds (:meth:`FlowGrid.step`):

1. semi-Lagrangian advection of the velocity by itself (Stam, "Stable
   Fluids", SIGGRAPH 1999), back-traced with the midpoint rule;
2. buoyancy: ``buoyancy * heat`` upward (``+y``), heat per cubic world unit;
3. vorticity confinement ``eps h (N x omega)``,
   ``N = grad|omega| / |grad|omega||`` (Fedkiw, Stam, Jensen, "Visual
   Simulation of Smoke", SIGGRAPH 2001), which puts back the rolls the coarse
   grid's interpolation smooths away;
4. still air on every face of a solid cell (planes and spheres are solid to
   the air as to the puffs) and a pressure projection to a divergence-free
   field: conjugate gradients preconditioned with a modified incomplete
   Cholesky factor, to a fixed tolerance (largest net outflow of a cell at
   most :data:`TOLERANCE` of the fastest face).

The grid's faces beyond its sides are open air at rest pressure, so a plume
draws air in from the sides and leaves through the top.  The grid follows the
smoke (:meth:`Convection.advance`): its cell is chosen so ``cells`` span the
smoke's longest side plus a margin of air, from a ladder of sizes
``2^(k/4)`` world units so that it changes rarely; when the smoke leaves the
margin the grid scrolls by whole cells (an exact copy of the air), and when
it grows past the ladder step the air is resampled onto the new cells.  A
rising plume therefore never meets a wall.

Buoyancy flux: a source of ``rate`` puffs per second of ``heat`` each gives
the plume a buoyancy flux ``B = buoyancy * rate * heat`` (world units^4 /
s^3) near the source, independent of the grid; its rise speed at height
``z`` is about ``(B / z)^(1/3)`` (Morton, Taylor and Turner, 1956).

Examples
--------
>>> grid = FlowGrid(origin=(0.0, 0.0, 0.0), h=0.1, dims=(8, 8, 8))
>>> grid.heat[3:5, 2:4, 3:5] = 1.0
>>> iterations = grid.step(0.05, buoyancy=1.0, confinement=0.0)
>>> bool(grid.velocity(np.array([[0.4, 0.3, 0.4]]))[0, 1] > 0)   # warm air rises
True
>>> bool(abs(grid.divergence()).max() <= 1e-4 * grid.speed())   # divergence-free
True
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Optional

import numpy as np

from splatter.sim import flow_kernels as K

__all__ = ["FlowGrid", "Convection", "ConvectionTable", "TOLERANCE", "LADDER"]

TOLERANCE = 1e-5
"""Largest net outflow a cell may keep after the projection, as a share of the fastest face velocity
before it (the projection only slows the air where it removes divergence)."""

LADDER = 4
"""Cell sizes are ``2 ** (k / LADDER)`` world units: a few steps per doubling, so the grid changes rarely."""

MARGIN = 0.25
"""Air kept around the smoke on every side, as a share of the smoke's longest side."""

MAX_ITERATIONS = 400

OUTLIERS = 8
"""Puffs on each side of each axis the grid may leave outside (they take the air at its edge)."""


@dataclass(frozen=True)
class ConvectionTable:
    """A convection force in the form the driver uses.

    Attributes
    ----------
    cells : int
        Cells along the longest side of the smoke and its margin.
    buoyancy : float
        Upward acceleration per unit heat density.
    cooling : float
        Heat decay rate, 1/s.
    confinement : float
        Vorticity confinement strength ``eps``.
    heat : tuple of float
        Each source's heat per puff at birth.
    """

    cells: int
    buoyancy: float
    cooling: float
    confinement: float
    heat: tuple = ()


class FlowGrid:
    """Air on a staggered grid of ``dims`` cubic cells of side ``h`` whose corner is ``origin``.

    Parameters
    ----------
    origin : (3,) array_like
        World position of the grid's low corner.
    h : float
        Cell side, world units.
    dims : tuple of 3 int
        Cells along x, y, z (each at least 3).

    Attributes
    ----------
    u, v, w : float64 ndarray
        Face velocities, shapes ``(nx+1, ny, nz)``, ``(nx, ny+1, nz)``, ``(nx, ny, nz+1)``.
    heat : (nx, ny, nz) float64 ndarray
        Heat per cubic world unit, read by :meth:`step`.
    solid : (nx, ny, nz) bool ndarray
        Cells inside obstacles.
    pressure : (nx, ny, nz) float64 ndarray
        The last projection's pressure (velocity units; the next solve starts from it).
    iterations : int
        Conjugate-gradient iterations of the last projection.
    """

    def __init__(self, origin, h: float, dims):
        dims = tuple(int(d) for d in dims)
        if len(dims) != 3 or min(dims) < 3:
            raise ValueError(f"dims: expected three cell counts >= 3, got {dims}")
        if not (math.isfinite(h) and h > 0):
            raise ValueError(f"h: expected a cell size > 0, got {h!r}")
        nx, ny, nz = dims
        self.origin = np.asarray(origin, dtype=np.float64).reshape(3).copy()
        self.h = float(h)
        self.dims = dims
        self.u = np.zeros((nx + 1, ny, nz))
        self.v = np.zeros((nx, ny + 1, nz))
        self.w = np.zeros((nx, ny, nz + 1))
        self.heat = np.zeros(dims)
        self.solid = np.zeros(dims, dtype=np.bool_)
        self.pressure = np.zeros(dims)
        self.iterations = 0
        self._matrix = None

    # -- state ------------------------------------------------------------------------------------------

    def set_solid(self, mask: np.ndarray) -> None:
        """Mark cells solid ((nx, ny, nz) bool); their faces carry no flow."""
        mask = np.asarray(mask, dtype=np.bool_)
        if mask.shape != self.dims:
            raise ValueError(f"mask: expected shape {self.dims}, got {mask.shape}")
        self.solid = mask.copy()
        self._matrix = None

    def speed(self) -> float:
        """The fastest face velocity, world units/s."""
        return max(float(np.abs(a).max()) for a in (self.u, self.v, self.w))

    def divergence(self) -> np.ndarray:
        """Net outflow of each cell, ``h div u`` (world units/s), 0 in solid cells: (nx, ny, nz) float64."""
        out = np.empty(self.dims)
        K._divergence(self.u, self.v, self.w, self.solid, out)
        return out

    def cell_centres(self) -> np.ndarray:
        """World positions of the cell centres, (nx, ny, nz, 3) float64."""
        axes = [self.origin[a] + (np.arange(n) + 0.5) * self.h for a, n in enumerate(self.dims)]
        return np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1)

    def centre_velocity(self) -> np.ndarray:
        """Velocity at the cell centres (mean of opposite faces), (nx, ny, nz, 3) float64."""
        out = np.empty((3,) + self.dims)
        K._centre_velocity(self.u, self.v, self.w, out)
        return np.moveaxis(out, 0, -1).copy()

    # -- puffs ------------------------------------------------------------------------------------------

    def deposit(self, pos: np.ndarray, amount: np.ndarray) -> np.ndarray:
        """Amounts at points spread onto the cell centres (trilinear), per cubic world unit.

        Parameters
        ----------
        pos : (N, 3) float64 ndarray
        amount : (N,) float64 ndarray

        Returns
        -------
        (nx, ny, nz) float64 ndarray
            Sums in point order (the same bits on any thread count).
        """
        out = np.zeros(self.dims)
        pos = np.ascontiguousarray(pos, dtype=np.float64)
        amount = np.ascontiguousarray(amount, dtype=np.float64)
        K._deposit(pos, amount, self.origin[0], self.origin[1], self.origin[2], 1.0 / self.h, out)
        out /= self.h ** 3
        return out

    def velocity(self, pos: np.ndarray, *, gradient: bool = False) -> np.ndarray:
        """The air's velocity at ``pos`` ((N, 3) float64), trilinear in each face grid.

        Returns
        -------
        (N, 3) float64 ndarray, or (N, 12) with ``gradient``
            Velocity; with ``gradient`` also ``du_a/dx_b`` in columns ``3 + 3 a + b``.
            Points beyond the grid take the velocity of its nearest edge.
        """
        pos = np.ascontiguousarray(pos, dtype=np.float64)
        out = np.zeros((pos.shape[0], 12 if gradient else 3))
        K._sample(self.u, self.v, self.w, pos, self.origin[0], self.origin[1], self.origin[2], 1.0 / self.h,
                  bool(gradient), out)
        return out

    # -- one step ---------------------------------------------------------------------------------------

    def step(self, dt: float, *, buoyancy: float, confinement: float) -> int:
        """Advance the air by ``dt`` seconds: advect, buoyancy, confinement, project.

        Returns
        -------
        int
            Conjugate-gradient iterations the projection took.
        """
        self.advect(dt)
        if buoyancy != 0.0:
            K._buoyancy(self.v, self.heat, float(buoyancy) * dt)
        if confinement > 0.0:
            self.confine(dt, confinement)
        return self.project()

    def advect(self, dt: float) -> None:
        """Semi-Lagrangian self-advection of the velocity over ``dt``."""
        u1, v1, w1 = np.empty_like(self.u), np.empty_like(self.v), np.empty_like(self.w)
        K._advect_velocity(self.u, self.v, self.w, float(dt) / self.h, u1, v1, w1)
        self.u, self.v, self.w = u1, v1, w1

    def advect_scalar(self, q: np.ndarray, dt: float) -> np.ndarray:
        """A cell-centred field ``q`` ((nx, ny, nz) float64) carried by the air for ``dt``: the same kernel
        as the velocity's own advection, for inspection and tests."""
        out = np.empty(self.dims)
        o = K.OFFSETS[3]
        K._advect(np.ascontiguousarray(q, dtype=np.float64), o[0], o[1], o[2], self.u, self.v, self.w,
                  float(dt) / self.h, out)
        return out

    def confine(self, dt: float, strength: float) -> None:
        """Add ``dt`` times the vorticity confinement force of strength ``strength``."""
        centre = np.empty((3,) + self.dims)
        K._centre_velocity(self.u, self.v, self.w, centre)
        omega = np.empty_like(centre)
        mag = np.empty(self.dims)
        K._vorticity(centre, 0.5 / self.h, omega, mag)
        force = np.empty_like(centre)
        K._confinement(omega, mag, float(strength) * self.h, force)
        K._add_centre_force(self.u, self.v, self.w, force, float(dt))

    def project(self) -> int:
        """Make the air divergence-free (still at solid cells); returns the solver's iterations."""
        K._zero_solid_faces(self.u, self.v, self.w, self.solid)
        if self._matrix is None:
            diag = np.empty(self.dims)
            plus = np.empty((3,) + self.dims)
            K._matrix(self.solid, diag, plus)
            precon = np.empty(self.dims)
            K._mic0(diag, plus, precon)
            self._matrix = (diag, plus, precon)
        diag, plus, precon = self._matrix
        rhs = np.empty(self.dims)
        K._divergence(self.u, self.v, self.w, self.solid, rhs)
        rhs *= -1.0
        tol = TOLERANCE * max(self.speed(), 1e-30)
        self.pressure[self.solid] = 0.0
        self.iterations = int(K._pcg(diag, plus, precon, rhs, self.pressure, tol, MAX_ITERATIONS))
        K._subtract_gradient(self.u, self.v, self.w, self.pressure, self.solid)
        return self.iterations

    # -- moving the grid --------------------------------------------------------------------------------

    def moved(self, origin, h: float, dims) -> "FlowGrid":
        """A new grid over other cells carrying this grid's air (an exact copy where the cells line up).

        Points of the new grid beyond this one take the velocity at this grid's nearest edge.
        """
        new = FlowGrid(origin, h, dims)
        scale = new.h / self.h
        for name, off in zip(("u", "v", "w"), K.OFFSETS[:3]):
            shift = (new.origin - self.origin) / self.h
            K._resample(getattr(self, name), off[0], off[1], off[2], shift, scale, getattr(new, name))
        if scale == 1.0:
            K._resample(self.pressure, 0.5, 0.5, 0.5, (new.origin - self.origin) / self.h, 1.0, new.pressure)
        return new


def _quantised_cell(size: float) -> float:
    return 2.0 ** (round(LADDER * math.log2(size)) / LADDER)


class Convection:
    """The flow of one look over time: a :class:`FlowGrid` that follows the smoke.

    Parameters
    ----------
    table : ConvectionTable
    obstacles : ObstacleTables
        Planes and spheres, solid to the air too.
    heat_scale : float
        Multiplies every deposit (a subset of ``1 / heat_scale`` of the puffs
        then lays about the whole smoke's heat; 1 for the full simulation).
    """

    def __init__(self, table: ConvectionTable, obstacles, *, heat_scale: float = 1.0):
        self.table = table
        self.heat = np.asarray(table.heat, dtype=np.float64)
        self.obstacles = obstacles
        self.heat_scale = float(heat_scale)
        self.grid: Optional[FlowGrid] = None

    @property
    def active(self) -> bool:
        """False when no source has heat: the air never moves and puffs move as without the flow."""
        return bool(np.any(self.heat != 0.0))

    def advance(self, pos: np.ndarray, size: np.ndarray, source: np.ndarray, age: np.ndarray, dt: float):
        """Follow the smoke, lay the puffs' heat on the grid, and step the air by ``dt``.

        Parameters
        ----------
        pos : (N, 3) float64 ndarray
        size : (N,) float64 ndarray
            Puff sigmas (the smoke's extent counts them).
        source : (N,) int ndarray
        age : (N,) float64 ndarray
        dt : float
        """
        if not self.active or pos.shape[0] == 0:
            return
        self._follow(pos, size)
        heat = self.heat[source] * np.exp(-self.table.cooling * age) * self.heat_scale
        g = self.grid
        g.heat = g.deposit(pos, heat)
        g.step(dt, buoyancy=self.table.buoyancy, confinement=self.table.confinement)

    def sample(self, pos: np.ndarray, *, gradient: bool = False) -> np.ndarray:
        """Air velocity (and gradient) at ``pos``; zeros before the air first moves. See :meth:`FlowGrid.velocity`."""
        if self.grid is None:
            return np.zeros((pos.shape[0], 12 if gradient else 3))
        return self.grid.velocity(pos, gradient=gradient)

    def snapshot(self) -> Optional[dict]:
        """The grid now, as plain arrays (None before the air first moves); see ``splatter simulate --flow``."""
        g = self.grid
        if g is None:
            return None
        return dict(origin=g.origin.copy(), cell=np.float64(g.h), heat=g.heat.copy(),
                    solid=g.solid.copy(), velocity=g.centre_velocity(), u=g.u.copy(), v=g.v.copy(), w=g.w.copy())

    def _follow(self, pos, size):
        """Keep the grid around the smoke: scroll by whole cells, or change the cell size on the ladder."""
        size = np.asarray(size, dtype=np.float64)
        reach = 2.0 * float(size.max())
        if pos.shape[0] > 2 * OUTLIERS:
            # A robust extent: a few stray puffs must not blow the grid up (a coarser grid for everyone).
            lo = np.partition(pos, OUTLIERS, axis=0)[OUTLIERS] - reach
            hi = np.partition(pos, -1 - OUTLIERS, axis=0)[-1 - OUTLIERS] + reach
        else:
            lo = pos.min(axis=0) - reach
            hi = pos.max(axis=0) + reach
        longest = float(max((hi - lo).max(), 1e-6))
        margin = MARGIN * longest
        cells = int(self.table.cells)
        # Cells no finer than the typical puff: a finer grid would resolve heat no puff lays that finely.
        target = max((longest + 2.0 * margin) / cells, float(np.median(size)))
        g = self.grid
        if g is not None:
            ratio = g.h / target
            end = g.origin + np.array(g.dims) * g.h
            inside = np.all(g.origin <= lo - 0.5 * margin) and np.all(end >= hi + 0.5 * margin)
            if inside and 2.0 ** (-1.0 / LADDER) <= ratio <= 2.0 ** (2.0 / LADDER):
                return
            h = g.h if 2.0 ** (-1.0 / LADDER) <= ratio <= 2.0 ** (2.0 / LADDER) else _quantised_cell(target)
        else:
            h = _quantised_cell(target)
        origin = np.floor((lo - margin) / h) * h
        dims = np.maximum(3, np.ceil((hi + margin - origin) / h).astype(np.int64))
        if g is None:
            self.grid = FlowGrid(origin, h, dims)
        else:
            self.grid = g.moved(origin, h, dims)
        self.grid.set_solid(self._solid_cells(self.grid))

    def _solid_cells(self, g: FlowGrid) -> np.ndarray:
        c = g.cell_centres()
        solid = np.zeros(g.dims, dtype=np.bool_)
        for row in self.obstacles.planes:
            solid |= (c - row[0:3]) @ row[3:6] < 0.0
        for row in self.obstacles.spheres:
            solid |= np.sum((c - row[0:3]) ** 2, axis=-1) < row[3] ** 2
        return solid
