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


def test_empty_distance_is_scipys_chessboard_distance_transform():
    # Reference: scipy.ndimage.distance_transform_cdt with the chessboard
    # metric, the L-infinity distance from each zero cell to the nearest
    # non-zero one (a general-purpose reference library).
    from scipy import ndimage

    from splatter.view.light import empty_distance

    rng = np.random.default_rng(5)
    density = np.zeros((23, 17, 29))
    cells = rng.integers(0, [23, 17, 29], size=(6, 3))
    density[tuple(cells.T)] = rng.uniform(0.1, 1.0, 6)
    expected = ndimage.distance_transform_cdt(density == 0.0, metric="chessboard")
    assert np.array_equal(empty_distance(density), expected)


def test_leaping_over_empty_space_changes_no_bit():
    # The march leaps over samples whose eight corners are surely empty
    # (they add exactly 0); marching every sample (no cell known to be
    # empty) must give the same bits, for clustered smoke with wide gaps,
    # rays along the axes and slanted ones, from inside and outside the smoke.
    rng = np.random.default_rng(7)
    centres = np.array([[0.0, 0.0, 0.0], [3.0, 2.5, -1.5], [-2.0, 4.0, 2.0]])
    pos = np.concatenate([c + 0.3 * rng.normal(size=(300, 3)) for c in centres])
    size = rng.uniform(0.02, 0.08, len(pos))
    grid = build_density_grid(pos, size, np.full(len(pos), 0.4))
    assert (grid.clear >= 3).mean() > 0.5  # most of the box is empty: the leaps are exercised
    dirs = np.array([[1.0, 0.0, 0.0], [0.0, -1.0, 0.0], [0.3, 1.0, 0.6], [-0.7, 0.2, -0.4], [1.0, 1.0, 1.0]])
    probes = np.concatenate([pos, rng.uniform(-4.0, 6.0, size=(300, 3))])
    leaping = transmittance(grid, probes, dirs)
    grid.clear = np.zeros_like(grid.clear)
    every = transmittance(grid, probes, dirs)
    assert np.array_equal(leaping, every)
    assert (every < 1.0).any() and (every < 1.0).mean() < 0.9  # shadowed and lit probes both
