"""Forces: drag, wind grip and gusts, lift, vortex profile."""

import math

import numpy as np
import pytest

from splatter.look.records import DragSpec, LiftSpec, VortexSpec, WindSpec
from splatter.sim.forces import pack_forces, snap_period
from splatter.sim.integrate import air_velocity, step_puffs
from splatter.sim.obstacles import pack_obstacles

NONE = pack_obstacles(())


def _integrate(forces, v0, seconds, dt=1e-3, age0=0.0):
    pos = np.zeros((1, 3))
    vel = np.array([v0], dtype=np.float64)
    n = int(round(seconds / dt))
    for s in range(n):
        step_puffs(pos, vel, np.array([age0 + s * dt]), dt=dt, time=s * dt, forces=forces, obstacles=NONE,
                   integrator="midpoint")
    return pos[0], vel[0]


def test_drag_decays_exponentially():
    # dv/dt = -r v  ->  v(t) = v0 exp(-r t), x(t) = v0 (1 - exp(-r t)) / r.
    pos, vel = _integrate(pack_forces((DragSpec(rate=1.5),), seed=0), (2.0, 0.0, 0.0), 1.0)
    assert vel[0] == pytest.approx(2.0 * math.exp(-1.5), rel=1e-6)
    assert pos[0] == pytest.approx(2.0 * (1 - math.exp(-1.5)) / 1.5, rel=1e-6)


def test_wind_grip_relaxes_to_the_wind():
    # dv/dt = grip (U - v)  ->  v(t) = U + (v0 - U) exp(-grip t).
    f = pack_forces((WindSpec(velocity=(1.0, 0.0, -0.5), gust=0.0, grip=2.0),), seed=0)
    _, vel = _integrate(f, (0.0, 1.0, 0.0), 1.0)
    u = np.array([1.0, 0.0, -0.5])
    np.testing.assert_allclose(vel, u + (np.array([0.0, 1.0, 0.0]) - u) * math.exp(-2.0), atol=1e-6)  # RK2 error ~ (grip h)^2


def test_lift_cools_with_age():
    # dv/dt = A exp(-c age) n  ->  v(T) = A (1 - exp(-c T)) / c along n.
    f = pack_forces((LiftSpec(accel=2.0, cooling=0.5, direction=(0.0, 2.0, 0.0)),), seed=0)
    _, vel = _integrate(f, (0.0, 0.0, 0.0), 2.0)
    assert vel[1] == pytest.approx(2.0 * (1 - math.exp(-1.0)) / 0.5, rel=1e-6)
    assert vel[0] == 0.0 and vel[2] == 0.0


def test_gust_stays_in_band_and_repeats_with_the_loop():
    period = 2.0
    f = pack_forces((WindSpec(velocity=(2.0, 0.0, 0.0), gust=0.3, gust_period=1.7, grip=1.0),), seed=3,
                    loop_period=period)
    ts = np.linspace(0.0, period, 401)
    targets = np.array([f.wind_target(t)[1] for t in ts])
    assert targets[:, 0].min() >= 2.0 * 0.7 - 1e-12 and targets[:, 0].max() <= 2.0 * 1.3 + 1e-12
    assert targets[:, 0].max() - targets[:, 0].min() > 0.3  # it does gust
    np.testing.assert_allclose(targets[-1], targets[0], atol=1e-12)
    for p in f.gust_periods[0]:
        assert period / p == pytest.approx(round(period / p), abs=1e-12)
    assert snap_period(1.7, 2.0) == 2.0 and snap_period(0.45, 2.0) == 0.5  # 2 / 0.45 = 4.4 -> 4 cycles


def test_vortex_is_rankine():
    # Rankine vortex (common practice): solid-body rotation inside the core
    # radius R, speed s r / R; potential flow outside, speed s R / r; tangential
    # by the right-hand rule about the axis.
    s, r0 = 1.2, 0.5
    f = pack_forces((VortexSpec(center=(1.0, 0.0, 0.0), axis=(0.0, 0.0, 3.0), strength=s, radius=r0),), seed=0)
    radii = np.array([0.1, 0.25, 0.5, 1.0, 2.0])
    pos = np.stack([1.0 + radii, np.zeros(5), np.full(5, 7.0)], axis=1)  # axial offset must not matter
    u = air_velocity(pos, time=0.0, forces=f)
    expected = np.where(radii <= r0, s * radii / r0, s * r0 / radii)
    np.testing.assert_allclose(u[:, 1], expected, rtol=1e-12)  # z x (+x) = +y
    np.testing.assert_allclose(u[:, [0, 2]], 0.0, atol=1e-15)
    # Incompressible: central-difference divergence off the core boundary is ~0.
    rng = np.random.default_rng(1)
    p = rng.uniform(-3, 3, (200, 3))
    rho = np.hypot(p[:, 0] - 1.0, p[:, 1])
    p = p[np.abs(rho - r0) > 0.01]
    h = 1e-4
    div = sum((air_velocity(p + h * e, time=0.0, forces=f)[:, j] - air_velocity(p - h * e, time=0.0, forces=f)[:, j])
              / (2 * h) for j, e in enumerate(np.eye(3)))
    assert np.abs(div).max() < 1e-6


def test_every_registered_kind_is_simulated():
    # One registry (look.records.FORCE_KINDS / OBSTACLE_KINDS) for the schema,
    # the simulation and check: every kind it names must pack into the step's
    # tables, and an unregistered record is refused by name.
    from splatter.look.records import FORCE_KINDS, OBSTACLE_KINDS
    from splatter.sim.obstacles import pack_obstacles

    # (an "auto" swirl needs the framing, so the swirl gets an explicit count)
    pack_forces(tuple(cls(octaves=2) if kind == "swirl" else cls() for kind, cls in FORCE_KINDS.items()), seed=1)
    pack_obstacles(tuple(cls() for cls in OBSTACLE_KINDS.values()))
    with pytest.raises(TypeError, match="FORCE_KINDS"):
        pack_forces((object(),), seed=1)
