"""Integrators through the production step kernel."""

import numba
import numpy as np
import pytest

from splatter.forces import pack_forces
from splatter.integrate import step_puffs
from splatter.look import GravitySpec, LiftSpec, PlaneSpec, SwirlSpec, VortexSpec, WindSpec
from splatter.obstacles import pack_obstacles

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


def _oscillator(integrator, h, steps, record=False):
    forces = pack_forces((), seed=0, spring=(1.0, (0.0, 0.0, 0.0)))  # omega = 1
    return _run(forces, integrator, h, steps, x0=(1.0, 0.0, 0.0), record=record)


def test_explicit_euler_energy_grows_by_one_plus_h_squared():
    # Same source: explicit Euler multiplies x^2 + v^2 by (1 + h^2) each step;
    # h = 0.1, 100 steps -> 2.704814.
    pos, vel = _oscillator("euler", 0.1, 100)
    assert pos[0] ** 2 + vel[0] ** 2 == pytest.approx(1.01 ** 100, rel=1e-12)
    assert 1.01 ** 100 == pytest.approx(2.704814, abs=1e-6)


def test_symplectic_euler_conserves_the_modified_energy():
    # Same source: symplectic Euler (velocity first) conserves
    # x^2 + v^2 - h x v exactly, here to 1e-14 over 100 steps of h = 0.1.
    h = 0.1
    _, _, trace = _oscillator("symplectic", h, 100, record=True)
    inv = np.array([p[0] ** 2 + v[0] ** 2 - h * p[0] * v[0] for p, v in trace])
    assert np.abs(inv - 1.0).max() < 1e-14
    energy = np.array([p[0] ** 2 + v[0] ** 2 for p, v in trace])
    assert np.abs(energy - 1.0).max() > 1e-3  # the plain energy is not conserved


def test_midpoint_is_second_order():
    # RK2: global error O(h^2), so halving h cuts the error about fourfold.
    errors = []
    for n in (50, 100, 200):
        h = 2 * np.pi / n
        pos, vel = _oscillator("midpoint", h, n)
        errors.append(np.hypot(pos[0] - 1.0, vel[0]))
    for a, b in zip(errors, errors[1:]):
        assert 3.6 < a / b < 4.4


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
    out = []
    before = numba.get_num_threads()
    try:
        for threads in (1, before):
            numba.set_num_threads(threads)
            pos, vel = pos0.copy(), vel0.copy()
            for s in range(5):
                step_puffs(pos, vel, age, dt=0.01, time=0.01 * s, forces=_busy_forces(), obstacles=obstacles,
                           integrator=integrator)
            out.append((pos, vel))
    finally:
        numba.set_num_threads(before)
    np.testing.assert_array_equal(out[0][0], out[1][0])
    np.testing.assert_array_equal(out[0][1], out[1][1])


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
