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
def test_linear_drag_follows_each_method_exactly(integrator):
    # Hairer, Lubich, Wanner, Geometric Numerical Integration, 2nd ed., 2006
    # [from memory]: on v' = -k v one step multiplies v by r = 1 - kh (both
    # Euler methods) or 1 - kh + (kh)^2 / 2 (explicit midpoint). Positions take
    # the old velocity (explicit), the new one (semi-implicit), or the
    # half-step velocity (1 - kh/2) v (midpoint). h = 0.1, 30 steps, closed forms:
    h, n = 0.1, 30
    r = 1.0 - h + (h * h / 2 if integrator == "midpoint" else 0.0)
    v = r ** np.arange(n + 1)
    x = {"euler": h * v[:n].sum(), "symplectic": h * v[1:].sum(), "midpoint": h * (1 - h / 2) * v[:n].sum()}
    pos, vel = _decay(integrator, h, n)
    assert vel[0] == pytest.approx(v[n], rel=1e-13)
    assert pos[0] == pytest.approx(x[integrator], rel=1e-13)


def test_midpoint_is_second_order_and_euler_first():
    # RK2: global error O(h^2), so halving h cuts the error about fourfold;
    # explicit Euler is O(h), about twofold. Exact: v(1) = exp(-1).
    for integrator, lo, hi in (("midpoint", 3.6, 4.4), ("euler", 1.8, 2.2)):
        errors = [abs(_decay(integrator, 1.0 / n, n)[1][0] - np.exp(-1.0)) for n in (50, 100, 200)]
        for a, b in zip(errors, errors[1:]):
            assert lo < a / b < hi, (integrator, errors)


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
