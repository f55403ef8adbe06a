"""Integrators through the production step kernel."""

import numpy as np
import pytest
from lookfiles import on_each_thread_count

from splatter.look.records import (
    DragSpec,
    GravitySpec,
    LiftSpec,
    PlaneSpec,
    SwirlSpec,
    VortexSpec,
    WindSpec,
)
from splatter.sim.forces import pack_forces
from splatter.sim.integrate import step_puffs
from splatter.sim.obstacles import pack_obstacles

NO_OBSTACLES = pack_obstacles(())


def _run(forces, integrator, h, steps, x0=(0.0, 0.0, 0.0), v0=(0.0, 0.0, 0.0), record=False):
    pos = np.array([x0], dtype=np.float64)
    vel = np.array([v0], dtype=np.float64)
    trace = []
    for s in range(steps):
        step_puffs(pos, vel, np.zeros(1), dt=h, time=s * h, forces=forces, obstacles=NO_OBSTACLES,
                   integrator=integrator)
        trace.append((pos[0].copy(), vel[0].copy()))
    return (pos[0], vel[0], trace) if record else (pos[0], vel[0])


@pytest.mark.parametrize("integrator, expected", [("euler", -4.85595), ("symplectic", -4.95405),
                                                  ("midpoint", -4.905)])
def test_free_fall(integrator, expected):
    # Hairer, Lubich, Wanner, Geometric Numerical Integration, 2nd ed., 2006
    # [from memory]: g = 9.81, h = 0.01, 100 steps, exact -4.905; explicit Euler
    # -4.85595, semi-implicit -4.95405; the midpoint rule is exact for constant
    # acceleration.
    forces = pack_forces((GravitySpec(accel=(0.0, -9.81, 0.0)),), seed=0)
    pos, vel = _run(forces, integrator, 0.01, 100)
    assert pos[1] == pytest.approx(expected, abs=1e-9)
    assert vel[1] == pytest.approx(-9.81, abs=1e-9)


def _decay(integrator, h, steps):
    # Linear drag dv/dt = -k v with k = 1, from x = 0, v = 1 along x.
    return _run(pack_forces((DragSpec(rate=1.0),), seed=0), integrator, h, steps, v0=(1.0, 0.0, 0.0))


@pytest.mark.parametrize("integrator", ["euler", "symplectic", "midpoint"])
def test_linear_drag_is_integrated_exactly(integrator):
    # Hochbruck & Ostermann, "Exponential integrators", Acta Numerica 19 (2010)
    # [from memory]: exponential integrators solve v' = -k v exactly, so one
    # step multiplies v by exp(-kh) in every method. Positions take the old
    # velocity (explicit), the new one (semi-implicit), or the half-step
    # velocity exp(-kh/2) v (midpoint). h = 0.1, 30 steps, closed forms:
    h, n = 0.1, 30
    v = np.exp(-h * np.arange(n + 1))
    x = {"euler": h * v[:n].sum(), "symplectic": h * v[1:].sum(),
         "midpoint": h * np.exp(-h / 2) * v[:n].sum()}
    pos, vel = _decay(integrator, h, n)
    assert vel[0] == pytest.approx(v[n], rel=1e-12)
    assert pos[0] == pytest.approx(x[integrator], rel=1e-12)


def _cooling_lift(integrator, n, k=1.0, c=3.0):
    # v' = -k v + exp(-c t) along y (drag k, lift of accel 1 cooling c), v(0) = 0, to t = 1.
    forces = pack_forces((DragSpec(rate=k), LiftSpec(accel=1.0, cooling=c)), seed=0)
    pos = np.zeros((1, 3))
    vel = np.zeros((1, 3))
    h = 1.0 / n
    for s in range(n):
        step_puffs(pos, vel, np.array([s * h]), dt=h, time=s * h, forces=forces, obstacles=NO_OBSTACLES,
                   integrator=integrator)
    return vel[0, 1]


def test_midpoint_is_second_order_and_euler_first():
    # RK2 (exponential midpoint): global error O(h^2), so halving h cuts the
    # error about fourfold; (exponential) Euler is O(h), about twofold. Exact,
    # by variation of constants: v(1) = (exp(-c) - exp(-k)) / (k - c).
    exact = (np.exp(-3.0) - np.exp(-1.0)) / (1.0 - 3.0)
    for integrator, lo, hi in (("midpoint", 3.6, 4.4), ("euler", 1.8, 2.2)):
        errors = [abs(_cooling_lift(integrator, n) - exact) for n in (50, 100, 200)]
        for a, b in zip(errors, errors[1:]):
            assert lo < a / b < hi, (integrator, errors)


# Every rate key at the top of its legal range (look/records.py), one at a time.
_MAX_RATES = {
    "drag.rate": (DragSpec(rate=1e3),),
    "wind.grip": (WindSpec(velocity=(1.0, 0.0, 0.0), grip=1e3, gust=1.0, gust_period=1e-3),),
    "lift.accel": (LiftSpec(accel=1e3, cooling=0.0),),
    "lift.cooling": (LiftSpec(accel=1.0, cooling=1e3),),
    "swirl.strength": (SwirlSpec(strength=1e3, scale=1e-3, octaves=6, evolve=1e6),),
    "vortex.strength": (VortexSpec(strength=1e3, radius=1e-3),),
    "all": (DragSpec(rate=1e3), WindSpec(grip=1e3, gust=1.0), LiftSpec(accel=-1e3, cooling=1e3),
            SwirlSpec(strength=1e3, octaves=6), VortexSpec(strength=-1e3), GravitySpec()),
}


@pytest.mark.parametrize("integrator", ["euler", "symplectic", "midpoint"])
@pytest.mark.parametrize("key", sorted(_MAX_RATES))
@pytest.mark.parametrize("h", [1.0 / (240 * 64), 1.0 / 60, 1.0])
def test_velocities_stay_bounded_at_every_maximum_rate(integrator, key, h):
    # dv/dt = f - k v with k >= 0 never speeds a puff beyond |v0| + t max|f|
    # (the pull only takes speed away); the steps must keep that bound at
    # every legal rate and step (the plain methods multiplied v by 1 - kh,
    # which took 1 to 9e11 in ten steps at drag 1000 and h = 1/30).
    forces = pack_forces(_MAX_RATES[key], seed=1)
    f_max = 1e3 + 1e3 * 2.0 + 9.81  # lift, grip times (1 + gust) times |U|, gravity
    rng = np.random.default_rng(0)
    pos = rng.uniform(-1, 1, (64, 3))
    vel = rng.uniform(-1, 1, (64, 3))
    v0 = np.linalg.norm(vel, axis=1).max()
    steps = 10
    for s in range(steps):
        step_puffs(pos, vel, np.full(64, s * h), dt=h, time=s * h, forces=forces, obstacles=NO_OBSTACLES,
                   integrator=integrator)
    assert np.all(np.isfinite(pos)) and np.all(np.isfinite(vel))
    assert np.linalg.norm(vel, axis=1).max() <= v0 + steps * h * f_max * (1 + 1e-9)


def _busy_forces():
    return pack_forces((GravitySpec(accel=(0, -1, 0)), WindSpec(velocity=(1, 0, 0.2), gust=0.5),
                        LiftSpec(), SwirlSpec(octaves=3), VortexSpec(radius=0.4)), seed=5)


@pytest.mark.parametrize("integrator", ["euler", "symplectic", "midpoint"])
def test_results_do_not_depend_on_thread_count(integrator):
    # Promise of the product: same bits on any thread count (no sum crosses puffs).
    rng = np.random.default_rng(0)
    pos0 = rng.uniform(-1, 1, (1000, 3))
    vel0 = rng.normal(size=(1000, 3))
    age = rng.uniform(0, 2, 1000)
    obstacles = pack_obstacles((PlaneSpec(point=(0, -0.5, 0)),))
    def run():
        pos, vel = pos0.copy(), vel0.copy()
        for s in range(5):
            step_puffs(pos, vel, age, dt=0.01, time=0.01 * s, forces=_busy_forces(), obstacles=obstacles,
                       integrator=integrator)
        return pos, vel

    out = on_each_thread_count(run)
    for pos, vel in out[1:]:
        np.testing.assert_array_equal(out[0][0], pos)
        np.testing.assert_array_equal(out[0][1], vel)


def test_bad_input_names_the_parameter():
    f = pack_forces((), seed=0)
    with pytest.raises(TypeError, match="pos"):
        step_puffs(np.zeros((2, 3), np.float32), np.zeros((2, 3)), np.zeros(2), dt=0.1, time=0.0, forces=f,
                   obstacles=NO_OBSTACLES)
    with pytest.raises(ValueError, match="age"):
        step_puffs(np.zeros((2, 3)), np.zeros((2, 3)), np.zeros(3), dt=0.1, time=0.0, forces=f,
                   obstacles=NO_OBSTACLES)
    with pytest.raises(ValueError, match="integrator"):
        step_puffs(np.zeros((2, 3)), np.zeros((2, 3)), np.zeros(2), dt=0.1, time=0.0, forces=f,
                   obstacles=NO_OBSTACLES, integrator="rk4")
    with pytest.raises(ValueError, match="dt"):
        step_puffs(np.zeros((2, 3)), np.zeros((2, 3)), np.zeros(2), dt=0.0, time=0.0, forces=f,
                   obstacles=NO_OBSTACLES)
