"""Lighting and extra maps, end to end through the renderer."""

import json
from pathlib import Path

import numpy as np
import pytest
from lookfiles import LIT_BALL, LONE_PUFF, write_look

from splatter.deliver.exr import read_exr
from splatter.deliver.png import read_png
from splatter.look.load import load_look
from splatter.render import render


def render_one(tmp_path, text, overrides=(), name="look.toml", frames=(0,)):
    look = load_look(write_look(tmp_path, text, name=name), overrides=overrides)
    res = render(look, out_dir=str(tmp_path / name.replace(".toml", "")), frames=list(frames), progress=False)
    return look, Path(res.out_dir)


def straight_halves(layers, channel="R"):
    """Alpha-weighted mean straight value of the left and right halves."""
    a = layers["A"]
    c = layers[channel]
    w = a.shape[1] // 2
    return c[:, :w].sum() / a[:, :w].sum(), c[:, w:].sum() / a[:, w:].sum()


def test_ball_lit_from_the_right_is_brighter_on_the_right(tmp_path):
    # Light reaching a puff is attenuated by the smoke toward the light
    # (Beer-Lambert); seen from the front, the side facing the light is brighter.
    _, d = render_one(tmp_path, LIT_BALL, name="right.toml")
    left, right = straight_halves(read_exr(d / "lit_ball.0000.exr"))
    assert right > 1.3 * left
    _, d = render_one(tmp_path, LIT_BALL, ["shading.light.direction=[-1, 0, 0]"], name="left.toml")
    left, right = straight_halves(read_exr(d / "lit_ball.0000.exr"))
    assert left > 1.3 * right


def test_no_shadow_lights_both_sides_alike(tmp_path):
    _, d = render_one(tmp_path, LIT_BALL, ["shading.light.shadow=0"])
    layers = read_exr(d / "lit_ball.0000.exr")
    left, right = straight_halves(layers)
    assert left == pytest.approx(right, rel=1e-3)
    # Unshadowed, every puff gets intensity * colour: straight colour 0.8 everywhere.
    covered = layers["A"] > 0.05
    assert np.allclose(layers["R"][covered] / layers["A"][covered], 0.8, rtol=1e-3)


def test_glow_is_not_shadowed(tmp_path):
    # Emitted light adds to the picture whatever the lighting: with a black
    # albedo, a fully shadowing light and no light at all give the same pixels.
    glow = ["source.0.color=[0, 0, 0]", "source.0.glow=[0.3, 0.15, 0.05]"]
    _, lit = render_one(tmp_path, LIT_BALL, glow, name="lit.toml")
    unlit_text = LIT_BALL.split("[shading]")[0] + '[output]\nframes = ["exr"]\nexr_type = "float"\n'
    _, unlit = render_one(tmp_path, unlit_text, glow, name="unlit.toml")
    a = read_exr(lit / "lit_ball.0000.exr")
    b = read_exr(unlit / "lit_ball.0000.exr")
    for c in "RGBA":
        assert np.array_equal(a[c], b[c])
    assert a["R"].max() > 0.1


def test_normal_map_of_a_lone_puff(tmp_path):
    # glTF 2.0 convention: +X right, +Y up, +Z toward the viewer; the centre of
    # a round puff faces the viewer and its right edge leans to +X.
    # 65 px across, so the puff's centre falls on the centre of pixel [32, 32].
    _, d = render_one(tmp_path, LONE_PUFF, ['output.maps=["normal"]', "output.sheet={padding=2}",
                                             "image.width=65", "image.height=65"])
    layers = read_exr(d / "lone_puff.0000.exr")
    n = np.stack([layers[f"normal.{c}"] for c in "xyz"], -1)
    assert np.allclose(np.linalg.norm(n, axis=-1), 1.0, atol=1e-5)
    assert n[32, 32] == pytest.approx([0.0, 0.0, 1.0], abs=1e-4)
    right, left, top = n[32, 40], n[32, 24], n[24, 32]
    assert right[0] > 0.3 and left[0] < -0.3 and top[1] > 0.3
    # The PNG sheet encodes n * 0.5 + 0.5: the centre is (128, 128, 255).
    meta = json.loads((d / "lone_puff.sheet.json").read_text())
    assert meta["maps"]["normal"]["convention"] == "+y up"
    codes, _ = read_png(d / meta["maps"]["normal"]["file"])
    cell = meta["cells"][0]
    mid = codes[cell["y"] + 32, cell["x"] + 32].astype(int)
    assert abs(mid[0] - 128) <= 2 and abs(mid[1] - 128) <= 2 and mid[2] >= 253
    # The gutter is a flat normal, so filtering across it stays neutral.
    assert tuple(codes[0, 0]) == (128, 128, 255)


def test_normal_map_y_down_flips_green(tmp_path):
    # The Y-down convention stores green as 1 - g (common practice, from memory; glTF 2.0
    # is +Y up): every texel's green code is 255 minus the +Y-up one (within
    # one code: round half up of 255 (1 - g) and of 255 g can both round up),
    # red and blue unchanged. Read back with Pillow.
    from PIL import Image

    sheets = {}
    for conv in ("up", "down"):
        _, d = render_one(tmp_path, LONE_PUFF, ['output.maps=["normal"]', "output.sheet={padding=0}",
                                                 f"output.normal_y='{conv}'"], name=f"{conv}.toml")
        meta = json.loads((d / "lone_puff.sheet.json").read_text())
        assert meta["maps"]["normal"]["convention"] == f"+y {conv}"
        with Image.open(d / meta["maps"]["normal"]["file"]) as im:
            sheets[conv] = np.asarray(im.convert("RGB")).astype(int)
    up, down = sheets["up"], sheets["down"]
    np.testing.assert_array_equal(down[..., [0, 2]], up[..., [0, 2]])
    assert np.abs(down[..., 1] - (255 - up[..., 1])).max() <= 1
    assert up[..., 1].max() > 200 and up[..., 1].min() < 55  # the puff does lean up and down


# Light-direction layers: light from the camera's +x (right), +y (up), +z (toward the viewer) and back.
LAYER = {"right": "lightdirs_pos.x", "top": "lightdirs_pos.y", "front": "lightdirs_pos.z",
         "left": "lightdirs_neg.x", "bottom": "lightdirs_neg.y", "back": "lightdirs_neg.z"}


def test_each_light_direction_map_is_brightest_on_its_own_side(tmp_path):
    _, d = render_one(tmp_path, LIT_BALL, ['output.maps=["lightdirs"]'])
    L = read_exr(d / "lit_ball.0000.exr")
    a = L["A"]
    w = a.shape[0] // 2

    def mean(name, sl):
        return (L[LAYER[name]][sl] * a[sl]).sum() / a[sl].sum()

    left_half, right_half = np.s_[:, :w], np.s_[:, w:]
    top_half, bottom_half = np.s_[:w, :], np.s_[w:, :]
    assert mean("right", right_half) > 1.3 * mean("right", left_half)
    assert mean("left", left_half) > 1.3 * mean("left", right_half)
    assert mean("top", top_half) > 1.3 * mean("top", bottom_half)
    assert mean("bottom", bottom_half) > 1.3 * mean("bottom", top_half)
    # Seen from the front, the visible (front) puffs face a light in front.
    everything = np.s_[:, :]
    assert mean("front", everything) > 1.3 * mean("back", everything)


def test_motion_map_of_a_puff_moving_at_known_speed(tmp_path):
    # One puff at 1.5 world units/s to the right, 16 px per unit (64 px over 4
    # units), 10 fps: 2.4 px per frame, and 0 vertically.
    text = LONE_PUFF.replace("speed = 0", "speed = 1.5\ndirection = [1, 0, 0]")
    look, d = render_one(tmp_path, text, ['output.maps=["motion", "depth"]', "output.sheet={padding=0}"],
                         frames=(0, 1, 2))
    layers = read_exr(d / "lone_puff.0001.exr")
    a = layers["A"]
    r, c = np.unravel_index(np.argmax(a), a.shape)
    # Orthographic projection of a constant velocity is exact: one puff's
    # alpha-weighted mean is its own screen velocity, so float32 round-off
    # (relative 1e-6) is all the error there is, and no vertical motion is 0.
    assert layers["motion.x"][r, c] == pytest.approx(2.4, rel=1e-5)
    assert layers["motion.y"][r, c] == 0.0
    # The sheet stores 0.5 + 0.5 clamp(d / s, -1, 1) with d in sheet UV per
    # frame (common practice for frame blending); decode within one 8-bit step.
    meta = json.loads((d / "lone_puff.sheet.json").read_text())
    m = meta["maps"]["motion"]
    codes, _ = read_png(d / m["file"])
    cell = meta["cells"][1]
    code = codes[cell["y"] + r, cell["x"] + c].astype(float)
    s = m["scale"]
    du = (2 * code[0] / 255 - 1) * s
    want = 2.4 / meta["width"]
    assert abs(du - want) <= 2 * s / 255
    assert abs((2 * code[1] / 255 - 1) * s) <= 2 * s / 255
    # Nearly transparent rim texels fade to "no motion" (alpha/(1/32) of the
    # value), so the puff's faint 3-sigma edge does not show as a hard disc.
    rim = (a > 0) & (a < 1 / 64)
    assert rim.any()
    rr, cc = np.nonzero(rim)
    rim_codes = codes[cell["y"] + rr, cell["x"] + cc, 0].astype(float)
    assert np.all(np.abs(rim_codes - 127.5) <= 0.5 * abs(code[0] - 127.5) + 1)


def test_depth_map_of_a_puff_at_known_distance(tmp_path):
    # Eye at z = 10 looking at the origin: the puff's view depth is 10.
    _, d = render_one(tmp_path, LONE_PUFF, ['output.maps=["depth"]', "output.sheet={padding=0}"])
    layers = read_exr(d / "lone_puff.0000.exr")
    covered = layers["A"] > 0.01
    assert np.allclose(layers["depth.z"][covered], 10.0, atol=1e-4)
    meta = json.loads((d / "lone_puff.sheet.json").read_text())
    m = meta["maps"]["depth"]
    codes, _ = read_png(d / m["file"])
    z = m["near"] + codes[32, 32, 0] / 255 * (m["far"] - m["near"])
    assert z == pytest.approx(10.0, abs=(m["far"] - m["near"]) / 255 + 1e-6)
