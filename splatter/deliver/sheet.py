"""Sprite sheets (flipbooks): lay frames out on a grid, write the image and its metadata.

Layout (common practice for flipbooks)
--------------------------------------
Frames fill the sheet row by row from the top-left: frame ``k`` sits in column
``k mod C`` and row ``k // C``. By default the grid is the smallest near-square
one that holds every frame (``C = ceil(sqrt(n))``, ``R = ceil(n / C)``).

* Each cell is the frame plus ``padding`` pixels on every side (or ``cell``
  pixels wide when given, padding included), and the sheet is exactly
  ``C x cell_width`` by ``R x cell_height``: an engine that plays cell ``k``
  at ``(uv + (k mod C, k // C)) / (C, R)`` (common practice) lands on cell
  boundaries. Block compression wants a cell size that is a multiple of 4
  (``256 + 2 x 2 = 260`` is; ``256 + 2 x 1 = 258`` is not).
* With ``pow2`` the grid and cells are chosen so that the sheet's width and
  height are powers of two and every cell is a whole number of pixels, which
  makes ``C`` and ``R`` powers of two. When the cell wanted (frame plus
  padding) is a power of two on an axis, frames keep their size on it
  (32 frames of 256 px, no padding: 8 x 4 cells in 2048 x 1024). Otherwise
  the cell on that axis is the power of two nearest to it (on a log scale,
  ties go up) and frames are resampled into the cell's content area with a
  Lanczos filter (Pillow, ``a = 3``), per channel on premultiplied linear
  float values; the metadata says ``"resampled": true``. Of the grids with
  the fewest cells, the one whose sheet is closest to square is taken (then
  the wider one).

Padding texels belong to their cell. In straight-alpha PNG sheets every
transparent texel (padding included) takes the colour of the nearest covered
texel (dilation), so bilinear filtering and mipmaps do not pull black into
the edges of the smoke. A gutter of ``2**k`` pixels keeps mip level ``k`` from
mixing neighbouring cells.

Metadata: ``{name}.sheet.json`` (schema version 1)
--------------------------------------------------
A JSON object with these keys::

    version       1
    image         file name of the sheet image, in the same folder
    format        "png" or "exr"
    width, height sheet size in pixels
    columns, rows grid size
    frames        number of frames (cells beyond it are empty)
    frame_width, frame_height   size of the source frames in pixels
    cell_width, cell_height     size of one cell (content plus padding)
    padding       gutter in pixels on each side of the content
    pow2          true when the sheet was sized to powers of two
    resampled     true when frames were resampled to fit their cells
    fps           playback rate, frames per second (a JSON number)
    loop          "none", "exact" (the frame after the last is frame 0) or
                  "crossfade" (the clip was blended across the seam)
    alpha         "straight" or "premultiplied"
    color         "srgb" (PNG: sRGB-encoded colour) or "linear" (EXR)
    cells         list, one per frame in order: {frame, x, y, w, h}, the
                  content rectangle in pixels, x to the right and y down from
                  the top-left of the sheet; as texture coordinates
                  u = x / width, v = y / height (top-left origin)
    maps          object, one entry per extra map sheet (may be empty):
                  {file, format, encoding, channels, ...}; all map sheets
                  share the colour sheet's layout and cells

Map entries come from :mod:`splatter.deliver.map_sheets` (``encoding`` says
how to read the stored values back, ``channels`` what each channel of the
file holds, extra keys give the constants); ``docs/sheet-metadata.md``
lists them: motion RGB (red x, green y, blue 0), depth grey, normals in the
stated ``convention``, light directions as ``lightdirs_pos`` (+x, +y, +z)
and ``lightdirs_neg`` (-x, -y, -z) with their relighting formula.
"""

from __future__ import annotations

import json
import os

import numpy as np
from PIL import Image

from splatter.core.args import check_choice, check_positive
from splatter.core.choices import (
    EXR_TYPES,
    FRAME_FORMATS,
    LOOP_MODES,
    PNG_ALPHAS,
    PNG_BITS,
)
from splatter.core.sheet_grid import Cell, SheetLayout, sheet_layout
from splatter.deliver.dilate import dilate_colour
from splatter.deliver.display import quantize, to_display
from splatter.deliver.exr import rgba_channels, write_exr
from splatter.deliver.fileio import atomic_write_text
from splatter.deliver.names import sheet_file, sheet_meta_file
from splatter.deliver.png import PngStream

__all__ = [
    "Cell",
    "SheetLayout",
    "sheet_layout",
    "assemble_sheet",
    "write_sheet",
    "CodeSheetStream",
    "TileSheetStream",
    "encode_cell",
    "cell_tile",
    "SCHEMA_VERSION",
]

SCHEMA_VERSION = 1


def _resample(frame, w, h):
    """Lanczos-resample an (H, W, C) float32 frame to (h, w, C), per channel (Pillow mode "F")."""
    out = np.empty((h, w, frame.shape[2]), dtype=np.float32)
    for c in range(frame.shape[2]):
        plane = Image.fromarray(np.ascontiguousarray(frame[..., c], dtype=np.float32))
        out[..., c] = np.asarray(plane.resize((w, h), Image.Resampling.LANCZOS))
    return out


def empty_sheet(layout, channels, *, background=None, dtype=np.float32):
    """A ``(layout.height, layout.width, channels)`` sheet of ``dtype`` filled with ``background`` (default 0)."""
    sheet = np.zeros((layout.height, layout.width, channels), dtype=dtype)
    if background is not None:
        sheet[...] = np.asarray(background, dtype=np.float32).reshape(-1)[:channels]
    return sheet


def place_frame(sheet, layout, k, frame, *, clip_alpha=True):
    """Put frame ``k`` into its cell of ``sheet``, resampled when the cell's size differs.

    Parameters
    ----------
    sheet : (layout.height, layout.width, C) float32 ndarray
        Written in place.
    layout : SheetLayout
    k : int
        Frame index (its cell).
    frame : (layout.frame_height, layout.frame_width[, C]) float ndarray
    clip_alpha : bool
        See :func:`assemble_sheet`.
    """
    f = _frame_3d(layout, k, frame)
    if f.shape[2] != sheet.shape[2]:
        raise ValueError(f"frames[{k}]: {f.shape[2]} channels, frame 0 has {sheet.shape[2]}")
    cell = layout.cells[k]
    sheet[cell.y : cell.y + cell.h, cell.x : cell.x + cell.w] = _cell_content(f, cell, clip_alpha)


def _frame_3d(layout, k, frame):
    """``frame`` as an (H, W, C) array of the layout's frame size (a 2-D frame gets one channel)."""
    f = np.asarray(frame)
    if f.ndim == 2:
        f = f[..., None]
    if f.ndim != 3 or f.shape[:2] != (layout.frame_height, layout.frame_width):
        raise ValueError(
            f"frames[{k}]: expected shape ({layout.frame_height}, {layout.frame_width}, C), got {np.shape(frame)}"
        )
    return f


def _cell_content(f, cell, clip_alpha=True):
    """``f`` ((H, W, C)) as float32 at the cell's size, Lanczos-resampled when it differs."""
    f = f.astype(np.float32, copy=False)
    if (cell.w, cell.h) != f.shape[1::-1]:
        f = _resample(f, cell.w, cell.h)
        if clip_alpha:
            np.clip(f[..., :-1], 0.0, None, out=f[..., :-1])
            np.clip(f[..., -1], 0.0, 1.0, out=f[..., -1])
    return f


def assemble_sheet(frames, layout, *, clip_alpha=True, background=None):
    """Place frames into one sheet image.

    Parameters
    ----------
    frames : iterable of (H, W, C) float ndarray
        Exactly ``layout.frames`` frames of ``layout.frame_height`` by
        ``layout.frame_width``, all with the same ``C``; premultiplied linear
        colour for images, any values for maps. Consumed one at a time: memory
        is O(sheet).
    layout : SheetLayout
    clip_alpha : bool
        After resampling, clip the last channel to [0, 1] and the others to
        >= 0 (Lanczos lobes overshoot); set False for signed data maps.
    background : sequence of float, optional
        Value of every texel outside the cells' content (gutters and unused
        cells), one per channel; default 0. Data maps use their neutral value
        (a flat normal, zero motion) so filtering across a gutter stays neutral.

    Returns
    -------
    (layout.height, layout.width, C) float32 ndarray
    """
    if not isinstance(layout, SheetLayout):
        raise TypeError(f"layout: expected a SheetLayout, got {type(layout).__name__}")
    sheet = None
    k = -1
    for k, frame in enumerate(frames):
        if k >= layout.frames:
            raise ValueError(f"frames: more than the layout's {layout.frames} frames")
        f = np.asarray(frame)
        if sheet is None:
            sheet = empty_sheet(layout, f.shape[2] if f.ndim == 3 else 1, background=background)
        place_frame(sheet, layout, k, f, clip_alpha=clip_alpha)
    if k + 1 != layout.frames:
        raise ValueError(f"frames: got {k + 1} frames, the layout has {layout.frames}")
    return sheet


def write_sheet(
    dir,
    name,
    frames_premult_linear,
    layout,
    *,
    format="png",
    alpha="straight",
    png_bits=8,
    exr_type="half",
    fps=30,
    loop="none",
    maps=None,
    exposure=0.0,
):
    """Write ``{name}.sheet.{png|exr}`` and ``{name}.sheet.json``.

    Parameters
    ----------
    dir : str or os.PathLike
        Existing output folder.
    name : str
        Base name of the files.
    frames_premult_linear : iterable of (H, W, 4) float ndarray
        Linear premultiplied RGBA frames, ``layout.frames`` of them.
    layout : SheetLayout
    format : {"png", "exr"}
        PNG: sRGB colour, 8 or 16 bits, ``alpha`` as given; straight-alpha
        sheets are dilated (every alpha-0 texel takes the nearest covered
        colour). EXR: linear premultiplied (the OpenEXR convention, so
        ``alpha`` is ignored), ``exr_type`` HALF or FLOAT.
    alpha : {"straight", "premultiplied"}
        PNG alpha association.
    png_bits : {8, 16}
    exr_type : {"half", "float"}
    fps : float
        Playback rate stored in the metadata.
    loop : {"none", "exact", "crossfade"}
        Stored in the metadata.
    maps : dict of str to dict, optional
        Map entries returned by :mod:`splatter.deliver.map_sheets` (or
        :func:`write_lightdirs_sheets`), stored under ``"maps"``.
    exposure : float
        Stops applied before display encoding (PNG only; EXR stays scene-linear).

    Returns
    -------
    list of str
        The image path and the JSON path.
    """
    check_choice(format, "format", FRAME_FORMATS)
    check_choice(alpha, "alpha", PNG_ALPHAS)
    check_choice(png_bits, "png_bits", PNG_BITS)
    check_choice(exr_type, "exr_type", EXR_TYPES)
    check_choice(loop, "loop", LOOP_MODES)
    check_positive(fps, "fps")
    if maps is not None and not isinstance(maps, dict):
        raise TypeError(f"maps: expected a dict of map entries, got {type(maps).__name__}")
    if format == "png":
        codes = CodeSheetStream(layout, png_bits, alpha=alpha)
        k = -1
        for k, frame in enumerate(frames_premult_linear):
            if k >= layout.frames:
                raise ValueError(f"frames: more than the layout's {layout.frames} frames")
            codes.put(k, encode_cell(layout, k, frame, alpha=alpha, png_bits=png_bits, exposure=exposure))
        if k + 1 != layout.frames:
            raise ValueError(f"frames: got {k + 1} frames, the layout has {layout.frames}")
        return codes.write(dir, name, fps=fps, loop=loop, maps=maps)
    return write_sheet_image(dir, name, assemble_sheet(frames_premult_linear, layout), layout, format=format,
                             alpha=alpha, png_bits=png_bits, exr_type=exr_type, fps=fps, loop=loop, maps=maps,
                             exposure=exposure)


def encode_cell(layout, k, frame, *, alpha="straight", png_bits=8, exposure=0.0):
    """The PNG codes of frame ``k``'s tile: its cell, gutter included, encoded on its own.

    Display encoding (exposure, sRGB, ``alpha``), then, for straight alpha,
    dilation within the tile, so a transparent texel takes the colour of the
    nearest covered texel of the same frame, never of a neighbouring cell,
    and mip levels up to the gutter's size stay clean (common practice).
    Memory is one tile, not one float sheet. The tile does not depend on
    where the cell lies, so a render can keep it and place it later
    (``render --resume``).

    Parameters
    ----------
    layout : SheetLayout
    k : int
    frame : (layout.frame_height, layout.frame_width, 4) float ndarray
        Linear premultiplied RGBA.
    alpha : {"straight", "premultiplied"}
    png_bits : {8, 16}
    exposure : float

    Returns
    -------
    (cell.h + 2 padding, cell.w + 2 padding, 4) uint8 or uint16 ndarray
    """
    f = np.asarray(frame)
    if f.ndim != 3 or f.shape[:2] != (layout.frame_height, layout.frame_width) or f.shape[2] != 4:
        raise ValueError(f"frames[{k}]: expected shape ({layout.frame_height}, {layout.frame_width}, 4), "
                         f"got {np.shape(frame)}")
    return _encode_tile(cell_tile(layout, k, f), alpha, png_bits, exposure)


def cell_tile(layout, k, frame, *, background=None, clip_alpha=True):
    """Frame ``k``'s tile: its cell, gutter included, as float32, as the whole sheet would hold it there.

    Parameters
    ----------
    layout : SheetLayout
    k : int
        Frame index (its cell).
    frame : (layout.frame_height, layout.frame_width, C) float ndarray
        Resampled to the cell's content size when it differs (see :func:`place_frame`).
    background : sequence of float, optional
        The gutter's value per channel (see :func:`assemble_sheet`); default 0.
    clip_alpha : bool
        See :func:`assemble_sheet`.

    Returns
    -------
    (cell.h + 2 padding, cell.w + 2 padding, C) float32 ndarray

    Examples
    --------
    >>> lay = sheet_layout(1, 2, 2, columns=1, padding=1)
    >>> cell_tile(lay, 0, np.ones((2, 2, 1)), background=[0.5])[..., 0].tolist()
    [[0.5, 0.5, 0.5, 0.5], [0.5, 1.0, 1.0, 0.5], [0.5, 1.0, 1.0, 0.5], [0.5, 0.5, 0.5, 0.5]]
    """
    f = _frame_3d(layout, k, frame)
    cell, pad = layout.cells[k], layout.padding
    tile = np.empty((cell.h + 2 * pad, cell.w + 2 * pad, f.shape[2]), dtype=np.float32)
    tile[...] = 0.0 if background is None else np.asarray(background, dtype=np.float32).reshape(-1)[: f.shape[2]]
    tile[pad : pad + cell.h, pad : pad + cell.w] = _cell_content(f, cell, clip_alpha)
    return tile


class TileSheetStream:
    """A sheet of integer codes encoded as its cells' tiles arrive, cell row by cell row.

    Cells come in frame order (the layout fills the sheet row by row), so
    once a cell row is complete its scanlines are final: they are filtered
    and compressed (:class:`splatter.deliver.png.PngStream`) and dropped.
    Memory is one cell row of 8- or 16-bit codes and the compressed bytes,
    not the whole sheet; the file is the same, byte for byte, as the whole
    sheet of codes written at once. Texels no tile covers (cells past the
    last frame, gaps beside resampled cells) hold ``fill``.

    Parameters
    ----------
    layout : SheetLayout
    channels : int
        1 to 4 (grey, grey + alpha, RGB, RGBA).
    dtype : {numpy.uint8, numpy.uint16}
    srgb : bool
        Colour chunks (colour sheets) or none (data maps).
    text : dict of str to str, optional
        ``tEXt`` chunks.
    fill : int or sequence of int
        The codes of texels outside every tile, one per channel or one for all.

    Examples
    --------
    >>> import tempfile
    >>> from splatter.deliver.png import read_png
    >>> lay = sheet_layout(3, 2, 2, columns=2)
    >>> s = TileSheetStream(lay, 1, np.uint8, srgb=False, fill=255)
    >>> for k in range(3):
    ...     s.put(k, np.full((2, 2, 1), 10 * k, np.uint8))
    >>> read_png(s.write_image(os.path.join(tempfile.mkdtemp(), "grey.png")))[0][..., 0].tolist()
    [[0, 0, 10, 10], [0, 0, 10, 10], [20, 20, 255, 255], [20, 20, 255, 255]]
    """

    def __init__(self, layout, channels, dtype, *, srgb, text=None, fill=0):
        self.layout = layout
        self._png = PngStream(layout.width, layout.height, channels, dtype, srgb=srgb, text=text)
        pad = layout.padding
        tops = [c.y - pad for c in layout.cells] + [layout.height]
        # Rows above every later cell's tile are final once cell k is in.
        self._final = [min(tops[k + 1 :]) for k in range(len(layout.cells))]
        self._fill = np.broadcast_to(np.asarray(fill, dtype=dtype).reshape(-1), (channels,)).copy()
        # One cell row: every cell of a row has the same top and height.
        self._band = np.empty((layout.cell_height, layout.width, channels), dtype=dtype)
        self._band[:] = self._fill
        self._base = 0  # sheet row of the band's first row
        self._next = 0  # the cell expected next

    def put(self, k, tile):
        """Place cell ``k``'s tile (its cell, gutter included, as codes); cells must come in order 0, 1, 2, ..."""
        if k != self._next:
            raise RuntimeError(f"sheet cells must come in order: expected cell {self._next}, got {k}")
        cell, pad = self.layout.cells[k], self.layout.padding
        if cell.y - pad != self._base or tile.shape[0] != self._band.shape[0]:
            raise RuntimeError(f"cell {k} is not in the cell row being assembled")
        self._band[:, cell.x - pad : cell.x + cell.w + pad] = tile
        self._next += 1
        self._flush(self._final[k])

    def _flush(self, upto):
        """Encode the sheet's rows up to ``upto`` (exclusive): the band, then empty cell rows."""
        n = upto - self._base
        if n <= 0:
            return
        band = self._band
        for r in range(0, n, band.shape[0]):  # rows past the band are empty cell rows below the last frame
            self._png.add_rows(band[: min(n - r, band.shape[0])])
            band[:] = self._fill
        self._base = upto

    def write_image(self, path):
        """Write the PNG once every cell is in; return ``path``."""
        if self._next != len(self.layout.cells):
            raise RuntimeError(f"the sheet has {len(self.layout.cells)} cells, {self._next} came")
        return self._png.write(path)


class CodeSheetStream(TileSheetStream):
    """The colour sheet as a :class:`TileSheetStream`: RGBA sRGB codes, written with its JSON.

    Parameters
    ----------
    layout : SheetLayout
    png_bits : {8, 16}
    alpha : {"straight", "premultiplied"}
        Recorded in the file and the metadata (the tiles are encoded by
        :func:`encode_cell` with the same ``alpha``).

    Examples
    --------
    >>> import tempfile
    >>> lay = sheet_layout(2, 4, 4, columns=2, padding=1)
    >>> s = CodeSheetStream(lay, 8)
    >>> for k in range(2):
    ...     s.put(k, encode_cell(lay, k, np.full((4, 4, 4), 0.5, np.float32)))
    >>> [os.path.basename(p) for p in s.write(tempfile.mkdtemp(), "pair")]
    ['pair.sheet.png', 'pair.sheet.json']
    """

    def __init__(self, layout, png_bits, *, alpha="straight"):
        check_choice(png_bits, "png_bits", PNG_BITS)
        check_choice(alpha, "alpha", PNG_ALPHAS)
        self.alpha = alpha
        text = {"Software": "splatter"}
        if alpha == "premultiplied":
            text["splatter.alpha"] = "premultiplied"
        super().__init__(layout, 4, np.uint8 if png_bits == 8 else np.uint16, srgb=True, text=text)

    def write(self, dir, name, *, fps=30, loop="none", maps=None):
        """Write ``{name}.sheet.png`` and ``{name}.sheet.json`` once every cell is in; return both paths."""
        dir = os.fspath(dir)
        image = sheet_file(name, "png")
        self.write_image(os.path.join(dir, image))
        return [os.path.join(dir, image),
                _write_sheet_meta(dir, name, image, "png", self.layout, fps, loop, self.alpha, "srgb", maps)]


def _encode_tile(tile, alpha, png_bits, exposure):
    """One cell's tile (content and gutter), float premultiplied linear, to PNG codes; dilated within it."""
    disp = to_display(tile, alpha=alpha, color="srgb", exposure=exposure)
    if alpha == "straight":
        disp = dilate_colour(disp)
    return quantize(disp, png_bits)


def write_sheet_image(dir, name, sheet, layout, *, format="png", alpha="straight", png_bits=8, exr_type="half",
                      fps=30, loop="none", maps=None, exposure=0.0):
    """:func:`write_sheet` from a sheet already assembled (:func:`assemble_sheet`, :func:`place_frame`).

    ``sheet`` is ``(layout.height, layout.width, 4)`` float32, linear premultiplied; it may be modified.
    """
    dir = os.fspath(dir)
    if sheet.shape[2] != 4:
        raise ValueError(f"frames_premult_linear: expected 4 channels (RGBA), got {sheet.shape[2]}")
    if format == "png":
        codes = CodeSheetStream(layout, png_bits, alpha=alpha)
        pad = layout.padding
        for k, cell in enumerate(layout.cells):
            tile = sheet[cell.y - pad : cell.y + cell.h + pad, cell.x - pad : cell.x + cell.w + pad]
            codes.put(k, _encode_tile(tile, alpha, png_bits, exposure))
        return codes.write(dir, name, fps=fps, loop=loop, maps=maps)
    image = sheet_file(name, format)
    path = os.path.join(dir, image)
    write_exr(path, rgba_channels(sheet), pixel_type=exr_type)
    return [path, _write_sheet_meta(dir, name, image, format, layout, fps, loop, "premultiplied", "linear", maps)]


def _write_sheet_meta(dir, name, image, format, layout, fps, loop, alpha, color, maps):
    meta = {"version": SCHEMA_VERSION, "image": image, "format": format}
    meta.update(layout.to_json())
    meta.update({"fps": float(fps), "loop": loop, "alpha": alpha, "color": color, "maps": dict(maps or {})})
    # Keep "cells" and "maps" last so the header reads first.
    meta["cells"] = meta.pop("cells")
    meta["maps"] = meta.pop("maps")
    json_path = os.path.join(dir, sheet_meta_file(name))
    atomic_write_text(json_path, json.dumps(meta, indent=1) + "\n")
    return json_path
