"""End to end: what a render writes, read back with independent readers.

Each fixture renders once per module and several tests read its files with
readers that are not the product's own: OpenEXR's official bindings, pypng
(16-bit PNG; Pillow opens 16-bit RGBA as 8-bit "RGBA", from memory) and
Pillow. Expected values come from published rules (IEC 61966-2-1 sRGB, the
W3C PNG alpha rule, IEEE binary16, the pinhole camera) computed here.
"""

import json
import math
from pathlib import Path

import numpy as np
import OpenEXR
import png
import pytest
from lookfiles import LIT_BALL, LONE_PUFF, SMALL_PLUME, quiet_render, write_look
from PIL import Image

from splatter.look.load import load_look


def srgb_encode_iec(lin):
    """IEC 61966-2-1:1999 encode in float64, written here (not the product's)."""
    lin = np.clip(np.asarray(lin, np.float64), 0.0, 1.0)
    return np.where(lin <= 0.0031308, 12.92 * lin, 1.055 * lin ** (1 / 2.4) - 0.055)


def exr_channels(path):
    """{name: (pixels, pixel type)} with the official OpenEXR bindings."""
    with OpenEXR.File(str(path), separate_channels=True) as f:
        return {n: (np.array(c.pixels), c.type()) for n, c in f.channels().items()}


def png16(path):
    """(H, W, planes) uint16 codes and bit depth, read with pypng."""
    w, h, rows, info = png.Reader(filename=str(path)).asDirect()
    arr = np.vstack([np.asarray(r, np.uint16) for r in rows]).reshape(h, w, info["planes"])
    return arr, info["bitdepth"]


def render_look(folder, text, overrides, frames):
    look = load_look(write_look(folder, text), overrides=list(overrides))
    return look, Path(quiet_render(look, folder / "out", frames=list(frames)).out_dir)


# ---------------------------------------------------------------------------
# A lit ball, non-square, HALF EXR, 16-bit premultiplied PNG frames and sheets,
# exposure +1 stop, light-direction maps; and the same look as float EXR.
# ---------------------------------------------------------------------------
LIT_SHAPE = ["image.width=72", "image.height=48", "camera.view_width=3.6"]
LIT_OVERRIDES = LIT_SHAPE + ['output.frames=["png", "exr"]', "output.exr_type='half'", "output.png_bits=16",
                             "output.png_alpha='premultiplied'", "shading.exposure=1.0",
                             'output.maps=["lightdirs"]', "output.sheet={padding=2}"]


@pytest.fixture(scope="module")
def lit(tmp_path_factory):
    half_dir = render_look(tmp_path_factory.mktemp("lit_half"), LIT_BALL, LIT_OVERRIDES, [0])[1]
    float_dir = render_look(tmp_path_factory.mktemp("lit_float"), LIT_BALL,
                            LIT_SHAPE + ["output.exr_type='float'"], [0])[1]
    return half_dir, float_dir


def test_half_exr_frame_is_the_float_frame_rounded_to_binary16(lit):
    # OpenEXR HALF is IEEE 754 binary16 (OpenEXR Technical Introduction); the
    # half file must hold exactly the float render rounded to nearest, and EXR
    # stays scene-linear whatever the exposure (docs/look-reference.md).
    half_dir, float_dir = lit
    half = exr_channels(half_dir / "lit_ball.0000.exr")
    full = exr_channels(float_dir / "lit_ball.0000.exr")
    for c in "RGBA":
        pixels, kind = half[c]
        assert kind == OpenEXR.HALF and pixels.dtype == np.float16 and pixels.shape == (48, 72)
        assert full[c][1] == OpenEXR.FLOAT
        np.testing.assert_array_equal(pixels, full[c][0].astype(np.float16))
    assert full["A"][0].max() > 0.5
    assert half["lightdirs_pos.x"][1] == OpenEXR.HALF


def test_16_bit_premultiplied_png_frame_with_exposure(lit):
    # Straight colour times 2^exposure, sRGB-encoded (IEC 61966-2-1), then
    # times alpha for a premultiplied PNG (common practice; PNG itself is
    # unassociated, W3C PNG spec "Alpha representation", hence the tEXt tag),
    # 16-bit codes round(65535 v). Expected from the float EXR of the same look.
    half_dir, float_dir = lit
    codes, bits = png16(half_dir / "lit_ball.0000.png")
    assert bits == 16 and codes.shape == (48, 72, 4)
    assert Image.open(half_dir / "lit_ball.0000.png").text.get("splatter.alpha") == "premultiplied"
    full = {c: v.astype(np.float64) for c, (v, _) in exr_channels(float_dir / "lit_ball.0000.exr").items()}
    a = full["A"]
    safe = np.where(a > 0, a, 1.0)
    for i, c in enumerate("RGB"):
        want = np.where(a > 0, srgb_encode_iec(2.0 * full[c] / safe) * a, 0.0)
        # Float32 arithmetic in the product: within one 16-bit code.
        assert np.abs(codes[..., i] - np.floor(want * 65535 + 0.5)).max() <= 1
    assert np.abs(codes[..., 3] - np.floor(a * 65535 + 0.5)).max() <= 1
    # Exposure did brighten it: some straight colour reached the clip at 1.
    assert (codes[..., 0][codes[..., 3] > 0] == codes[..., 3][codes[..., 3] > 0]).any()


def test_16_bit_premultiplied_colour_and_light_sheets(lit):
    half_dir, _ = lit
    meta = json.loads((half_dir / "lit_ball.sheet.json").read_text())
    cell = meta["cells"][0]
    frame, _ = png16(half_dir / "lit_ball.0000.png")
    sheet, bits = png16(half_dir / "lit_ball.sheet.png")
    assert bits == 16 and sheet.shape[2] == 4
    assert Image.open(half_dir / "lit_ball.sheet.png").text.get("splatter.alpha") == "premultiplied"
    in_cell = sheet[cell["y"]:cell["y"] + 48, cell["x"]:cell["x"] + 72]
    covered = frame[..., 3] > 0
    np.testing.assert_array_equal(in_cell[covered], frame[covered])
    # Light-direction sheets: 16-bit linear values (+x, +y, +z: right, up and
    # toward the viewer in the first), equal to the EXR layers within half precision (2^-11) plus one code.
    layers = {n: v.astype(np.float64) for n, (v, _) in exr_channels(half_dir / "lit_ball.0000.exr").items()}
    codes, bits = png16(half_dir / meta["maps"]["lightdirs"]["files"][0])
    assert bits == 16
    sub = codes[cell["y"]:cell["y"] + 48, cell["x"]:cell["x"] + 72]
    solid = layers["A"] > 0.1
    for i, axis in enumerate("xyz"):
        want = np.clip(layers[f"lightdirs_pos.{axis}"][solid], 0, 1)
        got = sub[..., i][solid] / 65535
        assert np.abs(got - want).max() <= 2.0 ** -11 * want.max() + 1 / 65535


# ---------------------------------------------------------------------------
# One puff rising through a perspective camera, non-square, with maps.
# ---------------------------------------------------------------------------
RISING = ["image.width=80", "image.height=48", "camera.projection='perspective'", "camera.fov=30",
          "source.0.speed=1.5", "source.0.direction=[0, 1, 0]", 'output.frames=["png", "exr"]',
          'output.maps=["motion", "depth", "normal"]', "output.sheet={padding=0}"]


@pytest.fixture(scope="module")
def rising(tmp_path_factory):
    return render_look(tmp_path_factory.mktemp("rising"), LONE_PUFF, RISING, [0, 1, 2])


def test_perspective_maps_of_a_rising_puff(rising):
    # Pinhole camera: focal f = (h / 2) / tan(fov / 2) px; a puff at depth z
    # moving at v across the view moves f v / z px per second, up on screen
    # being -y (y down, docs/look-reference.md). Eye at z = 10, fov 30 deg, 48 px
    # high, 1.5 units/s, 10 fps: 0.15 f / 10 px per frame, upward.
    look, d = rising
    f = 24 / math.tan(math.radians(15))
    layers = {n: v for n, (v, _) in exr_channels(d / "lone_puff.0001.exr").items()}
    a = layers["A"]
    assert a.shape == (48, 80)  # non-square: rows = height
    r, c = np.unravel_index(np.argmax(a), a.shape)
    # The puff is at (0, 0.15, 0): it projects f * 0.015 px above the centre.
    assert r == int(24 - f * 0.015)
    # Float EXR: exact up to float32 (relative 1e-6), not within a few percent.
    assert layers["motion.y"][r, c] == pytest.approx(-0.15 * f / 10, rel=1e-5)
    assert layers["motion.x"][r, c] == 0.0  # no horizontal motion: float holds exactly 0
    covered = a > 0.01
    np.testing.assert_allclose(layers["depth.z"][covered], 10.0, atol=1e-4)
    n = np.stack([layers[f"normal.{k}"][r, c] for k in "xyz"])
    # Unit normals; the puff's middle faces the viewer (glTF 2.0, +Z toward it).
    assert np.linalg.norm(n) == pytest.approx(1.0, abs=1e-5) and n[2] > 0.5
    with Image.open(d / "lone_puff.0001.png") as im:
        assert im.size == (80, 48)


def test_motion_sheet_vertical_sign_and_the_8_bit_bias_at_one_half(rising):
    # Motion sheet (common practice for frame blending): channel 0 holds x,
    # channel 1 holds y, each 0.5 + 0.5 clamp(d / s, -1, 1), d in sheet UV per
    # frame with v down like the image rows. Rising puff: v motion negative,
    # so channel 1 < 0.5. No x motion encodes 0.5, which 8 bits cannot hold:
    # round(127.5) = 128 (round half up), a bias of s / 255 that a float EXR
    # does not have (the EXR above holds exactly 0).
    look, d = rising
    meta = json.loads((d / "lone_puff.sheet.json").read_text())
    m = meta["maps"]["motion"]
    with Image.open(d / m["file"]) as im:
        # Channels as stored: x then y, whether the file is grey+alpha or RGB.
        codes = np.asarray(im).astype(float)
    layers = {n: v for n, (v, _) in exr_channels(d / "lone_puff.0001.exr").items()}
    a = layers["A"]
    r, c = np.unravel_index(np.argmax(a), a.shape)
    cell = meta["cells"][1]
    code = codes[cell["y"] + r, cell["x"] + c]
    assert code[0] == 128
    s = m["scale"]
    want_v = layers["motion.y"][r, c] / meta["height"]
    assert want_v < 0 and code[1] < 127
    assert abs((2 * code[1] / 255 - 1) * s - want_v) <= s / 255


# ---------------------------------------------------------------------------
# "add" blending: two puffs in the same place, hand-checked.
# ---------------------------------------------------------------------------
def test_add_blending_of_two_coincident_puffs(tmp_path):
    # Two identical round puffs (colour 0.5, peak opacity 0.8) centred on the
    # centre of pixel [32, 32] (65 px over 4 units). "add": colour sums, alpha
    # is 1 - prod(1 - a) (docs/look-reference.md, blend modes): R = 2 * 0.5 * 0.8
    # = 0.8, A = 1 - 0.2^2 = 0.96. "over" (Porter & Duff 1984) gives
    # R = 0.4 + 0.2 * 0.4 = 0.48 with the same alpha.
    text = LONE_PUFF.replace("count = 1", "count = 2")
    got = {}
    for blend in ("add", "over"):
        folder = tmp_path / blend
        folder.mkdir()
        _, d = render_look(folder, text, ["image.width=65", "image.height=65", f"shading.blend='{blend}'"], [0])
        got[blend] = {n: v for n, (v, _) in exr_channels(d / "lone_puff.0000.exr").items()}
    assert got["add"]["R"][32, 32] == pytest.approx(0.8, rel=1e-6)
    assert got["add"]["A"][32, 32] == pytest.approx(0.96, rel=1e-6)
    assert got["over"]["R"][32, 32] == pytest.approx(0.48, rel=1e-6)
    assert got["over"]["A"][32, 32] == pytest.approx(0.96, rel=1e-6)


# ---------------------------------------------------------------------------
# Exact loops with the explicit integrator, sphere and kill obstacles, on PNG.
# ---------------------------------------------------------------------------
def test_exact_loop_closes_on_png_with_euler_and_sphere_and_kill_obstacles(tmp_path):
    # loop = "exact" promises frame N equals frame 0 (docs/look-reference.md, Loops).
    extra = """
[[obstacle]]
kind = "sphere"
center = [0.3, 0.5, 0]
radius = 0.2
bounce = 0.5
[[obstacle]]
kind = "plane"
point = [0, 0.9, 0]
normal = [0, -1, 0]
kill = true
"""
    look = load_look(write_look(tmp_path, SMALL_PLUME, extra=extra),
                     overrides=["clip.integrator='euler'", 'output.frames=["png"]'])
    n = look.clip.frames
    d = Path(quiet_render(look, tmp_path / "out", frames=[0, n // 2, n]).out_dir)

    def pixels(f):
        with Image.open(d / f"small_plume.{f:04d}.png") as im:
            assert im.mode == "RGBA"
            return np.asarray(im).astype(int)

    first, mid, last = pixels(0), pixels(n // 2), pixels(n)
    # Float frames agree to 1e-6 (the EXR loop test); 8-bit codes to one step.
    assert np.abs(last - first).max() <= 1
    assert first[..., 3].max() > 25 and np.abs(mid - first).max() > 10  # it does move
