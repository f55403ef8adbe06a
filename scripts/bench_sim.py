"""Speed of one simulation step: the numba kernel against plain vectorised numpy.

20,000 live puffs under gravity, gusty wind, lift, a 3-octave swirl and a
ground plane, symplectic Euler.  Prints particle-steps per second of both and
their ratio, measured in this run, and the numba step with puff shapes on
(the velocity gradient and the deformation update, ``follow = 1``) against
the same shaped step in whole-array numpy (:func:`numpy_shaped_step`; the
largest difference in ``F`` is printed as a check).  Goals: >= 5 M
particle-steps/s on two cores, >= 10x the numpy version, and with
``--octaves 6`` the shaped step >= 30x the numpy shaped step.

Last, the convection flow: one step of its grid (advection, buoyancy,
confinement, projection) at the default ``cells`` and twice that, with the
cost of laying the puffs' heat and sampling the air at them, as a multiple
of the puff step measured in the same run.

Then the whole driver, ``simulate()``, on an exact loop of ~N puffs: the
warm-up path (every puff stepped from the start of the warm-up) against the
twin path (one period of births over their whole lives), interleaved in
this run, with boundaries swept, puff-steps taken and a check that both
give the same arrays.  ``--look FILE`` runs that comparison on a look file
instead (``--rate-scale`` multiplies every source's rate, ``--size`` sets
the image size, which only matters for "auto" swirl octaves).

    /work/venv/bin/python scripts/bench_sim.py [--puffs N] [--steps S]
    /work/venv/bin/python scripts/bench_sim.py --look looks/harbour_chimney.toml [--rate-scale 64] [--size 512]
"""

from __future__ import annotations

import argparse
import time

import numba
import numpy as np

from splatter.sim.forces import pack_forces
from splatter.sim.integrate import step_puffs
from splatter.look.records import ClipSpec, GravitySpec, LiftSpec, LookSpec, PlaneSpec, SourceSpec, SwirlSpec, WindSpec
from splatter.sim.obstacles import pack_obstacles
from splatter.look.load import load_look
from splatter.sim import driver
from splatter.sim.driver import PER_PUFF_FIELDS, plan_simulation, simulate


def numpy_step(pos, vel, age, dt, t, ft, ot):
    """The same symplectic step as the kernel, written with whole-array numpy."""
    kd = ft.drag
    target = np.zeros(3)
    for w in ft.wind:
        g = sum(w[8 + j] * np.sin(w[5 + j] * t + w[11 + j]) for j in range(3))
        target += w[3] * (1.0 + w[4] * g) * w[0:3]
        kd += w[3]
    acc = ft.gravity - kd * vel + target
    for l in ft.lift:
        acc = acc + (l[0] * np.exp(-l[1] * age))[:, None] * l[2:5]
    k = np.concatenate([sw.k for sw in ft.swirls])
    theta = pos @ k.T + (ft.swirl_w * t + ft.swirl_phi)
    air = np.cos(theta) @ ft.swirl_b
    pos0, vel0 = pos, vel
    # Drag and wind grip, the linear pull -kd v, are integrated exactly, as in the kernel.
    step = -np.expm1(-kd * dt) / kd if kd * dt >= 1e-8 else dt * (1.0 - 0.5 * kd * dt)
    vel = vel + step * acc
    pos = pos + dt * (vel + air)
    for p in ot.planes:
        d = (pos - p[0:3]) @ p[3:6]
        hit = d < 0
        if hit.any():
            # The kernel's contact rule (splatter.sim.obstacles): impact at the
            # crossing, consistent with leapfrog, then restitution and friction.
            n, e, mu = p[3:6], p[6], p[7]
            d1 = d[hit]
            d0 = (pos0[hit] - p[0:3]) @ n
            v = vel[hit]
            vn = v @ n
            an = ((v - vel0[hit]) @ n) / dt
            crossed = d0 >= 0
            f = np.where(crossed, d0 / np.where(crossed, d0 - d1, 1.0), 0.5)
            vi = np.where(crossed, vn + an * (f - 0.5) * dt, vn)
            r = np.where(crossed, (1.0 - f) * dt, 0.0)
            into = vi < 0
            vt = v - vn[:, None] * n
            speed_t = np.linalg.norm(vt, axis=1)
            safe = np.where(speed_t > 0, speed_t, 1.0)
            k = np.where(speed_t > 0, np.maximum(0.0, 1.0 - mu * (1 + e) * (-vi) / safe), 0.0)
            vplus = -e * vi
            above = np.maximum(0.0, vplus * r + 0.5 * an * r * r)
            vn2 = vplus + an * (0.5 - f) * dt
            new_pos = pos[hit] - d1[:, None] * n
            new_pos = np.where(into[:, None], new_pos + above[:, None] * n + ((k - 1.0) * r)[:, None] * vt, new_pos)
            new_vel = np.where(into[:, None], k[:, None] * vt + vn2[:, None] * n, v)
            pos[hit] = new_pos
            vel[hit] = new_vel
    return pos, vel


def numpy_shaped_step(pos, vel, age, dt, t, ft, ot, deform, sigma, follow, elongation):
    """:func:`numpy_step` plus the kernel's shape update, written with whole-array numpy.

    The swirl gradient each puff feels, ``G = sum_n -sin(theta_n)
    exp(-|k_n|^2 sigma^2 / 2) b_n kt_n^T``, is one (N, M) x (M, 9) product;
    then one Cayley step of ``F`` with ``follow * G``, the rescale to
    ``det F = 1`` and the relax toward a rotation of puffs stretched past
    ``elongation`` (an eigen-decomposition of ``F^T F`` per such puff).
    """
    k = np.concatenate([sw.k for sw in ft.swirls])
    theta = pos @ k.T + (ft.swirl_w * t + ft.swirl_phi)
    weight = np.exp(-0.5 * np.outer(sigma * sigma, np.einsum("ij,ij->i", k, k)))
    modes = -(ft.swirl_b[:, :, None] * ft.swirl_kt[:, None, :]).reshape(-1, 9)
    grad = ((np.sin(theta) * weight) @ modes).reshape(-1, 3, 3)
    pos, vel = numpy_step(pos, vel, age, dt, t, ft, ot)
    a = (0.5 * dt * follow)[:, None, None] * grad
    eye = np.eye(3)
    deform = np.linalg.solve(eye - a, (eye + a) @ deform)
    deform = deform / np.cbrt(np.linalg.det(deform))[:, None, None]
    lam, vec = np.linalg.eigh(deform.transpose(0, 2, 1) @ deform)  # F^T F = V diag(s^2) V^T, ascending
    logs = 0.5 * np.log(np.maximum(lam, 1e-300))
    width = np.log(elongation)
    over = logs[:, 2] - logs[:, 0] > width
    if over.any():
        # The kernel's relax: clamp the log stretches to a window of the limit's
        # width whose clamped values sum to 0 (volume kept), rotation kept.
        lo = logs[over]
        half = 0.5 * width
        mid = lo[:, 1]
        m = -0.5 * mid
        m = np.where(mid > m + half, -width / 6.0, np.where(mid < m - half, width / 6.0, m))
        g = np.exp(np.clip(lo, (m - half)[:, None], (m + half)[:, None]) - lo)
        v = vec[over]
        f = deform[over] @ (v * g[:, None, :]) @ v.transpose(0, 2, 1)
        deform[over] = f / np.cbrt(np.linalg.det(f))[:, None, None]
    return pos, vel, deform


def _driver_ab(look, plan, frames, repeats=2):
    """Time the warm-up and twin paths of ``simulate`` on the same frames, interleaved; check equal arrays."""
    paths = {"warm-up": lambda: driver._simulate_warmup(look, plan, sorted(frames)),
             "twins": lambda: simulate(look, plan, frames=frames)}
    best = {k: float("inf") for k in paths}
    counts = {}
    real = driver._advance
    for _ in range(repeats):
        for name, run in paths.items():
            sweep = [0, 0]

            def counting(lk, pl, puffs, s, *a):
                sweep[0] = max(sweep[0], s)
                sweep[1] += puffs.alive
                return real(lk, pl, puffs, s, *a)

            driver._advance = counting
            try:
                t0 = time.perf_counter()
                digest = [(st.frame, len(st)) for st in run()]
                best[name] = min(best[name], time.perf_counter() - t0)
            finally:
                driver._advance = real
            counts[name] = (sweep[0] + 1, sweep[1], digest)
    # Same bits (checked outside the timing, one frame at a time).
    for a, b in zip(driver._simulate_warmup(look, plan, sorted(frames)), simulate(look, plan, frames=frames)):
        for field in PER_PUFF_FIELDS:
            if not np.array_equal(getattr(a, field), getattr(b, field)):
                raise SystemExit(f"frame {a.frame}: {field} differs between the paths")
    live = sum(n for _, n in counts["twins"][2]) // max(1, len(frames))
    print(f"simulate() : {look.name}, {len(frames)} frames of ~{live} puffs, warm-up {plan.warmup_steps} steps, "
          f"period {plan.period_steps} steps (same arrays on both paths)")
    for name in paths:
        bounds, puff_steps, _ = counts[name]
        print(f"  {name:8s}: {bounds:5d} boundaries, {puff_steps / 1e6:7.2f} M puff-steps, {best[name]:7.2f} s "
              f"(best of {repeats})")
    print(f"  speed-up : {best['warm-up'] / best['twins']:.2f}x")


def _look_ab(args):
    overrides = [f"image.width={args.size}", f"image.height={args.size}"] if args.size else []
    look = load_look(args.look, overrides=overrides)
    if args.rate_scale != 1.0:
        from dataclasses import replace
        look = replace(look, sources=tuple(replace(s, rate=s.rate * args.rate_scale) for s in look.sources))
    from splatter.render import plan_and_camera

    plan, _ = plan_and_camera(look)  # "auto" swirl octaves resolved at the final framing, as a render does
    list(simulate(look, plan, frames=[0]))  # compile
    _driver_ab(look, plan, list(range(look.clip.frames)), repeats=args.repeats_driver)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--puffs", type=int, default=20000)
    ap.add_argument("--steps", type=int, default=100)
    ap.add_argument("--octaves", type=int, default=3, help="swirl octaves of the step benchmark")
    ap.add_argument("--repeats", type=int, default=5, help="best of this many timings")
    ap.add_argument("--look", help="compare the two simulate() paths on this look file only")
    ap.add_argument("--rate-scale", type=float, default=1.0, help="with --look: multiply every source's rate")
    ap.add_argument("--size", type=int, default=0, help="with --look: image width and height, px")
    ap.add_argument("--repeats-driver", type=int, default=2, help="best of this many simulate() timings")
    ap.add_argument("--flow-only", action="store_true", help="time the puff step and the convection flow only")
    args = ap.parse_args()
    if args.look:
        _look_ab(args)
        return
    forces = (GravitySpec((0.0, -0.3, 0.0)), WindSpec(velocity=(0.6, 0.0, 0.0), gust=0.4, gust_period=2.0, grip=1.0),
              LiftSpec(accel=1.5, cooling=0.4), SwirlSpec(strength=0.4, scale=1.0, octaves=args.octaves, evolve=2.0))
    ft = pack_forces(forces, seed=3)
    ot = pack_obstacles((PlaneSpec(point=(0.0, -1.0, 0.0)),))
    rng = np.random.default_rng(1)
    n = args.puffs
    pos0 = rng.uniform(-1.5, 1.5, (n, 3))
    vel0 = rng.normal(0.0, 0.5, (n, 3))
    age = rng.uniform(0.0, 3.0, n)
    sigma = rng.uniform(0.02, 0.1, n)  # puff sizes: the shaped step filters eddies smaller than each puff
    dt = 1.0 / 60.0

    pos, vel = pos0.copy(), vel0.copy()
    step_puffs(pos, vel, age, dt=dt, time=0.0, forces=ft, obstacles=ot)  # compile
    eye = np.tile(np.eye(3), (n, 1, 1))
    step_puffs(pos, vel, age, dt=dt, time=0.0, forces=ft, obstacles=ot, deform=eye.copy(), follow=1.0,
               elongation=36.0, sigma=sigma)  # compile the shaped step
    t_numba = t_numpy = t_shaped = t_numpy_shaped = float("inf")
    follow = np.ones(n)
    for _ in range(args.repeats):  # interleaved, so a busy machine slows both alike
        pos, vel = pos0.copy(), vel0.copy()
        t0 = time.perf_counter()
        for s in range(args.steps):
            step_puffs(pos, vel, age, dt=dt, time=s * dt, forces=ft, obstacles=ot)
        t_numba = min(t_numba, time.perf_counter() - t0)
        pos, vel, deform = pos0.copy(), vel0.copy(), eye.copy()
        t0 = time.perf_counter()
        for s in range(args.steps):
            step_puffs(pos, vel, age, dt=dt, time=s * dt, forces=ft, obstacles=ot, deform=deform, follow=1.0,
                       elongation=36.0, sigma=sigma)
        t_shaped = min(t_shaped, time.perf_counter() - t0)
        pos = pos0.copy()  # the shaped step moves puffs identically; keep the unshaped result for the check
        vel = vel0.copy()
        for s in range(args.steps):
            step_puffs(pos, vel, age, dt=dt, time=s * dt, forces=ft, obstacles=ot)
        pn, vn = pos0.copy(), vel0.copy()
        t0 = time.perf_counter()
        for s in range(args.steps):
            pn, vn = numpy_step(pn, vn, age, dt, s * dt, ft, ot)
        t_numpy = min(t_numpy, time.perf_counter() - t0)
        pn2, vn2, fn = pos0.copy(), vel0.copy(), eye.copy()
        t0 = time.perf_counter()
        for s in range(args.steps):
            pn2, vn2, fn = numpy_shaped_step(pn2, vn2, age, dt, s * dt, ft, ot, fn, sigma, follow, 36.0)
        t_numpy_shaped = min(t_numpy_shaped, time.perf_counter() - t0)

    err = float(np.max(np.abs(pn - pos)))
    rate_numba = n * args.steps / t_numba
    rate_numpy = n * args.steps / t_numpy
    print(f"puffs {n}, steps {args.steps}, swirl modes {ft.swirl_b.shape[0]}, threads {numba.get_num_threads()}")
    print(f"numba step : {rate_numba / 1e6:8.2f} M particle-steps/s")
    print(f"  + shapes : {n * args.steps / t_shaped / 1e6:8.2f} M particle-steps/s  (velocity gradient and F"
          f" update, follow = 1; {t_shaped / t_numba:.2f}x the time)")
    if args.flow_only:
        flow_steps(n, t_numba / args.steps, repeats=args.repeats)
        return
    print(f"numpy step : {rate_numpy / 1e6:8.2f} M particle-steps/s")
    print(f"  + shapes : {n * args.steps / t_numpy_shaped / 1e6:8.2f} M particle-steps/s  (max |F difference| "
          f"{float(np.max(np.abs(fn - deform))):.2e})")
    # The whole driver (emission, ageing, ramps, output) on a look holding ~n puffs.
    look = LookSpec(name="bench", clip=ClipSpec(frames=64, fps=30, substeps=2, loop="exact"),
                    sources=(SourceSpec(shape="disc", rate=n / 4.0, life=(3.0, 5.0), spread=25.0),),
                    forces=forces, obstacles=(PlaneSpec(point=(0.0, -1.0, 0.0)),))
    small = LookSpec(name="warm", clip=ClipSpec(frames=2), sources=look.sources, forces=forces,
                     obstacles=look.obstacles)
    list(simulate(small, frames=[0, 1]))  # compile
    print(f"ratio      : {rate_numba / rate_numpy:8.1f}x   (max |pos difference| {err:.2e})")
    print(f"  shaped   : {t_numpy_shaped / t_shaped:8.1f}x   (numba shaped step against the numpy shaped step)")
    _driver_ab(look, plan_simulation(look), list(range(64)), repeats=args.repeats_driver)
    flow_steps(n, t_numba / args.steps, repeats=args.repeats)


def _plume(cells, puffs):
    """A plume of a small hot source at ``cells``: a Convection that has stepped over its puffs, and the puffs."""
    from splatter.look.records import ConvectionSpec
    from splatter.sim.flow import Convection

    look = LookSpec(name="plume", seed=2, clip=ClipSpec(frames=2, fps=30, substeps=2, warmup=3.0),
                    sources=(SourceSpec(shape="disc", radius=0.15, rate=puffs / 3.0, speed=(0.2, 0.4), spread=20.0,
                                        life=(3.0, 3.0), size=(0.02, 0.02), grow=((0.0, 1.0), (1.0, 4.0)),
                                        heat=3.0 * 3.0 / puffs),),
                    forces=(ConvectionSpec(cells=cells),))
    plan = plan_simulation(look)
    st = next(simulate(look, plan, frames=[1]))
    flow = Convection(plan.forces.convection, plan.obstacles)
    for _ in range(60):  # the grid around these puffs, and two seconds of air rising over them
        flow.advance(st.pos, st.size, st.source, st.age, plan.dt)
    return flow, st, plan.dt


def flow_steps(n, puff_step, repeats=5, steps=30):
    """Cost of one step of the convection flow (grid step, heat laid, velocity and gradient sampled at the
    puffs) at the default cells and twice them, against the puff step measured above."""
    from splatter.look.records import ConvectionSpec

    default = ConvectionSpec().cells
    print()
    print(f"convection flow, a developed plume of ~{n:,} puffs (default cells = {default}); "
          f"threads {numba.get_num_threads()}")
    print(f"{'cells':>6} {'grid':>14} {'step ms':>8} {'CG iters':>8} {'lay+sample ms':>13} {'x puff step':>11}")
    for cells in (default, 2 * default):
        flow, st, dt = _plume(cells, n)
        g = flow.grid
        t_grid = t_puffs = float("inf")
        iters = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            for _ in range(steps):
                iters.append(g.step(dt, buoyancy=1.0, confinement=flow.table.confinement))
            t_grid = min(t_grid, (time.perf_counter() - t0) / steps)
            t0 = time.perf_counter()
            for _ in range(steps):
                g.heat = g.deposit(st.pos, np.full(len(st), 3.0 * 3.0 / n))
                flow.sample(st.pos, gradient=True)
            t_puffs = min(t_puffs, (time.perf_counter() - t0) / steps)
        dims = "x".join(str(d) for d in g.dims)
        print(f"{cells:6d} {dims:>14} {1e3 * t_grid:8.2f} {np.mean(iters):8.1f} {1e3 * t_puffs:13.2f} "
              f"{(t_grid + t_puffs) / puff_step:11.2f}")


if __name__ == "__main__":
    main()
