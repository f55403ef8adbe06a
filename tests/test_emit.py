"""Emission: birth lattice, shapes, launch cone, orientations, bursts."""

import math

import numpy as np
from scipy import stats

from splatter.look.records import BurstSpec, ClipSpec, LookSpec, SourceSpec
from splatter.sim.driver import plan_simulation, simulate
from splatter.sim.emit import (
    Schedule,
    sample_directions,
    sample_positions,
    sample_quaternions,
)

RNG = np.random.default_rng(12345)


def test_lattice_counts_match_rate():
    # 47 puffs every 60 steps: after s steps, floor(s * 47 / 60) + 1 births (slot 0 at step 0).
    sched = Schedule(per=47, steps=60)
    k_next, born = 0, 0
    for s in range(600):
        ks = sched.due(k_next, s)
        if ks.size:
            k_next = int(ks[-1]) + 1
            born += ks.size
            boundary, frac = sched.birth(ks)
            assert np.all(boundary == s)
            assert np.all((frac >= 0) & (frac < 1))
        assert born == s * 47 // 60 + 1


def test_lattice_period_is_exact():
    # Slot k + per is born exactly `steps` steps later with the same bits of its age fraction.
    sched = Schedule(per=75, steps=96)
    k = np.arange(300)
    b0, f0 = sched.birth(k)
    b1, f1 = sched.birth(k + 75)
    np.testing.assert_array_equal(b1, b0 + 96)
    np.testing.assert_array_equal(f1, f0)


def test_simulated_count_matches_rate():
    look = LookSpec(name="count", clip=ClipSpec(frames=31, fps=30, warmup=0.0),
                    sources=(SourceSpec(rate=40.0, life=(100.0, 100.0), spread=0.0),))
    last = list(simulate(look, frames=[30]))[0]
    # 1 s at 40/s: slot 0 at t = 0 plus 40 more.
    assert len(last) == 41


def test_spread_cone_uniform_in_solid_angle():
    # Uniform in solid angle inside a cone of half-angle a  <=>  cos(theta) uniform
    # on [cos a, 1] (Archimedes' hat-box theorem), so mean cos = (1 + cos a) / 2.
    axis = np.array([0.3, 0.9, -0.2])
    axis /= np.linalg.norm(axis)
    for deg in (10.0, 45.0, 120.0):
        d = sample_directions(axis, deg, RNG.random((20000, 2)))
        np.testing.assert_allclose(np.linalg.norm(d, axis=1), 1.0, atol=1e-12)
        c = d @ axis
        ca = math.cos(math.radians(deg))
        assert c.min() >= ca - 1e-12
        se = (1 - ca) / math.sqrt(12 * c.size)  # std error of the mean of U(cos a, 1)
        assert abs(c.mean() - (1 + ca) / 2) < 4 * se
        assert stats.kstest(c, "uniform", args=(ca, 1 - ca)).pvalue > 1e-3


def test_zero_spread_is_the_axis():
    d = sample_directions((0, 0, 2), 0.0, RNG.random((10, 2)))
    np.testing.assert_allclose(d, np.tile([0.0, 0.0, 1.0], (10, 1)), atol=1e-15)


def test_shapes_stay_in_bounds_and_fill_uniformly():
    n = 20000
    c = np.array([1.0, 2.0, -1.0])
    u = RNG.random((n, 3))
    # Sphere: uniform in the ball  <=>  (r/R)^3 ~ U(0, 1).
    p = sample_positions(SourceSpec(shape="sphere", center=tuple(c), radius=0.5), u)
    r = np.linalg.norm(p - c, axis=1)
    assert r.max() <= 0.5 + 1e-12
    assert stats.kstest((r / 0.5) ** 3, "uniform").pvalue > 1e-3
    # Disc: in the plane normal to `normal`, (r/R)^2 ~ U(0, 1).
    nrm = np.array([1.0, 1.0, 0.0]) / math.sqrt(2)
    p = sample_positions(SourceSpec(shape="disc", center=tuple(c), radius=0.3, normal=(1.0, 1.0, 0.0)), u)
    np.testing.assert_allclose((p - c) @ nrm, 0.0, atol=1e-12)
    r = np.linalg.norm(p - c, axis=1)
    assert r.max() <= 0.3 + 1e-12
    assert stats.kstest((r / 0.3) ** 2, "uniform").pvalue > 1e-3
    # Box: inside centre +- extent, each axis uniform.
    ext = np.array([0.1, 0.5, 2.0])
    p = sample_positions(SourceSpec(shape="box", center=tuple(c), extent=tuple(ext)), u)
    assert np.all(np.abs(p - c) <= ext)
    assert stats.kstest((p[:, 2] - c[2] + 2.0) / 4.0, "uniform").pvalue > 1e-3
    # Line: on the segment centre -> centre + extent, uniform along it.
    ext = np.array([1.0, -2.0, 0.5])
    p = sample_positions(SourceSpec(shape="line", center=tuple(c), extent=tuple(ext)), u)
    t = (p - c) @ ext / (ext @ ext)
    np.testing.assert_allclose(p, c + t[:, None] * ext, atol=1e-12)
    assert t.min() >= 0 and t.max() <= 1
    assert stats.kstest(t, "uniform").pvalue > 1e-3
    # Point.
    p = sample_positions(SourceSpec(shape="point", center=tuple(c)), u[:5])
    np.testing.assert_array_equal(p, np.tile(c, (5, 1)))


def test_quaternions_uniform_on_the_3_sphere():
    # Shoemake, "Uniform random rotations", Graphics Gems III (1992): unit norm,
    # and for the uniform distribution on S^3, E[q q^T] = I / 4 (symmetry).
    q = sample_quaternions(RNG.random((40000, 3)))
    np.testing.assert_allclose(np.linalg.norm(q, axis=1), 1.0, atol=1e-12)
    np.testing.assert_allclose(q.T @ q / q.shape[0], np.eye(4) / 4, atol=0.01)


def test_burst_born_at_its_time():
    look = LookSpec(name="burst", clip=ClipSpec(frames=30, fps=30, warmup=0.0),
                    sources=(SourceSpec(rate=0.0, bursts=(BurstSpec(time=0.5, count=25),), life=(2.0, 2.0)),))
    states = {s.frame: s for s in simulate(look, frames=[14, 15, 20])}
    assert len(states[14]) == 0
    assert len(states[15]) == 25
    np.testing.assert_allclose(states[15].age, 0.0, atol=1e-12)
    np.testing.assert_allclose(states[20].age, 5 / 30, atol=1e-12)
    assert len(set(states[20].id.tolist())) == 25
    assert plan_simulation(look).steady_state_puffs == 25


def test_start_and_stop_bound_emission():
    look = LookSpec(name="window", clip=ClipSpec(frames=90, fps=30, warmup=1.0),
                    sources=(SourceSpec(rate=30.0, start=0.5, stop=1.5, life=(10.0, 10.0)),))
    states = {s.frame: s for s in simulate(look, frames=[10, 20, 80])}
    assert len(states[10]) == 0  # starts at 0.5 s = frame 15
    assert 0 < len(states[20]) <= 7
    assert abs(len(states[80]) - 30) <= 1  # 1 s of emission at 30/s
    assert states[80].age.max() <= 80 / 30 - 0.5 + 1e-9
