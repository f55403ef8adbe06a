"""Map sheets are streamed (cell row by cell row) yet equal the whole sheet assembled at once.

The reference here builds each map sheet the plain way: every frame placed
into one float array (``assemble_sheet``), each cell's tile dilated on its
own, the whole array quantised and written by ``write_png_encoded``. The
streamed writer must give the same file, byte for byte, and Pillow (an
independent PNG decoder) must read the same codes back.
"""

import numpy as np
import pytest
from PIL import Image

from splatter.deliver.dilate import dilate_colour
from splatter.deliver.display import quantize
from splatter.deliver.exr import read_exr, write_exr
from splatter.deliver.map_sheets import write_map_sheet
from splatter.deliver.png import write_png_encoded
from splatter.deliver.sheet import assemble_sheet, sheet_layout


def _map_frames(n, h, w, c, seed):
    """Smooth data-like values in [0, 1] with a soft disc of alpha per frame."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:h, 0:w] / max(h, w)
    frames, alphas = [], []
    for _ in range(n):
        phase = rng.uniform(0, 6, c)
        frames.append(np.stack([0.5 + 0.5 * np.sin(3 * xx + 2 * yy + p) for p in phase], -1).astype(np.float32))
        cy, cx = rng.uniform(0.3, 0.7, 2)
        alphas.append(np.clip(1.0 - np.hypot(yy - cy * h / max(h, w), xx - cx * w / max(h, w)) / 0.3, 0, 1)
                      .astype(np.float32))
    return frames, alphas


def _whole_sheet(frames, lay, background, alphas):
    """The sheet assembled whole (the plain way), dilated tile by tile when ``alphas`` are given."""
    if alphas is None:
        return assemble_sheet(frames, lay, clip_alpha=False, background=background)
    both = [np.concatenate([f, a[..., None]], -1) for f, a in zip(frames, alphas)]
    sheet = assemble_sheet(both, lay, clip_alpha=False, background=tuple(background) + (0.0,))
    out, pad = sheet[..., :-1].copy(), lay.padding
    for cell in lay.cells:
        ys, xs = slice(cell.y - pad, cell.y + cell.h + pad), slice(cell.x - pad, cell.x + cell.w + pad)
        out[ys, xs] = dilate_colour(sheet[ys, xs])[..., :-1]
    return out


@pytest.mark.parametrize("bits,dilate,cell,rows", [(8, False, None, 3), (16, True, None, 4), (8, True, 40, 3)])
def test_streamed_map_sheet_is_the_whole_sheet_byte_for_byte(tmp_path, bits, dilate, cell, rows):
    # 5 frames on 2 columns: a partly filled last cell row, and with rows = 4 a whole
    # empty cell row that must hold the background; cell = 40 resamples 30 x 22 frames.
    frames, alphas = _map_frames(5, 22, 30, 3, seed=bits + rows)
    lay = sheet_layout(5, 30, 22, columns=2, rows=rows, padding=2, cell=cell)
    background = (0.5, 0.25, 1.0)
    entry = write_map_sheet(tmp_path, "quay", "normal", iter(frames), lay, encoding="n*0.5+0.5", png_bits=bits,
                            background=background, dilate_alpha=iter(alphas) if dilate else None)
    want = quantize(_whole_sheet(frames, lay, background, alphas if dilate else None), bits)
    ref = tmp_path / "whole.png"
    write_png_encoded(ref, want, srgb=False, text={"Software": "splatter"})
    got_path = tmp_path / entry["file"]
    assert got_path.read_bytes() == ref.read_bytes()
    with Image.open(got_path) as im:
        got = np.asarray(im)
    if bits == 8:  # Pillow reads 8-bit RGB directly (16-bit RGB it narrows)
        np.testing.assert_array_equal(got, want)
    # The empty texels hold the background's codes, not zeros.
    assert (want[-1, -1] == quantize(np.float32(background), bits)).all()


def test_streamed_exr_map_sheet_is_the_whole_sheet_in_half(tmp_path):
    # EXR map sheets are held at the file's pixel type; the values read back must be
    # the whole float32 sheet rounded to binary16 (IEEE 754-2008, round to nearest even).
    frames, _ = _map_frames(3, 12, 16, 2, seed=3)
    frames = [4.0 * f - 2.0 for f in frames]  # raw signed values
    lay = sheet_layout(3, 16, 12, columns=2, padding=1)
    # A background other than zero (as a depth sheet's far plane) shows in the gutters and the empty cell.
    entry = write_map_sheet(tmp_path, "quay", "motion", (f for f in frames), lay, encoding="raw", format="exr",
                            channels=("x", "y"), background=(0.5, -0.25))
    whole = assemble_sheet(frames, lay, clip_alpha=False, background=(0.5, -0.25))
    ref = tmp_path / "whole.exr"
    write_exr(ref, {"motion.x": whole[..., 0], "motion.y": whole[..., 1]}, pixel_type="half")
    got, want = read_exr(tmp_path / entry["file"]), read_exr(ref)
    for name in ("motion.x", "motion.y"):
        np.testing.assert_array_equal(got[name], want[name])
        np.testing.assert_array_equal(got[name], whole[..., "xy".index(name[-1])].astype(np.float16))


def test_map_sheet_takes_frames_one_at_a_time():
    # Streaming means the writer never needs a list: a generator that refuses to be
    # rewound works, and a wrong frame count is still an error naming the layout.
    frames, _ = _map_frames(2, 8, 8, 1, seed=1)
    lay = sheet_layout(3, 8, 8, columns=3)
    with pytest.raises(ValueError, match="got 2 frames, the layout has 3"):
        write_map_sheet("/nonexistent-folder", "quay", "depth", (f for f in frames), lay, encoding="linear")
