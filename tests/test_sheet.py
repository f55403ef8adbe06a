"""Sprite-sheet layout, assembly, dilation against mip fringes, metadata."""

import json
import math

import numpy as np
import pytest

from splatter.deliver.exr import read_exr
from splatter.deliver.map_sheets import write_lightdir_sheets, write_map_sheet
from splatter.deliver.png import read_png, write_png
from splatter.deliver.sheet import assemble_sheet, sheet_layout, write_sheet


def _puff_frames(n, h, w, colour=(0.8, 0.5, 0.3), seed=0):
    """Soft discs of one straight colour, premultiplied, at varying places."""
    rng = np.random.default_rng(seed)
    rr, cc = np.mgrid[0:h, 0:w] + 0.5
    out = []
    for _ in range(n):
        cy, cx = rng.uniform(0.3, 0.7, 2) * (h, w)
        r = rng.uniform(0.2, 0.45) * min(h, w)
        a = np.clip(1.0 - np.hypot(rr - cy, cc - cx) / r, 0.0, 1.0).astype(np.float32) * 0.9
        f = np.zeros((h, w, 4), np.float32)
        f[..., :3] = np.asarray(colour, np.float32) * a[..., None]
        f[..., 3] = a
        out.append(f)
    return out


def test_frame_10_of_8x8_256px():
    # Common practice (row by row from the top-left): 8 x 8 of 256 px on 2048 px,
    # frame 10 covers x in [512, 768), y in [256, 512).
    for pow2 in (False, True):
        lay = sheet_layout(64, 256, 256, pow2=pow2)
        assert (lay.columns, lay.rows, lay.width, lay.height) == (8, 8, 2048, 2048)
        c = lay.cells[10]
        assert (c.x, c.x + c.w, c.y, c.y + c.h) == (512, 768, 256, 512)


@pytest.mark.parametrize("n, cols, rows", [(1, 1, 1), (2, 2, 1), (10, 4, 3), (16, 4, 4), (17, 5, 4), (64, 8, 8)])
def test_default_grid_is_near_square(n, cols, rows):
    # columns = ceil(sqrt(n)), rows = ceil(n / columns)
    assert cols == math.ceil(math.sqrt(n)) and rows == math.ceil(n / cols)
    lay = sheet_layout(n, 32, 32)
    assert (lay.columns, lay.rows) == (cols, rows)
    # row by row: column k mod C, row k // C (common practice)
    for k, c in enumerate(lay.cells):
        assert (c.x, c.y) == ((k % cols) * 32, (k // cols) * 32)


def test_columns_or_rows_given():
    assert (sheet_layout(10, 8, 8, columns=5).rows) == 2
    assert (sheet_layout(10, 8, 8, rows=3).columns) == 4
    with pytest.raises(ValueError, match="columns, rows"):
        sheet_layout(10, 8, 8, columns=3, rows=3)


@pytest.mark.parametrize("fw, fh, pad, n", [(100, 60, 0, 7), (37, 53, 3, 12), (256, 256, 2, 64), (9, 8, 1, 3),
                                             (256, 256, 1, 6)])
def test_sheet_is_exactly_columns_by_cells(fw, fh, pad, n):
    # Common practice: an engine plays cell k at (uv + (k mod C, k // C)) / (C, R),
    # so the sheet must be exactly C cells by R cells (padding inside each cell),
    # with no extra rows or columns of texels at the right or bottom.
    lay = sheet_layout(n, fw, fh, padding=pad, columns=3 if n == 6 else None)
    assert (lay.cell_width, lay.cell_height) == (fw + 2 * pad, fh + 2 * pad)
    assert (lay.width, lay.height) == (lay.columns * lay.cell_width, lay.rows * lay.cell_height)
    for k, c in enumerate(lay.cells):
        # the content's cell, as the engine computes it from uv alone
        u0 = (k % lay.columns) / lay.columns * lay.width
        v0 = (k // lay.columns) / lay.rows * lay.height
        assert (c.x - pad, c.y - pad) == (u0, v0) and (c.w, c.h) == (fw, fh)
    if n == 6:  # pack --columns 3 --padding 1 of 256 px frames: 3 x 258, not 776
        assert (lay.width, lay.height) == (774, 516)


@pytest.mark.parametrize("n", [1, 2, 3, 5, 7, 16, 31, 32, 33, 48, 64, 100])
@pytest.mark.parametrize("fw, fh, pad", [(256, 256, 0), (256, 128, 0), (128, 128, 2), (100, 60, 1), (252, 252, 2)])
def test_pow2_sheets_have_whole_cells_and_keep_frames_unscaled_when_they_can(n, fw, fh, pad):
    # A power-of-two sheet (common practice for block-compressed, mipmapped
    # textures) whose width divides into whole cells: C and R are powers of two.
    lay = sheet_layout(n, fw, fh, padding=pad, pow2=True)
    for size, count, cell in ((lay.width, lay.columns, lay.cell_width), (lay.height, lay.rows, lay.cell_height)):
        assert size & (size - 1) == 0 and count & (count - 1) == 0 and size == count * cell
    assert lay.columns * lay.rows == 1 << (n - 1).bit_length()  # the fewest cells: the next power of two >= n
    pow2_cell = all(((s + 2 * pad) & (s + 2 * pad - 1)) == 0 for s in (fw, fh))
    assert lay.resampled == (not pow2_cell)
    if pow2_cell:
        assert all((c.w, c.h) == (fw, fh) for c in lay.cells)
    for c in lay.cells:
        assert c.x - pad == (c.frame % lay.columns) * lay.cell_width


def test_pow2_cases_from_the_issue():
    # 32 frames of 256 px: an unscaled 8 x 4 grid in 2048 x 1024 (was 6 x 6 with frames upscaled to 337)
    lay = sheet_layout(32, 256, 256, pow2=True)
    assert (lay.columns, lay.rows, lay.width, lay.height, lay.resampled) == (8, 4, 2048, 1024, False)
    # 48 frames: 8 x 8 whole 256 px cells (was 7 x 7 cells of 292.57 px, frames upscaled to 288)
    lay = sheet_layout(48, 256, 256, pow2=True)
    assert (lay.columns, lay.rows, lay.width, lay.cell_width, lay.resampled) == (8, 8, 2048, 256, False)
    # With a 2 px gutter, 260 px cells cannot tile a power of two: the nearest
    # power of two, 256, is taken and frames shrink to 252 px (1.6 %), not grow to 508.
    lay = sheet_layout(32, 256, 256, pow2=True, padding=2)
    assert (lay.width, lay.height, lay.cell_width, lay.cells[0].w, lay.resampled) == (2048, 1024, 256, 252, True)
    with pytest.raises(ValueError, match="columns: a power-of-two sheet needs a power of two"):
        sheet_layout(32, 256, 256, pow2=True, columns=6)
    assert (sheet_layout(48, 256, 256, pow2=True, columns=16).rows) == 4


def test_cells_equal_frames():
    frames = _puff_frames(7, 20, 30)
    lay = sheet_layout(7, 30, 20, padding=2)
    sheet = assemble_sheet(iter(frames), lay)
    assert sheet.shape == (lay.height, lay.width, 4) and sheet.dtype == np.float32
    for c, f in zip(lay.cells, frames):
        np.testing.assert_array_equal(sheet[c.y : c.y + c.h, c.x : c.x + c.w], f)
    # nothing outside the content rectangles
    mask = np.zeros(sheet.shape[:2], bool)
    for c in lay.cells:
        mask[c.y : c.y + c.h, c.x : c.x + c.w] = True
    assert not sheet[~mask].any()


def test_png_sheet_cells_equal_frame_files_where_covered(tmp_path):
    frames = _puff_frames(5, 24, 24, seed=4)
    lay = sheet_layout(5, 24, 24, padding=2)
    paths = write_sheet(tmp_path, "quay_dust", frames, lay, fps=24, loop="exact")
    codes, info = read_png(paths[0])
    assert info["srgb"] == 0 and codes.shape == (lay.height, lay.width, 4)
    for c, f in zip(lay.cells, frames):
        write_png(tmp_path / "one.png", f)
        one, _ = read_png(tmp_path / "one.png")
        cut = codes[c.y : c.y + c.h, c.x : c.x + c.w]
        covered = one[..., 3] > 0
        np.testing.assert_array_equal(cut[covered], one[covered])
        np.testing.assert_array_equal(cut[..., 3], one[..., 3])


def _mip_straight(codes):
    """One 2x box-filter mip level of straight-alpha texels, as texture hardware filters them."""
    v = codes.astype(np.float64) / 255.0
    h, w = v.shape[0] // 2 * 2, v.shape[1] // 2 * 2
    v = v[:h, :w]
    return 0.25 * (v[0::2, 0::2] + v[1::2, 0::2] + v[0::2, 1::2] + v[1::2, 1::2])


@pytest.mark.parametrize("dilated", [True, False])
def test_dilation_prevents_black_fringe_in_mips(tmp_path, dilated):
    # Common practice: straight-alpha texels with alpha 0 take the nearest covered
    # colour so filtering does not pull in black. Every puff has one straight colour,
    # so any mip texel with alpha > 0 should keep that colour.
    colour = (0.8, 0.5, 0.3)
    frames = _puff_frames(4, 32, 32, colour=colour, seed=2)
    lay = sheet_layout(4, 32, 32, padding=2)
    if dilated:
        write_sheet(tmp_path, "vent", frames, lay)
        codes, _ = read_png(tmp_path / "vent.sheet.png")
    else:
        # the same sheet without dilation: write_png of the assembled sheet
        write_png(tmp_path / "raw.png", assemble_sheet(frames, lay))
        codes, _ = read_png(tmp_path / "raw.png")
    mip = _mip_straight(codes)
    target = np.round(np.array([0.9063, 0.7354, 0.5838]) * 255) / 255  # srgb(colour), IEC 61966-2-1
    seen = mip[..., 3] > 0
    darkening = (target - mip[seen][:, :3]).max()
    if dilated:
        assert darkening < 2.5 / 255  # only 8-bit rounding
    else:
        assert darkening > 0.1  # the undilated sheet does darken: the check can fail


def test_pow2_resamples_into_cells():
    # 5 frames of 100 x 60 with a 1 px gutter want 102 x 62 cells: the nearest
    # powers of two are 128 x 64; 8 cells, the squarest sheet is 2 x 4 = 256 x 256.
    frames = [np.full((60, 100, 4), 0.5, np.float32) for _ in range(5)]
    lay = sheet_layout(5, 100, 60, pow2=True, padding=1)
    assert (lay.width, lay.height, lay.cell_width, lay.cell_height, lay.columns) == (256, 256, 128, 64, 2)
    assert lay.resampled
    sheet = assemble_sheet(frames, lay)
    c = lay.cells[4]
    assert (c.w, c.h) == (126, 62)
    # an interpolating filter keeps a constant image constant (resampling
    # filters normalise their Lanczos weights to sum to 1: common practice, from memory)
    np.testing.assert_allclose(sheet[c.y : c.y + c.h, c.x : c.x + c.w], 0.5, atol=1e-5)


def test_metadata_json(tmp_path):
    frames = _puff_frames(6, 16, 16, seed=5)
    lay = sheet_layout(6, 16, 16, columns=3, padding=1)
    motion = write_map_sheet(tmp_path, "chimney", "motion", [np.full((16, 16, 2), 0.5, np.float32)] * 6, lay,
                             encoding="0.5+0.5*clamp(d/s,-1,1)", scale=0.05)
    normal = write_map_sheet(tmp_path, "chimney", "normal", [np.full((16, 16, 3), 0.5, np.float32)] * 6, lay,
                             encoding="n*0.5+0.5", convention="+y up")
    light = write_lightdir_sheets(tmp_path, "chimney", [np.zeros((16, 16, 3), np.float32)] * 6,
                                   [np.ones((16, 16, 3), np.float32)] * 6, lay)
    paths = write_sheet(tmp_path, "chimney", frames, lay, fps=25, loop="crossfade",
                        maps={"motion": motion, "normal": normal, "lightdirs": light})
    meta = json.loads(open(paths[1]).read())
    assert meta["version"] == 1 and meta["image"] == "chimney.sheet.png"
    assert (meta["width"], meta["height"], meta["columns"], meta["rows"], meta["frames"]) == (54, 36, 3, 2, 6)
    assert meta["alpha"] == "straight" and meta["color"] == "srgb" and meta["fps"] == 25 and meta["loop"] == "crossfade"
    assert meta["cells"][4] == {"frame": 4, "x": 19, "y": 19, "w": 16, "h": 16}
    assert meta["maps"]["motion"]["file"] == "chimney.motion.sheet.png" and meta["maps"]["motion"]["scale"] == 0.05
    assert meta["maps"]["normal"]["convention"] == "+y up"
    for entry in (meta["maps"]["motion"], meta["maps"]["normal"]):
        codes, info = read_png(tmp_path / entry["file"])
        assert info["srgb"] is None and codes.shape[:2] == (36, 54)  # data, not colour
    assert [read_png(tmp_path / f)[0].shape[2] for f in light["files"]] == [3, 3]


def test_exr_sheet_is_premultiplied_linear(tmp_path):
    frames = _puff_frames(3, 12, 12, seed=6)
    frames[0][2, 2] = (2.5, 0.0, 0.0, 0.5)  # HDR kept in EXR
    lay = sheet_layout(3, 12, 12)
    paths = write_sheet(tmp_path, "mist", frames, lay, format="exr", exr_type="float", alpha="straight")
    meta = json.loads(open(paths[1]).read())
    assert meta["alpha"] == "premultiplied" and meta["color"] == "linear"  # OpenEXR convention
    back = read_exr(paths[0])
    sheet = np.stack([back[c] for c in "RGBA"], -1)
    np.testing.assert_array_equal(sheet, assemble_sheet(frames, lay))
    m = write_map_sheet(tmp_path, "mist", "depth", [np.full((12, 12, 1), 4.0, np.float32)] * 3, lay,
                        encoding="raw", format="exr", channels=("z",))
    assert set(read_exr(tmp_path / m["file"])) == {"depth.z"}


def test_errors(tmp_path):
    lay = sheet_layout(2, 8, 8)
    with pytest.raises(ValueError, match="frames"):
        assemble_sheet([np.zeros((8, 8, 4), np.float32)], lay)
    with pytest.raises(ValueError, match="frames"):
        assemble_sheet([np.zeros((8, 8, 4), np.float32)] * 3, lay)
    with pytest.raises(ValueError, match=r"frames\[1\]"):
        assemble_sheet([np.zeros((8, 8, 4)), np.zeros((8, 9, 4))], lay)
    with pytest.raises(ValueError, match="padding"):
        sheet_layout(4, 8, 8, padding=4, cell=8)
    with pytest.raises(ValueError, match="n_frames"):
        sheet_layout(0, 8, 8)
    with pytest.raises(ValueError, match="loop"):
        write_sheet(tmp_path, "x", [np.zeros((8, 8, 4), np.float32)] * 2, lay, loop="forever")


def test_cell_size_sets_the_sheet_exactly():
    # Common practice: an engine plays cell k at uv / (columns, rows), so the
    # sheet must be exactly columns x cell by rows x cell, padding inside.
    layout = sheet_layout(64, 512, 512, columns=8, rows=8, padding=2, cell=256)
    assert (layout.width, layout.height) == (2048, 2048)
    assert layout.cells[10] == (10, 2 * 256 + 2, 1 * 256 + 2, 252, 252)  # column 2, row 1
    assert layout.resampled
    wide = sheet_layout(4, 400, 200, columns=2, padding=1, cell=100)
    assert (wide.width, wide.height, wide.cells[3].y) == (200, 100, 51)


def test_dilation_stays_in_each_cell_so_mip_levels_up_to_the_gutter_do_not_bleed(tmp_path):
    # Common practice (flipbook texture conventions): straight-alpha texels
    # with alpha 0 take the colour of the nearest covered texel of their own
    # frame, and a gutter of 2^k px keeps mip level k from mixing two cells.
    # Frame 0 is a red dot, frame 1 a blue one; read back with Pillow.
    from PIL import Image

    frames = np.zeros((2, 16, 16, 4), np.float32)
    # At the frames' left edges, so much of cell 0 lies nearer the blue dot than the red one.
    frames[0, 7:9, 1:3] = (0.8, 0.0, 0.0, 0.8)  # premultiplied red, alpha 0.8
    frames[1, 3:5, 0:2] = (0.0, 0.0, 0.6, 0.6)  # premultiplied blue, alpha 0.6
    layout = sheet_layout(2, 16, 16, columns=2, padding=4)
    write_sheet(tmp_path, "dots", frames, layout)
    rgb = np.asarray(Image.open(tmp_path / "dots.sheet.png").convert("RGBA"), dtype=np.float64)[..., :3]
    assert rgb.shape[:2] == (24, 48)
    left, right = rgb[:, :24], rgb[:, 24:]
    assert (left[..., 0] == 255).all() and (left[..., 1:] == 0).all()  # red everywhere in cell 0's tile
    assert (right[..., 2] == 255).all() and (right[..., :2] == 0).all()  # blue everywhere in cell 1's tile
    for k in (1, 2):  # mip levels 1 and 2 (2x2 and 4x4 box), gutter 4 = 2^2
        f = 2**k
        mip = rgb.reshape(24 // f, f, 48 // f, f, 3).mean(axis=(1, 3))
        half = mip.shape[1] // 2
        assert (mip[:, :half, 2] == 0).all() and (mip[:, half:, 0] == 0).all()


@pytest.mark.parametrize("rows", [3, 5])
def test_streamed_png_sheet_decodes_with_pillow_to_its_cells(tmp_path, rows):
    # The PNG sheet is encoded cell row by cell row as frames come; an
    # independent decoder (Pillow's, not ours) must read back every cell's
    # codes where the layout puts them (W3C PNG spec: filtered scanlines in one
    # zlib stream) and transparent zeros elsewhere, including whole empty cell
    # rows below the last frame (rows = 5 leaves two) and cell rows taller
    # than the 128-row bands the encoder compresses at a time.
    from PIL import Image

    from splatter.deliver.sheet import encode_cell

    frames = _puff_frames(5, 140, 60, seed=9)
    lay = sheet_layout(5, 60, 140, columns=2, rows=rows, padding=3)
    paths = write_sheet(tmp_path, "vent_steam", frames, lay, fps=24)
    with Image.open(paths[0]) as im:
        assert im.mode == "RGBA"
        got = np.asarray(im)
    want = np.zeros((lay.height, lay.width, 4), np.uint8)
    for k, (c, f) in enumerate(zip(lay.cells, frames)):
        want[c.y - 3 : c.y + c.h + 3, c.x - 3 : c.x + c.w + 3] = encode_cell(lay, k, f)
    assert want[..., 3].any() and got.shape == want.shape
    np.testing.assert_array_equal(got, want)
