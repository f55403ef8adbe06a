"""End to end: determinism, frame ranges, exact loops, crossfades, framing of the demos."""

import json
from pathlib import Path

import numpy as np
import pytest
from lookfiles import (
    LONE_PUFF,
    SMALL_PLUME,
    digests,
    quiet_render,
    thread_digests,
    write_look,
)

from splatter.check import check_look
from splatter.deliver.exr import read_exr
from splatter.look.load import load_look
from splatter.render import (
    frame_images,
    make_camera,
    pixel_size,
    plan_and_camera,
)
from splatter.sim.driver import plan_simulation, simulate
from splatter.view.framing import border_alpha_share
from splatter.view.splats import split_layers

LOOKS = Path(__file__).resolve().parent.parent / "looks"


def test_same_seed_same_bytes_other_seed_differs(tmp_path):
    path = write_look(tmp_path, SMALL_PLUME)
    a = digests(quiet_render(load_look(path), tmp_path / "a").out_dir)
    b = digests(quiet_render(load_look(path), tmp_path / "b").out_dir)
    c = digests(quiet_render(load_look(path, seed=5), tmp_path / "c").out_dir)
    assert a == b
    assert a.keys() == c.keys()
    assert all(a[k] != c[k] for k in a)


def test_frame_range_matches_full_render_and_may_run_past_the_end(tmp_path):
    look = load_look(write_look(tmp_path, SMALL_PLUME))
    full = digests(quiet_render(look, tmp_path / "full").out_dir)
    part = digests(quiet_render(look, tmp_path / "part", frames=range(4, 7)).out_dir)
    assert json.loads((tmp_path / "part" / "small_plume.render.json").read_text())["frames"] == [4, 5, 6]
    assert part == {k: full[k] for k in part}
    assert sorted(part) == [f"small_plume.{f:04d}.{e}" for f in (4, 5, 6) for e in ("exr", "png")]
    # Past the clip's end the simulation simply continues.
    past = quiet_render(look, tmp_path / "past", frames=range(12, 14))
    assert sorted(Path(f).name for f in past.files)[0] == "small_plume.0012.exr"


def test_thread_count_changes_no_byte(tmp_path):
    look = load_look(write_look(tmp_path, SMALL_PLUME))
    one, *more = thread_digests(look, tmp_path)
    assert all(many == one for many in more)


def test_exact_loop_frame_n_equals_frame_0_on_float_exr(tmp_path):
    # loop = "exact" promises frame N (one past the end) equals frame 0, with
    # swirl, gusts, lift and a ground plane all on (SMALL_PLUME has them all).
    look = load_look(write_look(tmp_path, SMALL_PLUME))
    n = look.clip.frames
    res = quiet_render(look, tmp_path / "loop", frames=[0, n // 2, n])
    f0 = read_exr(Path(res.out_dir) / "small_plume.0000.exr")
    fn = read_exr(Path(res.out_dir) / f"small_plume.{n:04d}.exr")
    mid = read_exr(Path(res.out_dir) / f"small_plume.{n // 2:04d}.exr")
    for c in "RGBA":
        assert np.max(np.abs(fn[c] - f0[c])) <= 1e-6
    assert f0["A"].max() > 0.1
    assert np.max(np.abs(mid["A"] - f0["A"])) > 1e-2  # the clip does move


def test_crossfade_starts_on_frame_n_and_ends_on_the_clip(tmp_path):
    # With loop = "crossfade", frame f < c shows frame N + f fading into frame f,
    # so frame 0 is the simulation's frame N and frame N - 1 runs on into it.
    text = SMALL_PLUME.replace('loop = "exact"', 'loop = "crossfade"\ncrossfade = 0.25')
    look = load_look(write_look(tmp_path, text))
    n = look.clip.frames
    cross = quiet_render(look, tmp_path / "x", frames=[0, 1, 5])
    plain_look = load_look(write_look(tmp_path, text, name="plain.toml"), overrides=["clip.loop='none'"])
    # The crossfade render frames its camera on the whole clip plus the fade frames.
    cam = make_camera(look)
    plan = plan_simulation(plain_look)
    raw = {f: split_layers(img, ch)[0] for f, img, ch, _ in
           frame_images(plain_look, cam, simulate(plain_look, plan, frames=[1, 5, n, n + 1]))}
    x0 = read_exr(Path(cross.out_dir) / "small_plume.0000.exr")
    x1 = read_exr(Path(cross.out_dir) / "small_plume.0001.exr")
    x5 = read_exr(Path(cross.out_dir) / "small_plume.0005.exr")
    assert np.allclose(x0["A"], raw[n][..., 3], atol=1e-6)
    w = 1 - 1 / 3  # c = round(0.25 * 12) = 3 fade frames
    assert np.allclose(x1["A"], w * raw[n + 1][..., 3] + (1 - w) * raw[1][..., 3], atol=1e-6)
    assert np.allclose(x5["A"], raw[5][..., 3], atol=1e-6)


def test_lone_puff_lands_where_the_camera_says(tmp_path):
    # Orthographic, view_width 4 over 64 px: the origin projects to the image centre.
    res = quiet_render(load_look(write_look(tmp_path, LONE_PUFF)), tmp_path / "p", frames=[0])
    a = read_exr(Path(res.out_dir) / "lone_puff.0000.exr")["A"]
    rows, cols = np.indices(a.shape) + 0.5
    cx, cy = (a * cols).sum() / a.sum(), (a * rows).sum() / a.sum()
    assert (cx, cy) == pytest.approx((32.0, 32.0), abs=1e-3)
    assert a.max() == pytest.approx(0.8, rel=0.02)


@pytest.mark.parametrize("name", sorted(p.stem for p in LOOKS.glob("*.toml")))
def test_every_demo_look_keeps_its_border_clear_and_closes_its_loop(name):
    # The classic flipbook defect is a sprite cut off at the frame edge (common
    # practice): with camera.fit every demo frame's border alpha stays < 1/255.
    # Every demo without a flow loops exactly: frame N (one past the end) equals
    # frame 0 (docs/look-reference.md, Loops); the same simulation serves both
    # checks. A convection flow cannot repeat, so its demo crossfades instead.
    look = load_look(LOOKS / f"{name}.toml")
    flowing = any(f.kind == "convection" for f in look.forces)
    assert look.camera.fit and look.clip.loop == ("crossfade" if flowing else "exact")
    plan, cam = plan_and_camera(look)
    n = look.clip.frames
    worst = 0.0
    ends = {}
    for f, img, ch, _ in frame_images(look, cam, simulate(look, plan, frames=range(n + 1)), maps=()):
        a = img[..., -1]
        worst = max(worst, float(a[0].max()), float(a[-1].max()), float(a[:, 0].max()), float(a[:, -1].max()))
        assert border_alpha_share(a) < 1e-3
        if f in (0, n):
            ends[f] = img
    assert worst < 1 / 255
    assert ends[0][..., -1].max() > 0.1
    if not flowing:
        assert np.abs(ends[n] - ends[0]).max() <= 1e-6


AUTO_SWIRLS = """
name = "auto_swirls"
[image]
width = 200
height = 100
[camera]
view_width = 5.0
[[source]]
rate = 10
[[force]]
kind = "swirl"
scale = 0.9
[[force]]
kind = "drag"
[[force]]
kind = "swirl"
scale = 5.0
octaves = "auto"
[[force]]
kind = "swirl"
scale = 50.0
[[force]]
kind = "swirl"
scale = 0.9
octaves = 3
"""


def test_auto_octaves_keep_the_smallest_eddy_two_to_four_pixels(tmp_path):
    # The rule in docs/look-reference.md (octave o has wavelength scale / 2**o):
    # n = clamp(1 + floor(log2(scale / (2 * pixel))), 1, 8), pixel = view_width / width.
    look = load_look(write_look(tmp_path, AUTO_SWIRLS))
    plan, cam = plan_and_camera(look)
    assert pixel_size(cam) == 5.0 / 200  # 0.025 world units per pixel
    # scale 0.9 = 36 px: eddies of 36, 18, 9, 4.5, 2.25 px; a sixth would be 1.125 px.
    # 1 + floor(log2(0.9 / 0.05)) = 1 + floor(log2(18)) = 1 + 4 = 5.
    # scale 5 = 200 px: 200, 100, 50, 25, 12.5, 6.25, 3.125 px (past the explicit limit of 6).
    # 1 + floor(log2(5 / 0.05)) = 1 + floor(log2(100)) = 1 + 6 = 7.
    # scale 50 = 2000 px: 1 + floor(log2(1000)) = 10, capped at 8.  An explicit 3 stays 3.
    assert plan.swirl_octaves == (5, 7, 8, 3)
    assert [s.octaves for s in plan.forces.swirls] == [5, 7, 8, 3]
    assert "swirl (5 octaves, auto, smallest eddy 2.2 px)" in check_look(look)
    # The simulation alone cannot know the pixel size: it asks for it, naming the key.
    with pytest.raises(ValueError, match=r"force\[0\]\.octaves"):
        plan_simulation(look)


def test_auto_octaves_with_a_fit_camera_do_not_depend_on_the_frames_rendered(tmp_path):
    # Resolved from the whole clip's framing, so a partial render equals the full one byte for byte.
    look = load_look(write_look(tmp_path, SMALL_PLUME.replace("octaves = 2\n", "")))
    assert look.camera.fit and look.forces[2].octaves is None
    plan, cam = plan_and_camera(look)
    assert plan.pixel_size == pixel_size(make_camera(look))  # octaves from the first framing
    assert cam == make_camera(look, plan)  # the camera: fitted again on the resolved flow
    assert 1 <= plan.swirl_octaves[0] <= 8
    full = digests(quiet_render(look, tmp_path / "full").out_dir)
    part = digests(quiet_render(look, tmp_path / "part", frames=range(4, 6)).out_dir)
    assert part == {k: full[k] for k in part} and len(part) == 4


def _stirred(stretch):
    return {"name": "stirred", "clip": {"frames": 4, "loop": "exact"}, "image": {"width": 48, "height": 40},
            "camera": {"fit": True},
            "source": [{"rate": 300, "life": [0.8, 1.2], "speed": [0.5, 0.8], "size": [0.05, 0.1],
                        "stretch": stretch, "follow": 1.0}],
            "force": [{"kind": "swirl", "strength": 1.5, "scale": 0.8, "octaves": 3, "evolve": 1.0},
                      {"kind": "wind", "velocity": [0.6, 0.0, 0.0]}]}


def _frames(look, maps, monkeypatch, force=None):
    import splatter.render as R

    if force is not None:
        monkeypatch.setattr(R, "reads_velocity", lambda *a, **k: force)
    out = [(f.rgba.copy(), {k: v.copy() for k, v in f.maps.items()}) for f in R.render_frames(look, maps=maps)]
    monkeypatch.undo()
    return out


def test_states_leave_the_air_out_only_when_no_picture_reads_velocity(monkeypatch):
    # A state's velocity (the puff's own plus the air's) reaches a picture only through
    # the motion smear (stretch > 0) and the motion map. Without either the render skips
    # the air's velocity, and every pixel must be the one it gives with it; with either,
    # the air is kept, and leaving it out would show.
    from splatter.render import as_look, reads_velocity

    plain, smeared = as_look(_stirred(0.0)), as_look(_stirred(1.5))
    assert not reads_velocity(plain) and reads_velocity(plain, ["motion"]) and reads_velocity(smeared)
    for look, maps in ((plain, []), (plain, ["motion"]), (smeared, [])):
        got = _frames(look, maps, monkeypatch)
        kept = _frames(look, maps, monkeypatch, force=True)
        for (rgba, layers), (rgba_k, layers_k) in zip(got, kept):
            assert rgba.tobytes() == rgba_k.tobytes()
            assert all(layers[k].tobytes() == layers_k[k].tobytes() for k in layers_k)
    for look, maps, key in ((plain, ["motion"], "motion"), (smeared, [], None)):
        kept = _frames(look, maps, monkeypatch, force=True)
        left = _frames(look, maps, monkeypatch, force=False)
        assert any((rgba.tobytes() != rgba_l.tobytes()) if key is None else
                   (layers[key].tobytes() != layers_l[key].tobytes())
                   for (rgba, layers), (rgba_l, layers_l) in zip(kept, left))
