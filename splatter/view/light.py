"""Self-shadowing: how much of a directional light reaches each puff.

Method (costs in ``docs/rendering.md``):

1. Every puff is a 3D Gaussian of optical depth: its line integral through
   the centre is ``tau0 = -ln(1 - opacity)``, so its total "optical mass" is
   ``tau0 * 2 pi sigma^2`` (the integral of a 2D Gaussian of peak ``tau0``).
2. The masses are deposited trilinearly into a coarse density grid (at most
   ``GRID`` cells on the longest side) around the puffs, divided by the cell
   volume, and blurred with a separable Gaussian of the median puff sigma, so
   the grid holds a smooth extinction field in 1/world-unit.
3. From each puff's centre a ray is marched toward each light direction at
   half-cell steps with trilinear lookups; the optical depth ``tau`` gives
   the transmittance ``T = exp(-tau)`` (Beer-Lambert).  Samples that surely
   read only empty cells add exactly 0 and are leapt over, guided by each
   cell's distance to the nearest smoke (:func:`empty_distance`): same bits.

The grid is built once per frame and shared by every direction, so the six
light-direction maps cost one grid and six marches.  All kernels are serial
in the deposit (a fixed order) and parallel over puffs in the march (each
puff writes only its own row), so results never depend on thread count.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from splatter.core.jit import KERNEL, PARALLEL
from splatter.core.thresholds import MAX_OPACITY
from splatter.view.splats import effective_opacity

__all__ = ["GRID", "build_density_grid", "empty_distance", "transmittance", "DensityGrid", "light_factors", "light_puffs"]

GRID = 64
_TAU_MAX = 14.0  # exp(-14) < 1e-6
_MARCH_BLOCK = 256  # puffs per parallel task of the march (each puff's result is its own: any split gives the same bits)


class DensityGrid:
    """A box of extinction values.

    Attributes
    ----------
    density : (NX, NY, NZ) float64 ndarray
        Extinction in 1/world-unit at cell centres.
    origin : (3,) float64 ndarray
        World position of cell ``[0, 0, 0]``'s centre.
    cell : float
        Cell edge in world units.
    clear : (NX, NY, NZ) int32 ndarray
        Chessboard distance, in cells, from each cell to the nearest cell
        with non-zero density (0 on such a cell): the march leaps over the
        empty space it measures (:func:`empty_distance`).
    """

    def __init__(self, density, origin, cell):
        self.density = density
        self.origin = origin
        self.cell = float(cell)
        self.clear = empty_distance(density)


@numba.njit(**KERNEL)
def _deposit(pos, mass, origin, cell, out):
    nx, ny, nz = out.shape
    for i in range(pos.shape[0]):
        fx = (pos[i, 0] - origin[0]) / cell
        fy = (pos[i, 1] - origin[1]) / cell
        fz = (pos[i, 2] - origin[2]) / cell
        ix, iy, iz = int(math.floor(fx)), int(math.floor(fy)), int(math.floor(fz))
        tx, ty, tz = fx - ix, fy - iy, fz - iz
        for dx in range(2):
            wx = tx if dx else 1.0 - tx
            x = ix + dx
            if x < 0 or x >= nx:
                continue
            for dy in range(2):
                wy = ty if dy else 1.0 - ty
                y = iy + dy
                if y < 0 or y >= ny:
                    continue
                for dz in range(2):
                    wz = tz if dz else 1.0 - tz
                    z = iz + dz
                    if z < 0 or z >= nz:
                        continue
                    out[x, y, z] += mass[i] * wx * wy * wz


@numba.njit(**KERNEL)
def _blur_axis0(src, weights, out):
    n0, n1, n2 = src.shape
    r = weights.shape[0] // 2
    for i in range(n0):
        for j in range(n1):
            for k in range(n2):
                out[i, j, k] = 0.0
        for t in range(-r, r + 1):
            s = i + t
            if s < 0 or s >= n0:
                continue
            w = weights[t + r]
            for j in range(n1):
                for k in range(n2):
                    out[i, j, k] += w * src[s, j, k]


@numba.njit(inline="always", **KERNEL)
def _sample(density, fx, fy, fz):
    """Trilinear lookup at cell coordinates ``(fx, fy, fz)``; cells outside the grid count 0."""
    nx, ny, nz = density.shape
    ix, iy, iz = int(math.floor(fx)), int(math.floor(fy)), int(math.floor(fz))
    tx, ty, tz = fx - ix, fy - iy, fz - iz
    acc = 0.0
    if 0 <= ix and ix + 1 < nx and 0 <= iy and iy + 1 < ny and 0 <= iz and iz + 1 < nz:
        # Inside: the eight corners without a test each, summed in the order of the loops below (same bits).
        sx = 1.0 - tx
        sy = 1.0 - ty
        sz = 1.0 - tz
        acc += density[ix, iy, iz] * sx * sy * sz
        acc += density[ix, iy, iz + 1] * sx * sy * tz
        acc += density[ix, iy + 1, iz] * sx * ty * sz
        acc += density[ix, iy + 1, iz + 1] * sx * ty * tz
        acc += density[ix + 1, iy, iz] * tx * sy * sz
        acc += density[ix + 1, iy, iz + 1] * tx * sy * tz
        acc += density[ix + 1, iy + 1, iz] * tx * ty * sz
        acc += density[ix + 1, iy + 1, iz + 1] * tx * ty * tz
        return acc
    for dx in range(2):
        x = ix + dx
        if x < 0 or x >= nx:
            continue
        wx = tx if dx else 1.0 - tx
        for dy in range(2):
            y = iy + dy
            if y < 0 or y >= ny:
                continue
            wy = ty if dy else 1.0 - ty
            for dz in range(2):
                z = iz + dz
                if z < 0 or z >= nz:
                    continue
                wz = tz if dz else 1.0 - tz
                acc += density[x, y, z] * wx * wy * wz
    return acc


@numba.njit(**KERNEL)
def _chessboard_pass(out, sign):
    """One raster pass of the chessboard distance transform over ``out`` (in place).

    ``sign = 1``: cells in C order, each taking the smallest of its 13
    neighbours already visited plus 1; ``sign = -1``: the reverse order and
    the other 13.
    """
    nx, ny, nz = out.shape
    for a in range(nx):
        x = a if sign > 0 else nx - 1 - a
        for b in range(ny):
            y = b if sign > 0 else ny - 1 - b
            for c in range(nz):
                z = c if sign > 0 else nz - 1 - c
                best = out[x, y, z]
                if best == 0:
                    continue
                for dx in range(-1, 2):
                    for dy in range(-1, 2):
                        for dz in range(-1, 2):
                            # only the neighbours visited before (x, y, z) in this pass's order
                            if dx * 9 + dy * 3 + dz >= 0:
                                continue
                            u = x + sign * dx
                            v = y + sign * dy
                            w = z + sign * dz
                            if 0 <= u < nx and 0 <= v < ny and 0 <= w < nz:
                                best = min(best, out[u, v, w] + 1)
                out[x, y, z] = best


def empty_distance(density) -> np.ndarray:
    """Chessboard distance from each cell to the nearest cell of non-zero density.

    Two raster passes with the 26-neighbourhood give the exact chessboard
    (L-infinity) distance transform (Rosenfeld and Pfaltz, "Sequential
    operations in digital picture processing", J. ACM 13, 1966; Borgefors,
    "Distance transformations in arbitrary dimensions", CVGIP 27, 1984; both
    references from memory).
    Cells of non-zero density hold 0; with no such cell every cell holds a
    number larger than the grid.

    Parameters
    ----------
    density : (NX, NY, NZ) float64 ndarray

    Returns
    -------
    (NX, NY, NZ) int32 ndarray

    Examples
    --------
    >>> d = np.zeros((5, 1, 1)); d[1, 0, 0] = 2.0
    >>> empty_distance(d)[:, 0, 0].tolist()
    [1, 0, 1, 2, 3]
    """
    density = np.asarray(density, dtype=np.float64)
    far = int(sum(density.shape)) + 1
    out = np.where(density != 0.0, 0, far).astype(np.int32)
    _chessboard_pass(out, 1)
    _chessboard_pass(out, -1)
    return out


@numba.njit(**KERNEL)
def _ray_span(f, d, lo, hi):
    """Parameter interval of the ray ``f + t d`` (t >= 0) inside ``[lo, hi]`` on every axis."""
    t0, t1 = 0.0, 1e300
    for a in range(3):
        if abs(d[a]) < 1e-12:
            if f[a] < lo[a] or f[a] > hi[a]:
                return 1.0, 0.0
        else:
            ta = (lo[a] - f[a]) / d[a]
            tb = (hi[a] - f[a]) / d[a]
            if ta > tb:
                ta, tb = tb, ta
            t0 = max(t0, ta)
            t1 = min(t1, tb)
    return t0, t1


@numba.njit(inline="always", **KERNEL)
def _optical_depth(density, clear, cell, f, d, lo, hi):
    """Optical depth from cell coordinates ``f`` (3,) along the unit direction ``d`` (3,) to the grid's edge.

    ``clear`` is the grid's :func:`empty_distance`. A sample whose cell is
    ``D >= 3`` cells (chessboard) from any smoke reads eight empty corners,
    and so does every later sample that moves less than ``D - 2`` cells along
    every axis; those samples add exactly 0 to the sum, so they are leapt
    over (with half a cell to spare against round-off) and the result is the
    same bits as visiting them.
    """
    step = 0.5  # in cells
    t0, t1 = _ray_span(f, d, lo, hi)
    tau = 0.0
    if t1 > t0:
        nx, ny, nz = density.shape
        n = int(math.ceil((t1 - t0) / step))
        reach = max(abs(d[0]), abs(d[1]), abs(d[2])) * step  # most cells a step moves along one axis
        # Trapezoid rule along the part of the ray inside the grid;
        # stop once the light is gone (T < 1e-6: no visible change).
        limit = _TAU_MAX / (step * cell)
        s = 0
        while s <= n:
            t = t0 + s * step
            fx = f[0] + d[0] * t
            fy = f[1] + d[1] * t
            fz = f[2] + d[2] * t
            ix, iy, iz = int(math.floor(fx)), int(math.floor(fy)), int(math.floor(fz))
            if 0 <= ix < nx and 0 <= iy < ny and 0 <= iz < nz:
                gap = clear[ix, iy, iz]
                if gap >= 3:
                    s += 1 + int((gap - 2.5) / reach)
                    continue
            w = 0.5 if s == 0 else 1.0
            tau += w * _sample(density, fx, fy, fz)
            if tau > limit:
                break
            s += 1
    return tau * step * cell


@numba.njit(**PARALLEL)
def _march(density, clear, origin, cell, pos, dirs, out):
    nx, ny, nz = density.shape
    lo = np.array([-1.0, -1.0, -1.0])
    hi = np.array([float(nx), float(ny), float(nz)])
    nblocks = (pos.shape[0] + _MARCH_BLOCK - 1) // _MARCH_BLOCK
    for blk in numba.prange(nblocks):
        f = np.empty(3)  # scratch per block of puffs, not per puff
        for i in range(blk * _MARCH_BLOCK, min(pos.shape[0], (blk + 1) * _MARCH_BLOCK)):
            for d in range(dirs.shape[0]):
                f[0] = (pos[i, 0] - origin[0]) / cell
                f[1] = (pos[i, 1] - origin[1]) / cell
                f[2] = (pos[i, 2] - origin[2]) / cell
                out[i, d] = _optical_depth(density, clear, cell, f, dirs[d], lo, hi)


def _gaussian_weights(sigma_cells: float) -> np.ndarray:
    r = max(1, int(math.ceil(3.0 * sigma_cells)))
    x = np.arange(-r, r + 1, dtype=np.float64)
    w = np.exp(-0.5 * (x / max(sigma_cells, 1e-6)) ** 2)
    return w / w.sum()


def build_density_grid(pos, size, tau0, *, grid: int = GRID) -> DensityGrid:
    """Splat puffs into a blurred extinction grid.

    Parameters
    ----------
    pos : (M, 3) float64 ndarray
        Puff centres, world units.
    size : (M,) float64 ndarray
        Puff sigma, world units.
    tau0 : (M,) float64 ndarray
        Optical depth through each puff's centre.
    grid : int
        Cells on the longest side of the box.

    Returns
    -------
    DensityGrid
    """
    pos = np.ascontiguousarray(pos, dtype=np.float64)
    size = np.asarray(size, dtype=np.float64)
    tau0 = np.asarray(tau0, dtype=np.float64)
    if pos.shape[0] == 0:
        return DensityGrid(np.zeros((1, 1, 1)), np.zeros(3), 1.0)
    lo = (pos - 3.0 * size[:, None]).min(axis=0)
    hi = (pos + 3.0 * size[:, None]).max(axis=0)
    cell = float((hi - lo).max()) / (grid - 1)
    cell = max(cell, 1e-9)
    dims = np.maximum(2, np.ceil((hi - lo) / cell).astype(np.int64) + 2)
    origin = lo - 0.5 * cell
    mass = tau0 * 2.0 * math.pi * size**2  # optical mass of each puff, world^2
    raw = np.zeros(tuple(int(d) for d in dims), dtype=np.float64)
    _deposit(pos, mass, origin, cell, raw)
    raw /= cell**3
    # Blur with the median puff size; deposit already spreads one cell.
    sigma_cells = max(0.0, float(np.median(size)) / cell)
    weights = _gaussian_weights(math.sqrt(max(sigma_cells**2 - 1.0 / 6.0, 0.25)))
    for axis in range(3):
        src = np.ascontiguousarray(np.moveaxis(raw, axis, 0))
        dst = np.empty_like(src)
        _blur_axis0(src, weights, dst)
        raw = np.ascontiguousarray(np.moveaxis(dst, 0, axis))
    return DensityGrid(raw, origin, cell)


def transmittance(grid: DensityGrid, pos, directions) -> np.ndarray:
    """Transmittance from each puff toward each light direction.

    Parameters
    ----------
    grid : DensityGrid
    pos : (M, 3) float64 ndarray
    directions : (D, 3) float ndarray
        Directions from the scene toward the lights (normalised here).

    Returns
    -------
    (M, D) float64 ndarray
        ``exp(-tau)`` in (0, 1].
    """
    dirs = np.asarray(directions, dtype=np.float64).reshape(-1, 3)
    dirs = dirs / np.linalg.norm(dirs, axis=1, keepdims=True)
    pos = np.ascontiguousarray(pos, dtype=np.float64)
    tau = np.zeros((pos.shape[0], dirs.shape[0]), dtype=np.float64)
    if pos.shape[0]:
        _march(grid.density, grid.clear, grid.origin, grid.cell, pos, np.ascontiguousarray(dirs), tau)
    return np.exp(-tau)


def light_factors(trans, *, ambient: float, shadow: float, color, intensity: float, ambient_color=None) -> np.ndarray:
    """Linear light reaching each puff, as a colour multiplier.

    ``intensity * (ambient * A + (1 - ambient) * (1 - shadow * (1 - T)) * C)``
    with ``C`` the light's colour and ``A`` the ambient colour (the light's
    colour unless given): ``ambient`` is the share of light that is never
    shadowed and ``shadow`` scales how much the smoke toward the light dims
    the rest.

    Parameters
    ----------
    trans : (M,) float ndarray
        Transmittance toward the light.
    ambient : float
        Share of unshadowed light, 0..1.
    shadow : float
        Self-shadow strength, 0..1.
    color, ambient_color : (3,) float
        Linear colours of the direct and the ambient light.
    intensity : float

    Returns
    -------
    (M, 3) float64 ndarray
    """
    t = np.asarray(trans, dtype=np.float64)
    direct = (1.0 - ambient) * (1.0 - shadow * (1.0 - t))
    c = np.asarray(color, dtype=np.float64)
    a = c if ambient_color is None else np.asarray(ambient_color, dtype=np.float64)
    return intensity * (ambient * a[None, :] + direct[:, None] * c[None, :])


def light_puffs(state, shading, axes, want_lightdirs: bool):
    """How much light reaches each puff of one frame.

    Parameters
    ----------
    state : FrameState
        The frame's puffs (``pos``, ``size``, ``opacity``, ``density``).
    shading : ShadingSpec
        The look's ``[shading]``: its light, ambient share and colour.
    axes : (3,) tuple of (3,) float64 ndarray
        The camera's right, up and forward axes (light-direction maps are
        lit from the camera's sides).
    want_lightdirs : bool
        Also compute the six light-direction factors.

    Returns
    -------
    factor : (M, 3) float64 ndarray or None
        Light colour times intensity reaching each puff (ambient share
        included); ``None`` without a light.
    lightdirs : (M, 6) float64 ndarray or None
        Light received from the camera's +x (right), +y (up), +z (toward the
        viewer), then -x, -y, -z, in [0, 1]: the columns of the
        ``lightdirs_pos`` and ``lightdirs_neg`` maps; ``None`` unless asked for.
    """
    sh = shading
    if sh.light is None and not want_lightdirs:
        return None, None
    opac = effective_opacity(state.opacity, state.density, "absorb")
    tau0 = -np.log1p(-np.minimum(opac, MAX_OPACITY))
    grid = build_density_grid(state.pos, state.size, tau0)
    dirs = []
    if sh.light is not None:
        dirs.append(np.asarray(sh.light.direction, dtype=np.float64))
    if want_lightdirs:
        right, up, forward = axes
        toward_viewer = -forward
        # The view-space axes of the normal map: +x, +y, +z, then -x, -y, -z.
        dirs += [right, up, toward_viewer, -right, -up, forward]
    trans = transmittance(grid, state.pos, np.array(dirs))
    factor = None
    col = 0
    if sh.light is not None:
        L = sh.light
        factor = light_factors(trans[:, 0], ambient=sh.ambient, shadow=L.shadow, color=L.color, intensity=L.intensity,
                               ambient_color=sh.ambient_color)
        col = 1
    lightdirs = None
    if want_lightdirs:
        shadow = sh.light.shadow if sh.light is not None else 1.0
        lightdirs = 1.0 - shadow * (1.0 - trans[:, col : col + 6])
    return factor, lightdirs
