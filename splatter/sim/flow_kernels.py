"""Numba kernels of the buoyant flow (:mod:`splatter.sim.flow`): a staggered (MAC) grid.

Layout, for a grid of ``(nx, ny, nz)`` cubic cells of side ``h`` whose
corner is at the grid origin: cell ``(i, j, k)`` has its centre at
``(i + 1/2, j + 1/2, k + 1/2)`` in cell units; the x velocity ``u`` lives on
the x faces ``(i, j + 1/2, k + 1/2)``, shape ``(nx + 1, ny, nz)``, and ``v``
and ``w`` likewise on the y and z faces.  Cell-centred fields (heat, smoke,
pressure, the solid mask) are ``(nx, ny, nz)``.  Velocities are world
units per second; positions handed to these kernels are in cell units.

The two parallel kernels (advection, sampling at puffs) give each thread
its own outputs and no sum crosses threads, so the results are the same
bits on any thread count; the rest (forces, the pressure solve, the
deposits) is serial: on a grid this coarse a parallel region costs more
to wake than the work inside it.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from splatter.core.jit import KERNEL, PARALLEL

# Offsets (cell units) of where each field's samples sit: u, v, w, then cell centres.
OFFSETS = ((0.0, 0.5, 0.5), (0.5, 0.0, 0.5), (0.5, 0.5, 0.0), (0.5, 0.5, 0.5))


@numba.njit(inline="always", **KERNEL)
def _axis(g, n):
    """Lower sample index and weight of coordinate ``g`` on ``n >= 2`` samples, clamped to the ends."""
    if g <= 0.0:
        return 0, 0.0
    if g >= n - 1:
        return n - 2, 1.0
    i = int(g)
    return i, g - i


@numba.njit(inline="always", **KERNEL)
def _trilinear(a, gx, gy, gz):
    """``a`` at fractional sample coordinates ``(gx, gy, gz)``, clamped at the edges."""
    i, fx = _axis(gx, a.shape[0])
    j, fy = _axis(gy, a.shape[1])
    k, fz = _axis(gz, a.shape[2])
    c00 = a[i, j, k] + fx * (a[i + 1, j, k] - a[i, j, k])
    c10 = a[i, j + 1, k] + fx * (a[i + 1, j + 1, k] - a[i, j + 1, k])
    c01 = a[i, j, k + 1] + fx * (a[i + 1, j, k + 1] - a[i, j, k + 1])
    c11 = a[i, j + 1, k + 1] + fx * (a[i + 1, j + 1, k + 1] - a[i, j + 1, k + 1])
    c0 = c00 + fy * (c10 - c00)
    c1 = c01 + fy * (c11 - c01)
    return c0 + fz * (c1 - c0)


@numba.njit(inline="always", **KERNEL)
def _trilinear_grad(a, gx, gy, gz):
    """``a`` and its derivatives along the three sample axes at ``(gx, gy, gz)`` (0 where clamped)."""
    i, fx = _axis(gx, a.shape[0])
    j, fy = _axis(gy, a.shape[1])
    k, fz = _axis(gz, a.shape[2])
    inx = 1.0 if 0.0 < gx < a.shape[0] - 1 else 0.0
    iny = 1.0 if 0.0 < gy < a.shape[1] - 1 else 0.0
    inz = 1.0 if 0.0 < gz < a.shape[2] - 1 else 0.0
    a000 = a[i, j, k]
    a100 = a[i + 1, j, k]
    a010 = a[i, j + 1, k]
    a110 = a[i + 1, j + 1, k]
    a001 = a[i, j, k + 1]
    a101 = a[i + 1, j, k + 1]
    a011 = a[i, j + 1, k + 1]
    a111 = a[i + 1, j + 1, k + 1]
    c00 = a000 + fx * (a100 - a000)
    c10 = a010 + fx * (a110 - a010)
    c01 = a001 + fx * (a101 - a001)
    c11 = a011 + fx * (a111 - a011)
    c0 = c00 + fy * (c10 - c00)
    c1 = c01 + fy * (c11 - c01)
    val = c0 + fz * (c1 - c0)
    dz = (c1 - c0) * inz
    dy = ((c10 - c00) + fz * ((c11 - c01) - (c10 - c00))) * iny
    d00 = a100 - a000
    d10 = a110 - a010
    d01 = a101 - a001
    d11 = a111 - a011
    d0 = d00 + fy * (d10 - d00)
    d1 = d01 + fy * (d11 - d01)
    dx = (d0 + fz * (d1 - d0)) * inx
    return val, dx, dy, dz


@numba.njit(inline="always", **KERNEL)
def _velocity(u, v, w, px, py, pz):
    """Velocity at ``(px, py, pz)`` in cell units (corner of the grid at 0)."""
    return (_trilinear(u, px, py - 0.5, pz - 0.5),
            _trilinear(v, px - 0.5, py, pz - 0.5),
            _trilinear(w, px - 0.5, py - 0.5, pz))


@numba.njit(inline="always", **KERNEL)
def _advect_sample(q, ox, oy, oz, i, j, k, u, v, w, dt_cells):
    """Semi-Lagrangian advection (Stam 1999) of one sample ``(i, j, k)`` of ``q`` (sample offsets
    ``(ox, oy, oz)`` in cell units): ``q`` at the point the flow brings there in ``dt``, back-traced
    with the midpoint rule (``dt_cells`` = dt / h)."""
    px = i + ox
    py = j + oy
    pz = k + oz
    vx, vy, vz = _velocity(u, v, w, px, py, pz)
    mx = px - 0.5 * dt_cells * vx
    my = py - 0.5 * dt_cells * vy
    mz = pz - 0.5 * dt_cells * vz
    vx, vy, vz = _velocity(u, v, w, mx, my, mz)
    return _trilinear(q, px - dt_cells * vx - ox, py - dt_cells * vy - oy, pz - dt_cells * vz - oz)


@numba.njit(**PARALLEL)
def _advect_velocity(u, v, w, dt_cells, u1, v1, w1):
    """The velocity carried by itself for ``dt``: ``u1, v1, w1`` (one parallel pass over x slices)."""
    nx, ny, nz = v.shape[0], u.shape[1], u.shape[2]
    for i in numba.prange(nx + 1):
        for j in range(ny + 1):
            for k in range(nz + 1):
                if j < ny and k < nz:
                    u1[i, j, k] = _advect_sample(u, 0.0, 0.5, 0.5, i, j, k, u, v, w, dt_cells)
                if i < nx and k < nz:
                    v1[i, j, k] = _advect_sample(v, 0.5, 0.0, 0.5, i, j, k, u, v, w, dt_cells)
                if i < nx and j < ny:
                    w1[i, j, k] = _advect_sample(w, 0.5, 0.5, 0.0, i, j, k, u, v, w, dt_cells)


@numba.njit(**PARALLEL)
def _advect(q, ox, oy, oz, u, v, w, dt_cells, out):
    """``q`` (sample offsets ``(ox, oy, oz)``) carried by the flow for ``dt`` into ``out``."""
    for i in numba.prange(out.shape[0]):
        for j in range(out.shape[1]):
            for k in range(out.shape[2]):
                out[i, j, k] = _advect_sample(q, ox, oy, oz, i, j, k, u, v, w, dt_cells)


@numba.njit(**KERNEL)
def _buoyancy(v, heat, accel_dt):
    """Add ``accel_dt * heat`` (heat averaged onto each y face) to ``v``."""
    ny = heat.shape[1]
    for i in range(heat.shape[0]):
        for j in range(ny + 1):
            for k in range(heat.shape[2]):
                if j == 0:
                    t = heat[i, 0, k]
                elif j == ny:
                    t = heat[i, ny - 1, k]
                else:
                    t = 0.5 * (heat[i, j - 1, k] + heat[i, j, k])
                v[i, j, k] += accel_dt * t


@numba.njit(**KERNEL)
def _centre_velocity(u, v, w, out):
    """Cell-centred velocity (3, nx, ny, nz): the mean of each cell's two faces per axis."""
    for i in range(out.shape[1]):
        for j in range(out.shape[2]):
            for k in range(out.shape[3]):
                out[0, i, j, k] = 0.5 * (u[i, j, k] + u[i + 1, j, k])
                out[1, i, j, k] = 0.5 * (v[i, j, k] + v[i, j + 1, k])
                out[2, i, j, k] = 0.5 * (w[i, j, k] + w[i, j, k + 1])


@numba.njit(**KERNEL)
def _vorticity(c, inv_2h, omega, mag):
    """Curl of the cell-centred velocity ``c`` by central differences (0 on the outer cells)."""
    nx, ny, nz = c.shape[1], c.shape[2], c.shape[3]
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                if i == 0 or j == 0 or k == 0 or i == nx - 1 or j == ny - 1 or k == nz - 1:
                    omega[0, i, j, k] = 0.0
                    omega[1, i, j, k] = 0.0
                    omega[2, i, j, k] = 0.0
                    mag[i, j, k] = 0.0
                    continue
                dwdy = c[2, i, j + 1, k] - c[2, i, j - 1, k]
                dvdz = c[1, i, j, k + 1] - c[1, i, j, k - 1]
                dudz = c[0, i, j, k + 1] - c[0, i, j, k - 1]
                dwdx = c[2, i + 1, j, k] - c[2, i - 1, j, k]
                dvdx = c[1, i + 1, j, k] - c[1, i - 1, j, k]
                dudy = c[0, i, j + 1, k] - c[0, i, j - 1, k]
                ox = (dwdy - dvdz) * inv_2h
                oy = (dudz - dwdx) * inv_2h
                oz = (dvdx - dudy) * inv_2h
                omega[0, i, j, k] = ox
                omega[1, i, j, k] = oy
                omega[2, i, j, k] = oz
                mag[i, j, k] = math.sqrt(ox * ox + oy * oy + oz * oz)


@numba.njit(**KERNEL)
def _confinement(omega, mag, eps_h, force):
    """Vorticity confinement (Fedkiw, Stam, Jensen 2001): ``eps h (N x omega)``,
    ``N = grad|omega| / |grad|omega||``, at cell centres (0 on the outer two layers)."""
    nx, ny, nz = mag.shape
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                force[0, i, j, k] = 0.0
                force[1, i, j, k] = 0.0
                force[2, i, j, k] = 0.0
                if i < 2 or j < 2 or k < 2 or i > nx - 3 or j > ny - 3 or k > nz - 3:
                    continue
                gx = mag[i + 1, j, k] - mag[i - 1, j, k]
                gy = mag[i, j + 1, k] - mag[i, j - 1, k]
                gz = mag[i, j, k + 1] - mag[i, j, k - 1]
                g = math.sqrt(gx * gx + gy * gy + gz * gz)
                if g < 1e-20:
                    continue
                gx /= g
                gy /= g
                gz /= g
                force[0, i, j, k] = eps_h * (gy * omega[2, i, j, k] - gz * omega[1, i, j, k])
                force[1, i, j, k] = eps_h * (gz * omega[0, i, j, k] - gx * omega[2, i, j, k])
                force[2, i, j, k] = eps_h * (gx * omega[1, i, j, k] - gy * omega[0, i, j, k])


@numba.njit(**KERNEL)
def _add_centre_force(u, v, w, force, dt):
    """Add ``dt`` times the cell-centred ``force`` (3, nx, ny, nz), averaged onto the interior faces."""
    nx, ny, nz = force.shape[1], force.shape[2], force.shape[3]
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                if i > 0:
                    u[i, j, k] += dt * 0.5 * (force[0, i - 1, j, k] + force[0, i, j, k])
                if j > 0:
                    v[i, j, k] += dt * 0.5 * (force[1, i, j - 1, k] + force[1, i, j, k])
                if k > 0:
                    w[i, j, k] += dt * 0.5 * (force[2, i, j, k - 1] + force[2, i, j, k])


@numba.njit(**KERNEL)
def _zero_solid_faces(u, v, w, solid):
    """Still air at every face that touches a solid cell (no flow through obstacles)."""
    nx, ny, nz = solid.shape
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                if solid[i, j, k]:
                    u[i, j, k] = 0.0
                    u[i + 1, j, k] = 0.0
                    v[i, j, k] = 0.0
                    v[i, j + 1, k] = 0.0
                    w[i, j, k] = 0.0
                    w[i, j, k + 1] = 0.0


@numba.njit(**KERNEL)
def _divergence(u, v, w, solid, out):
    """Net outflow of each fluid cell, ``sum of face velocities out`` (world units/s; 0 in solids)."""
    nx, ny, nz = solid.shape
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                if solid[i, j, k]:
                    out[i, j, k] = 0.0
                else:
                    out[i, j, k] = (u[i + 1, j, k] - u[i, j, k] + v[i, j + 1, k] - v[i, j, k]
                                    + w[i, j, k + 1] - w[i, j, k])


@numba.njit(**KERNEL)
def _matrix(solid, diag, plus):
    """The pressure matrix: ``diag`` counts each fluid cell's non-solid neighbours (cells
    beyond the grid are open air, pressure 0); ``plus[a]`` is -1 where the cell and its
    +axis neighbour are both fluid."""
    nx, ny, nz = solid.shape
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                plus[0, i, j, k] = 0.0
                plus[1, i, j, k] = 0.0
                plus[2, i, j, k] = 0.0
                diag[i, j, k] = 0.0
                if solid[i, j, k]:
                    continue
                d = 0.0
                if i == 0 or not solid[i - 1, j, k]:
                    d += 1.0
                if i == nx - 1 or not solid[i + 1, j, k]:
                    d += 1.0
                if j == 0 or not solid[i, j - 1, k]:
                    d += 1.0
                if j == ny - 1 or not solid[i, j + 1, k]:
                    d += 1.0
                if k == 0 or not solid[i, j, k - 1]:
                    d += 1.0
                if k == nz - 1 or not solid[i, j, k + 1]:
                    d += 1.0
                diag[i, j, k] = d
                if i < nx - 1 and not solid[i + 1, j, k]:
                    plus[0, i, j, k] = -1.0
                if j < ny - 1 and not solid[i, j + 1, k]:
                    plus[1, i, j, k] = -1.0
                if k < nz - 1 and not solid[i, j, k + 1]:
                    plus[2, i, j, k] = -1.0


MIC_TUNING = 0.97  # modified incomplete Cholesky: share of the dropped fill moved to the diagonal
MIC_SAFETY = 0.25  # fall back to the plain diagonal when a pivot drops below this share of it


@numba.njit(**KERNEL)
def _mic0(diag, plus, precon):
    """Modified incomplete Cholesky MIC(0) of the pressure matrix (Bridson, Fluid Simulation for
    Computer Graphics, 2nd ed., 2015, ch. 5 [memory]): ``precon = 1 / sqrt(pivot)``."""
    nx, ny, nz = diag.shape
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                precon[i, j, k] = 0.0
                if diag[i, j, k] == 0.0:
                    continue
                e = diag[i, j, k]
                if i > 0:
                    a = plus[0, i - 1, j, k] * precon[i - 1, j, k]
                    e -= a * a + MIC_TUNING * plus[0, i - 1, j, k] * (
                        plus[1, i - 1, j, k] + plus[2, i - 1, j, k]) * precon[i - 1, j, k] ** 2
                if j > 0:
                    a = plus[1, i, j - 1, k] * precon[i, j - 1, k]
                    e -= a * a + MIC_TUNING * plus[1, i, j - 1, k] * (
                        plus[0, i, j - 1, k] + plus[2, i, j - 1, k]) * precon[i, j - 1, k] ** 2
                if k > 0:
                    a = plus[2, i, j, k - 1] * precon[i, j, k - 1]
                    e -= a * a + MIC_TUNING * plus[2, i, j, k - 1] * (
                        plus[0, i, j, k - 1] + plus[1, i, j, k - 1]) * precon[i, j, k - 1] ** 2
                if e < MIC_SAFETY * diag[i, j, k]:
                    e = diag[i, j, k]
                precon[i, j, k] = 1.0 / math.sqrt(e)


@numba.njit(**KERNEL)
def _apply_mic(plus, precon, r, q, z):
    """``z = M^-1 r`` for the MIC(0) factor: forward then backward substitution (``q`` scratch)."""
    nx, ny, nz = r.shape
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                if precon[i, j, k] == 0.0:
                    q[i, j, k] = 0.0
                    continue
                t = r[i, j, k]
                if i > 0:
                    t -= plus[0, i - 1, j, k] * precon[i - 1, j, k] * q[i - 1, j, k]
                if j > 0:
                    t -= plus[1, i, j - 1, k] * precon[i, j - 1, k] * q[i, j - 1, k]
                if k > 0:
                    t -= plus[2, i, j, k - 1] * precon[i, j, k - 1] * q[i, j, k - 1]
                q[i, j, k] = t * precon[i, j, k]
    for i in range(nx - 1, -1, -1):
        for j in range(ny - 1, -1, -1):
            for k in range(nz - 1, -1, -1):
                if precon[i, j, k] == 0.0:
                    z[i, j, k] = 0.0
                    continue
                t = q[i, j, k]
                if i < nx - 1:
                    t -= plus[0, i, j, k] * precon[i, j, k] * z[i + 1, j, k]
                if j < ny - 1:
                    t -= plus[1, i, j, k] * precon[i, j, k] * z[i, j + 1, k]
                if k < nz - 1:
                    t -= plus[2, i, j, k] * precon[i, j, k] * z[i, j, k + 1]
                z[i, j, k] = t * precon[i, j, k]


@numba.njit(**KERNEL)
def _apply_matrix(diag, plus, s, out):
    """``out = A s`` for the pressure matrix (``s`` is 0 in solid cells)."""
    nx, ny, nz = s.shape
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                t = diag[i, j, k] * s[i, j, k]
                if i > 0:
                    t += plus[0, i - 1, j, k] * s[i - 1, j, k]
                if i < nx - 1:
                    t += plus[0, i, j, k] * s[i + 1, j, k]
                if j > 0:
                    t += plus[1, i, j - 1, k] * s[i, j - 1, k]
                if j < ny - 1:
                    t += plus[1, i, j, k] * s[i, j + 1, k]
                if k > 0:
                    t += plus[2, i, j, k - 1] * s[i, j, k - 1]
                if k < nz - 1:
                    t += plus[2, i, j, k] * s[i, j, k + 1]
                out[i, j, k] = t


@numba.njit(**KERNEL)
def _dot(a, b):
    s = 0.0
    fa = a.ravel()
    fb = b.ravel()
    for n in range(fa.size):
        s += fa[n] * fb[n]
    return s


@numba.njit(**KERNEL)
def _max_abs(a):
    m = 0.0
    fa = a.ravel()
    for n in range(fa.size):
        x = abs(fa[n])
        if x > m:
            m = x
    return m


@numba.njit(**KERNEL)
def _pcg(diag, plus, precon, rhs, p, tol, max_iter):
    """Solve ``A p = rhs`` by conjugate gradients preconditioned with MIC(0), from the ``p`` given.

    Stops once the largest residual is at most ``tol``; returns the iterations taken.
    """
    r = np.empty_like(p)
    _apply_matrix(diag, plus, p, r)
    fr = r.ravel()
    fb = rhs.ravel()
    for n in range(fr.size):
        fr[n] = fb[n] - fr[n]
    if _max_abs(r) <= tol:
        return 0
    q = np.empty_like(p)
    z = np.empty_like(p)
    t = np.empty_like(p)
    _apply_mic(plus, precon, r, q, z)
    s = z.copy()
    sigma = _dot(r, z)
    fp = p.ravel()
    fs = s.ravel()
    ft = t.ravel()
    fz = z.ravel()
    for it in range(1, max_iter + 1):
        _apply_matrix(diag, plus, s, t)
        st = _dot(s, t)
        if st == 0.0:
            return it
        alpha = sigma / st
        for n in range(fp.size):
            fp[n] += alpha * fs[n]
            fr[n] -= alpha * ft[n]
        if _max_abs(r) <= tol:
            return it
        _apply_mic(plus, precon, r, q, z)
        sigma_new = _dot(r, z)
        beta = sigma_new / sigma
        sigma = sigma_new
        for n in range(fs.size):
            fs[n] = fz[n] + beta * fs[n]
    return max_iter


@numba.njit(**KERNEL)
def _subtract_gradient(u, v, w, p, solid):
    """``u -= grad p`` on every face that touches no solid cell (beyond the grid ``p = 0``)."""
    nx, ny, nz = p.shape
    for i in range(nx + 1):
        for j in range(ny + 1):
            for k in range(nz + 1):
                if j < ny and k < nz:
                    lo_s = i > 0 and solid[i - 1, j, k]
                    hi_s = i < nx and solid[i, j, k]
                    if not (lo_s or hi_s):
                        lo = p[i - 1, j, k] if i > 0 else 0.0
                        hi = p[i, j, k] if i < nx else 0.0
                        u[i, j, k] -= hi - lo
                if i < nx and k < nz:
                    lo_s = j > 0 and solid[i, j - 1, k]
                    hi_s = j < ny and solid[i, j, k]
                    if not (lo_s or hi_s):
                        lo = p[i, j - 1, k] if j > 0 else 0.0
                        hi = p[i, j, k] if j < ny else 0.0
                        v[i, j, k] -= hi - lo
                if i < nx and j < ny:
                    lo_s = k > 0 and solid[i, j, k - 1]
                    hi_s = k < nz and solid[i, j, k]
                    if not (lo_s or hi_s):
                        lo = p[i, j, k - 1] if k > 0 else 0.0
                        hi = p[i, j, k] if k < nz else 0.0
                        w[i, j, k] -= hi - lo


@numba.njit(**KERNEL)
def _deposit(pos, amount, ox, oy, oz, inv_h, out):
    """Add each point's ``amount`` to the cell centres around it (trilinear weights), serially
    in puff order so the sums never depend on threads.  Points beyond the grid go to the edge."""
    nx, ny, nz = out.shape
    for n in range(pos.shape[0]):
        a = amount[n]
        if a == 0.0:
            continue
        i, fx = _axis((pos[n, 0] - ox) * inv_h - 0.5, nx)
        j, fy = _axis((pos[n, 1] - oy) * inv_h - 0.5, ny)
        k, fz = _axis((pos[n, 2] - oz) * inv_h - 0.5, nz)
        for di in range(2):
            wx = fx if di else 1.0 - fx
            for dj in range(2):
                wy = fy if dj else 1.0 - fy
                for dk in range(2):
                    wz = fz if dk else 1.0 - fz
                    out[i + di, j + dj, k + dk] += a * wx * wy * wz


@numba.njit(**PARALLEL)
def _sample(u, v, w, pos, ox, oy, oz, inv_h, gradient, out):
    """Velocity (and with ``gradient`` its gradient ``du_a/dx_b`` into columns 3 + 3a + b) at ``pos``."""
    for n in numba.prange(pos.shape[0]):
        px = (pos[n, 0] - ox) * inv_h
        py = (pos[n, 1] - oy) * inv_h
        pz = (pos[n, 2] - oz) * inv_h
        if gradient:
            a, dx, dy, dz = _trilinear_grad(u, px, py - 0.5, pz - 0.5)
            out[n, 0] = a
            out[n, 3] = dx * inv_h
            out[n, 4] = dy * inv_h
            out[n, 5] = dz * inv_h
            a, dx, dy, dz = _trilinear_grad(v, px - 0.5, py, pz - 0.5)
            out[n, 1] = a
            out[n, 6] = dx * inv_h
            out[n, 7] = dy * inv_h
            out[n, 8] = dz * inv_h
            a, dx, dy, dz = _trilinear_grad(w, px - 0.5, py - 0.5, pz)
            out[n, 2] = a
            out[n, 9] = dx * inv_h
            out[n, 10] = dy * inv_h
            out[n, 11] = dz * inv_h
        else:
            out[n, 0], out[n, 1], out[n, 2] = _velocity(u, v, w, px, py, pz)


@numba.njit(**KERNEL)
def _resample(q, ox, oy, oz, shift, scale, out):
    """``out`` sample ``(i, j, k)`` (offsets ``o``) is ``q`` at the same world point, where a point of
    the new grid at cell coordinates ``c`` is at ``shift + scale * c`` in the old grid's cells."""
    for i in range(out.shape[0]):
        for j in range(out.shape[1]):
            for k in range(out.shape[2]):
                out[i, j, k] = _trilinear(q, shift[0] + scale * (i + ox) - ox, shift[1] + scale * (j + oy) - oy,
                                          shift[2] + scale * (k + oz) - oz)
