"""pack_folder: round trips from frames written by write_png / write_exr, and errors."""

import json
import os

import numpy as np
import pytest

from splatter.deliver.exr import read_exr, rgba_channels, write_exr
from splatter.deliver.pack import pack_folder
from splatter.deliver.png import read_png, write_png
from splatter.deliver.sheet import assemble_sheet, sheet_layout


def _frames(n, h=12, w=16, seed=0):
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        a = (rng.random((h, w, 1)) * (rng.random((h, w, 1)) < 0.7)).astype(np.float32)
        f = np.concatenate([rng.random((h, w, 3)).astype(np.float32) * a, a], axis=2)
        out.append(f)
    return out


def test_png_round_trip(tmp_path):
    frames = _frames(6)
    for k, f in enumerate(frames):
        write_png(tmp_path / f"steam.{k:04d}.png", f)
    written = pack_folder(tmp_path, columns=3, padding=1, fps=24, loop="exact")
    assert [os.path.basename(p) for p in written] == ["steam.sheet.png", "steam.sheet.json"]
    meta = json.loads(open(written[1]).read())
    assert (meta["columns"], meta["rows"], meta["frames"], meta["fps"], meta["loop"]) == (3, 2, 6, 24, "exact")
    sheet, info = read_png(written[0])
    assert info["bit_depth"] == 8
    # every covered texel of every cell has the code of its frame file (straight sRGB round trip)
    for c in meta["cells"]:
        one, _ = read_png(tmp_path / f"steam.{c['frame']:04d}.png")
        cut = sheet[c["y"] : c["y"] + c["h"], c["x"] : c["x"] + c["w"]]
        covered = one[..., 3] > 0
        np.testing.assert_array_equal(cut[covered], one[covered])


def test_png_16_bit_round_trip(tmp_path):
    frames = _frames(3, seed=1)
    for k, f in enumerate(frames):
        write_png(tmp_path / f"mist.{k:04d}.png", f, bits=16)
    written = pack_folder(tmp_path)
    sheet, info = read_png(written[0])
    assert info["bit_depth"] == 16
    one, _ = read_png(tmp_path / "mist.0002.png")
    c = json.loads(open(written[1]).read())["cells"][2]
    cut = sheet[c["y"] : c["y"] + c["h"], c["x"] : c["x"] + c["w"]]
    covered = one[..., 3] > 0
    np.testing.assert_array_equal(cut[covered], one[covered])


def test_exr_round_trip(tmp_path):
    frames = _frames(5, seed=2)
    for k, f in enumerate(frames):
        write_exr(tmp_path / f"vent.{k + 10:04d}.exr", rgba_channels(f), pixel_type="float")
    written = pack_folder(tmp_path, padding=2)
    assert written[0].endswith("vent.sheet.exr")
    assert [c["frame"] for c in json.loads(open(written[1]).read())["cells"]] == [10, 11, 12, 13, 14]
    back = read_exr(written[0])
    sheet = np.stack([back[c] for c in "RGBA"], -1)
    lay = sheet_layout(5, 16, 12, padding=2)
    # OpenEXR: premultiplied linear preserved exactly (HALF sheet = float16 of the frames)
    np.testing.assert_array_equal(sheet, assemble_sheet(frames, lay).astype(np.float16).astype(np.float32))


def test_both_kinds_prefers_exr_source_and_writes_png(tmp_path):
    f = _frames(2, seed=3)
    for k in range(2):
        write_png(tmp_path / f"dust.{k:04d}.png", f[k])
        write_exr(tmp_path / f"dust.{k:04d}.exr", rgba_channels(f[k]))
    assert pack_folder(tmp_path)[0].endswith("dust.sheet.png")
    assert pack_folder(tmp_path, format="exr")[0].endswith("dust.sheet.exr")


def test_errors(tmp_path):
    with pytest.raises(ValueError, match="no frames"):
        pack_folder(tmp_path)
    f = _frames(4, seed=4)
    for k in (0, 1, 3):
        write_png(tmp_path / f"quay.{k:04d}.png", f[k])
    with pytest.raises(ValueError, match="missing: 0002"):
        pack_folder(tmp_path)
    write_png(tmp_path / "quay.0002.png", np.zeros((8, 8, 4), np.float32))
    with pytest.raises(ValueError, match=r"differ in size: quay.0000.png is 16 x 12, quay.0002.png is 8 x 8"):
        pack_folder(tmp_path)
    write_png(tmp_path / "quay.0002.png", f[2])
    write_png(tmp_path / "chimney.0000.png", f[0])
    with pytest.raises(ValueError, match="several names"):
        pack_folder(tmp_path)
    assert pack_folder(tmp_path, name="quay")[0].endswith("quay.sheet.png")
    with pytest.raises(ValueError, match="name"):
        pack_folder(tmp_path, name="harbour")
    with pytest.raises(ValueError, match="format"):
        pack_folder(tmp_path, name="quay", format="tiff")


def test_packed_sheet_gutters_keep_a_real_mip_chain_clean(tmp_path):
    # Common practice (flipbook texture conventions): a gutter of 2^k px keeps
    # mip level k from mixing two cells when each cell is dilated on its own.
    # pack goes through the render's cell encoder. The mip chain is Pillow's
    # 2 x 2 box reduction of the sheet read back from disk, level by level, of
    # each channel on its own: texture hardware averages straight-alpha texels
    # as stored (Pillow's RGBA reduce would weight colour by alpha).
    from PIL import Image

    frames = np.zeros((2, 16, 16, 4), np.float32)
    frames[0, 7:9, 1:3] = (0.8, 0.0, 0.0, 0.8)  # a red dot at frame 0's left edge
    frames[1, 3:5, 0:2] = (0.0, 0.0, 0.6, 0.6)  # a blue dot at frame 1's left edge
    for k in range(2):
        write_png(tmp_path / f"dots.{k:04d}.png", frames[k])
    written = pack_folder(tmp_path, columns=2, padding=4)
    level = Image.open(written[0]).convert("RGBA").split()[:3]
    assert level[0].size == (48, 24)  # exactly 2 cells of 16 + 2 x 4
    for k in range(3):  # levels 0, 1, 2: texels 1, 2 and 4 px of the sheet
        rgb = np.stack([np.asarray(c, dtype=np.int32) for c in level], axis=-1)
        half = rgb.shape[1] // 2
        assert (rgb[:, :half, 0] > 0).all() and (rgb[:, :half, 2] == 0).all(), k  # cell 0: red only
        assert (rgb[:, half:, 2] > 0).all() and (rgb[:, half:, 0] == 0).all(), k  # cell 1: blue only
        level = [c.reduce(2) for c in level]
