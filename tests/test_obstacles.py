"""Obstacles: restitution, friction, push-out and kill."""

import numpy as np
import pytest

from splatter.look.records import (
    ClipSpec,
    GravitySpec,
    LookSpec,
    PlaneSpec,
    SourceSpec,
    SphereSpec,
)
from splatter.sim.driver import simulate
from splatter.sim.forces import pack_forces
from splatter.sim.integrate import step_puffs
from splatter.sim.obstacles import pack_obstacles


def _one_step(pos, vel, obstacles, dt=1e-3):
    """One production step with no forces, so only the contact changes the state."""
    pos = np.array(pos, dtype=np.float64)
    vel = np.array(vel, dtype=np.float64)
    killed = step_puffs(pos, vel, np.zeros(len(pos)), dt=dt, time=0.0, forces=pack_forces((), seed=0),
                        obstacles=pack_obstacles(obstacles))
    return pos, vel, killed


@pytest.mark.parametrize("mu, expected", [(0.2, 2.4), (0.5, 1.5), (1.0, 0.0)])
def test_friction_worked_values(mu, expected):
    # Bridson, Fedkiw, Anderson, "Robust Treatment of Collisions, Contact and
    # Friction for Cloth Animation", ACM TOG 21(3), 2002 [from memory]:
    # v_t' = max(0, 1 - mu dv_n / |v_t|) v_t, dv_n = (1 + e)|v_n|.
    # v = (3 tangent, -2 normal), e = 0.5 -> dv_n = 3.
    # The puff starts 0.001 above the plane and crosses it during the step.
    pos, vel, killed = _one_step([[0.0, 0.001, 0.0]], [[3.0, -2.0, 0.0]],
                                 (PlaneSpec(point=(0, 0, 0), normal=(0, 1, 0), bounce=0.5, friction=mu),))
    np.testing.assert_allclose(vel[0], [expected, 1.0, 0.0], atol=1e-12)  # v_n' = -e v_n = 1
    assert pos[0, 1] >= 0.0
    assert not killed[0]


def test_separating_puff_is_only_pushed_out():
    pos, vel, _ = _one_step([[0.0, -0.2, 0.0]], [[1.0, 0.5, 0.0]], (PlaneSpec(bounce=0.5, friction=1.0),))
    np.testing.assert_allclose(pos[0], [1e-3, 0.0, 0.0], atol=1e-15)
    np.testing.assert_array_equal(vel[0], [1.0, 0.5, 0.0])


def test_sphere_pushes_out_along_its_normal():
    # Starting inside (no crossing in the step): projected out along the normal.
    pos, vel, _ = _one_step([[1.0, 0.5, 0.0]], [[0.0, -2.0, 1.0]],
                            (SphereSpec(center=(1, 0, 0), radius=1.0, bounce=0.0, friction=0.0),), dt=1e-12)
    np.testing.assert_allclose(pos[0], [1.0, 1.0, 0.0], atol=1e-11)
    np.testing.assert_allclose(vel[0], [0.0, 0.0, 1.0], atol=1e-11)  # normal part removed (e = 0)


def test_kill_on_contact():
    _, _, killed = _one_step([[0, -0.1, 0], [0, 1, 0], [5, 5.5, 5]], np.zeros((3, 3)),
                             (PlaneSpec(kill=True), SphereSpec(center=(5, 5, 5), radius=1.0, kill=True)))
    np.testing.assert_array_equal(killed, [True, False, True])
    look = LookSpec(name="kill", clip=ClipSpec(frames=40, fps=30, warmup=0.0),
                    sources=(SourceSpec(rate=60.0, center=(0, 0.5, 0), direction=(0, -1, 0), speed=(2.0, 2.0),
                                        spread=5.0, life=(5.0, 5.0)),),
                    obstacles=(PlaneSpec(kill=True),))
    last = list(simulate(look, frames=[39]))[0]
    assert len(last) > 0 and np.all(last.pos[:, 1] >= 0.0)
    assert len(last) < 60 * 39 / 30  # most puffs died on the floor


def _drop(e, dt, seconds):
    forces = pack_forces((GravitySpec(accel=(0.0, -9.81, 0.0)),), seed=0)
    tables = pack_obstacles((PlaneSpec(bounce=e, friction=0.0),))
    pos = np.array([[0.0, 1.0, 0.0]])
    vel = np.zeros((1, 3))
    ys = []
    for _ in range(int(round(seconds / dt))):
        step_puffs(pos, vel, np.zeros(1), dt=dt, time=0.0, forces=forces, obstacles=tables)
        ys.append(pos[0, 1])
    ys = np.array(ys)
    peaks = (ys[1:-1] >= ys[:-2]) & (ys[1:-1] > ys[2:])
    return ys[1:-1][peaks]  # rebound apexes, drop height 1


@pytest.mark.parametrize("e", [0.5, 0.8])
def test_rebound_height_ratio_is_e_squared(e):
    # Textbook impact mechanics [from memory]: v_n' = -e v_n, so the rebound
    # height ratio is e^2 (e = 0.8 -> 0.64; three bounces e^6 = 0.262144).
    # reference-checks: semi-implicit Euler reaches 0.64 within about 2 % at
    # dt = 1/240 and 0.5 % at dt = 1e-3; the issue asks 2 % for e = 0.5 and 0.8.
    fine = _drop(e, 1e-3, 3.0)
    assert abs(fine[0] / e ** 2 - 1) < 0.005
    coarse = _drop(e, 1 / 240, 3.0)
    assert abs(coarse[0] / e ** 2 - 1) < 0.02
    assert abs(coarse[2] / e ** 6 - 1) < 0.02
    # The contact is resolved at the crossing, consistent with leapfrog, so
    # under constant gravity the ratio is exact but for sampling the apex.
    assert abs(coarse[0] / e ** 2 - 1) < 1e-3