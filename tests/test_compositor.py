"""Tests for splatter.raster.compositor: fast path vs a slow float64 reference, published
compositing values, Gaussian integrals, hand-checked tiny images and input checks."""

from __future__ import annotations

import math

import numpy as np
import pytest

from lookfiles import on_each_thread_count

from splatter.raster.compositor import composite, composite_features


# ---------------------------------------------------------------------------
# A slow, obvious float64 reference written from the definitions in the
# composite docstring (Porter & Duff 1984 for "over"; Beer-Lambert for
# "absorb", Pharr, Jakob & Humphreys, PBR 4th ed., section 11.2).
# ---------------------------------------------------------------------------
def reference(means, covs, feats, opac, shape, blend):
    h, w = shape
    k = feats.shape[1]
    rows, cols = np.mgrid[0:h, 0:w]
    px = cols + 0.5
    py = rows + 0.5
    col = np.zeros((h, w, k))
    if blend == "over":
        alpha = np.zeros((h, w))
    elif blend == "add":
        trans = np.ones((h, w))
    else:
        tau_sum = np.zeros((h, w))
    for i in range(len(means)):
        inv = np.linalg.inv(np.asarray(covs[i], dtype=np.float64))
        dx = px - float(means[i][0])
        dy = py - float(means[i][1])
        d2 = inv[0, 0] * dx * dx + (inv[0, 1] + inv[1, 0]) * dx * dy + inv[1, 1] * dy * dy
        g = np.where(d2 <= 9.0, np.exp(-0.5 * d2), 0.0)
        f = np.asarray(feats[i], dtype=np.float64)
        if blend == "over":
            a = float(opac[i]) * g
            col = f * a[..., None] + (1.0 - a[..., None]) * col
            alpha = a + (1.0 - a) * alpha
        elif blend == "add":
            a = float(opac[i]) * g
            col += f * a[..., None]
            trans *= 1.0 - a
        else:
            tau = -math.log(1.0 - min(float(opac[i]), 1.0 - 1e-6)) * g
            col += f * tau[..., None]
            tau_sum += tau
    if blend == "over":
        a_out = alpha
    elif blend == "add":
        a_out = 1.0 - trans
    else:
        a_out = 1.0 - np.exp(-tau_sum)
        safe = np.where(tau_sum > 0, tau_sum, 1.0)
        col = np.where(tau_sum[..., None] > 0, col / safe[..., None] * a_out[..., None], 0.0)
    return np.concatenate([col, a_out[..., None]], axis=-1)


def random_splats(rng, n, h, w, k=3):
    # Centres reach 10 px past every edge so many splats straddle the border.
    means = np.stack([rng.uniform(-10, w + 10, n), rng.uniform(-10, h + 10, n)], 1)
    covs = random_covs(rng, n, (0.6, 9.0), (0.2, 1.0))
    feats = rng.uniform(-1, 2, (n, k))
    opac = rng.uniform(0.0, 1.0, n)
    return (means.astype(np.float32), covs.astype(np.float32),
            feats.astype(np.float32), opac.astype(np.float32))


def random_covs(rng, n, sigma, aspect):
    """n covariances: long-axis sigma and short/long ratio uniform in the ranges, any angle."""
    sig = rng.uniform(*sigma, n)
    aspect = rng.uniform(*aspect, n)
    theta = rng.uniform(0, np.pi, n)
    c, s = np.cos(theta), np.sin(theta)
    rot = np.stack([np.stack([c, -s], -1), np.stack([s, c], -1)], -2)
    diag = np.zeros((n, 2, 2))
    diag[:, 0, 0] = sig**2
    diag[:, 1, 1] = (sig * aspect) ** 2
    return rot @ diag @ rot.transpose(0, 2, 1)


@pytest.mark.parametrize("blend", ["over", "add", "absorb"])
@pytest.mark.parametrize("k", [3, 1, 5])
def test_matches_float64_reference(blend, k):
    # Fast tiled float32 kernel vs the plain float64 reference above; the size
    # (150 x 141) is not a multiple of the tile so edge tiles are exercised.
    rng = np.random.default_rng(7 + k)
    h, w = 150, 141
    means, covs, feats, opac = random_splats(rng, 300, h, w, k)
    got = composite_features(means, covs, feats, opac, shape=(h, w), blend=blend)
    want = reference(means, covs, feats, opac, (h, w), blend)
    assert got.dtype == np.float32 and got.shape == (h, w, k + 1)
    assert np.abs(got - want).max() <= 1e-5


@pytest.mark.parametrize("blend", ["over", "add", "absorb"])
def test_composite_colour_entry_matches_float64_reference(blend):
    # The public colour entry (what the renderer's colour layer goes through)
    # against the float64 reference of the definitions, not against the
    # function it wraps.
    rng = np.random.default_rng(3)
    means, covs, feats, opac = random_splats(rng, 50, 40, 30)
    got = composite(means, covs, feats, opac, shape=(40, 30), blend=blend)
    want = reference(means, covs, feats, opac, (40, 30), blend)
    assert got.shape == (40, 30, 4) and got.dtype == np.float32
    assert np.abs(got - want).max() <= 1e-5


@pytest.mark.parametrize("blend", ["over", "add", "absorb"])
def test_thread_count_does_not_change_pixels(blend):
    # The product promise: identical pixels for any thread count.
    rng = np.random.default_rng(11)
    means, covs, feats, opac = random_splats(rng, 2000, 300, 260)
    one, *more = on_each_thread_count(lambda: composite(means, covs, feats, opac, shape=(300, 260), blend=blend))
    for many in more:
        np.testing.assert_array_equal(one, many)


def point_splats(colors_alphas, h=1, w=1):
    """Splats centred on pixel (0, 0) with a tiny covariance: g = 1 exactly at
    that pixel centre (d = 0) and 0 at every other centre (d >= 10)."""
    n = len(colors_alphas)
    means = np.full((n, 2), 0.5)
    covs = np.tile(np.eye(2) * 0.01, (n, 1, 1))
    cols = np.array([c for c, _ in colors_alphas], dtype=np.float64)
    opac = np.array([a for _, a in colors_alphas], dtype=np.float64)
    return means, covs, cols, opac


def test_porter_duff_worked_example():
    # Porter & Duff, "Compositing Digital Images", SIGGRAPH 1984: premultiplied
    # A = (0.4, 0.2, 0.0, 0.5) over B = (0.0, 0.3, 0.6, 0.75) = (0.4, 0.35, 0.30, 0.875).
    # composite takes straight colour, so A's straight colour is (0.8, 0.4, 0.0)
    # and B's is (0, 0.4, 0.8). B is given first (back to front). The source's
    # 1e-12 tolerance is for float64; the compositor works in float32.
    means, covs, cols, opac = point_splats([((0.0, 0.4, 0.8), 0.75), ((0.8, 0.4, 0.0), 0.5)], 3, 3)
    img = composite(means, covs, cols, opac, shape=(3, 3))
    np.testing.assert_allclose(img[0, 0], [0.4, 0.35, 0.30, 0.875], atol=1e-6)
    # Every other pixel centre is at Mahalanobis distance >= 10: exactly empty.
    rest = img.copy()
    rest[0, 0] = 0
    assert not rest.any()


def test_porter_duff_three_layers():
    # Same source: with C = (0.1, 0.1, 0.1, a 0.2) (straight 0.5), (A over B)
    # over C = A over (B over C) = (0.4125, 0.3625, 0.3125, a 0.9). Order is
    # back to front: C, B, A. Associativity is checked by compositing the
    # partial result (B over C) as one splat with its straight colour.
    layers = [((0.5, 0.5, 0.5), 0.2), ((0.0, 0.4, 0.8), 0.75), ((0.8, 0.4, 0.0), 0.5)]
    img = composite(*point_splats(layers), shape=(1, 1))
    np.testing.assert_allclose(img[0, 0], [0.4125, 0.3625, 0.3125, 0.9], atol=1e-6)
    bc = composite(*point_splats(layers[:2]), shape=(1, 1))[0, 0]
    bc_straight = tuple(bc[:3] / bc[3])
    img2 = composite(*point_splats([(bc_straight, bc[3]), layers[2]]), shape=(1, 1))
    np.testing.assert_allclose(img2[0, 0], [0.4125, 0.3625, 0.3125, 0.9], atol=1e-6)


def test_add_mode_sums_colour_and_multiplies_transparency():
    # "add": C = sum c a, A = 1 - prod(1 - a). 0.5 and 0.75: A = 1 - 0.5 * 0.25.
    layers = [((0.0, 0.4, 0.8), 0.75), ((0.8, 0.4, 0.0), 0.5)]
    img = composite(*point_splats(layers), shape=(1, 1), blend="add")
    np.testing.assert_allclose(img[0, 0], [0.4, 0.5, 0.6, 0.875], atol=1e-6)
    # Order independent: reversed order gives the same pixel.
    img_r = composite(*point_splats(layers[::-1]), shape=(1, 1), blend="add")
    np.testing.assert_allclose(img_r, img, atol=1e-7)


def test_absorb_beer_lambert_values():
    # Beer-Lambert, T = exp(-tau) (Pharr, Jakob & Humphreys, PBR 4th ed., 11.2):
    # tau = 1 -> T = 0.367879; tau = ln 2 -> T = 0.5. A splat whose peak
    # opacity is o has tau0 = -ln(1 - o), so o = 1 - exp(-1) gives tau0 = 1.
    o1 = 1.0 - math.exp(-1.0)
    img = composite(*point_splats([((1.0, 0.5, 0.25), o1)]), shape=(1, 1), blend="absorb")
    assert abs((1.0 - img[0, 0, 3]) - 0.367879) < 1e-6
    # Two splats of tau0 = ln(2) / 2 each: total tau = ln 2 -> T = 0.5, and the
    # colour is the tau-weighted mean (0.5 and 1.5 -> 1.0) times alpha.
    o_half = 1.0 - math.exp(-math.log(2.0) / 2)
    layers = [((0.5, 0.5, 0.5), o_half), ((1.5, 1.5, 1.5), o_half)]
    img = composite(*point_splats(layers), shape=(1, 1), blend="absorb")
    assert abs((1.0 - img[0, 0, 3]) - 0.5) < 1e-6
    np.testing.assert_allclose(img[0, 0, :3], 0.5, atol=1e-6)
    # Lone splat at its centre: absorb and over agree (alpha = opacity).
    one = point_splats([((0.2, 0.4, 0.6), 0.3)])
    np.testing.assert_allclose(composite(*one, shape=(1, 1), blend="absorb"),
                               composite(*one, shape=(1, 1), blend="over"), atol=1e-6)


def test_alpha_integral_and_exact_cutoff():
    # 2D Gaussian integral: sum of A exp(-1/2 x^T S^-1 x) = 2 pi A sqrt(det S);
    # S = [[4,1],[1,2]], A = 0.8 -> 13.298997 (reference-checks). The footprint
    # ends at Mahalanobis radius 3, keeping the chi-square (2 dof) mass
    # 1 - exp(-9/2) = 0.988891 (oracle scipy.stats.chi2.cdf(9, 2)).
    from scipy.stats import chi2

    cov = np.array([[4.0, 1.0], [1.0, 2.0]])
    peak = 0.8
    full = 13.298997  # the published integral, not recomputed here
    mass3 = chi2.cdf(9, 2)  # scipy's oracle for 0.988891
    mean = np.array([[20.3, 18.7]])
    img = composite(mean, cov[None], np.ones((1, 3)), np.array([peak]), shape=(40, 40),
                    blend="add")
    # Pixel-centre sampling of a sigma ~ 1.6 px Gaussian: the sum matches the
    # integral to far better than 2e-3 (sampling error falls like exp(-2 pi^2 s^2)).
    assert abs(img[..., 3].sum() / (full * mass3) - 1) < 2e-3
    rows, cols = np.mgrid[0:40, 0:40]
    d = np.stack([cols + 0.5 - mean[0, 0], rows + 0.5 - mean[0, 1]], -1)
    d2 = np.einsum("...i,ij,...j->...", d, np.linalg.inv(cov), d)
    assert not img[d2 > 9.0].any()
    assert (img[d2 <= 9.0, 3] > 0).all()


def test_hand_checked_5x5_over():
    # One splat centred on pixel (2, 2) with S = I, opacity 0.5, colour (1, 0, 0).
    # Pixel offsets (dx, dy) in {-2..2}^2: d^2 = dx^2 + dy^2, so weights are
    # exp(-d^2/2) for d^2 <= 9: centre 1, edge neighbours e^-0.5, diagonals e^-1,
    # (2,0) e^-2, (2,1) e^-2.5, (2,2) d^2 = 8 -> e^-4; all 25 pixels are inside.
    img = composite(np.array([[2.5, 2.5]]), np.eye(2)[None], np.array([[1.0, 0.0, 0.0]]),
                    np.array([0.5]), shape=(5, 5))
    e = math.exp
    w = np.array([
        [e(-4), e(-2.5), e(-2), e(-2.5), e(-4)],
        [e(-2.5), e(-1), e(-0.5), e(-1), e(-2.5)],
        [e(-2), e(-0.5), 1.0, e(-0.5), e(-2)],
        [e(-2.5), e(-1), e(-0.5), e(-1), e(-2.5)],
        [e(-4), e(-2.5), e(-2), e(-2.5), e(-4)],
    ])
    np.testing.assert_allclose(img[..., 3], 0.5 * w, atol=1e-6)
    np.testing.assert_allclose(img[..., 0], 0.5 * w, atol=1e-6)
    assert not img[..., 1:3].any()


def test_hand_checked_5x5_cutoff_and_border():
    # S = 0.25 I (sigma 0.5 px) at the centre of pixel (2, 1) (x = 1.5, y = 2.5):
    # d^2 = 4 (dx^2 + dy^2). Inside d^2 <= 9 only the centre (d^2 = 0) and its
    # four neighbours (d^2 = 4, weight e^-2); diagonals have d^2 = 8 (weight
    # e^-4); two pixels away d^2 = 16 -> exactly 0.
    img = composite(np.array([[1.5, 2.5]]), (0.25 * np.eye(2))[None],
                    np.array([[1.0, 1.0, 1.0]]), np.array([1.0]), shape=(5, 5))
    e = math.exp
    want = np.zeros((5, 5))
    want[2, 1] = 1.0
    for r, c in ((1, 1), (3, 1), (2, 0), (2, 2)):
        want[r, c] = e(-2)
    for r, c in ((1, 0), (1, 2), (3, 0), (3, 2)):
        want[r, c] = e(-4)
    np.testing.assert_allclose(img[..., 3], want, atol=1e-6)
    assert not img[want == 0].any()
    # A splat wholly off the image leaves it empty.
    off = composite(np.array([[-20.0, 2.5]]), np.eye(2)[None], np.ones((1, 3)),
                    np.array([1.0]), shape=(5, 5))
    assert not off.any()


def test_no_splats_gives_empty_image():
    img = composite(np.zeros((0, 2)), np.zeros((0, 2, 2)), np.zeros((0, 3)), np.zeros(0),
                    shape=(4, 6))
    assert img.shape == (4, 6, 4) and not img.any()


@pytest.mark.parametrize("change, exc, name", [
    (dict(means=np.zeros((2, 3))), ValueError, "means"),
    (dict(means=np.array([[np.nan, 0.0], [0.0, 0.0]])), ValueError, "means"),
    (dict(means=np.array([["a", "b"], ["c", "d"]])), TypeError, "means"),
    (dict(covs=np.zeros((2, 2, 2))), ValueError, "covs"),
    (dict(covs=np.array([[[1.0, 2.0], [2.0, 1.0]]] * 2)), ValueError, "covs"),
    (dict(covs=np.array([[[1.0, 0.5], [0.0, 1.0]]] * 2)), ValueError, "covs"),
    (dict(covs=np.ones((3, 2, 2))), ValueError, "covs"),
    (dict(colors=np.ones((2, 4))), ValueError, "colors"),
    (dict(colors=np.ones((2, 3), dtype=complex)), TypeError, "colors"),
    (dict(opacities=np.array([0.5, 1.5])), ValueError, "opacities"),
    (dict(opacities=np.array([0.5, np.inf])), ValueError, "opacities"),
    (dict(opacities=np.ones(3)), ValueError, "opacities"),
    (dict(shape=(0, 4)), ValueError, "shape"),
    (dict(shape=(4.0, 4)), TypeError, "shape"),
    (dict(shape=4), TypeError, "shape"),
    (dict(blend="screen"), ValueError, "blend"),
    (dict(blend=1), TypeError, "blend"),
])
def test_input_errors_name_the_parameter(change, exc, name):
    args = dict(means=np.zeros((2, 2)), covs=np.tile(np.eye(2), (2, 1, 1)),
                colors=np.ones((2, 3)), opacities=np.array([0.5, 0.5]),
                shape=(4, 4), blend="over")
    args.update(change)
    with pytest.raises(exc, match=name):
        composite(args["means"], args["covs"], args["colors"], args["opacities"],
                  shape=args["shape"], blend=args["blend"])


def test_features_need_at_least_one_channel():
    with pytest.raises(ValueError, match="features"):
        composite_features(np.zeros((1, 2)), np.eye(2)[None], np.zeros((1, 0)),
                           np.ones(1), shape=(3, 3))


def test_public_api_names_the_function_even_after_the_pipeline_is_imported():
    # The look contract's Python section: splatter.composite(...) is the compositor.
    import splatter
    import splatter.render  # noqa: F401  (imports the compositor module)

    assert callable(splatter.composite)
    assert splatter.composite is composite


@pytest.mark.parametrize("blend", ["over", "absorb"])
def test_large_splats_match_reference(blend):
    # Large splats (sigma up to 60 px) span many tiles and walk long rows,
    # where each 8-pixel chunk's weights come from the previous chunk's by one
    # multiply; they must stay within the same 1e-5 of the float64 reference.
    rng = np.random.default_rng(21)
    h, w = 180, 300
    n = 12
    means = np.stack([rng.uniform(0, w, n), rng.uniform(0, h, n)], 1)
    covs = random_covs(rng, n, (20.0, 60.0), (0.1, 1.0))
    feats = rng.uniform(0, 1, (n, 3))
    opac = rng.uniform(0.2, 1.0, n)
    got = composite_features(means, covs, feats, opac, shape=(h, w), blend=blend)
    want = reference(means, covs, feats, opac, (h, w), blend)
    assert np.abs(got - want).max() <= 1e-5


def test_each_weight_is_within_the_documented_relative_error():
    # The documented accuracy: every pixel weight of a lone splat within
    # 2e-6 relative of float64 exp(-d^2 / 2) (numpy), and the same support
    # (d <= 3), for sigmas from 0.7 px (direct path) to 60 px (long rows).
    # "add" with a unit feature and opacity 1 gives the weight itself.
    rng = np.random.default_rng(5)
    h = w = 600
    y, x = np.mgrid[0:h, 0:w] + 0.5
    worst = 0.0
    for cov in random_covs(rng, 16, (0.7, 60.0), (0.05, 1.0)):
        mean = rng.uniform(180, 420, 2)
        got = composite_features(mean[None], cov[None], np.ones((1, 1)), np.ones(1),
                                 shape=(h, w), blend="add")[..., 0].astype(np.float64)
        inv = np.linalg.inv(cov)
        dx, dy = x - mean[0], y - mean[1]
        d2 = inv[0, 0] * dx * dx + 2 * inv[0, 1] * dx * dy + inv[1, 1] * dy * dy
        want = np.where(d2 <= 9.0, np.exp(-0.5 * d2), 0.0)
        inside = want > 0
        np.testing.assert_array_equal(got > 0, inside)
        worst = max(worst, np.max(np.abs(got[inside] / want[inside] - 1.0)))
    assert worst < 2e-6


def tiny_and_large_splats(rng, n, h, w, tiny_share=0.8):
    """n splats in random depth order: most tiny (sigma 0.5-3 px), the rest large (10-40 px)."""
    tiny = rng.uniform(0, 1, n) < tiny_share
    covs = np.where(tiny[:, None, None], random_covs(rng, n, (0.5, 3.0), (0.2, 1.0)),
                    random_covs(rng, n, (10.0, 40.0), (0.2, 1.0)))
    means = np.stack([rng.uniform(-5, w + 5, n), rng.uniform(-5, h + 5, n)], 1)
    feats = rng.uniform(0, 1, (n, 3))
    opac = rng.uniform(0.05, 0.9, n)
    return (means.astype(np.float32), covs.astype(np.float32),
            feats.astype(np.float32), opac.astype(np.float32))


@pytest.mark.parametrize("blend", ["over", "absorb"])
def test_tiny_and_large_splats_mixed_match_reference(blend):
    # Tiny splats (one to a few chunks a row, some narrower than a pixel)
    # interleaved with large ones in one depth order: "over" is not
    # commutative, so each pixel must still see them exactly back to front.
    rng = np.random.default_rng(31)
    h, w = 70, 90
    means, covs, feats, opac = tiny_and_large_splats(rng, 400, h, w)
    got = composite_features(means, covs, feats, opac, shape=(h, w), blend=blend)
    want = reference(means, covs, feats, opac, (h, w), blend)
    assert np.abs(got - want).max() <= 1e-5


def test_depth_order_holds_for_splats_starting_in_different_tile_rows():
    # The kernel keeps splats grouped by the first tile they touch, so the
    # splats of one tile lie together in memory; a tile's list must still
    # run in the caller's depth order. Wide splats centred just above the
    # boundary between the first two tile rows (first tile: the upper row)
    # reach well into the lower row; small splats wholly below the boundary
    # (first tile: the lower row) sit under them. Interleaved in depth
    # order, with opaque contrasting colours, "over" (not commutative) must
    # match the float64 reference, which any reordering of the lower row's
    # list would break.
    from splatter.raster.compositor import TILE

    rng = np.random.default_rng(41)
    edge = TILE[0]
    h, w = 2 * edge + 8, 48
    n = 60
    upper = np.arange(n) % 2 == 0
    covs = np.where(upper[:, None, None], random_covs(rng, n, (3.0, 4.0), (0.8, 1.0)),
                    random_covs(rng, n, (0.8, 1.5), (0.5, 1.0)))
    # A lower splat's box starts 3 sigma_y (at most 4.5 px) above its centre: below the boundary.
    y = np.where(upper, edge - rng.uniform(0.5, 2.0, n), edge + rng.uniform(4.6, 6.0, n))
    means = np.stack([rng.uniform(12, w - 12, n), y], 1)
    top = np.ceil(y - 3 * np.sqrt(covs[:, 1, 1]) - 0.5) // edge  # tile row of the first pixel row
    assert (top == np.where(upper, 0, 1)).all()
    feats = np.where(upper[:, None], [1.0, 0.1, 0.0], [0.0, 0.2, 1.0]) * rng.uniform(0.5, 1, (n, 1))
    opac = rng.uniform(0.6, 0.95, n)
    got = composite(means, covs, feats, opac, shape=(h, w))
    want = reference(means, covs, feats, opac, (h, w), "over")
    assert np.abs(got - want).max() <= 1e-5


def test_thread_count_does_not_change_pixels_of_many_tiny_splats():
    # The benchmark's detailed-smoke workload, scaled down: many tiny splats,
    # most tiles holding hundreds, over blending.
    rng = np.random.default_rng(12)
    h, w = 256, 256
    n = 30_000
    means = rng.uniform(0, [w, h], (n, 2)).astype(np.float32)
    covs = random_covs(rng, n, (0.7, 3.0), (0.25, 1.0)).astype(np.float32)
    feats = rng.uniform(0, 1, (n, 3)).astype(np.float32)
    opac = rng.uniform(0.05, 0.5, n).astype(np.float32)
    one, *more = on_each_thread_count(lambda: composite(means, covs, feats, opac, shape=(h, w)))
    for many in more:
        np.testing.assert_array_equal(one, many)


@pytest.mark.parametrize("blend", ["over", "absorb"])
def test_splats_past_the_table_budget_take_the_direct_path_with_the_same_pixels(blend, monkeypatch):
    # With no table budget every splat is drawn by the direct path; the pixels
    # must still match the float64 reference (the budget bounds memory, not the image).
    from splatter.raster import compositor

    monkeypatch.setattr(compositor, "TABLE_BYTES", 0)
    rng = np.random.default_rng(5)
    h, w = 150, 141
    means, covs, feats, opac = random_splats(rng, 300, h, w)
    got = composite_features(means, covs, feats, opac, shape=(h, w), blend=blend)
    want = reference(means, covs, feats, opac, (h, w), blend)
    assert np.abs(got - want).max() <= 1e-5


def test_a_footprint_far_larger_than_the_image_allocates_by_the_image():
    # A puff 1e7 px across (a camera zoomed in a million times) once asked for a
    # 34 GiB table; its memory must now follow the image, not the footprint.
    import tracemalloc

    means = np.array([[40.0, 30.0], [1e6, 20.0]])
    covs = np.array([[[1e14, 0.0], [0.0, 1e14]], [[1e13, 0.0], [0.0, 1e13]]])
    feats = np.ones((2, 3))
    opac = np.array([0.5, 0.5])
    tracemalloc.start()
    got = composite(means, covs, feats, opac, shape=(64, 80))
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak < 80 * 2**20
    want = reference(means, covs, feats, opac, (64, 80), "over")
    assert np.abs(got - want).max() <= 1e-5
