"""Self-shadowing: transmittance through known densities (Beer-Lambert)."""

import math

import numpy as np
import pytest

from splatter.view.light import build_density_grid, light_factors, transmittance


def test_one_gaussian_puff_through_its_centre():
    # Beer-Lambert, T = exp(-tau) (Pharr, Jakob, Humphreys, Physically Based
    # Rendering, 4th ed., section 11.2). The line integral of an isotropic 3D
    # Gaussian of peak density 1 and sigma 0.5 through its centre is
    # sigma * sqrt(2 pi) = 1.253314, so T = 0.285557 (reference-checks).
    tau0 = 1.253314
    grid = build_density_grid(np.zeros((1, 3)), np.array([0.5]), np.array([tau0]))
    t = transmittance(grid, np.array([[-5.0, 0.0, 0.0]]), np.array([[1.0, 0.0, 0.0]]))
    assert t[0, 0] == pytest.approx(0.285557, rel=0.02)
    # From the centre outward only half the puff lies in the way.
    t_half = transmittance(grid, np.zeros((1, 3)), np.array([[0.0, 0.0, 1.0]]))
    assert t_half[0, 0] == pytest.approx(math.exp(-tau0 / 2), rel=0.02)


@pytest.mark.parametrize("tau_slab", [1.0, math.log(2.0)])
def test_slab_of_known_density(tau_slab):
    # A slab 1 unit thick of uniform extinction rho has tau = rho * 1:
    # tau = 1 -> T = 0.367879, tau = ln 2 -> T = 0.5 (Beer-Lambert, PBR 4th ed. 11.2).
    # Puffs wider than their spacing, so the sum is smooth (no lattice ripple).
    spacing, sigma = 0.1, 0.25
    xs = np.arange(0.05, 1.0, spacing)
    ys = np.arange(-2.0, 2.0, spacing)
    pts = np.array([[x, y, z] for x in xs for y in ys for z in ys])
    # Each puff's optical mass tau0 * 2 pi sigma^2 fills one lattice cell.
    tau0 = tau_slab * spacing**3 / (2 * math.pi * sigma**2)
    grid = build_density_grid(pts, np.full(len(pts), sigma), np.full(len(pts), tau0))
    t = transmittance(grid, np.array([[-1.0, 0.1, -0.2]]), np.array([[1.0, 0.0, 0.0]]))
    assert t[0, 0] == pytest.approx(math.exp(-tau_slab), rel=0.01)
    # Nothing lies beyond the slab on the far side.
    t_out = transmittance(grid, np.array([[2.5, 0.0, 0.0]]), np.array([[1.0, 0.0, 0.0]]))
    assert t_out[0, 0] == 1.0


def test_transmittance_is_the_same_on_any_thread_count():
    from lookfiles import on_each_thread_count

    rng = np.random.default_rng(2)
    pos = rng.normal(size=(500, 3))
    grid = build_density_grid(pos, np.full(500, 0.2), np.full(500, 0.3))
    dirs = np.eye(3)
    a, *more = on_each_thread_count(lambda: transmittance(grid, pos, dirs))
    for b in more:
        assert np.array_equal(a, b)


def test_light_factor_ambient_and_shadow_limits():
    t = np.array([0.2, 1.0])
    # shadow = 0: every puff gets the full light.
    f = light_factors(t, ambient=0.3, shadow=0.0, color=(1.0, 0.5, 0.25), intensity=2.0)
    assert np.allclose(f, [[2.0, 1.0, 0.5]] * 2)
    # ambient = 0, shadow = 1: light scales with transmittance exactly.
    f = light_factors(t, ambient=0.0, shadow=1.0, color=(1.0, 1.0, 1.0), intensity=1.0)
    assert np.allclose(f[:, 0], t)
