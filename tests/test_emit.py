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


def _own_basis(axis):
    """Unit ``axis`` and two unit vectors normal to it, built here (not the product's basis)."""
    w = np.asarray(axis, float) / np.linalg.norm(axis)
    e1 = np.cross(w, [0.6, -0.48, 0.64])  # any direction not along w
    e1 /= np.linalg.norm(e1)
    return w, e1, np.cross(w, e1)


def _azimuth01(v, e1, e2):
    """Angle of ``v`` around the axis normal to (e1, e2), as a fraction of a turn in [0, 1)."""
    return np.mod(np.arctan2(v @ e2, v @ e1) / (2 * np.pi), 1.0)


def _assert_iid_uniform(cols, cells=5):
    """The columns (n, d) are independent U(0, 1): a Kolmogorov-Smirnov test of
    each (scipy.stats.kstest) and a chi-square test of the counts in a
    cells**d grid (scipy.stats.chisquare), which a dependence between the
    coordinates (a diagonal, a wedge) fails even when every marginal is right."""
    cols = np.atleast_2d(np.asarray(cols).T).T
    for j in range(cols.shape[1]):
        assert stats.kstest(cols[:, j], "uniform").pvalue > 1e-3, f"column {j}"
    idx = np.ravel_multi_index(tuple(np.minimum((cols * cells).astype(int), cells - 1).T),
                               (cells,) * cols.shape[1])
    counts = np.bincount(idx, minlength=cells ** cols.shape[1])
    assert stats.chisquare(counts).pvalue > 1e-3


def test_spread_cone_uniform_in_solid_angle():
    # Uniform in solid angle inside a cone of half-angle a  <=>  cos(theta) uniform
    # on [cos a, 1] (Archimedes' hat-box theorem) and, independently, the
    # azimuth around the axis uniform on [0, 2 pi): both dimensions are tested.
    axis = np.array([0.3, 0.9, -0.2])
    w, e1, e2 = _own_basis(axis)
    for deg in (10.0, 45.0, 120.0, 180.0):
        d = sample_directions(axis, deg, np.random.default_rng(int(deg)).random((20000, 2)))
        np.testing.assert_allclose(np.linalg.norm(d, axis=1), 1.0, atol=1e-12)
        c = d @ w
        ca = math.cos(math.radians(deg))
        assert c.min() >= ca - 1e-12
        _assert_iid_uniform(np.stack([(1 - c) / (1 - ca), _azimuth01(d, e1, e2)], 1))


def test_zero_spread_is_the_axis():
    d = sample_directions((0, 0, 2), 0.0, RNG.random((10, 2)))
    np.testing.assert_allclose(d, np.tile([0.0, 0.0, 1.0], (10, 1)), atol=1e-15)


def test_shapes_stay_in_bounds_and_fill_uniformly():
    # Each shape's points are mapped to the unit cube by the inverse of the
    # uniform distribution's own coordinates (computed here, in bases built
    # here); uniform in the shape  <=>  those coordinates are iid U(0, 1).
    n = 20000
    c = np.array([1.0, 2.0, -1.0])
    u = np.random.default_rng(31).random((n, 3))
    # Sphere (uniform in the ball): (r/R)^3, (cos(polar) + 1) / 2 and the azimuth.
    p = sample_positions(SourceSpec(shape="sphere", center=tuple(c), radius=0.5), u)
    v = p - c
    r = np.linalg.norm(v, axis=1)
    assert r.max() <= 0.5 + 1e-12
    w, e1, e2 = _own_basis([0.2, -0.5, 0.8])  # the ball is isotropic: any axis will do
    _assert_iid_uniform(np.stack([(r / 0.5) ** 3, (v @ w / r + 1) / 2, _azimuth01(v, e1, e2)], 1))
    # Disc: in the plane normal to `normal`, (r/R)^2 and the azimuth.
    nrm = np.array([1.0, 1.0, 0.0]) / math.sqrt(2)
    p = sample_positions(SourceSpec(shape="disc", center=tuple(c), radius=0.3, normal=(1.0, 1.0, 0.0)), u)
    np.testing.assert_allclose((p - c) @ nrm, 0.0, atol=1e-12)
    r = np.linalg.norm(p - c, axis=1)
    assert r.max() <= 0.3 + 1e-12
    _, e1, e2 = _own_basis(nrm)
    _assert_iid_uniform(np.stack([(r / 0.3) ** 2, _azimuth01(p - c, e1, e2)], 1))
    # Box: inside centre +- extent, all three axes jointly uniform.
    ext = np.array([0.1, 0.5, 2.0])
    p = sample_positions(SourceSpec(shape="box", center=tuple(c), extent=tuple(ext)), u)
    assert np.all(np.abs(p - c) <= ext)
    _assert_iid_uniform((p - c + ext) / (2 * ext))
    # Line: on the segment centre -> centre + extent, uniform along it.
    ext = np.array([1.0, -2.0, 0.5])
    p = sample_positions(SourceSpec(shape="line", center=tuple(c), extent=tuple(ext)), u)
    t = (p - c) @ ext / (ext @ ext)
    np.testing.assert_allclose(p, c + t[:, None] * ext, atol=1e-12)
    assert t.min() >= 0 and t.max() <= 1
    _assert_iid_uniform(t[:, None], cells=20)
    # Point.
    p = sample_positions(SourceSpec(shape="point", center=tuple(c)), u[:5])
    np.testing.assert_array_equal(p, np.tile(c, (5, 1)))


def test_quaternions_uniform_on_the_3_sphere():
    # Shoemake, "Uniform random rotations", Graphics Gems III (1992). Unit norm;
    # each coordinate of a uniform point on S^3 in R^4 has the semicircle
    # density (2 / pi) sqrt(1 - x^2) (the marginal of the uniform law on
    # S^(n-1) is proportional to (1 - x^2)^((n - 3) / 2); from memory), which
    # scipy.stats.semicircular is. E[q q^T] = I / 4 alone passes any symmetric law.
    from scipy.spatial.transform import Rotation

    q = sample_quaternions(np.random.default_rng(41).random((40000, 3)))
    np.testing.assert_allclose(np.linalg.norm(q, axis=1), 1.0, atol=1e-12)
    for j in range(4):
        assert stats.kstest(q[:, j], "semicircular").pvalue > 1e-3, f"component {j}"
    # As rotations: the same law as scipy's uniform random rotations (two-sample
    # KS of the rotation angle), and a fixed vector is carried to a direction
    # uniform on the sphere (its z uniform on [-1, 1], Archimedes, and its azimuth).
    rot = Rotation.from_quat(q[:, [1, 2, 3, 0]])  # scipy is scalar-last
    ref = Rotation.random(40000, random_state=7)
    assert stats.ks_2samp(rot.magnitude(), ref.magnitude()).pvalue > 1e-3
    v = rot.apply([0.0, 0.6, 0.8])
    _assert_iid_uniform(np.stack([(v[:, 2] + 1) / 2, _azimuth01(v, np.array([1.0, 0, 0]), np.array([0, 1.0, 0]))], 1))


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
