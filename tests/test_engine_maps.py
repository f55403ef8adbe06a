"""Maps as an engine reads them: channels, conventions, dilation and relighting.

Every map is read back the way an engine's importer or a tool script would:
Pillow (``Image.open``, whose mode names the channels it found) and imageio
(``imageio.v3.imread``, the array an importer gets), besides the raw PNG
header. The PNG colour types are those of the W3C PNG Specification (Third
Edition, table "Allowed combinations of colour type and bit depth"): 0 grey,
2 RGB, 4 grey + alpha, 6 RGBA.
"""

import json
import struct
from pathlib import Path

import imageio.v3 as iio
import numpy as np
import pytest
from lookfiles import LIT_BALL, LONE_PUFF, quiet_render, write_look
from PIL import Image
from scipy import ndimage

from splatter.core.colorspace import srgb_decode
from splatter.deliver.exr import read_exr
from splatter.deliver.names import FRAME_FILE, planned_files
from splatter.deliver.png import read_png
from splatter.look.load import load_look

MOVING_PUFF = LONE_PUFF.replace("speed = 0", "speed = 1.5\ndirection = [1, -0.5, 0]")


def render_look(tmp_path, text, overrides=(), frames=(0,), sub="out"):
    look = load_look(write_look(tmp_path, text, name=f"{sub}.toml"), overrides=list(overrides))
    return look, Path(quiet_render(look, tmp_path / sub, frames=list(frames)).out_dir)


def colour_type(path):
    """Bit depth and colour type from the IHDR chunk (bytes 24 and 25 of a PNG file)."""
    head = Path(path).read_bytes()[:26]
    assert head[12:16] == b"IHDR"
    return struct.unpack(">BB", head[24:26])


def pillow(path):
    with Image.open(path) as im:
        return im.mode, np.asarray(im), dict(im.info)


# ---------------------------------------------------------------- motion


@pytest.mark.parametrize("bits", [8, 16])
def test_motion_sheet_is_rgb_with_x_in_red_and_y_in_green(tmp_path, bits):
    # The puff moves right and up (world +y is up, image y runs down): 1.5
    # units/s x [1, -0.5] normalised, 16 px per unit, 10 fps -> (+2.15, +1.07) px
    # per frame in image axes (x right, y down).
    _, d = render_look(tmp_path, MOVING_PUFF, ['output.maps=["motion"]', "output.sheet={padding=0}",
                                               f"output.png_bits={bits}"], frames=(0, 1))
    meta = json.loads((d / "lone_puff.sheet.json").read_text())
    m = meta["maps"]["motion"]
    path = d / m["file"]
    assert colour_type(path) == (bits, 2)  # RGB, not grey + alpha
    assert m["channels"] == ["x", "y", "0"]
    mode, px, _ = pillow(path)
    assert mode == "RGB"  # Pillow keeps 8 bits of 16-bit RGB (the high byte)
    arr = iio.imread(path)
    assert arr.shape == (meta["height"], meta["width"], 3)
    np.testing.assert_array_equal(arr, px)
    exr = read_exr(d / "lone_puff.0001.exr")
    r, c = np.unravel_index(np.argmax(exr["A"]), exr["A"].shape)
    cell = meta["cells"][1]
    texel = px[cell["y"] + r, cell["x"] + c].astype(float) / 255.0
    s = m["scale"]
    dx, dy = (2 * texel[0] - 1) * s, (2 * texel[1] - 1) * s  # the documented decoding
    tol = 2 * s / 255 + 1e-9
    assert dx == pytest.approx(exr["motion.x"][r, c] / meta["width"], abs=tol)
    assert dy == pytest.approx(exr["motion.y"][r, c] / meta["height"], abs=tol)
    assert exr["motion.x"][r, c] > 2.0 and exr["motion.y"][r, c] > 1.0  # right and up the screen = +y down
    assert np.all(px[..., 2] == 0)  # blue holds 0
    full, _ = read_png(path)
    assert np.all(full[..., 2] == 0)


def test_motion_exr_sheet_keeps_its_layers(tmp_path):
    _, d = render_look(tmp_path, MOVING_PUFF, ['output.maps=["motion"]', "output.sheet={padding=0, format='exr'}"],
                       frames=(0, 1))
    meta = json.loads((d / "lone_puff.sheet.json").read_text())
    m = meta["maps"]["motion"]
    layers = read_exr(d / m["file"])
    assert set(layers) == {"motion.x", "motion.y"} and m["channels"] == ["x", "y"] and m["encoding"] == "raw"
    assert layers["motion.x"].max() == pytest.approx(2.15 / meta["width"], rel=0.03)


# ---------------------------------------------------------------- depth


@pytest.mark.parametrize("bits", [8, 16])
def test_depth_sheet_is_one_grey_channel(tmp_path, bits):
    _, d = render_look(tmp_path, LONE_PUFF, ['output.maps=["depth"]', "output.sheet={padding=0}",
                                             f"output.png_bits={bits}", "output.map_frames=true"])
    meta = json.loads((d / "lone_puff.sheet.json").read_text())
    m = meta["maps"]["depth"]
    for path in (d / m["file"], d / "lone_puff.depth.0000.png"):
        assert colour_type(path) == (bits, 0)
        mode, px, _ = pillow(path)
        assert mode == ("L" if bits == 8 else "I;16")
        arr = iio.imread(path)
        assert arr.ndim == 2
        np.testing.assert_array_equal(arr, px)
        top = 2**bits - 1
        # Eye at z = 10 looking at the puff at the origin: view depth 10.
        z = m["near"] + px[32, 32] / top * (m["far"] - m["near"])
        assert z == pytest.approx(10.0, abs=(m["far"] - m["near"]) / top + 1e-6)
        assert px[0, 0] == top  # no smoke: as far as possible


# ---------------------------------------------------------------- normals


def test_normal_y_down_holds_everywhere_and_metadata_says_so(tmp_path):
    # The top edge of a round puff leans up the screen: +y with "+y up",
    # -y with "+y down", in every file, and every file's metadata says which.
    over = ['output.maps=["normal"]', "output.sheet={padding=0, format='exr'}", "output.map_frames=true",
            "output.frames=['exr', 'png']"]
    for conv, sign in (("up", 1.0), ("down", -1.0)):
        _, d = render_look(tmp_path, LONE_PUFF, over + [f"output.normal_y='{conv}'"], sub=conv)
        want = "+y up" if conv == "up" else "+y down"
        meta = json.loads((d / "lone_puff.sheet.json").read_text())
        m = meta["maps"]["normal"]
        assert m["convention"] == want
        sheet = read_exr(d / m["file"])
        frame, header = read_exr(d / "lone_puff.0000.exr", with_header=True)
        assert header["splatter.normal_convention"] == want
        for layers in (sheet, frame):
            assert sign * layers["normal.y"][24, 32] > 0.3
            assert layers["normal.x"][32, 40] > 0.3  # x is right either way
        mode, px, info = pillow(d / "lone_puff.normal.0000.png")
        assert mode == "RGB" and json.loads(info["splatter.map"])["convention"] == want
        np.testing.assert_array_equal(iio.imread(d / "lone_puff.normal.0000.png"), px)
        g = px[24, 32, 1] / 255.0 * 2 - 1  # n * 0.5 + 0.5 decoded
        assert g == pytest.approx(frame["normal.y"][24, 32], abs=2 / 255)
        assert tuple(px[0, 0]) == (128, 128, 255)  # flat where there is no smoke


# ---------------------------------------------------------------- per-frame maps


def test_map_frames_are_written_per_frame_and_read_back(tmp_path):
    look, d = render_look(tmp_path, MOVING_PUFF, ['output.maps=["motion", "depth", "normal", "lightdirs"]',
                                                  "output.map_frames=true", "output.frames=['png', 'exr']",
                                                  "shading.light={direction=[1, 0, 0]}",
                                                  'force.0={kind="drag", rate=3}'], frames=(0, 1, 2))
    names = sorted(p.name for p in d.iterdir())
    assert names == sorted(Path(f).name for f in planned_files(look, str(d), range(3)))  # what check lists
    for f in range(3):
        for part in ("motion", "depth", "normal", "lightdirs_pos", "lightdirs_neg"):
            assert f"lone_puff.{part}.{f:04d}.png" in names
            assert FRAME_FILE.match(f"lone_puff.{part}.{f:04d}.png") is None  # pack never takes them for frames
    exr = read_exr(d / "lone_puff.0001.exr")
    r, c = np.unravel_index(np.argmax(exr["A"]), exr["A"].shape)
    mode, px, info = pillow(d / "lone_puff.motion.0001.png")
    m = json.loads(info["splatter.map"])
    assert mode == "RGB" and m["channels"] == ["x", "y", "0"] and m["units"] == "frame uv per frame"
    s = m["scale"]
    px = px.astype(float)
    assert (2 * px[r, c, 0] / 255 - 1) * s == pytest.approx(exr["motion.x"][r, c] / 64, abs=2 * s / 255)
    assert (2 * px[r, c, 1] / 255 - 1) * s == pytest.approx(exr["motion.y"][r, c] / 64, abs=2 * s / 255)
    assert np.all(px[..., 2] == 0)
    # One scale for the clip (drag slows the puff, so frames differ): every frame states the same numbers.
    assert {json.loads(pillow(d / f"lone_puff.motion.{f:04d}.png")[2]["splatter.map"])["scale"]
            for f in range(3)} == {s}
    for sign, axes in (("pos", "xyz"), ("neg", "xyz")):
        mode, px, info = pillow(d / f"lone_puff.lightdirs_{sign}.0001.png")
        assert mode == "RGB" and info.get("srgb") is None  # data: no sRGB chunk
        for i, axis in enumerate(axes):
            want = exr[f"lightdirs_{sign}.{axis}"][r, c]
            assert px[r, c, i] / 255 == pytest.approx(want, abs=1 / 255)
        # Under alpha 0 the light of the nearest covered texel (scipy's exact
        # distance transform names it), so filtering never darkens the rim.
        empty = exr["A"] == 0
        _, (iy, ix) = ndimage.distance_transform_edt(empty, return_indices=True)
        assert empty.any()
        assert np.abs(px[empty].astype(int) - px[iy, ix][empty].astype(int)).max() <= 2


# ---------------------------------------------------------------- dilation


def test_png_frames_are_dilated_by_default_and_not_when_asked(tmp_path):
    # Every alpha-0 texel of a straight-alpha frame takes the colour of the
    # nearest covered texel; scipy's exact Euclidean distance transform
    # names that texel (ties may pick either of two equally near texels).
    text = LONE_PUFF.replace('frames = ["exr"]', 'frames = ["png"]').replace("[0.5, 0.5, 0.5]", "[0.9, 0.5, 0.2]")
    _, d = render_look(tmp_path, text, sub="on")
    mode, px, _ = pillow(d / "lone_puff.0000.png")
    assert mode == "RGBA"
    a = px[..., 3]
    empty = a == 0
    assert empty.any() and (~empty).any()
    dist, (iy, ix) = ndimage.distance_transform_edt(empty, return_indices=True)
    ref = px[iy, ix, :3]
    ys, xs = np.nonzero(empty)
    got = px[ys, xs, :3].astype(int)
    # Our texel and scipy's are equally near, so their colours agree to a code or two.
    assert np.abs(got - ref[ys, xs].astype(int)).max() <= 3
    assert got.min(axis=0).tolist() > [150, 60, 10]  # nowhere black
    _, d = render_look(tmp_path, text, ["output.dilate=false"], sub="off")
    _, px_off, _ = pillow(d / "lone_puff.0000.png")
    assert np.all(px_off[empty, :3] == 0)
    np.testing.assert_array_equal(px_off[~empty], px[~empty])  # covered texels untouched


def test_straight_rim_does_not_darken_under_filtering(tmp_path):
    # Straight colour filtered bilinearly (as an engine samples an unpremultiplied
    # texture) mixes covered texels with their alpha-0 neighbours: black
    # neighbours darken the rim, dilated ones do not.
    text = LONE_PUFF.replace('frames = ["exr"]', 'frames = ["png"]')
    for dilate in ("true", "false"):
        _, d = render_look(tmp_path, text, [f"output.dilate={dilate}"], sub=dilate)
        px = iio.imread(d / "lone_puff.0000.png").astype(float)
        straight = srgb_decode(px[..., :3] / 255.0)
        # Mean of each texel with its right-hand neighbour, on the outermost covered texels.
        edge = (px[:, :-1, 3] > 0) & (px[:, 1:, 3] == 0)
        mixed = 0.5 * (straight[:, :-1] + straight[:, 1:])[edge]
        if dilate == "true":
            np.testing.assert_allclose(mixed, 0.5, atol=0.02)  # the puff's own grey
        else:
            assert np.all(mixed < 0.3)


# ---------------------------------------------------------------- relighting


AXES = {"+x": [1, 0, 0], "+y": [0, 1, 0], "+z": [0, 0, 1], "-x": [-1, 0, 0], "-y": [0, -1, 0], "-z": [0, 0, -1]}


def relight(pos, neg, direction):
    """The documented relighting weight L for a unit light ``direction`` (docs/sheet-metadata.md)."""
    l = np.asarray(direction, dtype=float)
    l = l / np.linalg.norm(l)
    w = l * l
    return sum(w[i] * (pos[..., i] if l[i] >= 0 else neg[..., i]) for i in range(3))


def test_relighting_from_each_side_matches_a_direct_render(tmp_path):
    # The camera looks down -z with +y up, so the camera's +x, +y, +z are the
    # world's. A direct render lit from one axis has colour
    # c * I * (ambient * A + (1 - ambient) * C * f) per puff, and the map
    # holds the alpha-weighted mean of the same f, so the relit frame must
    # equal the direct one up to the 16-bit quantisation of the map.
    base = ["shading.ambient=0.25", "shading.light.shadow=0.8", "shading.light.color=[1.0, 0.9, 0.7]"]
    _, d = render_look(tmp_path, LIT_BALL, base + ['output.maps=["lightdirs"]', "output.png_bits=16",
                                                   "output.sheet={padding=0}"], sub="maps")
    meta = json.loads((d / "lit_ball.sheet.json").read_text())
    m = meta["maps"]["lightdirs"]
    assert m["channels"] == [["+x", "+y", "+z"], ["-x", "-y", "-z"]]
    pos_file, neg_file = (d / f for f in m["files"])
    assert [colour_type(p) for p in (pos_file, neg_file)] == [(16, 2), (16, 2)]
    pos = read_png(pos_file)[0][:64, :64].astype(float) / 65535
    neg = read_png(neg_file)[0][:64, :64].astype(float) / 65535
    # Pillow (8 bits of a 16-bit RGB file) sees the same channels.
    assert np.abs(pillow(pos_file)[1][:64, :64] / 255.0 - pos).max() <= 1 / 255 + 1e-9
    # Under alpha 0 the sheets carry the nearest covered texel's light (dilated like colour).
    alpha = read_png(d / "lit_ball.sheet.png")[0][:64, :64, 3]
    empty = alpha == 0
    _, (iy, ix) = ndimage.distance_transform_edt(empty, return_indices=True)
    assert empty.any() and np.abs(pos[empty] - pos[iy, ix][empty]).max() < 0.01
    # The unlit colour an engine multiplies: the same look without its light.
    unlit_text = LIT_BALL.split("[shading]")[0] + '[output]\nframes = ["exr"]\nexr_type = "float"\n'
    _, du = render_look(tmp_path, unlit_text, sub="unlit")
    unlit = read_exr(du / "lit_ball.0000.exr")
    unlit_rgb = np.stack([unlit[k] for k in "RGB"], -1)
    assert np.abs(unlit_rgb - 0.8 * unlit["A"][..., None]).max() < 1e-5
    colour = np.array([1.0, 0.9, 0.7])
    means = {}
    for side, direction in AXES.items():
        _, dd = render_look(tmp_path, LIT_BALL, base + [f"shading.light.direction={direction}"],
                            sub=f"direct{side[0] == '+'}{side[1]}")
        direct = read_exr(dd / "lit_ball.0000.exr")
        np.testing.assert_array_equal(direct["A"], unlit["A"])
        L = relight(pos, neg, direction)[..., None]
        relit = unlit_rgb * (0.25 * colour + 0.75 * colour * L)
        got = np.stack([direct[k] for k in "RGB"], -1)
        np.testing.assert_allclose(relit, got, atol=2e-5, err_msg=side)  # measured 4.8e-6; a 16-bit step is 1.5e-5
        means[side] = float(got[..., 0].sum())
    # Different sides differ (the smoke shadows itself), so the test can tell them apart.
    assert means["+z"] > 1.2 * means["-z"]


def test_relighting_weights_sum_to_one_for_any_direction(tmp_path):
    # Without self-shadowing every side's map is 1, and the direct render lit
    # from a diagonal is evenly lit: the relit frame must match it.
    base = ["shading.ambient=0.25", "shading.light.shadow=0"]
    _, d = render_look(tmp_path, LIT_BALL, base + ['output.maps=["lightdirs"]', "output.map_frames=true"], sub="m")
    pos = iio.imread(d / "lit_ball.lightdirs_pos.0000.png").astype(float) / 255
    neg = iio.imread(d / "lit_ball.lightdirs_neg.0000.png").astype(float) / 255
    direction = [1, -2, 2]
    _, dd = render_look(tmp_path, LIT_BALL, base + [f"shading.light.direction={direction}"], sub="diag")
    direct = read_exr(dd / "lit_ball.0000.exr")
    relit = direct["A"] * 0.8 * (0.25 + 0.75 * relight(pos, neg, direction))
    np.testing.assert_allclose(relit, direct["R"], atol=2e-3)


# ---------------------------------------------------------------- the docs say what the files hold


def test_sheet_metadata_doc_states_what_the_files_hold(tmp_path):
    # Every map entry of a render with all maps: the doc quotes its channel
    # lists, encodings, units and relighting formula character for character.
    doc = (Path(__file__).resolve().parents[1] / "docs" / "sheet-metadata.md").read_text()
    ref = (Path(__file__).resolve().parents[1] / "docs" / "look-reference.md").read_text()
    _, d = render_look(tmp_path, MOVING_PUFF, ['output.maps=["motion", "depth", "normal", "lightdirs"]',
                                               "output.map_frames=true", "output.sheet={padding=0}"], frames=(0, 1))
    maps = json.loads((d / "lone_puff.sheet.json").read_text())["maps"]
    for key, entry in maps.items():
        assert f"| `{key}` |" in doc
        for field in ("channels", "encoding", "units", "convention", "axes"):
            if field in entry:
                assert f"`{json.dumps(entry[field])}`" in doc, (key, field)
        for f in entry.get("files", [entry.get("file")]):
            assert f.replace("lone_puff", "{name}") in doc, f
    for line in maps["lightdirs"]["relight"].split("; "):
        assert line in doc
    for part in ("motion", "depth", "normal", "lightdirs_pos", "lightdirs_neg"):
        mode, _, info = pillow(d / f"lone_puff.{part}.0001.png")
        entry = json.loads(info["splatter.map"])
        assert entry["map"] == part and json.dumps(entry["channels"]) in doc
        assert mode == ("L" if part == "depth" else "RGB")
    assert "`{dir}/{stem}.{motion,depth,normal,lightdirs_pos,lightdirs_neg}.{frame:04d}.png`" in ref
    assert "`lightdirs_pos.x/y/z` and `lightdirs_neg.x/y/z`" in ref and "`splatter.normal_convention`" in ref


def test_check_warns_only_when_maps_have_nowhere_to_go(tmp_path):
    from splatter.check import check_look

    text = LONE_PUFF.replace('frames = ["exr"]', 'frames = ["png"]')
    look = load_look(write_look(tmp_path, text), overrides=['output.maps=["depth"]'])
    assert "warning   output.maps" in check_look(look)
    look = load_look(write_look(tmp_path, text), overrides=['output.maps=["depth"]', "output.map_frames=true"])
    report = check_look(look)
    assert "warning   output.maps" not in report and "lone_puff.depth.0002.png" in report
