"""The simulate driver: plan, determinism, frame ranges, exact loops, the npz file."""

import os

import numpy as np
import pytest

from splatter.deliver.states import save_states
from splatter.look.records import (
    BurstSpec,
    ClipSpec,
    DragSpec,
    GravitySpec,
    LiftSpec,
    LookSpec,
    PlaneSpec,
    SourceSpec,
    SphereSpec,
    SwirlSpec,
    VortexSpec,
    WindSpec,
)
from splatter.sim import driver
from splatter.sim.driver import FrameState, plan_simulation, simulate

FIELDS = ("id", "slot", "source", "pos", "vel", "age", "life", "size", "opacity", "color", "glow", "aspect", "quat",
          "stretch", "density")


def _busy_look(loop="none", seed=4, frames=24, **clip):
    sources = (
        SourceSpec(shape="disc", rate=47.3, radius=0.3, spread=25.0, life=(0.8, 1.4), size=(0.1, 0.2),
                   grow=((0.0, 1.0), (1.0, 2.5)), fade=0.3, aspect=(0.4, 0.9),
                   color=((0.0, (1.0, 0.5, 0.2)), (1.0, (0.2, 0.2, 0.2))),
                   glow=((0.0, (2.0, 1.0, 0.0)), (0.3, (0.0, 0.0, 0.0)))),
        SourceSpec(shape="box", center=(0.5, 0.0, 0.0), rate=20.0, speed=(0.2, 0.6), life=(0.5, 1.0),
                   stretch=0.1, density=2.0),
    )
    forces = (GravitySpec(accel=(0.0, -0.5, 0.0)), WindSpec(velocity=(0.6, 0.0, 0.1), gust=0.4, gust_period=0.7),
              LiftSpec(accel=1.5, cooling=0.8), SwirlSpec(strength=0.5, scale=0.8, octaves=3, evolve=0.6),
              VortexSpec(center=(0.2, 0.0, 0.0), strength=0.7, radius=0.3))
    return LookSpec(name="busy", seed=seed, clip=ClipSpec(frames=frames, fps=30, loop=loop, **clip),
                    sources=sources, forces=forces, obstacles=(PlaneSpec(point=(0.0, -0.1, 0.0), bounce=0.4),))


def _assert_same(a: FrameState, b: FrameState, fields=FIELDS):
    assert len(a) == len(b)
    for name in fields:
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)


def test_plan_basics_and_rate_snap_note():
    look = _busy_look("exact", frames=48)
    plan = plan_simulation(look)
    assert plan.dt == 1 / 60
    assert plan.period == 1.6 and plan.period_steps == 96
    assert plan.warmup_steps == 84  # auto: longest life 1.4 s
    assert plan.rates[0] == 76 / 1.6  # round(47.3 * 1.6) = 76 puffs per period
    assert "source[0].rate: 47.3/s snapped to 47.5/s so 76 puffs are born per 1.6 s loop period" in plan.notes
    assert any(n.startswith("force[1].gust_period: 0.7 s snapped to") for n in plan.notes)
    assert any(n.startswith("force[3].evolve:") for n in plan.notes)


def test_what_breaks_an_exact_loop_is_a_warning_and_the_plan_says_what_the_loop_is():
    look = LookSpec(name="n", clip=ClipSpec(frames=30, fps=30, loop="exact", warmup=0.5),
                    sources=(SourceSpec(rate=10.0, bursts=(BurstSpec(0.2, 5),), stop=0.5, life=(2.0, 3.0)),))
    plan = plan_simulation(look)
    assert any(n.startswith("source[0].bursts: a burst cannot repeat") for n in plan.warnings)
    assert any(n.startswith("source[0].stop:") for n in plan.warnings)
    assert not any("jump" in n or "closes" in n for n in plan.notes)  # no note may claim the loop closes
    assert any(n.startswith("clip.warmup: 0.5 s raised to 3 s") for n in plan.notes)
    assert any(n.startswith("source[0].life:") for n in plan.notes)
    assert plan.loop_breaks == ("source[0].stop", "source[0].bursts") and plan.effective_loop == "none"
    late = LookSpec(name="n", clip=ClipSpec(frames=30, fps=30, loop="exact"), sources=(SourceSpec(start=0.4),))
    assert plan_simulation(late).loop_breaks == ("source[0].start",)
    whole = plan_simulation(_busy_look("exact"))
    assert whole.warnings == () and whole.effective_loop == "exact"
    assert plan_simulation(_busy_look("none")).notes == ()


def test_a_crossfade_that_rounds_far_from_what_was_asked_is_a_warning():
    # 0.1 of 4 frames is 0.4 frames: blended over 1 frame (a quarter of the clip), which must be said.
    short = plan_simulation(LookSpec(name="c", clip=ClipSpec(frames=4, loop="crossfade", crossfade=0.1)))
    assert any(w.startswith("clip.crossfade: 0.1 of 4 frames is 0.4 frames") for w in short.warnings)
    fine = plan_simulation(LookSpec(name="c", clip=ClipSpec(frames=64, loop="crossfade", crossfade=0.25)))
    assert fine.warnings == ()


def test_frame_state_fields():
    st = list(simulate(_busy_look(), frames=[12]))[0]
    m = len(st)
    assert m > 20 and st.frame == 12 and st.time == 12 / 30
    shapes = {"pos": (m, 3), "vel": (m, 3), "color": (m, 3), "glow": (m, 3), "quat": (m, 4)}
    for name in FIELDS:
        arr = getattr(st, name)
        assert arr.shape == shapes.get(name, (m,)), name
    assert st.id.dtype == np.int64 and st.slot.dtype == np.int64 and st.source.dtype == np.int32
    assert len(set(st.id.tolist())) == m
    np.testing.assert_allclose(np.linalg.norm(st.quat, axis=1), 1.0, atol=1e-12)
    assert np.all((st.age >= 0) & (st.age < st.life))
    s1 = st.source == 1
    np.testing.assert_array_equal(st.quat[s1], np.tile([1.0, 0.0, 0.0, 0.0], (s1.sum(), 1)))  # aspect 1
    np.testing.assert_array_equal(st.glow[s1], 0.0)
    assert np.all(st.stretch[s1] == 0.1) and np.all(st.density[s1] == 2.0)
    # Ramps at age / life: the default opacity ramp times exp(-fade age) (source 0 fade 0.3).
    x = st.age / st.life
    s0 = ~s1
    ramp = np.interp(x[s0], [0.0, 0.1, 1.0], [0.0, 0.5, 0.0])
    np.testing.assert_allclose(st.opacity[s0], ramp * np.exp(-0.3 * st.age[s0]), atol=1e-15)
    assert np.all(st.size[s0] >= 0.1 - 1e-12) and np.all(st.size[s0] <= 0.2 * 2.5 + 1e-12)
    assert np.all(st.pos[:, 1] >= -0.1)  # the plane holds
    # Ordered by (source, slot, id).
    key = np.lexsort((st.id, st.slot, st.source))
    np.testing.assert_array_equal(key, np.arange(m))


def test_same_seed_same_arrays_other_seed_differs():
    a = list(simulate(_busy_look(seed=4), frames=[5, 15]))
    b = list(simulate(_busy_look(seed=4), frames=[5, 15]))
    c = list(simulate(_busy_look(seed=5), frames=[15]))
    for x, y in zip(a, b):
        _assert_same(x, y)
    assert len(c[0]) != len(a[1]) or not np.array_equal(c[0].pos, a[1].pos)


def test_frame_range_equals_full_run():
    look = _busy_look(frames=64)
    full = {s.frame: s for s in simulate(look, frames=range(64))}
    part = list(simulate(look, frames=range(10, 20)))
    assert [s.frame for s in part] == list(range(10, 20))
    for s in part:
        _assert_same(s, full[s.frame])


def test_frames_may_run_past_the_clip():
    look = _busy_look(frames=8)
    late = list(simulate(look, frames=[30, 3]))
    assert [s.frame for s in late] == [3, 30]
    assert late[1].time == 1.0


@pytest.mark.parametrize("integrator", ["symplectic", "midpoint"])
def test_exact_loop_frame_n_equals_frame_0(integrator):
    # Exact loop by construction: every input of frame N (births, random draws,
    # force phases, ages) is bit-identical to frame 0's, so the states are too.
    look = _busy_look("exact", frames=24, integrator=integrator)
    first, last = list(simulate(look, frames=[0, 24]))
    assert len(first) > 20
    _assert_same(first, last, fields=[f for f in FIELDS if f != "id"])
    assert not np.array_equal(first.id, last.id)
    # And not because nothing moves: an intermediate frame differs.
    mid = list(simulate(look, frames=[12]))[0]
    assert len(mid) != len(first) or not np.array_equal(mid.pos, first.pos)


def test_steady_state_count_follows_littles_law():
    # Little's law (Little, Operations Research 9(3), 1961): mean number alive
    # L = rate x mean life.  Sources 0 and 1: 47.3 x 1.1 + 20 x 0.75 = 67.03.
    look = _busy_look(frames=90)
    plan = plan_simulation(look)
    assert plan.steady_state_puffs == pytest.approx(47.3 * 1.1 + 20 * 0.75, rel=1e-5)
    look = LookSpec(name="little", clip=ClipSpec(frames=120, fps=30), sources=look.sources)
    counts = [len(s) for s in simulate(look, frames=range(0, 120, 4))]
    assert np.mean(counts) == pytest.approx(plan.steady_state_puffs, rel=0.1)


def test_save_states_round_trip(tmp_path):
    states = list(simulate(_busy_look(), frames=[0, 6, 12]))
    path = tmp_path / "sim.npz"
    save_states(path, states)
    assert sorted(os.listdir(tmp_path)) == ["sim.npz"]  # no temporary file left behind
    with np.load(path) as z:
        fs = z["frame_start"]
        assert fs.shape == (4,) and fs[0] == 0 and fs[-1] == sum(len(s) for s in states)
        np.testing.assert_array_equal(z["frame"], [0, 6, 12])
        np.testing.assert_array_equal(z["time"], [0.0, 0.2, 0.4])
        for j, st in enumerate(states):
            for name in FIELDS:
                want = getattr(st, name)
                want = want.astype(np.float32) if want.dtype.kind == "f" else want  # floats stored as float32
                assert z[name].dtype == want.dtype, name
                np.testing.assert_array_equal(z[name][fs[j]:fs[j + 1]], want, err_msg=name)


def test_saved_states_are_compressed_float32_with_the_umask_permissions(tmp_path):
    # The file once came out mode 0600 and as raw float64 (35 MB for 64 frames).
    import stat
    import zipfile

    states = list(simulate(_busy_look(), frames=range(12)))
    old = os.umask(0o022)
    try:
        save_states(tmp_path / "sim.npz", states)
    finally:
        os.umask(old)
    assert stat.S_IMODE(os.stat(tmp_path / "sim.npz").st_mode) == 0o644  # what open() gives under umask 022
    with zipfile.ZipFile(tmp_path / "sim.npz") as z:
        infos = {i.filename: i for i in z.infolist()}
    assert infos["pos.npy"].compress_type == zipfile.ZIP_DEFLATED
    raw64 = sum(getattr(st, name).astype(np.float64).nbytes for st in states for name in ("pos", "vel", "deform"))
    assert sum(infos[f"{n}.npy"].compress_size for n in ("pos", "vel", "deform")) < 0.5 * raw64


def test_save_states_empty(tmp_path):
    save_states(tmp_path / "none.npz", [])
    with np.load(tmp_path / "none.npz") as z:
        np.testing.assert_array_equal(z["frame_start"], [0])
        assert z["pos"].shape == (0, 3)


def test_negative_frame_is_rejected():
    with pytest.raises(ValueError, match="frames"):
        list(simulate(_busy_look(), frames=[-1]))


# Exact loops from twins: the same bits as stepping every puff from the start of the warm-up.

def _long_life_look(integrator="symplectic", warmup=1.7):
    # Puffs outlive the 0.5 s period (up to 3 periods alive at once), one-off
    # bursts, a killing sphere, drag, and a warm-up set longer than any life
    # (at 3 s the first period's puffs are all dead before the bursts).
    sources = (
        SourceSpec(shape="sphere", radius=0.2, rate=31.0, speed=(0.3, 0.9), life=(0.7, 1.45), size=(0.05, 0.1),
                   aspect=(0.5, 1.0), follow=0.6, elongation=4.0, bursts=(BurstSpec(0.1, 7), BurstSpec(0.1, 3))),
        SourceSpec(shape="line", center=(-0.3, 0.0, 0.0), extent=(0.6, 0.0, 0.0), rate=0.0,
                   bursts=(BurstSpec(0.3, 5),), life=(0.2, 0.4), follow=0.0),
        SourceSpec(shape="point", rate=13.0, life=(0.3, 0.6), follow=1.0),
    )
    forces = (WindSpec(velocity=(0.4, 0.0, 0.2), gust=0.5, gust_period=0.3, grip=0.8), DragSpec(rate=0.4),
              LiftSpec(accel=0.9, cooling=0.5), SwirlSpec(strength=0.6, scale=0.4, octaves=2, evolve=0.35),
              VortexSpec(center=(0.0, 0.4, 0.0), strength=0.5, radius=0.2))
    return LookSpec(name="long", seed=9, clip=ClipSpec(frames=12, fps=24, substeps=3, loop="exact", warmup=warmup,
                                                        integrator=integrator),
                    sources=sources, forces=forces,
                    obstacles=(SphereSpec(center=(0.3, 0.6, 0.0), radius=0.15, kill=True),
                               PlaneSpec(point=(0.0, -0.05, 0.0), bounce=0.2, friction=0.5)))


def _twin_looks():
    return [_busy_look("exact", frames=24), _busy_look("exact", frames=24, integrator="midpoint"), _long_life_look(),
            _long_life_look("euler"), _long_life_look(warmup=3.0)]


def _same_state(a: FrameState, b: FrameState):
    assert (a.frame, a.time) == (b.frame, b.time)
    for name in driver.PER_PUFF_FIELDS:
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)


@pytest.mark.parametrize("index", range(5))
def test_exact_loop_from_twins_equals_warm_up_bit_for_bit(index):
    look = _twin_looks()[index]
    plan = plan_simulation(look)
    assert driver._twins_apply(plan)
    n = plan.frames
    ranges = [range(n + 3), range(5, 9), [n - 1], [0, n, 2 * n + 1]]
    for frames in ranges:
        old = list(driver._simulate_warmup(look, plan, sorted(frames)))
        new = list(simulate(look, plan, frames=frames))
        assert [s.frame for s in new] == sorted(frames)
        for a, b in zip(old, new):
            assert len(a) > 0
            _same_state(a, b)


def _puff_steps(monkeypatch, run):
    """How many puff-steps ``run()`` advances (the driver's ``_advance`` counted)."""
    counted = []
    real = driver._advance
    monkeypatch.setattr(driver, "_advance", lambda lk, pl, puffs, *a: (counted.append(len(puffs)),
                                                                        real(lk, pl, puffs, *a)))
    run()
    monkeypatch.setattr(driver, "_advance", real)
    return sum(counted)


def test_twins_step_fewer_puffs_than_the_warm_up(monkeypatch):
    # The point of the twin driver: no warm-up population is stepped.
    look = _long_life_look()
    plan = plan_simulation(look)
    old = _puff_steps(monkeypatch, lambda: list(driver._simulate_warmup(look, plan, list(range(plan.frames)))))
    new = _puff_steps(monkeypatch, lambda: list(simulate(look, plan, frames=range(plan.frames))))
    assert new < 0.75 * old


def test_twins_that_would_hold_too_much_take_the_warm_up(monkeypatch):
    # Memory stays bounded: above TWIN_MEMORY the warm-up driver runs (same bits).
    look = _long_life_look()
    plan = plan_simulation(look)
    old = _puff_steps(monkeypatch, lambda: list(driver._simulate_warmup(look, plan, list(range(plan.frames)))))
    monkeypatch.setattr(driver, "TWIN_MEMORY", 0)
    assert _puff_steps(monkeypatch, lambda: list(simulate(look, plan, frames=range(plan.frames)))) == old


def test_a_caller_may_let_the_twins_hold_more(monkeypatch):
    # ``hold`` moves the bound: at exactly what the twins would hold they run,
    # one byte under it the warm-up driver does (the same bits either way, above).
    look = _long_life_look()
    plan = plan_simulation(look)
    frames = list(range(plan.frames))
    need = driver.twin_hold_bytes(plan, len(frames))
    assert need > 0
    monkeypatch.setattr(driver, "TWIN_MEMORY", 0)
    old = _puff_steps(monkeypatch, lambda: list(driver._simulate_warmup(look, plan, frames)))
    assert _puff_steps(monkeypatch, lambda: list(simulate(look, plan, frames=frames, hold=need - 1))) == old
    assert _puff_steps(monkeypatch, lambda: list(simulate(look, plan, frames=frames, hold=need))) < 0.75 * old
    with pytest.raises(ValueError, match="hold"):
        list(simulate(look, plan, frames=frames, hold=-1))


def test_looks_the_twins_cannot_serve_take_the_warm_up():
    assert not driver._twins_apply(plan_simulation(_busy_look("none")))
    assert not driver._twins_apply(plan_simulation(_busy_look("crossfade")))
    look = _busy_look("exact", frames=24)
    started = LookSpec(name="s", clip=look.clip, forces=look.forces,
                       sources=(look.sources[0], SourceSpec(rate=10.0, start=0.2)))
    assert not driver._twins_apply(plan_simulation(started))
    assert driver._twins_apply(plan_simulation(look))


@pytest.mark.parametrize("loop", ["exact", "none"])
def test_a_sample_of_spawn_slots_is_exactly_those_puffs_of_the_whole_run(loop):
    # Puffs never act on each other, so simulating every k-th spawn slot gives
    # the same puffs, bit for bit, as picking them out of the whole run (the
    # camera fit frames dense looks on such a sample).
    look = _busy_look(loop)
    plan = plan_simulation(look)
    frames = [0, 7, plan.frames - 1]
    for full, part in zip(simulate(look, plan, frames=frames), simulate(look, plan, frames=frames, sample=3)):
        keep = full.slot % 3 == 0
        assert keep.any() and not keep.all()
        for name in ("id", "slot", "pos", "vel", "size", "opacity", "deform"):
            np.testing.assert_array_equal(getattr(part, name), getattr(full, name)[keep], err_msg=name)
    with pytest.raises(ValueError, match="sample"):
        list(simulate(look, plan, frames=[0], sample=0))
