"""camera.fit frames the smoke's accumulated alpha (issue 13, item 6: framing that uses the texture).

The cut-off sprite is the classic flipbook defect (common practice): with
``camera.fit`` the composited alpha on every frame's outermost pixels stays at
or below ``camera.fit_alpha`` (default 1/255, one 8-bit step, so an 8-bit
texture's border is empty), while the smoke fills as much of the frame as
that allows, with ``camera.margin`` kept clear (docs/look-reference.md).
"""

import math
from dataclasses import replace

import numpy as np
import pytest

from lookfiles import LONE_PUFF, SMALL_PLUME, write_look
from splatter.look.load import load_look
from splatter.render import fit_frames, fit_look_camera, frame_images, make_camera, plan_and_camera, unfitted
from splatter.sim.driver import plan_simulation, simulate
from splatter.view.framing import fit_camera, max_border_alpha
from splatter.view.splats import seen_opacity

# Steam from a vent: thousands of faint puffs (opacity 0.012, about 3,000
# alive), which only add up to visible smoke where many overlap, seen through
# a perspective camera from the side and above, on a wide frame.
FAINT_STEAM = """
name = "faint_steam"
seed = 3
[clip]
frames = 6
fps = 12
warmup = 1.2
[image]
width = 96
height = 64
[camera]
projection = "perspective"
eye = [1.2, 1.6, 3.5]
target = [0.0, 0.6, 0.0]
fov = 40
fit = true
margin = 0.0
[[source]]
shape = "disc"
radius = 0.15
rate = 2500
speed = [0.5, 0.8]
spread = 25
life = [1.0, 1.4]
size = [0.06, 0.1]
grow = [[0, 1], [1, 3]]
opacity = 0.012
color = [0.9, 0.9, 0.9]
[[force]]
kind = "wind"
velocity = [0.4, 0, 0]
gust = 0.3
gust_period = 0.7
[[force]]
kind = "drag"
[shading]
blend = "over"
"""

# Dense chimney smoke, absorbing (Beer-Lambert accumulation), orthographic.
DENSE_SMOKE = """
name = "dense_smoke"
seed = 5
[clip]
frames = 6
fps = 12
warmup = 1.0
[image]
width = 64
height = 80
[camera]
fit = true
margin = 0.0
fit_alpha = 0.02
[[source]]
shape = "disc"
radius = 0.08
rate = 300
speed = [0.6, 0.9]
spread = 10
life = [1.0, 1.3]
size = [0.06, 0.09]
grow = [[0, 1], [1, 2.5]]
opacity = 0.5
[[force]]
kind = "wind"
velocity = [0.5, 0, 0]
[shading]
blend = "absorb"
"""

# A still column of puffs running along the view axis, from 3.5 to 8.5 units
# in front of the eye, off to one side: its near end shows far out in a
# perspective view, its far end near the middle, so where the frame's edge
# falls depends on the depth of the smoke each pixel sees.
DEEP_COLUMN = """
name = "deep_column"
[clip]
frames = 2
fps = 10
warmup = 0
[image]
width = 64
height = 48
[camera]
projection = "perspective"
eye = [0.0, 0.0, 6.0]
target = [0.0, 0.0, 0.0]
fov = 40
fit = true
margin = 0.0
fit_alpha = 0.02
[[source]]
shape = "line"
center = [0.8, 0.3, -2.5]
extent = [0.0, 0.0, 5.0]
rate = 0
bursts = [{ time = 0, count = 150 }]
speed = 0
spread = 0
life = 100
size = 0.12
opacity = 0.3
"""


def _rendered_alpha(look, camera, plan):
    """Alpha of every fitted frame (the clip and any crossfade partner) rendered through ``camera``."""
    frames = fit_frames(look, plan)
    return [img[..., -1] for _, img, _, _ in frame_images(look, camera, simulate(look, plan, frames=frames), maps=())]


def _per_puff_camera(look, plan):
    """The framing before this rule: each puff framed out to where it alone fades to fit_alpha / 4."""
    base = make_camera(unfitted(look))
    states = simulate(look, plan, frames=fit_frames(look, plan), warmup_frames=True)
    blend = look.shading.blend
    return fit_camera(base, states, margin=look.camera.margin, alpha=look.camera.fit_alpha,
                      opacity_of=lambda s: seen_opacity(s, blend, base))


@pytest.mark.parametrize("text", [FAINT_STEAM, DENSE_SMOKE, DEEP_COLUMN],
                         ids=["faint_steam_perspective", "dense_absorb", "deep_column_perspective"])
def test_the_border_alpha_of_every_fitted_frame_stays_at_fit_alpha(tmp_path, text):
    # margin = 0 puts the smoke's fit_alpha contour on the frame's edge, so the
    # border alpha must sit just under fit_alpha: at most one tenth above it
    # (the coarse measurement's tolerance), and at least a fifth of it (the
    # smoke reaches the edge: the frame is not padded with empty texture).
    look = load_look(write_look(tmp_path, text))
    plan, cam = plan_and_camera(look)
    border = max(max_border_alpha(a) for a in _rendered_alpha(look, cam, plan))
    assert border <= 1.1 * look.camera.fit_alpha
    assert border >= 0.2 * look.camera.fit_alpha


def test_the_accumulated_fit_fills_more_of_the_frame_than_each_puff_framed_alone(tmp_path):
    # A small plume whose puffs grow and thin as they rise: framed on each puff
    # out to where it alone fades to fit_alpha / 4, the faint old puffs at the
    # top and downwind hold the frame open though their smoke adds up to less
    # than fit_alpha there. Framed on the accumulated alpha, the share of frame
    # pixels at alpha 5 % or more (check's fill threshold) grows by at least a
    # tenth (measured 0.22 -> 0.27), and the border stays clear.
    look = load_look(write_look(tmp_path, SMALL_PLUME))
    plan, cam = plan_and_camera(look)
    old = _per_puff_camera(look, plan)
    new_alpha, old_alpha = _rendered_alpha(look, cam, plan), _rendered_alpha(look, old, plan)
    fill_new = np.mean([np.mean(a >= 0.05) for a in new_alpha])
    fill_old = np.mean([np.mean(a >= 0.05) for a in old_alpha])
    assert fill_new >= 1.1 * fill_old
    assert max(max_border_alpha(a) for a in new_alpha) < look.camera.fit_alpha


@pytest.mark.parametrize("projection", ["orthographic", "perspective"])
def test_a_higher_fit_alpha_frames_the_smoke_tighter(tmp_path, projection):
    # Raising fit_alpha shrinks the region counted as visible, so the frame
    # closes in: a narrower view (orthographic) or an eye moved forward along
    # the view axis (perspective), strictly at every step.
    look = load_look(write_look(tmp_path, FAINT_STEAM), overrides=[f"camera.projection='{projection}'",
                                                                   "camera.view_width=3.0"])
    plan = plan_simulation(look)
    base = make_camera(unfitted(look))
    states = list(simulate(look, plan, frames=fit_frames(look, plan), warmup_frames=True))
    sizes = []
    for fit_alpha in (0.002, 0.01, 0.03, 0.08):
        tuned = replace(look, camera=replace(look.camera, fit_alpha=fit_alpha))
        cam = fit_look_camera(tuned, base, states)
        s, _, f = cam.axes
        sizes.append(cam.view_width if projection == "orthographic" else -float(np.dot(cam.eye, f)))
    assert all(a > b for a, b in zip(sizes, sizes[1:])), sizes


@pytest.mark.parametrize("fit_alpha", [1 / 255, 0.05, 0.3])
def test_fit_frames_a_lone_puff_out_to_the_alpha_its_edge_may_show(tmp_path, fit_alpha):
    # One puff (sigma 0.25, peak opacity 0.8, a Gaussian footprint cut at 3
    # sigma): its alpha 0.8 exp(-r^2 / 2 sigma^2) falls to fit_alpha at
    # r = sigma sqrt(2 ln(0.8 / fit_alpha)) (past the cutoff for 1/255, so 3
    # sigma). The frame spans 2 r over the share the margin leaves (1 - 2 * 0.05),
    # padded on each side by at most one pixel of the coarse measurement (which
    # sees 1.5 times the puff's 6-sigma extent on 192 px) and half an image pixel.
    text = LONE_PUFF.replace("view_width = 4.0", f"fit = true\nfit_alpha = {fit_alpha!r}")
    look = load_look(write_look(tmp_path, text))
    cam = make_camera(look)
    reach = min(3.0, math.sqrt(2 * math.log(0.8 / fit_alpha)))
    exact = 2 * 0.25 * reach / 0.9
    pad = 1.5 * 6 * 0.25 / 192 + 0.5 * cam.view_width / 64
    assert exact <= cam.view_width <= exact + 2 * pad / 0.9
    assert cam.eye[:2] == pytest.approx((0.0, 0.0), abs=0.01 * exact)


def _random_stretched(rng, n):
    """``n`` deformation gradients ``R1 diag(s) R2`` with det 1 and stretch ratios up to about 30."""
    q = np.linalg.qr(rng.normal(size=(2 * n, 3, 3)))[0]
    logs = rng.uniform(-1.7, 1.7, (n, 3))
    logs -= logs.mean(axis=1, keepdims=True)
    return np.ascontiguousarray(q[:n] * np.exp(logs)[:, None, :] @ q[n:])


@pytest.mark.parametrize("projection", ["orthographic", "perspective"])
def test_the_deciding_puff_spheres_are_those_of_every_puffs_exact_sphere(projection):
    # The fit finds the few deciding spheres from bounds on each puff's largest stretch and
    # takes the exact stretch (numpy's eigvalsh) only for the puffs the bounds cannot rule out;
    # the picks must be those of deciding_spheres on every puff's exact sphere, to the bit,
    # puffs of one size included (equal spheres whose sides tie) and rigid ones mixed in.
    from types import SimpleNamespace as NS

    from splatter.core.thresholds import CUTOFF
    from splatter.view.camera import Camera
    from splatter.view.framing import deciding_puff_spheres, deciding_spheres, puff_spheres

    rng = np.random.default_rng(5)
    cam = Camera(projection=projection, eye=(0.3, 1.0, 6.0), target=(0.0, 0.8, 0.0), width=96, height=64)
    n = 4000
    deform = _random_stretched(rng, n)
    deform[::7] = np.eye(3)
    for trial in range(6):
        state = NS(pos=rng.normal(0.0, 0.6, (n, 3)), vel=rng.normal(0.0, 0.3, (n, 3)),
                   size=np.full(n, 0.02) if trial == 0 else rng.uniform(0.01, 0.03, n),
                   stretch=np.where(rng.random(n) < 0.2, 0.05, 0.0), deform=deform)
        peak = rng.uniform(0.0, 0.2, n)
        for margin in (0.0, 0.1):
            p, r = puff_spheres(state, peak, 0.01)
            keep = deciding_spheres(cam, p, r * CUTOFF, margin=margin)
            q, s = deciding_puff_spheres(cam, state, peak, 0.01, margin=margin)
            assert np.array_equal(q, p[keep]) and np.array_equal(s, r[keep])
