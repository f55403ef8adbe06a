"""The project stage's gather: make_splats against the plain numpy formula."""

from types import SimpleNamespace

import numpy as np
import pytest

from splatter.view.camera import Camera, project_puffs
from splatter.view.splats import feature_layout, make_splats, seen_opacity


def _puffs(n=3000, seed=3):
    rng = np.random.default_rng(seed)
    q = rng.normal(size=(n, 4))
    deform = np.tile(np.eye(3), (n, 1, 1)) + 0.3 * rng.normal(size=(n, 3, 3))
    deform /= np.cbrt(np.linalg.det(deform))[:, None, None]
    return SimpleNamespace(
        pos=rng.uniform(-2.5, 2.5, (n, 3)), vel=rng.normal(size=(n, 3)), size=rng.uniform(0.02, 0.2, n),
        aspect=rng.uniform(0.5, 1.0, n), quat=q / np.linalg.norm(q, axis=1)[:, None], stretch=np.full(n, 0.1),
        opacity=np.where(rng.uniform(size=n) < 0.1, 0.0, rng.uniform(0.0, 0.3, n)),
        density=np.ones(n), color=rng.uniform(size=(n, 3)), glow=np.where(rng.uniform(size=(n, 1)) < 0.3,
                                                                            rng.uniform(size=(n, 3)), 0.0),
        deform=deform)


def _reference(state, camera, blend, fps, channels, light, lightdirs):
    """The gather written with numpy's fancy indexing, as the stage did before its kernel."""
    screen = project_puffs(camera, state.pos, state.size, state.aspect, state.quat, state.vel, state.stretch,
                           state.deform)
    opac = seen_opacity(state, blend, camera)
    idx = np.nonzero(np.asarray(screen.visible, dtype=bool) & (opac > 0.0))[0]
    depth = screen.depth[idx]
    if blend == "over":
        order = np.argsort(-depth, kind="stable")
        idx, depth = idx[order], depth[order]
    colour = state.color[idx] * light[idx] if light is not None else state.color[idx]
    feats = np.empty((idx.size, len(channels)), dtype=np.float32)
    feats[:, 0:3] = colour + state.glow[idx]
    if "motion.x" in channels:
        vel_px = camera.project_velocity(state.pos[idx], state.vel[idx]) / fps
        feats[:, channels["motion.x"]] = vel_px[:, 0]
        feats[:, channels["motion.y"]] = vel_px[:, 1]
    if "depth.z" in channels:
        feats[:, channels["depth.z"]] = depth
    if lightdirs is not None:
        c0 = channels["lightdirs_pos.x"]
        feats[:, c0:c0 + 6] = lightdirs.astype(np.float32)[idx]
    return (screen.means[idx], screen.covs[idx], feats, opac[idx].astype(np.float32), depth.astype(np.float32))


@pytest.mark.parametrize("blend, lit, maps", [("over", True, False), ("over", False, True), ("add", True, True)])
def test_make_splats_gathers_the_same_bits_as_numpy(blend, lit, maps):
    state = _puffs()
    camera = Camera(projection="perspective", eye=(0.5, 1.0, 9.0), target=(0.0, 0.0, 0.0), width=96, height=80,
                    fov=40.0)
    rng = np.random.default_rng(4)
    light = rng.uniform(0.3, 1.6, (len(state.size), 3)) if lit else None
    lightdirs = rng.uniform(size=(len(state.size), 6)) if maps else None
    channels = feature_layout(motion=maps, depth=maps, lightdirs=maps)
    got = make_splats(state, camera, blend=blend, fps=24.0, channels=channels, light_factor=light,
                      lightdir_factors=lightdirs)
    want = _reference(state, camera, blend, 24.0, channels, light, lightdirs)
    assert 0 < got.means.shape[0] < len(state.size)  # some puffs culled (off screen or transparent), most kept
    for name, g, w in zip(("means", "covs", "features", "opacities", "depth"),
                          (got.means, got.covs, got.features, got.opacities, got.depth), want):
        assert g.dtype == np.float32 and g.flags.c_contiguous, name
        assert np.array_equal(g, w), name


@pytest.mark.parametrize("n", [0, 1, 7, 5000])
def test_farthest_first_is_numpys_stable_argsort(n):
    # Reference: numpy's stable argsort of the negated depths (ties keep the
    # input order, -0 equals +0, NaN last), which the seam frames of an exact
    # loop rely on.
    from splatter.view.splats import farthest_first

    rng = np.random.default_rng(n)
    depth = rng.choice(np.array([0.5, 2.0, 2.25, 1e-3, 40.0], dtype=np.float32), n)  # many ties
    depth[: n // 2] = rng.uniform(-3.0, 60.0, n // 2).astype(np.float32)
    if n >= 7:
        depth[[0, 1, 2, 3, 4, 5]] = [0.0, -0.0, np.inf, -np.inf, np.nan, 0.0]
    depth = rng.permutation(depth)
    got = farthest_first(depth)
    assert got.dtype == np.int64
    assert np.array_equal(got, np.argsort(-depth, kind="stable"))
