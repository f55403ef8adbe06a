"""Self-shadowing: how much of a directional light reaches each puff.

Method (costs in ``docs/rendering.md``):

1. Every puff is a 3D Gaussian of optical depth: its line integral through
   the centre is ``tau0 = -ln(1 - opacity)``, so its total "optical mass" is
   ``tau0 * 2 pi sigma^2`` (the integral of a 2D Gaussian of peak ``tau0``).
2. The masses are deposited trilinearly into a coarse density grid (about
   ``GRID`` cells on the longest side, two more with its border) around the puffs, divided by the cell
   volume, and blurred with a separable Gaussian of the median puff sigma, so
   the grid holds a smooth extinction field in 1/world-unit.
3. For each light direction the optical depth toward the light is
   integrated once over a volume aligned with it (:func:`tau_volume`): nodes
   one cell apart across the light and half a cell along it, each column
   summed from the far end by the trapezoid rule over trilinear lookups of
   the grid.  Each puff reads its optical depth ``tau`` from that volume
   (trilinear) and its transmittance is ``T = exp(-tau)`` (Beer-Lambert).
   Only the columns some puff reads are summed.  Marching from every puff's
   centre instead cost about 94 lookups a puff on the chimney demo; the
   volume costs about 6 there and gives the same picture to a few 8-bit
   codes (``docs/rendering.md``).

The grid is built once per frame and shared by every direction, so the six
light-direction maps cost one grid and six volumes.  The deposit is serial
(a fixed order); the volume is parallel over its columns and the lookup over
puffs, each writing only its own values, so results never depend on thread
count.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from splatter.core.jit import KERNEL, PARALLEL
from splatter.core.thresholds import MAX_OPACITY
from splatter.view.splats import effective_opacity

__all__ = ["GRID", "build_density_grid", "tau_volume", "transmittance", "DensityGrid", "light_factors", "light_puffs"]

GRID = 64
ACROSS = 1.0
"""Spacing of the light volume's nodes across the light, in grid cells (half a cell: 3-4 times the
time for at most 2 8-bit codes less difference from a march per puff on the chimney demo)."""
ALONG = 0.5
"""Spacing of the light volume's nodes along the light, in grid cells (a march's usual half-cell step)."""


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
    """

    def __init__(self, density, origin, cell):
        self.density = density
        self.origin = origin
        self.cell = float(cell)


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


def _light_basis(direction):
    """Unit ``(u, v, d)``: ``d`` along ``direction``, ``u`` and ``v`` across it (right-handed)."""
    d = np.asarray(direction, dtype=np.float64)
    d = d / np.linalg.norm(d)
    helper = np.array([1.0, 0.0, 0.0]) if abs(d[0]) < 0.9 else np.array([0.0, 1.0, 0.0])
    u = np.cross(d, helper)
    u /= np.linalg.norm(u)
    return u, np.cross(d, u), d


@numba.njit(inline="always", **KERNEL)
def _volume_coords(f, i, start, u, v, d, across, along):
    """Point ``i`` of ``f`` (grid-cell coordinates) in the light volume's node coordinates."""
    x = f[i, 0] - start[0]
    y = f[i, 1] - start[1]
    z = f[i, 2] - start[2]
    return ((x * u[0] + y * u[1] + z * u[2]) / across, (x * v[0] + y * v[1] + z * v[2]) / across,
            (x * d[0] + y * d[1] + z * d[2]) / along)


@numba.njit(**KERNEL)
def _columns_read(f, start, u, v, d, across, along, nu, nv):
    """The columns ``(i, j)`` whose nodes a trilinear read of the points ``f`` touches, each once, in order."""
    mark = np.zeros((nu, nv), dtype=np.uint8)
    for p in range(f.shape[0]):
        cu, cv, _ = _volume_coords(f, p, start, u, v, d, across, along)
        i0 = int(math.floor(cu))
        j0 = int(math.floor(cv))
        for i in range(i0, i0 + 2):
            for j in range(j0, j0 + 2):
                if 0 <= i < nu and 0 <= j < nv:
                    mark[i, j] = 1
    cols = np.empty((int(mark.sum()), 2), dtype=np.int64)
    c = 0
    for i in range(nu):
        for j in range(nv):
            if mark[i, j]:
                cols[c, 0] = i
                cols[c, 1] = j
                c += 1
    return cols


@numba.njit(**PARALLEL)
def _fill_volume(density, start, u, v, d, across, along, cols, out):
    """Optical depth, in ``along`` steps times cells, from each node of the columns ``cols`` toward the light.

    Node ``(i, j, k)`` sits at grid-cell coordinates ``start + i across u +
    j across v + k along d``; each column is summed from its far end
    (trapezoid rule; the grid counts 0 outside), independently of the others.
    """
    nt = out.shape[2]
    for c in numba.prange(cols.shape[0]):
        i = cols[c, 0]
        j = cols[c, 1]
        bx = start[0] + i * across * u[0] + j * across * v[0]
        by = start[1] + i * across * u[1] + j * across * v[1]
        bz = start[2] + i * across * u[2] + j * across * v[2]
        acc = 0.0
        prev = 0.0
        for k in range(nt - 1, -1, -1):
            t = k * along
            here = _sample(density, bx + t * d[0], by + t * d[1], bz + t * d[2])
            acc += 0.5 * (here + prev)
            prev = here
            out[i, j, k] = acc


@numba.njit(**PARALLEL)
def _read_volume(vol, start, u, v, d, across, along, f, out):
    """Each point's optical depth (in ``_fill_volume``'s units), trilinear in ``vol``.

    A point before the volume's near face along the light reads that face
    (nothing lies between); one beside or beyond the volume reads 0.
    """
    nt = vol.shape[2]
    for i in numba.prange(f.shape[0]):
        cu, cv, ct = _volume_coords(f, i, start, u, v, d, across, along)
        if ct < 0.0:
            ct = 0.0
        if ct > nt - 1:
            out[i] = 0.0
        else:
            out[i] = _sample(vol, cu, cv, ct)


def tau_volume(grid: "DensityGrid", direction, pos, *, across: float = ACROSS, along: float = ALONG) -> np.ndarray:
    """Optical depth from each point toward a directional light, over a volume aligned with the light.

    Only the volume's columns that the points' trilinear reads touch are
    summed (each column is independent of the others, so the values are the
    same as filling them all): a frame of a few puffs costs a few columns,
    a dense one at most the whole volume, at most about 2.5 M nodes (19 MB)
    for a grid of 64 cells on its longest side and a slanted light.

    Parameters
    ----------
    grid : DensityGrid
    direction : (3,) float
        Toward the light (normalised here).
    pos : (M, 3) float ndarray
        World positions.
    across, along : float
        Node spacing across and along the light, in grid cells.

    Returns
    -------
    (M,) float64 ndarray
        Optical depth toward the light, >= 0.

    Examples
    --------
    >>> grid = DensityGrid(np.ones((4, 4, 4)), np.zeros(3), 0.5)  # extinction 1 in a 2-unit box
    >>> tau = tau_volume(grid, (1.0, 0.0, 0.0), [[-3.0, 0.75, 0.75], [0.75, 0.75, 0.75], [3.0, 0.75, 0.75]])
    >>> [round(float(t), 3) for t in tau]
    [2.0, 1.0, 0.0]
    """
    return _tau_at_cells(grid, direction, _cell_coords(grid, pos), across, along)


def _cell_coords(grid: "DensityGrid", pos) -> np.ndarray:
    """World positions ``(M, 3)`` in the grid's cell coordinates, contiguous float64."""
    return np.ascontiguousarray((np.asarray(pos, dtype=np.float64).reshape(-1, 3) - grid.origin) / grid.cell)


def _tau_at_cells(grid: "DensityGrid", direction, f, across: float = ACROSS, along: float = ALONG) -> np.ndarray:
    """:func:`tau_volume` of points already in cell coordinates ``f`` (see :func:`_cell_coords`)."""
    u, v, d = _light_basis(direction)
    dens = np.ascontiguousarray(grid.density, dtype=np.float64)
    n = np.array(dens.shape, dtype=np.float64)
    # The box the trilinear lookups can see: cell coordinates -1 .. n on each axis.
    corners = np.array([[x, y, z] for x in (-1.0, n[0]) for y in (-1.0, n[1]) for z in (-1.0, n[2])])
    pu, pv, pt = corners @ u, corners @ v, corners @ d
    shape = (int(math.floor((pu.max() - pu.min()) / across)) + 2, int(math.floor((pv.max() - pv.min()) / across)) + 2,
             int(math.floor((pt.max() - pt.min()) / along)) + 2)
    start = pu.min() * u + pv.min() * v + pt.min() * d
    across, along = float(across), float(along)
    cols = _columns_read(f, start, u, v, d, across, along, shape[0], shape[1])
    vol = np.zeros(shape, dtype=np.float64)  # pages of columns never summed are never touched
    _fill_volume(dens, start, u, v, d, across, along, cols, vol)
    out = np.empty(f.shape[0], dtype=np.float64)
    _read_volume(vol, start, u, v, d, across, along, f, out)
    return out * (along * grid.cell)


@numba.njit(**KERNEL)
def _reach_bounds(pos, size):
    """The box of every puff's 3-sigma reach: ``min(pos - 3 size)``, ``max(pos + 3 size)`` per axis
    (one pass, no temporaries; exactly numpy's values)."""
    lo = np.full(3, np.inf)
    hi = np.full(3, -np.inf)
    for i in range(pos.shape[0]):
        r = 3.0 * size[i]
        for a in range(3):
            lo[a] = min(lo[a], pos[i, a] - r)
            hi[a] = max(hi[a], pos[i, a] + r)
    return lo, hi


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
    lo, hi = _reach_bounds(pos, size)
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
        f = _cell_coords(grid, pos)  # once for every direction
        for k in range(dirs.shape[0]):
            tau[:, k] = _tau_at_cells(grid, dirs[k], f)
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
