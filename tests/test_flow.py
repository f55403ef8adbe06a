"""The buoyant flow (``kind = "convection"``): grid invariants, exact transport, the plume's spread.

Sources beside each check:

* Stam, "Stable Fluids", SIGGRAPH 1999: semi-Lagrangian advection; a
  projection leaves a divergence-free field.
* Fedkiw, Stam and Jensen, "Visual Simulation of Smoke", SIGGRAPH 2001:
  buoyancy and vorticity confinement on a staggered grid.
* Morton, Taylor and Turner, Proc. R. Soc. A 234 (1956); Papanicolaou and
  List, J. Fluid Mech. 195 (1988): a plume from a small steady source spreads
  linearly, Gaussian half-width growth ``db/dz`` about 0.10-0.12 (velocity),
  a little wider for the scalar.
"""

from __future__ import annotations

import numba
import numpy as np
import pytest

from splatter.core.errors import LookError
from splatter.look.load import load_look
from splatter.look.records import ClipSpec, ConvectionSpec, LookSpec, PlaneSpec, SourceSpec
from splatter.sim.driver import simulate
from splatter.sim.flow import FlowGrid
from splatter.sim.plan import plan_simulation


def _random_grid(seed=3, dims=(10, 12, 9), h=0.2):
    rng = np.random.default_rng(seed)
    g = FlowGrid((-1.0, 0.0, -0.9), h, dims)
    g.u[...] = rng.normal(size=g.u.shape)
    g.v[...] = rng.normal(size=g.v.shape)
    g.w[...] = rng.normal(size=g.w.shape)
    return g


def test_projection_leaves_divergence_below_1e4_of_the_velocity_scale():
    # Stam 1999: after the projection the discrete divergence vanishes (here below 1e-4 of the speed).
    g = _random_grid()
    c = g.cell_centres()
    g.set_solid(np.sum((c - np.array([0.0, 1.2, 0.0])) ** 2, axis=-1) < 0.5 ** 2)  # a ball inside
    before = np.abs(g.divergence()).max()
    g.project()
    speed = g.speed()
    assert speed > 0.1
    assert before > 1.0 * speed  # the random field was far from divergence-free
    assert np.abs(g.divergence()).max() < 1e-4 * speed


def test_obstacles_are_solid_to_the_air():
    # No flow through a solid: every face of a solid cell is still after a step with heat beside it.
    g = _random_grid(dims=(8, 10, 8))
    c = g.cell_centres()
    ground = c[..., 1] < 0.5
    g.set_solid(ground)
    g.heat[:, 3:5, :] = 2.0
    g.step(0.05, buoyancy=1.0, confinement=1.0)
    i, j, k = np.nonzero(ground)
    for a, (di, dj, dk) in ((g.u, (1, 0, 0)), (g.v, (0, 1, 0)), (g.w, (0, 0, 1))):
        assert np.all(a[i, j, k] == 0.0) and np.all(a[i + di, j + dj, k + dk] == 0.0)
    assert np.abs(g.v).max() > 0.01  # and the warm layer above does rise


def test_constant_flow_carries_a_blob_by_the_exact_distance():
    # A uniform flow is divergence-free and carries everything rigidly: the blob's centroid moves by U t
    # (within half a cell), and the air itself stays uniform through advection and projection.
    h = 0.1
    g = FlowGrid((0.0, 0.0, 0.0), h, (40, 30, 12))
    U = np.array([0.9, 0.4, 0.0])
    g.u[...] = U[0]
    g.v[...] = U[1]
    c = g.cell_centres()
    start = np.array([1.0, 1.0, 0.6])
    q = np.exp(-np.sum((c - start) ** 2, axis=-1) / (2 * 0.15 ** 2))
    dt, steps = 1.0 / 30, 60
    for _ in range(steps):
        q = g.advect_scalar(q, dt)
        g.step(dt, buoyancy=1.0, confinement=1.0)  # no heat: the uniform flow must stay as it is
    centroid = np.tensordot(q, c, axes=([0, 1, 2], [0, 1, 2])) / q.sum()
    moved = centroid - start
    assert np.allclose(g.velocity(np.array([[2.0, 1.5, 0.6]]))[0], U, atol=1e-9)
    assert np.linalg.norm(moved - U * dt * steps) < 0.5 * h
    assert np.linalg.norm(U * dt * steps) > 10 * h  # a real distance, twenty cells


def test_a_still_uniformly_warm_box_stays_still():
    # Uniform heat in a closed box is a pure pressure gradient: the projection removes it exactly, so no
    # spurious currents start (Fedkiw et al. 2001 add buoyancy as a body force before the projection).
    g = FlowGrid((0.0, 0.0, 0.0), 0.1, (10, 14, 10))
    shell = np.ones(g.dims, dtype=bool)
    shell[1:-1, 1:-1, 1:-1] = False
    g.set_solid(shell)
    g.heat[...] = 5.0
    kick = 1.0 * 5.0 * 0.05  # what one step of buoyancy would add to a face
    for _ in range(40):
        g.step(0.05, buoyancy=1.0, confinement=3.0)
    assert g.speed() < 1e-6 * kick


def _plume_look(heat, *, frames=12, fps=15, forces=None, **source):
    src = dict(shape="disc", radius=0.1, rate=600.0, speed=(0.1, 0.1), spread=5.0, life=(2.0, 2.0),
               size=(0.02, 0.02), heat=heat)
    src.update(source)
    return LookSpec(name="plume", seed=4, clip=ClipSpec(frames=frames, fps=fps, substeps=2, warmup=1.0),
                    sources=(SourceSpec(**src),),
                    forces=(ConvectionSpec(cells=16),) if forces is None else forces)


_FIELDS = ("id", "pos", "vel", "age", "size", "opacity", "deform")


def test_without_heat_the_flow_force_changes_nothing():
    with_flow = list(simulate(_plume_look(0.0), frames=[0, 5, 11]))
    without = list(simulate(_plume_look(0.0, forces=()), frames=[0, 5, 11]))
    for a, b in zip(with_flow, without):
        for name in _FIELDS:
            assert np.array_equal(getattr(a, name), getattr(b, name)), name
    # ...while heat does move the smoke (the comparison above can fail).
    hot = list(simulate(_plume_look(0.002), frames=[11]))[0]
    assert hot.pos[:, 1].mean() > without[-1].pos[:, 1].mean() + 0.2


def test_same_seed_same_bytes_for_any_thread_count_and_frame_range():
    look = _plume_look(0.002, frames=10)
    old = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = list(simulate(look, frames=[3, 9]))
        numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
        many = list(simulate(look, frames=[3, 9]))
        alone = list(simulate(look, frames=[9]))
    finally:
        numba.set_num_threads(old)
    for a, b in zip(one, many):
        for name in _FIELDS:
            assert np.array_equal(getattr(a, name), getattr(b, name)), name
        for name in ("u", "v", "w", "heat", "density"):
            assert np.array_equal(a.flow[name], b.flow[name]), name
    for name in _FIELDS:
        assert np.array_equal(getattr(one[1], name), getattr(alone[0], name)), name


def test_a_flow_crossfade_reaches_back_into_the_warm_up():
    # The crossfade of a flow look blends the clip's end into the frames just before frame 0: the plan makes
    # the warm-up long enough, and those frames are the same states a run asked only for them gives.
    look = _plume_look(0.002, frames=8)
    look = LookSpec(**{**look.__dict__, "clip": ClipSpec(frames=8, fps=15, substeps=2, warmup=0.0,
                                                         loop="crossfade", crossfade=0.25)})
    plan = plan_simulation(look)
    assert plan.warmup_steps == 2 * 2 and any("before frame 0" in n for n in plan.notes)
    with pytest.raises(ValueError, match="frames must be >= 0"):
        list(simulate(look, plan, frames=[-1]))
    both = list(simulate(look, plan, frames=[-2, 7], warmup_frames=True))
    alone = list(simulate(look, plan, frames=[-2], warmup_frames=True))
    assert [s.frame for s in both] == [-2, 7] and len(both[0]) > 0
    assert np.array_equal(both[0].pos, alone[0].pos)
    with pytest.raises(ValueError, match="warm-up"):
        list(simulate(look, plan, frames=[-3], warmup_frames=True))


def test_the_grid_follows_the_rising_smoke():
    # A plume rising far above where it started never meets the top of the grid.
    look = _plume_look(0.003, frames=30, life=(3.0, 3.0))
    last = list(simulate(look, frames=[29]))[0]
    f = last.flow
    top = f["origin"][1] + f["cell"] * f["heat"].shape[1]
    assert last.pos[:, 1].max() > 2.0
    assert np.percentile(last.pos[:, 1], 99) < top


def test_a_ground_plane_is_solid_for_the_flow():
    look = _plume_look(0.003, forces=(ConvectionSpec(cells=16),),
                       center=(0.0, 0.05, 0.0))
    look = LookSpec(**{**look.__dict__, "obstacles": (PlaneSpec(point=(0.0, 0.0, 0.0)),)})
    st = list(simulate(look, frames=[11]))[0]
    f = st.flow
    solid = f["solid"]
    assert solid.any() and not solid.all()
    i, j, k = np.nonzero(solid)
    assert np.all(f["v"][i, j + 1, k] == 0.0)  # nothing flows up out of the ground


def test_an_exact_loop_with_a_flow_is_told_it_cannot_close(tmp_path):
    look = _plume_look(0.002)
    look = LookSpec(**{**look.__dict__, "clip": ClipSpec(frames=12, fps=15, loop="exact")})
    notes = plan_simulation(look).notes
    assert any(n.startswith("force[0]:") and "crossfade" in n for n in notes)


def test_heat_is_a_source_key_and_convection_a_force_kind(tmp_path):
    path = tmp_path / "steam_whistle.toml"
    path.write_text('[[source]]\nheat = 0.5\n[[force]]\nkind = "convection"\ncells = 24\nbuoyancy = 2.0\n'
                    'cooling = 0.1\nconfinement = 1.5\n')
    look = load_look(path)
    f = look.forces[0]
    assert (look.sources[0].heat, f.cells, f.buoyancy, f.cooling, f.confinement) == (0.5, 24, 2.0, 0.1, 1.5)
    path.write_text('[[force]]\nkind = "convection"\n[[force]]\nkind = "convection"\n')
    with pytest.raises(LookError, match=r"force\[1\]\.kind: expected at most one force of kind"):
        load_look(path)
    path.write_text('[[force]]\nkind = "convection"\ncells = 4\n')
    with pytest.raises(LookError, match=r"force\[0\]\.cells"):
        load_look(path)


def _half_width_growth(look, frames):
    """db/dz of the time-averaged smoke: b(z) is the rms radius of puff centres in 0.25 high slabs
    (for a Gaussian profile exp(-r^2/b^2), <r^2> = b^2)."""
    zs = np.arange(0.0, 12.0, 0.25)
    count = np.zeros(zs.size)
    r2 = np.zeros(zs.size)
    tops = []
    for st in simulate(look, frames=frames):
        y = st.pos[:, 1]
        tops.append(np.percentile(y, 99))
        k = np.floor(y / 0.25).astype(int)
        ok = (k >= 0) & (k < zs.size)
        np.add.at(count, k[ok], 1.0)
        np.add.at(r2, k[ok], st.pos[ok, 0] ** 2 + st.pos[ok, 2] ** 2 + 2.0 * st.size[ok] ** 2)
    z = zs + 0.125
    b = np.sqrt(r2 / np.maximum(count, 1.0))
    return z, b, min(tops)


def test_a_steady_plume_spreads_linearly_at_the_published_rate():
    # Morton, Taylor and Turner 1956; Papanicolaou and List 1988: above a few source diameters the
    # time-averaged half-width grows linearly, db/dz about 0.1 (0.08-0.16 for the scalar).
    diameter = 0.2
    T = 12.0  # the second half averaged: with 4 s instead of 6 the spread moved 0.05-0.11 between seeds
    look = LookSpec(name="plume", seed=1, clip=ClipSpec(frames=int(T * 15), fps=15, substeps=2, warmup=0.0),
                    sources=(SourceSpec(shape="disc", radius=diameter / 2, rate=1500.0, speed=(0.05, 0.05),
                                        spread=0.0, life=(T, T), size=(0.01, 0.01), heat=0.0007),),
                    forces=(ConvectionSpec(cells=48, confinement=3.0),))
    z, b, top = _half_width_growth(look, range(int(T * 15) // 2, int(T * 15), 3))
    sel = (z > 6 * diameter) & (z < 0.7 * top)
    assert sel.sum() >= 8
    slope, _ = np.polyfit(z[sel], b[sel], 1)
    assert 0.08 <= slope <= 0.16, slope
    # Linear, not just wide: the straight line explains most of b's variation (R^2 > 0.75; a few seconds of
    # averaging leave the passing billows in the profile).
    resid = b[sel] - np.polyval(np.polyfit(z[sel], b[sel], 1), z[sel])
    assert resid.std() < 0.5 * b[sel].std()
    print(f"plume spread db/dz = {slope:.3f} over z = {z[sel][0]:.2f}..{z[sel][-1]:.2f}")


FLOW_LOOK = """
name = "steam_whistle"
seed = 5
[clip]
frames = 6
fps = 15
warmup = 1.0
loop = "exact"
[[source]]
rate = 300
life = 1.5
size = 0.03
heat = 0.004
[[force]]
kind = "convection"
cells = 12
[[obstacle]]
kind = "plane"
point = [0, -0.2, 0]
"""


def test_simulate_writes_the_flow_grid_and_the_loop_note(tmp_path, capsys):
    from splatter.cli import main

    look = tmp_path / "steam_whistle.toml"
    look.write_text(FLOW_LOOK)
    grid = tmp_path / "grid.npz"
    assert main(["simulate", str(look), "--out", str(tmp_path / "s.npz"), "--flow-grid", str(grid),
                 "--flow-frame", "4"]) == 0
    err = capsys.readouterr().err
    assert 'force[0]: a convection flow cannot repeat' in err and 'clip.loop = "exact"' in err
    data = np.load(grid)
    shape = data["density"].shape
    assert int(data["frame"]) == 4 and data["origin"].shape == (3,) and float(data["cell"]) > 0
    assert data["velocity"].shape == shape + (3,) and data["heat"].shape == shape == data["solid"].shape
    assert data["u"].shape == (shape[0] + 1,) + shape[1:] and data["v"].shape[1] == shape[1] + 1
    assert data["density"].sum() > 0 and data["velocity"][..., 1].max() > 0 and data["solid"].any()
    # The cell-centred velocity is the mean of each cell's faces.
    assert np.allclose(data["velocity"][..., 0], 0.5 * (data["u"][1:] + data["u"][:-1]))


def test_simulate_refuses_a_flow_grid_without_a_flow(tmp_path, capsys):
    from splatter.cli import main

    look = tmp_path / "quiet.toml"
    look.write_text(FLOW_LOOK.replace("heat = 0.004", ""))
    out = tmp_path / "out"
    assert main(["simulate", str(look), "--out", str(out / "s.npz"), "--flow-grid", str(out / "g.npz")]) == 2
    err = capsys.readouterr().err
    assert "--flow-grid" in err and "convection" in err and "Traceback" not in err
    assert not out.exists()
    assert main(["check", str(look)]) == 0
    assert "no source has heat" in capsys.readouterr().out
